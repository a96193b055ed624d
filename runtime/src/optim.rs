//! Optimizer update steps over flat slices (callers flatten matrices with `as_flattened_mut`).
//!
//! `p` are the parameters, `g` their finished batch gradient; state buffers (`v`, `m`) have the
//! same shape and start at zero. All slices are paired by `zip`: the shortest one decides how many
//! parameters are updated, the rest are left untouched.

use crate::Real;

/// Plain gradient descent: `p_k = p_k - rate * g_k`.
///
/// # Examples
///
/// ```
/// let mut p = [1.0, 2.0];
/// sinew_runtime::optim::sgd(&mut p, &[0.5, -1.0], 0.5);
/// assert_eq!(p, [0.75, 2.5]);
/// ```
pub fn sgd<T: Real>(p: &mut [T], g: &[T], rate: T) {
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
/// sinew_runtime::optim::momentum(&mut p, &[1.0], &mut v, 0.5, 0.5);
/// assert_eq!((p, v), ([0.5], [-0.5]));
/// sinew_runtime::optim::momentum(&mut p, &[1.0], &mut v, 0.5, 0.5);
/// assert_eq!((p, v), ([-0.25], [-0.75]));
/// ```
pub fn momentum<T: Real>(p: &mut [T], g: &[T], v: &mut [T], rate: T, mu: T) {
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
/// sinew_runtime::optim::adam(&mut p, &[0.3, -20.0], &mut m, &mut v, 1, 0.001, 0.9, 0.999, 1e-8);
/// assert!((p[0] - 0.999).abs() < 1e-10 && (p[1] - 1.001).abs() < 1e-10);
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
