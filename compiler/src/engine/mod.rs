//! Host engine: evaluates and trains a [`Model`] over slices with the runtime's kernels.
//!
//! The engine calls the same `sinew-runtime` functions, in the same order, as the code that
//! `emit` generates (the order is written out in `DEVELOPERS.md`), so for equal parameters and
//! inputs its outputs, costs and gradients are bit-identical to the generated code. Tests in the
//! tests crate prove it on every fixture.
//!
//! - [`Params`]: per-layer row-major weights and biases (and the standardization statistics);
//!   the same type holds gradients.
//! - [`Net`]: a model bound to its scalar type, with per-sample [`Net::predict`],
//!   [`Net::loss`], [`Net::backprop`], and batch [`Net::finish`], [`Net::cost`].
//! - [`batch`]: the batch gradient over many samples, multi-threaded with a result that does not
//!   depend on the thread count (it equals the sequential sum bit for bit).
//! - [`train`]: the trainers (gradient descent, momentum, Adam, L-BFGS), early stopping and
//!   divergence detection; [`eval`]: metrics; [`gradcheck`]: finite differences.

pub use aligned::Lines;

use crate::ir::{self, Init, Model, Optimizer};
use crate::plan::{Buf, Head, Plan, Step, Update};
use crate::weights::{FlatLayer, Standardization};
use sinew_runtime::{self as rt, act::Activation, penalty::Penalty, rng::SplitMix64, Real};

/// The error of every engine entry point that takes caller slices: an operand whose length
/// disagrees with the model (a sample `x` or target `y` of the wrong width, a batch that is not
/// a whole number of samples, an `out` of the wrong width). Checked before any output is
/// written; the engine never truncates.
pub use sinew_runtime::LengthMismatch;

pub mod aligned;
pub mod batch;
pub mod eval;
pub mod gradcheck;
pub mod train;
mod window;

/// One layer's parameters (or gradients): `weights` is row-major, `width` rows of `fan_in`.
#[derive(Debug, Clone, PartialEq)]
pub struct LayerParams<T> {
    /// Row j holds the weights into unit j; stored from a cache-line boundary ([`Lines`]).
    pub weights: Lines<T>,
    /// One bias per unit.
    pub bias: Vec<T>,
}

/// All parameters of a model (or a gradient of the same shape, whose scaling is empty).
#[derive(Debug, Clone, PartialEq)]
pub struct Params<T> {
    /// Per layer, in order, the output last.
    pub layers: Vec<LayerParams<T>>,
    /// Standardization means (empty without `standardize`).
    pub mean: Vec<T>,
    /// Standardization standard deviations (empty without `standardize`).
    pub std: Vec<T>,
}

impl<T: Real> Params<T> {
    /// All weights and biases zero; with `standardize`, mean 0 and std 1.
    pub fn zeroed(model: &Model) -> Self {
        let (mean, std) = if model.input.standardize {
            (
                vec![T::ZERO; model.input.width],
                vec![T::ONE; model.input.width],
            )
        } else {
            (Vec::new(), Vec::new())
        };
        Params {
            layers: Self::zero_layers(model),
            mean,
            std,
        }
    }

    /// A zero gradient of the model's shape (no scaling).
    pub fn zero_gradient(model: &Model) -> Self {
        Params {
            layers: Self::zero_layers(model),
            mean: Vec::new(),
            std: Vec::new(),
        }
    }

    fn zero_layers(model: &Model) -> Vec<LayerParams<T>> {
        model
            .layers
            .iter()
            .map(|l| LayerParams {
                weights: Lines::filled(T::ZERO, l.width * l.fan_in),
                bias: vec![T::ZERO; l.width],
            })
            .collect()
    }

    /// The spec's initialisation: one SplitMix64 seeded with `seed`; each layer's weights drawn
    /// row-major in layer order; biases zero; standardization mean 0, std 1.
    pub fn init(model: &Model, seed: u64) -> Self {
        let mut p = Self::zeroed(model);
        let mut rng = SplitMix64::new(seed);
        for (l, lp) in model.layers.iter().zip(&mut p.layers) {
            match model.init {
                Init::Uniform { eps } => rt::rng::fill_uniform(&mut lp.weights, eps, &mut rng),
                Init::Glorot => {
                    let (fan_in, fan_out) = l.fans();
                    rt::rng::fill_uniform(
                        &mut lp.weights,
                        rt::rng::glorot_limit(fan_in, fan_out),
                        &mut rng,
                    )
                }
                Init::He => {
                    rt::rng::fill_normal(&mut lp.weights, rt::rng::he_std(l.fans().0), &mut rng)
                }
            }
        }
        p
    }

    /// Sets every value to zero (scaling untouched).
    pub fn clear(&mut self) {
        for l in &mut self.layers {
            l.weights.iter_mut().for_each(|v| *v = T::ZERO);
            l.bias.iter_mut().for_each(|v| *v = T::ZERO);
        }
    }

    /// Converts from f64 values (as stored in a weights file), rounding to `T`. Shapes are the
    /// caller's contract (use [`crate::weights`] to validate a file first).
    pub fn from_f64(layers: &[FlatLayer], scaling: Option<&Standardization>) -> Self {
        let conv = |v: &[f64]| v.iter().map(|&x| T::from_f64(x)).collect::<Vec<T>>();
        Params {
            layers: layers
                .iter()
                .map(|l| LayerParams {
                    weights: Lines::from_slice(&conv(&l.weights)),
                    bias: conv(&l.bias),
                })
                .collect(),
            mean: scaling.map(|s| conv(&s.mean)).unwrap_or_default(),
            std: scaling.map(|s| conv(&s.std)).unwrap_or_default(),
        }
    }

    /// The values widened to f64, per layer.
    pub fn layers_f64(&self) -> Vec<FlatLayer> {
        let conv = |v: &[T]| v.iter().map(|x| x.to_f64()).collect::<Vec<f64>>();
        self.layers
            .iter()
            .map(|l| FlatLayer {
                weights: conv(&l.weights),
                bias: conv(&l.bias),
            })
            .collect()
    }

    /// The standardization statistics widened to f64, if any.
    pub fn scaling_f64(&self) -> Option<Standardization> {
        if self.mean.is_empty() {
            None
        } else {
            Some(Standardization {
                mean: self.mean.iter().map(|x| x.to_f64()).collect(),
                std: self.std.iter().map(|x| x.to_f64()).collect(),
            })
        }
    }

    /// Every weight and bias, layer by layer (weights then bias), as f64.
    pub fn flat_f64(&self) -> Vec<f64> {
        let mut v = Vec::new();
        for l in &self.layers {
            v.extend(l.weights.iter().map(|x| x.to_f64()));
            v.extend(l.bias.iter().map(|x| x.to_f64()));
        }
        v
    }

    /// Overwrites every weight and bias from `flat` (the order of [`Params::flat_f64`]).
    pub fn set_flat_f64(&mut self, flat: &[f64]) {
        let mut it = flat.iter();
        for l in &mut self.layers {
            for v in l.weights.iter_mut().chain(l.bias.iter_mut()) {
                if let Some(&x) = it.next() {
                    *v = T::from_f64(x);
                }
            }
        }
    }
}

/// Per-sample working buffers, reused across samples: one per [`Plan::buffers`] entry, in its
/// order.
#[derive(Debug, Clone)]
pub struct Scratch<T> {
    /// Which buffer each entry of `bufs` holds.
    slots: Vec<Buf>,
    /// The buffers.
    bufs: Vec<Vec<T>>,
}

impl<T: Real> Scratch<T> {
    /// Buffers sized for `model`.
    pub fn new(model: &Model) -> Self {
        Self::rows(&Plan::new(model), 1)
    }

    /// Buffers of `rows` samples each for the plan's working buffers.
    fn rows(plan: &Plan, rows: usize) -> Self {
        Scratch {
            slots: plan.buffers.iter().map(|b| b.buf).collect(),
            bufs: plan
                .buffers
                .iter()
                .map(|b| vec![T::ZERO; b.width * rows])
                .collect(),
        }
    }

    /// The values of a working buffer (empty for one the model lacks).
    pub fn get(&self, buf: Buf) -> &[T] {
        self.slot(buf)
            .and_then(|k| self.bufs.get(k))
            .map_or(&[], Vec::as_slice)
    }

    /// The activations of layer `l` after the last pass (its outputs, for the output layer).
    pub fn activations(&self, l: usize) -> &[T] {
        self.get(Buf::Act(l))
    }

    fn slot(&self, buf: Buf) -> Option<usize> {
        self.slots.iter().position(|&b| b == buf)
    }

    /// A working buffer, writable.
    fn get_mut(&mut self, buf: Buf) -> Option<&mut [T]> {
        let k = self.slot(buf)?;
        self.bufs.get_mut(k).map(Vec::as_mut_slice)
    }

    /// `read` (an operand or a working buffer) and the working buffer `write`, which differ.
    fn io<'a>(
        &'a mut self,
        ops: Operands<'a, T>,
        read: Buf,
        write: Buf,
    ) -> Option<(&'a [T], &'a mut [T])> {
        let w = self.slot(write)?;
        let r = match read {
            Buf::Input => return Some((ops.x, self.bufs.get_mut(w)?)),
            Buf::Target => return Some((ops.y, self.bufs.get_mut(w)?)),
            other => self.slot(other)?,
        };
        if r < w {
            let (lo, hi) = self.bufs.split_at_mut(w);
            Some((lo.get(r)?, hi.first_mut()?))
        } else if r > w {
            let (lo, hi) = self.bufs.split_at_mut(r);
            Some((hi.first()?, lo.get_mut(w)?))
        } else {
            None
        }
    }

    /// Runs `f` on two buffers read together and the working buffer `write`, which differs
    /// from both (`write` is moved out and back: no allocation). `None` when `write` is missing.
    fn read2_write<'a, R>(
        &'a mut self,
        ops: Operands<'a, T>,
        a: Buf,
        b: Buf,
        write: Buf,
        f: impl FnOnce(&[T], &[T], &mut [T]) -> R,
    ) -> Option<R> {
        let w = self.slot(write)?;
        let mut out = std::mem::take(self.bufs.get_mut(w)?);
        let r = {
            let (x, y) = self.read2(ops, a, b);
            f(x, y, &mut out)
        };
        if let Some(slot) = self.bufs.get_mut(w) {
            *slot = out;
        }
        Some(r)
    }

    /// Two buffers read together (each an operand or a working buffer).
    fn read2<'a>(&'a self, ops: Operands<'a, T>, a: Buf, b: Buf) -> (&'a [T], &'a [T]) {
        let get = |buf: Buf| match buf {
            Buf::Input => ops.x,
            Buf::Target => ops.y,
            other => self.get(other),
        };
        (get(a), get(b))
    }
}

/// The operands of a pass: the sample (or the rows of a block) and its target.
#[derive(Debug, Clone, Copy)]
struct Operands<'a, T> {
    x: &'a [T],
    y: &'a [T],
}

/// A model bound to a scalar type, with its execution plan and penalty converted once.
#[derive(Debug, Clone)]
pub struct Net<'m, T> {
    /// The model.
    pub model: &'m Model,
    /// Its execution plan: the passes this engine walks, as the generated code does.
    pub plan: Plan,
    penalty: Penalty<T>,
}

/// Converts an IR activation to the runtime's.
pub fn activation<T: Real>(a: ir::Activation) -> Activation<T> {
    match a {
        ir::Activation::Identity => Activation::Identity,
        ir::Activation::Sigmoid => Activation::Sigmoid,
        ir::Activation::Tanh => Activation::Tanh,
        ir::Activation::Relu => Activation::Relu,
        ir::Activation::LeakyRelu(alpha) => Activation::LeakyRelu(T::from_f64(alpha)),
        ir::Activation::Softmax => Activation::Softmax,
    }
}

/// Converts an IR penalty to the runtime's.
pub fn penalty<T: Real>(p: ir::Penalty) -> Penalty<T> {
    match p {
        ir::Penalty::None => Penalty::None,
        ir::Penalty::L2(l) => Penalty::L2(T::from_f64(l)),
        ir::Penalty::L1(l) => Penalty::L1(T::from_f64(l)),
    }
}

/// One sample's loss under `head` from its operand (logits or outputs) and target, which must
/// have one length.
pub fn sample_loss<T: Real>(head: Head, v: &[T], y: &[T]) -> Result<T, LengthMismatch> {
    match head {
        Head::SoftmaxCrossEntropy => rt::loss::softmax_cross_entropy(v, y),
        Head::Logistic => rt::loss::logistic_cross_entropy(v, y),
        Head::SquaredError(_) => rt::loss::squared_error(v, y),
    }
}

/// The number of samples `m` of a batch stored row-major: `xs` must hold `m` rows of `n_in`
/// values and `ys` (when given) `m` rows of `n_out`. A partial row or a count that disagrees is
/// an error, never a truncation.
pub(crate) fn batch_samples<T>(
    xs: &[T],
    n_in: usize,
    ys: Option<&[T]>,
    n_out: usize,
) -> Result<usize, LengthMismatch> {
    let m = xs.len().checked_div(n_in).unwrap_or(0);
    LengthMismatch::check("xs", m * n_in, xs.len())?;
    if let Some(ys) = ys {
        LengthMismatch::check("ys", m.saturating_mul(n_out), ys.len())?;
    }
    Ok(m)
}

impl<'m, T: Real> Net<'m, T> {
    /// Binds `model` to `T`.
    pub fn new(model: &'m Model) -> Self {
        Net {
            model,
            plan: Plan::new(model),
            penalty: penalty(model.penalty),
        }
    }

    /// Runs `steps` on one sample: the kernel of each step, in order. Accumulation steps add to
    /// `grad` when one is given and are skipped otherwise. Returns the sample's loss (ZERO for a
    /// pass without one), or the first kernel's [`LengthMismatch`] (the plan's widths and the
    /// buffers agree, so only a caller's operand of the wrong width can cause one).
    fn run(
        &self,
        steps: &[Step],
        p: &Params<T>,
        ops: Operands<'_, T>,
        s: &mut Scratch<T>,
        mut grad: Option<&mut Params<T>>,
    ) -> Result<T, LengthMismatch> {
        let mut loss = T::ZERO;
        for step in steps {
            match *step {
                Step::Standardize { from, to } => {
                    if let Some((x, out)) = s.io(ops, from, to) {
                        rt::standardize(x, &p.mean, &p.std, out)?;
                    }
                }
                Step::Affine { layer, input, out } => {
                    if let (Some(lp), Some((x, z))) = (p.layers.get(layer), s.io(ops, input, out)) {
                        rt::affine(&lp.weights, &lp.bias, x, z)?;
                    }
                }
                Step::Copy { from, to } => {
                    if let Some((f, t)) = s.io(ops, from, to) {
                        t.iter_mut().zip(f).for_each(|(t, &f)| *t = f);
                    }
                }
                Step::Activate { act, buf } => {
                    if let Some(v) = s.get_mut(buf) {
                        activation::<T>(act).forward(v);
                    }
                }
                Step::SoftmaxWithLoss { logits, out } => {
                    if let Some((z, a)) = s.io(ops, logits, out) {
                        loss = rt::loss::softmax_with_cross_entropy(z, ops.y, a)?;
                    }
                }
                Step::Loss { head, operand } => {
                    let (v, y) = s.read2(ops, operand, Buf::Target);
                    loss = sample_loss(head, v, y)?;
                }
                Step::OutputError { out, err } => {
                    if let Some((a, d)) = s.io(ops, out, err) {
                        rt::loss::output_error(a, ops.y, d)?;
                    }
                }
                Step::ActivationGrad { act, act_of, err } => {
                    if let Some((a, d)) = s.io(ops, act_of, err) {
                        activation::<T>(act).backward(a, d)?;
                    }
                }
                Step::OuterAcc { layer, err, input } => {
                    if let Some(g) = grad.as_deref_mut().and_then(|g| g.layers.get_mut(layer)) {
                        let (d, a) = s.read2(ops, err, input);
                        rt::outer_acc(&mut g.weights, d, a)?;
                    }
                }
                Step::AddAcc { layer, err } => {
                    if let Some(g) = grad.as_deref_mut().and_then(|g| g.layers.get_mut(layer)) {
                        rt::add_acc(&mut g.bias, s.get(err))?;
                    }
                }
                Step::Back { layer, err, out } => {
                    if let (Some(lp), Some((d, o))) = (p.layers.get(layer), s.io(ops, err, out)) {
                        rt::back(&lp.weights, d, o)?;
                    }
                }
                Step::Window {
                    layer,
                    op,
                    input,
                    out,
                } => {
                    let (Some(lp), Some(g)) = (p.layers.get(layer), window::of(self.model, layer))
                    else {
                        continue;
                    };
                    if let Some((x, z)) = s.io(ops, input, out) {
                        window::forward(op, lp, &g, x, z)?;
                    }
                }
                Step::WindowAcc {
                    layer,
                    op,
                    err,
                    input,
                } => {
                    let g = window::of(self.model, layer);
                    let lg = grad.as_deref_mut().and_then(|g| g.layers.get_mut(layer));
                    if let (Some(lg), Some(g)) = (lg, g) {
                        let (d, x) = s.read2(ops, err, input);
                        window::accumulate(op, lg, &g, d, x)?;
                    }
                }
                Step::WindowBack {
                    layer,
                    op,
                    input,
                    err,
                    out,
                } => {
                    let (Some(lp), Some(g)) = (p.layers.get(layer), window::of(self.model, layer))
                    else {
                        continue;
                    };
                    s.read2_write(ops, input, err, out, |x, d, o| {
                        window::backward(op, lp, &g, x, d, o)
                    })
                    .transpose()?;
                }
            }
        }
        Ok(loss)
    }

    /// `x` (and `y`, when given) against the model's input (output) width.
    fn check_sample(&self, x: &[T], y: Option<&[T]>) -> Result<(), LengthMismatch> {
        LengthMismatch::check("x", self.model.input.width, x.len())?;
        match y {
            Some(y) => LengthMismatch::check("y", self.model.output().width, y.len()),
            None => Ok(()),
        }
    }

    /// The inference pass: the activations of every layer into `s` (see
    /// [`Scratch::activations`]). `x` must hold the model's inputs.
    pub fn forward(
        &self,
        p: &Params<T>,
        x: &[T],
        s: &mut Scratch<T>,
    ) -> Result<(), LengthMismatch> {
        self.check_sample(x, None)?;
        self.run(&self.plan.inference, p, Operands { x, y: &[] }, s, None)
            .map(|_| ())
    }

    /// Network output for one sample, written to `out` (the generated `predict_into`). `x` must
    /// hold the model's inputs and `out` its outputs; on a mismatch nothing is written to `out`.
    pub fn predict(
        &self,
        p: &Params<T>,
        x: &[T],
        s: &mut Scratch<T>,
        out: &mut [T],
    ) -> Result<(), LengthMismatch> {
        LengthMismatch::check("out", self.model.output().width, out.len())?;
        self.forward(p, x, s)?;
        let a = s.activations(self.plan.output);
        LengthMismatch::check("out", a.len(), out.len())?;
        out.iter_mut().zip(a).for_each(|(o, &v)| *o = v);
        Ok(())
    }

    /// The loss of one sample (no penalty). `x` and `y` must hold the model's inputs and
    /// outputs.
    pub fn loss(
        &self,
        p: &Params<T>,
        x: &[T],
        y: &[T],
        s: &mut Scratch<T>,
    ) -> Result<T, LengthMismatch> {
        self.check_sample(x, Some(y))?;
        self.run(&self.plan.loss, p, Operands { x, y }, s, None)
    }

    /// Forward pass and error terms of one sample (the backprop pass without its
    /// accumulation), leaving activations and errors in `s`; returns the sample's loss.
    pub fn deltas(
        &self,
        p: &Params<T>,
        x: &[T],
        y: &[T],
        s: &mut Scratch<T>,
    ) -> Result<T, LengthMismatch> {
        self.check_sample(x, Some(y))?;
        self.run(&self.plan.backprop, p, Operands { x, y }, s, None)
    }

    /// Per-sample backprop: accumulates this sample's gradient into `grad` and returns its loss.
    /// On a mismatch of `x` or `y` nothing is added to `grad`.
    pub fn backprop(
        &self,
        p: &Params<T>,
        x: &[T],
        y: &[T],
        grad: &mut Params<T>,
        s: &mut Scratch<T>,
    ) -> Result<T, LengthMismatch> {
        self.check_sample(x, Some(y))?;
        self.run(&self.plan.backprop, p, Operands { x, y }, s, Some(grad))
    }

    /// Batch finish: divides by `m` and adds the penalty gradient to the weights (never biases).
    /// `grad` must have the shape of `p`.
    pub fn finish(
        &self,
        grad: &mut Params<T>,
        p: &Params<T>,
        m: usize,
    ) -> Result<(), LengthMismatch> {
        let m = T::from_usize(m);
        LengthMismatch::check("grad", p.layers.len(), grad.layers.len())?;
        for (g, w) in grad.layers.iter_mut().zip(&p.layers) {
            self.penalty.finish_weights(&mut g.weights, &w.weights, m)?;
            rt::penalty::finish_bias(&mut g.bias, m);
        }
        Ok(())
    }

    /// The penalty term of J for a batch of `m` samples.
    pub fn penalty_cost(&self, p: &Params<T>, m: usize) -> T {
        let mut sum = T::ZERO;
        for l in &p.layers {
            sum += self.penalty.sum(&l.weights);
        }
        self.penalty.cost(sum, T::from_usize(m))
    }

    /// J = (1/m) sum loss + penalty over samples stored row-major in `xs` / `ys`
    /// (ZERO for an empty batch). `xs` and `ys` must hold the same number of whole samples.
    pub fn cost(&self, p: &Params<T>, xs: &[T], ys: &[T]) -> Result<T, LengthMismatch> {
        let (n_in, n_out) = (self.model.input.width, self.model.output().width);
        let m = batch_samples(xs, n_in, Some(ys), n_out)?;
        if m == 0 {
            return Ok(T::ZERO);
        }
        let mut s = Scratch::new(self.model);
        let mut sum = T::ZERO;
        for (x, y) in xs.chunks_exact(n_in).zip(ys.chunks_exact(n_out)) {
            sum += self.loss(p, x, y, &mut s)?;
        }
        Ok(sum / T::from_usize(m) + self.penalty_cost(p, m))
    }

    /// The optimizer update of the spec's `train` line (or `optimizer`), over every weight and
    /// bias array in layer order (weights, then bias), as the generated trainer does. `g` (and
    /// the optimizer state) must have the shape of `p`.
    pub fn update(
        &self,
        optimizer: Optimizer,
        p: &mut Params<T>,
        g: &Params<T>,
        state: &mut OptState<T>,
    ) -> Result<(), LengthMismatch> {
        LengthMismatch::check("g", p.layers.len(), g.layers.len())?;
        match Update::of(optimizer) {
            Update::Sgd { rate } => {
                let rate = T::from_f64(rate);
                for (pl, gl) in p.layers.iter_mut().zip(&g.layers) {
                    rt::optim::sgd(&mut pl.weights, &gl.weights, rate)?;
                    rt::optim::sgd(&mut pl.bias, &gl.bias, rate)?;
                }
            }
            Update::Momentum { rate, mu } => {
                let (rate, mu) = (T::from_f64(rate), T::from_f64(mu));
                let v = state
                    .first
                    .get_or_insert_with(|| Params::zero_gradient(self.model));
                for ((pl, gl), vl) in p.layers.iter_mut().zip(&g.layers).zip(&mut v.layers) {
                    rt::optim::momentum(&mut pl.weights, &gl.weights, &mut vl.weights, rate, mu)?;
                    rt::optim::momentum(&mut pl.bias, &gl.bias, &mut vl.bias, rate, mu)?;
                }
            }
            Update::Adam {
                rate,
                beta1,
                beta2,
                eps,
            } => {
                let (rate, b1, b2, eps) = (
                    T::from_f64(rate),
                    T::from_f64(beta1),
                    T::from_f64(beta2),
                    T::from_f64(eps),
                );
                state.t = state.t.saturating_add(1);
                let t = state.t;
                let model = self.model;
                let m = state
                    .first
                    .get_or_insert_with(|| Params::zero_gradient(model));
                let v = state
                    .second
                    .get_or_insert_with(|| Params::zero_gradient(model));
                for (((pl, gl), ml), vl) in p
                    .layers
                    .iter_mut()
                    .zip(&g.layers)
                    .zip(&mut m.layers)
                    .zip(&mut v.layers)
                {
                    rt::optim::adam(
                        &mut pl.weights,
                        &gl.weights,
                        &mut ml.weights,
                        &mut vl.weights,
                        t,
                        rate,
                        b1,
                        b2,
                        eps,
                    )?;
                    rt::optim::adam(
                        &mut pl.bias,
                        &gl.bias,
                        &mut ml.bias,
                        &mut vl.bias,
                        t,
                        rate,
                        b1,
                        b2,
                        eps,
                    )?;
                }
            }
        }
        Ok(())
    }
}

/// Optimizer state: momentum's velocity or Adam's moments, and the step count.
#[derive(Debug, Clone, Default)]
pub struct OptState<T> {
    /// Velocity (momentum) or first moment (Adam).
    pub first: Option<Params<T>>,
    /// Second moment (Adam).
    pub second: Option<Params<T>>,
    /// Steps taken (Adam's t).
    pub t: u32,
}

/// The on-host twin of the generated `Trainer`: params, gradient, optimizer state.
#[derive(Debug, Clone)]
pub struct Trainer<'m, T> {
    /// The bound model.
    pub net: Net<'m, T>,
    /// Current parameters.
    pub params: Params<T>,
    /// The last batch gradient.
    pub grad: Params<T>,
    /// Optimizer state.
    pub state: OptState<T>,
    /// The optimizer (the spec's unless overridden).
    pub optimizer: Optimizer,
    /// Buffers of the batch gradient, reused across steps.
    pub scratch: batch::BatchScratch<T>,
}

impl<'m, T: Real + Send + Sync> Trainer<'m, T> {
    /// A trainer starting from `params` with the spec's optimizer.
    pub fn new(model: &'m Model, params: Params<T>) -> Self {
        Trainer {
            net: Net::new(model),
            params,
            grad: Params::zero_gradient(model),
            state: OptState {
                first: None,
                second: None,
                t: 0,
            },
            optimizer: model.train.optimizer,
            scratch: batch::BatchScratch::new(model),
        }
    }

    /// One step over the samples in `xs` / `ys` (row-major): returns J before the update. An
    /// empty batch returns ZERO and changes nothing; so does a batch whose `xs` and `ys` do not
    /// hold the same number of whole samples, which is an error.
    pub fn step(&mut self, xs: &[T], ys: &[T]) -> Result<T, LengthMismatch> {
        let Some(cost) = batch::gradient_into_with(
            &self.net,
            &self.params,
            xs,
            ys,
            &mut self.grad,
            &mut self.scratch,
        )?
        else {
            return Ok(T::ZERO);
        };
        self.net.update(
            self.optimizer,
            &mut self.params,
            &self.grad,
            &mut self.state,
        )?;
        Ok(cost)
    }
}
