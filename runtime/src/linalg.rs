//! Dense linear algebra for fully connected layers: the public kernels, their contract, and the
//! dispatch to their fast paths.
//!
//! Weights are row-major: row `j` holds the weights into unit `j` of the next layer, so a layer
//! with fan-in `n` and width `o` stores `w[j*n + i]` for `j < o`, `i < n`.
//!
//! The contract of every kernel (formula and order of additions) is its plain loop in
//! [`crate::reference`]; the kernels here give the same bits, by construction and by the tests
//! (`linalg/tests.rs`, over sweeps of sizes). The only order that is not one running sum is the
//! dot product of [`affine`]: [`LANES`] partial sums folded by [`fold_lanes`], the one place
//! that order is written.
//!
//! Each kernel is written once over slices (the form the host engine calls, which checks the
//! lengths first) and has a thin const-generic array wrapper (the form generated code calls) that
//! runs the same kernel, so both perform the same operations in the same order and give identical
//! bits.
//!
//! Lengths: the slice forms check every operand's length before they write anything and return
//! [`LengthMismatch`] when one disagrees (never a panic, never a truncation); the array forms
//! take operands whose types fix their lengths, and return nothing. The batch array forms pair
//! the rows of their sample operands by `zip`, as many samples as the shorter one holds.
//!
//! The fast paths, by concern (each a speed choice only, none changes a bit):
//! - `sample`: the per-sample kernels (lane sums as fixed arrays, four rows per pass);
//! - `batch`: a block of samples row by row, each weight tile read once per block;
//! - `across`: rows of at most 16 inputs or outputs, eight samples side by side, one per SIMD
//!   lane (the crate-private `block` module).
//!
//! The per-sample kernels are `#[inline(always)]` so that the constant sizes of generated code
//! reach them.

use crate::each::{pieces, pieces_mut};
use crate::shape::{self, LengthMismatch};
use crate::Real;
use batch::{affine_batch_with, outer_acc_batch_with, PAIRED};
use sample::{add_acc_rows, affine_with, back_rows, back_with, outer_acc_rows, outer_acc_with};

mod across;
mod batch;
mod sample;
#[cfg(test)]
mod tests;

pub(crate) use sample::padded;

/// Lanes of the dot-product accumulators of [`affine`]: product `i` of a row goes to lane
/// `i % LANES`. Part of the order of arithmetic (it decides the bits of every `affine` result).
pub const LANES: usize = 8;

/// THE fold order of the [`LANES`] partial sums of a dot product (the one definition; the
/// reference, the fast paths and the emitter's unrolled code all call it):
///
/// `((l0 + l4) + (l2 + l6)) + ((l1 + l5) + (l3 + l7))`
///
/// that is, widths 8 -> 4 -> 2 -> 1, each step adding lane `i + width` to lane `i`: first
/// `h_i = l_i + l_(i+4)` for `i = 0..4`, then `q_i = h_i + h_(i+2)` for `i = 0..2`, then
/// `q_0 + q_1`. `add` is called in exactly that order (seven calls), so `V` may be a number, a
/// vector of samples or a piece of generated code.
///
/// Why this shape: it is a SIMD horizontal sum (halves folded onto each other), so vector units
/// and pipelined scalar adders both follow it at full speed.
///
/// # Examples
///
/// ```
/// use sinew_runtime::linalg::fold_lanes;
///
/// let l = [1.0_f64, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0];
/// assert_eq!(fold_lanes(l, |a, b| a + b), ((1.0 + 5.0) + (3.0 + 7.0)) + ((2.0 + 6.0) + (4.0 + 8.0)));
/// let text = fold_lanes(["a", "b", "c", "d", "e", "f", "g", "h"].map(String::from), |a, b| {
///     format!("({a} + {b})")
/// });
/// assert_eq!(text, "(((a + e) + (c + g)) + ((b + f) + (d + h)))");
/// ```
#[inline(always)]
pub fn fold_lanes<V>(lanes: [V; LANES], mut add: impl FnMut(V, V) -> V) -> V {
    let [l0, l1, l2, l3, l4, l5, l6, l7] = lanes;
    // Width 8 -> 4.
    let h0 = add(l0, l4);
    let h1 = add(l1, l5);
    let h2 = add(l2, l6);
    let h3 = add(l3, l7);
    // Width 4 -> 2.
    let q0 = add(h0, h2);
    let q1 = add(h1, h3);
    // Width 2 -> 1.
    add(q0, q1)
}

/// Rows of `W` that [`affine`] and [`back`] process together (reuse of each input load; it does not
/// change any result).
const ROWS: usize = 4;

/// Fan-in below which the array forms ([`affine_n`], [`affine_batch_n`]) fold the lanes inline
/// rather than by a call: rows this short have no loop to vectorise, and a call per output is the
/// largest cost of a small layer (`bench/NOTES.md`, `linalg::INLINE_FOLD_BELOW`). A speed choice
/// only: both give the same bits.
const INLINE_FOLD_BELOW: usize = 2 * LANES + 1;

/// Whether [`affine_batch_n`] and [`back_batch_n`] run rows of fewer than 17 inputs (outputs)
/// across samples (see `across`). A speed choice only: both paths give the same bits.
const ACROSS: bool = true;

/// Affine map of a dense layer: `z_j = (sum_i w[j*n + i] * x_i) + b_j`, with `n = x.len()`.
///
/// Order (the bits of the result depend on it; the unrolled code the emitter writes follows it
/// too), that of [`crate::reference::affine`]: each row keeps [`LANES`] = 8 partial sums `l_k`,
/// all starting at `ZERO`; product `w[j*n+i] * x_i` is added to `l_(i mod 8)`, in increasing `i`.
/// The row's sum is then [`fold_lanes`]`(l)` =
/// `((l0 + l4) + (l2 + l6)) + ((l1 + l5) + (l3 + l7))`, and `z_j = s + b_j`. (Eight independent
/// sums let the compiler use SIMD lanes and keep several additions in flight; the order is fixed
/// in the source, so every target and every build gives the same bits.) Lengths: `o = b.len()`
/// rows; `w` must hold `n * o` values and `z` hold `o`, else [`LengthMismatch`] and nothing is
/// written. With `n = 0` every row is empty and `z_j = ZERO + b_j`.
///
/// Contract: [`crate::reference::affine`], bit for bit.
///
/// # Examples
///
/// ```
/// // 2 inputs -> 3 units.
/// let w = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0];
/// let b = [0.5, -0.5, 0.0];
/// let mut z = [0.0; 3];
/// sinew_runtime::affine(&w, &b, &[1.0, -1.0], &mut z)?;
/// assert_eq!(z, [-0.5, -1.5, -1.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline(always)]
pub fn affine<T: Real>(w: &[T], b: &[T], x: &[T], z: &mut [T]) -> Result<(), LengthMismatch> {
    shape::affine(w, b, x, z)?;
    affine_kernel(w, b, x, z);
    Ok(())
}

/// The loop of [`affine`], on operands whose lengths agree.
#[inline(always)]
fn affine_kernel<T: Real>(w: &[T], b: &[T], x: &[T], z: &mut [T]) {
    // Short rows (fan-in 1 to 16, known here only at run time): a kernel for each fan-in, with
    // its lane folds inline, as the array form runs them. Same operations, same bits.
    by_length_1_to_16!(x.len(), K => {
        if let Ok(x) = <&[T; K]>::try_from(x) {
            // A copy in registers: a store to `z` cannot change it, so it is not reloaded for
            // every row.
            let x = *x;
            affine_with::<T, true>(w, b, &x, z);
        }
    }, _ => affine_with::<T, false>(w, b, x, z));
}

/// Array form of [`affine`]: `z = W x + b` for `W` of `O` rows and `I` columns.
///
/// Runs the kernel of `affine(w.as_flattened(), b, x, z)` (with the lane folds inline for fewer
/// than 17 inputs): same operations, same order, same bits.
///
/// # Examples
///
/// ```
/// let w = [[1.0_f32, 0.0], [0.0, 1.0], [1.0, 1.0]];
/// let mut z = [0.0; 3];
/// sinew_runtime::affine_n(&w, &[0.0, 0.0, 1.0], &[2.0, 3.0], &mut z);
/// assert_eq!(z, [2.0, 3.0, 6.0]);
/// ```
#[inline]
pub fn affine_n<T: Real, const I: usize, const O: usize>(
    w: &[[T; I]; O],
    b: &[T; O],
    x: &[T; I],
    z: &mut [T; O],
) {
    if I < INLINE_FOLD_BELOW {
        affine_with::<T, true>(w.as_flattened(), b, x, z);
    } else {
        affine_with::<T, false>(w.as_flattened(), b, x, z);
    }
}

/// Transposed matrix-vector product (the error sent back through a layer):
/// `out_i = sum_j w[j*n + i] * d_j`, with `n = out.len()`.
///
/// Order: every `out_i` is set to `ZERO`, then for `j` in increasing order the products
/// `w[j*n+i] * d_j` are added, so each `out_i` is summed in increasing `j` starting from `ZERO`.
/// Lengths: `o = d.len()` rows; `w` must hold `n * o` values, else [`LengthMismatch`] and
/// nothing is written. With `n = 0` there is nothing to write.
///
/// Contract: [`crate::reference::back`], bit for bit.
///
/// # Examples
///
/// ```
/// // 2 inputs -> 3 units; the error of the 3 units goes back to the 2 inputs.
/// let w = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0];
/// let mut out = [9.0; 2];
/// sinew_runtime::back(&w, &[1.0, 0.0, -1.0], &mut out)?;
/// assert_eq!(out, [1.0 - 5.0, 2.0 - 6.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline(always)]
pub fn back<T: Real>(w: &[T], d: &[T], out: &mut [T]) -> Result<(), LengthMismatch> {
    shape::matrix("w", w, d, out.len())?;
    back_kernel(w, d, out);
    Ok(())
}

/// The loop of [`back`], on operands whose lengths agree.
#[inline(always)]
fn back_kernel<T: Real>(w: &[T], d: &[T], out: &mut [T]) {
    // Narrow outputs (1 to 16, known here only at run time): a kernel for each width, so that
    // each row is a fixed-size vector operation. Same operations, same bits.
    by_length_1_to_16!(out.len(), K => {
        if let Ok(out) = <&mut [T; K]>::try_from(&mut *out) {
            back_rows(w, d, out);
        }
    }, _ => back_with(w, d, out));
}

/// Array form of [`back`]: `out = W^T d` for `W` of `O` rows and `I` columns.
///
/// Runs the kernel of `back(w.as_flattened(), d, out)`: same operations, same order, same bits.
///
/// # Examples
///
/// ```
/// let w = [[1.0_f64, 2.0], [3.0, 4.0], [5.0, 6.0]];
/// let mut out = [0.0; 2];
/// sinew_runtime::back_n(&w, &[1.0, 1.0, 1.0], &mut out);
/// assert_eq!(out, [9.0, 12.0]);
/// ```
#[inline]
pub fn back_n<T: Real, const I: usize, const O: usize>(
    w: &[[T; I]; O],
    d: &[T; O],
    out: &mut [T; I],
) {
    back_kernel(w.as_flattened(), d, out);
}

/// Outer-product accumulate (the weight gradient of one sample): `g[j*n + i] += d_j * a_i`, with
/// `n = a.len()`.
///
/// Each element receives exactly one addition, `g + (d_j * a_i)`. Lengths: `o = d.len()` rows;
/// `g` must hold `n * o` values, else [`LengthMismatch`] and nothing is written. With `n = 0`
/// there is nothing to write.
///
/// Contract: [`crate::reference::outer_acc`], bit for bit.
///
/// # Examples
///
/// ```
/// let mut g = [1.0; 6]; // 3 rows of 2
/// sinew_runtime::outer_acc(&mut g, &[1.0, 2.0, 3.0], &[10.0, 20.0])?;
/// assert_eq!(g, [11.0, 21.0, 21.0, 41.0, 31.0, 61.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline(always)]
pub fn outer_acc<T: Real>(g: &mut [T], d: &[T], a: &[T]) -> Result<(), LengthMismatch> {
    shape::matrix("g", g, d, a.len())?;
    outer_acc_kernel(g, d, a);
    Ok(())
}

/// The loop of [`outer_acc`], on operands whose lengths agree.
#[inline(always)]
fn outer_acc_kernel<T: Real>(g: &mut [T], d: &[T], a: &[T]) {
    // Short rows (1 to 16 columns, known here only at run time): a kernel for each length, so
    // that each row is a fixed-size vector operation. Same operations, same bits.
    by_length_1_to_16!(a.len(), K => {
        if let Ok(a) = <&[T; K]>::try_from(a) {
            outer_acc_rows(g, d, *a);
        }
    }, _ => outer_acc_with(g, d, a));
}

/// Array form of [`outer_acc`]: `G += d a^T` for `G` of `O` rows and `I` columns.
///
/// Runs the kernel of `outer_acc(g.as_flattened_mut(), d, a)`: same operations, same bits.
///
/// # Examples
///
/// ```
/// let mut g = [[0.0_f32; 2]; 2];
/// sinew_runtime::outer_acc_n(&mut g, &[1.0, -1.0], &[2.0, 3.0]);
/// assert_eq!(g, [[2.0, 3.0], [-2.0, -3.0]]);
/// ```
#[inline]
pub fn outer_acc_n<T: Real, const I: usize, const O: usize>(
    g: &mut [[T; I]; O],
    d: &[T; O],
    a: &[T; I],
) {
    outer_acc_kernel(g.as_flattened_mut(), d, a);
}

/// Vector accumulate (the bias gradient of one sample): `g_j += d_j`, `d` as long as `g` (else
/// [`LengthMismatch`] and nothing is written). It is [`crate::reference::add_acc`] itself (one
/// addition per element: nothing to speed up). Array form: [`add_acc_n`].
///
/// # Examples
///
/// ```
/// let mut g = [1.0, 2.0];
/// sinew_runtime::add_acc(&mut g, &[0.5, 0.25])?;
/// assert_eq!(g, [1.5, 2.25]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline(always)]
pub fn add_acc<T: Real>(g: &mut [T], d: &[T]) -> Result<(), LengthMismatch> {
    shape::expect("d", g.len(), d.len())?;
    add_acc_kernel(g, d);
    Ok(())
}

/// The loop of [`add_acc`], on operands whose lengths agree.
#[inline(always)]
fn add_acc_kernel<T: Real>(g: &mut [T], d: &[T]) {
    crate::reference::add_acc_kernel(g, d);
}

/// Array form of [`add_acc`]: `g += d` for vectors of `N` values.
///
/// Runs the kernel of `add_acc(g, d)`: same operations, same bits.
///
/// # Examples
///
/// ```
/// let mut g = [1.0_f32, 2.0];
/// sinew_runtime::add_acc_n(&mut g, &[0.5, 0.25]);
/// assert_eq!(g, [1.5, 2.25]);
/// ```
#[inline(always)]
pub fn add_acc_n<T: Real, const N: usize>(g: &mut [T; N], d: &[T; N]) {
    add_acc_kernel(g, d);
}

/// Input scaling: `out_i = (x_i - mean_i) / std_i`, the four slices of one length (else
/// [`LengthMismatch`] and nothing is written).
///
/// It divides (it does not multiply by a stored reciprocal), so a `std_i` of 1 leaves the centred
/// value exact. It is [`crate::reference::standardize`] itself.
///
/// # Examples
///
/// ```
/// let mut out = [0.0; 2];
/// sinew_runtime::standardize(&[3.0, 10.0], &[1.0, 10.0], &[2.0, 4.0], &mut out)?;
/// assert_eq!(out, [1.0, 0.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
pub fn standardize<T: Real>(
    x: &[T],
    mean: &[T],
    std: &[T],
    out: &mut [T],
) -> Result<(), LengthMismatch> {
    let n = x.len();
    shape::expect("mean", n, mean.len())?;
    shape::expect("std", n, std.len())?;
    shape::expect("out", n, out.len())?;
    standardize_kernel(x, mean, std, out);
    Ok(())
}

/// The loop of [`standardize`], on operands whose lengths agree.
fn standardize_kernel<T: Real>(x: &[T], mean: &[T], std: &[T], out: &mut [T]) {
    crate::reference::standardize_kernel(x, mean, std, out);
}

/// Array form of [`standardize`]: `out = (x - mean) ./ std`.
///
/// Runs the kernel of `standardize(x, mean, std, out)`: same operations, same bits.
///
/// # Examples
///
/// ```
/// let mut out = [0.0_f32; 3];
/// sinew_runtime::standardize_n(&[1.0, 2.0, 3.0], &[2.0; 3], &[0.5; 3], &mut out);
/// assert_eq!(out, [-2.0, 0.0, 2.0]);
/// ```
#[inline]
pub fn standardize_n<T: Real, const N: usize>(
    x: &[T; N],
    mean: &[T; N],
    std: &[T; N],
    out: &mut [T; N],
) {
    standardize_kernel(x, mean, std, out);
}

/// Batch form of [`affine`]: for every sample `s`, `z_s = W x_s + b`, bit for bit the result of
/// `affine(w, b, x_s, z_s)`.
///
/// The `m` samples are the rows of `n` of `xs` and the rows of `o = b.len()` of `zs` (row-major
/// blocks of samples): `w` must hold `n * o` values, `xs` `m * n` and `zs` `m * o`, else
/// [`LengthMismatch`] and nothing is written. Each group of four rows of `W` is applied to every sample before the next
/// group is read, so a large matrix travels from memory once per call rather than once per sample;
/// the arithmetic of each output is exactly that of [`affine`]. With `n = 0` every output row is
/// `ZERO + b` (as [`affine`] with an empty input).
///
/// Contract: [`crate::reference::affine_batch`], bit for bit.
///
/// # Examples
///
/// ```
/// let w = [1.0, 2.0, 3.0, 4.0]; // 2 inputs -> 2 units
/// let xs = [1.0, 0.0, 0.0, 1.0]; // two samples
/// let mut zs = [0.0; 4];
/// sinew_runtime::linalg::affine_batch(&w, &[0.5, 0.5], &xs, &mut zs, 2)?;
/// assert_eq!(zs, [1.5, 3.5, 2.5, 4.5]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline(always)]
pub fn affine_batch<T: Real>(
    w: &[T],
    b: &[T],
    xs: &[T],
    zs: &mut [T],
    n: usize,
) -> Result<(), LengthMismatch> {
    shape::affine_batch(w, b, xs, zs, n)?;
    affine_batch_kernel(w, b, xs, zs, n);
    Ok(())
}

/// The loop of [`affine_batch`], on operands whose lengths agree.
#[inline(always)]
fn affine_batch_kernel<T: Real>(w: &[T], b: &[T], xs: &[T], zs: &mut [T], n: usize) {
    let o = b.len();
    // Short rows: whole blocks of samples with one sample per SIMD lane (a kernel for each
    // fan-in from 1 to 16), the rest below.
    let done = if ACROSS && o > 0 && w.len() == n * o {
        by_length_1_to_16!(n, K => across::affine_blocks::<T, K>(
            w.as_chunks::<K>().0,
            b,
            xs.as_chunks::<K>().0,
            zs,
        ), _ => 0)
    } else {
        0
    };
    let xs = xs.get(done * n..).unwrap_or_default();
    let zs = zs.get_mut(done * o..).unwrap_or_default();
    affine_batch_with::<T, false, PAIRED>(w, b, xs, zs, n);
}

/// Array form of [`affine_batch`]: `zs[s] = W xs[s] + b` for every pair of `xs` and `zs`.
///
/// Runs the kernel of `affine_batch(w.as_flattened(), b, xs.as_flattened(), zs.as_flattened_mut(),
/// I)` (lane folds inline for fewer than 17 inputs): same operations, same bits.
///
/// # Examples
///
/// ```
/// let w = [[1.0_f32, 0.0], [0.0, 1.0]];
/// let mut zs = [[0.0; 2]; 2];
/// sinew_runtime::linalg::affine_batch_n(&w, &[1.0, 1.0], &[[1.0, 2.0], [3.0, 4.0]], &mut zs);
/// assert_eq!(zs, [[2.0, 3.0], [4.0, 5.0]]);
/// ```
#[inline]
pub fn affine_batch_n<T: Real, const I: usize, const O: usize>(
    w: &[[T; I]; O],
    b: &[T; O],
    xs: &[[T; I]],
    zs: &mut [[T; O]],
) {
    // Short rows: whole blocks of samples with one sample per SIMD lane, the rest below.
    let done = if ACROSS && I > 0 && I < INLINE_FOLD_BELOW {
        across::affine_blocks(w.as_slice(), b, xs, zs.as_flattened_mut())
    } else {
        0
    };
    let xs = xs.get(done..).unwrap_or_default();
    let zs = zs.get_mut(done..).unwrap_or_default();
    let (w, xs, zs) = (w.as_flattened(), xs.as_flattened(), zs.as_flattened_mut());
    if I < INLINE_FOLD_BELOW {
        affine_batch_with::<T, true, PAIRED>(w, b, xs, zs, I);
    } else {
        affine_batch_with::<T, false, PAIRED>(w, b, xs, zs, I);
    }
}

/// Batch form of [`back`]: for every sample `s`, `out_s = W^T d_s`, bit for bit the result of
/// `back(w, d_s, out_s)`.
///
/// `W` has `n` columns and `o = w.len() / n` whole rows; the `m` samples are the rows of `o` of
/// `ds` and of `n` of `outs` (`m * o` and `m * n` values), else [`LengthMismatch`] and nothing is
/// written. With `n = 0` (then `w` and `outs` must be empty; `ds` is not checked) or `o = 0`
/// nothing is written.
///
/// Contract: [`crate::reference::back_batch`], bit for bit.
///
/// # Examples
///
/// ```
/// let w = [1.0, 2.0, 3.0, 4.0]; // 2 inputs -> 2 units
/// let mut outs = [0.0; 4];
/// sinew_runtime::linalg::back_batch(&w, &[1.0, 0.0, 0.0, 1.0], &mut outs, 2)?;
/// assert_eq!(outs, [1.0, 2.0, 3.0, 4.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline(always)]
pub fn back_batch<T: Real>(
    w: &[T],
    ds: &[T],
    outs: &mut [T],
    n: usize,
) -> Result<(), LengthMismatch> {
    shape::batch_of_rows(("w", w), ds, ("outs", outs), n)?;
    back_batch_kernel(w, ds, outs, n);
    Ok(())
}

/// The loop of [`back_batch`], on operands whose lengths agree.
#[inline(always)]
fn back_batch_kernel<T: Real>(w: &[T], ds: &[T], outs: &mut [T], n: usize) {
    if n == 0 {
        return;
    }
    let o = w.len() / n;
    if o == 0 {
        return;
    }
    // Narrow outputs: whole blocks of samples with one sample per SIMD lane (a kernel for each
    // width from 1 to 16), the rest below.
    let done = if ACROSS && w.len() == n * o {
        by_length_1_to_16!(n, K => across::back_blocks::<T, K>(
            w.as_chunks::<K>().0,
            ds,
            o,
            outs.as_chunks_mut::<K>().0,
        ), _ => 0)
    } else {
        0
    };
    let ds = ds.get(done * o..).unwrap_or_default();
    let outs = outs.get_mut(done * n..).unwrap_or_default();
    for (d, out) in pieces(ds, o).zip(pieces_mut(outs, n)) {
        back_kernel(w, d, out);
    }
}

/// Array form of [`back_batch`]: `outs[s] = W^T ds[s]` for every pair of `ds` and `outs`.
///
/// # Examples
///
/// ```
/// let w = [[1.0_f64, 2.0], [3.0, 4.0]];
/// let mut outs = [[0.0; 2]; 1];
/// sinew_runtime::linalg::back_batch_n(&w, &[[1.0, 1.0]], &mut outs);
/// assert_eq!(outs, [[4.0, 6.0]]);
/// ```
#[inline]
pub fn back_batch_n<T: Real, const I: usize, const O: usize>(
    w: &[[T; I]; O],
    ds: &[[T; O]],
    outs: &mut [[T; I]],
) {
    // Narrow outputs: whole blocks of samples with one sample per SIMD lane, the rest below.
    let done = if ACROSS && I > 0 && I < INLINE_FOLD_BELOW && O > 0 {
        across::back_blocks(w.as_slice(), ds.as_flattened(), O, outs)
    } else {
        0
    };
    back_batch_kernel(
        w.as_flattened(),
        ds.get(done..).unwrap_or_default().as_flattened(),
        outs.get_mut(done..).unwrap_or_default().as_flattened_mut(),
        I,
    );
}

/// Batch form of [`outer_acc`]: `G += sum_s d_s a_s^T`, bit for bit the result of calling
/// `outer_acc(g, d_s, a_s)` for every sample in order.
///
/// `G` has `n` columns and `o = g.len() / n` whole rows; the `m` samples are the rows of `o` of
/// `ds` and of `n` of `xs` (`m * o` and `m * n` values), else [`LengthMismatch`] and nothing is
/// written (with `n = 0`, `g` and `xs` must be empty and `ds` is not checked). Order: every element receives the additions
/// `g + d_sj * a_si` of the samples in increasing `s`, exactly as the per-sample loop does. The
/// work runs tile by tile (four rows by up to sixteen columns of `G` held in registers while all
/// the samples pass), so `G` is read and written once per call instead of once per sample. With
/// `n = 0` or `o = 0` nothing is written.
///
/// Contract: [`crate::reference::outer_acc_batch`], bit for bit.
///
/// # Examples
///
/// ```
/// let mut g = [0.0; 2]; // 1 unit, 2 inputs
/// sinew_runtime::linalg::outer_acc_batch(&mut g, &[1.0, 2.0], &[1.0, 10.0, 3.0, 30.0], 2)?;
/// assert_eq!(g, [7.0, 70.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline(always)]
pub fn outer_acc_batch<T: Real>(
    g: &mut [T],
    ds: &[T],
    xs: &[T],
    n: usize,
) -> Result<(), LengthMismatch> {
    shape::batch_of_rows(("g", g), ds, ("xs", xs), n)?;
    outer_acc_batch_kernel(g, ds, xs, n);
    Ok(())
}

/// The loop of [`outer_acc_batch`], on operands whose lengths agree.
#[inline(always)]
fn outer_acc_batch_kernel<T: Real>(g: &mut [T], ds: &[T], xs: &[T], n: usize) {
    if n == 0 {
        return;
    }
    let o = g.len() / n;
    outer_acc_batch_rows_kernel(g, ds, xs, n, (0, o));
}

/// Part of [`outer_acc_batch`] for splitting the work between threads: `g` holds the rows
/// `first..first + g.len() / n` of a gradient with `o` rows in all (`rows = (first, o)`), and
/// receives exactly the additions that [`outer_acc_batch`] on the whole gradient gives those
/// rows. Lengths: `g` holds whole rows of `n`, at most `o - first` of them; the `m` samples are
/// the full rows of `o` of `ds` and of `n` of `xs`; else [`LengthMismatch`] and nothing is
/// written. Nothing is written for `n = 0` or `o = 0`.
///
/// Contract: [`crate::reference::outer_acc_batch_rows`], bit for bit.
///
/// # Examples
///
/// ```
/// // One sample: 2 units, 1 input. The second row alone gets what the whole gives it.
/// let (ds, xs) = ([1.0, 2.0], [3.0]);
/// let mut whole = [0.0; 2];
/// sinew_runtime::linalg::outer_acc_batch(&mut whole, &ds, &xs, 1)?;
/// let mut second = [0.0; 1];
/// sinew_runtime::linalg::outer_acc_batch_rows(&mut second, &ds, &xs, 1, (1, 2))?;
/// assert_eq!(second[0], whole[1]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline(always)]
pub fn outer_acc_batch_rows<T: Real>(
    g: &mut [T],
    ds: &[T],
    xs: &[T],
    n: usize,
    (first, o): (usize, usize),
) -> Result<(), LengthMismatch> {
    shape::outer_acc_batch_rows(g, ds, xs, n, (first, o))?;
    outer_acc_batch_rows_kernel(g, ds, xs, n, (first, o));
    Ok(())
}

/// The loop of [`outer_acc_batch_rows`], on operands whose lengths agree.
#[inline(always)]
fn outer_acc_batch_rows_kernel<T: Real>(
    g: &mut [T],
    ds: &[T],
    xs: &[T],
    n: usize,
    (first, o): (usize, usize),
) {
    outer_acc_batch_with(g, ds, xs, n, (first, o));
}

/// Array form of [`outer_acc_batch`]: `G += sum_s ds[s] xs[s]^T`, samples in order.
///
/// # Examples
///
/// ```
/// let mut g = [[0.0_f32; 2]; 1];
/// sinew_runtime::linalg::outer_acc_batch_n(&mut g, &[[1.0], [2.0]], &[[1.0, 10.0], [3.0, 30.0]]);
/// assert_eq!(g, [[7.0, 70.0]]);
/// ```
#[inline]
pub fn outer_acc_batch_n<T: Real, const I: usize, const O: usize>(
    g: &mut [[T; I]; O],
    ds: &[[T; O]],
    xs: &[[T; I]],
) {
    outer_acc_batch_kernel(
        g.as_flattened_mut(),
        ds.as_flattened(),
        xs.as_flattened(),
        I,
    );
}

/// Batch form of [`add_acc`]: `g += sum_s d_s`, adding the rows of `g.len()` of `ds` in order,
/// bit for bit the per-sample loop. `ds` must hold a whole number of rows, else
/// [`LengthMismatch`] and nothing is written. With an empty `g` (and `ds`) nothing is written.
/// Array form: [`add_acc_batch_n`].
///
/// Contract: [`crate::reference::add_acc_batch`], bit for bit.
///
/// # Examples
///
/// ```
/// let mut g = [0.0, 1.0];
/// sinew_runtime::linalg::add_acc_batch(&mut g, &[1.0, 2.0, 3.0, 4.0])?;
/// assert_eq!(g, [4.0, 7.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline(always)]
pub fn add_acc_batch<T: Real>(g: &mut [T], ds: &[T]) -> Result<(), LengthMismatch> {
    shape::samples(&[("ds", ds.len(), g.len())])?;
    add_acc_batch_kernel(g, ds);
    Ok(())
}

/// The loop of [`add_acc_batch`], on operands whose lengths agree.
#[inline(always)]
fn add_acc_batch_kernel<T: Real>(g: &mut [T], ds: &[T]) {
    if g.is_empty() {
        return;
    }
    // Short rows (1 to 16, known here only at run time): the sums in registers, stored once.
    by_length_1_to_16!(g.len(), K => {
        if let Ok(g) = <&mut [T; K]>::try_from(&mut *g) {
            add_acc_rows(g, ds);
        }
    }, _ => {
        for d in pieces(ds, g.len()) {
            add_acc_kernel(g, d);
        }
    });
}

/// Array form of [`add_acc_batch`]: `g += sum_s ds[s]` for rows of `N` values, in order.
///
/// Runs the kernel of `add_acc_batch(g, ds.as_flattened())`: same operations, same bits.
///
/// # Examples
///
/// ```
/// let mut g = [0.0_f64, 1.0];
/// sinew_runtime::linalg::add_acc_batch_n(&mut g, &[[1.0, 2.0], [3.0, 4.0]]);
/// assert_eq!(g, [4.0, 7.0]);
/// ```
#[inline(always)]
pub fn add_acc_batch_n<T: Real, const N: usize>(g: &mut [T; N], ds: &[[T; N]]) {
    add_acc_batch_kernel(g, ds.as_flattened());
}
