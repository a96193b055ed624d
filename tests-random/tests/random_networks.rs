//! Every random network of this crate (see `build.rs`), end to end:
//!
//! 1. its spec checks without errors and its generated code compiled (this test links it);
//! 2. generated code and the host engine (`sinew::engine`) agree bit for bit on predictions,
//!    per-sample losses, back-propagated and finished gradients, the batch cost, and three
//!    trainer steps (the parameters after them), in the model's own scalar type;
//! 3. the gradient passes the f64 gradient check: central differences
//!    `(J(w + h) - J(w - h)) / 2h` against backprop (common practice), through the engine in
//!    f64 on the same network (`sinew::engine::gradcheck`, every layer, up to 12 parameters
//!    each), and for `f64` networks also directly on the generated `cost` and `backprop`;
//! 4. together the networks cover every activation (hidden and output), both losses, every
//!    penalty, both scalars, standardization, both optimizers and unrolled kernels.
//!
//! Tolerance of the check: `|a - b| <= ATOL + RTOL * max(|a|, |b|)` (the combined tolerance of
//! `numpy.isclose`, common practice) with step `h = 1e-6`, `RTOL = 1e-6` and `ATOL = 1e-8`. In
//! f64 the difference quotient has a truncation error of `h^2 |J'''| / 6` and a rounding error of
//! about `1e-16 |J| / h`. Random networks can be steep: with a logit that moves ten times as
//! fast as the weight, `|J'''|` reaches about 100, so the step that balances the two is near
//! 1e-6 (at `h = 1e-5` the truncation error alone reached 1.1e-6 relative on one network);
//! there the truncation error is about 2e-11 and the rounding error below 1e-8 for a cost up
//! to 100, which `ATOL` covers. A wrong derivative misses by orders of magnitude. Data are
//! redrawn until no relu or leaky_relu pre-activation lies within 1e-3 of the kink, far more
//! than the step moves any of them, so no difference straddles one.

use sinew::engine::{self, gradcheck, Scratch};
use sinew::ir::{Activation, Loss, Model, Optimizer, Penalty, Scalar};
use sinew_harness::host::{
    backprop_gradient, bits, engine_params, flat, flat_grad, generic_params_with, model_of, rows,
    set_flat,
};
use sinew_harness::{Net, Visit};
use sinew_runtime::rng::SplitMix64;
use sinew_runtime::Real;
use std::collections::BTreeSet;

const SAMPLES: usize = 4;
const STEP: f64 = 1e-6;
const RTOL: f64 = 1e-6;
const ATOL: f64 = 1e-8;
const KINK_MARGIN: f64 = 1e-3;
/// Parameters checked per layer on the generated f64 code (the engine check takes 12).
const GENERATED_PER_LAYER: usize = 6;

/// The spec's init, then every bias and the scaling set to non-trivial values, drawn from a
/// SplitMix64 seeded with `seed ^ 0xb1a5`.
fn generic_params<M: Net>(seed: u64) -> M {
    generic_params_with(seed, &mut SplitMix64::new(seed ^ 0xb1a5))
}

/// Inputs uniform on [-2, 2]; targets a distribution (softmax + cross-entropy), in [0, 1]
/// (sigmoid + cross-entropy) or in [-1, 1] (squared error).
fn data<M: Net>(model: &Model, seed: u64) -> (Vec<M::X>, Vec<M::Y>) {
    let mut rng = SplitMix64::new(seed);
    let (mut xs, mut ys) = (Vec::new(), Vec::new());
    for _ in 0..SAMPLES {
        let mut x = M::x_zero();
        for v in x.as_mut() {
            *v = M::Scalar::from_f64(rng.uniform(-2.0, 2.0));
        }
        let mut y = M::y_zero();
        let n = y.as_ref().len();
        let raw: Vec<f64> = (0..n).map(|_| rng.uniform(0.05, 1.0)).collect();
        let total: f64 = raw.iter().sum();
        for (v, r) in y.as_mut().iter_mut().zip(&raw) {
            let t = match (model.loss(), model.output().activation) {
                (Loss::CrossEntropy, Activation::Softmax) => r / total,
                (Loss::CrossEntropy, _) => *r,
                (Loss::SquaredError, _) => 2.0 * r - 1.0,
            };
            *v = M::Scalar::from_f64(t);
        }
        xs.push(x);
        ys.push(y);
    }
    (xs, ys)
}

/// The values of the samples, one after the other, as f64.
fn concat_rows<S: Copy + Into<f64>, A: AsRef<[S]>>(v: &[A]) -> Vec<f64> {
    rows(v).concat()
}

/// The smallest `|z|` met at a relu or leaky_relu unit over the samples (f64 forward pass with
/// the runtime kernels).
fn min_kink(model: &Model, p: &engine::Params<f64>, xs: &[f64]) -> f64 {
    let mut least = f64::INFINITY;
    for x in xs.chunks_exact(model.input().width) {
        let mut a = x.to_vec();
        if model.input().standardize {
            let mut s = vec![0.0; a.len()];
            sinew_runtime::standardize(&a, &p.mean, &p.std, &mut s)
                .expect("operands of the model's widths");
            a = s;
        }
        for (l, lp) in model.layers().iter().zip(&p.layers) {
            let mut z = vec![0.0; l.width];
            sinew_runtime::affine(&lp.weights, &lp.bias, &a, &mut z)
                .expect("operands of the model's widths");
            if matches!(l.activation, Activation::Relu | Activation::LeakyRelu(_)) {
                least = z.iter().fold(least, |m, v| m.min(v.abs()));
            }
            engine::activation::<f64>(l.activation).forward(&mut z);
            a = z;
        }
    }
    least
}

#[derive(Default)]
struct Coverage {
    names: Vec<&'static str>,
    hidden: BTreeSet<&'static str>,
    output: BTreeSet<&'static str>,
    losses: BTreeSet<&'static str>,
    penalties: BTreeSet<&'static str>,
    scalars: BTreeSet<&'static str>,
    optimizers: BTreeSet<&'static str>,
    standardized: usize,
    unrolled: usize,
    classes: usize,
    widths: BTreeSet<usize>,
    engine_checked: usize,
    generated_checked: usize,
    worst: f64,
}

struct EndToEnd(Coverage);

impl Visit for EndToEnd {
    fn visit<M: Net>(&mut self) {
        let model = model_of::<M>();
        match model.scalar() {
            Scalar::F32 => bitwise::<M, f32>(&model),
            Scalar::F64 => bitwise::<M, f64>(&model),
        }
        self.gradient_check::<M>(&model);
        let c = &mut self.0;
        c.names.push(M::NAME);
        for l in model.hidden() {
            c.hidden.insert(l.activation.keyword());
        }
        c.output.insert(model.output().activation.keyword());
        c.losses.insert(model.loss().keyword());
        c.penalties.insert(match model.penalty() {
            Penalty::None => "none",
            Penalty::L2(_) => "l2",
            Penalty::L1(_) => "l1",
        });
        c.scalars.insert(model.scalar().rust_name());
        c.optimizers.insert(match model.train().optimizer {
            Optimizer::Sgd { momentum: 0.0, .. } => "sgd",
            Optimizer::Sgd { .. } => "momentum",
            Optimizer::Adam { .. } => "adam",
        });
        c.standardized += usize::from(model.input().standardize);
        c.unrolled += usize::from(M::UNROLLED);
        c.classes += usize::from(model.classes().is_some());
        c.widths.insert(model.input().width);
        c.widths.extend(model.layers().iter().map(|l| l.width));
    }
}

/// Generated code against the engine in the model's scalar `T` (which is `M::Scalar`).
fn bitwise<M: Net, T: Real + Send + Sync + Into<f64>>(model: &Model) {
    let mut p = generic_params::<M>(17);
    let ep: engine::Params<T> = engine_params(model, &mut p);
    let net = engine::Net::<T>::new(model);
    let mut s = Scratch::new(model);
    let (xs, ys) = data::<M>(model, 23);
    let mut g = M::grad_zero();
    let mut eg = engine::Params::<T>::zero_gradient(model);
    let conv = |v: &[M::Scalar]| -> Vec<T> {
        v.iter()
            .map(|&x| T::from_f64(Into::<f64>::into(x)))
            .collect()
    };
    for (x, y) in xs.iter().zip(&ys) {
        let (ex, ey) = (conv(x.as_ref()), conv(y.as_ref()));
        let mut out = vec![T::ZERO; model.output().width];
        net.predict(&ep, &ex, &mut s, &mut out)
            .expect("operands of the model's widths");
        assert_eq!(
            bits(p.forward(x).as_ref()),
            bits(&out),
            "{}: predict",
            M::NAME
        );
        assert_eq!(
            bits(&[p.sample_loss(x, y)]),
            bits(&[net
                .loss(&ep, &ex, &ey, &mut s)
                .expect("operands of the model's widths")]),
            "{}: loss",
            M::NAME
        );
        let lg = p.sample_backprop(x, y, &mut g);
        let le = net
            .backprop(&ep, &ex, &ey, &mut eg, &mut s)
            .expect("operands of the model's widths");
        assert_eq!(bits(&[lg]), bits(&[le]), "{}: backprop loss", M::NAME);
    }
    p.finish(&mut g, xs.len());
    net.finish(&mut eg, &ep, xs.len())
        .expect("operands of the model's widths");
    assert_eq!(
        bits(&flat_grad::<M>(&g)),
        bits(&eg.flat_f64()),
        "{}: gradient",
        M::NAME
    );
    let fx: Vec<T> = concat_rows(&xs).into_iter().map(T::from_f64).collect();
    let fy: Vec<T> = concat_rows(&ys).into_iter().map(T::from_f64).collect();
    assert_eq!(
        bits(&[p.batch_cost(&xs, &ys)]),
        bits(&[net
            .cost(&ep, &fx, &fy)
            .expect("operands of the model's widths")]),
        "{}: cost",
        M::NAME
    );
    let mut t = M::trainer(p);
    let mut et = engine::Trainer::new(model, ep);
    for step in 0..3 {
        let a = M::trainer_step(&mut t, &xs, &ys);
        let b = et.step(&fx, &fy).expect("operands of the model's widths");
        assert_eq!(bits(&[a]), bits(&[b]), "{}: trainer step {step}", M::NAME);
    }
    assert_eq!(
        bits(&flat(M::trainer_params(&t))),
        bits(&et.params.flat_f64()),
        "{}: parameters after 3 trainer steps",
        M::NAME
    );
}

impl EndToEnd {
    fn gradient_check<M: Net>(&mut self, model: &Model) {
        let mut p = generic_params::<M>(29);
        let ep: engine::Params<f64> = engine_params(model, &mut p);
        // Data away from the kinks, redrawn with the next seed until it is.
        let mut found = None;
        for attempt in 0..500 {
            let (xs, ys) = data::<M>(model, 1000 + attempt);
            if min_kink(model, &ep, &concat_rows(&xs)) > KINK_MARGIN {
                found = Some((xs, ys));
                break;
            }
        }
        let Some((xs, ys)) = found else {
            panic!("{}: no data away from the relu kinks", M::NAME);
        };
        let (fx, fy) = (concat_rows(&xs), concat_rows(&ys));
        let opts = gradcheck::CheckOptions {
            step: STEP,
            rtol: RTOL,
            atol: ATOL,
            max_per_layer: 12,
            seed: 31,
        };
        for layer in gradcheck::check(model, &ep, &fx, &fy, &opts).expect("whole samples") {
            assert_eq!(
                layer.failures,
                0,
                "{}: layer `{}`: {} of {} checked parameters outside the tolerance (worst at {}: \
                 absolute error {:e}, relative {:e})",
                M::NAME,
                layer.layer,
                layer.failures,
                layer.checked,
                layer.worst_at,
                layer.worst_absolute_error,
                layer.worst_relative_error
            );
            self.0.worst = self.0.worst.max(layer.worst_absolute_error);
        }
        self.0.engine_checked += 1;
        if model.scalar() == Scalar::F64 {
            generated_gradient_check(model, &mut p, &xs, &ys);
            self.0.generated_checked += 1;
        }
    }
}

/// The same check on the generated f64 code itself: its `backprop` + `finish` against central
/// differences of its `cost`, for [`GENERATED_PER_LAYER`] drawn parameters of every layer.
fn generated_gradient_check<M: Net>(model: &Model, p: &mut M, xs: &[M::X], ys: &[M::Y]) {
    let analytic = backprop_gradient(p, xs, ys);
    let w0 = flat(p);
    let mut rng = SplitMix64::new(37);
    let mut at = 0;
    for l in model.layers() {
        let n = l.parameters();
        for _ in 0..GENERATED_PER_LAYER {
            let k = at + (rng.next_u64() % n as u64) as usize;
            let mut w = w0.clone();
            w[k] = w0[k] + STEP;
            set_flat(p, &w);
            let plus: f64 = p.batch_cost(xs, ys).into();
            w[k] = w0[k] - STEP;
            set_flat(p, &w);
            let minus: f64 = p.batch_cost(xs, ys).into();
            let numeric = (plus - minus) / (2.0 * STEP);
            let a = analytic[k];
            assert!(
                (a - numeric).abs() <= ATOL + RTOL * a.abs().max(numeric.abs()),
                "{}: generated gradient of parameter {k} (layer `{}`): backprop {a:e}, central \
                 difference {numeric:e}",
                M::NAME,
                l.name
            );
        }
        at += n;
    }
    set_flat(p, &w0);
}

#[test]
fn every_random_network_matches_the_engine_and_passes_the_gradient_check() {
    let start = std::time::Instant::now();
    let mut v = EndToEnd(Coverage::default());
    sinew_tests_random::for_each_net(&mut v);
    let c = v.0;
    println!(
        "{} networks in {:.1} s: bit-identical to the engine; engine f64 gradient check on {}, \
         generated f64 gradient check on {}; largest absolute gradient error {:.2e}",
        c.names.len(),
        start.elapsed().as_secs_f64(),
        c.engine_checked,
        c.generated_checked,
        c.worst
    );
    assert_eq!(c.names.len(), sinew_tests_random::NETWORKS);
    assert!(c.names.len() >= 200, "only {} networks", c.names.len());
    assert_eq!(c.engine_checked, c.names.len());
    let all = |set: &BTreeSet<&str>, want: &[&str], what: &str| {
        for w in want {
            assert!(set.contains(w), "no {what} `{w}` among {set:?}");
        }
    };
    let hidden = ["identity", "sigmoid", "tanh", "relu", "leaky_relu"];
    all(&c.hidden, &hidden, "hidden activation");
    all(&c.output, &hidden, "output activation");
    all(&c.output, &["softmax"], "output activation");
    all(&c.losses, &["cross_entropy", "squared_error"], "loss");
    all(&c.penalties, &["none", "l2", "l1"], "penalty");
    all(&c.scalars, &["f32", "f64"], "scalar");
    all(&c.optimizers, &["sgd", "momentum", "adam"], "optimizer");
    assert!(c.generated_checked >= 50, "{}", c.generated_checked);
    assert!(c.standardized > 0 && c.unrolled > 0 && c.classes > 0);
    assert!(c.widths.contains(&1) && c.widths.contains(&64));
}
