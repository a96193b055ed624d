//! The scalar trait every kernel is generic over, implemented for `f32` and `f64`.
//!
//! Every transcendental function is portable Rust, on the host and on the device alike, so the
//! same inputs give the same bits everywhere: `f32` `exp` and `tanh` are sinew's own branch-free
//! functions ([`crate::math`], vectorisable across a layer), everything else is `libm`.

use core::fmt::Debug;
use core::ops::{Add, AddAssign, Div, DivAssign, Mul, MulAssign, Neg, Sub, SubAssign};

/// A floating-point scalar: `f32` or `f64`.
///
/// The arithmetic operators are the IEEE 754 ones of the primitive type (round to nearest, no fused
/// multiply-add); the functions below call sinew's [`crate::math`] or `libm`:
///
/// | method  | `f32`     | `f64`   |
/// | ------- | --------- | ------- |
/// | `exp`   | [`crate::math::expf`] | `libm::exp` |
/// | `ln`    | `logf`    | `log`   |
/// | `ln_1p` | `log1pf`  | `log1p` |
/// | `tanh`  | [`crate::math::tanhf`] | `libm::tanh` |
/// | `sqrt`  | `sqrtf`   | `sqrt`  |
/// | `abs`   | `fabsf`   | `fabs`  |
/// | `powi`  | `powf`    | `pow`   |
///
/// # Examples
///
/// ```
/// use sinew_runtime::Real;
///
/// fn half_square<T: Real>(x: T) -> T {
///     T::HALF * x * x
/// }
/// assert_eq!(half_square(3.0_f32), 4.5);
/// assert_eq!(Real::max(1.0_f64, 2.0), 2.0);
/// assert_eq!(<f64 as Real>::from_usize(32), 32.0);
/// ```
pub trait Real:
    Copy
    + Default
    + PartialEq
    + PartialOrd
    + Debug
    + Add<Output = Self>
    + Sub<Output = Self>
    + Mul<Output = Self>
    + Div<Output = Self>
    + Neg<Output = Self>
    + AddAssign
    + SubAssign
    + MulAssign
    + DivAssign
{
    /// 0.
    const ZERO: Self;
    /// 1.
    const ONE: Self;
    /// 2.
    const TWO: Self;
    /// 1/2.
    const HALF: Self;
    /// Whether [`Real::exp`] and [`Real::tanh`] are sinew's own branch-free functions, which the
    /// compiler runs in SIMD lanes (`f32`), rather than library calls (`f64`, libm): the
    /// activations then compute a short tail as a whole, zero-padded chunk.
    const LANE_MATH: bool = false;

    /// `v` rounded to the nearest value of `Self` (exact for `f64`).
    fn from_f64(v: f64) -> Self;
    /// `self` as `f64` (always exact).
    fn to_f64(self) -> f64;
    /// `n` rounded to the nearest value of `Self` (one rounding, exact up to 2^24 for `f32` and
    /// 2^53 for `f64`).
    fn from_usize(n: usize) -> Self;
    /// e^self.
    fn exp(self) -> Self;
    /// Natural logarithm ln(self).
    fn ln(self) -> Self;
    /// ln(1 + self), accurate for small `self`.
    fn ln_1p(self) -> Self;
    /// Hyperbolic tangent (e^x - e^-x) / (e^x + e^-x).
    fn tanh(self) -> Self;
    /// Square root.
    fn sqrt(self) -> Self;
    /// Absolute value |self|.
    fn abs(self) -> Self;
    /// self^n, computed as libm `pow(self, n as float)`.
    fn powi(self, n: i32) -> Self;
    /// The larger of `self` and `o`; NaN if either is NaN. On a tie (including `0.0` against `-0.0`)
    /// it returns `o`.
    fn max(self, o: Self) -> Self;
}

macro_rules! impl_real {
    ($t:ty, $lanes:expr, $exp:path, $ln:path, $ln1p:path, $tanh:path, $sqrt:path, $abs:path, $pow:path) => {
        impl Real for $t {
            const ZERO: Self = 0.0;
            const ONE: Self = 1.0;
            const TWO: Self = 2.0;
            const HALF: Self = 0.5;
            const LANE_MATH: bool = $lanes;

            #[inline]
            fn from_f64(v: f64) -> Self {
                v as $t
            }
            #[inline]
            fn to_f64(self) -> f64 {
                self as f64
            }
            #[inline]
            fn from_usize(n: usize) -> Self {
                n as $t
            }
            #[inline]
            fn exp(self) -> Self {
                $exp(self)
            }
            #[inline]
            fn ln(self) -> Self {
                $ln(self)
            }
            #[inline]
            fn ln_1p(self) -> Self {
                $ln1p(self)
            }
            #[inline]
            fn tanh(self) -> Self {
                $tanh(self)
            }
            #[inline]
            fn sqrt(self) -> Self {
                $sqrt(self)
            }
            #[inline]
            fn abs(self) -> Self {
                $abs(self)
            }
            #[inline]
            fn powi(self, n: i32) -> Self {
                $pow(self, n as $t)
            }
            #[inline]
            fn max(self, o: Self) -> Self {
                if self > o {
                    self
                } else if o >= self {
                    o
                } else {
                    // Unordered: at least one is NaN, and so is their sum.
                    self + o
                }
            }
        }
    };
}

impl_real!(
    f32,
    true,
    crate::math::expf,
    libm::logf,
    libm::log1pf,
    crate::math::tanhf,
    libm::sqrtf,
    libm::fabsf,
    libm::powf
);
impl_real!(
    f64,
    false,
    libm::exp,
    libm::log,
    libm::log1p,
    libm::tanh,
    libm::sqrt,
    libm::fabs,
    libm::pow
);

#[cfg(test)]
mod tests {
    use super::*;

    fn check<T: Real>(tol: f64) {
        let close = |a: T, b: f64| (a.to_f64() - b).abs() <= tol * b.abs().max(1.0);
        // Handbook values: e, ln 2, tanh(1) = 0.7615941559557649, sqrt 2.
        assert!(close(T::ONE.exp(), core::f64::consts::E));
        assert!(close(T::TWO.ln(), core::f64::consts::LN_2));
        assert!(close(T::ONE.ln_1p(), core::f64::consts::LN_2));
        assert!(close(T::ONE.tanh(), 0.761_594_155_955_764_9));
        assert!(close(T::TWO.sqrt(), core::f64::consts::SQRT_2));
        // ln_1p keeps precision near 0 where ln(1 + x) would not: ln(1 + 1e-10) = 1e-10 - 5e-21.
        assert!(close(T::from_f64(1e-10).ln_1p(), 1e-10));
        assert_eq!((-T::HALF).abs(), T::HALF);
        assert_eq!(
            T::from_f64(0.9).powi(2),
            T::from_f64(0.9) * T::from_f64(0.9)
        );
        assert_eq!(T::TWO.powi(-1), T::HALF);
        assert_eq!(T::from_usize(1000).to_f64(), 1000.0);
        assert_eq!(T::HALF + T::HALF, T::ONE);
        assert_eq!(T::default(), T::ZERO);
    }

    #[test]
    fn libm_functions_match_handbook_values() {
        check::<f64>(1e-15);
        check::<f32>(1e-7);
    }

    #[test]
    fn max_returns_the_larger_and_propagates_nan() {
        assert_eq!(Real::max(1.0_f64, 2.0), 2.0);
        assert_eq!(Real::max(2.0_f64, 1.0), 2.0);
        assert_eq!(Real::max(-1.0_f32, f32::NEG_INFINITY), -1.0);
        assert!(Real::max(f64::NAN, 1.0).is_nan());
        assert!(Real::max(1.0, f64::NAN).is_nan());
        assert!(Real::max(f32::NAN, f32::NAN).is_nan());
        // Tie: the second operand.
        assert!(Real::max(0.0_f64, -0.0).is_sign_negative());
    }
}
