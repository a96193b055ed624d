//! The batch gradient over many samples, multi-threaded and deterministic.
//!
//! Samples are taken in fixed blocks of [`BLOCK`]. Within a block, each sample's forward pass
//! and error terms are computed independently (in parallel); then the block's contributions are
//! added into the gradient in parallel over gradient rows, each row adding the samples in their
//! original order with the runtime's `outer_acc` / `add_acc`. Every gradient element therefore
//! sees exactly the sequence of additions of the sequential per-sample loop (and of the generated
//! `Trainer::step`): the result is bit-identical whatever the number of threads.

use super::{Net, Params, Scratch};
use rayon::prelude::*;
use sinew_runtime::{self as rt, Real};

/// One sample's input and target.
type Sample<'a, T> = (&'a [T], &'a [T]);

/// Samples per block: bounds the memory of stored activations and error terms.
pub const BLOCK: usize = 64;

/// Below this many multiply-adds per block the work runs on the calling thread (the result is
/// the same either way; threads only pay for larger blocks).
const PARALLEL_MIN_WORK: usize = 1 << 16;

/// Zeroes `grad`, accumulates the gradient of every sample, finishes it (1/m and penalty) and
/// returns the batch cost J. `None` (and `grad` zero) for an empty batch.
pub fn gradient_into<T: Real + Send + Sync>(
    net: &Net<'_, T>,
    p: &Params<T>,
    xs: &[T],
    ys: &[T],
    grad: &mut Params<T>,
) -> Option<T> {
    let model = net.model;
    let (n_in, n_out) = (model.input.width, model.output().width);
    grad.clear();
    let samples: Vec<(&[T], &[T])> = xs.chunks_exact(n_in).zip(ys.chunks_exact(n_out)).collect();
    let m = samples.len();
    if m == 0 {
        return None;
    }
    let work = model.parameters() * BLOCK;
    let parallel = work >= PARALLEL_MIN_WORK && rayon::current_num_threads() > 1;
    let mut scratch: Vec<Scratch<T>> = (0..BLOCK.min(m)).map(|_| Scratch::new(model)).collect();
    let mut losses: Vec<T> = vec![T::ZERO; BLOCK.min(m)];
    let mut loss_sum = T::ZERO;
    for block in samples.chunks(BLOCK) {
        let used = block.len();
        let (sc, ls) = (&mut scratch[..used], &mut losses[..used]);
        let one = |((s, l), (x, y)): ((&mut Scratch<T>, &mut T), &Sample<'_, T>)| {
            *l = net.deltas(p, x, y, s);
        };
        if parallel {
            sc.par_iter_mut()
                .zip(ls.par_iter_mut())
                .zip(block.par_iter())
                .for_each(one);
        } else {
            sc.iter_mut()
                .zip(ls.iter_mut())
                .zip(block.iter())
                .for_each(one);
        }
        for &l in ls.iter() {
            loss_sum += l;
        }
        accumulate(net, grad, block, sc, parallel);
    }
    net.finish(grad, p, m);
    Some(loss_sum / T::from_usize(m) + net.penalty_cost(p, m))
}

fn accumulate<T: Real + Send + Sync>(
    net: &Net<'_, T>,
    grad: &mut Params<T>,
    block: &[Sample<'_, T>],
    scratch: &[Scratch<T>],
    parallel: bool,
) {
    for (l, g) in grad.layers.iter_mut().enumerate() {
        let n = net.model.layers.get(l).map_or(0, |layer| layer.fan_in);
        if n == 0 {
            continue;
        }
        let row = |(j, (w_row, b)): (usize, (&mut [T], &mut T))| {
            for ((x, _), s) in block.iter().zip(scratch) {
                let Some(d) = s.d.get(l).and_then(|d| d.get(j..j + 1)) else {
                    continue;
                };
                rt::outer_acc(w_row, d, net.layer_input(x, s, l));
                rt::add_acc(core::slice::from_mut(b), d);
            }
        };
        if parallel {
            g.weights
                .par_chunks_mut(n)
                .zip(g.bias.par_iter_mut())
                .enumerate()
                .for_each(row);
        } else {
            g.weights
                .chunks_mut(n)
                .zip(g.bias.iter_mut())
                .enumerate()
                .for_each(row);
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
