//! A 784-128-64-10 model (about 109 thousand parameters, 437 KB in f32; the trainer with Adam
//! state is four times that) driven only through the in-place APIs: the trainer lives in a
//! `static` built by the generated `const fn`, so no copy of it ever passes through a stack.
//!
//! Gradient reference: a few entries of the generated f32 backprop against exact derivatives from
//! `num-dual` forward-mode dual numbers over the same parameters in f64
//! (`sinew_harness::host::reference_cost`), to 1e-3 relative (f32 arithmetic over sums of up to
//! 784 terms).

use sinew_harness::host::*;
use sinew_runtime::rng::SplitMix64;
use sinew_tests::dial_digits as dd;
use std::sync::Mutex;

static TRAINER: Mutex<dd::Trainer> = Mutex::new(dd::Trainer::zeroed());

/// Invented dial crops: digit `d` is a bright vertical stroke at column `2 + 2 d` over faint
/// noise.
fn crops(n: usize, seed: u64) -> (Vec<[f32; dd::INPUTS]>, Vec<[f32; dd::OUTPUTS]>) {
    let mut rng = SplitMix64::new(seed);
    let mut xs = Vec::new();
    let mut ys = Vec::new();
    for i in 0..n {
        let digit = i % 10;
        let mut x = [0.0f32; dd::INPUTS];
        for (k, px) in x.iter_mut().enumerate() {
            let col = k % 28;
            *px = rng.uniform(0.0, 0.1) as f32 + if col == 2 + 2 * digit { 0.9 } else { 0.0 };
        }
        xs.push(x);
        ys.push(dd::Class::from_index(digit).expect("a digit").target());
    }
    (xs, ys)
}

#[test]
fn large_model_through_the_in_place_apis() {
    assert_eq!(
        dd::PARAMETERS,
        784 * 128 + 128 + 128 * 64 + 64 + 64 * 10 + 10
    );
    // No padding but the tail that rounds the value up to whole 64-byte lines (its alignment on
    // x86-64 and AArch64), and the value starts a line.
    assert_eq!(
        std::mem::size_of::<dd::Params>(),
        (dd::PARAMETERS * 4).next_multiple_of(std::mem::align_of::<dd::Params>())
    );
    #[cfg(any(target_arch = "x86_64", target_arch = "aarch64"))]
    assert_eq!(std::mem::align_of::<dd::Params>(), 64);
    let mut t = TRAINER.lock().expect("not poisoned");
    assert_eq!(
        std::ptr::from_ref(&t.params.hidden1_weights) as usize % std::mem::align_of::<dd::Params>(),
        0
    );
    t.params.init_in_place(53);
    t.reset();
    // He init: normal with std sqrt(2 / fan_in); the sample std of the first layer is close.
    let w = t.params.hidden1_weights.as_flattened();
    let var = w.iter().map(|&v| f64::from(v) * f64::from(v)).sum::<f64>() / w.len() as f64;
    assert!(
        (var.sqrt() / (2.0f64 / 784.0).sqrt() - 1.0).abs() < 0.02,
        "{}",
        var.sqrt()
    );

    let (xs, ys) = crops(10, 1);
    let mut out = [0.0f32; dd::OUTPUTS];
    t.params.predict_into(&xs[0], &mut out);
    let total: f32 = out.iter().sum();
    assert!((total - 1.0).abs() < 1e-5 && out.iter().all(|p| (0.0..=1.0).contains(p)));

    // Backprop in place into the trainer's own gradient, then a few entries against dual numbers.
    t.grad.clear();
    let trainer = &mut *t;
    for (x, y) in xs.iter().zip(&ys) {
        trainer.params.backprop(x, y, &mut trainer.grad);
    }
    trainer.grad.finish(&trainer.params, xs.len());
    let model = model_of::<dd::Params>();
    let values = flat(&trainer.params);
    let grads = flat_grad::<dd::Params>(&trainer.grad);
    let (xr, yr) = (rows(&xs), rows(&ys));
    let h1 = 784 * 128;
    let picks = [
        h1 / 2 + 3,                     // a hidden1 weight
        h1 + 5,                         // a hidden1 bias
        h1 + 128 + 100,                 // a hidden2 weight
        h1 + 128 + 128 * 64 + 7,        // a hidden2 bias
        h1 + 128 + 128 * 64 + 64 + 321, // an output weight
        dd::PARAMETERS - 1,             // the last output bias
    ];
    for &k in &picks {
        let seeded = dual_seeded(&values, k);
        let (j, _) = reference_cost(&model, &seeded, &[], &[], &xr, &yr);
        let r = rel_err(grads[k], j.eps, 1e-6);
        assert!(
            r < 1e-3,
            "parameter {k}: backprop {} vs dual {} ({r:e})",
            grads[k],
            j.eps
        );
    }

    // Training steps in place: the cost falls.
    let before = trainer.step(&xs, &ys);
    let mut last = before;
    for _ in 0..15 {
        last = trainer.step(&xs, &ys);
    }
    let after = trainer.params.cost(&xs, &ys);
    println!("dial_digits: J {before:.4} -> {last:.4} -> {after:.4}");
    assert!(after < 0.5 * before, "{before} -> {after}");
    assert_eq!(trainer.steps, 16);
    let (class, p) = trainer.params.classify(&xs[3]);
    assert_eq!(class, dd::Class::Three);
    assert!(p > 0.3);

    // Reset keeps the parameters and zeroes the optimizer state, in place.
    let kept = trainer.params.digit_bias;
    trainer.reset();
    assert_eq!(trainer.params.digit_bias, kept);
    assert!(trainer
        .m
        .hidden1_weights
        .as_flattened()
        .iter()
        .all(|&v| v == 0.0));
    assert_eq!(trainer.steps, 0);
}
