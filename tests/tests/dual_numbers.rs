//! An independent gradient oracle: forward-mode dual numbers from the crates.io `num-dual` crate
//! (version 0.11) through a forward pass written in `sinew_harness::host::reference_cost` from
//! the layer list of the IR and the values of the generated `Params`, evaluating the same cost J.
//! Its exact derivative must agree with the generated backprop (+ finish) to 1e-10 relative in
//! f64, for every f64 model.
//!
//! Relative error, per parameter: `|a - b| / max(|a| + |b|, 1e-8)`.

use num_dual::DualNum;
use sinew_harness::host::*;
use sinew_harness::{Net, Visit};

const TOLERANCE: f64 = 1e-10;
const FLOOR: f64 = 1e-8;

struct DualOracle {
    checked: Vec<(&'static str, usize, f64)>,
}

impl Visit for DualOracle {
    fn visit<M: Net>(&mut self) {
        if !is_f64::<M>() {
            return;
        }
        let model = model_of::<M>();
        let mut p = generic_params::<M>(23);
        let (xs, ys) = data_away_from_kinks::<M>(&model, &mut p, 5, 300, 1e-9);
        let analytic = backprop_gradient::<M>(&p, &xs, &ys);
        let w = flat(&p);
        let (mean, std) = scaling(&mut p);
        let (xr, yr) = (rows(&xs), rows(&ys));

        // The oracle's value of J agrees with the generated cost.
        let (j, _) = reference_cost::<f64>(&model, &w, &mean, &std, &xr, &yr);
        let generated: f64 = p.batch_cost(&xs, &ys).into();
        assert!(
            rel_err(j, generated, FLOOR) < 1e-12,
            "{}: J {j} vs {generated}",
            M::NAME
        );

        let mut worst = 0.0f64;
        for (k, &a) in analytic.iter().enumerate() {
            let seeded = dual_seeded(&w, k);
            let (jd, _) = reference_cost(&model, &seeded, &mean, &std, &xr, &yr);
            let exact = jd.eps;
            assert!(rel_err(jd.re(), j, FLOOR) < 1e-14);
            let r = rel_err(a, exact, FLOOR);
            assert!(
                r < TOLERANCE,
                "{}: parameter {k}: backprop {a} vs dual numbers {exact} (relative error {r:e})",
                M::NAME
            );
            worst = worst.max(r);
        }
        self.checked.push((M::NAME, w.len(), worst));
    }
}

#[test]
fn backprop_matches_dual_number_derivatives_for_every_f64_model() {
    let mut v = DualOracle {
        checked: Vec::new(),
    };
    sinew_tests::for_each_model(&mut v);
    for (name, n, worst) in &v.checked {
        println!("{name}: {n} parameters, max relative error {worst:.2e}");
    }
    assert!(v.checked.len() >= 10, "{:?}", v.checked);
}
