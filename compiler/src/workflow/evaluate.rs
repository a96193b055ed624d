//! Figures and the batch gradient of given weights on a data file.

use super::convert::{params_of, samples};
use super::WorkflowError;
use crate::data::{self, Dataset};
use crate::engine::{batch, eval, LengthMismatch, Net, Params};
use crate::ir::{Model, Scalar};
use crate::weights::FlatLayer;
use crate::weights::Weights;
use sinew_runtime::Real;
use std::path::Path;

/// Cost, accuracy and confusion matrix (classifiers) or MAE / RMSE (regressors) on a data file.
pub fn evaluate(
    model: &Model,
    weights: &Weights,
    data: &Path,
) -> Result<eval::Evaluation, WorkflowError> {
    let ds = data::read_csv(data, model)?;
    Ok(match model.scalar {
        Scalar::F32 => eval_t::<f32>(model, weights, &ds)?,
        Scalar::F64 => eval_t::<f64>(model, weights, &ds)?,
    })
}

fn eval_t<T: Real + Send + Sync>(
    model: &Model,
    weights: &Weights,
    ds: &Dataset,
) -> Result<eval::Evaluation, LengthMismatch> {
    let p = params_of::<T>(model, weights);
    let s = samples::<T>(ds);
    eval::evaluate(&Net::new(model), &p, &s.xs, &s.ys, s.labels.as_deref())
}

/// The gradient of one layer: `dJ/dW` with one row per unit, and `dJ/db`.
#[derive(Debug, Clone, PartialEq)]
pub struct LayerGradient {
    /// The layer's name in the spec.
    pub name: String,
    /// Row `j` holds the derivatives for the weights into unit `j`.
    pub weights: Vec<Vec<f64>>,
    /// One derivative per bias.
    pub bias: Vec<f64>,
}

/// The batch cost J over every sample of a data file and its gradient, per layer in spec order.
#[derive(Debug, Clone, PartialEq)]
pub struct Gradient {
    /// The batch cost J (0 for an empty batch).
    pub cost: f64,
    /// The number of samples m.
    pub samples: usize,
    /// Per layer, in spec order.
    pub layers: Vec<LayerGradient>,
}

impl Gradient {
    /// The JSON form:
    /// `{"cost": J, "samples": m, "gradients": {"<layer>": {"weights": [[..]], "bias": [..]}}}`.
    pub fn to_json(&self) -> serde_json::Value {
        let mut layers = serde_json::Map::new();
        for l in &self.layers {
            layers.insert(
                l.name.clone(),
                serde_json::json!({ "weights": l.weights, "bias": l.bias }),
            );
        }
        serde_json::json!({ "cost": self.cost, "samples": self.samples, "gradients": layers })
    }
}

/// The batch cost J and its gradient over every sample of the data file, computed in the
/// model's scalar type.
pub fn gradient(model: &Model, weights: &Weights, data: &Path) -> Result<Gradient, WorkflowError> {
    let ds = data::read_csv(data, model)?;
    let (cost, grad) = match model.scalar {
        Scalar::F32 => grad_t::<f32>(model, weights, &ds)?,
        Scalar::F64 => grad_t::<f64>(model, weights, &ds)?,
    };
    let layers = model
        .layers
        .iter()
        .zip(grad)
        .filter(|(l, _)| l.parameters() > 0)
        .map(|(l, g)| LayerGradient {
            name: l.name.clone(),
            weights: g
                .weights
                .chunks(l.fan_in.max(1))
                .map(<[f64]>::to_vec)
                .collect(),
            bias: g.bias,
        })
        .collect();
    Ok(Gradient {
        cost,
        samples: ds.inputs.len(),
        layers,
    })
}

fn grad_t<T: Real + Send + Sync>(
    model: &Model,
    weights: &Weights,
    ds: &Dataset,
) -> Result<(f64, Vec<FlatLayer>), LengthMismatch> {
    let p = params_of::<T>(model, weights);
    let s = samples::<T>(ds);
    let net = Net::new(model);
    let mut g = Params::zero_gradient(model);
    let cost = batch::gradient_into(&net, &p, &s.xs, &s.ys, &mut g)?.map_or(0.0, |c| c.to_f64());
    Ok((cost, g.layers_f64()))
}
