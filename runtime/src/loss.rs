//! Losses of one sample, computed from the logits where that matters, and the output error.
//!
//! Cross-entropies take the output layer's pre-activations `z` (the logits), never a rounded
//! probability, so they stay finite when a unit saturates. All sums start at `ZERO` and add in
//! increasing index. The operands of one sample have one length: the slice forms return
//! [`LengthMismatch`] otherwise (and write nothing), the array forms (`_n`) take arrays of one
//! length.
//!
//! The plain losses ([`log_sum_exp`], [`logistic_cross_entropy`], [`softmax_cross_entropy`],
//! [`squared_error`]) are their [`crate::reference`] loops. The fused and batch softmax forms
//! ([`softmax_with_cross_entropy`], [`softmax_cross_entropy_batch`],
//! [`softmax_cross_entropy_batch_n`]) are fast paths, tested bit for bit against the reference's
//! three steps.

use crate::block::{store_rows, transpose, Across, BLOCK};
use crate::each::{map, pieces, pieces_mut, zip_with};
use crate::reference;
use crate::shape::{self, LengthMismatch};
use crate::Real;

/// Softplus `ln(1 + e^z)`, computed stably as `max(z, 0) + ln_1p(e^-|z|)`.
///
/// The exponent is never positive, so nothing overflows: `softplus(1000) = 1000` and
/// `softplus(-1000) = 0` (the true value, about e^-1000, is below the smallest subnormal).
///
/// # Examples
///
/// ```
/// use sinew_runtime::loss::softplus;
///
/// assert_eq!(softplus(1000.0_f64), 1000.0);
/// assert_eq!(softplus(0.0_f64), core::f64::consts::LN_2);
/// ```
#[inline]
pub fn softplus<T: Real>(z: T) -> T {
    z.max(T::ZERO) + (-z.abs()).exp().ln_1p()
}

/// Log-sum-exp `ln(sum_j e^(z_j))`, computed stably as `m + ln(sum_j e^(z_j - m))` with
/// `m = max_j z_j`.
///
/// `m` is folded from the first element with [`Real::max`]; the sum starts at `ZERO` and adds in
/// increasing `j`. An empty slice gives `ZERO`. If `m` is not finite the result is `m` itself
/// (`+inf`, `-inf` when every entry is `-inf`, or NaN).
///
/// # Examples
///
/// ```
/// use sinew_runtime::loss::log_sum_exp;
///
/// let v = log_sum_exp(&[1000.0_f64, 1000.0]);
/// assert_eq!(v, 1000.0 + core::f64::consts::LN_2);
/// ```
pub fn log_sum_exp<T: Real>(z: &[T]) -> T {
    reference::log_sum_exp(z)
}

/// Per-unit logistic cross-entropy from the logits (sigmoid outputs):
/// `sum_j (softplus(z_j) - y_j z_j)`, each term evaluated as
/// `(max(z_j, 0) - y_j z_j) + ln_1p(e^-|z_j|)`.
///
/// This equals `-sum_j (y_j ln a_j + (1 - y_j) ln(1 - a_j))` with `a_j = sigmoid(z_j)`, without
/// ever forming `ln a_j`. Summed in increasing `j`; `z` and `y` of one length, else
/// [`LengthMismatch`].
///
/// The grouping keeps full relative accuracy for hard targets: for a confidently correct unit
/// (`y = 1`, `z > 0`, or `y = 0`, `z < 0`) the first term is exactly 0 and the loss is
/// `ln_1p(e^-|z|)`, about `e^-|z|`, to the last bit. Subtracting `y z` from `softplus(z)` instead
/// would cancel (in `f32` it returns 0 from `|z|` of about 15 on, where the true loss is about
/// 3e-7).
///
/// # Examples
///
/// ```
/// use sinew_runtime::loss::logistic_cross_entropy;
///
/// // A confident, correct unit costs almost nothing; a confident, wrong one costs about |z|.
/// assert_eq!(logistic_cross_entropy(&[800.0_f64], &[1.0])?, 0.0);
/// assert_eq!(logistic_cross_entropy(&[800.0_f64], &[0.0])?, 800.0);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
pub fn logistic_cross_entropy<T: Real>(z: &[T], y: &[T]) -> Result<T, LengthMismatch> {
    shape::expect("y", z.len(), y.len())?;
    Ok(logistic_cross_entropy_kernel(z, y))
}

/// The loop of [`logistic_cross_entropy`], on operands whose lengths agree.
fn logistic_cross_entropy_kernel<T: Real>(z: &[T], y: &[T]) -> T {
    reference::logistic_cross_entropy_kernel(z, y)
}

/// Categorical cross-entropy from the logits (softmax outputs):
/// `sum_j y_j (lse(z) - z_j)` with `lse` = [`log_sum_exp`] over all of `z`.
///
/// This equals `-sum_j y_j ln a_j` with `a = softmax(z)`, without ever forming `ln a_j`.
/// `lse(z)` is computed once; the sum runs in increasing `j`. `z` and `y` of one length, else
/// [`LengthMismatch`].
///
/// # Examples
///
/// ```
/// use sinew_runtime::loss::softmax_cross_entropy;
///
/// let l = softmax_cross_entropy(&[0.0_f64, 0.0], &[1.0, 0.0])?;
/// assert_eq!(l, core::f64::consts::LN_2);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
pub fn softmax_cross_entropy<T: Real>(z: &[T], y: &[T]) -> Result<T, LengthMismatch> {
    shape::expect("y", z.len(), y.len())?;
    Ok(softmax_cross_entropy_kernel(z, y))
}

/// The loop of [`softmax_cross_entropy`], on operands whose lengths agree.
fn softmax_cross_entropy_kernel<T: Real>(z: &[T], y: &[T]) -> T {
    reference::softmax_cross_entropy_kernel(z, y)
}

/// The softmax outputs and the categorical cross-entropy of one sample together: writes
/// `a = softmax(z)` and returns [`softmax_cross_entropy`]`(z, y)`, bit for bit what copying `z`
/// into `a`, running [`act::softmax`] on `a` and calling [`softmax_cross_entropy`] give.
///
/// Both need the same maximum, the same exponentials `e^(z_j - m)` and the same sum of them (the
/// orders of [`act::softmax`] and [`log_sum_exp`] agree), so they are computed once. `z`, `y`
/// and `a` of one length, else [`LengthMismatch`] and `a` is left untouched.
///
/// [`act::softmax`]: crate::act::softmax
///
/// # Examples
///
/// ```
/// use sinew_runtime::loss::softmax_with_cross_entropy;
///
/// let mut a = [0.0_f64; 2];
/// let l = softmax_with_cross_entropy(&[0.0, 0.0], &[1.0, 0.0], &mut a)?;
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
fn softmax_with_cross_entropy_kernel<T: Real>(z: &[T], y: &[T], a: &mut [T]) -> T {
    let Some(first) = z.first() else {
        crate::act::softmax(a);
        return T::ZERO;
    };
    let mut m = *first;
    for zj in z {
        m = m.max(*zj);
    }
    for (aj, zj) in a.iter_mut().zip(z) {
        *aj = *zj;
    }
    crate::act::by_lanes(a, |x| (x - m).exp());
    let mut s = T::ZERO;
    for aj in a.iter() {
        s += *aj;
    }
    // As `log_sum_exp`: an infinite or NaN maximum is the result itself.
    let lse = if m * T::ZERO != T::ZERO {
        m
    } else {
        m + s.ln()
    };
    for aj in a.iter_mut() {
        *aj /= s;
    }
    let mut loss = T::ZERO;
    for (zj, yj) in z.iter().zip(y) {
        loss += *yj * (lse - *zj);
    }
    loss
}

/// [`softmax_with_cross_entropy`] for every sample of a block: `as_[s] = softmax(zs[s])` and the
/// losses added to `sum` in sample order, over the rows of `zs`, `ys` and `as_` paired by `zip`
/// (as many samples as the shortest holds); returns the sum.
///
/// Bit for bit the per-sample loop `sum += softmax_with_cross_entropy(z, y, a)`. Eight samples at
/// a time run side by side, one per SIMD lane (the maximum, the exponentials, the sums and the
/// divisions of eight samples at once, each sample in its own order); the logarithms stay one
/// call per sample.
///
/// # Examples
///
/// ```
/// use sinew_runtime::loss::softmax_cross_entropy_batch_n;
///
/// let zs = [[0.0_f64, 0.0]; 9];
/// let ys = [[1.0, 0.0]; 9];
/// let mut a = [[0.0; 2]; 9];
/// let sum = softmax_cross_entropy_batch_n(&zs, &ys, &mut a, 0.0);
/// assert_eq!(a[8], [0.5, 0.5]);
/// assert!((sum - 9.0 * core::f64::consts::LN_2).abs() < 1e-14);
/// ```
#[inline]
pub fn softmax_cross_entropy_batch_n<T: Real, const O: usize>(
    zs: &[[T; O]],
    ys: &[[T; O]],
    as_: &mut [[T; O]],
    sum: T,
) -> T {
    let mut sum = sum;
    let mut done = 0;
    if O > 0 {
        let zb = zs.as_chunks::<BLOCK>().0;
        let yb = ys.as_chunks::<BLOCK>().0;
        let ab = as_.as_chunks_mut::<BLOCK>().0;
        for ((z, y), a) in zb.iter().zip(yb).zip(ab.iter_mut()) {
            for l in softmax_cross_entropy_block(z, y, a) {
                sum += l;
            }
            done += BLOCK;
        }
    }
    let rest = zs
        .get(done..)
        .unwrap_or_default()
        .iter()
        .zip(ys.get(done..).unwrap_or_default())
        .zip(as_.get_mut(done..).unwrap_or_default());
    for ((z, y), a) in rest {
        sum += softmax_with_cross_entropy_kernel(z, y, a);
    }
    sum
}

/// Slice form of [`softmax_cross_entropy_batch_n`] for rows of `o` values (the host engine's):
/// for the `m` samples `s` of `zs`, `ys` and `as_` (`m` rows of `o` values each) and `losses`
/// (`m` values; else [`LengthMismatch`] and nothing is written), `as_[s] = softmax(zs[s])` and `losses[s] = ` [`softmax_cross_entropy`]`(zs[s], ys[s])`, bit
/// for bit [`softmax_with_cross_entropy`] of each. Rows of 1 to 16 values run eight samples side
/// by side, as the array form does; with `o = 0` nothing is written.
///
/// # Examples
///
/// ```
/// use sinew_runtime::loss::softmax_cross_entropy_batch;
///
/// let mut a = [0.0_f64; 4];
/// let mut losses = [0.0; 2];
/// softmax_cross_entropy_batch(&[0.0; 4], &[1.0, 0.0, 0.0, 1.0], &mut a, &mut losses, 2)?;
/// assert_eq!(a, [0.5; 4]);
/// assert_eq!(losses, [core::f64::consts::LN_2; 2]);
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
fn softmax_cross_entropy_batch_kernel<T: Real>(
    zs: &[T],
    ys: &[T],
    as_: &mut [T],
    losses: &mut [T],
    o: usize,
) {
    if o == 0 {
        return;
    }
    let done = by_length_1_to_16!(o, K => softmax_cross_entropy_blocks::<T, K>(
        zs.as_chunks::<K>().0,
        ys.as_chunks::<K>().0,
        as_.as_chunks_mut::<K>().0,
        losses,
    ), _ => 0);
    let rows = pieces(zs, o)
        .zip(pieces(ys, o))
        .zip(pieces_mut(as_, o))
        .zip(losses.iter_mut())
        .skip(done);
    for (((z, y), a), loss) in rows {
        *loss = softmax_with_cross_entropy_kernel(z, y, a);
    }
}

/// The whole blocks of [`softmax_cross_entropy_batch`] with rows of `O` values: the samples done.
#[inline(always)]
fn softmax_cross_entropy_blocks<T: Real, const O: usize>(
    zs: &[[T; O]],
    ys: &[[T; O]],
    as_: &mut [[T; O]],
    losses: &mut [T],
) -> usize {
    let blocks = zs
        .as_chunks::<BLOCK>()
        .0
        .iter()
        .zip(ys.as_chunks::<BLOCK>().0)
        .zip(as_.as_chunks_mut::<BLOCK>().0)
        .zip(losses.as_chunks_mut::<BLOCK>().0);
    let mut done = 0;
    for (((z, y), a), l) in blocks {
        *l = softmax_cross_entropy_block(z, y, a);
        done += BLOCK;
    }
    done
}

/// [`softmax_with_cross_entropy`] of [`BLOCK`] samples side by side (`O >= 1`): the losses.
#[inline(always)]
fn softmax_cross_entropy_block<T: Real, const O: usize>(
    zs: &[[T; O]; BLOCK],
    ys: &[[T; O]; BLOCK],
    as_: &mut [[T; O]; BLOCK],
) -> Across<T> {
    let zt: [Across<T>; O] = transpose(zs, T::ZERO);
    let yt: [Across<T>; O] = transpose(ys, T::ZERO);
    let mut at = [[T::ZERO; BLOCK]; O];
    let loss = softmax_cross_entropy_across(&zt, &yt, &mut at);
    store_rows(&at, as_);
    loss
}

/// The arithmetic of [`softmax_cross_entropy_block`] on the transposed block (`zt[j][s]`).
///
/// Not inlined, on purpose: on its own each step runs on the eight samples in one SIMD
/// instruction (`bench/NOTES.md`, `loss::softmax_cross_entropy_across`).
#[inline(never)]
fn softmax_cross_entropy_across<T: Real, const O: usize>(
    zt: &[Across<T>; O],
    yt: &[Across<T>; O],
    at: &mut [Across<T>; O],
) -> Across<T> {
    let Some(first) = zt.first() else {
        return [T::ZERO; BLOCK];
    };
    let mut m = *first;
    for zj in zt {
        m = zip_with(m, zj, T::max);
    }
    for (aj, zj) in at.iter_mut().zip(zt) {
        *aj = map(zip_with(*zj, &m, |z, mx| z - mx), T::exp);
    }
    let mut sum = [T::ZERO; BLOCK];
    for aj in at.iter() {
        sum = zip_with(sum, aj, |x, y| x + y);
    }
    // As `log_sum_exp`: an infinite or NaN maximum is the result itself.
    let lse: Across<T> = zip_with(m, &sum, |mx, sm| {
        if mx * T::ZERO != T::ZERO {
            mx
        } else {
            mx + sm.ln()
        }
    });
    for aj in at.iter_mut() {
        *aj = zip_with(*aj, &sum, |a, sm| a / sm);
    }
    let mut loss = [T::ZERO; BLOCK];
    for (zj, yj) in zt.iter().zip(yt) {
        // loss_s + y_s * (lse_s - z_s), in that order.
        let terms = zip_with(*yj, &zip_with(lse, zj, |l, z| l - z), |y, d| y * d);
        loss = zip_with(loss, &terms, |a, b| a + b);
    }
    loss
}

/// Squared error `1/2 sum_j (a_j - y_j)^2`.
///
/// Order: `s = sum_j (a_j - y_j) * (a_j - y_j)` from `ZERO` in increasing `j` (`a` and `y` of
/// one length, else [`LengthMismatch`]), then `s * HALF`.
///
/// # Examples
///
/// ```
/// use sinew_runtime::loss::squared_error;
///
/// assert_eq!(squared_error(&[1.0_f32, 3.0], &[0.0, 1.0])?, 2.5);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
pub fn squared_error<T: Real>(a: &[T], y: &[T]) -> Result<T, LengthMismatch> {
    shape::expect("y", a.len(), y.len())?;
    Ok(squared_error_kernel(a, y))
}

/// The loop of [`squared_error`], on operands whose lengths agree.
fn squared_error_kernel<T: Real>(a: &[T], y: &[T]) -> T {
    reference::squared_error_kernel(a, y)
}

/// Output error `d_j = a_j - y_j`, the three slices of one length (else [`LengthMismatch`] and `d`
/// is left untouched).
///
/// It is the derivative of the loss with respect to the logits for cross-entropy with sigmoid or
/// softmax outputs, and with respect to the activations for squared error (multiply by `g'`
/// afterwards).
///
/// # Examples
///
/// ```
/// let mut d = [0.0; 2];
/// sinew_runtime::loss::output_error(&[0.75, 0.25], &[1.0, 0.0], &mut d)?;
/// assert_eq!(d, [-0.25, 0.25]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
pub fn output_error<T: Real>(a: &[T], y: &[T], d: &mut [T]) -> Result<(), LengthMismatch> {
    shape::expect("y", a.len(), y.len())?;
    shape::expect("d", a.len(), d.len())?;
    output_error_kernel(a, y, d);
    Ok(())
}

/// The loop of [`output_error`], on operands whose lengths agree.
fn output_error_kernel<T: Real>(a: &[T], y: &[T], d: &mut [T]) {
    for ((dj, aj), yj) in d.iter_mut().zip(a).zip(y) {
        *dj = *aj - *yj;
    }
}

/// Array form of [`logistic_cross_entropy`] for one sample of `N` units: the same kernel, the
/// same bits.
///
/// # Examples
///
/// ```
/// let l = sinew_runtime::loss::logistic_cross_entropy_n(&[800.0_f64], &[0.0]);
/// assert_eq!(l, 800.0);
/// ```
#[inline]
pub fn logistic_cross_entropy_n<T: Real, const N: usize>(z: &[T; N], y: &[T; N]) -> T {
    logistic_cross_entropy_kernel(z, y)
}

/// Array form of [`softmax_cross_entropy`] for one sample of `N` units: the same kernel, the
/// same bits.
///
/// # Examples
///
/// ```
/// let l = sinew_runtime::loss::softmax_cross_entropy_n(&[0.0_f64, 0.0], &[1.0, 0.0]);
/// assert_eq!(l, core::f64::consts::LN_2);
/// ```
#[inline]
pub fn softmax_cross_entropy_n<T: Real, const N: usize>(z: &[T; N], y: &[T; N]) -> T {
    softmax_cross_entropy_kernel(z, y)
}

/// Array form of [`softmax_with_cross_entropy`] for one sample of `N` units: the same kernel,
/// the same bits.
///
/// # Examples
///
/// ```
/// let mut a = [0.0_f64; 2];
/// let l = sinew_runtime::loss::softmax_with_cross_entropy_n(&[0.0, 0.0], &[1.0, 0.0], &mut a);
/// assert_eq!((a, l), ([0.5, 0.5], core::f64::consts::LN_2));
/// ```
#[inline]
pub fn softmax_with_cross_entropy_n<T: Real, const N: usize>(
    z: &[T; N],
    y: &[T; N],
    a: &mut [T; N],
) -> T {
    softmax_with_cross_entropy_kernel(z, y, a)
}

/// Array form of [`squared_error`] for one sample of `N` units: the same kernel, the same bits.
///
/// # Examples
///
/// ```
/// assert_eq!(sinew_runtime::loss::squared_error_n(&[1.0_f32, 3.0], &[0.0, 1.0]), 2.5);
/// ```
#[inline]
pub fn squared_error_n<T: Real, const N: usize>(a: &[T; N], y: &[T; N]) -> T {
    squared_error_kernel(a, y)
}

/// Array form of [`output_error`] for one sample of `N` units: the same kernel, the same bits.
///
/// # Examples
///
/// ```
/// let mut d = [0.0; 2];
/// sinew_runtime::loss::output_error_n(&[0.75, 0.25], &[1.0, 0.0], &mut d);
/// assert_eq!(d, [-0.25, 0.25]);
/// ```
#[inline]
pub fn output_error_n<T: Real, const N: usize>(a: &[T; N], y: &[T; N], d: &mut [T; N]) {
    output_error_kernel(a, y, d);
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::SplitMix64;
    use crate::testutil::same_bits;
    use std::vec::Vec;

    /// Logits for the fused softmax: mostly moderate, with ties, huge values, infinities and NaN.
    fn logit<T: Real>(rng: &mut SplitMix64) -> T {
        let r = rng.uniform(0.0, 1.0);
        let special = [
            0.0,
            -0.0,
            1e30,
            -1e30,
            f64::INFINITY,
            f64::NEG_INFINITY,
            f64::NAN,
        ];
        T::from_f64(if r < 0.08 {
            special[(r * 1000.0) as usize % special.len()]
        } else if r < 0.2 {
            1.5
        } else {
            rng.uniform(-30.0, 30.0)
        })
    }

    fn fused_softmax_equals_the_three_steps<T: Real, const O: usize>(seed: u64) {
        let mut rng = SplitMix64::new(seed);
        for m in [0, 1, 7, 8, 9, 16, 21, 40] {
            let zs: Vec<[T; O]> = (0..m)
                .map(|_| core::array::from_fn(|_| logit(&mut rng)))
                .collect();
            let ys: Vec<[T; O]> = (0..m)
                .map(|_| core::array::from_fn(|_| T::from_f64(rng.uniform(0.0, 1.0))))
                .collect();
            // The reference's three steps, and the engine's order of the sum.
            let mut want_a = zs.clone();
            let mut want_sum = T::from_f64(0.25);
            for (a, (z, y)) in want_a.iter_mut().zip(zs.iter().zip(&ys)) {
                want_sum += reference::softmax_with_cross_entropy(z, y, a).unwrap();
            }
            let mut a = std::vec![[T::ZERO; O]; m];
            let sum = softmax_cross_entropy_batch_n(&zs, &ys, &mut a, T::from_f64(0.25));
            assert_eq!(
                same_bits(a.as_flattened()),
                same_bits(want_a.as_flattened()),
                "{O} x {m}"
            );
            assert_eq!(same_bits(&[sum]), same_bits(&[want_sum]), "{O} x {m}");
            let mut flat = std::vec![T::ONE; m * O];
            let mut losses = std::vec![T::ONE; m];
            let (zf, yf) = (zs.as_flattened(), ys.as_flattened());
            softmax_cross_entropy_batch(zf, yf, &mut flat, &mut losses, O).unwrap();
            assert_eq!(
                same_bits(&flat),
                same_bits(want_a.as_flattened()),
                "slice {O} x {m}"
            );
            let each: Vec<T> = zs
                .iter()
                .zip(&ys)
                .map(|(z, y)| softmax_cross_entropy(z, y).unwrap())
                .collect();
            assert_eq!(same_bits(&losses), same_bits(&each), "slice {O} x {m}");
            for ((z, y), want) in zs.iter().zip(&ys).zip(&want_a) {
                let mut one = [T::ONE; O];
                let l = softmax_with_cross_entropy(z, y, &mut one).unwrap();
                assert_eq!(same_bits(&one), same_bits(want));
                assert_eq!(
                    same_bits(&[l]),
                    same_bits(&[softmax_cross_entropy(z, y).unwrap()])
                );
            }
        }
    }

    #[test]
    fn fused_softmax_cross_entropy_equals_softmax_then_loss() {
        fused_softmax_equals_the_three_steps::<f32, 1>(1);
        fused_softmax_equals_the_three_steps::<f32, 2>(2);
        fused_softmax_equals_the_three_steps::<f32, 3>(3);
        fused_softmax_equals_the_three_steps::<f32, 10>(4);
        fused_softmax_equals_the_three_steps::<f32, 17>(5);
        fused_softmax_equals_the_three_steps::<f64, 3>(6);
        fused_softmax_equals_the_three_steps::<f64, 10>(7);
        // Outputs of another length than the logits: an error, and nothing written.
        let mut a = [9.0_f64; 3];
        let r = softmax_with_cross_entropy(&[0.0, 0.0], &[1.0, 0.0], &mut a);
        let miss = crate::shape::LengthMismatch {
            operand: "a",
            expected: 2,
            found: 3,
        };
        assert_eq!(r, Err(miss));
        assert_eq!(a, [9.0; 3]);
        let mut empty: [f64; 0] = [];
        assert_eq!(
            softmax_with_cross_entropy(&[], &[], &mut empty).unwrap(),
            0.0
        );
    }

    /// The slice forms against the reference: widths 0..=40, batches around the block edges,
    /// outputs longer or shorter than the logits (both reject them alike), special logits.
    fn slice_forms_equal_the_reference<T: Real>() {
        let mut rng = SplitMix64::new(17);
        for o in 0..=40 {
            for m in [0, 1, 2, 7, 8, 9, 15, 16, 17, 25] {
                let zs: Vec<T> = (0..m * o).map(|_| logit(&mut rng)).collect();
                let ys: Vec<T> = (0..m * o)
                    .map(|_| T::from_f64(rng.uniform(0.0, 1.0)))
                    .collect();
                let (mut a, mut want_a) = (std::vec![T::ONE; m * o], std::vec![T::ONE; m * o]);
                let (mut l, mut want_l) = (std::vec![T::ONE; m], std::vec![T::ONE; m]);
                softmax_cross_entropy_batch(&zs, &ys, &mut a, &mut l, o).unwrap();
                reference::softmax_cross_entropy_batch(&zs, &ys, &mut want_a, &mut want_l, o)
                    .unwrap();
                assert_eq!(same_bits(&a), same_bits(&want_a), "{o} x {m}");
                assert_eq!(same_bits(&l), same_bits(&want_l), "{o} x {m}");
            }
            let z: Vec<T> = (0..o).map(|_| logit(&mut rng)).collect();
            let y: Vec<T> = (0..o).map(|_| T::from_f64(rng.uniform(0.0, 1.0))).collect();
            for len in [o.saturating_sub(1), o, o + 1] {
                let (mut a, mut want) = (std::vec![T::HALF; len], std::vec![T::HALF; len]);
                let l = softmax_with_cross_entropy(&z, &y, &mut a);
                let wl = reference::softmax_with_cross_entropy(&z, &y, &mut want);
                assert_eq!(l.is_ok(), len == o, "{o} into {len}");
                assert_eq!(l.is_ok(), wl.is_ok(), "{o} into {len}");
                if let (Ok(l), Ok(wl)) = (l, wl) {
                    assert_eq!(same_bits(&[l]), same_bits(&[wl]), "{o} into {len}");
                }
                assert_eq!(same_bits(&a), same_bits(&want), "{o} into {len}");
            }
            let mut v = z.clone();
            crate::act::softmax(&mut v);
            let mut want = z.clone();
            reference::softmax(&mut want);
            assert_eq!(same_bits(&v), same_bits(&want), "softmax {o}");
        }
    }

    #[test]
    fn slice_forms_equal_the_reference_f32() {
        slice_forms_equal_the_reference::<f32>();
    }

    #[test]
    fn slice_forms_equal_the_reference_f64() {
        slice_forms_equal_the_reference::<f64>();
    }

    #[test]
    fn log_sum_exp_does_not_overflow() {
        // ln(e^1000 + e^1000) = 1000 + ln 2 (algebra; e^1000 itself overflows f64).
        assert_eq!(
            log_sum_exp(&[1000.0_f64, 1000.0]),
            1000.0 + core::f64::consts::LN_2
        );
        assert_eq!(
            log_sum_exp(&[1000.0_f32, 1000.0]),
            1000.0 + core::f32::consts::LN_2
        );
        assert_eq!(
            log_sum_exp(&[-1000.0_f64, -1000.0]),
            -1000.0 + core::f64::consts::LN_2
        );
        assert_eq!(log_sum_exp::<f64>(&[]), 0.0);
        assert_eq!(log_sum_exp(&[f64::NEG_INFINITY; 2]), f64::NEG_INFINITY);
        assert_eq!(log_sum_exp(&[1.0, f64::INFINITY]), f64::INFINITY);
        // Normal range: equal to the naive ln(sum e^z) with std's functions.
        let z = [0.5_f64, -1.25, 2.0, 0.0];
        let naive = z.iter().map(|v| v.exp()).sum::<f64>().ln();
        assert!((log_sum_exp(&z) - naive).abs() < 1e-14);
    }

    #[test]
    fn softplus_is_stable() {
        assert_eq!(softplus(1000.0_f64), 1000.0);
        assert_eq!(softplus(1000.0_f32), 1000.0);
        let s = softplus(-1000.0_f64);
        assert!(s.is_finite() && (0.0..1e-300).contains(&s));
        let s = softplus(-1000.0_f32);
        assert!(s.is_finite() && (0.0..1e-30).contains(&s));
        // Normal range: equal to the naive ln(1 + e^z).
        for k in -30..=30 {
            let z = f64::from(k) * 0.5;
            let naive = (1.0 + z.exp()).ln();
            assert!(
                (softplus(z) - naive).abs() <= 1e-15 * naive.max(1.0),
                "softplus({z})"
            );
        }
    }

    #[test]
    fn logistic_cross_entropy_from_logits() {
        // Saturated logits stay finite: the naive form would take ln(0).
        let z = [1000.0_f64, -1000.0, 1000.0, -1000.0];
        let y = [1.0, 0.0, 0.0, 1.0];
        let l = logistic_cross_entropy(&z, &y).unwrap();
        assert!(l.is_finite());
        assert_eq!(l, 2000.0);
        let zf = [100.0_f32, -100.0];
        assert!(logistic_cross_entropy(&zf, &[0.0, 1.0])
            .unwrap()
            .is_finite());
        // Normal range: the naive -(y ln a + (1 - y) ln(1 - a)), a = 1/(1 + e^-z) (handbook
        // definition of binary cross-entropy).
        let mut rng = SplitMix64::new(5);
        for _ in 0..200 {
            let z = rng.uniform(-10.0, 10.0);
            let y = rng.next_f64();
            let a = 1.0 / (1.0 + (-z).exp());
            let naive = -(y * a.ln() + (1.0 - y) * (1.0 - a).ln());
            let got = logistic_cross_entropy(&[z], &[y]).unwrap();
            assert!((got - naive).abs() < 1e-9 * naive.max(1.0), "z {z} y {y}");
        }
    }

    #[test]
    fn logistic_cross_entropy_is_accurate_for_confident_correct_units() {
        // The loss of a confidently correct unit is ln(1 + e^-|z|) (algebra: softplus(z) - z =
        // softplus(-z)); compare with that form directly, which has no cancellation.
        for k in 1..=80 {
            let z = f64::from(k) * 0.5;
            let truth = softplus(-z);
            assert_eq!(
                logistic_cross_entropy(&[z], &[1.0]).unwrap(),
                truth,
                "z {z}"
            );
            assert_eq!(
                logistic_cross_entropy(&[-z], &[0.0]).unwrap(),
                truth,
                "z {z}"
            );
            let zf = z as f32;
            assert_eq!(
                logistic_cross_entropy(&[zf], &[1.0]).unwrap(),
                softplus(-zf),
                "z {z}"
            );
        }
        // f32 at z = 17: the true loss is about 4.1e-8, not 0.
        let l = logistic_cross_entropy(&[17.0_f32], &[1.0]).unwrap();
        assert!((l - 4.139938e-8).abs() < 1e-13, "{l:e}");
    }

    #[test]
    fn softmax_cross_entropy_from_logits() {
        // Saturated: the true class has logit -1000 while another has 1000; lse = 1000, loss 2000.
        let z = [1000.0_f64, -1000.0, 0.0];
        let l = softmax_cross_entropy(&z, &[0.0, 1.0, 0.0]).unwrap();
        assert!(l.is_finite());
        assert_eq!(l, 2000.0);
        assert_eq!(softmax_cross_entropy(&z, &[1.0, 0.0, 0.0]).unwrap(), 0.0);
        // Normal range: the naive -sum y ln softmax(z).
        let mut rng = SplitMix64::new(6);
        for n in 1..=6 {
            let z: Vec<f64> = (0..n).map(|_| rng.uniform(-5.0, 5.0)).collect();
            let mut y: Vec<f64> = (0..n).map(|_| rng.next_f64()).collect();
            let total: f64 = y.iter().sum();
            y.iter_mut().for_each(|v| *v /= total);
            let s: f64 = z.iter().map(|v| v.exp()).sum();
            let naive: f64 = -z
                .iter()
                .zip(&y)
                .map(|(z, y)| y * (z.exp() / s).ln())
                .sum::<f64>();
            let got = softmax_cross_entropy(&z, &y).unwrap();
            assert!(
                (got - naive).abs() < 1e-12 * naive.max(1.0),
                "{got} vs {naive}"
            );
        }
    }

    #[test]
    fn squared_error_of_the_worked_backprop_example() {
        // M. Mazur, "A Step by Step Backpropagation Example" (2015): outputs 0.75136507 and
        // 0.772928465 against targets 0.01 and 0.99 give E_total = 0.298371109 (values from
        // memory).
        let e = squared_error(&[0.75136507_f64, 0.772928465], &[0.01, 0.99]).unwrap();
        assert!((e - 0.298371109).abs() < 5e-10, "{e}");
        // By hand: 1/2 ((3 - 1)^2 + (0 - 2)^2) = 4.
        assert_eq!(squared_error(&[3.0_f64, 0.0], &[1.0, 2.0]).unwrap(), 4.0);
    }

    #[test]
    fn output_error_is_the_gradient_of_the_losses() {
        // d loss / d z_j = a_j - y_j for cross-entropy with sigmoid or softmax (common practice);
        // checked by central differences of the losses above.
        let z = [0.3_f64, -1.2, 2.1];
        let y = [0.0, 1.0, 0.0];
        let h = 1e-6;
        let mut sig = z;
        crate::act::sigmoid(&mut sig);
        let mut soft = z;
        crate::act::softmax(&mut soft);
        let (mut ds, mut dm) = ([0.0; 3], [0.0; 3]);
        output_error(&sig, &y, &mut ds).unwrap();
        output_error(&soft, &y, &mut dm).unwrap();
        for j in 0..3 {
            let (mut zp, mut zm) = (z, z);
            zp[j] += h;
            zm[j] -= h;
            let fd_sig = (logistic_cross_entropy(&zp, &y).unwrap()
                - logistic_cross_entropy(&zm, &y).unwrap())
                / (2.0 * h);
            let fd_soft = (softmax_cross_entropy(&zp, &y).unwrap()
                - softmax_cross_entropy(&zm, &y).unwrap())
                / (2.0 * h);
            assert!((ds[j] - fd_sig).abs() < 1e-8);
            assert!((dm[j] - fd_soft).abs() < 1e-8);
            // Squared error: d/da_j = a_j - y_j.
            let (mut ap, mut am) = (sig, sig);
            ap[j] += h;
            am[j] -= h;
            let fd_sq =
                (squared_error(&ap, &y).unwrap() - squared_error(&am, &y).unwrap()) / (2.0 * h);
            assert!((ds[j] - fd_sq).abs() < 1e-8);
        }
    }

    /// Every checked loss (and its reference): a short operand is an error naming it, and the
    /// outputs are left as they were.
    #[test]
    fn a_short_operand_is_an_error_and_nothing_is_written() {
        use crate::shape::LengthMismatch;
        let miss = |operand, expected, found| LengthMismatch {
            operand,
            expected,
            found,
        };
        let (z, y) = ([0.5_f64, -1.0, 2.0], [1.0, 0.0]);
        assert_eq!(logistic_cross_entropy(&z, &y), Err(miss("y", 3, 2)));
        assert_eq!(softmax_cross_entropy(&z, &y), Err(miss("y", 3, 2)));
        assert_eq!(squared_error(&z, &y), Err(miss("y", 3, 2)));
        assert_eq!(
            reference::logistic_cross_entropy(&z, &y),
            Err(miss("y", 3, 2))
        );
        assert_eq!(
            reference::softmax_cross_entropy(&z, &y),
            Err(miss("y", 3, 2))
        );
        assert_eq!(reference::squared_error(&z, &y), Err(miss("y", 3, 2)));
        let mut d = [7.0; 3];
        assert_eq!(output_error(&z, &y, &mut d), Err(miss("y", 3, 2)));
        assert_eq!(output_error(&z, &z, &mut d[..2]), Err(miss("d", 3, 2)));
        assert_eq!(d, [7.0; 3]);
        let mut a = [7.0; 3];
        assert_eq!(
            softmax_with_cross_entropy(&z, &y, &mut a),
            Err(miss("y", 3, 2))
        );
        assert_eq!(
            reference::softmax_with_cross_entropy(&z, &z, &mut a[..2]),
            Err(miss("a", 3, 2))
        );
        assert_eq!(a, [7.0; 3]);
        // Batches: two samples of 3, one operand a sample short.
        let (zs, ys) = ([0.25; 6], [0.5; 6]);
        let (mut as_, mut losses) = ([7.0; 6], [7.0; 2]);
        let r = softmax_cross_entropy_batch(&zs, &ys[..3], &mut as_, &mut losses, 3);
        assert_eq!(r, Err(miss("ys", 6, 3)));
        let r = softmax_cross_entropy_batch(&zs, &ys, &mut as_, &mut losses[..1], 3);
        assert_eq!(r, Err(miss("losses", 2, 1)));
        let r = reference::softmax_cross_entropy_batch(&zs, &ys, &mut as_[..5], &mut losses, 3);
        assert_eq!(r, Err(miss("as_", 6, 5)));
        assert_eq!((as_, losses), ([7.0; 6], [7.0; 2]));
    }

    /// The array forms give the bits of the slice forms.
    fn array_forms_equal_the_slice_forms<const N: usize>(seed: u64) {
        let mut rng = SplitMix64::new(seed);
        for _ in 0..20 {
            let z: [f32; N] = core::array::from_fn(|_| logit(&mut rng));
            let y: [f32; N] = core::array::from_fn(|_| rng.uniform(0.0, 1.0) as f32);
            let bits = |v: f32| same_bits(&[v]);
            assert_eq!(
                bits(logistic_cross_entropy_n(&z, &y)),
                bits(logistic_cross_entropy(&z, &y).unwrap())
            );
            assert_eq!(
                bits(softmax_cross_entropy_n(&z, &y)),
                bits(softmax_cross_entropy(&z, &y).unwrap())
            );
            assert_eq!(
                bits(squared_error_n(&z, &y)),
                bits(squared_error(&z, &y).unwrap())
            );
            let (mut da, mut ds) = ([1.0; N], [1.0; N]);
            output_error_n(&z, &y, &mut da);
            output_error(&z, &y, &mut ds).unwrap();
            assert_eq!(same_bits(&da), same_bits(&ds));
            let (mut aa, mut as_) = ([1.0; N], [1.0; N]);
            let la = softmax_with_cross_entropy_n(&z, &y, &mut aa);
            let ls = softmax_with_cross_entropy(&z, &y, &mut as_).unwrap();
            assert_eq!(same_bits(&aa), same_bits(&as_));
            assert_eq!(bits(la), bits(ls));
        }
    }

    #[test]
    fn array_forms_give_the_bits_of_the_slice_forms() {
        array_forms_equal_the_slice_forms::<1>(1);
        array_forms_equal_the_slice_forms::<3>(2);
        array_forms_equal_the_slice_forms::<10>(3);
        array_forms_equal_the_slice_forms::<17>(4);
    }
}
