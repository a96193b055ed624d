//! Gradient check: backprop against central finite differences of the batch cost J.
//!
//! Always computed in f64 (the parameters are widened), with step `h`:
//! `(J(w + h) - J(w - h)) / 2h`. Each parameter passes when
//! `|a - b| <= atol + rtol * max(|a|, |b|)` (the combined tolerance of `numpy.isclose`), with
//! `rtol` the threshold and `atol` the noise floor of the difference quotient: rounding in J is
//! about 1e-16 * J, divided by 2h = 2e-5 that is ~1e-11, so a gradient of 1e-7 cannot be
//! checked to 1e-6 relative. The relative error `|a - b| / max(|a| + |b|, 1e-12)` (common
//! practice) is reported for information; a correct f64 gradient scores about 1e-9 where the
//! gradient is not tiny.

use super::{batch, LengthMismatch, Net, Params};
use crate::ir::Model;
use serde::Serialize;
use sinew_runtime::rng::SplitMix64;

/// Worst error of one layer.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LayerCheck {
    /// Layer name.
    pub layer: String,
    /// Parameters compared.
    pub checked: usize,
    /// Parameters in the layer.
    pub total: usize,
    /// Worst relative error.
    pub worst_relative_error: f64,
    /// Where: `"weights[j][i]"` or `"bias[j]"`.
    pub worst_at: String,
    /// Largest `|a - b|`.
    pub worst_absolute_error: f64,
    /// Parameters outside `atol + rtol * max(|a|, |b|)`.
    pub failures: usize,
}

impl LayerCheck {
    /// True when every checked parameter of the layer is within the tolerance.
    pub fn passed(&self) -> bool {
        self.failures == 0
    }
}

/// The verdict of a gradient check.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Verdict {
    /// Every checked parameter of every layer is within the tolerance.
    Passed,
    /// At least one checked parameter is outside it.
    Failed,
}

impl Verdict {
    /// [`Verdict::Passed`] when every layer [`LayerCheck::passed`] (also for no layers).
    ///
    /// # Examples
    /// ```
    /// use sinew::engine::gradcheck::{LayerCheck, Verdict};
    /// let layer = |failures| LayerCheck {
    ///     layer: "h".into(),
    ///     checked: 3,
    ///     total: 3,
    ///     worst_relative_error: 0.0,
    ///     worst_at: "bias[0]".into(),
    ///     worst_absolute_error: 0.0,
    ///     failures,
    /// };
    /// assert_eq!(Verdict::of(&[layer(0), layer(0)]), Verdict::Passed);
    /// assert_eq!(Verdict::of(&[layer(0), layer(2)]), Verdict::Failed);
    /// ```
    pub fn of(layers: &[LayerCheck]) -> Verdict {
        if layers.iter().all(LayerCheck::passed) {
            Verdict::Passed
        } else {
            Verdict::Failed
        }
    }

    /// The word of the report's last line: `passed` or `failed`.
    pub fn word(self) -> &'static str {
        match self {
            Verdict::Passed => "passed",
            Verdict::Failed => "failed",
        }
    }
}

/// How a check is run.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CheckOptions {
    /// Finite-difference step h.
    pub step: f64,
    /// Relative part of the tolerance.
    pub rtol: f64,
    /// Absolute part of the tolerance (the difference quotient's noise floor).
    pub atol: f64,
    /// Parameters checked per layer at most (drawn at random beyond it).
    pub max_per_layer: usize,
    /// Seed of the draws.
    pub seed: u64,
}

/// The relative error used by the check.
pub fn relative_error(a: f64, b: f64) -> f64 {
    (a - b).abs() / (a.abs() + b.abs()).max(1e-12)
}

/// Compares backprop with central differences on `xs`/`ys` (row-major f64) for every parameter,
/// or for `opts.max_per_layer` parameters drawn at random (seeded) per layer when a layer has
/// more. `xs` and `ys` must hold the same number of whole samples.
pub fn check(
    model: &Model,
    params: &Params<f64>,
    xs: &[f64],
    ys: &[f64],
    opts: &CheckOptions,
) -> Result<Vec<LayerCheck>, LengthMismatch> {
    let (h, max_per_layer) = (opts.step, opts.max_per_layer);
    let net = Net::<f64>::new(model);
    let mut grad = Params::zero_gradient(model);
    batch::gradient_into(&net, params, xs, ys, &mut grad)?;
    let mut rng = SplitMix64::new(opts.seed);
    let mut p = params.clone();
    let mut out = Vec::new();
    for (l, layer) in model.layers.iter().enumerate() {
        // A pooling has no parameters to check.
        if layer.parameters() == 0 {
            continue;
        }
        let n_w = layer.width * layer.fan_in;
        let total = n_w + layer.width;
        let picks: Vec<usize> = if total <= max_per_layer {
            (0..total).collect()
        } else {
            (0..max_per_layer)
                .map(|_| (rng.next_u64() % total as u64) as usize)
                .collect()
        };
        let mut worst = (0.0f64, String::new());
        let (mut worst_abs, mut failures) = (0.0f64, 0usize);
        for &k in &picks {
            let (analytic, place) = if k < n_w {
                (
                    grad.layers[l].weights[k],
                    format!("weights[{}][{}]", k / layer.fan_in, k % layer.fan_in),
                )
            } else {
                (grad.layers[l].bias[k - n_w], format!("bias[{}]", k - n_w))
            };
            let orig = value(&p, l, k, n_w);
            set(&mut p, l, k, n_w, orig + h);
            let plus = batch::cost(&net, &p, xs, ys)?;
            set(&mut p, l, k, n_w, orig - h);
            let minus = batch::cost(&net, &p, xs, ys)?;
            set(&mut p, l, k, n_w, orig);
            let numeric = (plus - minus) / (2.0 * h);
            let e = relative_error(analytic, numeric);
            let abs = (analytic - numeric).abs();
            worst_abs = worst_abs.max(abs);
            if abs > opts.atol + opts.rtol * analytic.abs().max(numeric.abs()) || !abs.is_finite() {
                failures += 1;
            }
            if e >= worst.0 || worst.1.is_empty() {
                worst = (e, place);
            }
        }
        out.push(LayerCheck {
            layer: layer.name.clone(),
            checked: picks.len(),
            total,
            worst_relative_error: worst.0,
            worst_at: worst.1,
            worst_absolute_error: worst_abs,
            failures,
        });
    }
    Ok(out)
}

fn value(p: &Params<f64>, l: usize, k: usize, n_w: usize) -> f64 {
    let lp = &p.layers[l];
    if k < n_w {
        lp.weights[k]
    } else {
        lp.bias[k - n_w]
    }
}

fn set(p: &mut Params<f64>, l: usize, k: usize, n_w: usize, v: f64) {
    let lp = &mut p.layers[l];
    if k < n_w {
        lp.weights[k] = v;
    } else {
        lp.bias[k - n_w] = v;
    }
}
