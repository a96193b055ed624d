//! The gradient check of a spec: backprop against central differences in f64, on a data file
//! or on drawn samples.

use super::convert::{params_of, samples};
use super::WorkflowError;
use crate::data;
use crate::engine::gradcheck::{self, LayerCheck, Verdict};
use crate::engine::Params;
use crate::ir::Model;
use crate::weights::Weights;
use sinew_runtime::rng::SplitMix64;
use std::path::Path;

/// Options of a gradient check.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GradcheckOptions {
    /// Finite-difference step.
    pub step: f64,
    /// Relative tolerance.
    pub threshold: f64,
    /// Absolute tolerance (noise floor of the difference quotient).
    pub atol: f64,
    /// At most this many parameters per layer (drawn at random beyond it).
    pub max_per_layer: usize,
    /// Samples drawn when no data file is given.
    pub samples: usize,
    /// Seed of drawn samples and parameter picks.
    pub seed: u64,
}

impl Default for GradcheckOptions {
    fn default() -> Self {
        GradcheckOptions {
            step: 1e-5,
            threshold: 1e-6,
            atol: 1e-9,
            max_per_layer: 200,
            samples: 8,
            seed: 1,
        }
    }
}

/// The per-layer findings of a gradient check and its verdict.
#[derive(Debug, Clone, PartialEq)]
pub struct GradcheckOutcome {
    /// One entry per layer, in spec order.
    pub layers: Vec<LayerCheck>,
    /// Passed when no checked parameter is outside the tolerance ([`Verdict::of`]).
    pub verdict: Verdict,
}

/// Backprop against central differences in f64, on the data file or on drawn samples (inputs
/// uniform on [-1, 1]; targets a random class for classifiers, uniform on [0, 1] otherwise).
pub fn gradcheck(
    model: &Model,
    weights: Option<&Weights>,
    data: Option<&Path>,
    opts: &GradcheckOptions,
) -> Result<GradcheckOutcome, WorkflowError> {
    let p: Params<f64> = match weights {
        Some(w) => params_of(model, w),
        None => Params::init(model, model.seed),
    };
    let (xs, ys) = match data {
        Some(path) => {
            let ds = data::read_csv(path, model)?;
            let s = samples::<f64>(&ds);
            (s.xs, s.ys)
        }
        None => drawn_samples(model, opts.samples, opts.seed),
    };
    let check = gradcheck::CheckOptions {
        step: opts.step,
        rtol: opts.threshold,
        atol: opts.atol,
        max_per_layer: opts.max_per_layer,
        seed: opts.seed,
    };
    let layers = gradcheck::check(model, &p, &xs, &ys, &check)?;
    let verdict = Verdict::of(&layers);
    Ok(GradcheckOutcome { layers, verdict })
}

fn drawn_samples(model: &Model, m: usize, seed: u64) -> (Vec<f64>, Vec<f64>) {
    let mut rng = SplitMix64::new(seed ^ 0x5eed);
    let (n_in, n_out) = (model.input.width, model.output().width);
    let mut xs = Vec::with_capacity(m * n_in);
    let mut ys = Vec::with_capacity(m * n_out);
    for _ in 0..m {
        xs.extend((0..n_in).map(|_| rng.uniform(-1.0, 1.0)));
        if model.is_classifier() && n_out > 1 {
            let c = (rng.next_u64() % n_out as u64) as usize;
            ys.extend((0..n_out).map(|j| if j == c { 1.0 } else { 0.0 }));
        } else if model.is_classifier() {
            ys.push((rng.next_u64() % 2) as f64);
        } else {
            ys.extend((0..n_out).map(|_| rng.uniform(0.0, 1.0)));
        }
    }
    (xs, ys)
}
