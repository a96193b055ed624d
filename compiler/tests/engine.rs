//! Engine properties that need no generated code: the parallel batch gradient equals the
//! sequential per-sample loop bit for bit, for any thread count; training lowers the cost; the
//! gradient agrees with central differences (common practice: relative error ~1e-9 in f64).

use sinew::engine::train::{train, Method, Samples, TrainOptions};
use sinew::engine::{batch, gradcheck, Net, Params};
use sinew::ir::Model;
use sinew_runtime::rng::SplitMix64;

fn model(src: &str) -> Model {
    let c = sinew::check_source(src);
    assert!(
        c.diagnostics.iter().all(|d| !d.is_error()),
        "{:?}",
        c.diagnostics
    );
    c.model.expect("spec checks")
}

/// A 64-32-10 tanh/softmax classifier: large enough that the batch gradient runs in parallel.
const WIDE: &str = "model wide\nscalar f32\ninput x 64\nlayer h 32 tanh\noutput y 10 softmax\n\
loss cross_entropy\npenalty l2 0.001\ninit glorot seed 5\n";

/// Drawn samples (inputs uniform on [-1, 1], one-hot targets), row-major.
fn drawn(model: &Model, m: usize, seed: u64) -> (Vec<f64>, Vec<f64>) {
    let mut rng = SplitMix64::new(seed);
    let (n_in, n_out) = (model.input().width, model.output().width);
    let mut xs = Vec::new();
    let mut ys = Vec::new();
    for _ in 0..m {
        xs.extend((0..n_in).map(|_| rng.uniform(-1.0, 1.0)));
        let c = (rng.next_u64() % n_out as u64) as usize;
        ys.extend((0..n_out).map(|j| if j == c { 1.0 } else { 0.0 }));
    }
    (xs, ys)
}

fn bits(p: &Params<f32>) -> Vec<u32> {
    p.layers
        .iter()
        .flat_map(|l| l.weights.iter().chain(&l.bias))
        .map(|v| v.to_bits())
        .collect()
}

#[test]
fn parallel_batch_gradient_equals_sequential_loop_bitwise() {
    let m = model(WIDE);
    let net = Net::<f32>::new(&m);
    let p = Params::<f32>::init(&m, 5);
    let (xs, ys) = drawn(&m, 300, 9);
    let xs: Vec<f32> = xs.iter().map(|&v| v as f32).collect();
    let ys: Vec<f32> = ys.iter().map(|&v| v as f32).collect();
    let mut g_seq = Params::zero_gradient(&m);
    let c_seq = batch::gradient_sequential(&net, &p, &xs, &ys, &mut g_seq)
        .expect("whole samples")
        .unwrap();
    let run = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        pool.install(|| {
            let mut g = Params::zero_gradient(&m);
            let c = batch::gradient_into(&net, &p, &xs, &ys, &mut g)
                .expect("whole samples")
                .unwrap();
            (c, g)
        })
    };
    let (c1, g1) = run(1);
    let (c2, g2) = run(2);
    assert_eq!(c_seq.to_bits(), c1.to_bits());
    assert_eq!(c1.to_bits(), c2.to_bits());
    assert_eq!(bits(&g_seq), bits(&g1));
    assert_eq!(bits(&g1), bits(&g2));
    // The parallel cost equals the plain per-sample cost too.
    assert_eq!(
        batch::cost(&net, &p, &xs, &ys)
            .expect("operands of the model's widths")
            .to_bits(),
        net.cost(&p, &xs, &ys)
            .expect("operands of the model's widths")
            .to_bits()
    );
}

/// A 5-7-3 standardized sigmoid classifier: a shape unlike [`WIDE`], for the reused buffers.
const NARROW: &str = "model narrow\nscalar f32\ninput x 5 standardize\nlayer h 7 sigmoid\n\
output y 3 softmax\nloss cross_entropy\npenalty l2 0.01\ninit glorot seed 2\n";

#[test]
fn reused_batch_buffers_give_the_sequential_bits_for_any_size_and_shape() {
    let models = [model(WIDE), model(NARROW)];
    // One scratch, built for the narrow model, then handed both shapes and batch sizes that
    // fill, underfill and overrun a block (64) and a sub-block (32).
    let mut scratch = batch::BatchScratch::<f32>::new(&models[1]);
    for (k, &(which, m_samples)) in [(0, 300), (0, 1), (1, 33), (0, 64), (1, 97), (1, 2), (0, 31)]
        .iter()
        .enumerate()
    {
        let m = &models[which];
        let net = Net::<f32>::new(m);
        let mut p = Params::<f32>::init(m, 3 + k as u64);
        if m.input().standardize {
            p.mean
                .iter_mut()
                .enumerate()
                .for_each(|(i, v)| *v = 0.1 * i as f32);
            p.std
                .iter_mut()
                .enumerate()
                .for_each(|(i, v)| *v = 0.5 + 0.25 * i as f32);
        }
        let (xs, ys) = drawn(m, m_samples, 40 + k as u64);
        let xs: Vec<f32> = xs.iter().map(|&v| v as f32).collect();
        let ys: Vec<f32> = ys.iter().map(|&v| v as f32).collect();
        let mut g_seq = Params::zero_gradient(m);
        let c_seq = batch::gradient_sequential(&net, &p, &xs, &ys, &mut g_seq)
            .expect("whole samples")
            .unwrap();
        let mut g = Params::zero_gradient(m);
        let c = batch::gradient_into_with(&net, &p, &xs, &ys, &mut g, &mut scratch)
            .expect("whole samples")
            .unwrap();
        assert_eq!(c_seq.to_bits(), c.to_bits(), "case {k}: cost");
        assert_eq!(bits(&g_seq), bits(&g), "case {k}: gradient");
    }
}

#[test]
fn empty_batch_gives_none_and_zero_gradient() {
    let m = model(WIDE);
    let net = Net::<f32>::new(&m);
    let p = Params::<f32>::init(&m, 1);
    let mut g = Params::zero_gradient(&m);
    assert!(batch::gradient_into(&net, &p, &[], &[], &mut g)
        .expect("whole samples")
        .is_none());
    assert!(bits(&g).iter().all(|&b| b == 0));
    assert_eq!(
        net.cost(&p, &[], &[])
            .expect("operands of the model's widths"),
        0.0
    );
}

#[test]
fn gradient_matches_central_differences_for_every_activation_and_penalty() {
    let specs = [
        "model a\nscalar f64\ninput x 3\nlayer h 4 sigmoid\noutput y 2 softmax\nloss cross_entropy\npenalty l2 0.1\n",
        "model b\nscalar f64\ninput x 3 standardize\nlayer h 4 tanh\nlayer k 3 leaky_relu 0.1\noutput y 2 identity\nloss squared_error\npenalty l1 0.05\n",
        "model c\nscalar f64\ninput x 2\nlayer h 5 relu\noutput y 1 sigmoid\nloss cross_entropy\npenalty none\n",
        "model d\nscalar f64\ninput x 2\nlayer h 3 sigmoid\noutput y 3 softmax\nloss squared_error\npenalty l2 0.01\n",
    ];
    for src in specs {
        let m = model(src);
        let mut p = Params::<f64>::init(&m, 3);
        if m.input().standardize {
            p.mean = vec![0.1; m.input().width];
            p.std = vec![0.7; m.input().width];
        }
        // Move every weight away from 0 so l1's kink at 0 is not straddled by the step.
        for l in &mut p.layers {
            for w in &mut l.weights {
                if w.abs() < 1e-3 {
                    *w = 0.01;
                }
            }
        }
        let (xs, ys) = drawn(&m, 6, 4);
        // One-unit outputs get alternating 0/1 targets.
        let ys: Vec<f64> = if m.output().width == 1 {
            (0..6).map(|i| (i % 2) as f64).collect()
        } else {
            ys
        };
        let opts = gradcheck::CheckOptions {
            step: 1e-5,
            rtol: 1e-7,
            atol: 1e-10,
            max_per_layer: 1000,
            seed: 1,
        };
        let checks = gradcheck::check(&m, &p, &xs, &ys, &opts).expect("whole samples");
        for c in checks {
            assert_eq!(
                c.failures,
                0,
                "{}: layer {} worst {} at {}",
                m.name(),
                c.layer,
                c.worst_relative_error,
                c.worst_at
            );
            assert_eq!(c.checked, c.total);
        }
    }
}

#[test]
fn training_lowers_the_cost_with_every_method() {
    let m = model("model gate\nscalar f64\ninput x 2\nlayer h 4 tanh\noutput y 1 sigmoid\nloss cross_entropy\ninit uniform 1.0 seed 3\ntrain sgd rate 0.5 batch 4 epochs 300\n");
    // Exclusive-or truth table (common practice as the smallest non-linearly-separable case).
    let inputs = vec![
        vec![0.0, 0.0],
        vec![0.0, 1.0],
        vec![1.0, 0.0],
        vec![1.0, 1.0],
    ];
    let targets = vec![vec![0.0], vec![1.0], vec![1.0], vec![0.0]];
    let data = Samples::<f64>::from_rows(&inputs, &targets, Some(&[0, 1, 1, 0]));
    let net = Net::<f64>::new(&m);
    let start = Params::<f64>::init(&m, 3);
    let before = net
        .cost(&start, &data.xs, &data.ys)
        .expect("operands of the model's widths");
    let methods = [
        None,
        Some(Method::GradientDescent { rate: 0.5 }),
        Some(Method::MiniBatch(sinew::ir::Optimizer::Adam {
            rate: 0.05,
            beta1: 0.9,
            beta2: 0.999,
            epsilon: 1e-8,
        })),
        Some(Method::Lbfgs { memory: 7 }),
    ];
    for method in methods {
        let mut p = start.clone();
        let opts = TrainOptions {
            method,
            epochs: Some(
                if method.is_some_and(|m| matches!(m, Method::Lbfgs { .. })) {
                    60
                } else {
                    300
                },
            ),
            ..Default::default()
        };
        let mut seen = 0;
        let s = train(&m, &mut p, &data, None, &opts, &mut |_| seen += 1).unwrap();
        let after = net
            .cost(&p, &data.xs, &data.ys)
            .expect("operands of the model's widths");
        assert!(seen > 0 && seen == s.history.len());
        assert!(
            after < before * 0.5,
            "{}: cost {before} -> {after}",
            s.method
        );
    }
}

#[test]
fn divergence_is_reported_with_its_epoch() {
    let m = model("model big\nscalar f32\ninput x 2\nlayer h 8 relu\noutput y 1 identity\nloss squared_error\ntrain sgd rate 1e30 batch 2 epochs 5\n");
    let inputs = vec![
        vec![1.0, 2.0],
        vec![3.0, -1.0],
        vec![0.5, 0.5],
        vec![-2.0, 1.0],
    ];
    let targets = vec![vec![10.0], vec![-7.0], vec![3.0], vec![1.0]];
    let data = Samples::<f32>::from_rows(&inputs, &targets, None);
    let mut p = Params::<f32>::init(&m, 1);
    let before = p.clone();
    let err = train(
        &m,
        &mut p,
        &data,
        None,
        &TrainOptions::default(),
        &mut |_| {},
    )
    .unwrap_err();
    assert!(
        matches!(
            err,
            sinew::engine::train::TrainError::Diverged { epoch: 1, .. }
        ),
        "{err:?}"
    );
    assert!(err.to_string().contains("smaller rate"));
    assert_eq!(p, before, "parameters are untouched on divergence");
}
