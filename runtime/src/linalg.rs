//! Dense linear algebra for fully connected layers.
//!
//! Weights are row-major: row `j` holds the weights into unit `j` of the next layer, so a layer
//! with fan-in `n` and width `o` stores `w[j*n + i]` for `j < o`, `i < n`.
//!
//! Each kernel is written once over slices (the form the host engine calls) and has a thin
//! const-generic array wrapper (the form generated code calls) that flattens the matrix and calls
//! the slice form, so both perform the same operations in the same order and give identical bits.
//!
//! Lengths: the slice forms never panic. Rows are paired with the other operands by `zip`, so any
//! surplus in a longer operand is left untouched (outputs) or ignored (inputs); an incomplete last
//! row of `w` is ignored.

use crate::Real;

/// Affine map of a dense layer: `z_j = (sum_i w[j*n + i] * x_i) + b_j`, with `n = x.len()`.
///
/// Order: for each row, the sum starts at `ZERO` and adds the products `w[j*n+i] * x_i` in
/// increasing `i`; the bias is added last. Rows are `w.chunks_exact(n)` zipped with `b` and `z`, so
/// the number of rows written is the least of `w.len() / n`, `b.len()` and `z.len()`. With `n = 0`
/// every row is empty and `z_j = ZERO + b_j` for `j < min(b.len(), z.len())`.
///
/// # Examples
///
/// ```
/// // 2 inputs -> 3 units.
/// let w = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0];
/// let b = [0.5, -0.5, 0.0];
/// let mut z = [0.0; 3];
/// sinew_runtime::affine(&w, &b, &[1.0, -1.0], &mut z);
/// assert_eq!(z, [-0.5, -1.5, -1.0]);
/// ```
pub fn affine<T: Real>(w: &[T], b: &[T], x: &[T], z: &mut [T]) {
    let n = x.len();
    if n == 0 {
        for (zj, bj) in z.iter_mut().zip(b) {
            *zj = T::ZERO + *bj;
        }
        return;
    }
    for ((row, bj), zj) in w.chunks_exact(n).zip(b).zip(z.iter_mut()) {
        let mut s = T::ZERO;
        for (wji, xi) in row.iter().zip(x) {
            s += *wji * *xi;
        }
        *zj = s + *bj;
    }
}

/// Array form of [`affine`]: `z = W x + b` for `W` of `O` rows and `I` columns.
///
/// Calls `affine(w.as_flattened(), b, x, z)`: same operations, same order, same bits.
///
/// # Examples
///
/// ```
/// let w = [[1.0_f32, 0.0], [0.0, 1.0], [1.0, 1.0]];
/// let mut z = [0.0; 3];
/// sinew_runtime::affine_n(&w, &[0.0, 0.0, 1.0], &[2.0, 3.0], &mut z);
/// assert_eq!(z, [2.0, 3.0, 6.0]);
/// ```
#[inline]
pub fn affine_n<T: Real, const I: usize, const O: usize>(
    w: &[[T; I]; O],
    b: &[T; O],
    x: &[T; I],
    z: &mut [T; O],
) {
    affine(w.as_flattened(), b, x, z);
}

/// Transposed matrix-vector product (the error sent back through a layer):
/// `out_i = sum_j w[j*n + i] * d_j`, with `n = out.len()`.
///
/// Order: every `out_i` is set to `ZERO`, then for `j` in increasing order the products
/// `w[j*n+i] * d_j` are added, so each `out_i` is summed in increasing `j` starting from `ZERO`.
/// Rows are `w.chunks_exact(n)` zipped with `d` (the least of `w.len() / n` and `d.len()` rows).
/// With `n = 0` there is nothing to write.
///
/// # Examples
///
/// ```
/// // 2 inputs -> 3 units; the error of the 3 units goes back to the 2 inputs.
/// let w = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0];
/// let mut out = [9.0; 2];
/// sinew_runtime::back(&w, &[1.0, 0.0, -1.0], &mut out);
/// assert_eq!(out, [1.0 - 5.0, 2.0 - 6.0]);
/// ```
pub fn back<T: Real>(w: &[T], d: &[T], out: &mut [T]) {
    let n = out.len();
    if n == 0 {
        return;
    }
    for o in out.iter_mut() {
        *o = T::ZERO;
    }
    for (row, dj) in w.chunks_exact(n).zip(d) {
        for (o, wji) in out.iter_mut().zip(row) {
            *o += *wji * *dj;
        }
    }
}

/// Array form of [`back`]: `out = W^T d` for `W` of `O` rows and `I` columns.
///
/// Calls `back(w.as_flattened(), d, out)`: same operations, same order, same bits.
///
/// # Examples
///
/// ```
/// let w = [[1.0_f64, 2.0], [3.0, 4.0], [5.0, 6.0]];
/// let mut out = [0.0; 2];
/// sinew_runtime::back_n(&w, &[1.0, 1.0, 1.0], &mut out);
/// assert_eq!(out, [9.0, 12.0]);
/// ```
#[inline]
pub fn back_n<T: Real, const I: usize, const O: usize>(
    w: &[[T; I]; O],
    d: &[T; O],
    out: &mut [T; I],
) {
    back(w.as_flattened(), d, out);
}

/// Outer-product accumulate (the weight gradient of one sample): `g[j*n + i] += d_j * a_i`, with
/// `n = a.len()`.
///
/// Each element receives exactly one addition, `g + (d_j * a_i)`. Rows are `g.chunks_exact_mut(n)`
/// zipped with `d`. With `n = 0` there is nothing to write.
///
/// # Examples
///
/// ```
/// let mut g = [1.0; 6]; // 3 rows of 2
/// sinew_runtime::outer_acc(&mut g, &[1.0, 2.0, 3.0], &[10.0, 20.0]);
/// assert_eq!(g, [11.0, 21.0, 21.0, 41.0, 31.0, 61.0]);
/// ```
pub fn outer_acc<T: Real>(g: &mut [T], d: &[T], a: &[T]) {
    let n = a.len();
    if n == 0 {
        return;
    }
    for (row, dj) in g.chunks_exact_mut(n).zip(d) {
        for (gji, ai) in row.iter_mut().zip(a) {
            *gji += *dj * *ai;
        }
    }
}

/// Array form of [`outer_acc`]: `G += d a^T` for `G` of `O` rows and `I` columns.
///
/// Calls `outer_acc(g.as_flattened_mut(), d, a)`: same operations, same bits.
///
/// # Examples
///
/// ```
/// let mut g = [[0.0_f32; 2]; 2];
/// sinew_runtime::outer_acc_n(&mut g, &[1.0, -1.0], &[2.0, 3.0]);
/// assert_eq!(g, [[2.0, 3.0], [-2.0, -3.0]]);
/// ```
#[inline]
pub fn outer_acc_n<T: Real, const I: usize, const O: usize>(
    g: &mut [[T; I]; O],
    d: &[T; O],
    a: &[T; I],
) {
    outer_acc(g.as_flattened_mut(), d, a);
}

/// Vector accumulate (the bias gradient of one sample): `g_j += d_j`, over the zip of `g` and `d`.
///
/// Works for arrays too (`&mut [T; N]` coerces to `&mut [T]`).
///
/// # Examples
///
/// ```
/// let mut g = [1.0, 2.0];
/// sinew_runtime::add_acc(&mut g, &[0.5, 0.25]);
/// assert_eq!(g, [1.5, 2.25]);
/// ```
pub fn add_acc<T: Real>(g: &mut [T], d: &[T]) {
    for (gj, dj) in g.iter_mut().zip(d) {
        *gj += *dj;
    }
}

/// Input scaling: `out_i = (x_i - mean_i) / std_i`, over the zip of the four slices.
///
/// It divides (it does not multiply by a stored reciprocal), so a `std_i` of 1 leaves the centred
/// value exact.
///
/// # Examples
///
/// ```
/// let mut out = [0.0; 2];
/// sinew_runtime::standardize(&[3.0, 10.0], &[1.0, 10.0], &[2.0, 4.0], &mut out);
/// assert_eq!(out, [1.0, 0.0]);
/// ```
pub fn standardize<T: Real>(x: &[T], mean: &[T], std: &[T], out: &mut [T]) {
    for (((o, xi), mi), si) in out.iter_mut().zip(x).zip(mean).zip(std) {
        *o = (*xi - *mi) / *si;
    }
}

/// Array form of [`standardize`]: `out = (x - mean) ./ std`.
///
/// Calls `standardize(x, mean, std, out)`: same operations, same bits.
///
/// # Examples
///
/// ```
/// let mut out = [0.0_f32; 3];
/// sinew_runtime::standardize_n(&[1.0, 2.0, 3.0], &[2.0; 3], &[0.5; 3], &mut out);
/// assert_eq!(out, [-2.0, 0.0, 2.0]);
/// ```
#[inline]
pub fn standardize_n<T: Real, const N: usize>(
    x: &[T; N],
    mean: &[T; N],
    std: &[T; N],
    out: &mut [T; N],
) {
    standardize(x, mean, std, out);
}

#[cfg(test)]
mod tests {
    //! Each kernel against a naive indexed loop written straight from its formula (the reference
    //! of matrixmultiply-style kernel tests; common practice), over every size 1..=9 x 1..=9 and
    //! a few large layer shapes, bit-exact because the reference adds in the documented order.
    use super::*;
    use crate::rng::SplitMix64;
    use std::boxed::Box;
    use std::vec;
    use std::vec::Vec;

    /// Shapes (fan-in n, width o) of the sweep plus large layers of a 784-128-64-10 network.
    fn shapes() -> Vec<(usize, usize)> {
        let mut s = Vec::new();
        for n in 1..=9 {
            for o in 1..=9 {
                s.push((n, o));
            }
        }
        s.extend([(784, 128), (128, 64), (64, 10), (1, 300), (300, 1)]);
        s
    }

    /// Test data in [-1, 1) from the crate's generator (itself checked against reference outputs).
    fn data<T: Real>(len: usize, rng: &mut SplitMix64) -> Vec<T> {
        (0..len)
            .map(|_| T::from_f64(rng.uniform(-1.0, 1.0)))
            .collect()
    }

    fn bits<T: Real>(v: &[T]) -> Vec<u64> {
        v.iter().map(|x| x.to_f64().to_bits()).collect()
    }

    fn naive_affine<T: Real>(w: &[T], b: &[T], x: &[T], n: usize, o: usize) -> Vec<T> {
        let mut z = vec![T::ZERO; o];
        for j in 0..o {
            let mut s = T::ZERO;
            for i in 0..n {
                s += w[j * n + i] * x[i];
            }
            z[j] = s + b[j];
        }
        z
    }

    fn naive_back<T: Real>(w: &[T], d: &[T], n: usize, o: usize) -> Vec<T> {
        let mut out = vec![T::ZERO; n];
        for i in 0..n {
            let mut s = T::ZERO;
            for j in 0..o {
                s += w[j * n + i] * d[j];
            }
            out[i] = s;
        }
        out
    }

    fn naive_outer<T: Real>(g: &[T], d: &[T], a: &[T], n: usize, o: usize) -> Vec<T> {
        let mut g = g.to_vec();
        for j in 0..o {
            for i in 0..n {
                g[j * n + i] += d[j] * a[i];
            }
        }
        g
    }

    fn sweep<T: Real>() {
        let mut rng = SplitMix64::new(11);
        for (n, o) in shapes() {
            let w = data::<T>(n * o, &mut rng);
            let b = data::<T>(o, &mut rng);
            let x = data::<T>(n, &mut rng);
            let d = data::<T>(o, &mut rng);
            let g0 = data::<T>(n * o, &mut rng);

            let mut z = vec![T::ZERO; o];
            affine(&w, &b, &x, &mut z);
            assert_eq!(
                bits(&z),
                bits(&naive_affine(&w, &b, &x, n, o)),
                "affine {n}x{o}"
            );

            let mut out = vec![T::ONE; n];
            back(&w, &d, &mut out);
            assert_eq!(bits(&out), bits(&naive_back(&w, &d, n, o)), "back {n}x{o}");

            let mut g = g0.clone();
            outer_acc(&mut g, &d, &x);
            assert_eq!(
                bits(&g),
                bits(&naive_outer(&g0, &d, &x, n, o)),
                "outer {n}x{o}"
            );

            let mut gb = b.clone();
            add_acc(&mut gb, &d);
            let want: Vec<T> = (0..o).map(|j| b[j] + d[j]).collect();
            assert_eq!(bits(&gb), bits(&want), "add_acc {o}");

            let mean = data::<T>(n, &mut rng);
            let std: Vec<T> = data::<T>(n, &mut rng)
                .into_iter()
                .map(|s| s.abs() + T::HALF)
                .collect();
            let mut xs = vec![T::ZERO; n];
            standardize(&x, &mean, &std, &mut xs);
            let want: Vec<T> = (0..n).map(|i| (x[i] - mean[i]) / std[i]).collect();
            assert_eq!(bits(&xs), bits(&want), "standardize {n}");
        }
    }

    #[test]
    fn kernels_match_naive_loops_f64() {
        sweep::<f64>();
    }

    #[test]
    fn kernels_match_naive_loops_f32() {
        sweep::<f32>();
    }

    #[test]
    fn small_integer_example_is_exact() {
        // [[1,2,3],[4,5,6]] (7,8,9) = (50, 122) and its transpose against (1,1) is (5,7,9):
        // exact in floating point (plain arithmetic).
        let w = [[1.0_f64, 2.0, 3.0], [4.0, 5.0, 6.0]];
        let mut z = [0.0; 2];
        affine_n(&w, &[0.0, 0.0], &[7.0, 8.0, 9.0], &mut z);
        assert_eq!(z, [50.0, 122.0]);
        let mut out = [0.0; 3];
        back_n(&w, &[1.0, 1.0], &mut out);
        assert_eq!(out, [5.0, 7.0, 9.0]);
    }

    fn identity_and_zero<const N: usize>() {
        let mut rng = SplitMix64::new(3);
        let x: [f64; N] = core::array::from_fn(|_| rng.uniform(-5.0, 5.0));
        let b: [f64; N] = core::array::from_fn(|_| rng.uniform(-5.0, 5.0));
        let eye: [[f64; N]; N] =
            core::array::from_fn(|j| core::array::from_fn(|i| f64::from(u8::from(i == j))));
        let zero = [[0.0_f64; N]; N];

        // I x + 0 = x, I^T d = d, exactly.
        let mut z = [9.0; N];
        affine_n(&eye, &[0.0; N], &x, &mut z);
        assert_eq!(z, x);
        let mut out = [9.0; N];
        back_n(&eye, &x, &mut out);
        assert_eq!(out, x);
        // 0 x + b = b, 0^T d = 0.
        affine_n(&zero, &b, &x, &mut z);
        assert_eq!(z, b);
        back_n(&zero, &x, &mut out);
        assert_eq!(out, [0.0; N]);
        // G += e_j e_j^T on a zero G gives the identity.
        let mut g = [[0.0_f64; N]; N];
        for j in 0..N {
            let e: [f64; N] = core::array::from_fn(|i| f64::from(u8::from(i == j)));
            outer_acc_n(&mut g, &e, &e);
        }
        assert_eq!(g, eye);
    }

    #[test]
    fn identity_and_zero_matrices_are_exact() {
        identity_and_zero::<1>();
        identity_and_zero::<2>();
        identity_and_zero::<5>();
        identity_and_zero::<9>();
        identity_and_zero::<64>();
    }

    fn array_equals_slice<const I: usize, const O: usize>(seed: u64) {
        let mut rng = SplitMix64::new(seed);
        let mut w: Box<[[f32; I]; O]> =
            vec![[0.0_f32; I]; O].into_boxed_slice().try_into().unwrap();
        for v in w.as_flattened_mut() {
            *v = rng.uniform(-1.0, 1.0) as f32;
        }
        let b: [f32; O] = core::array::from_fn(|_| rng.uniform(-1.0, 1.0) as f32);
        let x: [f32; I] = core::array::from_fn(|_| rng.uniform(-1.0, 1.0) as f32);
        let d: [f32; O] = core::array::from_fn(|_| rng.uniform(-1.0, 1.0) as f32);
        let s: [f32; I] = core::array::from_fn(|_| rng.uniform(0.5, 2.0) as f32);

        let (mut za, mut zs) = ([0.0; O], [0.0; O]);
        affine_n(&w, &b, &x, &mut za);
        affine(w.as_flattened(), &b, &x, &mut zs);
        assert_eq!(bits(&za), bits(&zs));

        let (mut oa, mut os) = ([0.0; I], [0.0; I]);
        back_n(&w, &d, &mut oa);
        back(w.as_flattened(), &d, &mut os);
        assert_eq!(bits(&oa), bits(&os));

        let mut ga = w.clone();
        let mut gs = w.as_flattened().to_vec();
        outer_acc_n(&mut ga, &d, &x);
        outer_acc(&mut gs, &d, &x);
        assert_eq!(bits(ga.as_flattened()), bits(&gs));

        let (mut xa, mut xs) = ([0.0; I], [0.0; I]);
        standardize_n(&x, &s, &s, &mut xa);
        standardize(&x, &s, &s, &mut xs);
        assert_eq!(bits(&xa), bits(&xs));
    }

    #[test]
    fn array_forms_equal_slice_forms_bitwise() {
        array_equals_slice::<1, 1>(1);
        array_equals_slice::<3, 7>(2);
        array_equals_slice::<9, 9>(3);
        array_equals_slice::<784, 128>(4);
        array_equals_slice::<64, 10>(5);
    }

    #[test]
    fn mismatched_lengths_truncate_and_never_panic() {
        let w = [1.0, 2.0, 3.0, 4.0, 5.0]; // two full rows of 2, one stray element
        let mut z = [7.0; 4];
        affine(&w, &[0.0; 4], &[1.0, 1.0], &mut z);
        assert_eq!(z, [3.0, 7.0, 7.0, 7.0]);
        // Fan-in zero: rows are empty, z = b.
        let mut z = [7.0; 2];
        affine(&w, &[1.0, 2.0], &[], &mut z);
        assert_eq!(z, [1.0, 2.0]);
        let mut out: [f64; 0] = [];
        back(&w, &[1.0], &mut out);
        let mut g = [0.0; 3];
        outer_acc(&mut g, &[1.0], &[]);
        assert_eq!(g, [0.0; 3]);
        // Fewer errors than rows: only the rows with an error contribute.
        let mut out = [0.0; 2];
        back(&w, &[1.0], &mut out);
        assert_eq!(out, [1.0, 2.0]);
        let mut g = [0.0; 3];
        add_acc(&mut g, &[1.0]);
        assert_eq!(g, [1.0, 0.0, 0.0]);
    }
}
