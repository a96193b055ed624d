//! Weight penalties: their term in the batch cost and their part of the batch gradient.
//!
//! With `m` samples in the batch and `lambda` the penalty strength, the cost is
//! `J = (1/m) sum loss + P(W)` with
//! `P = (lambda / (2m)) sum W^2` for L2 and `P = (lambda / m) sum |W|` for L1, and the finished
//! gradient is `dJ/dW = (1/m) sum_samples dW + dP/dW`. Biases are never penalised
//! ([`finish_bias`]). The gradient is the exact derivative of the cost term: for L2
//! `dP/dw = (lambda/m) w`, for L1 `dP/dw = (lambda/m) sign(w)` (with sign(0) = 0, the usual
//! subgradient choice).

use crate::Real;

/// A penalty on the weights (never on biases); the field is `lambda`.
///
/// # Examples
///
/// ```
/// use sinew_runtime::penalty::{finish_bias, Penalty};
///
/// let pen = Penalty::L2(0.5_f64);
/// let w = [2.0, -4.0];
/// let m = 2.0;
/// // cost term: lambda * sum w^2 / (2 m) = 0.5 * 20 / 4
/// assert_eq!(pen.cost(pen.sum(&w), m), 2.5);
/// // gradient: g / m + (lambda / m) w
/// let mut g = [1.0, 1.0];
/// pen.finish_weights(&mut g, &w, m);
/// assert_eq!(g, [0.5 + 0.5, 0.5 - 1.0]);
/// let mut gb = [1.0];
/// finish_bias(&mut gb, m);
/// assert_eq!(gb, [0.5]);
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Penalty<T> {
    /// No penalty: cost term 0, gradient `g / m`.
    None,
    /// L2 (weight decay): cost term `lambda sum w^2 / (2m)`, gradient `g/m + (lambda/m) w`.
    L2(T),
    /// L1: cost term `lambda sum |w| / m`, gradient `g/m + (lambda/m) sign(w)`.
    L1(T),
}

impl<T: Real> Penalty<T> {
    /// The raw sum the cost term is built from: `sum_k w_k^2` (L2), `sum_k |w_k|` (L1), `ZERO`
    /// (none). Starts at `ZERO`, adds in increasing `k`.
    ///
    /// A model with several layers adds the sums of its layers in order (starting at `ZERO`) and
    /// calls [`Penalty::cost`] once.
    pub fn sum(&self, w: &[T]) -> T {
        let mut s = T::ZERO;
        match *self {
            Penalty::None => {}
            Penalty::L2(_) => {
                for wk in w {
                    s += *wk * *wk;
                }
            }
            Penalty::L1(_) => {
                for wk in w {
                    s += wk.abs();
                }
            }
        }
        s
    }

    /// The penalty's term in the batch cost from the raw `sum` and the batch size `m`:
    /// `(lambda * sum) / (TWO * m)` (L2), `(lambda * sum) / m` (L1), `ZERO` (none).
    pub fn cost(&self, sum: T, m: T) -> T {
        match *self {
            Penalty::None => T::ZERO,
            Penalty::L2(lambda) => lambda * sum / (T::TWO * m),
            Penalty::L1(lambda) => lambda * sum / m,
        }
    }

    /// Finishes an accumulated weight gradient for a batch of `m` samples, in place:
    /// `g_k = g_k / m + (lambda / m) * w_k` (L2), `g_k = g_k / m + (lambda / m) * sign(w_k)` (L1,
    /// sign(0) = 0, NaN passes through), `g_k = g_k / m` (none).
    ///
    /// `lambda / m` is computed once per call. Runs over the zip of `g` and `w` (none: all of `g`).
    pub fn finish_weights(&self, g: &mut [T], w: &[T], m: T) {
        match *self {
            Penalty::None => finish_bias(g, m),
            Penalty::L2(lambda) => {
                let c = lambda / m;
                for (gk, wk) in g.iter_mut().zip(w) {
                    *gk = *gk / m + c * *wk;
                }
            }
            Penalty::L1(lambda) => {
                let c = lambda / m;
                for (gk, wk) in g.iter_mut().zip(w) {
                    *gk = *gk / m + c * sign(*wk);
                }
            }
        }
    }
}

/// Finishes an accumulated bias gradient for a batch of `m` samples, in place: `g_k = g_k / m`.
/// Biases are never penalised.
///
/// # Examples
///
/// ```
/// let mut g = [3.0, -6.0];
/// sinew_runtime::penalty::finish_bias(&mut g, 3.0);
/// assert_eq!(g, [1.0, -2.0]);
/// ```
pub fn finish_bias<T: Real>(g: &mut [T], m: T) {
    for gk in g.iter_mut() {
        *gk /= m;
    }
}

/// sign(w): 1 for w > 0, -1 for w < 0, 0 for ±0, and w itself for NaN.
#[inline]
fn sign<T: Real>(w: T) -> T {
    if w > T::ZERO {
        T::ONE
    } else if w < T::ZERO {
        -T::ONE
    } else if w == T::ZERO {
        T::ZERO
    } else {
        w
    }
}
