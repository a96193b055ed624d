//! Every fast path of `linalg` against [`crate::reference`], bit for bit (the method of
//! matrixmultiply's kernel tests: a naive loop written from the formula, over a sweep of sizes;
//! common practice): fan-ins and widths 0..=40, odd and even; batches around the edges of the
//! across-samples blocks (8) and of the sample pairs (2); a few large layers of a 784-128-64-10
//! network; f32 and f64; ordinary values, signed zeros, subnormals, large magnitudes whose
//! products overflow, infinities and NaN. Plus exact cases by hand (identity and zero matrices)
//! and a tolerance check of the lane order against the textbook sequential sum.

use super::batch::affine_batch_with;
use super::*;
use crate::reference as naive;
use crate::rng::SplitMix64;
use crate::testutil::same_bits;
use std::boxed::Box;
use std::vec;
use std::vec::Vec;

/// Samples per batch: around the edges of the blocks of 8 and of the pairs.
const BATCHES: [usize; 13] = [0, 1, 2, 3, 7, 8, 9, 15, 16, 17, 23, 24, 25];

/// Test data in [-1, 1) from the crate's generator (itself checked against reference outputs).
fn data<T: Real>(len: usize, rng: &mut SplitMix64) -> Vec<T> {
    (0..len)
        .map(|_| T::from_f64(rng.uniform(-1.0, 1.0)))
        .collect()
}

/// A value for the sweeps with special values: mostly in [-1, 1), with signed zeros (the case
/// where adding or leaving out an empty lane could change a bit), subnormals, values whose
/// products overflow or underflow, infinities and NaN.
fn edgy<T: Real>(rng: &mut SplitMix64) -> T {
    let special = [
        0.0,
        -0.0,
        1e-310,
        -3e-39,
        -3e38,
        1e300,
        1e20,
        -1e-20,
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::NAN,
    ];
    let r = rng.uniform(0.0, 1.0);
    if r < 0.3 {
        // Signed zeros, many of them, so that whole rows of products are -0.
        T::from_f64(if r < 0.15 { -0.0 } else { 0.0 })
    } else if r < 0.4 {
        T::from_f64(special[(r * 1000.0) as usize % special.len()])
    } else {
        T::from_f64(rng.uniform(-1.0, 1.0))
    }
}

fn values<T: Real>(len: usize, rng: &mut SplitMix64, special: bool) -> Vec<T> {
    if special {
        (0..len).map(|_| edgy(rng)).collect()
    } else {
        data(len, rng)
    }
}

/// Fan-in `n` and width `o`, every pair in 0..=40, then large layers.
fn shapes() -> Vec<(usize, usize)> {
    let mut s = Vec::new();
    for n in 0..=40 {
        for o in 0..=40 {
            s.push((n, o));
        }
    }
    s.extend([(784, 128), (128, 64), (64, 10), (1, 300), (300, 1)]);
    s
}

/// The per-sample kernels against the reference, every shape, plain and special values.
fn per_sample_sweep<T: Real>() {
    let mut rng = SplitMix64::new(11);
    for special in [false, true] {
        for (n, o) in shapes() {
            let w = values::<T>(n * o, &mut rng, special);
            let b = values::<T>(o, &mut rng, special);
            let x = values::<T>(n, &mut rng, special);
            let d = values::<T>(o, &mut rng, special);
            let g0 = values::<T>(n * o, &mut rng, special);
            let at = |k: &str| std::format!("{k} {n}x{o} special {special}");

            let (mut z, mut want) = (vec![T::ONE; o], vec![T::ONE; o]);
            affine(&w, &b, &x, &mut z).unwrap();
            naive::affine(&w, &b, &x, &mut want).unwrap();
            assert_eq!(same_bits(&z), same_bits(&want), "{}", at("affine"));

            let (mut out, mut want) = (vec![T::ONE; n], vec![T::ONE; n]);
            back(&w, &d, &mut out).unwrap();
            naive::back(&w, &d, &mut want).unwrap();
            assert_eq!(same_bits(&out), same_bits(&want), "{}", at("back"));

            let (mut g, mut want) = (g0.clone(), g0.clone());
            outer_acc(&mut g, &d, &x).unwrap();
            naive::outer_acc(&mut want, &d, &x).unwrap();
            assert_eq!(same_bits(&g), same_bits(&want), "{}", at("outer_acc"));

            // The reference written out once more, from the formula: one addition per element.
            let (mut gb, want): (Vec<T>, Vec<T>) =
                (b.clone(), (0..o).map(|j| b[j] + d[j]).collect());
            add_acc(&mut gb, &d).unwrap();
            assert_eq!(same_bits(&gb), same_bits(&want), "{}", at("add_acc"));

            let mean = values::<T>(n, &mut rng, special);
            let std: Vec<T> = data::<T>(n, &mut rng)
                .into_iter()
                .map(|s| s.abs() + T::HALF)
                .collect();
            let mut xs = vec![T::ZERO; n];
            standardize(&x, &mean, &std, &mut xs).unwrap();
            let want: Vec<T> = (0..n).map(|i| (x[i] - mean[i]) / std[i]).collect();
            assert_eq!(same_bits(&xs), same_bits(&want), "{}", at("standardize"));
        }
    }
}

#[test]
fn per_sample_kernels_equal_the_reference_f32() {
    per_sample_sweep::<f32>();
}

#[test]
fn per_sample_kernels_equal_the_reference_f64() {
    per_sample_sweep::<f64>();
}

/// The batch kernels (slice forms, both sample groupings of `affine_batch`) against the
/// reference, for fan-ins 0..=40, a spread of widths, and every batch size of [`BATCHES`].
fn batch_sweep<T: Real>() {
    let mut rng = SplitMix64::new(23);
    let widths = [0, 1, 2, 3, 4, 5, 7, 8, 9, 13, 16, 17, 24, 33];
    let mut cases: Vec<(usize, usize)> = (0..=40)
        .flat_map(|n| widths.iter().map(move |&o| (n, o)))
        .collect();
    cases.extend([(784, 10), (128, 64), (64, 10), (1, 300), (300, 1), (3, 40)]);
    for (n, o) in cases {
        for m in BATCHES {
            if n * o * m > 100_000 {
                continue;
            }
            let special = (n + o + m) % 2 == 0;
            let w = values::<T>(n * o, &mut rng, special);
            let b = values::<T>(o, &mut rng, special);
            let xs = values::<T>(m * n, &mut rng, special);
            let ds = values::<T>(m * o, &mut rng, special);
            let g0 = values::<T>(n * o, &mut rng, special);
            let at = |k: &str| std::format!("{k} {n}x{o} m={m}");

            let mut want = vec![T::ONE; m * o];
            naive::affine_batch(&w, &b, &xs, &mut want, n).unwrap();
            let mut zs = vec![T::ONE; m * o];
            affine_batch(&w, &b, &xs, &mut zs, n).unwrap();
            assert_eq!(same_bits(&zs), same_bits(&want), "{}", at("affine_batch"));
            // Both sample groupings, whichever the target picks, and both lane-sum forms.
            let mut paired = vec![T::ONE; m * o];
            affine_batch_with::<T, false, true>(&w, &b, &xs, &mut paired, n);
            assert_eq!(same_bits(&paired), same_bits(&want), "{}", at("paired"));
            let mut single = vec![T::ONE; m * o];
            affine_batch_with::<T, true, false>(&w, &b, &xs, &mut single, n);
            assert_eq!(same_bits(&single), same_bits(&want), "{}", at("one by one"));

            let mut want = vec![T::ONE; m * n];
            naive::back_batch(&w, &ds, &mut want, n).unwrap();
            let mut outs = vec![T::ONE; m * n];
            back_batch(&w, &ds, &mut outs, n).unwrap();
            assert_eq!(same_bits(&outs), same_bits(&want), "{}", at("back_batch"));

            let mut want = g0.clone();
            naive::outer_acc_batch(&mut want, &ds, &xs, n).unwrap();
            let mut g = g0.clone();
            outer_acc_batch(&mut g, &ds, &xs, n).unwrap();
            assert_eq!(same_bits(&g), same_bits(&want), "{}", at("outer_acc_batch"));

            let mut want = b.clone();
            naive::add_acc_batch(&mut want, &ds).unwrap();
            let mut gb = b.clone();
            add_acc_batch(&mut gb, &ds).unwrap();
            assert_eq!(same_bits(&gb), same_bits(&want), "{}", at("add_acc_batch"));
        }
    }
}

#[test]
fn batch_kernels_equal_the_reference_f32() {
    batch_sweep::<f32>();
}

#[test]
fn batch_kernels_equal_the_reference_f64() {
    batch_sweep::<f64>();
}

#[test]
fn the_batch_references_are_the_per_sample_references_in_order() {
    let mut rng = SplitMix64::new(29);
    for (n, o, m) in [(5, 3, 9), (17, 4, 8), (1, 1, 0), (40, 9, 3)] {
        let w = data::<f64>(n * o, &mut rng);
        let b = data::<f64>(o, &mut rng);
        let xs = data::<f64>(m * n, &mut rng);
        let ds = data::<f64>(m * o, &mut rng);
        let mut zs = vec![0.0; m * o];
        naive::affine_batch(&w, &b, &xs, &mut zs, n).unwrap();
        let mut g = vec![0.5; n * o];
        naive::outer_acc_batch(&mut g, &ds, &xs, n).unwrap();
        let mut g_each = vec![0.5; n * o];
        for s in 0..m {
            let mut z = vec![0.0; o];
            naive::affine(&w, &b, &xs[s * n..(s + 1) * n], &mut z).unwrap();
            assert_eq!(same_bits(&z), same_bits(&zs[s * o..(s + 1) * o]));
            naive::outer_acc(
                &mut g_each,
                &ds[s * o..(s + 1) * o],
                &xs[s * n..(s + 1) * n],
            )
            .unwrap();
        }
        assert_eq!(same_bits(&g), same_bits(&g_each));
    }
}

#[test]
fn row_parts_of_the_batch_outer_product_equal_the_whole() {
    let mut rng = SplitMix64::new(41);
    for (n, o) in [(5, 9), (16, 13), (33, 7), (784, 10)] {
        let m = 6;
        let ds = data::<f32>(m * o, &mut rng);
        let xs = data::<f32>(m * n, &mut rng);
        let g0 = data::<f32>(n * o, &mut rng);
        let mut whole = g0.clone();
        outer_acc_batch(&mut whole, &ds, &xs, n).unwrap();
        for split in [1, 3, 4, 5] {
            let mut parts = g0.clone();
            let mut naive_parts = g0.clone();
            for (k, part) in parts.chunks_mut(split * n).enumerate() {
                outer_acc_batch_rows(part, &ds, &xs, n, (k * split, o)).unwrap();
            }
            for (k, part) in naive_parts.chunks_mut(split * n).enumerate() {
                naive::outer_acc_batch_rows(part, &ds, &xs, n, (k * split, o)).unwrap();
            }
            assert_eq!(
                same_bits(&parts),
                same_bits(&whole),
                "{n}x{o} split {split}"
            );
            assert_eq!(
                same_bits(&naive_parts),
                same_bits(&whole),
                "{n}x{o} {split}"
            );
        }
    }
}

/// The array forms (and with them the across-samples paths for fan-ins below 17 and the inline
/// lane folds) against the reference, batches around the block edges, special values.
fn array_forms<T: Real, const I: usize, const O: usize>(seed: u64) {
    let mut rng = SplitMix64::new(seed);
    let mut w: Box<[[T; I]; O]> = vec![[T::ZERO; I]; O].into_boxed_slice().try_into().unwrap();
    for v in w.as_flattened_mut() {
        *v = edgy(&mut rng);
    }
    let wf = w.as_flattened();
    let b: [T; O] = core::array::from_fn(|_| edgy(&mut rng));
    let x: [T; I] = core::array::from_fn(|_| edgy(&mut rng));
    let d: [T; O] = core::array::from_fn(|_| edgy(&mut rng));
    let s: [T; I] = core::array::from_fn(|_| T::from_f64(rng.uniform(0.5, 2.0)));

    let (mut za, mut want) = ([T::ONE; O], [T::ONE; O]);
    affine_n(&w, &b, &x, &mut za);
    naive::affine(wf, &b, &x, &mut want).unwrap();
    assert_eq!(same_bits(&za), same_bits(&want), "affine_n {I}x{O}");
    let (mut oa, mut want) = ([T::ONE; I], [T::ONE; I]);
    back_n(&w, &d, &mut oa);
    naive::back(wf, &d, &mut want).unwrap();
    assert_eq!(same_bits(&oa), same_bits(&want), "back_n {I}x{O}");
    let mut ga = w.clone();
    let mut want = wf.to_vec();
    outer_acc_n(&mut ga, &d, &x);
    naive::outer_acc(&mut want, &d, &x).unwrap();
    assert_eq!(
        same_bits(ga.as_flattened()),
        same_bits(&want),
        "outer_acc_n"
    );
    let (mut xa, mut want) = ([T::ZERO; I], [T::ZERO; I]);
    standardize_n(&x, &s, &s, &mut xa);
    naive::standardize(&x, &s, &s, &mut want).unwrap();
    assert_eq!(same_bits(&xa), same_bits(&want), "standardize_n {I}");

    for m in BATCHES {
        let xs: Vec<[T; I]> = (0..m)
            .map(|_| core::array::from_fn(|_| edgy(&mut rng)))
            .collect();
        let ds: Vec<[T; O]> = (0..m)
            .map(|_| core::array::from_fn(|_| edgy(&mut rng)))
            .collect();
        let at = |k: &str| std::format!("{k} {I}x{O}, {m} samples");

        let mut want = vec![T::ONE; m * O];
        naive::affine_batch(wf, &b, xs.as_flattened(), &mut want, I).unwrap();
        let mut zs = vec![[T::ONE; O]; m];
        affine_batch_n(&w, &b, &xs, &mut zs);
        assert_eq!(
            same_bits(zs.as_flattened()),
            same_bits(&want),
            "{}",
            at("affine_batch_n")
        );
        // Fewer outputs than inputs: only the pairs are written.
        let mut short = vec![[T::ONE; O]; m / 2];
        affine_batch_n(&w, &b, &xs, &mut short);
        let head = want.get(..m / 2 * O).unwrap_or_default();
        assert_eq!(
            same_bits(short.as_flattened()),
            same_bits(head),
            "{}",
            at("short")
        );

        let mut want = vec![T::ONE; m * I];
        naive::back_batch(wf, ds.as_flattened(), &mut want, I).unwrap();
        let mut outs = vec![[T::ONE; I]; m];
        back_batch_n(&w, &ds, &mut outs);
        assert_eq!(
            same_bits(outs.as_flattened()),
            same_bits(&want),
            "{}",
            at("back_batch_n")
        );

        let mut want = wf.to_vec();
        naive::outer_acc_batch(&mut want, ds.as_flattened(), xs.as_flattened(), I).unwrap();
        let mut g = w.clone();
        outer_acc_batch_n(&mut g, &ds, &xs);
        assert_eq!(
            same_bits(g.as_flattened()),
            same_bits(&want),
            "{}",
            at("outer_acc_batch_n")
        );
    }
}

fn array_sweep<T: Real>() {
    macro_rules! shapes {
        ($($i:literal x $o:literal),* $(,)?) => {
            $(array_forms::<T, $i, $o>(($i * 100 + $o) as u64);)*
        };
    }
    shapes!(
        1 x 1, 2 x 3, 3 x 9, 4 x 4, 5 x 2, 6 x 10, 7 x 5, 8 x 3, 9 x 7, 10 x 8, 11 x 1, 12 x 6,
        13 x 13, 14 x 2, 15 x 4, 16 x 11, 16 x 16, 17 x 5, 17 x 12, 24 x 20, 31 x 33, 40 x 9,
        // More rows than one pass of the transposed block holds (16).
        6 x 40, 3 x 17, 1 x 33,
        64 x 10, 784 x 16,
    );
}

#[test]
fn array_forms_equal_the_reference_f32() {
    array_sweep::<f32>();
}

#[test]
fn array_forms_equal_the_reference_f64() {
    array_sweep::<f64>();
}

/// Mismatched lengths: the fast kernels and the reference reject alike (the same error), never
/// panic, and leave every output untouched; with lengths that agree both write the same bits.
#[test]
fn mismatched_lengths_are_rejected_alike() {
    let mut rng = SplitMix64::new(53);
    let mut rejected = 0;
    for _ in 0..3000 {
        let mut len = || (rng.next_u64() % 24) as usize;
        let (wl, bl, xl, zl, dl) = (len(), len(), len(), len(), len());
        let n = len();
        let w = data::<f32>(wl, &mut rng);
        let b = data::<f32>(bl, &mut rng);
        let x = data::<f32>(xl, &mut rng);
        let d = data::<f32>(dl, &mut rng);
        let (mut z, mut want) = (vec![7.0; zl], vec![7.0; zl]);
        let r = affine(&w, &b, &x, &mut z);
        assert_eq!(r, naive::affine(&w, &b, &x, &mut want));
        assert_eq!(
            same_bits(&z),
            same_bits(&want),
            "affine {wl} {bl} {xl} {zl}"
        );
        rejected += usize::from(r.is_err());
        let (mut out, mut want) = (vec![7.0; zl], vec![7.0; zl]);
        let r = back(&w, &d, &mut out);
        assert_eq!(r, naive::back(&w, &d, &mut want));
        assert_eq!(same_bits(&out), same_bits(&want), "back {wl} {dl} {zl}");
        let (mut g, mut want) = (vec![7.0; zl], vec![7.0; zl]);
        let r = outer_acc(&mut g, &d, &x);
        assert_eq!(r, naive::outer_acc(&mut want, &d, &x));
        assert_eq!(same_bits(&g), same_bits(&want), "outer_acc {zl} {dl} {xl}");
        // Batch forms, the row length `n` chosen apart from the slices.
        let (mut zs, mut want) = (vec![7.0; zl * 2], vec![7.0; zl * 2]);
        let r = affine_batch(&w, &b, &x, &mut zs, n);
        assert_eq!(r, naive::affine_batch(&w, &b, &x, &mut want, n));
        assert_eq!(
            same_bits(&zs),
            same_bits(&want),
            "affine_batch {wl} {bl} {xl} {zl} {n}"
        );
        let (mut outs, mut want) = (vec![7.0; zl * 2], vec![7.0; zl * 2]);
        let r = back_batch(&w, &d, &mut outs, n);
        assert_eq!(r, naive::back_batch(&w, &d, &mut want, n));
        assert_eq!(
            same_bits(&outs),
            same_bits(&want),
            "back_batch {wl} {dl} {zl} {n}"
        );
        let (mut g, mut want) = (vec![7.0; zl], vec![7.0; zl]);
        let r = outer_acc_batch(&mut g, &d, &x, n);
        assert_eq!(r, naive::outer_acc_batch(&mut want, &d, &x, n));
        assert_eq!(
            same_bits(&g),
            same_bits(&want),
            "outer_acc_batch {zl} {dl} {xl} {n}"
        );
        let (mut g, mut want) = (vec![7.0; zl], vec![7.0; zl]);
        let r = outer_acc_batch_rows(&mut g, &d, &x, n, (bl, wl));
        assert_eq!(
            r,
            naive::outer_acc_batch_rows(&mut want, &d, &x, n, (bl, wl))
        );
        assert_eq!(same_bits(&g), same_bits(&want), "outer_acc_batch_rows");
        let (mut g, mut want) = (vec![7.0; bl], vec![7.0; bl]);
        let r = add_acc_batch(&mut g, &d);
        assert_eq!(r, naive::add_acc_batch(&mut want, &d));
        assert_eq!(same_bits(&g), same_bits(&want), "add_acc_batch {bl} {dl}");
    }
    assert!(rejected > 2000, "{rejected}");
}

/// Every checked kernel of `linalg`, and its reference, with one operand too short or too long:
/// `Err` naming that operand, and every output as it was.
#[test]
fn a_short_operand_is_an_error_and_nothing_is_written() {
    use crate::shape::LengthMismatch;
    let miss = |operand, expected, found| {
        Err(LengthMismatch {
            operand,
            expected,
            found,
        })
    };
    let (w, b, x, d) = ([1.0_f64; 6], [1.0; 3], [1.0; 2], [1.0; 3]);
    let mut z = [7.0; 2];
    assert_eq!(affine(&w, &b, &x, &mut z), miss("z", 3, 2));
    assert_eq!(naive::affine(&w, &b, &x, &mut z), miss("z", 3, 2));
    assert_eq!(affine(&w[..5], &b, &x, &mut [7.0; 3]), miss("w", 6, 5));
    assert_eq!(z, [7.0; 2]);
    let mut out = [7.0; 3];
    assert_eq!(back(&w, &d, &mut out), miss("w", 9, 6));
    assert_eq!(naive::back(&w, &d, &mut out), miss("w", 9, 6));
    assert_eq!(out, [7.0; 3]);
    let mut g = [7.0; 5];
    assert_eq!(outer_acc(&mut g, &d, &x), miss("g", 6, 5));
    assert_eq!(naive::outer_acc(&mut g, &d, &x), miss("g", 6, 5));
    assert_eq!(g, [7.0; 5]);
    let mut gb = [7.0; 3];
    assert_eq!(add_acc(&mut gb, &x), miss("d", 3, 2));
    assert_eq!(naive::add_acc(&mut gb, &x), miss("d", 3, 2));
    assert_eq!(gb, [7.0; 3]);
    let mut xs = [7.0; 2];
    assert_eq!(standardize(&x, &x, &d, &mut xs), miss("std", 2, 3));
    assert_eq!(naive::standardize(&x, &x, &d, &mut xs), miss("std", 2, 3));
    assert_eq!(standardize(&x, &x, &x, &mut [7.0; 1]), miss("out", 2, 1));
    assert_eq!(xs, [7.0; 2]);
    // Batches: two samples of 2 inputs and 3 outputs, one operand a sample short.
    let (xs, ds) = ([1.0; 4], [1.0; 6]);
    let mut zs = [7.0; 3];
    assert_eq!(affine_batch(&w, &b, &xs, &mut zs, 2), miss("zs", 6, 3));
    assert_eq!(
        naive::affine_batch(&w, &b, &xs, &mut zs, 2),
        miss("zs", 6, 3)
    );
    assert_eq!(zs, [7.0; 3]);
    assert_eq!(
        affine_batch(&w, &b, &xs[..3], &mut [7.0; 6], 2),
        miss("xs", 2, 3)
    );
    let mut outs = [7.0; 2];
    assert_eq!(back_batch(&w, &ds, &mut outs, 2), miss("ds", 3, 6));
    assert_eq!(naive::back_batch(&w, &ds, &mut outs, 2), miss("ds", 3, 6));
    assert_eq!(outs, [7.0; 2]);
    assert_eq!(back_batch(&w[..5], &ds, &mut [7.0; 4], 2), miss("w", 4, 5));
    let mut g = [7.0; 6];
    assert_eq!(outer_acc_batch(&mut g, &ds[..3], &xs, 2), miss("ds", 6, 3));
    assert_eq!(
        naive::outer_acc_batch(&mut g, &ds[..3], &xs, 2),
        miss("ds", 6, 3)
    );
    assert_eq!(g, [7.0; 6]);
    let mut rows = [7.0; 4];
    assert_eq!(
        outer_acc_batch_rows(&mut rows, &ds, &xs, 2, (2, 3)),
        miss("g", 2, 4)
    );
    assert_eq!(
        naive::outer_acc_batch_rows(&mut rows, &ds, &xs, 2, (2, 3)),
        miss("g", 2, 4)
    );
    assert_eq!(
        outer_acc_batch_rows(&mut rows, &ds, &xs[..3], 2, (0, 3)),
        miss("xs", 2, 3)
    );
    assert_eq!(rows, [7.0; 4]);
    let mut gb = [7.0; 4];
    assert_eq!(add_acc_batch(&mut gb, &ds), miss("ds", 4, 6));
    assert_eq!(naive::add_acc_batch(&mut gb, &ds), miss("ds", 4, 6));
    assert_eq!(gb, [7.0; 4]);
}

/// The array forms without a sweep of their own (`add_acc_n`, `add_acc_batch_n`) against their
/// slice forms, bit for bit, over a few shapes.
fn add_acc_forms<const N: usize>(seed: u64) {
    let mut rng = SplitMix64::new(seed);
    let g0: [f32; N] = core::array::from_fn(|_| edgy(&mut rng));
    let d: [f32; N] = core::array::from_fn(|_| edgy(&mut rng));
    let (mut ga, mut gs) = (g0, g0);
    add_acc_n(&mut ga, &d);
    add_acc(&mut gs, &d).unwrap();
    assert_eq!(same_bits(&ga), same_bits(&gs), "add_acc_n {N}");
    for m in BATCHES {
        let ds: Vec<[f32; N]> = (0..m)
            .map(|_| core::array::from_fn(|_| edgy(&mut rng)))
            .collect();
        let (mut ga, mut gs) = (g0, g0);
        add_acc_batch_n(&mut ga, &ds);
        add_acc_batch(&mut gs, ds.as_flattened()).unwrap();
        assert_eq!(same_bits(&ga), same_bits(&gs), "add_acc_batch_n {N} x {m}");
    }
}

#[test]
fn add_acc_array_forms_equal_the_slice_forms() {
    add_acc_forms::<1>(1);
    add_acc_forms::<3>(2);
    add_acc_forms::<8>(3);
    add_acc_forms::<17>(4);
}

#[test]
fn fold_lanes_is_the_halving_order() {
    // Width 8 -> 4 -> 2 -> 1, lane i with lane i + width, written as text.
    let names = ["l0", "l1", "l2", "l3", "l4", "l5", "l6", "l7"].map(std::string::String::from);
    let text = fold_lanes(names, |a, b| std::format!("({a} + {b})"));
    assert_eq!(text, "(((l0 + l4) + (l2 + l6)) + ((l1 + l5) + (l3 + l7)))");
    // The order of the calls: the four pairs of width 4, the two of width 2, the last.
    let mut calls = Vec::new();
    fold_lanes([0, 1, 2, 3, 4, 5, 6, 7], |a, b| {
        calls.push((a, b));
        a * 10 + b
    });
    assert_eq!(
        calls,
        [(0, 4), (1, 5), (2, 6), (3, 7), (4, 26), (15, 37), (66, 187)]
    );
}

#[test]
fn lane_order_stays_close_to_the_sequential_sum() {
    // Reordering a sum changes only rounding: against the textbook order in f64 the lanes agree
    // to a few ulps of the sum of magnitudes (common practice for summation error).
    let mut rng = SplitMix64::new(5);
    for (n, o) in shapes()
        .into_iter()
        .filter(|&(n, o)| n % 3 == 0 && o % 5 == 1)
    {
        let w = data::<f64>(n * o, &mut rng);
        let b = data::<f64>(o, &mut rng);
        let x = data::<f64>(n, &mut rng);
        let mut z = vec![0.0; o];
        affine(&w, &b, &x, &mut z).unwrap();
        for (j, a) in z.iter().enumerate() {
            let e = (0..n).map(|i| w[j * n + i] * x[i]).sum::<f64>() + b[j];
            let scale: f64 = (0..n).map(|i| (w[j * n + i] * x[i]).abs()).sum::<f64>() + b[j].abs();
            assert!(
                (a - e).abs() <= 2.0 * n as f64 * f64::EPSILON * scale,
                "{n}x{o} row {j}"
            );
        }
    }
}

#[test]
fn small_integer_example_is_exact() {
    // [[1,2,3],[4,5,6]] (7,8,9) = (50, 122) and its transpose against (1,1) is (5,7,9): exact in
    // floating point (plain arithmetic).
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
