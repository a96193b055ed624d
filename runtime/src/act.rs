//! Activation functions and their derivatives.
//!
//! Forward functions work in place on a buffer that holds the pre-activations `z` and afterwards
//! the activations `a = g(z)`. Backward functions work in place on an error buffer `d` given the
//! layer's activations `a` (not `z`): each derivative is written in terms of the output, which is
//! what a layer keeps. The error and the activations must have one length: the slice forms
//! return [`LengthMismatch`] otherwise (and write nothing); the array forms (`_n`: one sample,
//! `_batch_n`: the rows of a block of samples) take operands whose types fix the row length.

use crate::linalg::{padded, LANES};
use crate::shape::{self, LengthMismatch};
use crate::Real;

/// Identity `g(z) = z`: leaves `v` as it is.
///
/// # Examples
///
/// ```
/// let mut v = [-1.0, 2.0];
/// sinew_runtime::act::identity(&mut v);
/// assert_eq!(v, [-1.0, 2.0]);
/// ```
#[inline]
pub fn identity<T: Real>(v: &mut [T]) {
    let _ = v;
}

/// Derivative of the identity, `g'(z) = 1`: leaves `d` as it is.
///
/// # Examples
///
/// ```
/// let mut d = [0.5];
/// sinew_runtime::act::identity_grad(&[3.0], &mut d)?;
/// assert_eq!(d, [0.5]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn identity_grad<T: Real>(a: &[T], d: &mut [T]) -> Result<(), LengthMismatch> {
    shape::expect("d", a.len(), d.len())?;
    identity_grad_kernel(a, d);
    Ok(())
}

/// The loop of [`identity_grad`], on operands whose lengths agree.
#[inline]
fn identity_grad_kernel<T: Real>(a: &[T], d: &mut [T]) {
    let _ = (a, d);
}

/// Logistic sigmoid `g(z) = 1 / (1 + e^-z)`, in place.
///
/// Computed so that the exponential never overflows: for `z >= 0` as `1 / (1 + e^-z)`, for
/// `z < 0` as `e^z / (1 + e^z)`. Saturates to exactly 0 or 1 for large `|z|`, never NaN for finite
/// or infinite input.
///
/// # Examples
///
/// ```
/// let mut v = [0.0_f64, 1000.0, -1000.0];
/// sinew_runtime::act::sigmoid(&mut v);
/// assert_eq!(v, [0.5, 1.0, 0.0]);
/// ```
#[inline(always)]
pub fn sigmoid<T: Real>(v: &mut [T]) {
    by_lanes(v, |z| {
        // One exponential of `-|z|` (which is `-z` for `z >= 0` and `z` for `z < 0`, exactly) and
        // a select instead of a branch: the same operations as the two cases above, without a
        // mispredicted jump on every other unit.
        let e = (-z.abs()).exp();
        let numerator = if z >= T::ZERO { T::ONE } else { e };
        numerator / (T::ONE + e)
    });
}

/// Whether the target has a floating-point vector unit, where a padded chunk costs what a short
/// tail costs. On a scalar FPU (Cortex-M4F, RISC-V without V) the padding would be work thrown
/// away (`bench/NOTES.md`, `act::VECTOR_UNIT`), so the tail stays element-wise.
const VECTOR_UNIT: bool = cfg!(any(
    target_feature = "sse2",
    target_feature = "neon",
    target_feature = "simd128"
));

/// Whether [`by_lanes`] computes a short tail as one padded chunk: for a type whose functions
/// vectorise ([`Real::LANE_MATH`]) on a target with a vector unit ([`VECTOR_UNIT`]).
const fn pads_tail<T: Real>() -> bool {
    T::LANE_MATH && VECTOR_UNIT
}

/// `v_i = f(v_i)` for every element, in chunks of [`LANES`] as fixed arrays. Where
/// [`pads_tail`] holds, the tail is computed as one zero-padded
/// chunk too (the padding is computed and dropped), so that a layer of 10 units is two vector
/// passes rather than one and two scalar calls of the 25-operation `exp`; each element's value is
/// `f` of it alone, so the bits are the same either way.
#[inline(always)]
pub(crate) fn by_lanes<T: Real>(v: &mut [T], f: impl Fn(T) -> T) {
    let (chunks, tail) = v.as_chunks_mut::<LANES>();
    for e in chunks.as_flattened_mut() {
        *e = f(*e);
    }
    if pads_tail::<T>() && !tail.is_empty() {
        let mut x = padded(tail);
        for e in x.iter_mut() {
            *e = f(*e);
        }
        for (t, e) in tail.iter_mut().zip(x) {
            *t = e;
        }
    } else {
        for t in tail.iter_mut() {
            *t = f(*t);
        }
    }
}

/// Derivative of the sigmoid from its output, `g'(z) = a (1 - a)`: `d_j *= a_j * (1 - a_j)`.
///
/// # Examples
///
/// ```
/// let mut d = [1.0];
/// sinew_runtime::act::sigmoid_grad(&[0.5], &mut d)?;
/// assert_eq!(d, [0.25]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
pub fn sigmoid_grad<T: Real>(a: &[T], d: &mut [T]) -> Result<(), LengthMismatch> {
    shape::expect("d", a.len(), d.len())?;
    sigmoid_grad_kernel(a, d);
    Ok(())
}

/// The loop of [`sigmoid_grad`], on operands whose lengths agree.
fn sigmoid_grad_kernel<T: Real>(a: &[T], d: &mut [T]) {
    for (dj, aj) in d.iter_mut().zip(a) {
        *dj *= *aj * (T::ONE - *aj);
    }
}

/// Hyperbolic tangent `g(z) = tanh z` ([`Real::tanh`]), in place.
///
/// # Examples
///
/// ```
/// let mut v = [0.0_f32, 50.0];
/// sinew_runtime::act::tanh(&mut v);
/// assert_eq!(v, [0.0, 1.0]);
/// ```
#[inline(always)]
pub fn tanh<T: Real>(v: &mut [T]) {
    by_lanes(v, T::tanh);
}

/// Derivative of tanh from its output, `g'(z) = 1 - a^2`: `d_j *= 1 - a_j * a_j`.
///
/// # Examples
///
/// ```
/// let mut d = [2.0];
/// sinew_runtime::act::tanh_grad(&[0.5], &mut d)?;
/// assert_eq!(d, [1.5]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
pub fn tanh_grad<T: Real>(a: &[T], d: &mut [T]) -> Result<(), LengthMismatch> {
    shape::expect("d", a.len(), d.len())?;
    tanh_grad_kernel(a, d);
    Ok(())
}

/// The loop of [`tanh_grad`], on operands whose lengths agree.
fn tanh_grad_kernel<T: Real>(a: &[T], d: &mut [T]) {
    for (dj, aj) in d.iter_mut().zip(a) {
        *dj *= T::ONE - *aj * *aj;
    }
}

/// Rectified linear unit `g(z) = max(z, 0)`, in place: values below zero become zero (NaN passes
/// through).
///
/// # Examples
///
/// ```
/// let mut v = [-2.0, 0.0, 3.0];
/// sinew_runtime::act::relu(&mut v);
/// assert_eq!(v, [0.0, 0.0, 3.0]);
/// ```
pub fn relu<T: Real>(v: &mut [T]) {
    for x in v.iter_mut() {
        if *x < T::ZERO {
            *x = T::ZERO;
        }
    }
}

/// Derivative of relu, `g'(z) = 1 if z > 0 else 0`: `d_j` is kept where `a_j > 0` and set to zero
/// elsewhere (`a_j > 0` exactly when `z_j > 0`; the derivative at 0 is taken as 0).
///
/// # Examples
///
/// ```
/// let mut d = [5.0, 5.0, 5.0];
/// sinew_runtime::act::relu_grad(&[0.0, 1.0, 0.0], &mut d)?;
/// assert_eq!(d, [0.0, 5.0, 0.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
pub fn relu_grad<T: Real>(a: &[T], d: &mut [T]) -> Result<(), LengthMismatch> {
    shape::expect("d", a.len(), d.len())?;
    relu_grad_kernel(a, d);
    Ok(())
}

/// The loop of [`relu_grad`], on operands whose lengths agree.
fn relu_grad_kernel<T: Real>(a: &[T], d: &mut [T]) {
    for (dj, aj) in d.iter_mut().zip(a) {
        *dj = if *aj > T::ZERO { *dj } else { T::ZERO };
    }
}

/// Leaky rectified linear unit `g(z) = z if z >= 0 else alpha z`, in place: values below zero are
/// multiplied by `alpha`.
///
/// # Examples
///
/// ```
/// let mut v = [-2.0, 3.0];
/// sinew_runtime::act::leaky_relu(&mut v, 0.25);
/// assert_eq!(v, [-0.5, 3.0]);
/// ```
pub fn leaky_relu<T: Real>(v: &mut [T], alpha: T) {
    for x in v.iter_mut() {
        if *x < T::ZERO {
            *x *= alpha;
        }
    }
}

/// Derivative of leaky relu, `g'(z) = 1 if z > 0 else alpha`: `d_j *= alpha` unless `a_j > 0`.
///
/// Reading the sign from the output is valid for `alpha` in `[0, 1)` (then `a > 0` exactly when
/// `z > 0`); the derivative at 0 is taken as `alpha`.
///
/// # Examples
///
/// ```
/// let mut d = [4.0, 4.0];
/// sinew_runtime::act::leaky_relu_grad(&[-0.5, 3.0], &mut d, 0.25)?;
/// assert_eq!(d, [1.0, 4.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
pub fn leaky_relu_grad<T: Real>(a: &[T], d: &mut [T], alpha: T) -> Result<(), LengthMismatch> {
    shape::expect("d", a.len(), d.len())?;
    leaky_relu_grad_kernel(a, d, alpha);
    Ok(())
}

/// The loop of [`leaky_relu_grad`], on operands whose lengths agree.
fn leaky_relu_grad_kernel<T: Real>(a: &[T], d: &mut [T], alpha: T) {
    for (dj, aj) in d.iter_mut().zip(a) {
        if *aj > T::ZERO {
            continue;
        }
        *dj *= alpha;
    }
}

/// Softmax `a_j = e^(z_j) / sum_k e^(z_k)`, in place, computed stably.
///
/// Steps: `m = max_k z_k` (fold from the first element with [`Real::max`]); `v_j = e^(z_j - m)`;
/// `s = sum_j v_j` starting at `ZERO` in increasing `j`; `v_j = v_j / s`. The largest exponent is
/// 0, so nothing overflows for finite input (entries of `-inf` give 0 as long as one entry is
/// finite); a `+inf` or NaN entry makes the result NaN. An empty slice is left alone. The order
/// is that of [`crate::reference::softmax`]; the exponentials run in chunks of [`LANES`].
///
/// # Examples
///
/// ```
/// let mut v = [1000.0_f64, 1000.0];
/// sinew_runtime::act::softmax(&mut v);
/// assert_eq!(v, [0.5, 0.5]);
/// ```
#[inline(always)]
pub fn softmax<T: Real>(v: &mut [T]) {
    let Some(first) = v.first() else {
        return;
    };
    let mut m = *first;
    for x in v.iter() {
        m = m.max(*x);
    }
    // The exponentials in a loop of their own (independent, so they run in SIMD lanes), then
    // the sum in increasing index, as one loop doing both would add them.
    by_lanes(v, |x| (x - m).exp());
    let mut s = T::ZERO;
    for x in v.iter() {
        s += *x;
    }
    for x in v.iter_mut() {
        *x /= s;
    }
}

/// Softmax Jacobian-vector product, in place: with `s = sum_k d_k a_k` (from `ZERO`, increasing
/// `k`), `d_j = a_j (d_j - s)`.
///
/// This is `J^T d` for the full Jacobian `da_j / dz_i = a_j (delta_ij - a_i)` (it is symmetric).
/// `s` is taken over the zip of `d` and `a`. It is [`crate::reference::softmax_grad`] itself.
///
/// # Examples
///
/// ```
/// let mut d = [1.0, 0.0];
/// sinew_runtime::act::softmax_grad(&[0.5, 0.5], &mut d)?;
/// assert_eq!(d, [0.25, -0.25]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
pub fn softmax_grad<T: Real>(a: &[T], d: &mut [T]) -> Result<(), LengthMismatch> {
    shape::expect("d", a.len(), d.len())?;
    softmax_grad_kernel(a, d);
    Ok(())
}

/// The loop of [`softmax_grad`], on operands whose lengths agree.
fn softmax_grad_kernel<T: Real>(a: &[T], d: &mut [T]) {
    crate::reference::softmax_grad_kernel(a, d);
}

/// Array form of [`identity_grad`] for one sample of `N` units: runs the same kernel, so the same bits.
#[inline]
pub fn identity_grad_n<T: Real, const N: usize>(a: &[T; N], d: &mut [T; N]) {
    identity_grad_kernel(a, d);
}

/// Array form of [`sigmoid_grad`] for one sample of `N` units: runs the same kernel, so the same bits.
#[inline]
pub fn sigmoid_grad_n<T: Real, const N: usize>(a: &[T; N], d: &mut [T; N]) {
    sigmoid_grad_kernel(a, d);
}

/// Batch array form of [`sigmoid_grad`]: the rows of `N` units of a block of samples, paired by
/// `zip` (as many samples as the shorter operand holds). Element by element, so it runs the same
/// kernel on the paired rows as one slice: the same bits as [`sigmoid_grad_n`] on each row.
#[inline]
pub fn sigmoid_grad_batch_n<T: Real, const N: usize>(a: &[[T; N]], d: &mut [[T; N]]) {
    let m = a.len().min(d.len());
    let a = a.get(..m).unwrap_or_default().as_flattened();
    let d = d.get_mut(..m).unwrap_or_default().as_flattened_mut();
    sigmoid_grad_kernel(a, d);
}

/// Array form of [`tanh_grad`] for one sample of `N` units: runs the same kernel, so the same bits.
#[inline]
pub fn tanh_grad_n<T: Real, const N: usize>(a: &[T; N], d: &mut [T; N]) {
    tanh_grad_kernel(a, d);
}

/// Batch array form of [`tanh_grad`]: the rows of `N` units of a block of samples, paired by
/// `zip` (as many samples as the shorter operand holds). Element by element, so it runs the same
/// kernel on the paired rows as one slice: the same bits as [`tanh_grad_n`] on each row.
#[inline]
pub fn tanh_grad_batch_n<T: Real, const N: usize>(a: &[[T; N]], d: &mut [[T; N]]) {
    let m = a.len().min(d.len());
    let a = a.get(..m).unwrap_or_default().as_flattened();
    let d = d.get_mut(..m).unwrap_or_default().as_flattened_mut();
    tanh_grad_kernel(a, d);
}

/// Array form of [`relu_grad`] for one sample of `N` units: runs the same kernel, so the same bits.
#[inline]
pub fn relu_grad_n<T: Real, const N: usize>(a: &[T; N], d: &mut [T; N]) {
    relu_grad_kernel(a, d);
}

/// Batch array form of [`relu_grad`]: the rows of `N` units of a block of samples, paired by
/// `zip` (as many samples as the shorter operand holds). Element by element, so it runs the same
/// kernel on the paired rows as one slice: the same bits as [`relu_grad_n`] on each row.
#[inline]
pub fn relu_grad_batch_n<T: Real, const N: usize>(a: &[[T; N]], d: &mut [[T; N]]) {
    let m = a.len().min(d.len());
    let a = a.get(..m).unwrap_or_default().as_flattened();
    let d = d.get_mut(..m).unwrap_or_default().as_flattened_mut();
    relu_grad_kernel(a, d);
}

/// Array form of [`leaky_relu_grad`] for one sample of `N` units: runs the same kernel, so the same bits.
#[inline]
pub fn leaky_relu_grad_n<T: Real, const N: usize>(a: &[T; N], d: &mut [T; N], alpha: T) {
    leaky_relu_grad_kernel(a, d, alpha);
}

/// Batch array form of [`leaky_relu_grad`]: the rows of `N` units of a block of samples, paired by
/// `zip` (as many samples as the shorter operand holds). Element by element, so it runs the same
/// kernel on the paired rows as one slice: the same bits as [`leaky_relu_grad_n`] on each row.
#[inline]
pub fn leaky_relu_grad_batch_n<T: Real, const N: usize>(a: &[[T; N]], d: &mut [[T; N]], alpha: T) {
    let m = a.len().min(d.len());
    let a = a.get(..m).unwrap_or_default().as_flattened();
    let d = d.get_mut(..m).unwrap_or_default().as_flattened_mut();
    leaky_relu_grad_kernel(a, d, alpha);
}

/// Array form of [`softmax_grad`] for one sample of `N` units: runs the same kernel, so the same bits.
#[inline]
pub fn softmax_grad_n<T: Real, const N: usize>(a: &[T; N], d: &mut [T; N]) {
    softmax_grad_kernel(a, d);
}

/// An activation chosen at run time (the host engine's form; generated code calls the functions of
/// this module directly).
///
/// # Examples
///
/// ```
/// use sinew_runtime::act::Activation;
///
/// let g = Activation::LeakyRelu(0.5_f64);
/// let mut v = [-2.0, 2.0];
/// g.forward(&mut v);
/// assert_eq!(v, [-1.0, 2.0]);
/// let mut d = [1.0, 1.0];
/// g.backward(&v, &mut d)?;
/// assert_eq!(d, [0.5, 1.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Activation<T> {
    /// `g(z) = z`, `g' = 1`.
    Identity,
    /// `g(z) = 1 / (1 + e^-z)`, `g' = a (1 - a)`.
    Sigmoid,
    /// `g(z) = tanh z`, `g' = 1 - a^2`.
    Tanh,
    /// `g(z) = max(z, 0)`, `g' = 1 if z > 0 else 0`.
    Relu,
    /// `g(z) = z if z >= 0 else alpha z`, `g' = 1 if z > 0 else alpha`; holds `alpha`.
    LeakyRelu(T),
    /// `a_j = e^(z_j) / sum_k e^(z_k)`, backward `d_j = a_j (d_j - sum_k d_k a_k)`.
    Softmax,
}

/// `f(v)` with the width of `v` (1 to 16, known here only at run time) made a constant, so that
/// the exponentials of a narrow layer run as the array form runs them (whole padded chunks, no
/// copy of a run-time length). Same function, same bits.
#[inline(always)]
fn by_width<T: Real>(v: &mut [T], f: impl Fn(&mut [T])) {
    by_length_1_to_16!(v.len(), K => {
        if let Ok(v) = <&mut [T; K]>::try_from(&mut *v) {
            f(v);
        }
    }, _ => f(v));
}

impl<T: Real> Activation<T> {
    /// Applies the activation in place: `v` holds `z` before and `a = g(z)` after.
    pub fn forward(&self, v: &mut [T]) {
        match *self {
            Activation::Identity => identity(v),
            Activation::Sigmoid => by_width(v, sigmoid),
            Activation::Tanh => by_width(v, tanh),
            Activation::Relu => relu(v),
            Activation::LeakyRelu(alpha) => leaky_relu(v, alpha),
            Activation::Softmax => by_width(v, softmax),
        }
    }

    /// Multiplies the error `d` by the derivative at the activations `a`, in place (the matching
    /// `*_grad` function; for softmax the Jacobian-vector product).
    ///
    /// `a` and `d` must have one length, else [`LengthMismatch`] and `d` is left untouched.
    pub fn backward(&self, a: &[T], d: &mut [T]) -> Result<(), LengthMismatch> {
        shape::expect("d", a.len(), d.len())?;
        match *self {
            Activation::Identity => identity_grad_kernel(a, d),
            Activation::Sigmoid => sigmoid_grad_kernel(a, d),
            Activation::Tanh => tanh_grad_kernel(a, d),
            Activation::Relu => relu_grad_kernel(a, d),
            Activation::LeakyRelu(alpha) => leaky_relu_grad_kernel(a, d, alpha),
            Activation::Softmax => softmax_grad_kernel(a, d),
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::SplitMix64;
    use std::vec::Vec;

    /// A `_grad` kernel over `f64` slices.
    type Grad = fn(&[f64], &mut [f64]) -> Result<(), LengthMismatch>;

    /// Sigmoid, tanh and softmax run in padded chunks of eight and, in [`Activation::forward`],
    /// through a kernel per width: every width 0 to 40 must give the bits of the plain
    /// element-by-element definition (softmax: maximum, exponentials, sum in increasing index,
    /// divisions), for ordinary values, zeros of both signs, infinities and NaN.
    #[test]
    fn chunked_activations_equal_the_element_by_element_form() {
        use crate::testutil::same_bits;
        let mut rng = SplitMix64::new(5);
        let special = [
            0.0_f32,
            -0.0,
            f32::INFINITY,
            f32::NEG_INFINITY,
            f32::NAN,
            88.0,
            -104.0,
        ];
        for n in 0..=40_usize {
            let z: Vec<f32> = (0..n)
                .map(|i| match rng.next_u64() % 6 {
                    0 => special[i % special.len()],
                    _ => rng.uniform(-30.0, 30.0) as f32,
                })
                .collect();
            let sig: Vec<f32> = z
                .iter()
                .map(|&z| {
                    // The trait's functions (sinew's `f32` exp), not std's inherent ones.
                    let e = Real::exp(-Real::abs(z));
                    (if z >= 0.0 { 1.0 } else { e }) / (1.0 + e)
                })
                .collect();
            let th: Vec<f32> = z.iter().map(|&z| Real::tanh(z)).collect();
            let mut sm = z.clone();
            if let Some(&first) = z.first() {
                let m = z.iter().fold(first, |m, &x| Real::max(m, x));
                sm.iter_mut().for_each(|x| *x = Real::exp(*x - m));
                let s = sm.iter().fold(0.0_f32, |s, &x| s + x);
                sm.iter_mut().for_each(|x| *x /= s);
            }
            for (act, want) in [
                (Activation::Sigmoid, &sig),
                (Activation::Tanh, &th),
                (Activation::Softmax, &sm),
            ] {
                let mut got = z.clone();
                act.forward(&mut got);
                assert_eq!(same_bits(&got), same_bits(want), "{act:?} width {n}");
                let mut direct = z.clone();
                match act {
                    Activation::Sigmoid => sigmoid(&mut direct),
                    Activation::Tanh => tanh(&mut direct),
                    _ => softmax(&mut direct),
                }
                assert_eq!(same_bits(&direct), same_bits(want), "{act:?} slice {n}");
            }
        }
    }

    fn apply(f: fn(&mut [f64]), z: f64) -> f64 {
        let mut v = [z];
        f(&mut v);
        v[0]
    }

    /// g'(z) from the `_grad` function: d = 1 times the derivative at a = g(z).
    fn slope(f: fn(&mut [f64]), grad: Grad, z: f64) -> f64 {
        let a = [apply(f, z)];
        let mut d = [1.0];
        grad(&a, &mut d).unwrap();
        d[0]
    }

    /// Central difference (g(z + h) - g(z - h)) / (2h); error O(h^2) (common practice).
    fn central(f: fn(&mut [f64]), z: f64) -> f64 {
        let h = 1e-6;
        (apply(f, z + h) - apply(f, z - h)) / (2.0 * h)
    }

    #[test]
    fn derivatives_at_zero() {
        // sigmoid'(0) = s(0)(1 - s(0)) = 1/4 and tanh'(0) = 1 - tanh(0)^2 = 1 (calculus; common
        // practice).
        assert_eq!(apply(sigmoid, 0.0), 0.5);
        assert_eq!(slope(sigmoid, sigmoid_grad, 0.0), 0.25);
        assert_eq!(slope(tanh, tanh_grad, 0.0), 1.0);
        assert_eq!(slope(identity, identity_grad, 0.0), 1.0);
    }

    fn leaky(v: &mut [f64]) {
        leaky_relu(v, 0.1);
    }

    fn leaky_grad(a: &[f64], d: &mut [f64]) -> Result<(), LengthMismatch> {
        leaky_relu_grad(a, d, 0.1)
    }

    #[test]
    fn derivatives_match_central_differences() {
        type Pair = (&'static str, fn(&mut [f64]), Grad);
        let pairs: [Pair; 5] = [
            ("identity", identity, identity_grad),
            ("sigmoid", sigmoid, sigmoid_grad),
            ("tanh", tanh, tanh_grad),
            ("relu", relu, relu_grad),
            ("leaky_relu", leaky, leaky_grad),
        ];
        // A grid over [-6, 6] that avoids the kink of relu at 0.
        for k in -60..=60 {
            let z = f64::from(k) * 0.1 + 0.013;
            for (name, f, grad) in pairs {
                let (got, want) = (slope(f, grad, z), central(f, z));
                assert!((got - want).abs() < 1e-8, "{name}'({z}) = {got}, fd {want}");
            }
        }
    }

    #[test]
    fn softmax_of_one_two_three() {
        // softmax(1, 2, 3) = (0.09003057, 0.24472847, 0.66524096) (a common textbook example;
        // values from memory), checked also against e^k / sum e^k with std's exp.
        let mut v = [1.0_f64, 2.0, 3.0];
        softmax(&mut v);
        let e = [1.0_f64.exp(), 2.0_f64.exp(), 3.0_f64.exp()];
        let s = e[0] + e[1] + e[2];
        for ((got, memory), ek) in v.iter().zip([0.09003057, 0.24472847, 0.66524096]).zip(e) {
            assert!((got - memory).abs() < 5e-9, "{got} vs {memory}");
            assert!((got - ek / s).abs() < 1e-15, "{got} vs {}", ek / s);
        }
        // Shifting every logit leaves softmax unchanged (common practice), even at 1000.
        let mut w = [1001.0_f64, 1002.0, 1003.0];
        softmax(&mut w);
        for (a, b) in v.iter().zip(&w) {
            assert!((a - b).abs() < 1e-14);
        }
        let mut f = [1.0_f32, 2.0, 3.0];
        softmax(&mut f);
        for (a, b) in f.iter().zip(&v) {
            assert!((f64::from(*a) - b).abs() < 1e-7);
        }
        let mut empty: [f64; 0] = [];
        softmax(&mut empty);
    }

    #[test]
    fn softmax_grad_is_the_jacobian_vector_product() {
        // The i-th entry of J^T u is d/dz_i (u . softmax(z)); compare with central differences of
        // that scalar function (common practice).
        let mut rng = SplitMix64::new(21);
        for n in 1..=7 {
            let z: Vec<f64> = (0..n).map(|_| rng.uniform(-3.0, 3.0)).collect();
            let u: Vec<f64> = (0..n).map(|_| rng.uniform(-1.0, 1.0)).collect();
            let dot = |z: &[f64]| {
                let mut a = z.to_vec();
                softmax(&mut a);
                a.iter().zip(&u).map(|(a, u)| a * u).sum::<f64>()
            };
            let mut a = z.clone();
            softmax(&mut a);
            let mut d = u.clone();
            softmax_grad(&a, &mut d).unwrap();
            for i in 0..n {
                let h = 1e-6;
                let (mut zp, mut zm) = (z.clone(), z.clone());
                zp[i] += h;
                zm[i] -= h;
                let fd = (dot(&zp) - dot(&zm)) / (2.0 * h);
                assert!((d[i] - fd).abs() < 1e-9, "n {n} i {i}: {} vs {fd}", d[i]);
            }
        }
    }

    #[test]
    fn sigmoid_is_stable_for_large_inputs() {
        let mut v = [
            1000.0_f64,
            -1000.0,
            40.0,
            -40.0,
            f64::INFINITY,
            f64::NEG_INFINITY,
        ];
        sigmoid(&mut v);
        assert!(v.iter().all(|x| !x.is_nan()));
        assert_eq!([v[0], v[1], v[4], v[5]], [1.0, 0.0, 1.0, 0.0]);
        // sigmoid(-40) = e^-40 / (1 + e^-40): positive, not flushed to zero.
        assert!(v[3] > 0.0 && (v[3] - (-40.0_f64).exp()).abs() < 1e-30);
        let mut f = [1000.0_f32, -1000.0, 88.0, -88.0];
        sigmoid(&mut f);
        assert!(f.iter().all(|x| !x.is_nan()));
        assert_eq!([f[0], f[1]], [1.0, 0.0]);
        let mut big = [1000.0_f64, -1000.0, 0.0];
        softmax(&mut big);
        assert_eq!(big, [1.0, 0.0, 0.0]);
    }

    #[test]
    fn relu_family_by_hand() {
        let mut v = [-3.0_f64, -0.5, 0.0, 0.5, 3.0];
        relu(&mut v);
        assert_eq!(v, [0.0, 0.0, 0.0, 0.5, 3.0]);
        let mut d = [1.0; 5];
        relu_grad(&v, &mut d).unwrap();
        assert_eq!(d, [0.0, 0.0, 0.0, 1.0, 1.0]);
        let mut v = [-3.0_f64, 0.0, 3.0];
        leaky_relu(&mut v, 0.01);
        assert_eq!(v, [-0.03, 0.0, 3.0]);
        let mut d = [2.0; 3];
        leaky_relu_grad(&v, &mut d, 0.01).unwrap();
        assert_eq!(d, [0.02, 0.02, 2.0]);
    }

    #[test]
    fn enum_dispatch_equals_the_functions() {
        let z = [-2.5_f64, -0.1, 0.0, 0.7, 3.0];
        let u = [0.3_f64, -1.0, 0.5, 2.0, -0.25];
        type Fwd = fn(&mut [f64]);
        type Bwd = Grad;
        let cases: [(Activation<f64>, Fwd, Bwd); 6] = [
            (Activation::Identity, identity, identity_grad),
            (Activation::Sigmoid, sigmoid, sigmoid_grad),
            (Activation::Tanh, tanh, tanh_grad),
            (Activation::Relu, relu, relu_grad),
            (Activation::LeakyRelu(0.1), leaky, leaky_grad),
            (Activation::Softmax, softmax, softmax_grad),
        ];
        for (g, f, grad) in cases {
            let (mut a1, mut a2) = (z, z);
            g.forward(&mut a1);
            f(&mut a2);
            let (mut d1, mut d2) = (u, u);
            g.backward(&a1, &mut d1).unwrap();
            grad(&a2, &mut d2).unwrap();
            assert_eq!(a1.map(f64::to_bits), a2.map(f64::to_bits), "{g:?}");
            assert_eq!(d1.map(f64::to_bits), d2.map(f64::to_bits), "{g:?}");
        }
    }

    /// Every `_grad` slice form (and `Activation::backward`): a short or long `d` is an error
    /// naming `d`, and `d` is left as it was.
    #[test]
    fn a_short_operand_is_an_error_and_nothing_is_written() {
        let a = [0.5_f64, -0.5, 2.0];
        let grads: [(&str, Grad); 6] = [
            ("identity", identity_grad),
            ("sigmoid", sigmoid_grad),
            ("tanh", tanh_grad),
            ("relu", relu_grad),
            ("leaky_relu", leaky_grad),
            ("softmax", softmax_grad),
        ];
        for (name, grad) in grads {
            for len in [2, 4] {
                let mut d = std::vec![7.0; len];
                let want = LengthMismatch {
                    operand: "d",
                    expected: 3,
                    found: len,
                };
                assert_eq!(grad(&a, &mut d), Err(want), "{name}");
                assert_eq!(d, std::vec![7.0; len], "{name}");
            }
        }
        let mut d = [7.0; 2];
        assert!(Activation::Tanh.backward(&a, &mut d).is_err());
        assert!(crate::reference::softmax_grad(&a, &mut d).is_err());
        assert_eq!(d, [7.0; 2]);
    }

    /// The array forms (`_n`, `_batch_n`) give the bits of the slice forms.
    fn array_forms_equal_the_slice_forms<const N: usize>(seed: u64) {
        let mut rng = SplitMix64::new(seed);
        let a: [f32; N] = core::array::from_fn(|_| rng.uniform(-2.0, 2.0) as f32);
        let d0: [f32; N] = core::array::from_fn(|_| rng.uniform(-2.0, 2.0) as f32);
        type N1<const N: usize> = fn(&[f32; N], &mut [f32; N]);
        type S1 = fn(&[f32], &mut [f32]) -> Result<(), LengthMismatch>;
        let pairs: [(N1<N>, S1); 5] = [
            (identity_grad_n, identity_grad),
            (sigmoid_grad_n, sigmoid_grad),
            (tanh_grad_n, tanh_grad),
            (relu_grad_n, relu_grad),
            (softmax_grad_n, softmax_grad),
        ];
        for (k, (array, slice)) in pairs.into_iter().enumerate() {
            let (mut da, mut ds) = (d0, d0);
            array(&a, &mut da);
            slice(&a, &mut ds).unwrap();
            assert_eq!(da.map(f32::to_bits), ds.map(f32::to_bits), "{k} {N}");
        }
        let (mut da, mut ds) = (d0, d0);
        leaky_relu_grad_n(&a, &mut da, 0.1);
        leaky_relu_grad(&a, &mut ds, 0.1).unwrap();
        assert_eq!(da.map(f32::to_bits), ds.map(f32::to_bits), "leaky {N}");
        // Rows of a block: the per-row array form on each row.
        let rows_a: Vec<[f32; N]> = (0..5)
            .map(|_| core::array::from_fn(|_| rng.uniform(-2.0, 2.0) as f32))
            .collect();
        type B<const N: usize> = fn(&[[f32; N]], &mut [[f32; N]]);
        let batch: [(B<N>, N1<N>); 3] = [
            (sigmoid_grad_batch_n, sigmoid_grad_n),
            (tanh_grad_batch_n, tanh_grad_n),
            (relu_grad_batch_n, relu_grad_n),
        ];
        for (k, (rows, one)) in batch.into_iter().enumerate() {
            let mut db = std::vec![d0; 5];
            rows(&rows_a, &mut db);
            let mut leaky = std::vec![d0; 5];
            leaky_relu_grad_batch_n(&rows_a, &mut leaky, 0.1);
            for ((ar, dr), lr) in rows_a.iter().zip(&db).zip(&leaky) {
                let mut want = d0;
                one(ar, &mut want);
                assert_eq!(dr.map(f32::to_bits), want.map(f32::to_bits), "{k} {N}");
                let mut want = d0;
                leaky_relu_grad_n(ar, &mut want, 0.1);
                assert_eq!(lr.map(f32::to_bits), want.map(f32::to_bits), "leaky {N}");
            }
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
