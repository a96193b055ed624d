//! Losses of one sample, computed from the logits where that matters, and the output error.
//!
//! Cross-entropies take the output layer's pre-activations `z` (the logits), never a rounded
//! probability, so they stay finite when a unit saturates. All sums start at `ZERO` and add in
//! increasing index. Slices of different lengths are paired by `zip`: the shorter one decides.

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
    let Some(first) = z.first() else {
        return T::ZERO;
    };
    let mut m = *first;
    for zj in z {
        m = m.max(*zj);
    }
    // m * 0 is 0 for finite m and NaN for an infinity or NaN.
    if m * T::ZERO != T::ZERO {
        return m;
    }
    let mut s = T::ZERO;
    for zj in z {
        s += (*zj - m).exp();
    }
    m + s.ln()
}

/// Per-unit logistic cross-entropy from the logits (sigmoid outputs):
/// `sum_j (softplus(z_j) - y_j z_j)`.
///
/// This equals `-sum_j (y_j ln a_j + (1 - y_j) ln(1 - a_j))` with `a_j = sigmoid(z_j)`, without
/// ever forming `ln a_j`. Summed over the zip of `z` and `y` in increasing `j`.
///
/// # Examples
///
/// ```
/// use sinew_runtime::loss::logistic_cross_entropy;
///
/// // A confident, correct unit costs almost nothing; a confident, wrong one costs about |z|.
/// assert_eq!(logistic_cross_entropy(&[800.0_f64], &[1.0]), 0.0);
/// assert_eq!(logistic_cross_entropy(&[800.0_f64], &[0.0]), 800.0);
/// ```
pub fn logistic_cross_entropy<T: Real>(z: &[T], y: &[T]) -> T {
    let mut s = T::ZERO;
    for (zj, yj) in z.iter().zip(y) {
        s += softplus(*zj) - *yj * *zj;
    }
    s
}

/// Categorical cross-entropy from the logits (softmax outputs):
/// `sum_j y_j (lse(z) - z_j)` with `lse` = [`log_sum_exp`] over all of `z`.
///
/// This equals `-sum_j y_j ln a_j` with `a = softmax(z)`, without ever forming `ln a_j`.
/// `lse(z)` is computed once; the sum runs over the zip of `z` and `y` in increasing `j`.
///
/// # Examples
///
/// ```
/// use sinew_runtime::loss::softmax_cross_entropy;
///
/// let l = softmax_cross_entropy(&[0.0_f64, 0.0], &[1.0, 0.0]);
/// assert_eq!(l, core::f64::consts::LN_2);
/// ```
pub fn softmax_cross_entropy<T: Real>(z: &[T], y: &[T]) -> T {
    let lse = log_sum_exp(z);
    let mut s = T::ZERO;
    for (zj, yj) in z.iter().zip(y) {
        s += *yj * (lse - *zj);
    }
    s
}

/// Squared error `1/2 sum_j (a_j - y_j)^2`.
///
/// Order: `s = sum_j (a_j - y_j) * (a_j - y_j)` from `ZERO` in increasing `j` over the zip of `a`
/// and `y`, then `s * HALF`.
///
/// # Examples
///
/// ```
/// use sinew_runtime::loss::squared_error;
///
/// assert_eq!(squared_error(&[1.0_f32, 3.0], &[0.0, 1.0]), 2.5);
/// ```
pub fn squared_error<T: Real>(a: &[T], y: &[T]) -> T {
    let mut s = T::ZERO;
    for (aj, yj) in a.iter().zip(y) {
        let e = *aj - *yj;
        s += e * e;
    }
    s * T::HALF
}

/// Output error `d_j = a_j - y_j`, over the zip of the three slices.
///
/// It is the derivative of the loss with respect to the logits for cross-entropy with sigmoid or
/// softmax outputs, and with respect to the activations for squared error (multiply by `g'`
/// afterwards).
///
/// # Examples
///
/// ```
/// let mut d = [0.0; 2];
/// sinew_runtime::loss::output_error(&[0.75, 0.25], &[1.0, 0.0], &mut d);
/// assert_eq!(d, [-0.25, 0.25]);
/// ```
pub fn output_error<T: Real>(a: &[T], y: &[T], d: &mut [T]) {
    for ((dj, aj), yj) in d.iter_mut().zip(a).zip(y) {
        *dj = *aj - *yj;
    }
}
