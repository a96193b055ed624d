//! Helpers of the integration tests of both test crates, over any [`Net`]: the IR of a
//! generated model, its values as `f64` in model order (the order of [`Net::arrays`]), parameters
//! at a generic point, test data, the generated gradient of a batch, the engine's parameters
//! holding the same values, and an independent forward pass generic over `num_dual` numbers
//! (written from the IR and the formulas of DESIGN.md, not from the emitter or the runtime).

use crate::Net;
use num_dual::{Dual64, DualNum};
use sinew::engine;
use sinew::ir::{Activation, LayerKind, Loss, Model, Penalty, PoolOp, Scalar};
use sinew::weights::{FlatLayer, Standardization};
use sinew_runtime::rng::SplitMix64;
use sinew_runtime::Real;
use std::vec::Vec;

/// The checked IR of model `M`, from its spec text.
pub fn model_of<M: Net>() -> Model {
    let checked = sinew::check_source(M::SPEC);
    match checked.model {
        Some(m) => m,
        None => panic!(
            "{}: spec does not check: {:?}",
            M::NAME,
            checked.diagnostics
        ),
    }
}

/// True when `M` computes in f64.
pub fn is_f64<M: Net>() -> bool {
    model_of::<M>().scalar() == Scalar::F64
}

/// Every trainable value in model order (see [`Net::arrays`]), as f64.
pub fn flat<M: Net>(p: &M) -> Vec<f64> {
    let mut v = Vec::new();
    p.arrays(&mut |a| v.extend(a.iter().map(|&x| x.into())));
    v
}

/// Sets every trainable value from `values` (model order).
pub fn set_flat<M: Net>(p: &mut M, values: &[f64]) {
    let mut it = values.iter();
    p.arrays_mut(&mut |a| {
        for x in a.iter_mut() {
            *x = M::Scalar::from_f64(*it.next().expect("enough values"));
        }
    });
    assert!(it.next().is_none(), "too many values");
}

/// Every gradient value in model order, as f64.
pub fn flat_grad<M: Net>(g: &M::Gradients) -> Vec<f64> {
    let mut v = Vec::new();
    M::grad_arrays(g, &mut |a| v.extend(a.iter().map(|&x| x.into())));
    v
}

/// Input mean and std as f64 (empty without `standardize`).
pub fn scaling<M: Net>(p: &mut M) -> (Vec<f64>, Vec<f64>) {
    let (mut mean, mut std) = (Vec::new(), Vec::new());
    p.scaling_mut(&mut |m, s| {
        mean.extend(m.iter().map(|&x| x.into()));
        std.extend(s.iter().map(|&x| x.into()));
    });
    (mean, std)
}

/// Parameters at a generic point: [`generic_params_with`] drawing from SplitMix64 seeded with
/// `seed ^ 0x5eed`.
pub fn generic_params<M: Net>(seed: u64) -> M {
    generic_params_with(seed, &mut SplitMix64::new(seed ^ 0x5eed))
}

/// Parameters at a generic point: the spec's init with `seed`, then every bias (uniform on
/// [-0.5, 0.5]) and, with `standardize`, the mean (uniform on [-1, 1]) and std (uniform on
/// [0.5, 2]) drawn from `rng` in model order, so no term is tested at zero.
pub fn generic_params_with<M: Net>(seed: u64, rng: &mut SplitMix64) -> M {
    let mut p = M::seeded(seed);
    let mut k = 0;
    p.arrays_mut(&mut |a| {
        if k % 2 == 1 {
            for b in a.iter_mut() {
                *b = M::Scalar::from_f64(rng.uniform(-0.5, 0.5));
            }
        }
        k += 1;
    });
    p.scaling_mut(&mut |mean, std| {
        for m in mean.iter_mut() {
            *m = M::Scalar::from_f64(rng.uniform(-1.0, 1.0));
        }
        for s in std.iter_mut() {
            *s = M::Scalar::from_f64(rng.uniform(0.5, 2.0));
        }
    });
    p
}

/// `m` samples of invented data that suit the model's loss: inputs uniform on [-2, 2]; targets
/// a probability distribution (softmax + cross-entropy), values in [0, 1] (sigmoid +
/// cross-entropy, or a bounded output under squared error), or values in [-1, 1].
pub fn data<M: Net>(model: &Model, m: usize, seed: u64) -> (Vec<M::X>, Vec<M::Y>) {
    let mut rng = SplitMix64::new(seed);
    let out = model.output().activation;
    let mut xs = Vec::new();
    let mut ys = Vec::new();
    for _ in 0..m {
        let mut x = M::x_zero();
        for v in x.as_mut() {
            *v = M::Scalar::from_f64(rng.uniform(-2.0, 2.0));
        }
        let mut y = M::y_zero();
        match (model.loss(), out) {
            (Loss::CrossEntropy, Activation::Softmax) => {
                let raw: Vec<f64> = y.as_ref().iter().map(|_| rng.uniform(0.05, 1.0)).collect();
                let total: f64 = raw.iter().sum();
                for (v, r) in y.as_mut().iter_mut().zip(&raw) {
                    *v = M::Scalar::from_f64(r / total);
                }
            }
            (_, Activation::Sigmoid | Activation::Softmax) => {
                for v in y.as_mut() {
                    *v = M::Scalar::from_f64(rng.uniform(0.0, 1.0));
                }
            }
            _ => {
                for v in y.as_mut() {
                    *v = M::Scalar::from_f64(rng.uniform(-1.0, 1.0));
                }
            }
        }
        xs.push(x);
        ys.push(y);
    }
    (xs, ys)
}

/// The bits of each value as `f64` (an `f32` widens exactly), for bit-for-bit comparisons.
pub fn bits<S: Copy + Into<f64>>(v: &[S]) -> Vec<u64> {
    v.iter().map(|&s| s.into().to_bits()).collect()
}

/// Converts samples to f64 vectors.
pub fn rows<S: Copy + Into<f64>, A: AsRef<[S]>>(v: &[A]) -> Vec<Vec<f64>> {
    v.iter()
        .map(|a| a.as_ref().iter().map(|&s| s.into()).collect())
        .collect()
}

/// `values` as forward-mode dual numbers that differentiate with respect to entry `k`: entry `k`
/// is `values[k] + 1 eps`, every other entry a constant (`eps` part 0). Through
/// [`reference_cost`], the `eps` part of J is then the exact `dJ/dvalues[k]`.
pub fn dual_seeded(values: &[f64], k: usize) -> Vec<Dual64> {
    values
        .iter()
        .enumerate()
        .map(|(i, &v)| {
            if i == k {
                Dual64::new(v, 1.0)
            } else {
                Dual64::from_re(v)
            }
        })
        .collect()
}

/// The cost J written directly from DESIGN.md over any `num_dual` number type:
/// `a1 = (x - mean) / std`; `z = W a + b`; `a = g(z)`; per-sample loss (cross-entropy
/// `-sum y ln a` for softmax, `-sum [y ln a + (1-y) ln(1-a)]` for sigmoid, `1/2 sum (a-y)^2`);
/// `J = (1/m) sum loss + (lambda/2m) sum W^2` (L2) or `+ (lambda/m) sum |W|` (L1).
///
/// `params` holds every trainable value in model order (weights row-major, then biases, per
/// layer). Also returns the smallest `|z|` met at a relu or leaky_relu unit, so callers can
/// keep away from the kink.
pub fn reference_cost<D: DualNum<f64> + Copy>(
    model: &Model,
    params: &[D],
    mean: &[f64],
    std: &[f64],
    xs: &[Vec<f64>],
    ys: &[Vec<f64>],
) -> (D, f64) {
    let m = xs.len() as f64;
    let mut min_kink = f64::INFINITY;
    let mut total = D::from(0.0);
    for (x, y) in xs.iter().zip(ys) {
        let mut a: Vec<D> = x
            .iter()
            .enumerate()
            .map(|(i, &v)| {
                if model.input().standardize {
                    D::from((v - mean[i]) / std[i])
                } else {
                    D::from(v)
                }
            })
            .collect();
        let mut offset = 0;
        for layer in model.layers() {
            let n = layer.fan_in;
            let w = &params[offset..offset + layer.width * n];
            let b = &params[offset + layer.width * n..offset + layer.parameters()];
            offset += layer.parameters();
            let mut z: Vec<D> = match layer.kind {
                LayerKind::Dense => (0..layer.width)
                    .map(|j| {
                        let mut s = b[j];
                        for i in 0..n {
                            s += w[j * n + i] * a[i];
                        }
                        s
                    })
                    .collect(),
                kind => {
                    let (z, gap) = windowed(kind, w, b, &a);
                    min_kink = min_kink.min(gap);
                    z
                }
            };
            if matches!(
                layer.activation,
                Activation::Relu | Activation::LeakyRelu(_)
            ) {
                for zj in &z {
                    min_kink = min_kink.min(zj.re().abs());
                }
            }
            match layer.activation {
                Activation::Identity => {}
                Activation::Sigmoid => {
                    for zj in z.iter_mut() {
                        *zj = (D::from(1.0) + (-*zj).exp()).recip();
                    }
                }
                Activation::Tanh => {
                    for zj in z.iter_mut() {
                        *zj = zj.tanh();
                    }
                }
                Activation::Relu => {
                    for zj in z.iter_mut() {
                        if zj.re() <= 0.0 {
                            *zj = D::from(0.0);
                        }
                    }
                }
                Activation::LeakyRelu(alpha) => {
                    for zj in z.iter_mut() {
                        if zj.re() <= 0.0 {
                            *zj *= alpha;
                        }
                    }
                }
                Activation::Softmax => {
                    let mx = z.iter().map(|v| v.re()).fold(f64::NEG_INFINITY, f64::max);
                    let e: Vec<D> = z.iter().map(|v| (*v - mx).exp()).collect();
                    let sum = e.iter().fold(D::from(0.0), |s, v| s + *v);
                    z = e.into_iter().map(|v| v / sum).collect();
                }
            }
            a = z;
        }
        let loss = match (model.loss(), model.output().activation) {
            (Loss::CrossEntropy, Activation::Softmax) => a
                .iter()
                .zip(y)
                .fold(D::from(0.0), |s, (aj, &yj)| s - aj.ln() * yj),
            (Loss::CrossEntropy, _) => a.iter().zip(y).fold(D::from(0.0), |s, (aj, &yj)| {
                s - (aj.ln() * yj + (D::from(1.0) - *aj).ln() * (1.0 - yj))
            }),
            (Loss::SquaredError, _) => {
                a.iter()
                    .zip(y)
                    .fold(D::from(0.0), |s, (aj, &yj)| s + (*aj - yj) * (*aj - yj))
                    * 0.5
            }
        };
        total += loss;
    }
    let mut weights_sum = D::from(0.0);
    let mut offset = 0;
    for layer in model.layers() {
        for w in &params[offset..offset + layer.width * layer.fan_in] {
            weights_sum += match model.penalty() {
                Penalty::None => D::from(0.0),
                Penalty::L2(_) => *w * *w,
                Penalty::L1(_) => w.abs(),
            };
        }
        offset += layer.parameters();
    }
    let penalty = match model.penalty() {
        Penalty::None => D::from(0.0),
        Penalty::L2(l) => weights_sum * (l / (2.0 * m)),
        Penalty::L1(l) => weights_sum * (l / m),
    };
    (total / m + penalty, min_kink)
}

/// A sliding-window layer written from its formulas (the reference's "Shapes" section), with
/// the zero padding made explicit by index arithmetic: output position `(oy, ox)` reads input
/// `(oy s + ky - pad_top, ox s + kx - pad_left)` when that lies inside the map, and zero
/// otherwise. Maps are `[rows][cols][channels]`, channel fastest; conv weights `[F][KH][KW][C]`,
/// depthwise `[C][KH][KW]`. Also returns, for max pooling, the smallest gap between a window's
/// largest and second-largest value (a tie is where the maximum is not differentiable).
fn windowed<D: DualNum<f64> + Copy>(kind: LayerKind, w: &[D], b: &[D], a: &[D]) -> (Vec<D>, f64) {
    let g = *kind.window().expect("a sliding-window layer");
    let at = |oy: usize, ox: usize, ky: usize, kx: usize| -> Option<usize> {
        let iy = (oy * g.stride_rows + ky) as i64 - g.pad_top as i64;
        let ix = (ox * g.stride_cols + kx) as i64 - g.pad_left as i64;
        (iy >= 0 && ix >= 0 && (iy as usize) < g.rows && (ix as usize) < g.cols)
            .then(|| iy as usize * g.cols + ix as usize)
    };
    let c_n = g.channels;
    let mut out = Vec::new();
    let mut gap = f64::INFINITY;
    for oy in 0..g.out_rows {
        for ox in 0..g.out_cols {
            match kind {
                LayerKind::Conv { .. } => {
                    for (f, &bias) in b.iter().enumerate() {
                        let mut s = bias;
                        for ky in 0..g.k_rows {
                            for kx in 0..g.k_cols {
                                if let Some(p) = at(oy, ox, ky, kx) {
                                    for c in 0..c_n {
                                        let wi = ((f * g.k_rows + ky) * g.k_cols + kx) * c_n + c;
                                        s += w[wi] * a[p * c_n + c];
                                    }
                                }
                            }
                        }
                        out.push(s);
                    }
                }
                LayerKind::Depthwise { .. } => {
                    for c in 0..c_n {
                        let mut s = b[c];
                        for ky in 0..g.k_rows {
                            for kx in 0..g.k_cols {
                                if let Some(p) = at(oy, ox, ky, kx) {
                                    s += w[(c * g.k_rows + ky) * g.k_cols + kx] * a[p * c_n + c];
                                }
                            }
                        }
                        out.push(s);
                    }
                }
                LayerKind::Pool { op, .. } => {
                    for c in 0..c_n {
                        let taps: Vec<D> = (0..g.k_rows)
                            .flat_map(|ky| (0..g.k_cols).map(move |kx| (ky, kx)))
                            .filter_map(|(ky, kx)| at(oy, ox, ky, kx))
                            .map(|p| a[p * c_n + c])
                            .collect();
                        match op {
                            PoolOp::Average => {
                                let sum = taps.iter().fold(D::from(0.0), |s, v| s + *v);
                                out.push(sum / (g.k_rows * g.k_cols) as f64);
                            }
                            PoolOp::Max => {
                                let mut best = taps[0];
                                for t in &taps[1..] {
                                    if t.re() > best.re() {
                                        best = *t;
                                    }
                                }
                                let mut res: Vec<f64> = taps.iter().map(|t| t.re()).collect();
                                res.sort_by(|x, y| y.total_cmp(x));
                                if res.len() > 1 {
                                    gap = gap.min(res[0] - res[1]);
                                }
                                out.push(best);
                            }
                        }
                    }
                }
                LayerKind::Dense => unreachable!("dense layers are not windows"),
            }
        }
    }
    (out, gap)
}

/// Relative error `|a - b| / max(|a| + |b|, floor)`.
pub fn rel_err(a: f64, b: f64, floor: f64) -> f64 {
    (a - b).abs() / (a.abs() + b.abs()).max(floor)
}

/// Data for model `M` whose relu / leaky_relu pre-activations all stay at least `margin` away
/// from the kink (redrawn with the next seed until they do).
pub fn data_away_from_kinks<M: Net>(
    model: &Model,
    params: &mut M,
    m: usize,
    seed: u64,
    margin: f64,
) -> (Vec<M::X>, Vec<M::Y>) {
    let values = flat(params);
    let (mean, std) = scaling(params);
    for attempt in 0..1000 {
        let (xs, ys) = data::<M>(model, m, seed + attempt);
        let (_, min_kink) =
            reference_cost::<f64>(model, &values, &mean, &std, &rows(&xs), &rows(&ys));
        if min_kink > margin {
            return (xs, ys);
        }
    }
    panic!("{}: no data away from the relu kinks", M::NAME);
}

/// The generated gradient of J: backprop over every sample, then finish.
pub fn backprop_gradient<M: Net>(p: &M, xs: &[M::X], ys: &[M::Y]) -> Vec<f64> {
    let mut g = M::grad_zero();
    for (x, y) in xs.iter().zip(ys) {
        p.sample_backprop(x, y, &mut g);
    }
    p.finish(&mut g, xs.len());
    flat_grad::<M>(&g)
}

/// The engine's parameters holding the values of `p`, converted to scalar `T`: per layer the
/// weights and biases of [`flat`], and with `standardize` the mean and std of [`scaling`].
pub fn engine_params<M: Net, T: Real>(model: &Model, p: &mut M) -> engine::Params<T> {
    let values = flat(p);
    let mut layers = Vec::new();
    let mut at = 0;
    for l in model.layers() {
        let n = l.width * l.fan_in;
        layers.push(FlatLayer {
            weights: values[at..at + n].to_vec(),
            bias: values[at + n..at + n + l.width].to_vec(),
        });
        at += n + l.width;
    }
    let (mean, std) = scaling(p);
    let scaling = model
        .input()
        .standardize
        .then_some(Standardization { mean, std });
    engine::Params::from_f64(&layers, scaling.as_ref())
}
