//! Gradient check of the generated backprop (+ `Gradients::finish`) against central finite
//! differences of the generated `cost`, for every f64 model, penalty terms included.
//!
//! Source: the central-difference gradient check, `(J(w + h) - J(w - h)) / 2h` with `h = 1e-5`
//! and a maximum relative error below 1e-7, is common practice for validating backprop.
//!
//! Relative error, per parameter: `|a - b| / max(|a| + |b|, 1e-4)`. The floor is the central
//! difference's own resolution: its rounding error is about `eps |J| / h` (about 1e-11 here, as
//! measured), so for an entry below 1e-4 no difference at this step can show 1e-7 relative
//! agreement; such entries are held to `1e-7 * 1e-4 = 1e-11` absolute instead. (The dual-number
//! oracle in `dual_numbers.rs` checks every entry, tiny ones included, to 1e-10 relative with a
//! 1e-8 floor.) A mutation check below shows that this criterion rejects a penalty gradient that
//! is off by a factor of two.

use sinew_harness::host::*;
use sinew_harness::{Net, Visit};

const STEP: f64 = 1e-5;
const TOLERANCE: f64 = 1e-7;
const FLOOR: f64 = 1e-4;
const SAMPLES: usize = 6;

struct FiniteDifferences {
    checked: Vec<(&'static str, usize, f64)>,
    /// Largest relative error seen when the penalty part of the analytic gradient is halved.
    mutated: Vec<(&'static str, f64)>,
}

impl Visit for FiniteDifferences {
    fn visit<M: Net>(&mut self) {
        if !is_f64::<M>() {
            return;
        }
        let model = model_of::<M>();
        let mut p = generic_params::<M>(11);
        // The kink margin is far wider than the step, so no difference straddles a kink.
        let (xs, ys) = data_away_from_kinks::<M>(&model, &mut p, SAMPLES, 100, 1e-3);
        let analytic = backprop_gradient::<M>(&p, &xs, &ys);
        let w0 = flat(&p);
        assert_eq!(analytic.len(), w0.len());
        assert_eq!(w0.len(), model.parameters());
        let mut worst = 0.0f64;
        let mut w = w0.clone();
        for k in 0..w.len() {
            w[k] = w0[k] + STEP;
            set_flat(&mut p, &w);
            let plus: f64 = p.batch_cost(&xs, &ys).into();
            w[k] = w0[k] - STEP;
            set_flat(&mut p, &w);
            let minus: f64 = p.batch_cost(&xs, &ys).into();
            w[k] = w0[k];
            let numeric = (plus - minus) / (2.0 * STEP);
            let r = rel_err(analytic[k], numeric, FLOOR);
            assert!(
                r < TOLERANCE,
                "{}: parameter {k}: backprop {} vs finite difference {numeric} (relative error {r:e})",
                M::NAME,
                analytic[k]
            );
            worst = worst.max(r);
        }
        set_flat(&mut p, &w0);
        self.checked.push((M::NAME, w0.len(), worst));

        // Mutation: the same check against a gradient whose penalty term is halved (the
        // classic slip of differentiating (lambda / 2m) W^2 to (lambda / 2m) W).
        if let sinew::ir::Penalty::L2(lambda) = model.penalty() {
            let m = SAMPLES as f64;
            let mut wrong = analytic.clone();
            let mut offset = 0;
            for layer in model.layers() {
                for k in offset..offset + layer.width * layer.fan_in {
                    wrong[k] -= 0.5 * lambda / m * w0[k];
                }
                offset += layer.parameters();
            }
            let mut worst_wrong = 0.0f64;
            let mut w = w0.clone();
            for k in 0..w.len() {
                w[k] = w0[k] + STEP;
                set_flat(&mut p, &w);
                let plus: f64 = p.batch_cost(&xs, &ys).into();
                w[k] = w0[k] - STEP;
                set_flat(&mut p, &w);
                let minus: f64 = p.batch_cost(&xs, &ys).into();
                w[k] = w0[k];
                worst_wrong =
                    worst_wrong.max(rel_err(wrong[k], (plus - minus) / (2.0 * STEP), FLOOR));
            }
            set_flat(&mut p, &w0);
            self.mutated.push((M::NAME, worst_wrong));
        }
    }
}

#[test]
fn backprop_matches_central_differences_for_every_f64_model() {
    let mut v = FiniteDifferences {
        checked: Vec::new(),
        mutated: Vec::new(),
    };
    sinew_tests::for_each_model(&mut v);
    for (name, n, worst) in &v.checked {
        println!("{name}: {n} parameters, max relative error {worst:.2e}");
    }
    let names: Vec<&str> = v.checked.iter().map(|c| c.0).collect();
    // Every f64 sample and fixture took part (one of each kind named here).
    for expected in [
        "valve_gate",
        "relay_pair",
        "conveyor_jam",
        "soil_moisture",
        "fan_speed",
    ] {
        assert!(
            names.contains(&expected),
            "{expected} was not checked: {names:?}"
        );
    }
    assert!(names.len() >= 10, "{names:?}");
    assert!(!v.mutated.is_empty());
    for (name, worst) in &v.mutated {
        println!("{name}: halved penalty gradient, max relative error {worst:.2e}");
        assert!(
            *worst > 1e-3,
            "{name}: the check missed a halved penalty gradient ({worst:e})"
        );
    }
}
