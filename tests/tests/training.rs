//! The generated trainer on invented data (demo data: these tests check that training works
//! and that the trainer keeps its documented contract, not numbers from outside).

use sinew_runtime::rng::SplitMix64;
use sinew_tests::{door_sensor, light_level, motor_current};

/// Invented loading-bay door data: three hall-effect readings; the door is open exactly when
/// `h0 + 0.5 h1 - h2 > 0`.
fn door_data(n: usize) -> (Vec<[f64; 3]>, Vec<[f64; 1]>) {
    let mut rng = SplitMix64::new(2024);
    let xs: Vec<[f64; 3]> = (0..n)
        .map(|_| {
            [
                rng.uniform(-1.0, 1.0),
                rng.uniform(-1.0, 1.0),
                rng.uniform(-1.0, 1.0),
            ]
        })
        .collect();
    let ys = xs
        .iter()
        .map(|x| {
            let open = x[0] + 0.5 * x[1] - x[2] > 0.0;
            let class = if open {
                door_sensor::Class::Open
            } else {
                door_sensor::Class::Closed
            };
            class.target()
        })
        .collect();
    (xs, ys)
}

#[test]
fn momentum_trainer_reduces_the_cost_and_learns_the_door() {
    let (xs, ys) = door_data(64);
    let mut t = door_sensor::Trainer::new(door_sensor::Params::init(21));
    let before = t.params.cost(&xs, &ys);
    let mut last = before;
    for _ in 0..300 {
        let params = t.params.clone();
        last = t.step(&xs, &ys);
        // The step reports J under the parameters before its update, bit for bit.
        assert_eq!(last, params.cost(&xs, &ys));
    }
    let after = t.params.cost(&xs, &ys);
    println!("door_sensor: J {before:.4} -> {after:.4} in 300 steps");
    assert!(after < 0.5 * before, "{before} -> {after}");
    assert!(after <= last);
    let correct = xs
        .iter()
        .zip(&ys)
        .filter(|(x, y)| {
            let (class, p) = t.params.classify(x);
            assert!((0.5..=1.0).contains(&p));
            class.target() == **y
        })
        .count();
    assert!(correct >= 58, "{correct} of 64");
    assert_eq!(t.steps, 300);
}

#[test]
fn adam_trainer_reduces_the_cost_in_f32() {
    // Invented photodiode data: bright exactly when the sum of the two readings exceeds 1.
    let mut rng = SplitMix64::new(7);
    let xs: Vec<[f32; 2]> = (0..48)
        .map(|_| [rng.uniform(0.0, 1.0) as f32, rng.uniform(0.0, 1.0) as f32])
        .collect();
    let ys: Vec<[f32; 1]> = xs
        .iter()
        .map(|x| {
            if x[0] + x[1] > 1.0 {
                light_level::Class::Bright
            } else {
                light_level::Class::Dark
            }
            .target()
        })
        .collect();
    let mut p = light_level::Params::init(43);
    // Scaling from the data, as the engine would compute it.
    for k in 0..2 {
        let mean = xs.iter().map(|x| x[k]).sum::<f32>() / 48.0;
        let var = xs
            .iter()
            .map(|x| (x[k] - mean) * (x[k] - mean))
            .sum::<f32>()
            / 48.0;
        p.input_mean[k] = mean;
        p.input_std[k] = var.sqrt();
    }
    let mut t = light_level::Trainer::new(p);
    let before = t.params.cost(&xs, &ys);
    for _ in 0..300 {
        for (bx, by) in xs
            .chunks(light_level::Trainer::BATCH)
            .zip(ys.chunks(light_level::Trainer::BATCH))
        {
            t.step(bx, by);
        }
    }
    let after = t.params.cost(&xs, &ys);
    println!("light_level: J {before:.4} -> {after:.4}");
    assert!(after < 0.3 * before, "{before} -> {after}");
}

#[test]
fn sgd_momentum_trainer_fits_a_regression_in_f32() {
    // Invented drive data: phase currents as a fixed smooth function of four settings.
    let mut rng = SplitMix64::new(99);
    let xs: Vec<[f32; 4]> = (0..32)
        .map(|_| core::array::from_fn(|_| rng.uniform(-1.0, 1.0) as f32))
        .collect();
    let ys: Vec<[f32; 3]> = xs
        .iter()
        .map(|x| {
            [
                0.5 * x[0] - 0.2 * x[1],
                (x[2] * x[3]).tanh(),
                0.3 * x[0] + 0.1,
            ]
        })
        .collect();
    let mut t = motor_current::Trainer::new(motor_current::Params::init(47));
    let before = t.params.cost(&xs, &ys);
    for _ in 0..400 {
        t.step(&xs, &ys);
    }
    let after = t.params.cost(&xs, &ys);
    println!("motor_current: J {before:.4} -> {after:.4}");
    assert!(after < 0.5 * before, "{before} -> {after}");
}

#[test]
fn empty_batch_changes_nothing_and_reset_keeps_the_parameters() {
    let mut t = door_sensor::Trainer::new(door_sensor::Params::init(3));
    let (xs, ys) = door_data(8);
    t.step(&xs, &ys);
    let snapshot = t.clone();
    assert_eq!(t.step(&[], &[]), 0.0);
    assert_eq!(t.step(&xs, &[]), 0.0);
    assert_eq!(t, snapshot);
    t.reset();
    assert_eq!(t.params, snapshot.params);
    assert_eq!(t.steps, 0);
    assert_eq!(t.grad, door_sensor::Gradients::zeroed());
    assert_eq!(t.velocity, door_sensor::Gradients::zeroed());
    // A batch of pairs is as long as the shorter slice.
    let mut a = door_sensor::Trainer::new(door_sensor::Params::init(3));
    let mut b = a.clone();
    a.step(&xs[..4], &ys);
    b.step(&xs[..4], &ys[..4]);
    assert_eq!(a, b);
}

#[test]
fn init_is_the_spec_init_with_the_runtime_rng() {
    // door_sensor: `init glorot seed 21`; one SplitMix64 for all layers, each matrix row-major,
    // limit sqrt(6 / (fan_in + fan_out)) (Glorot and Bengio 2010); biases zero.
    let p = door_sensor::Params::init(21);
    let mut rng = SplitMix64::new(21);
    let limit1 = (6.0f64 / (3.0 + 4.0)).sqrt();
    for row in &p.hidden_weights {
        for w in row {
            assert_eq!(*w, rng.uniform(-limit1, limit1));
        }
    }
    let limit2 = (6.0f64 / (4.0 + 1.0)).sqrt();
    assert_eq!(p.state_weights[0][0], rng.uniform(-limit2, limit2));
    assert_eq!(p.hidden_bias, [0.0; 4]);
    let mut q = door_sensor::Params::zeroed();
    q.init_in_place(21);
    assert_eq!(p, q);
    assert_ne!(p, door_sensor::Params::init(22));
}
