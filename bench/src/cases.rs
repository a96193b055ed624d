//! Every benchmark case as a closure that runs its operation a given number of times: the
//! criterion benches time these closures and the instruction-count driver runs them under
//! callgrind, so both measure exactly the same code.
//!
//! Inference and per-sample backprop walk through the [`BATCH`] samples in turn (so branch
//! predictors see real data, not one repeated input); the batch gradient computes the cost J and
//! the finished gradient of all [`BATCH`] samples per call.

use crate::nalg::{self, LibmMath, Relu, Sigmoid, StdMath, Tanh};
use crate::{generated as g, plain, unrolled as u, Data, Shape, BATCH, C1, N1, N2, N3};
use sinew::engine::{self, batch, Scratch};
use std::hint::black_box;

/// What a case measures.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Op {
    /// One sample's inference.
    Inference,
    /// One sample's forward and backward pass, accumulated into a gradient.
    Backprop,
    /// Cost and finished gradient over [`BATCH`] samples.
    Batch,
}

impl Op {
    /// `inference`, `backprop`, `batch`.
    pub fn name(self) -> &'static str {
        match self {
            Op::Inference => "inference",
            Op::Backprop => "backprop",
            Op::Batch => "batch",
        }
    }

    /// All three.
    pub const ALL: [Op; 3] = [Op::Inference, Op::Backprop, Op::Batch];

    /// Samples per call.
    pub fn samples(self) -> usize {
        match self {
            Op::Batch => BATCH,
            _ => 1,
        }
    }

    /// Multiply-adds per call.
    pub fn macs(self, shape: Shape) -> usize {
        match self {
            Op::Inference => shape.macs_inference(),
            Op::Backprop => shape.macs_backprop(),
            Op::Batch => shape.macs_backprop() * BATCH,
        }
    }
}

/// Implementations, in table order: (id, description).
pub const IMPLS: [(&str, &str); 7] = [
    ("generated", "(a) sinew generated code"),
    ("generated_unrolled", "(a') generated, kernels unrolled"),
    ("generated_loop", "(a'') generated, per-sample loop"),
    ("nalgebra", "(b) nalgebra SMatrix, std math"),
    ("nalgebra_libm", "(b') nalgebra SMatrix, libm math"),
    ("plain", "(c) plain Vec<f32> loops"),
    ("engine", "(d) sinew engine"),
];

/// The table's description of implementation `imp` on network `net`: C1's hand-written forms
/// differ from the dense networks' (im2col, arrays, libm's `expf` for the four softmax terms).
pub fn describe(net: Shape, imp: &str) -> &'static str {
    match (net.name, imp) {
        ("c1", "nalgebra") => "(b) nalgebra SMatrix, im2col",
        ("c1", "plain") => "(c) plain loops over arrays",
        _ => IMPLS
            .iter()
            .find(|(i, _)| *i == imp)
            .map_or("?", |(_, d)| d),
    }
}

/// One benchmark case.
pub struct Case {
    /// `n1`, `n2`, `n3`.
    pub net: Shape,
    /// The operation.
    pub op: Op,
    /// The implementation id (see [`IMPLS`]).
    pub imp: &'static str,
    /// Runs the operation `iters` times.
    pub run: Box<dyn FnMut(u64)>,
}

impl Case {
    /// `n1/inference/generated`.
    pub fn id(&self) -> String {
        format!("{}/{}/{}", self.net.name, self.op.name(), self.imp)
    }
}

fn case(net: Shape, op: Op, imp: &'static str, run: impl FnMut(u64) + 'static) -> Case {
    Case {
        net,
        op,
        imp,
        run: Box::new(run),
    }
}

/// The generated module's three cases (and the per-sample loop form of the batch).
macro_rules! generated_cases {
    ($v:ident, $shape:expr, $m:path, $imp:literal, $seed:expr, $loop_only:expr) => {{
        use $m as net;
        let data = Data::new($shape, BATCH, 17);
        let xs: Vec<[f32; net::INPUTS]> = data.x_rows();
        let ys: Vec<[f32; net::OUTPUTS]> = data.y_rows();
        let mut p = Box::new(net::Params::zeroed());
        p.init_in_place($seed);
        let p: &'static net::Params = Box::leak(p);
        let (xs, ys) = (
            &*Box::leak(xs.into_boxed_slice()),
            &*Box::leak(ys.into_boxed_slice()),
        );
        $v.push(case($shape, Op::Inference, $imp, move |iters| {
            let mut out = [0.0; net::OUTPUTS];
            for k in 0..iters as usize {
                p.predict_into(black_box(&xs[k % BATCH]), &mut out);
                black_box(&out);
            }
        }));
        $v.push(case($shape, Op::Backprop, $imp, move |iters| {
            let mut grad = Box::new(net::Gradients::zeroed());
            for k in 0..iters as usize {
                let l = p.backprop(black_box(&xs[k % BATCH]), &ys[k % BATCH], &mut grad);
                black_box(l);
            }
            black_box(&grad);
        }));
        let loop_imp = if $loop_only { $imp } else { "generated_loop" };
        $v.push(case($shape, Op::Batch, loop_imp, move |iters| {
            let mut grad = Box::new(net::Gradients::zeroed());
            for _ in 0..iters {
                grad.clear();
                let mut sum = 0.0;
                for (x, y) in black_box(xs).iter().zip(ys) {
                    sum += p.backprop(x, y, &mut grad);
                }
                grad.finish(p, BATCH);
                let cost = sum / BATCH as f32 + p.penalty_cost(BATCH);
                black_box((cost, &grad));
            }
        }));
        if !$loop_only {
            $v.push(case($shape, Op::Batch, $imp, move |iters| {
                let mut grad = Box::new(net::Gradients::zeroed());
                let mut scratch = Box::new(net::BatchScratch::zeroed());
                for _ in 0..iters {
                    let cost = p.gradient(black_box(xs), ys, &mut grad, &mut scratch);
                    black_box((cost, &grad));
                }
            }));
        }
        p
    }};
}

fn nalgebra3<M, A1, A2, const I: usize, const H1: usize, const H2: usize, const O: usize>(
    v: &mut Vec<Case>,
    shape: Shape,
    imp: &'static str,
    layers: &crate::Layers,
) where
    M: nalg::Math + 'static,
    A1: nalg::Act + 'static,
    A2: nalg::Act + 'static,
{
    let data = Data::new(shape, BATCH, 17);
    let net: &'static nalg::Net3<M, A1, A2, I, H1, H2, O> =
        Box::leak(Box::new(nalg::Net3::new(layers, 1e-3)));
    let xs: &'static [_] = Box::leak(nalg::vectors::<I>(&data.xs).into_boxed_slice());
    let ys: &'static [_] = Box::leak(nalg::vectors::<O>(&data.ys).into_boxed_slice());
    v.push(case(shape, Op::Inference, imp, move |iters| {
        for k in 0..iters as usize {
            black_box(net.predict(black_box(&xs[k % BATCH])));
        }
    }));
    v.push(case(shape, Op::Backprop, imp, move |iters| {
        let mut grad = nalg::Net3::<M, A1, A2, I, H1, H2, O>::zero_grad();
        for k in 0..iters as usize {
            black_box(net.backprop(black_box(&xs[k % BATCH]), &ys[k % BATCH], &mut grad));
        }
        black_box(&grad);
    }));
    v.push(case(shape, Op::Batch, imp, move |iters| {
        let mut grad = nalg::Net3::<M, A1, A2, I, H1, H2, O>::zero_grad();
        for _ in 0..iters {
            black_box(net.gradient(black_box(xs), ys, &mut grad));
        }
        black_box(&grad);
    }));
}

fn nalgebra2<M, A1, const I: usize, const H1: usize, const O: usize>(
    v: &mut Vec<Case>,
    shape: Shape,
    imp: &'static str,
    layers: &crate::Layers,
) where
    M: nalg::Math + 'static,
    A1: nalg::Act + 'static,
{
    let data = Data::new(shape, BATCH, 17);
    let net: &'static nalg::Net2<M, A1, I, H1, O> =
        Box::leak(Box::new(nalg::Net2::new(layers, 1e-3)));
    let xs: &'static [_] = Box::leak(nalg::vectors::<I>(&data.xs).into_boxed_slice());
    let ys: &'static [_] = Box::leak(nalg::vectors::<O>(&data.ys).into_boxed_slice());
    v.push(case(shape, Op::Inference, imp, move |iters| {
        for k in 0..iters as usize {
            black_box(net.predict(black_box(&xs[k % BATCH])));
        }
    }));
    v.push(case(shape, Op::Backprop, imp, move |iters| {
        let mut grad = nalg::Net2::<M, A1, I, H1, O>::zero_grad();
        for k in 0..iters as usize {
            black_box(net.backprop(black_box(&xs[k % BATCH]), &ys[k % BATCH], &mut grad));
        }
        black_box(&grad);
    }));
    v.push(case(shape, Op::Batch, imp, move |iters| {
        let mut grad = nalg::Net2::<M, A1, I, H1, O>::zero_grad();
        for _ in 0..iters {
            black_box(net.gradient(black_box(xs), ys, &mut grad));
        }
        black_box(&grad);
    }));
}

fn plain_cases(v: &mut Vec<Case>, shape: Shape, layers: &crate::Layers, acts: &[plain::Act]) {
    let data: &'static Data = Box::leak(Box::new(Data::new(shape, BATCH, 17)));
    let net: &'static plain::Net = Box::leak(Box::new(plain::Net::new(layers, acts, 1e-3)));
    let (n_in, n_out) = (shape.inputs(), shape.outputs());
    v.push(case(shape, Op::Inference, "plain", move |iters| {
        for k in 0..iters as usize {
            let s = k % BATCH;
            black_box(net.predict(black_box(&data.xs[s * n_in..(s + 1) * n_in])));
        }
    }));
    v.push(case(shape, Op::Backprop, "plain", move |iters| {
        let mut grad = net.zero_grad();
        for k in 0..iters as usize {
            let s = k % BATCH;
            let (x, y) = (
                &data.xs[s * n_in..(s + 1) * n_in],
                &data.ys[s * n_out..(s + 1) * n_out],
            );
            black_box(net.backprop(black_box(x), y, &mut grad));
        }
        black_box(&grad);
    }));
    v.push(case(shape, Op::Batch, "plain", move |iters| {
        let mut grad = net.zero_grad();
        for _ in 0..iters {
            black_box(net.gradient(black_box(&data.xs), &data.ys, &mut grad));
        }
        black_box(&grad);
    }));
}

fn engine_cases(v: &mut Vec<Case>, shape: Shape, layers: &crate::Layers) {
    let model: &'static sinew::ir::Model = Box::leak(Box::new(crate::model(shape.name)));
    let net: &'static engine::Net<'static, f32> = Box::leak(Box::new(engine::Net::new(model)));
    let p: &'static engine::Params<f32> = Box::leak(Box::new(crate::engine_params(layers)));
    let data: &'static Data = Box::leak(Box::new(Data::new(shape, BATCH, 17)));
    let (n_in, n_out) = (shape.inputs(), shape.outputs());
    v.push(case(shape, Op::Inference, "engine", move |iters| {
        let mut s = Scratch::new(model);
        let mut out = vec![0.0; n_out];
        for k in 0..iters as usize {
            let i = k % BATCH;
            net.predict(
                p,
                black_box(&data.xs[i * n_in..(i + 1) * n_in]),
                &mut s,
                &mut out,
            )
            .expect("operands of the model's widths");
            black_box(&out);
        }
    }));
    v.push(case(shape, Op::Backprop, "engine", move |iters| {
        let mut s = Scratch::new(model);
        let mut grad = engine::Params::zero_gradient(model);
        for k in 0..iters as usize {
            let i = k % BATCH;
            let (x, y) = (
                &data.xs[i * n_in..(i + 1) * n_in],
                &data.ys[i * n_out..(i + 1) * n_out],
            );
            black_box(
                net.backprop(p, black_box(x), y, &mut grad, &mut s)
                    .expect("operands of the model's widths"),
            );
        }
        black_box(&grad);
    }));
    v.push(case(shape, Op::Batch, "engine", move |iters| {
        // A user training on the workstation holds the batch buffers across steps.
        let mut grad = engine::Params::zero_gradient(model);
        let mut scratch = batch::BatchScratch::new(model);
        for _ in 0..iters {
            black_box(
                batch::gradient_into_with(
                    net,
                    p,
                    black_box(&data.xs),
                    &data.ys,
                    &mut grad,
                    &mut scratch,
                )
                .expect("whole samples"),
            );
        }
        black_box(&grad);
    }));
}

/// C1's hand-written cases: (b) nalgebra im2col and (c) plain loops over arrays.
fn conv_cases(v: &mut Vec<Case>, layers: &crate::Layers) {
    use crate::conv_plain::{IN, O};
    let data: &'static Data = Box::leak(Box::new(Data::new(C1, BATCH, 17)));
    let nn: &'static crate::conv_nalg::Net = Box::leak(Box::new(crate::c1_nalg(layers)));
    let ys: &'static [_] = Box::leak(nalg::vectors::<O>(&data.ys).into_boxed_slice());
    v.push(case(C1, Op::Inference, "nalgebra", move |iters| {
        for k in 0..iters as usize {
            let s = k % BATCH;
            black_box(nn.predict(black_box(&data.xs[s * IN..(s + 1) * IN])));
        }
    }));
    v.push(case(C1, Op::Backprop, "nalgebra", move |iters| {
        let mut grad = Box::new(crate::conv_nalg::Net::zeroed());
        for k in 0..iters as usize {
            let s = k % BATCH;
            black_box(nn.backprop(black_box(&data.xs[s * IN..(s + 1) * IN]), &ys[s], &mut grad));
        }
        black_box(&grad);
    }));
    v.push(case(C1, Op::Batch, "nalgebra", move |iters| {
        let mut grad = Box::new(crate::conv_nalg::Net::zeroed());
        for _ in 0..iters {
            black_box(nn.gradient(black_box(&data.xs), ys, 1e-3, &mut grad));
        }
        black_box(&grad);
    }));
    let pn: &'static crate::conv_plain::Net = Box::leak(Box::new(crate::c1_plain(layers)));
    v.push(case(C1, Op::Inference, "plain", move |iters| {
        for k in 0..iters as usize {
            let s = k % BATCH;
            black_box(pn.predict(black_box(&data.xs[s * IN..(s + 1) * IN])));
        }
    }));
    v.push(case(C1, Op::Backprop, "plain", move |iters| {
        let mut grad = Box::new(crate::conv_plain::Net::zeroed());
        for k in 0..iters as usize {
            let s = k % BATCH;
            let (x, y) = (&data.xs[s * IN..(s + 1) * IN], &data.ys[s * O..(s + 1) * O]);
            black_box(pn.backprop(black_box(x), y, &mut grad));
        }
        black_box(&grad);
    }));
    v.push(case(C1, Op::Batch, "plain", move |iters| {
        let mut grad = Box::new(crate::conv_plain::Net::zeroed());
        for _ in 0..iters {
            black_box(pn.gradient(black_box(&data.xs), &data.ys, 1e-3, &mut grad));
        }
        black_box(&grad);
    }));
}

/// Every case, in table order. The engine runs on the calling thread: call
/// [`single_thread`] first so that its batch gradient uses one core like every other form.
pub fn all() -> Vec<Case> {
    let mut v = Vec::new();

    let p1 = generated_cases!(v, N1, g::bench_n1, "generated", 1, false);
    generated_cases!(v, N1, u::bench_n1, "generated_unrolled", 1, true);
    let l1 = crate::n1_layers(p1);
    nalgebra3::<StdMath, Sigmoid, Sigmoid, 6, 10, 8, 3>(&mut v, N1, "nalgebra", &l1);
    nalgebra3::<LibmMath, Sigmoid, Sigmoid, 6, 10, 8, 3>(&mut v, N1, "nalgebra_libm", &l1);
    plain_cases(
        &mut v,
        N1,
        &l1,
        &[
            plain::Act::Sigmoid,
            plain::Act::Sigmoid,
            plain::Act::Softmax,
        ],
    );
    engine_cases(&mut v, N1, &l1);

    let p2 = generated_cases!(v, N2, g::bench_n2, "generated", 2, false);
    generated_cases!(v, N2, u::bench_n2, "generated_unrolled", 2, true);
    let l2 = crate::n2_layers(p2);
    nalgebra2::<StdMath, Tanh, 64, 32, 10>(&mut v, N2, "nalgebra", &l2);
    nalgebra2::<LibmMath, Tanh, 64, 32, 10>(&mut v, N2, "nalgebra_libm", &l2);
    plain_cases(&mut v, N2, &l2, &[plain::Act::Tanh, plain::Act::Softmax]);
    engine_cases(&mut v, N2, &l2);

    let p3 = generated_cases!(v, N3, g::bench_n3, "generated", 3, false);
    let l3 = crate::n3_layers(p3);
    nalgebra3::<StdMath, Relu, Relu, 784, 128, 64, 10>(&mut v, N3, "nalgebra", &l3);
    nalgebra3::<LibmMath, Relu, Relu, 784, 128, 64, 10>(&mut v, N3, "nalgebra_libm", &l3);
    plain_cases(
        &mut v,
        N3,
        &l3,
        &[plain::Act::Relu, plain::Act::Relu, plain::Act::Softmax],
    );
    engine_cases(&mut v, N3, &l3);

    let p4 = generated_cases!(v, C1, g::bench_c1, "generated", 4, false);
    let l4 = crate::c1_layers(p4);
    conv_cases(&mut v, &l4);
    engine_cases(&mut v, C1, &l4);
    v
}

/// Makes rayon's global pool single-threaded (once; later calls do nothing).
pub fn single_thread() {
    let _ = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build_global();
}
