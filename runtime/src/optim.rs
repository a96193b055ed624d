//! Optimizer update steps over flat slices (callers flatten matrices with `as_flattened_mut`) or
//! over arrays.
//!
//! `p` are the parameters, `g` their finished batch gradient; state buffers (`v`, `m`) have the
//! same shape and start at zero. The slice forms check that every operand is as long as `p` and
//! return [`LengthMismatch`] otherwise (nothing updated); the array forms (`_n`) take operands of
//! one array type ([`Flat`]: a vector or a matrix), so their lengths agree by construction.

use crate::shape::{self, Flat, LengthMismatch};
use crate::Real;

/// Plain gradient descent: `p_k = p_k - rate * g_k`.
///
/// # Examples
///
/// ```
/// let mut p = [1.0, 2.0];
/// sinew_runtime::optim::sgd(&mut p, &[0.5, -1.0], 0.5)?;
/// assert_eq!(p, [0.75, 2.5]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
pub fn sgd<T: Real>(p: &mut [T], g: &[T], rate: T) -> Result<(), LengthMismatch> {
    shape::expect("g", p.len(), g.len())?;
    sgd_kernel(p, g, rate);
    Ok(())
}

/// The loop of [`sgd`], on operands whose lengths agree.
fn sgd_kernel<T: Real>(p: &mut [T], g: &[T], rate: T) {
    for (pk, gk) in p.iter_mut().zip(g) {
        *pk -= rate * *gk;
    }
}

/// Classical momentum: `v_k = mu * v_k - rate * g_k`, then `p_k = p_k + v_k`.
///
/// # Examples
///
/// ```
/// let mut p = [1.0];
/// let mut v = [0.0];
/// sinew_runtime::optim::momentum(&mut p, &[1.0], &mut v, 0.5, 0.5)?;
/// assert_eq!((p, v), ([0.5], [-0.5]));
/// sinew_runtime::optim::momentum(&mut p, &[1.0], &mut v, 0.5, 0.5)?;
/// assert_eq!((p, v), ([-0.25], [-0.75]));
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
pub fn momentum<T: Real>(
    p: &mut [T],
    g: &[T],
    v: &mut [T],
    rate: T,
    mu: T,
) -> Result<(), LengthMismatch> {
    shape::expect("g", p.len(), g.len())?;
    shape::expect("v", p.len(), v.len())?;
    momentum_kernel(p, g, v, rate, mu);
    Ok(())
}

/// The loop of [`momentum`], on operands whose lengths agree.
fn momentum_kernel<T: Real>(p: &mut [T], g: &[T], v: &mut [T], rate: T, mu: T) {
    for ((pk, gk), vk) in p.iter_mut().zip(g).zip(v.iter_mut()) {
        *vk = mu * *vk - rate * *gk;
        *pk += *vk;
    }
}

/// Adam (Kingma and Ba 2015, Algorithm 1) with bias correction; `t >= 1` is the number of this
/// step (the caller increments it before calling; `t = 0` is treated as 1).
///
/// Per call: `c1 = 1 - beta1^t`, `c2 = 1 - beta2^t` (with [`Real::powi`]), `k1 = 1 - beta1`,
/// `k2 = 1 - beta2`. Per parameter, in this order:
/// `m_k = beta1 * m_k + k1 * g_k`;
/// `v_k = beta2 * v_k + k2 * (g_k * g_k)`;
/// `mhat = m_k / c1`; `vhat = v_k / c2`;
/// `p_k = p_k - (rate * mhat) / (sqrt(vhat) + eps)`.
///
/// # Examples
///
/// ```
/// // On the first step the corrected ratio is g/|g|, so each parameter moves by about `rate`.
/// let (mut p, mut m, mut v) = ([1.0_f64, 1.0], [0.0; 2], [0.0; 2]);
/// sinew_runtime::optim::adam(&mut p, &[0.3, -20.0], &mut m, &mut v, 1, 0.001, 0.9, 0.999, 1e-8)?;
/// assert!((p[0] - 0.999).abs() < 1e-10 && (p[1] - 1.001).abs() < 1e-10);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[allow(clippy::too_many_arguments)]
pub fn adam<T: Real>(
    p: &mut [T],
    g: &[T],
    m: &mut [T],
    v: &mut [T],
    t: u32,
    rate: T,
    beta1: T,
    beta2: T,
    eps: T,
) -> Result<(), LengthMismatch> {
    shape::expect("g", p.len(), g.len())?;
    shape::expect("m", p.len(), m.len())?;
    shape::expect("v", p.len(), v.len())?;
    adam_kernel(p, g, m, v, t, rate, beta1, beta2, eps);
    Ok(())
}

/// The loop of [`adam`], on operands whose lengths agree.
#[allow(clippy::too_many_arguments)]
fn adam_kernel<T: Real>(
    p: &mut [T],
    g: &[T],
    m: &mut [T],
    v: &mut [T],
    t: u32,
    rate: T,
    beta1: T,
    beta2: T,
    eps: T,
) {
    let t = i32::try_from(t.max(1)).unwrap_or(i32::MAX);
    let c1 = T::ONE - beta1.powi(t);
    let c2 = T::ONE - beta2.powi(t);
    let k1 = T::ONE - beta1;
    let k2 = T::ONE - beta2;
    for (((pk, gk), mk), vk) in p.iter_mut().zip(g).zip(m.iter_mut()).zip(v.iter_mut()) {
        let gk = *gk;
        *mk = beta1 * *mk + k1 * gk;
        *vk = beta2 * *vk + k2 * (gk * gk);
        let mhat = *mk / c1;
        let vhat = *vk / c2;
        *pk -= rate * mhat / (vhat.sqrt() + eps);
    }
}

/// Array form of [`sgd`]: `p` and `g` of one array type (a vector or a matrix), the same kernel
/// over their values in order, the same bits.
///
/// # Examples
///
/// ```
/// let mut p = [[1.0_f64, 2.0]];
/// sinew_runtime::optim::sgd_n(&mut p, &[[0.5, -1.0]], 0.5);
/// assert_eq!(p, [[0.75, 2.5]]);
/// ```
#[inline]
pub fn sgd_n<T: Real, A: Flat<T>>(p: &mut A, g: &A, rate: T) {
    sgd_kernel(p.values_mut(), g.values(), rate);
}

/// Array form of [`momentum`]: `p`, `g` and `v` of one array type, the same kernel, the same
/// bits.
///
/// # Examples
///
/// ```
/// let (mut p, mut v) = ([1.0], [0.0]);
/// sinew_runtime::optim::momentum_n(&mut p, &[1.0], &mut v, 0.5, 0.5);
/// assert_eq!((p, v), ([0.5], [-0.5]));
/// ```
#[inline]
pub fn momentum_n<T: Real, A: Flat<T>>(p: &mut A, g: &A, v: &mut A, rate: T, mu: T) {
    momentum_kernel(p.values_mut(), g.values(), v.values_mut(), rate, mu);
}

/// Array form of [`adam`]: `p`, `g`, `m` and `v` of one array type, the same kernel, the same
/// bits.
///
/// # Examples
///
/// ```
/// let (mut p, mut m, mut v) = ([1.0_f64, 1.0], [0.0; 2], [0.0; 2]);
/// sinew_runtime::optim::adam_n(&mut p, &[0.3, -20.0], &mut m, &mut v, 1, 0.001, 0.9, 0.999, 1e-8);
/// assert!((p[0] - 0.999).abs() < 1e-10 && (p[1] - 1.001).abs() < 1e-10);
/// ```
#[allow(clippy::too_many_arguments)]
#[inline]
pub fn adam_n<T: Real, A: Flat<T>>(
    p: &mut A,
    g: &A,
    m: &mut A,
    v: &mut A,
    t: u32,
    rate: T,
    beta1: T,
    beta2: T,
    eps: T,
) {
    adam_kernel(
        p.values_mut(),
        g.values(),
        m.values_mut(),
        v.values_mut(),
        t,
        rate,
        beta1,
        beta2,
        eps,
    );
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sgd_by_hand() {
        // p - rate g: 1 - 0.1 * 0.5 = 0.95, -2 - 0.1 * (-3) = -1.7.
        let mut p = [1.0_f64, -2.0];
        sgd(&mut p, &[0.5, -3.0], 0.1).unwrap();
        assert!((p[0] - 0.95).abs() < 1e-15 && (p[1] + 1.7).abs() < 1e-15);
    }

    #[test]
    fn momentum_by_hand() {
        // Classical momentum (Polyak 1964, in the form v = mu v - rate g, p = p + v of Sutskever
        // et al. 2013, from memory), rate 0.1, mu 0.9, constant gradient 2, p0 = 1, v0 = 0:
        // v1 = -0.2, p1 = 0.8; v2 = 0.9 (-0.2) - 0.2 = -0.38, p2 = 0.42;
        // v3 = 0.9 (-0.38) - 0.2 = -0.542, p3 = -0.122.
        let (mut p, mut v) = ([1.0_f64], [0.0_f64]);
        let want = [(0.8, -0.2), (0.42, -0.38), (-0.122, -0.542)];
        for (wp, wv) in want {
            momentum(&mut p, &[2.0], &mut v, 0.1, 0.9).unwrap();
            assert!(
                (p[0] - wp).abs() < 1e-15 && (v[0] - wv).abs() < 1e-15,
                "{p:?} {v:?}"
            );
        }
    }

    const RATE: f64 = 0.001;
    const B1: f64 = 0.9;
    const B2: f64 = 0.999;
    const EPS: f64 = 1e-8;

    #[test]
    fn adam_first_step_moves_by_the_rate() {
        // Kingma and Ba (2015), Algorithm 1, default hyperparameters (rate 0.001, beta1 0.9,
        // beta2 0.999, eps 1e-8), m0 = v0 = 0, t = 1:
        //   m1 = 0.1 g, v1 = 0.001 g^2;
        //   mhat = m1 / (1 - 0.9) = g, vhat = v1 / (1 - 0.999) = g^2;
        //   step = rate * g / (|g| + eps) = 0.001 sign(g) / (1 + 1e-8 / |g|).
        // So every parameter moves by about rate against the sign of its gradient, whatever the
        // gradient's size (the paper's section 2.1 remark on the effective step size; from memory).
        let g = [0.5_f64, -2.0, 1e-3, -40.0];
        let mut p = [1.0_f64, 1.0, 1.0, 1.0];
        let (mut m, mut v) = ([0.0; 4], [0.0; 4]);
        adam(&mut p, &g, &mut m, &mut v, 1, RATE, B1, B2, EPS).unwrap();
        for ((pk, gk), (mk, vk)) in p.iter().zip(g).zip(m.iter().zip(&v)) {
            let step = RATE * gk / (gk.abs() + EPS);
            assert!((pk - (1.0 - step)).abs() < 1e-15, "{pk}");
            assert!((pk - (1.0 - RATE * gk.signum())).abs() < 1e-8);
            // 1 - 0.9 and 1 - 0.999 are not exact in binary: relative tolerance.
            assert!((mk - 0.1 * gk).abs() < 1e-14 * gk.abs());
            assert!((vk - 0.001 * gk * gk).abs() < 1e-14 * gk * gk);
        }
        // g = 0.5: step = 0.001 * 0.5 / 0.50000001 = 0.00099999998 (to 11 digits).
        assert!((p[0] - (1.0 - 0.00099999998)).abs() < 1e-14);
    }

    #[test]
    fn adam_second_step_by_hand() {
        // Gradient +1 at t = 1, then -1 at t = 2, defaults, p0 = 0:
        //   t = 1: m1 = 0.1, v1 = 0.001, mhat = 1, vhat = 1, p1 = -0.001 / (1 + 1e-8).
        //   t = 2: m2 = 0.9 * 0.1 + 0.1 * (-1) = -0.01; v2 = 0.999 * 0.001 + 0.001 = 0.001999;
        //          1 - 0.9^2 = 0.19, 1 - 0.999^2 = 0.001999;
        //          mhat = -0.01 / 0.19 = -1/19, vhat = 0.001999 / 0.001999 = 1;
        //          p2 = p1 + 0.001 / (19 (1 + 1e-8)).
        //   p2 = -0.001 (1 - 1/19) / (1 + 1e-8) = -0.018 / 19 / (1 + 1e-8) = -0.000947368412...
        let (mut p, mut m, mut v) = ([0.0_f64], [0.0], [0.0]);
        adam(&mut p, &[1.0], &mut m, &mut v, 1, RATE, B1, B2, EPS).unwrap();
        assert!((p[0] + 0.001 / (1.0 + 1e-8)).abs() < 1e-17);
        adam(&mut p, &[-1.0], &mut m, &mut v, 2, RATE, B1, B2, EPS).unwrap();
        assert!((m[0] + 0.01).abs() < 1e-16 && (v[0] - 0.001999).abs() < 1e-16);
        let want = -0.018 / 19.0 / (1.0 + 1e-8);
        assert!((p[0] - want).abs() < 1e-16, "{} vs {want}", p[0]);
        assert!((p[0] + 0.000947368412).abs() < 1e-12);

        // A constant gradient keeps mhat = g and vhat = g^2 at every step (both corrections
        // undo the zero start), so each step moves by rate * 3 / (3 + eps).
        let (mut p, mut m, mut v) = ([0.0_f64], [0.0], [0.0]);
        for t in 1..=5 {
            adam(&mut p, &[3.0], &mut m, &mut v, t, RATE, B1, B2, EPS).unwrap();
            let want = -f64::from(t) * RATE * 3.0 / (3.0 + EPS);
            assert!((p[0] - want).abs() < 1e-15, "t {t}: {} vs {want}", p[0]);
        }
    }

    #[test]
    fn adam_in_f32_and_edge_cases() {
        let (mut p, mut m, mut v) = ([1.0_f32, 1.0], [0.0_f32; 2], [0.0_f32; 2]);
        adam(
            &mut p,
            &[0.25, -0.25],
            &mut m,
            &mut v,
            1,
            0.001,
            0.9,
            0.999,
            1e-8,
        )
        .unwrap();
        assert!((p[0] - 0.999).abs() < 1e-6 && (p[1] - 1.001).abs() < 1e-6);
        // t = 0 is treated as t = 1 (no division by zero).
        let (mut q, mut m0, mut v0) = ([1.0_f32, 1.0], [0.0_f32; 2], [0.0_f32; 2]);
        adam(
            &mut q,
            &[0.25, -0.25],
            &mut m0,
            &mut v0,
            0,
            0.001,
            0.9,
            0.999,
            1e-8,
        )
        .unwrap();
        assert_eq!(p, q);
        // A zero gradient leaves the parameter where it is; a huge t is fine.
        let (mut p, mut m, mut v) = ([2.0_f64], [0.0], [0.0]);
        adam(&mut p, &[0.0], &mut m, &mut v, u32::MAX, RATE, B1, B2, EPS).unwrap();
        assert_eq!(p, [2.0]);
        // Mismatched lengths: an error, and nothing updated.
        let mut p = [1.0_f64, 1.0, 1.0];
        assert!(sgd(&mut p, &[1.0], 0.5).is_err());
        assert_eq!(p, [1.0; 3]);
    }

    /// A short operand is an error naming it, and nothing is updated.
    #[test]
    fn a_short_operand_is_an_error_and_nothing_is_written() {
        use crate::shape::LengthMismatch;
        let miss = |operand, found| {
            Err(LengthMismatch {
                operand,
                expected: 3,
                found,
            })
        };
        let (mut p, mut m, mut v) = ([1.0_f64; 3], [0.5; 3], [0.25; 3]);
        let g = [1.0; 3];
        assert_eq!(sgd(&mut p, &g[..2], 0.1), miss("g", 2));
        assert_eq!(momentum(&mut p, &g, &mut v[..2], 0.1, 0.9), miss("v", 2));
        assert_eq!(
            adam(&mut p, &g, &mut m[..1], &mut v, 1, RATE, B1, B2, EPS),
            miss("m", 1)
        );
        assert_eq!((p, m, v), ([1.0; 3], [0.5; 3], [0.25; 3]));
    }

    /// The array forms (vector and matrix) give the bits of the slice forms, step after step.
    #[test]
    fn array_forms_give_the_bits_of_the_slice_forms() {
        let mut rng = crate::rng::SplitMix64::new(8);
        let mut draw = || rng.uniform(-1.0, 1.0) as f32;
        let p0: [[f32; 3]; 2] = [[draw(), draw(), draw()], [draw(), draw(), draw()]];
        let g: [[f32; 3]; 2] = [[draw(), draw(), draw()], [draw(), draw(), draw()]];
        let bits = |w: &[[f32; 3]; 2]| {
            w.as_flattened()
                .iter()
                .map(|v| v.to_bits())
                .collect::<std::vec::Vec<_>>()
        };
        let (mut pa, mut ps) = (p0, p0);
        let (mut ma, mut ms, mut va, mut vs) =
            ([[0.0; 3]; 2], [[0.0; 3]; 2], [[0.0; 3]; 2], [[0.0; 3]; 2]);
        for t in 1..=3 {
            sgd_n(&mut pa, &g, 0.1);
            sgd(ps.as_flattened_mut(), g.as_flattened(), 0.1).unwrap();
            momentum_n(&mut pa, &g, &mut va, 0.1, 0.9);
            momentum(
                ps.as_flattened_mut(),
                g.as_flattened(),
                vs.as_flattened_mut(),
                0.1,
                0.9,
            )
            .unwrap();
            adam_n(&mut pa, &g, &mut ma, &mut va, t, 0.01, 0.9, 0.999, 1e-8);
            adam(
                ps.as_flattened_mut(),
                g.as_flattened(),
                ms.as_flattened_mut(),
                vs.as_flattened_mut(),
                t,
                0.01,
                0.9,
                0.999,
                1e-8,
            )
            .unwrap();
            assert_eq!(bits(&pa), bits(&ps), "t {t}");
            assert_eq!(bits(&ma), bits(&ms), "t {t}");
            assert_eq!(bits(&va), bits(&vs), "t {t}");
        }
        let (mut b, mut bs) = ([1.0_f64, 2.0], [1.0_f64, 2.0]);
        sgd_n(&mut b, &[0.5, 0.25], 0.3);
        sgd(&mut bs, &[0.5, 0.25], 0.3).unwrap();
        assert_eq!(b.map(f64::to_bits), bs.map(f64::to_bits));
    }
}
