//! Before anything is timed: the implementations compute the same thing. Probabilities agree
//! across (a), (b), (c), (d) to 1e-4 (for the conv network C1 also the batch cost, to 1e-4, and
//! the hand-written gradients, to 1e-3); generated code and engine agree bit for bit (inference,
//! per-sample gradient, batch cost and gradient), and the generated blocked batch gradient equals
//! the generated per-sample loop bit for bit.

use crate::nalg::{self, Relu, Sigmoid, StdMath, Tanh};
use crate::{generated as g, plain, Data, Shape, BATCH, C1, N1, N2, N3};
use sinew::engine::{self, batch, Scratch};

fn close(what: &str, a: &[f32], b: &[f32], tol: f32) -> Result<(), String> {
    for (i, (x, y)) in a.iter().zip(b).enumerate() {
        if !((x - y).abs() <= tol * (1.0 + x.abs())) {
            return Err(format!("{what}: element {i}: {x} vs {y}"));
        }
    }
    if a.len() != b.len() {
        return Err(format!("{what}: lengths {} and {}", a.len(), b.len()));
    }
    Ok(())
}

fn same(what: &str, a: &[f32], b: &[f32]) -> Result<(), String> {
    let bits = |v: &[f32]| v.iter().map(|x| x.to_bits()).collect::<Vec<u32>>();
    if bits(a) == bits(b) {
        Ok(())
    } else {
        Err(format!("{what}: not bit-identical"))
    }
}

fn flat(layers: &crate::Layers) -> Vec<f32> {
    layers
        .iter()
        .flat_map(|(w, b)| w.iter().chain(b).copied())
        .collect()
}

fn engine_flat(p: &engine::Params<f32>) -> Vec<f32> {
    p.layers
        .iter()
        .flat_map(|l| l.weights.iter().chain(&l.bias).copied())
        .collect()
}

/// Engine results for `layers`: (predictions of the first 8 samples, per-sample gradient of
/// the first 8 samples, batch cost, batch gradient).
fn engine_run(
    shape: Shape,
    layers: &crate::Layers,
    data: &Data,
) -> (Vec<f32>, Vec<f32>, f32, Vec<f32>) {
    let model = crate::model(shape.name);
    let net = engine::Net::<f32>::new(&model);
    let p = crate::engine_params(layers);
    let mut s = Scratch::new(&model);
    let (n_in, n_out) = (shape.inputs(), shape.outputs());
    let mut preds = Vec::new();
    let mut grad = engine::Params::zero_gradient(&model);
    for (x, y) in data
        .xs
        .chunks_exact(n_in)
        .zip(data.ys.chunks_exact(n_out))
        .take(8)
    {
        let mut out = vec![0.0; n_out];
        net.predict(&p, x, &mut s, &mut out)
            .expect("a sample of the model's width");
        preds.extend(out);
        net.backprop(&p, x, y, &mut grad, &mut s)
            .expect("a sample of the model's width");
    }
    let per_sample = engine_flat(&grad);
    let cost = batch::gradient_into(&net, &p, &data.xs, &data.ys, &mut grad)
        .expect("whole samples")
        .unwrap_or(f32::NAN);
    (preds, per_sample, cost, engine_flat(&grad))
}

macro_rules! generated_run {
    ($m:path, $seed:expr, $layers:path, $grad:path, $data:expr) => {{
        use $m as net;
        let xs: Vec<[f32; net::INPUTS]> = $data.x_rows();
        let ys: Vec<[f32; net::OUTPUTS]> = $data.y_rows();
        let mut p = Box::new(net::Params::zeroed());
        p.init_in_place($seed);
        let layers = $layers(&p);
        let mut preds = Vec::new();
        let mut grad = Box::new(net::Gradients::zeroed());
        for (x, y) in xs.iter().zip(&ys).take(8) {
            preds.extend(p.predict(x));
            p.backprop(x, y, &mut grad);
        }
        let gflat = |g: &net::Gradients, _: &crate::Layers| -> Vec<f32> { flat(&$grad(g)) };
        let per_sample = gflat(&grad, &layers);
        // The per-sample loop of `Trainer::step`, then the blocked batch API.
        grad.clear();
        let mut sum = 0.0;
        for (x, y) in xs.iter().zip(&ys) {
            sum += p.backprop(x, y, &mut grad);
        }
        grad.finish(&p, BATCH);
        let cost_loop = sum / BATCH as f32 + p.penalty_cost(BATCH);
        let grad_loop = gflat(&grad, &layers);
        let mut scratch = Box::new(net::BatchScratch::zeroed());
        let cost = p.gradient(&xs, &ys, &mut grad, &mut scratch);
        same(
            "generated blocked batch gradient vs per-sample loop",
            &gflat(&grad, &layers),
            &grad_loop,
        )?;
        same(
            "generated blocked batch cost vs per-sample loop",
            &[cost],
            &[cost_loop],
        )?;
        let batch_grad = gflat(&grad, &layers);
        (layers, preds, per_sample, cost, batch_grad)
    }};
}

/// Checks every network; the first disagreement is the error.
pub fn agree() -> Result<(), String> {
    for shape in [N1, N2, N3, C1] {
        let data = Data::new(shape, BATCH, 17);
        let (layers, preds, per_sample, cost, grad) = match shape.name {
            "n1" => generated_run!(g::bench_n1, 1, crate::n1_layers, crate::n1_grad, data),
            "n2" => generated_run!(g::bench_n2, 2, crate::n2_layers, crate::n2_grad, data),
            "c1" => generated_run!(g::bench_c1, 4, crate::c1_layers, crate::c1_grad, data),
            _ => generated_run!(g::bench_n3, 3, crate::n3_layers, crate::n3_grad, data),
        };
        let name = shape.name;
        let (e_preds, e_per_sample, e_cost, e_grad) = engine_run(shape, &layers, &data);
        same(
            &format!("{name}: generated vs engine predictions"),
            &preds,
            &e_preds,
        )?;
        same(
            &format!("{name}: generated vs engine per-sample gradient"),
            &per_sample,
            &e_per_sample,
        )?;
        same(
            &format!("{name}: generated vs engine batch cost"),
            &[cost],
            &[e_cost],
        )?;
        same(
            &format!("{name}: generated vs engine batch gradient"),
            &grad,
            &e_grad,
        )?;

        if name == "c1" {
            conv_hand_written(&layers, &data, &preds, cost, &grad)?;
            continue;
        }
        // Hand-written forms: same values up to rounding.
        let (n_in, n_out) = (shape.inputs(), shape.outputs());
        let acts: &[plain::Act] = match name {
            "n1" => &[
                plain::Act::Sigmoid,
                plain::Act::Sigmoid,
                plain::Act::Softmax,
            ],
            "n2" => &[plain::Act::Tanh, plain::Act::Softmax],
            _ => &[plain::Act::Relu, plain::Act::Relu, plain::Act::Softmax],
        };
        let pn = plain::Net::new(&layers, acts, 1e-3);
        let p_preds: Vec<f32> = data
            .xs
            .chunks_exact(n_in)
            .take(8)
            .flat_map(|x| pn.predict(x))
            .collect();
        close(
            &format!("{name}: plain vs generated predictions"),
            &p_preds,
            &preds,
            1e-4,
        )?;
        let mut pg = pn.zero_grad();
        let p_cost = pn.gradient(&data.xs, &data.ys, &mut pg);
        close(
            &format!("{name}: plain vs generated cost"),
            &[p_cost],
            &[cost],
            1e-4,
        )?;
        close(
            &format!("{name}: plain vs generated gradient"),
            &flat(&pg),
            &grad,
            1e-3,
        )?;
        let (n_preds, n_cost) = match name {
            "n1" => {
                let n = nalg::Net3::<StdMath, Sigmoid, Sigmoid, 6, 10, 8, 3>::new(&layers, 1e-3);
                let xs = nalg::vectors::<6>(&data.xs);
                let ys = nalg::vectors::<3>(&data.ys);
                let mut gr = nalg::Net3::<StdMath, Sigmoid, Sigmoid, 6, 10, 8, 3>::zero_grad();
                (
                    xs.iter()
                        .take(8)
                        .flat_map(|x| n.predict(x).iter().copied().collect::<Vec<_>>())
                        .collect::<Vec<f32>>(),
                    n.gradient(&xs, &ys, &mut gr),
                )
            }
            "n2" => {
                let n = nalg::Net2::<StdMath, Tanh, 64, 32, 10>::new(&layers, 1e-3);
                let xs = nalg::vectors::<64>(&data.xs);
                let ys = nalg::vectors::<10>(&data.ys);
                let mut gr = nalg::Net2::<StdMath, Tanh, 64, 32, 10>::zero_grad();
                (
                    xs.iter()
                        .take(8)
                        .flat_map(|x| n.predict(x).iter().copied().collect::<Vec<_>>())
                        .collect::<Vec<f32>>(),
                    n.gradient(&xs, &ys, &mut gr),
                )
            }
            _ => {
                let n = nalg::Net3::<StdMath, Relu, Relu, 784, 128, 64, 10>::new(&layers, 1e-3);
                let xs = nalg::vectors::<784>(&data.xs);
                let ys = nalg::vectors::<10>(&data.ys);
                let mut gr = nalg::Net3::<StdMath, Relu, Relu, 784, 128, 64, 10>::zero_grad();
                (
                    xs.iter()
                        .take(8)
                        .flat_map(|x| n.predict(x).iter().copied().collect::<Vec<_>>())
                        .collect::<Vec<f32>>(),
                    n.gradient(&xs, &ys, &mut gr),
                )
            }
        };
        close(
            &format!("{name}: nalgebra vs generated predictions"),
            &n_preds,
            &preds,
            1e-4,
        )?;
        close(
            &format!("{name}: nalgebra vs generated cost"),
            &[n_cost],
            &[cost],
            1e-4,
        )?;
        let _ = n_out;
    }
    Ok(())
}

/// C1's hand-written forms against the generated code: probabilities of the first 8 samples
/// and the batch cost within 1e-4, the batch gradient within 1e-3 (relative to 1 + |value|).
fn conv_hand_written(
    layers: &crate::Layers,
    data: &Data,
    preds: &[f32],
    cost: f32,
    grad: &[f32],
) -> Result<(), String> {
    use crate::conv_plain::{IN, O};
    let pn = crate::c1_plain(layers);
    let p_preds: Vec<f32> = data
        .xs
        .chunks_exact(IN)
        .take(8)
        .flat_map(|x| pn.predict(x))
        .collect();
    close("c1: plain vs generated predictions", &p_preds, preds, 1e-4)?;
    let mut pg = Box::new(crate::conv_plain::Net::zeroed());
    let p_cost = pn.gradient(&data.xs, &data.ys, 1e-3, &mut pg);
    close("c1: plain vs generated cost", &[p_cost], &[cost], 1e-4)?;
    close(
        "c1: plain vs generated gradient",
        &flat(&crate::c1_plain_grad(&pg)),
        grad,
        1e-3,
    )?;
    let nn = crate::c1_nalg(layers);
    let n_preds: Vec<f32> = data
        .xs
        .chunks_exact(IN)
        .take(8)
        .flat_map(|x| nn.predict(x).iter().copied().collect::<Vec<_>>())
        .collect();
    close(
        "c1: nalgebra vs generated predictions",
        &n_preds,
        preds,
        1e-4,
    )?;
    let ys = nalg::vectors::<O>(&data.ys);
    let mut ng = Box::new(crate::conv_nalg::Net::zeroed());
    let n_cost = nn.gradient(&data.xs, &ys, 1e-3, &mut ng);
    close("c1: nalgebra vs generated cost", &[n_cost], &[cost], 1e-4)?;
    close(
        "c1: nalgebra vs generated gradient",
        &flat(&crate::c1_nalg_grad(&ng)),
        grad,
        1e-3,
    )?;
    Ok(())
}
