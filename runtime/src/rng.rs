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
