//! The pseudo-random generator for weight initialisation, and the initialisation rules.
//!
//! A model is initialised from ONE `SplitMix64::new(seed)`: for each layer in order its weight
//! matrix is filled row-major (uniform EPS: [`fill_uniform`] with `eps`; Glorot:
//! [`fill_uniform`] with [`glorot_limit`]`(fan_in, width)`; He: [`fill_normal`] with
//! [`he_std`]`(fan_in)`), and biases are zero. Draws are made in `f64` and rounded once to the
//! model's scalar, so an `f32` and an `f64` model of the same seed start from the same numbers up to
//! that rounding.

use crate::Real;

/// SplitMix64 (Steele, Lea and Flood 2014, "Fast splittable pseudorandom number generators"), the
/// generator commonly used to seed the xoshiro family: a 64-bit counter advanced by the golden
/// gamma `0x9e3779b97f4a7c15`, each output a bijective mix of the counter.
///
/// ```text
/// state = state + 0x9e3779b97f4a7c15            (mod 2^64)
/// z = (state ^ (state >> 30)) * 0xbf58476d1ce4e5b9
/// z = (z ^ (z >> 27)) * 0x94d049bb133111eb
/// output z ^ (z >> 31)
/// ```
///
/// # Examples
///
/// ```
/// use sinew_runtime::rng::SplitMix64;
///
/// let mut r = SplitMix64::new(0);
/// assert_eq!(r.next_u64(), 0xe220a8397b1dcdaf);
/// let u = r.next_f64();
/// assert!((0.0..1.0).contains(&u));
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct SplitMix64 {
    state: u64,
}

/// 2^-53, the spacing of `f64` values in [0.5, 1).
const TWO_POW_MINUS_53: f64 = 1.0 / (1u64 << 53) as f64;

impl SplitMix64 {
    /// A generator whose state is `seed`; the first output mixes `seed + 0x9e3779b97f4a7c15`.
    pub const fn new(seed: u64) -> Self {
        Self { state: seed }
    }

    /// The next 64 random bits (the recurrence in the type's doc).
    pub fn next_u64(&mut self) -> u64 {
        self.state = self.state.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.state;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^ (z >> 31)
    }

    /// A uniform draw in `[0, 1)`: `(next_u64() >> 11) * 2^-53` (the top 53 bits, exact).
    pub fn next_f64(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * TWO_POW_MINUS_53
    }

    /// A uniform draw in `[lo, hi)` (up to rounding): `lo + (hi - lo) * next_f64()`.
    pub fn uniform(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.next_f64()
    }

    /// A standard normal draw (mean 0, variance 1) by the Box–Muller transform, one value per call
    /// (the second value of the pair is not kept): `u1 = 1 - next_f64()` (in `(0, 1]`, so the
    /// logarithm is finite), `u2 = next_f64()`, result `sqrt(-2 ln u1) * cos(2 pi u2)` with libm
    /// `sqrt`, `log`, `cos`.
    ///
    /// # Examples
    ///
    /// ```
    /// let mut r = sinew_runtime::rng::SplitMix64::new(7);
    /// let x = r.normal();
    /// assert!(x.is_finite());
    /// ```
    pub fn normal(&mut self) -> f64 {
        let u1 = 1.0 - self.next_f64();
        let u2 = self.next_f64();
        libm::sqrt(-2.0 * libm::log(u1)) * libm::cos(core::f64::consts::TAU * u2)
    }
}

/// Fills `w` in slice order with `from_f64(rng.uniform(-limit, limit))`: uniform on
/// `[-limit, limit)` (uniform EPS init uses `limit = eps`, Glorot uniform [`glorot_limit`]). Every
/// value satisfies `|w| <= limit` in `f64`, and `|w| <= T::from_f64(limit)` after rounding.
///
/// # Examples
///
/// ```
/// use sinew_runtime::rng::{fill_uniform, glorot_limit, SplitMix64};
///
/// let mut w = [[0.0_f32; 6]; 10];
/// let limit = glorot_limit(6, 10);
/// fill_uniform(w.as_flattened_mut(), limit, &mut SplitMix64::new(7));
/// // Rounding to f32 is monotone, so the bound holds for the rounded limit.
/// assert!(w.as_flattened().iter().all(|x| x.abs() <= limit as f32));
/// ```
pub fn fill_uniform<T: Real>(w: &mut [T], limit: f64, rng: &mut SplitMix64) {
    for x in w.iter_mut() {
        *x = T::from_f64(rng.uniform(-limit, limit));
    }
}

/// Fills `w` in slice order with `from_f64(std * rng.normal())`: normal with mean 0 and standard
/// deviation `std` (He init uses [`he_std`]).
///
/// # Examples
///
/// ```
/// use sinew_runtime::rng::{fill_normal, he_std, SplitMix64};
///
/// let mut w = [0.0_f64; 8];
/// fill_normal(&mut w, he_std(8), &mut SplitMix64::new(7));
/// assert!(w.iter().all(|x| x.is_finite()));
/// ```
pub fn fill_normal<T: Real>(w: &mut [T], std: f64, rng: &mut SplitMix64) {
    for x in w.iter_mut() {
        *x = T::from_f64(std * rng.normal());
    }
}

/// Glorot (Xavier) uniform limit `sqrt(6 / (fan_in + fan_out))` (Glorot and Bengio 2010): the
/// uniform distribution on `[-limit, limit]` has variance `2 / (fan_in + fan_out)`.
///
/// The sum is formed in `f64` (no integer overflow); `fan_in + fan_out = 0` gives `+inf`.
///
/// # Examples
///
/// ```
/// assert_eq!(sinew_runtime::rng::glorot_limit(2, 1), 2.0_f64.sqrt());
/// ```
pub fn glorot_limit(fan_in: usize, fan_out: usize) -> f64 {
    libm::sqrt(6.0 / (fan_in as f64 + fan_out as f64))
}

/// He standard deviation `sqrt(2 / fan_in)` (He et al. 2015), for layers followed by relu.
///
/// `fan_in = 0` gives `+inf`.
///
/// # Examples
///
/// ```
/// assert_eq!(sinew_runtime::rng::he_std(8), 0.5);
/// ```
pub fn he_std(fan_in: usize) -> f64 {
    libm::sqrt(2.0 / fan_in as f64)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::vec;
    use std::vec::Vec;

    #[test]
    fn splitmix64_reference_outputs_for_seed_zero() {
        // The first four outputs of the reference splitmix64.c (S. Vigna, public domain; Steele,
        // Lea and Flood 2014) from state 0, the values that seed xoshiro256 in its reference code
        // (from memory; several independent public test suites pin the same four values).
        let mut r = SplitMix64::new(0);
        let want = [
            0xe220a8397b1dcdaf,
            0x6e789e6aa1b965f4,
            0x06c45d188009454f,
            0xf88bb8a8724c81ec,
        ];
        for w in want {
            assert_eq!(r.next_u64(), w);
        }
        // The state is a plain counter: seed s continues where seed 0 was after some steps.
        let mut a = SplitMix64::new(0x9e37_79b9_7f4a_7c15);
        assert_eq!(a.next_u64(), 0x6e789e6aa1b965f4);
        // Deterministic, and `new` is usable in a const.
        const START: SplitMix64 = SplitMix64::new(7);
        let (mut x, mut y) = (START, SplitMix64::new(7));
        for _ in 0..100 {
            assert_eq!(x.next_u64(), y.next_u64());
        }
    }

    #[test]
    fn next_f64_is_in_the_unit_interval_on_a_53_bit_grid() {
        let mut r = SplitMix64::new(1);
        let mut r2 = SplitMix64::new(1);
        for _ in 0..100_000 {
            let u = r.next_f64();
            assert!((0.0..1.0).contains(&u));
            let k = u * (1u64 << 53) as f64;
            assert_eq!(k, (r2.next_u64() >> 11) as f64);
        }
        // The largest possible draw is 1 - 2^-53 < 1.
        assert!(((1u64 << 53) - 1) as f64 * TWO_POW_MINUS_53 < 1.0);
    }

    fn moments(v: &[f64]) -> (f64, f64) {
        let n = v.len() as f64;
        let mean = v.iter().sum::<f64>() / n;
        let var = v.iter().map(|x| (x - mean) * (x - mean)).sum::<f64>() / n;
        (mean, var)
    }

    #[test]
    fn normal_draws_have_mean_zero_and_variance_one() {
        // 100k draws: standard error of the mean 1/sqrt(n) = 0.0032, of the variance
        // sqrt(2/n) = 0.0045; tolerances are about 5 standard errors. About 68.27% of a standard
        // normal lies within one standard deviation (handbook value).
        let mut r = SplitMix64::new(2024);
        let v: Vec<f64> = (0..100_000).map(|_| r.normal()).collect();
        assert!(v.iter().all(|x| x.is_finite()));
        let (mean, var) = moments(&v);
        assert!(mean.abs() < 0.016, "mean {mean}");
        assert!((var - 1.0).abs() < 0.025, "variance {var}");
        let within = v.iter().filter(|x| x.abs() < 1.0).count() as f64 / v.len() as f64;
        assert!((within - 0.6827).abs() < 0.008, "within one sigma {within}");
    }

    #[test]
    fn glorot_uniform_limit_and_variance() {
        // Glorot and Bengio (2010): W ~ U[-l, l], l = sqrt(6 / (fan_in + fan_out)), so
        // Var W = l^2 / 3 = 2 / (fan_in + fan_out).
        assert_eq!(glorot_limit(6, 10), (6.0_f64 / 16.0).sqrt());
        for (fan_in, fan_out) in [(784, 128), (6, 10), (1, 1)] {
            let limit = glorot_limit(fan_in, fan_out);
            let mut w = vec![0.0_f64; 100_352];
            fill_uniform(&mut w, limit, &mut SplitMix64::new(7));
            let max = w.iter().fold(0.0_f64, |m, x| m.max(x.abs()));
            assert!(
                max <= limit && max > 0.999 * limit,
                "max {max} limit {limit}"
            );
            let (mean, var) = moments(&w);
            let want = limit * limit / 3.0;
            assert!((want - 2.0 / (fan_in + fan_out) as f64).abs() < 1e-15);
            // Relative standard error of the variance is sqrt(4/5 - 4/9) * 3 / sqrt(n) ~ 0.6%.
            assert!(
                ((var - want) / want).abs() < 0.02,
                "variance {var} want {want}"
            );
            assert!(mean.abs() < 0.01 * limit, "mean {mean}");
            // The f32 fill is the f64 fill rounded once, and stays within the rounded limit.
            let mut wf = vec![0.0_f32; 1000];
            fill_uniform(&mut wf, limit, &mut SplitMix64::new(7));
            for (a, b) in wf.iter().zip(&w) {
                assert_eq!(*a, *b as f32);
                assert!(a.abs() <= limit as f32);
            }
        }
    }

    #[test]
    fn he_normal_standard_deviation() {
        // He et al. (2015): W ~ N(0, 2 / fan_in).
        assert_eq!(he_std(2), 1.0);
        for fan_in in [784, 128, 3] {
            let std = he_std(fan_in);
            assert!((std * std - 2.0 / fan_in as f64).abs() < 1e-15);
            let mut w = vec![0.0_f64; 100_352];
            fill_normal(&mut w, std, &mut SplitMix64::new(8));
            let (mean, var) = moments(&w);
            let want = 2.0 / fan_in as f64;
            assert!(
                ((var - want) / want).abs() < 0.025,
                "variance {var} want {want}"
            );
            assert!(mean.abs() < 0.016 * std, "mean {mean}");
            let mut wf = vec![0.0_f32; 1000];
            fill_normal(&mut wf, std, &mut SplitMix64::new(8));
            for (a, b) in wf.iter().zip(&w) {
                assert_eq!(*a, *b as f32);
            }
        }
    }

    #[test]
    fn degenerate_fans_do_not_panic() {
        assert_eq!(glorot_limit(0, 0), f64::INFINITY);
        assert_eq!(he_std(0), f64::INFINITY);
        assert!(glorot_limit(usize::MAX, usize::MAX) > 0.0);
    }
}
