//! The batch fast kernels behind [`affine_batch`] and [`outer_acc_batch`]: a block of samples
//! stored row by row, each weight tile read once per block instead of once per sample. Every
//! output gets exactly the operations of the per-sample kernel ([`crate::reference`]), in the
//! same order; only the order in which independent outputs are computed changes.
//!
//! Measurements behind these choices: `bench/NOTES.md`.
//!
//! [`affine_batch`]: super::affine_batch
//! [`outer_acc_batch`]: super::outer_acc_batch

use super::sample::{
    affine_with, four_rows, input_tail, lane_sum, lane_sum4, lanes_mul_add, padded, row_lanes,
    rows4_lanes,
};
use super::{LANES, ROWS};
use crate::each::{pieces, pieces_mut};
use crate::Real;

/// Samples that [`affine_batch_with`] runs together against each group of [`ROWS`] rows: `ROWS x
/// SAMPLES` independent accumulators per pass over the rows, and each weight load serves
/// `SAMPLES` samples. (A speed choice only: every output gets the operations of [`row_lanes`].)
const SAMPLES: usize = 2;

/// Whether [`affine_batch_with`] pairs samples: two samples per pass need eight 8-lane
/// accumulators, sixteen 128-bit registers without AVX, which spill; there the samples go one by
/// one (`bench/NOTES.md`, `linalg::PAIRED`). A speed choice only: both give the same bits (the
/// tests run both).
pub(super) const PAIRED: bool = cfg!(any(target_feature = "avx", not(target_arch = "x86_64")));

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

/// The kernel of [`affine_batch`](super::affine_batch), with the lane sums inline when `INLINE`
/// and the samples in pairs when `PAIRS`: for each block of four rows every sample (two at a time
/// with [`rows4_lanes_x2`], then one by one), then each row left for every sample.
#[inline(always)]
pub(super) fn affine_batch_with<T: Real, const INLINE: bool, const PAIRS: bool>(
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
        // Columns outside, rows inside, so the vectorised loop runs along the contiguous columns
        // of each row (`bench/NOTES.md`, `linalg::outer_tile`). Each element still gets
        // `acc + d * x`, one sample after the other.
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

/// Widest column tile of [`outer_rows`]: its `ROWS x TILE` accumulators must stay in registers
/// (32 columns with AVX-512, 16 with 256-bit registers, 8 with 128-bit registers only; see
/// `bench/NOTES.md`, `linalg::TILE`). A speed choice only: the additions per element are the same
/// for every tiling.
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

/// The kernel of [`outer_acc_batch_rows`](super::outer_acc_batch_rows): blocks of four gradient
/// rows, then the rows left one by one, each as column tiles ([`outer_rows`]).
#[inline(always)]
pub(super) fn outer_acc_batch_with<T: Real>(
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
