//! Portable single-precision `exp` and `tanh`, written with the four IEEE basic operations and bit
//! manipulation only.
//!
//! Why sinew has its own: these are the only transcendental functions on the hot path of an f32
//! network (sigmoid, tanh, softmax), and they run on every unit. A call to a library routine with
//! branches on the argument range cannot be vectorised, so a layer of ten sigmoid units cost ten
//! calls. These functions have no branch and no table: the compiler inlines them and runs a whole
//! layer in SIMD lanes, and a microcontroller without vector unit runs a short straight line.
//!
//! Determinism: every step is an IEEE-754 binary32 addition, subtraction, multiplication or
//! division (correctly rounded on every conforming target, hardware or soft float; Rust never fuses
//! a multiply and an add on its own), a comparison, or an integer operation on the bits. So each
//! function gives the same bits on the workstation, in the generated code and on the device.
//!
//! Method (common practice for `exp`, e.g. the Cody and Waite range reduction): `x = n ln 2 + r`
//! with `n = round(x / ln 2)` and `|r| <= ln 2 / 2`, `ln 2` split in a short high part (so that
//! `n * LN2_HI` is exact) and a low part; `e^r` by its Taylor polynomial of degree 7 (truncation
//! error below `(ln 2 / 2)^8 / 8! = 5e-9`, a tenth of an ulp); `e^x = 2^n e^r` with `2^n` built
//! from its exponent bits in two halves, so that results in the subnormal range are rounded once.
//! Accuracy, against f64 `exp` and `tanh` over every 7th bit pattern of the whole range (measured
//! when written): `expf` at most 1.01 ulp, `tanhf` at most 2.49 ulp. The tests hold them to 1.5
//! and 3 ulp on a sparser sweep. (libm's `expf` and `tanhf` stay below 1 ulp; a network does not
//! see the difference, and the goldens of the f64 path are untouched: f64 still uses libm.)

/// `ln 2` rounded to 9 significant bits (355 / 512), so that `n * LN2_HI` is exact for `|n| < 2^15`.
const LN2_HI: f32 = 355.0 / 512.0;
/// `ln 2 - LN2_HI`.
const LN2_LO: f32 = -2.121_944_4e-4;
/// `1 / ln 2`.
const LOG2_E: f32 = core::f32::consts::LOG2_E;
/// `1.5 * 2^23`: adding it to `t` (`|t| < 2^22`) rounds `t` to an integer held in the low bits.
const ROUNDER: f32 = 12_582_912.0;
/// Above this `e^x` overflows (`ln(f32::MAX)` is 88.7228).
const EXP_HI: f32 = 88.8;
/// Below this `e^x` rounds to zero (`e^-104 = 6.8e-46`, under half the least subnormal).
const EXP_LO: f32 = -104.0;

/// `x` limited to `[EXP_LO, EXP_HI]`; NaN stays NaN (both comparisons are false).
#[inline(always)]
fn clamp_exp_arg(x: f32) -> f32 {
    let x = if x > EXP_HI { EXP_HI } else { x };
    if x < EXP_LO {
        EXP_LO
    } else {
        x
    }
}

/// `2^k` for `-126 <= k <= 127` from its exponent bits (any other `k` gives some finite power or
/// zero or infinity; the callers never need those).
#[inline(always)]
fn pow2(k: i32) -> f32 {
    f32::from_bits((k.wrapping_add(127) as u32).wrapping_shl(23))
}

/// The reduction `x = n ln 2 + r`: `(n, r)` for a clamped `x`.
#[inline(always)]
fn reduce(x: f32) -> (i32, f32) {
    let shifted = x * LOG2_E + ROUNDER;
    // The integer `n` sits in the low mantissa bits of `shifted` (|n| <= 151 < 2^22).
    let n = (shifted.to_bits() as i32).wrapping_sub(ROUNDER.to_bits() as i32);
    let nf = shifted - ROUNDER;
    let r = (x - nf * LN2_HI) - nf * LN2_LO;
    (n, r)
}

/// `e^r - 1` for `|r| <= 0.35`: Taylor polynomial of degree 7 in Horner form.
#[inline(always)]
fn expm1_small(r: f32) -> f32 {
    const C2: f32 = 1.0 / 2.0;
    const C3: f32 = 1.0 / 6.0;
    const C4: f32 = 1.0 / 24.0;
    const C5: f32 = 1.0 / 120.0;
    const C6: f32 = 1.0 / 720.0;
    const C7: f32 = 1.0 / 5040.0;
    let p = C6 + r * C7;
    let p = C5 + r * p;
    let p = C4 + r * p;
    let p = C3 + r * p;
    let p = C2 + r * p;
    r + (r * r) * p
}

/// `e^x` in single precision, the same bits on every target.
///
/// Overflows to `+inf` above about 88.72, underflows through the subnormals to `+0` below about
/// -103.9; `exp(-inf) = 0`, `exp(+inf) = +inf`, `exp(NaN)` is NaN.
///
/// # Examples
///
/// ```
/// use sinew_runtime::math::expf;
/// assert_eq!(expf(0.0), 1.0);
/// assert!((expf(1.0) - core::f32::consts::E).abs() <= f32::EPSILON * 3.0);
/// assert_eq!(expf(-200.0), 0.0);
/// assert_eq!(expf(100.0), f32::INFINITY);
/// ```
#[inline(always)]
pub fn expf(x: f32) -> f32 {
    let (n, r) = reduce(clamp_exp_arg(x));
    let p = 1.0 + expm1_small(r);
    // 2^n in two factors, each a normal number for -151 <= n <= 128: p * 2^h is exact, and the
    // second product rounds once, into the subnormals where the result lies there.
    let h = n >> 1;
    (p * pow2(h)) * pow2(n - h)
}

/// `e^x - 1` for `x <= 0` (the form `tanhf` needs), accurate near zero.
#[inline(always)]
fn expm1_nonpositive(x: f32) -> f32 {
    let (n, r) = reduce(clamp_exp_arg(x));
    // e^x - 1 = 2^n (e^r - 1) + (2^n - 1); for n = 0 this is the polynomial alone. `2^n - 1` is
    // exact for -24 <= n <= 0 and within half an ulp of -1 below.
    let s = pow2(n.max(-126));
    s * expm1_small(r) + (s - 1.0)
}

/// `tanh x` in single precision, the same bits on every target.
///
/// `tanh |x| = -m / (2 + m)` with `m = e^(-2|x|) - 1` (no cancellation near zero), then the sign
/// of `x`; `tanh(+-0) = +-0`, `tanh(+-inf) = +-1`, `tanh(NaN)` is NaN.
///
/// # Examples
///
/// ```
/// use sinew_runtime::math::tanhf;
/// assert_eq!(tanhf(0.0), 0.0);
/// assert_eq!(tanhf(20.0), 1.0);
/// assert_eq!(tanhf(-20.0), -1.0);
/// assert!((tanhf(0.5) - 0.462_117_16).abs() <= 1e-7);
/// ```
#[inline(always)]
pub fn tanhf(x: f32) -> f32 {
    const SIGN: u32 = 0x8000_0000;
    let bits = x.to_bits();
    let a = f32::from_bits(bits & !SIGN);
    let m = expm1_nonpositive(-2.0 * a);
    let t = -m / (2.0 + m);
    // |t| with the sign of x (t is -0 for x = +-0, where m = +0).
    f32::from_bits((t.to_bits() & !SIGN) | (bits & SIGN))
}

#[cfg(test)]
mod tests {
    //! References: f64 `exp` and `tanh` of the Rust standard library (the platform's libm, far
    //! more accurate than the single-precision result), error measured in units in the last place
    //! of the f32 result (common practice); special values from IEEE 754 and the C standard's
    //! Annex F (from memory: exp(-inf) = +0, exp(+inf) = +inf, tanh(+-0) = +-0, tanh(+-inf) = +-1).
    use super::*;
    extern crate std;

    /// Error of `got` against the exact `want`, in ulps of `want` rounded to f32.
    fn ulps(got: f32, want: f64) -> f64 {
        let w = want as f32;
        if w == 0.0 || !w.is_finite() {
            return if got == w { 0.0 } else { f64::INFINITY };
        }
        let ulp = if w.is_subnormal() {
            f64::from(f32::from_bits(1))
        } else {
            let next = f32::from_bits(w.abs().to_bits() + 1);
            f64::from(next) - f64::from(w.abs())
        };
        (f64::from(got) - want).abs() / ulp
    }

    /// The largest error in ulps of `f` against the exact `exact`, and where, over every
    /// `step`-th f32 bit pattern of magnitude up to `max(-lo, hi)`, both signs, within `[lo, hi]`.
    fn worst_ulps(
        f: fn(f32) -> f32,
        exact: fn(f64) -> f64,
        (lo, hi): (f32, f32),
        step: usize,
    ) -> (f64, f32) {
        let mut worst = (0.0, 0.0_f32);
        for u in (0..=hi.max(-lo).to_bits()).step_by(step) {
            let v = f32::from_bits(u);
            for x in [v, -v] {
                if (lo..=hi).contains(&x) {
                    let e = ulps(f(x), exact(f64::from(x)));
                    if e > worst.0 {
                        worst = (e, x);
                    }
                }
            }
        }
        worst
    }

    #[test]
    fn exp_is_within_one_and_a_half_ulps_of_f64_exp() {
        let worst = worst_ulps(expf, f64::exp, (-104.0, 89.0), 61);
        assert!(worst.0 <= 1.5, "worst {} ulp at x = {:e}", worst.0, worst.1);
    }

    #[test]
    fn exp_special_values_and_limits() {
        assert_eq!(expf(0.0), 1.0);
        assert_eq!(expf(-0.0), 1.0);
        assert_eq!(expf(f32::NEG_INFINITY).to_bits(), 0);
        assert_eq!(expf(f32::INFINITY), f32::INFINITY);
        assert!(expf(f32::NAN).is_nan());
        // ln(f32::MAX) = 88.72284: just below it is finite, just above it overflows.
        assert!(expf(88.72).is_finite());
        assert_eq!(expf(88.73), f32::INFINITY);
        // Subnormal results are rounded, not flushed: e^-100 = 3.72e-44 (26.6 times the least
        // subnormal 1.4e-45).
        let tiny = expf(-100.0);
        assert!(tiny > 0.0 && tiny.is_subnormal());
        assert!(ulps(tiny, (-100.0_f64).exp()) <= 1.0);
        assert_eq!(expf(-104.0), 0.0);
        // Integers: e^k against f64.
        for k in -80..=88 {
            let x = k as f32;
            assert!(ulps(expf(x), f64::from(x).exp()) <= 2.0, "k = {k}");
        }
    }

    #[test]
    fn tanh_is_within_three_ulps_of_f64_tanh() {
        let worst = worst_ulps(tanhf, f64::tanh, (-12.0, 12.0), 37);
        assert!(worst.0 <= 3.0, "worst {} ulp at x = {:e}", worst.0, worst.1);
    }

    #[test]
    fn tanh_special_values_and_symmetry() {
        assert_eq!(tanhf(0.0).to_bits(), 0.0_f32.to_bits());
        assert_eq!(tanhf(-0.0).to_bits(), (-0.0_f32).to_bits());
        assert_eq!(tanhf(f32::INFINITY), 1.0);
        assert_eq!(tanhf(f32::NEG_INFINITY), -1.0);
        assert!(tanhf(f32::NAN).is_nan());
        assert_eq!(tanhf(1e30), 1.0);
        // Tiny arguments: tanh x = x to within rounding.
        assert_eq!(tanhf(1e-30), 1e-30);
        assert_eq!(tanhf(f32::MIN_POSITIVE), f32::MIN_POSITIVE);
        let mut x = 1e-6_f32;
        while x < 12.0 {
            assert_eq!(tanhf(-x).to_bits(), (-tanhf(x)).to_bits());
            x *= 1.37;
        }
    }
}
