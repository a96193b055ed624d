//! Short rows, vectorised across samples: the affine map (and the transposed product) of a block
//! of [`BLOCK`] samples with one SIMD lane per sample.
//!
//! A row of 6 to 16 inputs fills at most two chunks of the eight lane sums of [`affine`], so per
//! sample the vector unit mostly adds padding and folds lanes horizontally. Here the block is
//! transposed (input `i` of the eight samples side by side, [`crate::block`]) and every operation
//! of the per-sample order is done for eight samples at once: each sample sees exactly the
//! additions and multiplications of [`affine`], in the same order, so the bits are the same. The
//! fold is [`fold_lanes`] with the lanes that receive no product left out, as the emitter's
//! unrolled code does (such a lane is `+0`, and adding `+0` to a lane sum, which is never `-0`,
//! changes nothing).
//!
//! [`affine`]: super::affine

use super::{fold_lanes, LANES};
use crate::block::{store_rows, transpose, Across, BLOCK};
use crate::each::{blocks, pieces, pieces_mut, zip_with};
use crate::Real;

/// `acc_s += w * x_s` for every sample.
#[inline(always)]
fn mul_add<T: Real>(acc: &mut Across<T>, w: T, x: &Across<T>) {
    for (a, xs) in acc.iter_mut().zip(x) {
        *a += w * *xs;
    }
}

/// `a_s + b_s` for every sample.
#[inline(always)]
fn add<T: Real>(a: Across<T>, b: Across<T>) -> Across<T> {
    zip_with(a, &b, |x, y| x + y)
}

/// [`fold_lanes`] of every sample, leaving out the lanes from `used` on (they hold `+0`): a pair
/// with one lane left out is that lane. `used` is a constant where this is inlined, so the choices
/// vanish.
#[inline(always)]
fn fold<T: Real>(l: [Across<T>; LANES], used: usize) -> Across<T> {
    let [l0, l1, l2, l3, l4, l5, l6, l7] = l;
    let lane = |k: usize, v: Across<T>| (k < used).then_some(v);
    let lanes = [
        lane(0, l0),
        lane(1, l1),
        lane(2, l2),
        lane(3, l3),
        lane(4, l4),
        lane(5, l5),
        lane(6, l6),
        lane(7, l7),
    ];
    let pair = |a: Option<Across<T>>, b: Option<Across<T>>| match (a, b) {
        (Some(a), Some(b)) => Some(add(a, b)),
        (a, None) => a,
        (None, b) => b,
    };
    fold_lanes(lanes, pair).unwrap_or([T::ZERO; BLOCK])
}

/// Output rows per pass of the slice forms (the transposed block of `CHUNK` outputs lives on
/// the stack).
const CHUNK: usize = 16;

/// `zs[s][j] = zt[j][s]` for the block's samples, `o <= W <= CHUNK` outputs each (`zs` holds
/// `BLOCK * o` values, sample by sample).
///
/// Each sample is stored as `W` values from its first output: the `W - o` past its row land on
/// the next sample's row, which is stored after it (the samples go in increasing order). A
/// sample whose `W` values would pass the end of `zs` is stored value by value.
#[inline(always)]
fn rows_out<T: Real, const W: usize>(zt: &[Across<T>; CHUNK], zs: &mut [T], o: usize) {
    for s in 0..BLOCK {
        let mut row = [T::ZERO; W];
        for (r, v) in row.iter_mut().zip(zt) {
            if let Some(v) = v.get(s) {
                *r = *v;
            }
        }
        let Some(z) = zs.get_mut(s * o..) else { return };
        if let Some(z) = z.first_chunk_mut::<W>() {
            *z = row;
        } else {
            for (zj, v) in z.iter_mut().zip(row).take(o) {
                *zj = v;
            }
        }
    }
}

/// `dt[j][s] = ds[s][j]` for the block's samples, `o <= W <= CHUNK` errors each (`ds` holds
/// `BLOCK * o` values, sample by sample). Each sample is read as `W` values from its first
/// error (zeros past the end of `ds`); `dt[j]` for `j >= o` is left with values of the next
/// sample, which [`back_across`] never reads (it stops at the `o` rows of `W`).
#[inline(always)]
fn rows_in<T: Real, const W: usize>(ds: &[T], o: usize, dt: &mut [Across<T>; CHUNK]) {
    for s in 0..BLOCK {
        let d = ds.get(s * o..).unwrap_or_default();
        let row: [T; W] = match d.first_chunk::<W>() {
            Some(r) => *r,
            None => {
                let mut r = [T::ZERO; W];
                for (rj, v) in r.iter_mut().zip(d) {
                    *rj = *v;
                }
                r
            }
        };
        for (dj, v) in dt.iter_mut().zip(row) {
            if let Some(slot) = dj.get_mut(s) {
                *slot = v;
            }
        }
    }
}

/// `zs[s] = W xs[s] + b` for the [`BLOCK`] samples of a block, bit for bit [`affine`] of each.
///
/// `w` holds `o` rows of `I >= 1` inputs and `b` at least `o` values; `zs` holds the block's
/// outputs sample by sample, `o` each (`BLOCK * o` values). Outputs go `CHUNK` rows at a time.
///
/// [`affine`]: super::affine
#[inline(always)]
pub(super) fn affine_block<T: Real, const I: usize>(
    w: &[[T; I]],
    b: &[T],
    xs: &[[T; I]; BLOCK],
    zs: &mut [T],
    o: usize,
) {
    let xt = transpose(xs, T::ZERO);
    let mut zt = [[T::ZERO; BLOCK]; CHUNK];
    if o <= CHUNK && w.len() == o && b.len() == o {
        // One chunk: the outputs go back as rows of a fixed width (a run-time `o` would make
        // the copy a loop with a range check per value).
        affine_across(w, b, &xt, zt.get_mut(..o).unwrap_or_default());
        match o {
            0..=4 => rows_out::<T, 4>(&zt, zs, o),
            5..=8 => rows_out::<T, 8>(&zt, zs, o),
            _ => rows_out::<T, CHUNK>(&zt, zs, o),
        }
        return;
    }
    for (c, (wc, bc)) in blocks(w, CHUNK).zip(blocks(b, CHUNK)).enumerate() {
        let zc = zt.get_mut(..wc.len().min(bc.len())).unwrap_or_default();
        affine_across(wc, bc, &xt, zc);
        let j0 = c * CHUNK;
        for (s, z) in pieces_mut(zs, o).enumerate().take(BLOCK) {
            let Some(z) = z.get_mut(j0..) else { continue };
            for (zj, v) in z.iter_mut().zip(zc.iter()) {
                if let Some(v) = v.get(s) {
                    *zj = *v;
                }
            }
        }
    }
}

/// The arithmetic of [`affine_block`] on the transposed block: `zt[j][s]` from `xt[i][s]`.
///
/// Not inlined, on purpose: on its own the row loop runs every operation on the eight samples in
/// one SIMD instruction (`bench/NOTES.md`, `linalg::affine_across`).
#[inline(never)]
fn affine_across<T: Real, const I: usize>(
    w: &[[T; I]],
    b: &[T],
    xt: &[Across<T>; I],
    zt: &mut [Across<T>],
) {
    for ((row, bj), zj) in w.iter().zip(b).zip(zt.iter_mut()) {
        let mut lanes = [[T::ZERO; BLOCK]; LANES];
        for (i, (wi, xi)) in row.iter().zip(xt).enumerate() {
            if let Some(lane) = lanes.get_mut(i % LANES) {
                mul_add(lane, *wi, xi);
            }
        }
        let sum = fold(lanes, I);
        for (z, v) in zj.iter_mut().zip(sum) {
            *z = v + *bj;
        }
    }
}

/// `outs[s] = W^T ds[s]` for the [`BLOCK`] samples of a block, bit for bit [`back`] of each:
/// every `out_i` from `ZERO`, adding `w[j][i] * d_j` in increasing `j`.
///
/// `w` holds `o` rows of `I >= 1` values; `ds` the block's errors sample by sample, `o` each.
/// The errors go `CHUNK` rows at a time, in order, into the same sums.
///
/// [`back`]: super::back
#[inline(always)]
pub(super) fn back_block<T: Real, const I: usize>(
    w: &[[T; I]],
    ds: &[T],
    o: usize,
    outs: &mut [[T; I]; BLOCK],
) {
    let mut ot = [[T::ZERO; BLOCK]; I];
    let mut dt = [[T::ZERO; BLOCK]; CHUNK];
    if o <= CHUNK && w.len() == o {
        // One chunk, read as rows of a fixed width (see `affine_block`).
        match o {
            0..=4 => rows_in::<T, 4>(ds, o, &mut dt),
            5..=8 => rows_in::<T, 8>(ds, o, &mut dt),
            _ => rows_in::<T, CHUNK>(ds, o, &mut dt),
        }
        back_across(w, dt.get(..o).unwrap_or_default(), &mut ot);
    } else {
        for (c, wc) in blocks(w, CHUNK).enumerate() {
            let j0 = c * CHUNK;
            for (s, d) in pieces(ds, o).enumerate().take(BLOCK) {
                for (dj, v) in dt.iter_mut().zip(d.get(j0..).unwrap_or_default()) {
                    if let Some(slot) = dj.get_mut(s) {
                        *slot = *v;
                    }
                }
            }
            back_across(wc, dt.get(..wc.len()).unwrap_or_default(), &mut ot);
        }
    }
    store_rows(&ot, outs);
}

/// The arithmetic of [`back_block`] on the transposed block (not inlined, as [`affine_across`]):
/// adds the rows of `w` in order to each `ot[i]`.
///
/// One output at a time, its sum in a register (the form of [`affine_across`]; `bench/NOTES.md`,
/// `linalg::back_across`).
#[inline(never)]
fn back_across<T: Real, const I: usize>(w: &[[T; I]], dt: &[Across<T>], ot: &mut [Across<T>; I]) {
    for (i, o) in ot.iter_mut().enumerate() {
        let mut acc = *o;
        for (row, dj) in w.iter().zip(dt) {
            if let Some(wji) = row.get(i) {
                mul_add(&mut acc, *wji, dj);
            }
        }
        *o = acc;
    }
}

/// Blocks of [`BLOCK`] samples of [`affine_batch`](super::affine_batch) with `I` inputs (a
/// constant): `w` exactly `o` rows, `b` exactly `o` values. Returns the samples done.
#[inline(always)]
pub(super) fn affine_blocks<T: Real, const I: usize>(
    w: &[[T; I]],
    b: &[T],
    xs: &[[T; I]],
    zs: &mut [T],
) -> usize {
    let o = b.len();
    let xb = xs.as_chunks::<BLOCK>().0;
    let mut done = 0;
    for (x, z) in xb.iter().zip(pieces_mut(zs, BLOCK * o)) {
        affine_block(w, b, x, z, o);
        done += BLOCK;
    }
    done
}

/// Blocks of [`BLOCK`] samples of [`back_batch`](super::back_batch) with `I` outputs (a
/// constant): `w` exactly `o` rows. Returns the samples done.
#[inline(always)]
pub(super) fn back_blocks<T: Real, const I: usize>(
    w: &[[T; I]],
    ds: &[T],
    o: usize,
    outs: &mut [[T; I]],
) -> usize {
    let ob = outs.as_chunks_mut::<BLOCK>().0;
    let mut done = 0;
    for (d, out) in pieces(ds, BLOCK * o).zip(ob.iter_mut()) {
        back_block(w, d, o, out);
        done += BLOCK;
    }
    done
}
