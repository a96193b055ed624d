//! The arithmetic contract: one portable, plain-loop kernel per reduction, written for reading.
//!
//! Every kernel of [`crate::linalg`], [`crate::loss`] and [`crate::act`] that adds several
//! values gives, bit for bit, the result of its namesake here (every value but NaN, whose sign
//! and payload Rust leaves unspecified). The fast paths are tested against these functions over
//! sweeps of sizes; the generated code and the host engine call the fast paths, so these loops
//! are what a device and a workstation agree on. Each doc states the formula and the exact order
//! of the additions; one screen per kernel.
//!
//! Conventions of the whole module:
//! - every sum starts at `ZERO` (`+0`) and adds in increasing index, except the dot product of
//!   [`affine`], which keeps [`LANES`] partial sums folded by [`fold_lanes`];
//! - no fused multiply-add: `a + b * c` is a rounded product, then a rounded sum;
//! - lengths: every operand's length is checked before anything is written, by the rules of
//!   the fast kernels ([`crate::shape`]); a disagreement returns [`LengthMismatch`] and leaves
//!   the outputs untouched, never a truncated result. The loops then pair operands with `zip`
//!   (and cut rows with [`crate::each`]'s pieces), on lengths that agree;
//! - no panicking path: only `zip`, `get` and fixed-size patterns.
//!
//! # Examples
//!
//! ```
//! use sinew_runtime::{affine, reference};
//!
//! let w = [0.1_f32, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0];
//! let x = [1.0, -2.0, 3.0, -4.0, 5.0, -6.0, 7.0, -8.0, 9.0, -10.0];
//! let (mut fast, mut plain) = ([0.0; 1], [0.0; 1]);
//! affine(&w, &[0.5], &x, &mut fast)?;
//! reference::affine(&w, &[0.5], &x, &mut plain)?;
//! assert_eq!(fast[0].to_bits(), plain[0].to_bits());
//! # Ok::<(), sinew_runtime::LengthMismatch>(())
//! ```

use crate::each::{pieces, pieces_mut};
pub use crate::linalg::{fold_lanes, LANES};
use crate::shape::{self, LengthMismatch};
use crate::Real;

/// `z_j = (sum_i w[j*n + i] * x_i) + b_j`, `n = x.len()`, for the `o = b.len()` rows `j`
/// (`w` holds `n * o` values, `z` holds `o`).
///
/// Order: lanes `l_0..l_7` start at `ZERO`; for `i` increasing, `l_(i mod 8) += w[j*n+i] * x_i`;
/// then `z_j = fold_lanes(l) + b_j`, i.e. `(((l0+l4)+(l2+l6))+((l1+l5)+(l3+l7))) + b_j`.
///
/// # Examples
///
/// ```
/// let mut z = [0.0];
/// sinew_runtime::reference::affine(&[1.0, 2.0], &[0.5], &[3.0, 4.0], &mut z)?;
/// assert_eq!(z, [11.5]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn affine<T: Real>(w: &[T], b: &[T], x: &[T], z: &mut [T]) -> Result<(), LengthMismatch> {
    shape::affine(w, b, x, z)?;
    affine_kernel(w, b, x, z);
    Ok(())
}

/// The loop of [`affine`], on operands whose lengths agree.
#[inline]
pub(crate) fn affine_kernel<T: Real>(w: &[T], b: &[T], x: &[T], z: &mut [T]) {
    let n = x.len();
    for ((row, bj), zj) in pieces(w, n).zip(b).zip(z.iter_mut()) {
        let mut l = [T::ZERO; LANES];
        for (i, (wi, xi)) in row.iter().zip(x).enumerate() {
            if let Some(lane) = l.get_mut(i % LANES) {
                *lane += *wi * *xi;
            }
        }
        *zj = fold_lanes(l, |a, b| a + b) + *bj;
    }
}

/// `out_i = sum_j w[j*n + i] * d_j`, `n = out.len()`, over the `o = d.len()` rows of `w` (which
/// holds `n * o` values).
///
/// Order: every `out_i = ZERO`, then for `j` increasing `out_i += w[j*n+i] * d_j`. With `n = 0`
/// nothing is written.
///
/// # Examples
///
/// ```
/// let mut out = [9.0; 2];
/// sinew_runtime::reference::back(&[1.0, 2.0, 3.0, 4.0], &[1.0, -1.0], &mut out)?;
/// assert_eq!(out, [-2.0, -2.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn back<T: Real>(w: &[T], d: &[T], out: &mut [T]) -> Result<(), LengthMismatch> {
    shape::matrix("w", w, d, out.len())?;
    back_kernel(w, d, out);
    Ok(())
}

/// The loop of [`back`], on operands whose lengths agree.
#[inline]
pub(crate) fn back_kernel<T: Real>(w: &[T], d: &[T], out: &mut [T]) {
    let n = out.len();
    if n == 0 {
        return;
    }
    for o in out.iter_mut() {
        *o = T::ZERO;
    }
    for (row, dj) in pieces(w, n).zip(d) {
        for (o, wji) in out.iter_mut().zip(row) {
            *o += *wji * *dj;
        }
    }
}

/// `g[j*n + i] += d_j * a_i`, `n = a.len()`, over the `o = d.len()` rows of `g` (which holds
/// `n * o` values): one addition per element. With `n = 0` nothing is written.
///
/// # Examples
///
/// ```
/// let mut g = [1.0; 4];
/// sinew_runtime::reference::outer_acc(&mut g, &[1.0, 2.0], &[10.0, 20.0])?;
/// assert_eq!(g, [11.0, 21.0, 21.0, 41.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn outer_acc<T: Real>(g: &mut [T], d: &[T], a: &[T]) -> Result<(), LengthMismatch> {
    shape::matrix("g", g, d, a.len())?;
    outer_acc_kernel(g, d, a);
    Ok(())
}

/// The loop of [`outer_acc`], on operands whose lengths agree.
#[inline]
pub(crate) fn outer_acc_kernel<T: Real>(g: &mut [T], d: &[T], a: &[T]) {
    let n = a.len();
    if n == 0 {
        return;
    }
    for (row, dj) in pieces_mut(g, n).zip(d) {
        for (gji, ai) in row.iter_mut().zip(a) {
            *gji += *dj * *ai;
        }
    }
}

/// `g_j += d_j`, `g` and `d` of one length: one addition per element.
///
/// # Examples
///
/// ```
/// let mut g = [1.0, 2.0];
/// sinew_runtime::reference::add_acc(&mut g, &[0.5, 0.25])?;
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
pub(crate) fn add_acc_kernel<T: Real>(g: &mut [T], d: &[T]) {
    for (gj, dj) in g.iter_mut().zip(d) {
        *gj += *dj;
    }
}

/// `out_i = (x_i - mean_i) / std_i` for the four slices of one length: a subtraction, then a
/// division (not a product by a stored reciprocal).
///
/// # Examples
///
/// ```
/// let mut out = [0.0; 2];
/// sinew_runtime::reference::standardize(&[3.0, 10.0], &[1.0, 10.0], &[2.0, 4.0], &mut out)?;
/// assert_eq!(out, [1.0, 0.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline(always)]
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
#[inline(always)]
pub(crate) fn standardize_kernel<T: Real>(x: &[T], mean: &[T], std: &[T], out: &mut [T]) {
    for (((o, xi), mi), si) in out.iter_mut().zip(x).zip(mean).zip(std) {
        *o = (*xi - *mi) / *si;
    }
}

/// [`affine`] of every sample: `o = b.len()`, `w` holds `n * o` values, and the `m` samples are
/// the rows of `n` of `xs` and of `o` of `zs` (`m * n` and `m * o` values), in order. With `o = 0` nothing is written.
///
/// # Examples
///
/// ```
/// let mut zs = [0.0; 4];
/// let xs = [1.0, 0.0, 0.0, 1.0];
/// sinew_runtime::reference::affine_batch(&[1.0, 2.0, 3.0, 4.0], &[0.5, 0.5], &xs, &mut zs, 2)?;
/// assert_eq!(zs, [1.5, 3.5, 2.5, 4.5]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
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
#[inline]
pub(crate) fn affine_batch_kernel<T: Real>(w: &[T], b: &[T], xs: &[T], zs: &mut [T], n: usize) {
    let o = b.len();
    if o == 0 {
        return;
    }
    for (x, z) in pieces(xs, n).zip(pieces_mut(zs, o)) {
        affine_kernel(w, b, x, z);
    }
}

/// [`back`] of every sample: `w` holds `o` whole rows of `n`, and the `m` samples are the rows of
/// `o` of `ds` and of `n` of `outs` (`m * o` and `m * n` values), in order. With `n = 0` (then
/// `w` and `outs` are empty and `ds` is not checked) or `o = 0` nothing is written.
///
/// # Examples
///
/// ```
/// let mut outs = [0.0; 4];
/// sinew_runtime::reference::back_batch(&[1.0, 2.0, 3.0, 4.0], &[1.0, 0.0, 0.0, 1.0], &mut outs, 2)?;
/// assert_eq!(outs, [1.0, 2.0, 3.0, 4.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
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
#[inline]
pub(crate) fn back_batch_kernel<T: Real>(w: &[T], ds: &[T], outs: &mut [T], n: usize) {
    let o = w.len().checked_div(n).unwrap_or(0);
    if o == 0 {
        return;
    }
    for (d, out) in pieces(ds, o).zip(pieces_mut(outs, n)) {
        back_kernel(w, d, out);
    }
}

/// `G += sum_s d_s a_s^T`: [`outer_acc`] of every sample in order (`g` holds `o` whole rows of
/// `n`; the `m` samples are the rows of `o` of `ds` and of `n` of `xs`, `m * o` and `m * n`
/// values; with `n = 0`, `g` and `xs` are empty and `ds` is not checked). Each element receives
/// `g + d_sj * a_si` for `s` increasing. With `n = 0` nothing is written.
///
/// # Examples
///
/// ```
/// let mut g = [0.0; 2];
/// sinew_runtime::reference::outer_acc_batch(&mut g, &[1.0, 2.0], &[1.0, 10.0, 3.0, 30.0], 2)?;
/// assert_eq!(g, [7.0, 70.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
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
#[inline]
pub(crate) fn outer_acc_batch_kernel<T: Real>(g: &mut [T], ds: &[T], xs: &[T], n: usize) {
    if n == 0 {
        return;
    }
    let o = g.len() / n;
    for (d, x) in pieces(ds, o).zip(pieces(xs, n)) {
        outer_acc_kernel(g, d, x);
    }
}

/// The rows `first..` of [`outer_acc_batch`] (`(first, o)`: the first row `g` holds, and the rows
/// of the whole gradient): `g` holds whole rows of `n`, at most `o - first` of them, and row
/// `r` of `g` is row `first + r` of the whole. Each element receives `g + d_sj * a_si` for `s`
/// increasing, with the `m` samples the rows of `o` of `ds` and of `n` of `xs` (`m * o` and
/// `m * n` values). With `n = 0` or `o = 0` nothing is written.
///
/// # Examples
///
/// ```
/// let mut second = [0.0; 1];
/// sinew_runtime::reference::outer_acc_batch_rows(&mut second, &[1.0, 2.0], &[3.0], 1, (1, 2))?;
/// assert_eq!(second, [6.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
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
#[inline]
pub(crate) fn outer_acc_batch_rows_kernel<T: Real>(
    g: &mut [T],
    ds: &[T],
    xs: &[T],
    n: usize,
    (first, o): (usize, usize),
) {
    if n == 0 || o == 0 {
        return;
    }
    let rows = pieces_mut(g, n).take(o.saturating_sub(first));
    for (row, j) in rows.zip(first..) {
        for (d, x) in pieces(ds, o).zip(pieces(xs, n)) {
            let Some(dj) = d.get(j) else { continue };
            for (gji, xi) in row.iter_mut().zip(x) {
                *gji += *dj * *xi;
            }
        }
    }
}

/// `g += sum_s d_s`: [`add_acc`] of the rows of `g.len()` of `ds` (a whole number of them), in
/// order. With an empty `g` (and so an empty `ds`) nothing is written.
///
/// # Examples
///
/// ```
/// let mut g = [0.0, 1.0];
/// sinew_runtime::reference::add_acc_batch(&mut g, &[1.0, 2.0, 3.0, 4.0])?;
/// assert_eq!(g, [4.0, 7.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn add_acc_batch<T: Real>(g: &mut [T], ds: &[T]) -> Result<(), LengthMismatch> {
    shape::samples(&[("ds", ds.len(), g.len())])?;
    add_acc_batch_kernel(g, ds);
    Ok(())
}

/// The loop of [`add_acc_batch`], on operands whose lengths agree.
#[inline]
pub(crate) fn add_acc_batch_kernel<T: Real>(g: &mut [T], ds: &[T]) {
    if g.is_empty() {
        return;
    }
    for d in pieces(ds, g.len()) {
        add_acc_kernel(g, d);
    }
}

/// Softmax in place, `v_j = e^(v_j - m) / s`.
///
/// Order: `m` = [`Real::max`] folded from `v_0` over `v_0, v_1, ..`; `v_j = e^(v_j - m)` for
/// every `j`; `s = ZERO + v_0 + v_1 + ..`; `v_j = v_j / s`. An empty slice is left alone.
///
/// # Examples
///
/// ```
/// let mut v = [1000.0_f64, 1000.0];
/// sinew_runtime::reference::softmax(&mut v);
/// assert_eq!(v, [0.5, 0.5]);
/// ```
#[inline]
pub fn softmax<T: Real>(v: &mut [T]) {
    let Some(&first) = v.first() else {
        return;
    };
    let mut m = first;
    for x in v.iter() {
        m = m.max(*x);
    }
    for x in v.iter_mut() {
        *x = (*x - m).exp();
    }
    let mut s = T::ZERO;
    for x in v.iter() {
        s += *x;
    }
    for x in v.iter_mut() {
        *x /= s;
    }
}

/// Softmax Jacobian-vector product in place (`d` and `a` of one length):
/// `s = ZERO + d_0 a_0 + d_1 a_1 + ..`, then `d_j = a_j (d_j - s)`.
///
/// # Examples
///
/// ```
/// let mut d = [1.0, 0.0];
/// sinew_runtime::reference::softmax_grad(&[0.5, 0.5], &mut d)?;
/// assert_eq!(d, [0.25, -0.25]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn softmax_grad<T: Real>(a: &[T], d: &mut [T]) -> Result<(), LengthMismatch> {
    shape::expect("d", a.len(), d.len())?;
    softmax_grad_kernel(a, d);
    Ok(())
}

/// The loop of [`softmax_grad`], on operands whose lengths agree.
#[inline]
pub(crate) fn softmax_grad_kernel<T: Real>(a: &[T], d: &mut [T]) {
    let mut s = T::ZERO;
    for (dk, ak) in d.iter().zip(a) {
        s += *dk * *ak;
    }
    for (dj, aj) in d.iter_mut().zip(a) {
        *dj = *aj * (*dj - s);
    }
}

/// `ln(sum_j e^(z_j))` as `m + ln(s)`: `m` = [`Real::max`] folded from `z_0`;
/// `s = ZERO + e^(z_0 - m) + e^(z_1 - m) + ..`. An empty slice gives `ZERO`; a maximum that is
/// not finite (`m * 0 != 0`) is the result itself.
///
/// # Examples
///
/// ```
/// let v = sinew_runtime::reference::log_sum_exp(&[1000.0_f64, 1000.0]);
/// assert_eq!(v, 1000.0 + core::f64::consts::LN_2);
/// ```
#[inline]
pub fn log_sum_exp<T: Real>(z: &[T]) -> T {
    let Some(&first) = z.first() else {
        return T::ZERO;
    };
    let mut m = first;
    for zj in z {
        m = m.max(*zj);
    }
    if m * T::ZERO != T::ZERO {
        return m;
    }
    let mut s = T::ZERO;
    for zj in z {
        s += (*zj - m).exp();
    }
    m + s.ln()
}

/// `sum_j ((max(z_j, 0) - y_j z_j) + ln_1p(e^-|z_j|))` from `ZERO`, `j` increasing (`z` and `y`
/// of one length; per-unit logistic cross-entropy from the logits).
///
/// # Examples
///
/// ```
/// let l = sinew_runtime::reference::logistic_cross_entropy(&[800.0_f64], &[0.0])?;
/// assert_eq!(l, 800.0);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn logistic_cross_entropy<T: Real>(z: &[T], y: &[T]) -> Result<T, LengthMismatch> {
    shape::expect("y", z.len(), y.len())?;
    Ok(logistic_cross_entropy_kernel(z, y))
}

/// The loop of [`logistic_cross_entropy`], on operands whose lengths agree.
#[inline]
pub(crate) fn logistic_cross_entropy_kernel<T: Real>(z: &[T], y: &[T]) -> T {
    let mut s = T::ZERO;
    for (zj, yj) in z.iter().zip(y) {
        s += (zj.max(T::ZERO) - *yj * *zj) + (-zj.abs()).exp().ln_1p();
    }
    s
}

/// `sum_j y_j (lse - z_j)` from `ZERO`, `j` increasing (`z` and `y` of one length), with
/// `lse = `[`log_sum_exp`]`(z)` computed once over all of `z` (categorical cross-entropy from
/// the logits).
///
/// # Examples
///
/// ```
/// let l = sinew_runtime::reference::softmax_cross_entropy(&[0.0_f64, 0.0], &[1.0, 0.0])?;
/// assert_eq!(l, core::f64::consts::LN_2);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn softmax_cross_entropy<T: Real>(z: &[T], y: &[T]) -> Result<T, LengthMismatch> {
    shape::expect("y", z.len(), y.len())?;
    Ok(softmax_cross_entropy_kernel(z, y))
}

/// The loop of [`softmax_cross_entropy`], on operands whose lengths agree.
#[inline]
pub(crate) fn softmax_cross_entropy_kernel<T: Real>(z: &[T], y: &[T]) -> T {
    let lse = log_sum_exp(z);
    let mut s = T::ZERO;
    for (zj, yj) in z.iter().zip(y) {
        s += *yj * (lse - *zj);
    }
    s
}

/// `(ZERO + e_0 e_0 + e_1 e_1 + ..) * HALF` with `e_j = a_j - y_j` (`a` and `y` of one length).
///
/// # Examples
///
/// ```
/// assert_eq!(sinew_runtime::reference::squared_error(&[1.0_f32, 3.0], &[0.0, 1.0])?, 2.5);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn squared_error<T: Real>(a: &[T], y: &[T]) -> Result<T, LengthMismatch> {
    shape::expect("y", a.len(), y.len())?;
    Ok(squared_error_kernel(a, y))
}

/// The loop of [`squared_error`], on operands whose lengths agree.
#[inline]
pub(crate) fn squared_error_kernel<T: Real>(a: &[T], y: &[T]) -> T {
    let mut s = T::ZERO;
    for (aj, yj) in a.iter().zip(y) {
        let e = *aj - *yj;
        s += e * e;
    }
    s * T::HALF
}

/// Three steps (`z`, `y` and `a` of one length): `a_j = z_j`; [`softmax`]`(a)`; returns
/// [`softmax_cross_entropy`]`(z, y)`.
///
/// # Examples
///
/// ```
/// let mut a = [0.0_f64; 2];
/// let l = sinew_runtime::reference::softmax_with_cross_entropy(&[0.0, 0.0], &[1.0, 0.0], &mut a)?;
/// assert_eq!((a, l), ([0.5, 0.5], core::f64::consts::LN_2));
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn softmax_with_cross_entropy<T: Real>(
    z: &[T],
    y: &[T],
    a: &mut [T],
) -> Result<T, LengthMismatch> {
    shape::expect("y", z.len(), y.len())?;
    shape::expect("a", z.len(), a.len())?;
    Ok(softmax_with_cross_entropy_kernel(z, y, a))
}

/// The loop of [`softmax_with_cross_entropy`], on operands whose lengths agree.
#[inline]
pub(crate) fn softmax_with_cross_entropy_kernel<T: Real>(z: &[T], y: &[T], a: &mut [T]) -> T {
    for (aj, zj) in a.iter_mut().zip(z) {
        *aj = *zj;
    }
    softmax(a);
    softmax_cross_entropy_kernel(z, y)
}

/// [`softmax_with_cross_entropy`] of every sample: the `m` rows of `o` of `zs`, `ys` and `as_`
/// (`m * o` values each) with the `m` values of `losses`, in order (`losses[s]` receives the sample's loss). With `o = 0` nothing
/// is written. (The array form's running sum is `sum + losses[0] + losses[1] + ..`.)
///
/// # Examples
///
/// ```
/// let (mut a, mut losses) = ([0.0_f64; 4], [0.0; 2]);
/// sinew_runtime::reference::softmax_cross_entropy_batch(
///     &[0.0; 4], &[1.0, 0.0, 0.0, 1.0], &mut a, &mut losses, 2)?;
/// assert_eq!((a, losses), ([0.5; 4], [core::f64::consts::LN_2; 2]));
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn softmax_cross_entropy_batch<T: Real>(
    zs: &[T],
    ys: &[T],
    as_: &mut [T],
    losses: &mut [T],
    o: usize,
) -> Result<(), LengthMismatch> {
    shape::softmax_cross_entropy_batch(zs, ys, as_, losses, o)?;
    softmax_cross_entropy_batch_kernel(zs, ys, as_, losses, o);
    Ok(())
}

/// The loop of [`softmax_cross_entropy_batch`], on operands whose lengths agree.
#[inline]
pub(crate) fn softmax_cross_entropy_batch_kernel<T: Real>(
    zs: &[T],
    ys: &[T],
    as_: &mut [T],
    losses: &mut [T],
    o: usize,
) {
    if o == 0 {
        return;
    }
    let rows = pieces(zs, o).zip(pieces(ys, o)).zip(pieces_mut(as_, o));
    for (((z, y), a), loss) in rows.zip(losses.iter_mut()) {
        *loss = softmax_with_cross_entropy_kernel(z, y, a);
    }
}
