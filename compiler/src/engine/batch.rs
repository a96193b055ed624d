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

use super::{
    activation, batch_samples, sample_loss, window, LengthMismatch, Net, Operands, Params, Scratch,
};
use crate::ir;
use crate::plan::{Buf, Buffer, Plan, Step};
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

/// Rows (one per sample) of a sub-block of samples, for every working buffer of the plan.
#[derive(Debug, Clone)]
struct SubBlock<T> {
    /// Samples held.
    used: usize,
    /// The plan's working buffers, [`SUB_BLOCK`] rows each.
    rows: Scratch<T>,
    /// Per-sample losses.
    losses: Vec<T>,
}

impl<T: Real> SubBlock<T> {
    fn new(plan: &Plan) -> Self {
        SubBlock {
            used: 0,
            rows: Scratch::rows(plan, SUB_BLOCK),
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
fn backward_rows<T: Real>(
    act: &Activation<T>,
    a: &[T],
    d: &mut [T],
    w: usize,
) -> Result<(), LengthMismatch> {
    match act {
        Activation::Softmax => {
            LengthMismatch::check("d", a.len(), d.len())?;
            for (ar, dr) in a.chunks_exact(w).zip(d.chunks_exact_mut(w)) {
                act.backward(ar, dr)?;
            }
            Ok(())
        }
        _ => act.backward(a, d),
    }
}

/// The width of a buffer of `net`'s plan, operands included.
fn width_of<T>(net: &Net<'_, T>, buf: Buf) -> usize {
    match buf {
        Buf::Input => net.model.input.width,
        Buf::Target => net.model.output().width,
        other => net.plan.width(other).unwrap_or(0),
    }
}

/// The backprop pass without its accumulation over the samples `xs` / `ys` (at most
/// [`SUB_BLOCK`]) into `sb`: each step's batch kernel over the used rows, which gives, row by
/// row, the bits of the per-sample kernel of `Net::deltas`. A kernel's [`LengthMismatch`] (an
/// internal invariant broken: the plan's widths size every buffer) is returned.
fn deltas<T: Real>(
    net: &Net<'_, T>,
    p: &Params<T>,
    xs: &[T],
    ys: &[T],
    sb: &mut SubBlock<T>,
) -> Result<(), LengthMismatch> {
    let (n_in, n_out) = (net.model.input.width, net.model.output().width);
    let used = (xs.len() / n_in.max(1)).min(ys.len() / n_out.max(1));
    sb.used = used;
    let ops = Operands {
        x: xs.get(..used * n_in).unwrap_or(&[]),
        y: ys.get(..used * n_out).unwrap_or(&[]),
    };
    let rows = |buf: Buf| used * width_of(net, buf);
    for step in net.plan.backprop.iter().filter(|s| !s.accumulates()) {
        let s = &mut sb.rows;
        match *step {
            Step::Standardize { from, to } => {
                if let Some((x, out)) = s.io(ops, from, to) {
                    for (x, x0) in x.chunks_exact(n_in).zip(out.chunks_exact_mut(n_in)) {
                        rt::standardize(x, &p.mean, &p.std, x0)?;
                    }
                }
            }
            Step::Affine { layer, input, out } => {
                let (Some(lp), Some(l)) = (p.layers.get(layer), net.model.layers.get(layer)) else {
                    continue;
                };
                if let Some((x, z)) = s.io(ops, input, out) {
                    let (x, z) = (x.get(..rows(input)), z.get_mut(..rows(out)));
                    if let (Some(x), Some(z)) = (x, z) {
                        rt::affine_batch(&lp.weights, &lp.bias, x, z, l.fan_in)?;
                    }
                }
            }
            Step::Copy { from, to } => {
                if let Some((f, t)) = s.io(ops, from, to) {
                    t.iter_mut()
                        .zip(f)
                        .take(rows(to))
                        .for_each(|(t, &f)| *t = f);
                }
            }
            Step::Activate { act, buf } => {
                let w = width_of(net, buf);
                if let Some(v) = s.get_mut(buf).and_then(|v| v.get_mut(..used * w)) {
                    forward_rows(&activation::<T>(act), v, w);
                }
            }
            Step::SoftmaxWithLoss { logits, out } => {
                let w = width_of(net, out);
                if let Some((z, a)) = s.io(ops, logits, out) {
                    let losses = sb.losses.get_mut(..used);
                    if let (Some(z), Some(a), Some(l)) =
                        (z.get(..used * w), a.get_mut(..used * w), losses)
                    {
                        rt::loss::softmax_cross_entropy_batch(z, ops.y, a, l, w)?;
                    }
                }
            }
            Step::Loss { head, operand } => {
                let (v, y) = s.read2(ops, operand, Buf::Target);
                let rows = v.chunks_exact(n_out).zip(y.chunks_exact(n_out));
                for (loss, (v, y)) in sb.losses.iter_mut().zip(rows) {
                    *loss = sample_loss(head, v, y)?;
                }
            }
            Step::OutputError { out, err } => {
                // `d = a - y` is element-wise: one call over the used rows.
                if let Some((a, d)) = s.io(ops, out, err) {
                    if let (Some(a), Some(d)) = (a.get(..rows(out)), d.get_mut(..rows(err))) {
                        rt::loss::output_error(a, ops.y, d)?;
                    }
                }
            }
            Step::ActivationGrad { act, act_of, err } => {
                let w = width_of(net, err);
                if let Some((a, d)) = s.io(ops, act_of, err) {
                    if let (Some(a), Some(d)) = (a.get(..used * w), d.get_mut(..used * w)) {
                        backward_rows(&activation::<T>(act), a, d, w)?;
                    }
                }
            }
            Step::Back { layer, err, out } => {
                let Some(lp) = p.layers.get(layer) else {
                    continue;
                };
                let w = width_of(net, out);
                if let Some((d, o)) = s.io(ops, err, out) {
                    if let (Some(d), Some(o)) = (d.get(..rows(err)), o.get_mut(..used * w)) {
                        rt::back_batch(&lp.weights, d, o, w)?;
                    }
                }
            }
            Step::Window {
                layer,
                op,
                input,
                out,
            } => {
                // Row by row: each row's bits are the per-sample kernel's.
                let (Some(lp), Some(g)) = (p.layers.get(layer), window::of(net.model, layer))
                else {
                    continue;
                };
                let (wi, wo) = (width_of(net, input).max(1), width_of(net, out).max(1));
                if let Some((x, z)) = s.io(ops, input, out) {
                    for (x, z) in x.chunks_exact(wi).zip(z.chunks_exact_mut(wo)).take(used) {
                        window::forward(op, lp, &g, x, z)?;
                    }
                }
            }
            Step::WindowBack {
                layer,
                op,
                input,
                err,
                out,
            } => {
                let (Some(lp), Some(g)) = (p.layers.get(layer), window::of(net.model, layer))
                else {
                    continue;
                };
                let (wi, wd) = (width_of(net, input).max(1), width_of(net, err).max(1));
                s.read2_write(ops, input, err, out, |x, d, o| {
                    let rows = x.chunks_exact(wi).zip(d.chunks_exact(wd));
                    for ((x, d), o) in rows.zip(o.chunks_exact_mut(wi)).take(used) {
                        window::backward(op, lp, &g, x, d, o)?;
                    }
                    Ok(())
                })
                .transpose()?;
            }
            Step::OuterAcc { .. } | Step::AddAcc { .. } | Step::WindowAcc { .. } => {}
        }
    }
    Ok(())
}

/// Reusable buffers of [`gradient_into_with`]: the sub-blocks of one block, sized for a model.
///
/// A trainer holds one across steps, so a step allocates nothing. Handed a model of another
/// shape, the buffers are rebuilt for it (never a panic, never a stale size).
#[derive(Debug, Clone)]
pub struct BatchScratch<T> {
    /// Sub-blocks of one block, allocated as the batch sizes need them.
    subs: Vec<SubBlock<T>>,
    /// The working buffers the sub-blocks are sized for.
    shape: Vec<Buffer>,
}

impl<T: Real> BatchScratch<T> {
    /// Buffers for one full block of `model`.
    pub fn new(model: &ir::Model) -> Self {
        let mut s = BatchScratch {
            subs: Vec::new(),
            shape: Vec::new(),
        };
        s.fit(&Plan::new(model), BLOCK / SUB_BLOCK);
        s
    }

    /// At least `count` sub-blocks sized for `plan` (rebuilt if its buffers differ).
    fn fit(&mut self, plan: &Plan, count: usize) -> &mut [SubBlock<T>] {
        if self.shape != plan.buffers {
            self.shape.clone_from(&plan.buffers);
            self.subs.clear();
        }
        while self.subs.len() < count {
            self.subs.push(SubBlock::new(plan));
        }
        &mut self.subs[..count]
    }
}

/// Zeroes `grad`, accumulates the gradient of every sample, finishes it (1/m and penalty) and
/// returns the batch cost J. `None` (and `grad` zero) for an empty batch; [`LengthMismatch`]
/// (and `grad` zero) unless `xs` and `ys` hold the same number of whole samples. Allocates its
/// buffers; [`gradient_into_with`] reuses them.
pub fn gradient_into<T: Real + Send + Sync>(
    net: &Net<'_, T>,
    p: &Params<T>,
    xs: &[T],
    ys: &[T],
    grad: &mut Params<T>,
) -> Result<Option<T>, LengthMismatch> {
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
) -> Result<Option<T>, LengthMismatch> {
    let model = net.model;
    let (n_in, n_out) = (model.input.width, model.output().width);
    grad.clear();
    let m = batch_samples(xs, n_in, Some(ys), n_out)?;
    if n_in == 0 || n_out == 0 || m == 0 {
        return Ok(None);
    }
    let work = model.parameters() * BLOCK;
    let parallel = work >= PARALLEL_MIN_WORK && rayon::current_num_threads() > 1;
    let subs_per_block = BLOCK / SUB_BLOCK;
    let subs = scratch.fit(&net.plan, subs_per_block.min(m.div_ceil(SUB_BLOCK)));
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
            subs.par_iter_mut().enumerate().try_for_each(|(k, sb)| {
                let (x, y) = piece(k);
                deltas(net, p, x, y, sb)
            })?;
        } else {
            for (k, sb) in subs.iter_mut().enumerate() {
                let (x, y) = piece(k);
                deltas(net, p, x, y, sb)?;
            }
        }
        for sb in subs.iter() {
            for &l in &sb.losses[..sb.used] {
                loss_sum += l;
            }
        }
        accumulate(net, grad, xb, subs, parallel)?;
    }
    net.finish(grad, p, m)?;
    Ok(Some(loss_sum / T::from_usize(m) + net.penalty_cost(p, m)))
}

/// The rows of `buf` held by one sub-block (`x`: the sub-block's raw inputs).
fn used_rows<'a, T: Real>(net: &Net<'_, T>, buf: Buf, sb: &'a SubBlock<T>, x: &'a [T]) -> &'a [T] {
    let n = width_of(net, buf) * sb.used;
    let all = match buf {
        Buf::Input => x,
        other => sb.rows.get(other),
    };
    all.get(..n).unwrap_or(&[])
}

/// The accumulation steps of the plan's backprop pass over one block: `G += D^T A` and
/// `g_b += sum d` per layer, the sub-blocks in sample order.
fn accumulate<T: Real + Send + Sync>(
    net: &Net<'_, T>,
    grad: &mut Params<T>,
    xb: &[T],
    subs: &[SubBlock<T>],
    parallel: bool,
) -> Result<(), LengthMismatch> {
    let n_in = net.model.input.width;
    for step in net.plan.backprop.iter().filter(|s| s.accumulates()) {
        match *step {
            Step::OuterAcc { layer, err, input } => {
                let (Some(g), Some(l)) = (grad.layers.get_mut(layer), net.model.layers.get(layer))
                else {
                    continue;
                };
                let (n, o) = (l.fan_in, l.width);
                if n == 0 || o == 0 {
                    continue;
                }
                // This layer's input and error rows of every sub-block, in sample order: a fixed
                // array, neither rebuilt per row nor allocated per layer and block.
                let mut parts = [(&[][..], &[][..]); BLOCK / SUB_BLOCK];
                for (part, (sb, x)) in parts
                    .iter_mut()
                    .zip(subs.iter().zip(xb.chunks(SUB_BLOCK * n_in)))
                {
                    *part = (used_rows(net, input, sb, x), used_rows(net, err, sb, x));
                }
                let rows_of = |first: usize, g_rows: &mut [T]| {
                    for &(a, d) in parts.iter().take(subs.len()) {
                        rt::outer_acc_batch_rows(g_rows, d, a, n, (first, o))?;
                    }
                    Ok(())
                };
                if parallel && o >= 8 {
                    let per_task = o.div_ceil(rayon::current_num_threads() * 2).max(4);
                    g.weights
                        .par_chunks_mut(per_task * n)
                        .enumerate()
                        .try_for_each(|(k, rows)| rows_of(k * per_task, rows))?;
                } else {
                    rows_of(0, &mut g.weights)?;
                }
            }
            Step::WindowAcc {
                layer,
                op,
                err,
                input,
            } => {
                // Sample by sample in order, as the per-sample loop adds them.
                let (Some(lg), Some(g)) =
                    (grad.layers.get_mut(layer), window::of(net.model, layer))
                else {
                    continue;
                };
                let (wi, wd) = (width_of(net, input).max(1), width_of(net, err).max(1));
                for (sb, x) in subs.iter().zip(xb.chunks(SUB_BLOCK * n_in)) {
                    let a = used_rows(net, input, sb, x);
                    let d = used_rows(net, err, sb, x);
                    for (a, d) in a.chunks_exact(wi).zip(d.chunks_exact(wd)) {
                        window::accumulate(op, lg, &g, d, a)?;
                    }
                }
            }
            Step::AddAcc { layer, err } => {
                let Some(g) = grad.layers.get_mut(layer) else {
                    continue;
                };
                for (sb, x) in subs.iter().zip(xb.chunks(SUB_BLOCK * n_in)) {
                    rt::add_acc_batch(&mut g.bias, used_rows(net, err, sb, x))?;
                }
            }
            _ => {}
        }
    }
    Ok(())
}

/// The per-sample reference loop (no threads, no blocks): zero, `backprop` each sample in order,
/// finish. Used by tests to prove [`gradient_into`] equal to it bit for bit. The same lengths
/// as [`gradient_into`].
pub fn gradient_sequential<T: Real>(
    net: &Net<'_, T>,
    p: &Params<T>,
    xs: &[T],
    ys: &[T],
    grad: &mut Params<T>,
) -> Result<Option<T>, LengthMismatch> {
    let model = net.model;
    let (n_in, n_out) = (model.input.width, model.output().width);
    grad.clear();
    let m = batch_samples(xs, n_in, Some(ys), n_out)?;
    if n_in == 0 || n_out == 0 || m == 0 {
        return Ok(None);
    }
    let mut s = Scratch::new(model);
    let mut sum = T::ZERO;
    for (x, y) in xs.chunks_exact(n_in).zip(ys.chunks_exact(n_out)) {
        sum += net.backprop(p, x, y, grad, &mut s)?;
    }
    net.finish(grad, p, m)?;
    Ok(Some(sum / T::from_usize(m) + net.penalty_cost(p, m)))
}

/// J over samples stored row-major (ZERO for an empty batch): per-sample losses computed in
/// parallel, summed in sample order, so the value equals [`Net::cost`] bit for bit. `xs` and
/// `ys` must hold the same number of whole samples.
pub fn cost<T: Real + Send + Sync>(
    net: &Net<'_, T>,
    p: &Params<T>,
    xs: &[T],
    ys: &[T],
) -> Result<T, LengthMismatch> {
    let losses = per_sample(net, p, xs, Some(ys), |net, p, x, y, s| net.loss(p, x, y, s))?;
    let m = losses.len();
    if m == 0 {
        return Ok(T::ZERO);
    }
    let mut sum = T::ZERO;
    for l in losses {
        sum += l;
    }
    Ok(sum / T::from_usize(m) + net.penalty_cost(p, m))
}

/// Network outputs for every sample, row-major. `xs` must hold whole samples.
pub fn predict_all<T: Real + Send + Sync>(
    net: &Net<'_, T>,
    p: &Params<T>,
    xs: &[T],
) -> Result<Vec<T>, LengthMismatch> {
    let n_out = net.model.output().width;
    let rows = per_sample(net, p, xs, None, |net, p, x, _, s| {
        let mut out = vec![T::ZERO; n_out];
        net.predict(p, x, s, &mut out)?;
        Ok(out)
    })?;
    Ok(rows.into_iter().flatten().collect())
}

/// Maps `f` over samples (in parallel for large sets), results in sample order; the first error
/// in sample order is returned. Without `ys` only inputs are passed (and `y` is empty). `xs`
/// (and `ys`) must hold the same number of whole samples.
fn per_sample<T, R, F>(
    net: &Net<'_, T>,
    p: &Params<T>,
    xs: &[T],
    ys: Option<&[T]>,
    f: F,
) -> Result<Vec<R>, LengthMismatch>
where
    T: Real + Send + Sync,
    R: Send,
    F: Fn(&Net<'_, T>, &Params<T>, &[T], &[T], &mut Scratch<T>) -> Result<R, LengthMismatch> + Sync,
{
    let model = net.model;
    let (n_in, n_out) = (model.input.width, model.output().width);
    let m = batch_samples(xs, n_in, ys, n_out)?;
    if n_in == 0 || m == 0 {
        return Ok(Vec::new());
    }
    let xs_rows: Vec<&[T]> = xs.chunks_exact(n_in).collect();
    let ys_rows: Vec<&[T]> = match ys {
        Some(ys) if n_out > 0 => ys.chunks_exact(n_out).collect(),
        _ => vec![&[][..]; xs_rows.len()],
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
                    .collect::<Vec<_>>()
            })
            .collect::<Vec<_>>()
            .into_iter()
            .collect()
    } else {
        let mut s = Scratch::new(model);
        pairs.iter().map(|(x, y)| f(net, p, x, y, &mut s)).collect()
    }
}
