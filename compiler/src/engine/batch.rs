//! The batch gradient over many samples: blocked, optionally multi-threaded, and deterministic.
//!
//! Samples are taken in blocks of [`BLOCK`], each block in sub-blocks of [`SUB_BLOCK`] rows
//! stored contiguously (one row per sample) for every layer. Per sub-block, the runtime's batch
//! kernels run the forward pass (`affine_batch`: each group of weight rows serves every sample of
//! the sub-block) and the error terms (`back_batch`); then the block's gradient is accumulated
//! with `outer_acc_batch_rows` (`G += D^T A`, tiles of `G` held in registers while the samples
//! pass) and `add_acc_batch`. Every runtime batch kernel gives, sample by sample and element by
//! element, the bits of its per-sample kernel, with the samples of a gradient element added in
//! their original order; so the result equals the sequential per-sample loop (and the generated
//! `Trainer::step` and `Params::gradient`) bit for bit. With more than one thread, sub-blocks run
//! in parallel in the forward and backward passes and gradient rows in parallel in the
//! accumulation; neither split changes any operation, so the result does not depend on the thread
//! count.

use super::{Net, Params, Scratch};
use crate::ir::{self, Loss};
use rayon::prelude::*;
use sinew_runtime::{self as rt, act::Activation, Real};

/// Samples per block: the gradient is accumulated once per block.
pub const BLOCK: usize = 64;

/// Samples per sub-block: the unit of the forward and backward passes (and of their parallel
/// split).
pub const SUB_BLOCK: usize = 32;

/// Below this many multiply-adds per block the work runs on the calling thread (the result is
/// the same either way; threads only pay for larger blocks).
const PARALLEL_MIN_WORK: usize = 1 << 16;

/// Rows (one per sample) of a sub-block of samples, for every layer.
#[derive(Debug, Clone)]
struct SubBlock<T> {
    /// Samples held.
    used: usize,
    /// Standardized inputs (empty without `standardize`).
    x0: Vec<T>,
    /// Activations per layer.
    a: Vec<Vec<T>>,
    /// Output logits.
    z_out: Vec<T>,
    /// Error terms per layer.
    d: Vec<Vec<T>>,
    /// Per-sample losses.
    losses: Vec<T>,
}

impl<T: Real> SubBlock<T> {
    fn new(model: &ir::Model) -> Self {
        let rows = |w: usize| vec![T::ZERO; w * SUB_BLOCK];
        SubBlock {
            used: 0,
            x0: if model.input.standardize {
                rows(model.input.width)
            } else {
                Vec::new()
            },
            a: model.layers.iter().map(|l| rows(l.width)).collect(),
            z_out: rows(model.output().width),
            d: model.layers.iter().map(|l| rows(l.width)).collect(),
            losses: vec![T::ZERO; SUB_BLOCK],
        }
    }
}

/// `act` over rows of width `w` in place: elementwise on the whole slice, softmax row by row.
fn forward_rows<T: Real>(act: &Activation<T>, v: &mut [T], w: usize) {
    match act {
        Activation::Softmax => {
            for row in v.chunks_exact_mut(w) {
                act.forward(row);
            }
        }
        _ => act.forward(v),
    }
}

/// `d *= g'(a)` over rows of width `w`: elementwise on the whole slices, softmax row by row.
fn backward_rows<T: Real>(act: &Activation<T>, a: &[T], d: &mut [T], w: usize) {
    match act {
        Activation::Softmax => {
            for (ar, dr) in a.chunks_exact(w).zip(d.chunks_exact_mut(w)) {
                act.backward(ar, dr);
            }
        }
        _ => act.backward(a, d),
    }
}

/// Forward pass and error terms of the samples `xs` / `ys` (at most [`SUB_BLOCK`]) into `sb`: the
/// runtime calls of `Net::deltas`, one layer at a time over all the samples.
fn deltas<T: Real>(net: &Net<'_, T>, p: &Params<T>, xs: &[T], ys: &[T], sb: &mut SubBlock<T>) {
    let model = net.model;
    let (n_in, n_out) = (model.input.width, model.output().width);
    let used = (xs.len() / n_in.max(1)).min(ys.len() / n_out.max(1));
    sb.used = used;
    let xs = xs.get(..used * n_in).unwrap_or(&[]);
    let ys = ys.get(..used * n_out).unwrap_or(&[]);
    if model.input.standardize {
        for (x, x0) in xs.chunks_exact(n_in).zip(sb.x0.chunks_exact_mut(n_in)) {
            rt::standardize(x, &p.mean, &p.std, x0);
        }
    }
    let last = model.layers.len().saturating_sub(1);
    let out_act = model.output().activation;
    let fused = model.loss == Loss::CrossEntropy && out_act == ir::Activation::Softmax;
    for (l, ((layer, lp), act)) in model
        .layers
        .iter()
        .zip(&p.layers)
        .zip(&net.acts)
        .enumerate()
    {
        let (done, rest) = sb.a.split_at_mut(l);
        let Some(out) = rest.first_mut() else { break };
        let out = &mut out[..used * layer.width];
        let input: &[T] = match done.last() {
            Some(a) => a.get(..used * layer.fan_in).unwrap_or(&[]),
            None if model.input.standardize => sb.x0.get(..used * n_in).unwrap_or(&[]),
            None => xs,
        };
        rt::affine_batch(&lp.weights, &lp.bias, input, out, layer.fan_in);
        if l == last {
            sb.z_out[..used * layer.width].copy_from_slice(out);
            if fused {
                // Softmax outputs and losses in one pass over the shared exponentials.
                let z = &sb.z_out[..used * layer.width];
                rt::loss::softmax_cross_entropy_batch(z, ys, out, &mut sb.losses, layer.width);
                continue;
            }
        }
        forward_rows(act, out, layer.width);
    }
    // Losses from the logits (or the activations, for squared error), then the output error.
    let (Some(a_out), Some(d_out)) = (sb.a.last(), sb.d.last_mut()) else {
        return;
    };
    if !fused {
        let rows = sb
            .z_out
            .chunks_exact(n_out)
            .zip(a_out.chunks_exact(n_out))
            .zip(ys.chunks_exact(n_out));
        for (loss, ((z, a), y)) in sb.losses.iter_mut().zip(rows) {
            *loss = match (model.loss, out_act) {
                (Loss::CrossEntropy, ir::Activation::Softmax) => {
                    rt::loss::softmax_cross_entropy(z, y)
                }
                (Loss::CrossEntropy, _) => rt::loss::logistic_cross_entropy(z, y),
                (Loss::SquaredError, _) => rt::loss::squared_error(a, y),
            };
        }
    }
    // `d = a - y` is element-wise: one call over the used rows, not one per sample.
    let (Some(a_used), Some(d_used)) = (a_out.get(..used * n_out), d_out.get_mut(..used * n_out))
    else {
        return;
    };
    rt::loss::output_error(a_used, ys, d_used);
    if model.loss == Loss::SquaredError {
        if let Some(act) = net.acts.last() {
            backward_rows(act, a_used, d_used, n_out);
        }
    }
    // Hidden errors, from the last hidden layer down to the first.
    for l in (1..model.layers.len()).rev() {
        let (lower, upper) = sb.d.split_at_mut(l);
        let (Some(prev), Some(this)) = (model.layers.get(l - 1), model.layers.get(l)) else {
            continue;
        };
        let (w, n) = (prev.width, this.width);
        if let (Some(d_prev), Some(d_l), Some(lp), Some(a_prev), Some(act)) = (
            lower.last_mut().and_then(|d| d.get_mut(..used * w)),
            upper.first().and_then(|d| d.get(..used * n)),
            p.layers.get(l),
            sb.a.get(l - 1).and_then(|a| a.get(..used * w)),
            net.acts.get(l - 1),
        ) {
            rt::back_batch(&lp.weights, d_l, d_prev, w);
            backward_rows(act, a_prev, d_prev, w);
        }
    }
}

/// Reusable buffers of [`gradient_into_with`]: the sub-blocks of one block, sized for a model.
///
/// A trainer holds one across steps, so a step allocates nothing. Handed a model of another
/// shape, the buffers are rebuilt for it (never a panic, never a stale size).
#[derive(Debug, Clone)]
pub struct BatchScratch<T> {
    /// Sub-blocks of one block, allocated as the batch sizes need them.
    subs: Vec<SubBlock<T>>,
    /// The shape the sub-blocks are sized for: standardize flag, input width, layer widths.
    shape: Vec<usize>,
}

impl<T: Real> BatchScratch<T> {
    /// Buffers for one full block of `model`.
    pub fn new(model: &ir::Model) -> Self {
        let mut s = BatchScratch {
            subs: Vec::new(),
            shape: Vec::new(),
        };
        s.fit(model, BLOCK / SUB_BLOCK);
        s
    }

    /// `model`'s shape key.
    fn shape_of(model: &ir::Model) -> impl Iterator<Item = usize> + '_ {
        [usize::from(model.input.standardize), model.input.width]
            .into_iter()
            .chain(model.layers.iter().map(|l| l.width))
    }

    /// At least `count` sub-blocks sized for `model` (rebuilt if the shape differs).
    fn fit(&mut self, model: &ir::Model, count: usize) -> &mut [SubBlock<T>] {
        if !self.shape.iter().copied().eq(Self::shape_of(model)) {
            self.shape.clear();
            self.shape.extend(Self::shape_of(model));
            self.subs.clear();
        }
        while self.subs.len() < count {
            self.subs.push(SubBlock::new(model));
        }
        &mut self.subs[..count]
    }
}

/// Zeroes `grad`, accumulates the gradient of every sample, finishes it (1/m and penalty) and
/// returns the batch cost J. `None` (and `grad` zero) for an empty batch. Allocates its buffers;
/// [`gradient_into_with`] reuses them.
pub fn gradient_into<T: Real + Send + Sync>(
    net: &Net<'_, T>,
    p: &Params<T>,
    xs: &[T],
    ys: &[T],
    grad: &mut Params<T>,
) -> Option<T> {
    let mut scratch = BatchScratch {
        subs: Vec::new(),
        shape: Vec::new(),
    };
    gradient_into_with(net, p, xs, ys, grad, &mut scratch)
}

/// [`gradient_into`] with buffers held by the caller: the same bits, no allocation once
/// `scratch` has grown to the batch.
pub fn gradient_into_with<T: Real + Send + Sync>(
    net: &Net<'_, T>,
    p: &Params<T>,
    xs: &[T],
    ys: &[T],
    grad: &mut Params<T>,
    scratch: &mut BatchScratch<T>,
) -> Option<T> {
    let model = net.model;
    let (n_in, n_out) = (model.input.width, model.output().width);
    grad.clear();
    if n_in == 0 || n_out == 0 {
        return None;
    }
    let m = (xs.len() / n_in).min(ys.len() / n_out);
    if m == 0 {
        return None;
    }
    let work = model.parameters() * BLOCK;
    let parallel = work >= PARALLEL_MIN_WORK && rayon::current_num_threads() > 1;
    let subs_per_block = BLOCK / SUB_BLOCK;
    let subs = scratch.fit(model, subs_per_block.min(m.div_ceil(SUB_BLOCK)));
    let mut loss_sum = T::ZERO;
    let (xs, ys) = (&xs[..m * n_in], &ys[..m * n_out]);
    for (xb, yb) in xs.chunks(BLOCK * n_in).zip(ys.chunks(BLOCK * n_out)) {
        let used_subs = xb.len().div_ceil(SUB_BLOCK * n_in);
        let subs = &mut subs[..used_subs];
        let piece = |k: usize| {
            let x = xb.chunks(SUB_BLOCK * n_in).nth(k).unwrap_or(&[]);
            let y = yb.chunks(SUB_BLOCK * n_out).nth(k).unwrap_or(&[]);
            (x, y)
        };
        if parallel {
            subs.par_iter_mut().enumerate().for_each(|(k, sb)| {
                let (x, y) = piece(k);
                deltas(net, p, x, y, sb);
            });
        } else {
            for (k, sb) in subs.iter_mut().enumerate() {
                let (x, y) = piece(k);
                deltas(net, p, x, y, sb);
            }
        }
        for sb in subs.iter() {
            for &l in &sb.losses[..sb.used] {
                loss_sum += l;
            }
        }
        accumulate(net, grad, xb, subs, parallel);
    }
    net.finish(grad, p, m);
    Some(loss_sum / T::from_usize(m) + net.penalty_cost(p, m))
}

/// This layer's input and error rows of one sub-block (`x`: the sub-block's raw inputs).
fn layer_rows<'a, T: Real>(
    model: &ir::Model,
    l: usize,
    sb: &'a SubBlock<T>,
    x: &'a [T],
) -> (&'a [T], &'a [T]) {
    let Some(layer) = model.layers.get(l) else {
        return (&[], &[]);
    };
    let (n, o) = (layer.fan_in * sb.used, layer.width * sb.used);
    let input: Option<&[T]> = match l.checked_sub(1) {
        None if model.input.standardize => sb.x0.get(..n),
        None => x.get(..n),
        Some(below) => sb.a.get(below).and_then(|a| a.get(..n)),
    };
    let d = sb.d.get(l).and_then(|d| d.get(..o));
    match (input, d) {
        (Some(a), Some(d)) => (a, d),
        _ => (&[], &[]),
    }
}

/// `G += D^T A` and `g_b += sum d` of one block, layer by layer, sub-blocks in sample order.
fn accumulate<T: Real + Send + Sync>(
    net: &Net<'_, T>,
    grad: &mut Params<T>,
    xb: &[T],
    subs: &[SubBlock<T>],
    parallel: bool,
) {
    let model = net.model;
    let n_in = model.input.width;
    for (l, (g, layer)) in grad.layers.iter_mut().zip(&model.layers).enumerate() {
        let (n, o) = (layer.fan_in, layer.width);
        if n == 0 || o == 0 {
            continue;
        }
        // This layer's input and error rows of every sub-block, in sample order: a fixed array
        // (an iterator rebuilt inside the row loop cost the N2 and N3 accumulation 10-25 % more
        // instructions; a `Vec` costs an allocation per layer and block).
        let mut parts = [(&[][..], &[][..]); BLOCK / SUB_BLOCK];
        for (part, (sb, x)) in parts
            .iter_mut()
            .zip(subs.iter().zip(xb.chunks(SUB_BLOCK * n_in)))
        {
            *part = layer_rows(model, l, sb, x);
        }
        let rows_of = |first: usize, g_rows: &mut [T]| {
            for &(a, d) in parts.iter().take(subs.len()) {
                rt::outer_acc_batch_rows(g_rows, d, a, n, (first, o));
            }
        };
        if parallel && o >= 8 {
            let per_task = o.div_ceil(rayon::current_num_threads() * 2).max(4);
            g.weights
                .par_chunks_mut(per_task * n)
                .enumerate()
                .for_each(|(k, rows)| rows_of(k * per_task, rows));
        } else {
            rows_of(0, &mut g.weights);
        }
        for &(_, d) in parts.iter().take(subs.len()) {
            rt::add_acc_batch(&mut g.bias, d);
        }
    }
}

/// The per-sample reference loop (no threads, no blocks): zero, `backprop` each sample in order,
/// finish. Used by tests to prove [`gradient_into`] equal to it bit for bit.
pub fn gradient_sequential<T: Real>(
    net: &Net<'_, T>,
    p: &Params<T>,
    xs: &[T],
    ys: &[T],
    grad: &mut Params<T>,
) -> Option<T> {
    let model = net.model;
    let (n_in, n_out) = (model.input.width, model.output().width);
    grad.clear();
    let mut s = Scratch::new(model);
    let mut sum = T::ZERO;
    let mut m = 0;
    for (x, y) in xs.chunks_exact(n_in).zip(ys.chunks_exact(n_out)) {
        sum += net.backprop(p, x, y, grad, &mut s);
        m += 1;
    }
    if m == 0 {
        return None;
    }
    net.finish(grad, p, m);
    Some(sum / T::from_usize(m) + net.penalty_cost(p, m))
}

/// J over samples stored row-major (ZERO for an empty batch): per-sample losses computed in
/// parallel, summed in sample order, so the value equals [`Net::cost`] bit for bit.
pub fn cost<T: Real + Send + Sync>(net: &Net<'_, T>, p: &Params<T>, xs: &[T], ys: &[T]) -> T {
    let losses = per_sample(net, p, xs, ys, |net, p, x, y, s| net.loss(p, x, y, s));
    let m = losses.len();
    if m == 0 {
        return T::ZERO;
    }
    let mut sum = T::ZERO;
    for l in losses {
        sum += l;
    }
    sum / T::from_usize(m) + net.penalty_cost(p, m)
}

/// Network outputs for every sample, row-major.
pub fn predict_all<T: Real + Send + Sync>(net: &Net<'_, T>, p: &Params<T>, xs: &[T]) -> Vec<T> {
    let n_out = net.model.output().width;
    let rows = per_sample(net, p, xs, &[], |net, p, x, _, s| {
        let mut out = vec![T::ZERO; n_out];
        net.predict(p, x, s, &mut out);
        out
    });
    rows.into_iter().flatten().collect()
}

/// Maps `f` over samples (in parallel for large sets), results in sample order. With an empty
/// `ys` only inputs are passed (and `y` is empty).
fn per_sample<T, R, F>(net: &Net<'_, T>, p: &Params<T>, xs: &[T], ys: &[T], f: F) -> Vec<R>
where
    T: Real + Send + Sync,
    R: Send,
    F: Fn(&Net<'_, T>, &Params<T>, &[T], &[T], &mut Scratch<T>) -> R + Sync,
{
    let model = net.model;
    let (n_in, n_out) = (model.input.width, model.output().width);
    let xs_rows: Vec<&[T]> = xs.chunks_exact(n_in).collect();
    let ys_rows: Vec<&[T]> = if ys.is_empty() {
        vec![&[][..]; xs_rows.len()]
    } else {
        ys.chunks_exact(n_out).collect()
    };
    let pairs: Vec<(&[T], &[T])> = xs_rows.into_iter().zip(ys_rows).collect();
    let parallel = model.parameters() * pairs.len() >= PARALLEL_MIN_WORK * 4;
    if parallel {
        pairs
            .par_chunks(BLOCK)
            .flat_map_iter(|block| {
                let mut s = Scratch::new(model);
                block
                    .iter()
                    .map(|(x, y)| f(net, p, x, y, &mut s))
                    .collect::<Vec<R>>()
            })
            .collect()
    } else {
        let mut s = Scratch::new(model);
        pairs.iter().map(|(x, y)| f(net, p, x, y, &mut s)).collect()
    }
}
