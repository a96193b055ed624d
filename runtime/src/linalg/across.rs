//! Short rows, vectorised across samples: the affine map of a block of [`BLOCK`] samples with
//! one SIMD lane per sample.
//!
//! A row of 6 to 16 inputs fills at most two chunks of the eight lane sums of [`affine`], so per
//! sample the vector unit mostly adds padding and folds lanes horizontally. Here the block is
//! transposed (input `i` of the eight samples side by side) and every operation of the per-sample
//! order is done for eight samples at once: each sample sees exactly the additions and
//! multiplications of [`affine`], in the same order, so the bits are the same. The fold is the
//! one of [`affine`]'s lane sum with the lanes that receive no product left out, as the emitter's
//! unrolled code does (such a lane is `+0`, and adding `+0` to a lane sum, which is never `-0`,
//! changes nothing).
//!
//! [`affine`]: super::affine

use super::LANES;
use crate::Real;

/// Samples per block: one per lane of a 256-bit register of `f32`.
pub(super) const BLOCK: usize = 8;

/// Eight values, one per sample of a block.
type Across<T> = [T; BLOCK];

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
    core::array::from_fn(|s| a[s] + b[s])
}

/// The lane fold `((l0 + l4) + (l2 + l6)) + ((l1 + l5) + (l3 + l7))` of every sample, leaving out
/// the lanes from `used` on (they hold `+0`). `used` is a constant where this is inlined, so the
/// choices vanish.
#[inline(always)]
fn fold<T: Real>(l: [Across<T>; LANES], used: usize) -> Across<T> {
    let mut v: [Option<Across<T>>; LANES] = core::array::from_fn(|k| (k < used).then_some(l[k]));
    let mut width = LANES;
    while width > 1 {
        width /= 2;
        for k in 0..width {
            v[k] = match (v[k], v[k + width]) {
                (Some(a), Some(b)) => Some(add(a, b)),
                (a, None) => a,
                (None, b) => b,
            };
        }
    }
    v[0].unwrap_or([T::ZERO; BLOCK])
}

/// `zs[s] = W xs[s] + b` for the [`BLOCK`] samples of a block, bit for bit [`affine`] of each
/// (`I >= 1`; with `I = 0` the caller takes the per-sample path).
///
/// [`affine`]: super::affine
#[inline(always)]
pub(super) fn affine_block<T: Real, const I: usize, const O: usize>(
    w: &[[T; I]; O],
    b: &[T; O],
    xs: &[[T; I]; BLOCK],
    zs: &mut [[T; O]; BLOCK],
) {
    let xt: [Across<T>; I] = core::array::from_fn(|i| core::array::from_fn(|s| xs[s][i]));
    let mut zt = [[T::ZERO; BLOCK]; O];
    affine_across(w, b, &xt, &mut zt);
    for (s, z) in zs.iter_mut().enumerate() {
        for (zj, v) in z.iter_mut().zip(&zt) {
            if let Some(v) = v.get(s) {
                *zj = *v;
            }
        }
    }
}

/// The arithmetic of [`affine_block`] on the transposed block: `zt[j][s]` from `xt[i][s]`.
///
/// Not inlined, on purpose: inlined together with the transpositions, the compiler turns the
/// whole block into scalar code (one product per instruction, measured); on its own the row
/// loop runs every operation on the eight samples in one SIMD instruction.
#[inline(never)]
fn affine_across<T: Real, const I: usize, const O: usize>(
    w: &[[T; I]; O],
    b: &[T; O],
    xt: &[Across<T>; I],
    zt: &mut [Across<T>; O],
) {
    for ((row, bj), zj) in w.iter().zip(b).zip(zt.iter_mut()) {
        let mut lanes = [[T::ZERO; BLOCK]; LANES];
        for (i, (wi, xi)) in row.iter().zip(xt).enumerate() {
            mul_add(&mut lanes[i % LANES], *wi, xi);
        }
        let sum = fold(lanes, I);
        for (z, v) in zj.iter_mut().zip(sum) {
            *z = v + *bj;
        }
    }
}
