//! Dense linear algebra for fully connected layers.
//!
//! Weights are row-major: row `j` holds the weights into unit `j` of the next layer, so a layer
//! with fan-in `n` and width `o` stores `w[j*n + i]` for `j < o`, `i < n`.
//!
//! Each kernel is written once over slices (the form the host engine calls) and has a thin
//! const-generic array wrapper (the form generated code calls) that flattens the matrix and calls
//! the slice form, so both perform the same operations in the same order and give identical bits.
//!
//! Lengths: the slice forms never panic. Rows are paired with the other operands by `zip`, so any
//! surplus in a longer operand is left untouched (outputs) or ignored (inputs); an incomplete last
//! row of `w` is ignored.
//!
//! Speed without changing bits: [`affine`] sums each row in [`LANES`] independent partial sums
//! (a fixed order, documented on it, that SIMD units and pipelined adders can follow) and reads
//! four rows per pass over `x`; [`back`] adds four rows per pass over `out`, in the same order as
//! one row at a time. The per-sample kernels are `#[inline(always)]` so that the constant sizes of
//! generated code reach them. The batch forms ([`affine_batch`], [`back_batch`],
//! [`outer_acc_batch`], [`outer_acc_batch_rows`], [`add_acc_batch`]) work on a block of samples
//! stored row by row: each weight tile is read once per block, and each result equals, bit for
//! bit, the per-sample kernel applied to the samples in order.

use crate::each::{pieces, pieces_mut};
use crate::Real;

mod across;

/// Lanes of the dot-product accumulators of [`affine`]: product `i` of a row goes to lane
/// `i % LANES`. Part of the order of arithmetic (it decides the bits of every `affine` result).
pub const LANES: usize = 8;

/// Rows of `W` that [`affine`] and [`back`] process together (reuse of each input load; it does not
/// change any result).
const ROWS: usize = 4;

/// Fan-in below which the array forms ([`affine_n`], [`affine_batch_n`]) fold the lanes inline
/// ([`lane_fold`]) rather than by a call to [`lane_sum_call`]. Rows this short have no loop to
/// vectorise (at most two chunks), and a call per output is the largest cost of a small layer.
/// The slice forms (run-time fan-in, the engine's) always call: there both paths would share a
/// function, and the inlined fold leads the compiler to transpose the accumulators of the long
/// path. A speed choice only: both give the same bits.
const INLINE_FOLD_BELOW: usize = 2 * LANES + 1;

/// The lane sum of [`affine`]: `((l0 + l4) + (l2 + l6)) + ((l1 + l5) + (l3 + l7))` (halves folded
/// onto each other, the shape of a SIMD horizontal sum).
#[inline(always)]
fn lane_fold<T: Real>(l: [T; LANES]) -> T {
    let [l0, l1, l2, l3, l4, l5, l6, l7] = l;
    ((l0 + l4) + (l2 + l6)) + ((l1 + l5) + (l3 + l7))
}

/// [`lane_fold`] behind a call, for long rows.
///
/// Not inlined: inlined, the compiler vectorizes the sums of four rows together and then keeps
/// the accumulators of the main loop transposed across rows, with a shuffle per product.
#[inline(never)]
fn lane_sum_call<T: Real>(l: [T; LANES]) -> T {
    lane_fold(l)
}

/// The lane sum of a row: [`lane_fold`], inline when `INLINE` (short rows of constant length).
#[inline(always)]
fn lane_sum<T: Real, const INLINE: bool>(l: [T; LANES]) -> T {
    if INLINE {
        lane_fold(l)
    } else {
        lane_sum_call(l)
    }
}

/// [`lane_fold`] of four rows at once: each `s_j` gets exactly `lane_fold(l[j])`, written as
/// `h = lo + hi` (the row's two halves added lane by lane) and `s = (h0 + h2) + (h1 + h3)`, the
/// same additions in the same order, so that the four rows' halves and sums fill vector lanes.
#[inline(always)]
fn lane_fold4<T: Real>(l: [[T; LANES]; ROWS]) -> [T; ROWS] {
    let mut s = [T::ZERO; ROWS];
    for (sj, lj) in s.iter_mut().zip(l) {
        let [l0, l1, l2, l3, l4, l5, l6, l7] = lj;
        let (h0, h1, h2, h3) = (l0 + l4, l1 + l5, l2 + l6, l3 + l7);
        *sj = (h0 + h2) + (h1 + h3);
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
/// inline, for long rows [`lane_fold4`] behind one call. Measured on the pump model, Cortex-M4F,
/// `opt-level = "z"` (README, Device figures): before `lane_fold4`, 17062 instructions per
/// inference and 5182 bytes of runtime code; with it inlined for short rows too, 17574 and 6194;
/// as here, 14438 and 6144. The kilobyte of runtime code it added at `z` (on all three device
/// targets) is not explained yet. On the host both short-row forms give the same instructions.
#[inline(always)]
fn lane_sum4<T: Real, const INLINE: bool>(l: [[T; LANES]; ROWS]) -> [T; ROWS] {
    if INLINE {
        let [a, b, c, d] = l;
        [lane_fold(a), lane_fold(b), lane_fold(c), lane_fold(d)]
    } else {
        lane_sum4_call(l)
    }
}

/// `acc_k += w_k * x_k` for the `LANES` lanes (one SIMD multiply and add per vector register).
#[inline(always)]
fn lanes_mul_add<T: Real>(acc: &mut [T; LANES], w: &[T; LANES], x: &[T; LANES]) {
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
    // Lane by lane over the fixed count (a copy of a run-time length would become a call to
    // `memcpy`), and without a closure: `array::from_fn`'s closure was left out of line in some
    // builds, a call per lane in the paired forward pass (N2 batch, v3: 5311 -> 5523 instructions
    // per sample from an unrelated change elsewhere in the crate).
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
fn row_lanes<T: Real>(w: &[T], x: &[T], xt: &[T; LANES]) -> [T; LANES] {
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
fn rows4_lanes<T: Real>(r: [&[T]; ROWS], x: &[T], xt: &[T; LANES]) -> [[T; LANES]; ROWS] {
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

/// Samples that [`affine_batch`] runs together against each group of [`ROWS`] rows: `ROWS x
/// SAMPLES` independent accumulators per pass over the rows, and each weight load serves
/// `SAMPLES` samples. (A speed choice only: every output gets the operations of [`row_lanes`].)
const SAMPLES: usize = 2;

/// Whether [`affine_batch`] pairs samples: two samples per pass need eight 8-lane accumulators,
/// sixteen 128-bit registers without AVX, which spill; there the samples go one by one (measured
/// on N3 in the `default` x86-64 build: 24.0 us per sample paired against 19.4 us one by one). A
/// speed choice only: both give the same bits (the tests run both).
const PAIRED: bool = cfg!(any(target_feature = "avx", not(target_arch = "x86_64")));

/// Whether [`affine_batch_n`] runs rows of fewer than 17 inputs across samples (see
/// [`across`]). A speed choice only: both paths give the same bits.
const ACROSS: bool = true;

/// [`row_lanes`] of four rows against two inputs: `acc[s][j]` receives exactly the operations of
/// `row_lanes(r[j], x[s], &xt[s])`, in the same order (eight independent accumulators, and each
/// weight load serves two samples). All rows and inputs have the same length, the fan-in.
#[inline(always)]
fn rows4_lanes_x2<T: Real>(
    r: [&[T]; ROWS],
    x: [&[T]; SAMPLES],
    xt: &[[T; LANES]; SAMPLES],
) -> [[[T; LANES]; ROWS]; SAMPLES] {
    let z = [T::ZERO; LANES];
    let [mut a00, mut a01, mut a02, mut a03] = [z; ROWS];
    let [mut a10, mut a11, mut a12, mut a13] = [z; ROWS];
    let [r0, r1, r2, r3] = r;
    let ((c0, t0), (c1, t1), (c2, t2), (c3, t3)) = (
        r0.as_chunks::<LANES>(),
        r1.as_chunks::<LANES>(),
        r2.as_chunks::<LANES>(),
        r3.as_chunks::<LANES>(),
    );
    let [x0, x1] = x;
    let (x0, x1) = (x0.as_chunks::<LANES>().0, x1.as_chunks::<LANES>().0);
    let weights = c0.iter().zip(c1).zip(c2).zip(c3);
    for ((((w0, w1), w2), w3), (u0, u1)) in weights.zip(x0.iter().zip(x1)) {
        lanes_mul_add(&mut a00, w0, u0);
        lanes_mul_add(&mut a01, w1, u0);
        lanes_mul_add(&mut a02, w2, u0);
        lanes_mul_add(&mut a03, w3, u0);
        lanes_mul_add(&mut a10, w0, u1);
        lanes_mul_add(&mut a11, w1, u1);
        lanes_mul_add(&mut a12, w2, u1);
        lanes_mul_add(&mut a13, w3, u1);
    }
    if !t0.is_empty() {
        let [v0, v1] = xt;
        let (p0, p1, p2, p3) = (padded(t0), padded(t1), padded(t2), padded(t3));
        lanes_mul_add(&mut a00, &p0, v0);
        lanes_mul_add(&mut a01, &p1, v0);
        lanes_mul_add(&mut a02, &p2, v0);
        lanes_mul_add(&mut a03, &p3, v0);
        lanes_mul_add(&mut a10, &p0, v1);
        lanes_mul_add(&mut a11, &p1, v1);
        lanes_mul_add(&mut a12, &p2, v1);
        lanes_mul_add(&mut a13, &p3, v1);
    }
    [[a00, a01, a02, a03], [a10, a11, a12, a13]]
}

/// Splits a block of `ROWS * n` weights into its rows (`None` if it is shorter).
#[inline(always)]
fn four_rows<T>(block: &[T], n: usize) -> Option<[&[T]; ROWS]> {
    let mut it = pieces(block, n);
    Some([it.next()?, it.next()?, it.next()?, it.next()?])
}

/// The input's tail (past the last full chunk), padded.
#[inline(always)]
fn input_tail<T: Real>(x: &[T]) -> [T; LANES] {
    padded(x.as_chunks::<LANES>().1)
}

/// Affine map of a dense layer: `z_j = (sum_i w[j*n + i] * x_i) + b_j`, with `n = x.len()`.
///
/// Order (the bits of the result depend on it; the unrolled code the emitter writes follows it
/// too): each row keeps [`LANES`] = 8 partial sums `l_k`, all starting at `ZERO`; product
/// `w[j*n+i] * x_i` is added to `l_(i mod 8)`, in increasing `i`. The row's sum is then
/// `s = ((l0 + l4) + (l2 + l6)) + ((l1 + l5) + (l3 + l7))`, and `z_j = s + b_j`. (Eight independent
/// sums let the compiler use SIMD lanes and keep several additions in flight; the order is fixed
/// in the source, so every target and every build gives the same bits.) Rows are
/// `w.chunks_exact(n)` zipped with `b` and `z`, so the number of rows written is the least of
/// `w.len() / n`, `b.len()` and `z.len()`. With `n = 0` every row is empty and
/// `z_j = ZERO + b_j` for `j < min(b.len(), z.len())`.
///
/// # Examples
///
/// ```
/// // 2 inputs -> 3 units.
/// let w = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0];
/// let b = [0.5, -0.5, 0.0];
/// let mut z = [0.0; 3];
/// sinew_runtime::affine(&w, &b, &[1.0, -1.0], &mut z);
/// assert_eq!(z, [-0.5, -1.5, -1.0]);
/// ```
#[inline(always)]
pub fn affine<T: Real>(w: &[T], b: &[T], x: &[T], z: &mut [T]) {
    // Short rows (fan-in 1 to 16, known here only at run time): a kernel for each fan-in, with
    // its lane folds inline, as the array form runs them. Same operations, same bits.
    by_length_1_to_16!(x.len(), K => {
        if let Ok(x) = <&[T; K]>::try_from(x) {
            // A copy in registers: a store to `z` cannot change it, so it is not loaded again
            // for every row (the engine's buffers look alike to the compiler).
            let x = *x;
            affine_with::<T, true>(w, b, &x, z);
        }
    }, _ => affine_with::<T, false>(w, b, x, z));
}

/// [`affine`], with the lane sums inline when `INLINE`.
#[inline(always)]
fn affine_with<T: Real, const INLINE: bool>(w: &[T], b: &[T], x: &[T], z: &mut [T]) {
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
/// Rows are `w.chunks_exact(n)` zipped with `d` (the least of `w.len() / n` and `d.len()` rows).
/// With `n = 0` there is nothing to write.
///
/// # Examples
///
/// ```
/// // 2 inputs -> 3 units; the error of the 3 units goes back to the 2 inputs.
/// let w = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0];
/// let mut out = [9.0; 2];
/// sinew_runtime::back(&w, &[1.0, 0.0, -1.0], &mut out);
/// assert_eq!(out, [1.0 - 5.0, 2.0 - 6.0]);
/// ```
#[inline(always)]
pub fn back<T: Real>(w: &[T], d: &[T], out: &mut [T]) {
    // Narrow outputs (1 to 16, known here only at run time): a kernel for each width, so that
    // each row is a fixed-size vector operation. Same operations, same bits.
    by_length_1_to_16!(out.len(), K => {
        if let Ok(out) = <&mut [T; K]>::try_from(&mut *out) {
            back_rows(w, d, out);
        }
    }, _ => back_with(w, d, out));
}

/// [`back_with`] for `K` outputs, summed in registers and stored once: the same additions in the
/// same order (four rows per pass, then the rows left one by one), but no store to `out` between
/// the loads of `w`, which the compiler could not tell apart from `out` inside the engine.
#[inline(always)]
fn back_rows<T: Real, const K: usize>(w: &[T], d: &[T], out: &mut [T; K]) {
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
fn back_with<T: Real>(w: &[T], d: &[T], out: &mut [T]) {
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
        // Whole chunks of `LANES` columns as fixed arrays (the compiler vectorises those; over
        // the zip of five slices it kept one column at a time), then the tail. The four errors
        // and each chunk of `out` are copied to locals first: once this kernel is inlined into a
        // larger function (the generated batch gradient) the compiler can no longer tell `out`
        // from `d`, reloaded every `d_j` after each store and kept the loop scalar.
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

/// Array form of [`back`]: `out = W^T d` for `W` of `O` rows and `I` columns.
///
/// Calls `back(w.as_flattened(), d, out)`: same operations, same order, same bits.
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
    back(w.as_flattened(), d, out);
}

/// Outer-product accumulate (the weight gradient of one sample): `g[j*n + i] += d_j * a_i`, with
/// `n = a.len()`.
///
/// Each element receives exactly one addition, `g + (d_j * a_i)`. Rows are `g.chunks_exact_mut(n)`
/// zipped with `d`. With `n = 0` there is nothing to write.
///
/// # Examples
///
/// ```
/// let mut g = [1.0; 6]; // 3 rows of 2
/// sinew_runtime::outer_acc(&mut g, &[1.0, 2.0, 3.0], &[10.0, 20.0]);
/// assert_eq!(g, [11.0, 21.0, 21.0, 41.0, 31.0, 61.0]);
/// ```
#[inline(always)]
pub fn outer_acc<T: Real>(g: &mut [T], d: &[T], a: &[T]) {
    // Short rows (1 to 16 columns, known here only at run time): a kernel for each length, so
    // that each row is a fixed-size vector operation. Same operations, same bits.
    by_length_1_to_16!(a.len(), K => {
        if let Ok(a) = <&[T; K]>::try_from(a) {
            outer_acc_rows(g, d, *a);
        }
    }, _ => outer_acc_with(g, d, a));
}

/// [`outer_acc`] for rows of `K` columns: `a` and each row are copied into registers before the
/// row is written back, so the compiler needs no proof that `g` and `a` are apart to use vector
/// operations (inlined into the engine, whose buffers it cannot tell apart, the element-wise
/// form stayed scalar). Each element gets its one addition: the same bits.
#[inline(always)]
fn outer_acc_rows<T: Real, const K: usize>(g: &mut [T], d: &[T], a: [T; K]) {
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
fn outer_acc_with<T: Real>(g: &mut [T], d: &[T], a: &[T]) {
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

/// Array form of [`outer_acc`]: `G += d a^T` for `G` of `O` rows and `I` columns.
///
/// Calls `outer_acc(g.as_flattened_mut(), d, a)`: same operations, same bits.
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
    outer_acc(g.as_flattened_mut(), d, a);
}

/// Vector accumulate (the bias gradient of one sample): `g_j += d_j`, over the zip of `g` and `d`.
///
/// Works for arrays too (`&mut [T; N]` coerces to `&mut [T]`).
///
/// # Examples
///
/// ```
/// let mut g = [1.0, 2.0];
/// sinew_runtime::add_acc(&mut g, &[0.5, 0.25]);
/// assert_eq!(g, [1.5, 2.25]);
/// ```
#[inline(always)]
pub fn add_acc<T: Real>(g: &mut [T], d: &[T]) {
    for (gj, dj) in g.iter_mut().zip(d) {
        *gj += *dj;
    }
}

/// Input scaling: `out_i = (x_i - mean_i) / std_i`, over the zip of the four slices.
///
/// It divides (it does not multiply by a stored reciprocal), so a `std_i` of 1 leaves the centred
/// value exact.
///
/// # Examples
///
/// ```
/// let mut out = [0.0; 2];
/// sinew_runtime::standardize(&[3.0, 10.0], &[1.0, 10.0], &[2.0, 4.0], &mut out);
/// assert_eq!(out, [1.0, 0.0]);
/// ```
pub fn standardize<T: Real>(x: &[T], mean: &[T], std: &[T], out: &mut [T]) {
    for (((o, xi), mi), si) in out.iter_mut().zip(x).zip(mean).zip(std) {
        *o = (*xi - *mi) / *si;
    }
}

/// Array form of [`standardize`]: `out = (x - mean) ./ std`.
///
/// Calls `standardize(x, mean, std, out)`: same operations, same bits.
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
    standardize(x, mean, std, out);
}

/// Batch form of [`affine`]: for every sample `s`, `z_s = W x_s + b`, bit for bit the result of
/// `affine(w, b, x_s, z_s)`.
///
/// The samples are the pairs of `xs.chunks_exact(n)` and `zs.chunks_exact_mut(b.len())` (row-major
/// blocks of samples). Each group of four rows of `W` is applied to every sample before the next
/// group is read, so a large matrix travels from memory once per call rather than once per sample;
/// the arithmetic of each output is exactly that of [`affine`]. With `n = 0` every output row is
/// `ZERO + b` (as [`affine`] with an empty input).
///
/// # Examples
///
/// ```
/// let w = [1.0, 2.0, 3.0, 4.0]; // 2 inputs -> 2 units
/// let xs = [1.0, 0.0, 0.0, 1.0]; // two samples
/// let mut zs = [0.0; 4];
/// sinew_runtime::linalg::affine_batch(&w, &[0.5, 0.5], &xs, &mut zs, 2);
/// assert_eq!(zs, [1.5, 3.5, 2.5, 4.5]);
/// ```
#[inline(always)]
pub fn affine_batch<T: Real>(w: &[T], b: &[T], xs: &[T], zs: &mut [T], n: usize) {
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

/// [`affine_batch`], with the lane sums inline when `INLINE`.
#[inline(always)]
fn affine_batch_with<T: Real, const INLINE: bool, const PAIRS: bool>(
    w: &[T],
    b: &[T],
    xs: &[T],
    zs: &mut [T],
    n: usize,
) {
    let o = b.len();
    if o == 0 {
        return;
    }
    if n == 0 {
        for z in pieces_mut(zs, o) {
            affine_with::<T, INLINE>(w, b, &[], z);
        }
        return;
    }
    let rows = (w.len() / n).min(o);
    let blocks = rows / ROWS;
    let samples = (xs.len() / n).min(zs.len() / o);
    let groups = if PAIRS { samples / SAMPLES } else { 0 };
    for (jb, (wb, bb)) in pieces(w, ROWS * n)
        .zip(b.as_chunks::<ROWS>().0)
        .take(blocks)
        .enumerate()
    {
        let Some(r) = four_rows(wb, n) else {
            continue;
        };
        let j = jb * ROWS;
        // SAMPLES samples at a time, then the rest one by one.
        for (xg, zg) in pieces(xs, SAMPLES * n)
            .zip(pieces_mut(zs, SAMPLES * o))
            .take(groups)
        {
            let mut xi = pieces(xg, n);
            // Written out (no `array::from_fn` or `map` closures to be left out of line).
            let x: [&[T]; SAMPLES] = [xi.next().unwrap_or_default(), xi.next().unwrap_or_default()];
            let xt = [input_tail(x[0]), input_tail(x[1])];
            let acc = rows4_lanes_x2(r, x, &xt);
            for (z, a) in pieces_mut(zg, o).zip(acc) {
                let Some(zb) = z.get_mut(j..j + ROWS) else {
                    continue;
                };
                for ((zj, bj), s) in zb.iter_mut().zip(bb).zip(lane_sum4::<T, INLINE>(a)) {
                    *zj = s + *bj;
                }
            }
        }
        for (x, z) in pieces(xs, n)
            .zip(pieces_mut(zs, o))
            .take(samples)
            .skip(groups * SAMPLES)
        {
            let Some(zb) = z.get_mut(j..j + ROWS) else {
                continue;
            };
            let sums = lane_sum4::<T, INLINE>(rows4_lanes(r, x, &input_tail(x)));
            for ((zj, bj), s) in zb.iter_mut().zip(bb).zip(sums) {
                *zj = s + *bj;
            }
        }
    }
    for (j, (row, bj)) in pieces(w, n)
        .zip(b)
        .enumerate()
        .take(rows)
        .skip(blocks * ROWS)
    {
        for (x, z) in pieces(xs, n).zip(pieces_mut(zs, o)) {
            if let Some(zj) = z.get_mut(j) {
                *zj = lane_sum::<T, INLINE>(row_lanes(row, x, &input_tail(x))) + *bj;
            }
        }
    }
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
/// `W` has `n` columns and `o = w.len() / n` rows; the samples are the pairs of
/// `ds.chunks_exact(o)` and `outs.chunks_exact_mut(n)`. With `n = 0` or `o = 0` nothing is
/// written.
///
/// # Examples
///
/// ```
/// let w = [1.0, 2.0, 3.0, 4.0]; // 2 inputs -> 2 units
/// let mut outs = [0.0; 4];
/// sinew_runtime::linalg::back_batch(&w, &[1.0, 0.0, 0.0, 1.0], &mut outs, 2);
/// assert_eq!(outs, [1.0, 2.0, 3.0, 4.0]);
/// ```
#[inline(always)]
pub fn back_batch<T: Real>(w: &[T], ds: &[T], outs: &mut [T], n: usize) {
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
        back(w, d, out);
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
    back_batch(
        w.as_flattened(),
        ds.get(done..).unwrap_or_default().as_flattened(),
        outs.get_mut(done..).unwrap_or_default().as_flattened_mut(),
        I,
    );
}

/// `acc += (gradient tile)`: loads the `R x C` tile of `g` at row `j`, column `i`, adds
/// `d_s[j + r] * a_s[i + c]` for every sample in order, and stores it back.
#[inline(always)]
fn outer_tile<T: Real, const R: usize, const C: usize>(
    rows: &mut [T],
    ds: &[T],
    xs: &[T],
    (j, i, n, o): (usize, usize, usize, usize),
) {
    // Every access is a checked range of `C` or `R` contiguous values at a computed offset, so
    // the compiler sees fixed-size rows (no iterator state per row or sample to carry).
    let mut acc = [[T::ZERO; C]; R];
    for (r, a) in acc.iter_mut().enumerate() {
        let at = r * n + i;
        if let Some(Ok(g)) = rows.get(at..at + C).map(<&[T; C]>::try_from) {
            *a = *g;
        }
    }
    if o == 0 || n == 0 {
        return;
    }
    // Sample by sample as whole rows, so that the checks of the tile's ranges inside a row do
    // not depend on the sample (the compiler takes them out of the loop).
    for (d_s, x_s) in pieces(ds, o).zip(pieces(xs, n)) {
        let (Some(dv), Some(xv)) = (d_s.get(j..j + R), x_s.get(i..i + C)) else {
            continue;
        };
        let (Ok(dv), Ok(xv)) = (<&[T; R]>::try_from(dv), <&[T; C]>::try_from(xv)) else {
            continue;
        };
        // Columns outside, rows inside: the loop the compiler vectorises runs along the
        // contiguous columns of each row. (Rows outside, it vectorised across the rows of the
        // tile with gathers and scatters, at a fifth of the speed on AVX-512.) Each element still
        // gets `acc + d * x`, one sample after the other.
        for c in 0..C {
            for r in 0..R {
                acc[r][c] += dv[r] * xv[c];
            }
        }
    }
    for (r, a) in acc.iter().enumerate() {
        let at = r * n + i;
        if let Some(Ok(g)) = rows.get_mut(at..at + C).map(<&mut [T; C]>::try_from) {
            *g = *a;
        }
    }
}

/// Widest column tile of [`outer_rows`]: its `ROWS x TILE` accumulators must stay in registers.
/// With 16 lanes per register (AVX-512) 32 columns (eight accumulators in flight, as 16 columns
/// give 256-bit registers); with 128-bit registers only (x86-64 without AVX) 8 columns, since
/// `4 x 16` accumulators would take all sixteen registers and spill (measured on N2 in the
/// `default` build: the batch gradient was slower than the per-sample loop). A speed choice
/// only: the additions per element are the same for every tiling.
const TILE: usize = if cfg!(target_feature = "avx512f") {
    32
} else if cfg!(any(target_feature = "avx", not(target_arch = "x86_64"))) {
    16
} else {
    8
};

/// All column tiles of a group of `R` gradient rows starting at row `j`: tiles of [`TILE`]
/// columns (then one of 16 if at least that many remain), and the rest of the row as one tile of
/// its exact width (a kernel per width from 1 to 15), so the samples pass once per tile, not once
/// for each tile of 8, 4 and 1 columns.
#[inline(always)]
fn outer_rows<T: Real, const R: usize>(
    rows: &mut [T],
    ds: &[T],
    xs: &[T],
    (j, n, o): (usize, usize, usize),
) {
    let mut i = 0;
    while i + TILE <= n {
        outer_tile::<T, R, TILE>(rows, ds, xs, (j, i, n, o));
        i += TILE;
    }
    if TILE > 16 && i + 16 <= n {
        outer_tile::<T, R, 16>(rows, ds, xs, (j, i, n, o));
        i += 16;
    }
    let rest = n - i;
    if rest > 0 {
        by_length_1_to_16!(rest, C => outer_tile::<T, R, C>(rows, ds, xs, (j, i, n, o)), _ => {});
    }
}

/// Batch form of [`outer_acc`]: `G += sum_s d_s a_s^T`, bit for bit the result of calling
/// `outer_acc(g, d_s, a_s)` for every sample in order.
///
/// `G` has `n` columns and `o = g.len() / n` rows; the samples are the pairs of
/// `ds.chunks_exact(o)` and `xs.chunks_exact(n)`. Order: every element receives the additions
/// `g + d_sj * a_si` of the samples in increasing `s`, exactly as the per-sample loop does. The
/// work runs tile by tile (four rows by up to sixteen columns of `G` held in registers while all
/// the samples pass), so `G` is read and written once per call instead of once per sample. With
/// `n = 0` or `o = 0` nothing is written.
///
/// # Examples
///
/// ```
/// let mut g = [0.0; 2]; // 1 unit, 2 inputs
/// sinew_runtime::linalg::outer_acc_batch(&mut g, &[1.0, 2.0], &[1.0, 10.0, 3.0, 30.0], 2);
/// assert_eq!(g, [7.0, 70.0]);
/// ```
#[inline(always)]
pub fn outer_acc_batch<T: Real>(g: &mut [T], ds: &[T], xs: &[T], n: usize) {
    if n == 0 {
        return;
    }
    let o = g.len() / n;
    outer_acc_batch_rows(g, ds, xs, n, (0, o));
}

/// Part of [`outer_acc_batch`] for splitting the work between threads: `g` holds the rows
/// `first..first + g.len() / n` of a gradient with `o` rows in all (`rows = (first, o)`), and
/// receives exactly the additions that [`outer_acc_batch`] on the whole gradient gives those
/// rows. The error rows `ds.chunks_exact(o)` are full rows. Nothing is written for `n = 0`,
/// `o = 0`, or rows past `o`.
///
/// # Examples
///
/// ```
/// // One sample: 2 units, 1 input. The second row alone gets what the whole gives it.
/// let (ds, xs) = ([1.0, 2.0], [3.0]);
/// let mut whole = [0.0; 2];
/// sinew_runtime::linalg::outer_acc_batch(&mut whole, &ds, &xs, 1);
/// let mut second = [0.0; 1];
/// sinew_runtime::linalg::outer_acc_batch_rows(&mut second, &ds, &xs, 1, (1, 2));
/// assert_eq!(second[0], whole[1]);
/// ```
#[inline(always)]
pub fn outer_acc_batch_rows<T: Real>(
    g: &mut [T],
    ds: &[T],
    xs: &[T],
    n: usize,
    (first, o): (usize, usize),
) {
    if n == 0 || o == 0 {
        return;
    }
    let rows = (g.len() / n).min(o.saturating_sub(first));
    let blocks = rows / ROWS;
    for (jb, block) in pieces_mut(g, ROWS * n).take(blocks).enumerate() {
        outer_rows::<T, ROWS>(block, ds, xs, (first + jb * ROWS, n, o));
    }
    for (j, row) in pieces_mut(g, n).enumerate().take(rows).skip(blocks * ROWS) {
        outer_rows::<T, 1>(row, ds, xs, (first + j, n, o));
    }
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
    outer_acc_batch(
        g.as_flattened_mut(),
        ds.as_flattened(),
        xs.as_flattened(),
        I,
    );
}

/// Batch form of [`add_acc`]: `g += sum_s d_s`, adding the rows `ds.chunks_exact(g.len())` in
/// order, bit for bit the per-sample loop. With an empty `g` nothing is written.
///
/// Works for arrays too: pass `ds.as_flattened()` for a slice of `[T; N]` rows.
///
/// # Examples
///
/// ```
/// let mut g = [0.0, 1.0];
/// sinew_runtime::linalg::add_acc_batch(&mut g, &[1.0, 2.0, 3.0, 4.0]);
/// assert_eq!(g, [4.0, 7.0]);
/// ```
#[inline(always)]
pub fn add_acc_batch<T: Real>(g: &mut [T], ds: &[T]) {
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
            add_acc(g, d);
        }
    });
}

/// [`add_acc_batch`] for rows of `K`: `g` is copied into registers, the rows are added in order
/// and `g` is stored once (inside the engine, whose buffers the compiler cannot tell apart, the
/// slice form loaded and stored `g` for every sample). Each element gets the same additions in
/// the same order: the same bits.
#[inline(always)]
fn add_acc_rows<T: Real, const K: usize>(g: &mut [T; K], ds: &[T]) {
    let mut acc = *g;
    for d in ds.as_chunks::<K>().0 {
        for (a, v) in acc.iter_mut().zip(d) {
            *a += *v;
        }
    }
    *g = acc;
}

#[cfg(test)]
mod tests {
    //! Each kernel against a naive indexed loop written straight from its formula (the reference
    //! of matrixmultiply-style kernel tests; common practice), over every size 1..=9 x 1..=9 and
    //! a few large layer shapes, bit-exact because the reference adds in the documented order;
    //! the batch kernels against their per-sample kernels, bit for bit.
    use super::*;
    use crate::rng::SplitMix64;
    use crate::testutil::same_bits;
    use std::boxed::Box;
    use std::vec;
    use std::vec::Vec;

    /// Shapes (fan-in n, width o) of the sweep plus large layers of a 784-128-64-10 network.
    fn shapes() -> Vec<(usize, usize)> {
        let mut s = Vec::new();
        for n in 1..=9 {
            for o in 1..=9 {
                s.push((n, o));
            }
        }
        s.extend([(784, 128), (128, 64), (64, 10), (1, 300), (300, 1)]);
        // More widths with single rows after the blocks of four.
        s.extend([(5, 12), (3, 15), (17, 13), (24, 20)]);
        // Widths 10 to 16 (a kernel of its own per width in the slice forms).
        s.extend([
            (10, 8),
            (16, 7),
            (11, 3),
            (14, 17),
            (13, 13),
            (12, 1),
            (15, 6),
        ]);
        s
    }

    /// Test data in [-1, 1) from the crate's generator (itself checked against reference outputs).
    fn data<T: Real>(len: usize, rng: &mut SplitMix64) -> Vec<T> {
        (0..len)
            .map(|_| T::from_f64(rng.uniform(-1.0, 1.0)))
            .collect()
    }

    fn bits<T: Real>(v: &[T]) -> Vec<u64> {
        v.iter().map(|x| x.to_f64().to_bits()).collect()
    }

    /// The documented order of `affine`, written as plainly as possible: eight lane sums
    /// (product `i` into lane `i % 8`), folded `((l0+l4)+(l2+l6))+((l1+l5)+(l3+l7))`, plus bias.
    fn naive_affine<T: Real>(w: &[T], b: &[T], x: &[T], n: usize, o: usize) -> Vec<T> {
        let mut z = vec![T::ZERO; o];
        for j in 0..o {
            let mut l = [T::ZERO; 8];
            for i in 0..n {
                l[i % 8] += w[j * n + i] * x[i];
            }
            let s = ((l[0] + l[4]) + (l[2] + l[6])) + ((l[1] + l[5]) + (l[3] + l[7]));
            z[j] = s + b[j];
        }
        z
    }

    /// Plain sequential dot products (the textbook order), for a tolerance check of the lanes.
    fn sequential_affine(w: &[f64], b: &[f64], x: &[f64], n: usize, o: usize) -> Vec<f64> {
        (0..o)
            .map(|j| (0..n).map(|i| w[j * n + i] * x[i]).sum::<f64>() + b[j])
            .collect()
    }

    fn naive_back<T: Real>(w: &[T], d: &[T], n: usize, o: usize) -> Vec<T> {
        let mut out = vec![T::ZERO; n];
        for i in 0..n {
            let mut s = T::ZERO;
            for j in 0..o {
                s += w[j * n + i] * d[j];
            }
            out[i] = s;
        }
        out
    }

    fn naive_outer<T: Real>(g: &[T], d: &[T], a: &[T], n: usize, o: usize) -> Vec<T> {
        let mut g = g.to_vec();
        for j in 0..o {
            for i in 0..n {
                g[j * n + i] += d[j] * a[i];
            }
        }
        g
    }

    fn sweep<T: Real>() {
        let mut rng = SplitMix64::new(11);
        for (n, o) in shapes() {
            let w = data::<T>(n * o, &mut rng);
            let b = data::<T>(o, &mut rng);
            let x = data::<T>(n, &mut rng);
            let d = data::<T>(o, &mut rng);
            let g0 = data::<T>(n * o, &mut rng);

            let mut z = vec![T::ZERO; o];
            affine(&w, &b, &x, &mut z);
            assert_eq!(
                bits(&z),
                bits(&naive_affine(&w, &b, &x, n, o)),
                "affine {n}x{o}"
            );

            let mut out = vec![T::ONE; n];
            back(&w, &d, &mut out);
            assert_eq!(bits(&out), bits(&naive_back(&w, &d, n, o)), "back {n}x{o}");

            let mut g = g0.clone();
            outer_acc(&mut g, &d, &x);
            assert_eq!(
                bits(&g),
                bits(&naive_outer(&g0, &d, &x, n, o)),
                "outer {n}x{o}"
            );

            let mut gb = b.clone();
            add_acc(&mut gb, &d);
            let want: Vec<T> = (0..o).map(|j| b[j] + d[j]).collect();
            assert_eq!(bits(&gb), bits(&want), "add_acc {o}");

            let mean = data::<T>(n, &mut rng);
            let std: Vec<T> = data::<T>(n, &mut rng)
                .into_iter()
                .map(|s| s.abs() + T::HALF)
                .collect();
            let mut xs = vec![T::ZERO; n];
            standardize(&x, &mean, &std, &mut xs);
            let want: Vec<T> = (0..n).map(|i| (x[i] - mean[i]) / std[i]).collect();
            assert_eq!(bits(&xs), bits(&want), "standardize {n}");
        }
    }

    /// Every batch kernel equals its per-sample kernel applied to each sample in order, bit for
    /// bit, for 0..=9 samples and every shape of the sweep.
    fn batch_sweep<T: Real>() {
        let mut rng = SplitMix64::new(23);
        for (n, o) in shapes() {
            for m in [0, 1, 2, 3, 4, 5, 7, 9] {
                if n * o * m > 200_000 {
                    continue;
                }
                let w = data::<T>(n * o, &mut rng);
                let b = data::<T>(o, &mut rng);
                let xs = data::<T>(m * n, &mut rng);
                let ds = data::<T>(m * o, &mut rng);
                let g0 = data::<T>(n * o, &mut rng);

                let mut zs = vec![T::ONE; m * o];
                affine_batch(&w, &b, &xs, &mut zs, n);
                let mut want = vec![T::ONE; m * o];
                for (x, z) in xs.chunks_exact(n).zip(want.chunks_exact_mut(o)) {
                    affine(&w, &b, x, z);
                }
                assert_eq!(bits(&zs), bits(&want), "affine_batch {n}x{o} m={m}");
                // Both sample groupings, whichever the target picks.
                let mut paired = vec![T::ONE; m * o];
                affine_batch_with::<T, false, true>(&w, &b, &xs, &mut paired, n);
                assert_eq!(bits(&paired), bits(&want), "paired {n}x{o} m={m}");
                let mut single = vec![T::ONE; m * o];
                affine_batch_with::<T, true, false>(&w, &b, &xs, &mut single, n);
                assert_eq!(bits(&single), bits(&want), "one by one {n}x{o} m={m}");

                let mut outs = vec![T::ONE; m * n];
                back_batch(&w, &ds, &mut outs, n);
                let mut want = vec![T::ONE; m * n];
                for (d, out) in ds.chunks_exact(o).zip(want.chunks_exact_mut(n)) {
                    back(&w, d, out);
                }
                assert_eq!(bits(&outs), bits(&want), "back_batch {n}x{o} m={m}");

                let mut g = g0.clone();
                outer_acc_batch(&mut g, &ds, &xs, n);
                let mut want = g0.clone();
                for (d, x) in ds.chunks_exact(o).zip(xs.chunks_exact(n)) {
                    outer_acc(&mut want, d, x);
                }
                assert_eq!(bits(&g), bits(&want), "outer_acc_batch {n}x{o} m={m}");

                let mut gb = b.clone();
                add_acc_batch(&mut gb, &ds);
                let mut want = b.clone();
                for d in ds.chunks_exact(o) {
                    add_acc(&mut want, d);
                }
                assert_eq!(bits(&gb), bits(&want), "add_acc_batch {o} m={m}");
            }
        }
    }

    #[test]
    fn row_parts_of_the_batch_outer_product_equal_the_whole() {
        let mut rng = SplitMix64::new(41);
        for (n, o) in [(5, 9), (16, 13), (33, 7), (784, 10)] {
            let m = 6;
            let ds = data::<f32>(m * o, &mut rng);
            let xs = data::<f32>(m * n, &mut rng);
            let g0 = data::<f32>(n * o, &mut rng);
            let mut whole = g0.clone();
            outer_acc_batch(&mut whole, &ds, &xs, n);
            for split in [1, 3, 4, 5] {
                let mut parts = g0.clone();
                for (k, part) in parts.chunks_mut(split * n).enumerate() {
                    outer_acc_batch_rows(part, &ds, &xs, n, (k * split, o));
                }
                assert_eq!(bits(&parts), bits(&whole), "{n}x{o} split {split}");
            }
        }
    }

    #[test]
    fn batch_kernels_equal_per_sample_kernels_f32() {
        batch_sweep::<f32>();
    }

    #[test]
    fn batch_kernels_equal_per_sample_kernels_f64() {
        batch_sweep::<f64>();
    }

    #[test]
    fn batch_array_forms_equal_slice_forms() {
        let mut rng = SplitMix64::new(31);
        let w: [[f32; 5]; 3] =
            core::array::from_fn(|_| core::array::from_fn(|_| rng.uniform(-1.0, 1.0) as f32));
        let b: [f32; 3] = core::array::from_fn(|_| rng.uniform(-1.0, 1.0) as f32);
        let xs: [[f32; 5]; 4] =
            core::array::from_fn(|_| core::array::from_fn(|_| rng.uniform(-1.0, 1.0) as f32));
        let ds: [[f32; 3]; 4] =
            core::array::from_fn(|_| core::array::from_fn(|_| rng.uniform(-1.0, 1.0) as f32));
        let mut za = [[0.0; 3]; 4];
        affine_batch_n(&w, &b, &xs, &mut za);
        let mut zs = [0.0; 12];
        affine_batch(w.as_flattened(), &b, xs.as_flattened(), &mut zs, 5);
        assert_eq!(bits(za.as_flattened()), bits(&zs));
        let mut oa = [[0.0; 5]; 4];
        back_batch_n(&w, &ds, &mut oa);
        let mut os = [0.0; 20];
        back_batch(w.as_flattened(), ds.as_flattened(), &mut os, 5);
        assert_eq!(bits(oa.as_flattened()), bits(&os));
        let mut ga = [[0.0; 5]; 3];
        outer_acc_batch_n(&mut ga, &ds, &xs);
        let mut gs = [0.0; 15];
        outer_acc_batch(&mut gs, ds.as_flattened(), xs.as_flattened(), 5);
        assert_eq!(bits(ga.as_flattened()), bits(&gs));
        // Fewer outputs than inputs: only the pairs are computed.
        let mut z1 = [[7.0_f32; 3]; 1];
        affine_batch_n(&w, &b, &xs, &mut z1);
        assert_eq!(z1[0], za[0]);
    }

    #[test]
    fn lane_order_stays_close_to_the_sequential_sum() {
        // Reordering a sum changes only rounding: against the textbook order in f64 the lanes
        // agree to a few ulps of the sum of magnitudes (common practice for summation error).
        let mut rng = SplitMix64::new(5);
        for (n, o) in shapes() {
            let w = data::<f64>(n * o, &mut rng);
            let b = data::<f64>(o, &mut rng);
            let x = data::<f64>(n, &mut rng);
            let mut z = vec![0.0; o];
            affine(&w, &b, &x, &mut z);
            let want = sequential_affine(&w, &b, &x, n, o);
            for (j, (a, e)) in z.iter().zip(&want).enumerate() {
                let scale: f64 =
                    (0..n).map(|i| (w[j * n + i] * x[i]).abs()).sum::<f64>() + b[j].abs();
                assert!(
                    (a - e).abs() <= 2.0 * n as f64 * f64::EPSILON * scale,
                    "{n}x{o} row {j}"
                );
            }
        }
    }

    #[test]
    fn kernels_match_naive_loops_f64() {
        sweep::<f64>();
    }

    #[test]
    fn kernels_match_naive_loops_f32() {
        sweep::<f32>();
    }

    #[test]
    fn small_integer_example_is_exact() {
        // [[1,2,3],[4,5,6]] (7,8,9) = (50, 122) and its transpose against (1,1) is (5,7,9):
        // exact in floating point (plain arithmetic).
        let w = [[1.0_f64, 2.0, 3.0], [4.0, 5.0, 6.0]];
        let mut z = [0.0; 2];
        affine_n(&w, &[0.0, 0.0], &[7.0, 8.0, 9.0], &mut z);
        assert_eq!(z, [50.0, 122.0]);
        let mut out = [0.0; 3];
        back_n(&w, &[1.0, 1.0], &mut out);
        assert_eq!(out, [5.0, 7.0, 9.0]);
    }

    fn identity_and_zero<const N: usize>() {
        let mut rng = SplitMix64::new(3);
        let x: [f64; N] = core::array::from_fn(|_| rng.uniform(-5.0, 5.0));
        let b: [f64; N] = core::array::from_fn(|_| rng.uniform(-5.0, 5.0));
        let eye: [[f64; N]; N] =
            core::array::from_fn(|j| core::array::from_fn(|i| f64::from(u8::from(i == j))));
        let zero = [[0.0_f64; N]; N];

        // I x + 0 = x, I^T d = d, exactly.
        let mut z = [9.0; N];
        affine_n(&eye, &[0.0; N], &x, &mut z);
        assert_eq!(z, x);
        let mut out = [9.0; N];
        back_n(&eye, &x, &mut out);
        assert_eq!(out, x);
        // 0 x + b = b, 0^T d = 0.
        affine_n(&zero, &b, &x, &mut z);
        assert_eq!(z, b);
        back_n(&zero, &x, &mut out);
        assert_eq!(out, [0.0; N]);
        // G += e_j e_j^T on a zero G gives the identity.
        let mut g = [[0.0_f64; N]; N];
        for j in 0..N {
            let e: [f64; N] = core::array::from_fn(|i| f64::from(u8::from(i == j)));
            outer_acc_n(&mut g, &e, &e);
        }
        assert_eq!(g, eye);
    }

    #[test]
    fn identity_and_zero_matrices_are_exact() {
        identity_and_zero::<1>();
        identity_and_zero::<2>();
        identity_and_zero::<5>();
        identity_and_zero::<9>();
        identity_and_zero::<64>();
    }

    fn array_equals_slice<const I: usize, const O: usize>(seed: u64) {
        let mut rng = SplitMix64::new(seed);
        let mut w: Box<[[f32; I]; O]> =
            vec![[0.0_f32; I]; O].into_boxed_slice().try_into().unwrap();
        for v in w.as_flattened_mut() {
            *v = rng.uniform(-1.0, 1.0) as f32;
        }
        let b: [f32; O] = core::array::from_fn(|_| rng.uniform(-1.0, 1.0) as f32);
        let x: [f32; I] = core::array::from_fn(|_| rng.uniform(-1.0, 1.0) as f32);
        let d: [f32; O] = core::array::from_fn(|_| rng.uniform(-1.0, 1.0) as f32);
        let s: [f32; I] = core::array::from_fn(|_| rng.uniform(0.5, 2.0) as f32);

        let (mut za, mut zs) = ([0.0; O], [0.0; O]);
        affine_n(&w, &b, &x, &mut za);
        affine(w.as_flattened(), &b, &x, &mut zs);
        assert_eq!(bits(&za), bits(&zs));

        let (mut oa, mut os) = ([0.0; I], [0.0; I]);
        back_n(&w, &d, &mut oa);
        back(w.as_flattened(), &d, &mut os);
        assert_eq!(bits(&oa), bits(&os));

        let mut ga = w.clone();
        let mut gs = w.as_flattened().to_vec();
        outer_acc_n(&mut ga, &d, &x);
        outer_acc(&mut gs, &d, &x);
        assert_eq!(bits(ga.as_flattened()), bits(&gs));

        let (mut xa, mut xs) = ([0.0; I], [0.0; I]);
        standardize_n(&x, &s, &s, &mut xa);
        standardize(&x, &s, &s, &mut xs);
        assert_eq!(bits(&xa), bits(&xs));
    }

    #[test]
    fn array_forms_equal_slice_forms_bitwise() {
        array_equals_slice::<1, 1>(1);
        array_equals_slice::<3, 7>(2);
        array_equals_slice::<9, 9>(3);
        array_equals_slice::<784, 128>(4);
        array_equals_slice::<64, 10>(5);
        // Inline lane folds (fewer than 17 inputs), blocks of four rows and single rows.
        array_equals_slice::<6, 10>(6);
        array_equals_slice::<10, 8>(7);
        array_equals_slice::<16, 13>(8);
        array_equals_slice::<17, 12>(9);
        array_equals_slice::<8, 3>(10);
    }

    /// A value for the across-samples sweep: mostly in [-1, 1), with signed zeros (the case where
    /// leaving out an empty lane could change a bit), infinities, NaN, subnormals and values
    /// whose products overflow.
    fn edgy<T: Real>(rng: &mut SplitMix64) -> T {
        let special = [
            0.0,
            -0.0,
            f64::INFINITY,
            f64::NEG_INFINITY,
            f64::NAN,
            1e-310,
            -3e38,
            1e300,
        ];
        let r = rng.uniform(0.0, 1.0);
        if r < 0.3 {
            // Signed zeros, many of them, so that whole rows of products are -0.
            T::from_f64(if r < 0.15 { -0.0 } else { 0.0 })
        } else if r < 0.36 {
            T::from_f64(special[(r * 1000.0) as usize % special.len()])
        } else {
            T::from_f64(rng.uniform(-1.0, 1.0))
        }
    }

    fn across_equals_per_sample<T: Real, const I: usize, const O: usize>(seed: u64) {
        let mut rng = SplitMix64::new(seed);
        let w: [[T; I]; O] = core::array::from_fn(|_| core::array::from_fn(|_| edgy(&mut rng)));
        let b: [T; O] = core::array::from_fn(|_| edgy(&mut rng));
        for m in [0, 1, 7, 8, 9, 16, 23, 33] {
            let xs: Vec<[T; I]> = (0..m)
                .map(|_| core::array::from_fn(|_| edgy(&mut rng)))
                .collect();
            let mut zs = vec![[T::ZERO; O]; m];
            affine_batch_n(&w, &b, &xs, &mut zs);
            for (s, (x, z)) in xs.iter().zip(&zs).enumerate() {
                let mut want = [T::ZERO; O];
                affine(w.as_flattened(), &b, x, &mut want);
                assert_eq!(
                    same_bits(z),
                    same_bits(&want),
                    "{I}x{O}, {m} samples, sample {s}"
                );
            }
            // The slice forms (the engine's), with the fan-in known only at run time.
            let mut flat = vec![T::ONE; m * O];
            affine_batch(w.as_flattened(), &b, xs.as_flattened(), &mut flat, I);
            assert_eq!(
                same_bits(&flat),
                same_bits(zs.as_flattened()),
                "slice {I}x{O}, {m}"
            );
            let ds: Vec<[T; O]> = (0..m)
                .map(|_| core::array::from_fn(|_| edgy(&mut rng)))
                .collect();
            let mut flat = vec![T::ONE; m * I];
            back_batch(w.as_flattened(), ds.as_flattened(), &mut flat, I);
            let mut outs = vec![[T::ONE; I]; m];
            back_batch_n(&w, &ds, &mut outs);
            for (s, (d, out)) in ds.iter().zip(&outs).enumerate() {
                let mut want = [T::ONE; I];
                back(w.as_flattened(), d, &mut want);
                assert_eq!(
                    same_bits(out),
                    same_bits(&want),
                    "back {I}x{O}, {m}, sample {s}"
                );
                let got = &flat[s * I..(s + 1) * I];
                assert_eq!(
                    same_bits(got),
                    same_bits(&want),
                    "slice back {I}x{O}, {m}, {s}"
                );
            }
            // Fewer outputs than inputs: only the pairs are written, the rest keep their value.
            let mut short = vec![[T::ONE; O]; m / 2];
            affine_batch_n(&w, &b, &xs, &mut short);
            let head = &zs.as_flattened()[..m / 2 * O];
            assert_eq!(same_bits(short.as_flattened()), same_bits(head));
        }
    }

    fn across_sweep<T: Real>() {
        across_equals_per_sample::<T, 1, 1>(1);
        across_equals_per_sample::<T, 2, 3>(2);
        across_equals_per_sample::<T, 3, 9>(3);
        across_equals_per_sample::<T, 4, 4>(4);
        across_equals_per_sample::<T, 5, 2>(5);
        across_equals_per_sample::<T, 6, 10>(6);
        across_equals_per_sample::<T, 7, 5>(7);
        across_equals_per_sample::<T, 8, 3>(8);
        across_equals_per_sample::<T, 9, 7>(9);
        across_equals_per_sample::<T, 10, 8>(10);
        across_equals_per_sample::<T, 11, 1>(11);
        across_equals_per_sample::<T, 12, 6>(12);
        across_equals_per_sample::<T, 13, 13>(13);
        across_equals_per_sample::<T, 14, 2>(14);
        across_equals_per_sample::<T, 15, 4>(15);
        across_equals_per_sample::<T, 16, 11>(16);
        // More rows than one pass of the transposed block holds (16).
        across_equals_per_sample::<T, 6, 40>(18);
        across_equals_per_sample::<T, 3, 17>(19);
        // Past the threshold: the per-sample path.
        across_equals_per_sample::<T, 17, 5>(17);
    }

    #[test]
    fn short_rows_across_samples_equal_the_per_sample_kernel_f32() {
        across_sweep::<f32>();
    }

    #[test]
    fn short_rows_across_samples_equal_the_per_sample_kernel_f64() {
        across_sweep::<f64>();
    }

    #[test]
    fn mismatched_lengths_truncate_and_never_panic() {
        let w = [1.0, 2.0, 3.0, 4.0, 5.0]; // two full rows of 2, one stray element
        let mut z = [7.0; 4];
        affine(&w, &[0.0; 4], &[1.0, 1.0], &mut z);
        assert_eq!(z, [3.0, 7.0, 7.0, 7.0]);
        // Fan-in zero: rows are empty, z = b.
        let mut z = [7.0; 2];
        affine(&w, &[1.0, 2.0], &[], &mut z);
        assert_eq!(z, [1.0, 2.0]);
        let mut out: [f64; 0] = [];
        back(&w, &[1.0], &mut out);
        let mut g = [0.0; 3];
        outer_acc(&mut g, &[1.0], &[]);
        assert_eq!(g, [0.0; 3]);
        // Fewer errors than rows: only the rows with an error contribute.
        let mut out = [0.0; 2];
        back(&w, &[1.0], &mut out);
        assert_eq!(out, [1.0, 2.0]);
        let mut g = [0.0; 3];
        add_acc(&mut g, &[1.0]);
        assert_eq!(g, [1.0, 0.0, 0.0]);
    }
}
