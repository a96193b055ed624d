//! The per-sample fast kernels behind [`affine`], [`back`], [`outer_acc`] and [`add_acc_batch`]:
//! the same operations in the same order as [`crate::reference`], arranged for speed.
//!
//! - [`affine_with`]: the [`LANES`] partial sums of a row as one fixed-size array (one SIMD
//!   multiply and add per chunk), four rows per pass over `x`, the tail zero-padded (adding
//!   `+0` to a lane sum changes no bit, see [`padded`]), the lanes folded by [`fold_lanes`].
//! - [`back_with`] / [`back_rows`]: four rows per pass over `out`,
//!   `o = (((o + w0 d0) + w1 d1) + w2 d2) + w3 d3`, the same additions as four passes of one row.
//! - [`outer_acc_rows`], [`add_acc_rows`]: rows of a constant width held in registers.
//!
//! Measurements behind these choices: `bench/NOTES.md`.
//!
//! [`affine`]: super::affine
//! [`back`]: super::back
//! [`outer_acc`]: super::outer_acc
//! [`add_acc_batch`]: super::add_acc_batch

use super::{fold_lanes, LANES, ROWS};
use crate::each::{pieces, pieces_mut};
use crate::Real;

/// The lane sum of a row: [`fold_lanes`] with `+`.
#[inline(always)]
fn lane_fold<T: Real>(l: [T; LANES]) -> T {
    fold_lanes(l, |a, b| a + b)
}

/// [`lane_fold`] behind a call, for long rows (inlined, it slowed the main loop; see
/// `bench/NOTES.md`, `linalg::lane_sum_call`).
#[inline(never)]
fn lane_sum_call<T: Real>(l: [T; LANES]) -> T {
    lane_fold(l)
}

/// The lane sum of a row: [`lane_fold`], inline when `INLINE` (short rows of constant length).
#[inline(always)]
pub(super) fn lane_sum<T: Real, const INLINE: bool>(l: [T; LANES]) -> T {
    if INLINE {
        lane_fold(l)
    } else {
        lane_sum_call(l)
    }
}

/// [`lane_fold`] of four rows in one loop: `s_j = fold_lanes(l[j])`, so that the four rows'
/// halves and sums can fill vector lanes.
#[inline(always)]
fn lane_fold4<T: Real>(l: [[T; LANES]; ROWS]) -> [T; ROWS] {
    let mut s = [T::ZERO; ROWS];
    for (sj, lj) in s.iter_mut().zip(l) {
        *sj = fold_lanes(lj, |a, b| a + b);
    }
    s
}

/// [`lane_fold4`] behind one call (for the four rows of a block of long rows; see
/// [`lane_sum_call`]).
#[inline(never)]
fn lane_sum4_call<T: Real>(l: [[T; LANES]; ROWS]) -> [T; ROWS] {
    lane_fold4(l)
}

/// The lane sums of a block of four rows: for short rows (`INLINE`) each row's [`lane_fold`]
/// inline, for long rows [`lane_fold4`] behind one call. The same bits either way; the choice is
/// measured (`bench/NOTES.md`, `linalg::lane_sum4`).
#[inline(always)]
pub(super) fn lane_sum4<T: Real, const INLINE: bool>(l: [[T; LANES]; ROWS]) -> [T; ROWS] {
    if INLINE {
        let [a, b, c, d] = l;
        [lane_fold(a), lane_fold(b), lane_fold(c), lane_fold(d)]
    } else {
        lane_sum4_call(l)
    }
}

/// `acc_k += w_k * x_k` for the `LANES` lanes (one SIMD multiply and add per vector register).
#[inline(always)]
pub(super) fn lanes_mul_add<T: Real>(acc: &mut [T; LANES], w: &[T; LANES], x: &[T; LANES]) {
    for ((a, wk), xk) in acc.iter_mut().zip(w).zip(x) {
        *a += *wk * *xk;
    }
}

/// A row's tail (fewer than `LANES` values) padded with zeros to a full chunk.
///
/// Adding the padded products `0 * 0 = +0` to the lane sums changes no bit: a lane sum starts at
/// `+0` and so is never `-0` (in round-to-nearest, `a + b` is `-0` only when both are `-0`), and
/// `s + (+0) = s` for every `s` other than `-0`, NaN and infinities included.
#[inline(always)]
pub(crate) fn padded<T: Real>(tail: &[T]) -> [T; LANES] {
    // Lane by lane over the fixed count, without a closure (`bench/NOTES.md`, `linalg::padded`).
    let mut out = [T::ZERO; LANES];
    for (k, o) in out.iter_mut().enumerate() {
        if let Some(v) = tail.get(k) {
            *o = *v;
        }
    }
    out
}

/// The lane accumulators of one row: `acc_k = sum over i = k (mod LANES) of w_i x_i`, from `ZERO`
/// in increasing `i`. `xt` is the input's tail, padded.
#[inline(always)]
pub(super) fn row_lanes<T: Real>(w: &[T], x: &[T], xt: &[T; LANES]) -> [T; LANES] {
    let mut acc = [T::ZERO; LANES];
    // `as_chunks` rather than `chunks_exact`: its count is a length, not a division whose
    // divide-by-zero panic survives in size-optimised builds (see [`crate::each`]).
    let (wc, wr) = w.as_chunks::<LANES>();
    for (wk, xk) in wc.iter().zip(x.as_chunks::<LANES>().0) {
        lanes_mul_add(&mut acc, wk, xk);
    }
    if !wr.is_empty() {
        lanes_mul_add(&mut acc, &padded(wr), xt);
    }
    acc
}

/// [`row_lanes`] of four rows against the same `x` (one load of `x` serves four rows; four
/// independent accumulators). Each row gets exactly the operations of [`row_lanes`].
#[inline(always)]
pub(super) fn rows4_lanes<T: Real>(
    r: [&[T]; ROWS],
    x: &[T],
    xt: &[T; LANES],
) -> [[T; LANES]; ROWS] {
    let [r0, r1, r2, r3] = r;
    let (mut a0, mut a1, mut a2, mut a3) = (
        [T::ZERO; LANES],
        [T::ZERO; LANES],
        [T::ZERO; LANES],
        [T::ZERO; LANES],
    );
    let ((c0, t0), (c1, t1), (c2, t2), (c3, t3)) = (
        r0.as_chunks::<LANES>(),
        r1.as_chunks::<LANES>(),
        r2.as_chunks::<LANES>(),
        r3.as_chunks::<LANES>(),
    );
    let xc = x.as_chunks::<LANES>().0;
    for ((((xk, w0), w1), w2), w3) in xc.iter().zip(c0).zip(c1).zip(c2).zip(c3) {
        lanes_mul_add(&mut a0, w0, xk);
        lanes_mul_add(&mut a1, w1, xk);
        lanes_mul_add(&mut a2, w2, xk);
        lanes_mul_add(&mut a3, w3, xk);
    }
    if !t0.is_empty() {
        lanes_mul_add(&mut a0, &padded(t0), xt);
        lanes_mul_add(&mut a1, &padded(t1), xt);
        lanes_mul_add(&mut a2, &padded(t2), xt);
        lanes_mul_add(&mut a3, &padded(t3), xt);
    }
    [a0, a1, a2, a3]
}

/// Splits a block of `ROWS * n` weights into its rows (`None` if it is shorter).
#[inline(always)]
pub(super) fn four_rows<T>(block: &[T], n: usize) -> Option<[&[T]; ROWS]> {
    let mut it = pieces(block, n);
    Some([it.next()?, it.next()?, it.next()?, it.next()?])
}

/// The input's tail (past the last full chunk), padded.
#[inline(always)]
pub(super) fn input_tail<T: Real>(x: &[T]) -> [T; LANES] {
    padded(x.as_chunks::<LANES>().1)
}

/// The kernel of [`affine`], with the lane sums inline when `INLINE`: blocks of four rows
/// ([`rows4_lanes`], [`lane_sum4`]), then the rows left one by one ([`row_lanes`], [`lane_sum`]).
/// Each row gets the operations of [`crate::reference::affine`]: lane `i mod 8` from `ZERO` in
/// increasing `i`, [`fold_lanes`], then `+ b_j`.
#[inline(always)]
pub(super) fn affine_with<T: Real, const INLINE: bool>(w: &[T], b: &[T], x: &[T], z: &mut [T]) {
    let n = x.len();
    if n == 0 {
        for (zj, bj) in z.iter_mut().zip(b) {
            *zj = T::ZERO + *bj;
        }
        return;
    }
    let xt = input_tail(x);
    let blocks = (w.len() / n).min(b.len()).min(z.len()) / ROWS;
    for ((wb, bb), zb) in pieces(w, ROWS * n)
        .zip(b.as_chunks::<ROWS>().0)
        .zip(z.as_chunks_mut::<ROWS>().0)
        .take(blocks)
    {
        let Some(rows) = four_rows(wb, n) else {
            continue;
        };
        for ((zj, bj), s) in zb
            .iter_mut()
            .zip(bb)
            .zip(lane_sum4::<T, INLINE>(rows4_lanes(rows, x, &xt)))
        {
            *zj = s + *bj;
        }
    }
    for ((row, bj), zj) in pieces(w, n).zip(b).zip(z.iter_mut()).skip(blocks * ROWS) {
        *zj = lane_sum::<T, INLINE>(row_lanes(row, x, &xt)) + *bj;
    }
}

/// [`back_with`] for `K` outputs, summed in registers and stored once: the same additions in the
/// same order (four rows per pass, then the rows left one by one). Why: no store to `out` between
/// the loads of `w`, which the compiler cannot tell apart from `out` inside the engine.
#[inline(always)]
pub(super) fn back_rows<T: Real, const K: usize>(w: &[T], d: &[T], out: &mut [T; K]) {
    let mut o = [T::ZERO; K];
    let rows = w.as_chunks::<K>().0;
    let blocks = rows.len().min(d.len()) / ROWS;
    let (r4, d4) = (rows.as_chunks::<ROWS>().0, d.as_chunks::<ROWS>().0);
    for ([r0, r1, r2, r3], [d0, d1, d2, d3]) in r4.iter().zip(d4).take(blocks) {
        for k in 0..K {
            o[k] = (((o[k] + r0[k] * *d0) + r1[k] * *d1) + r2[k] * *d2) + r3[k] * *d3;
        }
    }
    for (row, dj) in rows.iter().zip(d).skip(blocks * ROWS) {
        for (ok, wk) in o.iter_mut().zip(row) {
            *ok += *wk * *dj;
        }
    }
    *out = o;
}

/// The kernel of [`back`].
#[inline(always)]
pub(super) fn back_with<T: Real>(w: &[T], d: &[T], out: &mut [T]) {
    let n = out.len();
    if n == 0 {
        return;
    }
    for o in out.iter_mut() {
        *o = T::ZERO;
    }
    // Four rows per pass over `out`: `o = (((o + w0 d0) + w1 d1) + w2 d2) + w3 d3` is the same
    // sequence of additions as four passes of one row each.
    let blocks = (w.len() / n).min(d.len()) / ROWS;
    for (wb, db) in pieces(w, ROWS * n)
        .zip(d.as_chunks::<ROWS>().0)
        .take(blocks)
    {
        let (Some([r0, r1, r2, r3]), [d0, d1, d2, d3]) = (four_rows(wb, n), db) else {
            continue;
        };
        // Whole chunks of `LANES` columns as fixed arrays, then the tail; the four errors and
        // each chunk of `out` in locals, as `out` may alias `d` for all the compiler knows
        // (`bench/NOTES.md`, `linalg::back_with`).
        let (d0, d1, d2, d3) = (*d0, *d1, *d2, *d3);
        let (oc, ot) = out.as_chunks_mut::<LANES>();
        let ((c0, t0), (c1, t1), (c2, t2), (c3, t3)) = (
            r0.as_chunks::<LANES>(),
            r1.as_chunks::<LANES>(),
            r2.as_chunks::<LANES>(),
            r3.as_chunks::<LANES>(),
        );
        for ((((o, w0), w1), w2), w3) in oc.iter_mut().zip(c0).zip(c1).zip(c2).zip(c3) {
            let mut acc = *o;
            for k in 0..LANES {
                acc[k] = (((acc[k] + w0[k] * d0) + w1[k] * d1) + w2[k] * d2) + w3[k] * d3;
            }
            *o = acc;
        }
        for ((((o, w0), w1), w2), w3) in ot.iter_mut().zip(t0).zip(t1).zip(t2).zip(t3) {
            *o = (((*o + *w0 * d0) + *w1 * d1) + *w2 * d2) + *w3 * d3;
        }
    }
    for (row, dj) in pieces(w, n).zip(d).skip(blocks * ROWS) {
        for (o, wji) in out.iter_mut().zip(row) {
            *o += *wji * *dj;
        }
    }
}

/// [`outer_acc`] for rows of `K` columns: `a` and each row are copied into registers before the
/// row is written back, so the compiler needs no proof that `g` and `a` are apart to use vector
/// operations (`bench/NOTES.md`, `linalg::outer_acc_rows`). Each element gets its one addition:
/// the same bits.
#[inline(always)]
pub(super) fn outer_acc_rows<T: Real, const K: usize>(g: &mut [T], d: &[T], a: [T; K]) {
    for (row, dj) in g.as_chunks_mut::<K>().0.iter_mut().zip(d) {
        let mut v = *row;
        for (gji, ai) in v.iter_mut().zip(&a) {
            *gji += *dj * *ai;
        }
        *row = v;
    }
}

/// The kernel of [`outer_acc`].
#[inline(always)]
pub(super) fn outer_acc_with<T: Real>(g: &mut [T], d: &[T], a: &[T]) {
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

/// [`add_acc_batch`] for rows of `K`: `g` is copied into registers, the rows are added in order
/// and `g` is stored once (`bench/NOTES.md`, `linalg::add_acc_rows`). Each element gets the same
/// additions in the same order: the same bits.
#[inline(always)]
pub(super) fn add_acc_rows<T: Real, const K: usize>(g: &mut [T; K], ds: &[T]) {
    let mut acc = *g;
    for d in ds.as_chunks::<K>().0 {
        for (a, v) in acc.iter_mut().zip(d) {
            *a += *v;
        }
    }
    *g = acc;
}
