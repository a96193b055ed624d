//! Weight penalties: their term in the batch cost and their part of the batch gradient.
//!
//! With `m` samples in the batch and `lambda` the penalty strength, the cost is
//! `J = (1/m) sum loss + P(W)` with
//! `P = (lambda / (2m)) sum W^2` for L2 and `P = (lambda / m) sum |W|` for L1, and the finished
//! gradient is `dJ/dW = (1/m) sum_samples dW + dP/dW`. Biases are never penalised
//! ([`finish_bias`]). The gradient is the exact derivative of the cost term: for L2
//! `dP/dw = (lambda/m) w`, for L1 `dP/dw = (lambda/m) sign(w)` (with sign(0) = 0, the usual
//! subgradient choice).

use crate::shape::{self, Flat, LengthMismatch};
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
/// pen.finish_weights(&mut g, &w, m)?;
/// assert_eq!(g, [0.5 + 0.5, 0.5 - 1.0]);
/// let mut gb = [1.0];
/// finish_bias(&mut gb, m);
/// assert_eq!(gb, [0.5]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
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
    /// `lambda / m` is computed once per call. `g` and `w` must have one length (whatever the
    /// penalty), else [`LengthMismatch`] and `g` is left untouched.
    pub fn finish_weights(&self, g: &mut [T], w: &[T], m: T) -> Result<(), LengthMismatch> {
        shape::expect("w", g.len(), w.len())?;
        self.finish_weights_kernel(g, w, m);
        Ok(())
    }

    /// Array form of [`Penalty::finish_weights`]: `g` and `w` of one array type (a vector or a
    /// matrix), the same kernel over their values in order, the same bits.
    ///
    /// # Examples
    ///
    /// ```
    /// use sinew_runtime::penalty::Penalty;
    ///
    /// let mut g = [[1.0_f64, 1.0]];
    /// Penalty::L2(0.5).finish_weights_n(&mut g, &[[2.0, -4.0]], 2.0);
    /// assert_eq!(g, [[0.5 + 0.5, 0.5 - 1.0]]);
    /// ```
    #[inline]
    pub fn finish_weights_n<A: Flat<T>>(&self, g: &mut A, w: &A, m: T) {
        self.finish_weights_kernel(g.values_mut(), w.values(), m);
    }

    /// The loop of [`Penalty::finish_weights`], on operands of one length.
    fn finish_weights_kernel(&self, g: &mut [T], w: &[T], m: T) {
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::SplitMix64;
    use std::vec::Vec;

    /// The penalty term of J as a function of the weights.
    fn term(pen: &Penalty<f64>, w: &[f64], m: f64) -> f64 {
        pen.cost(pen.sum(w), m)
    }

    #[test]
    fn gradient_is_the_derivative_of_the_cost_term() {
        // dJ/dw_k by central differences of the cost term (common practice) must equal what
        // finish_weights adds to a zero accumulated gradient.
        let mut rng = SplitMix64::new(9);
        // Keep the weights away from 0, where |w| has its kink.
        let w: Vec<f64> = (0..12)
            .map(|_| {
                let v = rng.uniform(-2.0, 2.0);
                if v.abs() < 0.1 {
                    v + 0.5
                } else {
                    v
                }
            })
            .collect();
        for pen in [
            Penalty::L2(0.01),
            Penalty::L2(3.0),
            Penalty::L1(0.05),
            Penalty::L1(2.0),
            Penalty::None,
        ] {
            for m in [1.0, 7.0, 32.0] {
                let mut g = [0.0; 12];
                pen.finish_weights(&mut g, &w, m).unwrap();
                for k in 0..w.len() {
                    let h = 1e-6;
                    let (mut wp, mut wm) = (w.clone(), w.clone());
                    wp[k] += h;
                    wm[k] -= h;
                    let fd = (term(&pen, &wp, m) - term(&pen, &wm, m)) / (2.0 * h);
                    assert!(
                        (g[k] - fd).abs() < 1e-8,
                        "{pen:?} m {m} k {k}: {} vs {fd}",
                        g[k]
                    );
                }
            }
        }
    }

    #[test]
    fn cost_terms_by_hand() {
        // w = (1, -2, 3), m = 4: sum w^2 = 14, L2 term 0.5 * 14 / 8 = 0.875;
        // sum |w| = 6, L1 term 0.5 * 6 / 4 = 0.75.
        let w = [1.0_f64, -2.0, 3.0];
        assert_eq!(Penalty::L2(0.5).sum(&w), 14.0);
        assert_eq!(Penalty::L2(0.5).cost(14.0, 4.0), 0.875);
        assert_eq!(Penalty::L1(0.5).sum(&w), 6.0);
        assert_eq!(Penalty::L1(0.5).cost(6.0, 4.0), 0.75);
        assert_eq!(Penalty::None.sum(&w), 0.0);
        assert_eq!(Penalty::<f64>::None.cost(14.0, 4.0), 0.0);
    }

    #[test]
    fn finish_divides_the_accumulated_gradient_by_m() {
        // g = (4, -8, 0), m = 4, w = (1, -2, 0), lambda = 0.5 (lambda / m = 0.125):
        // L2: (1 + 0.125, -2 - 0.25, 0); L1: (1 + 0.125, -2 - 0.125, 0 + 0) as sign(0) = 0.
        let w = [1.0_f64, -2.0, 0.0];
        let mut g = [4.0, -8.0, 0.0];
        Penalty::L2(0.5).finish_weights(&mut g, &w, 4.0).unwrap();
        assert_eq!(g, [1.125, -2.25, 0.0]);
        let mut g = [4.0, -8.0, 0.0];
        Penalty::L1(0.5).finish_weights(&mut g, &w, 4.0).unwrap();
        assert_eq!(g, [1.125, -2.125, 0.0]);
        let mut g = [4.0, -8.0, 0.0];
        Penalty::None.finish_weights(&mut g, &w, 4.0).unwrap();
        assert_eq!(g, [1.0, -2.0, 0.0]);
    }

    #[test]
    fn bias_finish_divides_only() {
        let mut rng = SplitMix64::new(10);
        let g: Vec<f64> = (0..9).map(|_| rng.uniform(-5.0, 5.0)).collect();
        for m in [1.0, 3.0, 32.0] {
            let mut b = g.clone();
            finish_bias(&mut b, m);
            let want: Vec<u64> = g.iter().map(|v| (v / m).to_bits()).collect();
            assert_eq!(b.iter().map(|v| v.to_bits()).collect::<Vec<_>>(), want);
        }
        let mut b = [3.0_f32, -6.0];
        finish_bias(&mut b, 3.0);
        assert_eq!(b, [1.0, -2.0]);
    }

    #[test]
    fn finished_batch_gradient_of_a_linear_layer_matches_central_differences() {
        // J(W, b) = (1/m) sum_s 1/2 |W x_s + b - y_s|^2 + P(W); the accumulated gradient
        // (outer_acc, add_acc) finished by finish_weights / finish_bias must match central
        // differences of J (gradient checking; common practice).
        let mut rng = SplitMix64::new(12);
        let (n, o, m) = (3, 2, 5);
        let xs: Vec<f64> = (0..n * m).map(|_| rng.uniform(-1.0, 1.0)).collect();
        let ys: Vec<f64> = (0..o * m).map(|_| rng.uniform(-1.0, 1.0)).collect();
        let w: Vec<f64> = (0..n * o).map(|_| rng.uniform(0.2, 1.0)).collect();
        let b: Vec<f64> = (0..o).map(|_| rng.uniform(-1.0, 1.0)).collect();
        let cost = |pen: &Penalty<f64>, w: &[f64], b: &[f64]| {
            let mut total = 0.0;
            for (x, y) in xs.chunks_exact(n).zip(ys.chunks_exact(o)) {
                let mut z = [0.0; 2];
                crate::affine(w, b, x, &mut z).unwrap();
                total += crate::loss::squared_error(&z, y).unwrap();
            }
            total / m as f64 + pen.cost(pen.sum(w), m as f64)
        };
        for pen in [Penalty::None, Penalty::L2(0.3), Penalty::L1(0.3)] {
            let (mut gw, mut gb) = (std::vec![0.0; n * o], std::vec![0.0; o]);
            for (x, y) in xs.chunks_exact(n).zip(ys.chunks_exact(o)) {
                let mut z = [0.0; 2];
                crate::affine(&w, &b, x, &mut z).unwrap();
                let mut d = [0.0; 2];
                crate::loss::output_error(&z, y, &mut d).unwrap();
                crate::outer_acc(&mut gw, &d, x).unwrap();
                crate::add_acc(&mut gb, &d).unwrap();
            }
            pen.finish_weights(&mut gw, &w, m as f64).unwrap();
            finish_bias(&mut gb, m as f64);
            let h = 1e-6;
            for k in 0..w.len() {
                let (mut wp, mut wm) = (w.clone(), w.clone());
                wp[k] += h;
                wm[k] -= h;
                let fd = (cost(&pen, &wp, &b) - cost(&pen, &wm, &b)) / (2.0 * h);
                assert!((gw[k] - fd).abs() < 1e-8, "{pen:?} w{k}: {} vs {fd}", gw[k]);
            }
            for k in 0..b.len() {
                let (mut bp, mut bm) = (b.clone(), b.clone());
                bp[k] += h;
                bm[k] -= h;
                let fd = (cost(&pen, &w, &bp) - cost(&pen, &w, &bm)) / (2.0 * h);
                assert!((gb[k] - fd).abs() < 1e-8, "{pen:?} b{k}: {} vs {fd}", gb[k]);
            }
        }
    }

    /// A short `w` is an error whatever the penalty, and `g` is left as it was; the array form
    /// gives the bits of the slice form.
    #[test]
    fn lengths_are_checked_and_the_array_form_matches() {
        use crate::shape::LengthMismatch;
        let w = [[0.5_f64, -2.0, 0.0], [1.5, 0.25, -0.75]];
        for pen in [Penalty::None, Penalty::L2(0.3), Penalty::L1(0.3)] {
            let mut g = [1.0; 6];
            let want = LengthMismatch {
                operand: "w",
                expected: 6,
                found: 5,
            };
            let r = pen.finish_weights(&mut g, &w.as_flattened()[..5], 4.0);
            assert_eq!(r, Err(want), "{pen:?}");
            assert_eq!(g, [1.0; 6]);
            let mut ga = [[0.25, -1.0, 3.0], [2.0, 0.5, -0.125]];
            let mut gs = ga;
            pen.finish_weights_n(&mut ga, &w, 3.0);
            pen.finish_weights(gs.as_flattened_mut(), w.as_flattened(), 3.0)
                .unwrap();
            assert_eq!(
                ga.map(|r| r.map(f64::to_bits)),
                gs.map(|r| r.map(f64::to_bits))
            );
        }
    }
}
