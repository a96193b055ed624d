//! Training on a data file: read, split, standardize from the training split, train, evaluate.

use super::advice::{self, Advice};
use super::convert::{params_of, samples, weights_of};
use super::WorkflowError;
use crate::data::{self, Dataset};
use crate::engine::train::{EpochReport, TrainOptions, TrainSummary};
use crate::engine::{eval, train, Net, Params};
use crate::ir::{Model, Scalar};
use crate::weights::{Provenance, Weights};
use sinew_runtime::Real;
use std::path::Path;
use std::time::{Duration, Instant};

/// What to train on and how.
#[derive(Debug, Clone)]
pub struct TrainRequest<'a> {
    /// The CSV data file.
    pub data: &'a Path,
    /// Fraction of samples held out for validation (0 for none).
    pub split: f64,
    /// Seed of the split (and of the mini-batch order, through `options.seed`).
    pub seed: u64,
    /// Engine options (method, rate, epochs, batch, patience).
    pub options: TrainOptions,
    /// Start from these parameters instead of the spec's initialisation.
    pub start: Option<Weights>,
}

/// The outcome of training.
#[derive(Debug, Clone)]
pub struct TrainOutcome {
    /// The trained parameters, with standardization and provenance.
    pub weights: Weights,
    /// Per-epoch history and the kept epoch.
    pub summary: TrainSummary,
    /// Figures on the training split.
    pub train: eval::Evaluation,
    /// Figures on the validation split.
    pub validation: Option<eval::Evaluation>,
    /// Wall time of the training loop.
    pub elapsed: Duration,
    /// Findings that did not stop training (`W02xx`): the data's scales, classes never
    /// predicted.
    pub advice: Vec<Advice>,
}

/// Reads the data, splits it, sets the standardization from the training split, trains, and
/// evaluates. Nothing is written; on divergence the error names the epoch.
pub fn train(
    model: &Model,
    req: &TrainRequest<'_>,
    on_epoch: &mut dyn FnMut(&EpochReport),
) -> Result<TrainOutcome, WorkflowError> {
    // One pass over the input gives the samples and the fingerprint, so a pipe works.
    let (ds, hash) = data::read_csv_hashed(req.data, model)?;
    let (tr, va) = if req.split > 0.0 {
        let (t, v) = data::split(&ds, req.split, req.seed);
        (t, Some(v))
    } else {
        (ds, None)
    };
    let file_name = if req.data == std::path::Path::new("-") {
        crate::stream::STDIN_NAME.to_string()
    } else {
        req.data
            .file_name()
            .map(|f| f.to_string_lossy().into_owned())
            .unwrap_or_default()
    };
    let mut outcome = match model.scalar {
        Scalar::F32 => train_t::<f32>(model, req, &tr, va.as_ref(), file_name, hash, on_epoch),
        Scalar::F64 => train_t::<f64>(model, req, &tr, va.as_ref(), file_name, hash, on_epoch),
    }?;
    if !model.input.standardize {
        outcome.advice.extend(advice::scales(&tr));
    }
    let judged = match &outcome.validation {
        Some(v) => advice::never_predicted(v, "validation"),
        None => advice::never_predicted(&outcome.train, "training"),
    };
    outcome.advice.extend(judged);
    Ok(outcome)
}

#[allow(clippy::too_many_arguments)]
fn train_t<T: Real + Send + Sync>(
    model: &Model,
    req: &TrainRequest<'_>,
    tr: &Dataset,
    va: Option<&Dataset>,
    data_file: String,
    data_file_hash: String,
    on_epoch: &mut dyn FnMut(&EpochReport),
) -> Result<TrainOutcome, WorkflowError> {
    let mut p: Params<T> = match &req.start {
        Some(w) => {
            w.check_against(model)?;
            params_of(model, w)
        }
        None => Params::init(model, model.seed),
    };
    if model.input.standardize {
        let (mean, std) = match model.input.shape.rank {
            1 => data::mean_std(tr),
            _ => data::mean_std_channels(tr, model.input.shape.channels),
        };
        p.mean = mean.iter().map(|&v| T::from_f64(v)).collect();
        p.std = std.iter().map(|&v| T::from_f64(v)).collect();
    }
    let ts = samples::<T>(tr);
    let vs = va.map(samples::<T>);
    let start = Instant::now();
    let summary = train::train(model, &mut p, &ts, vs.as_ref(), &req.options, on_epoch)?;
    let elapsed = start.elapsed();
    let net = Net::<T>::new(model);
    let train_eval = eval::evaluate(&net, &p, &ts.xs, &ts.ys, ts.labels.as_deref())?;
    let validation = vs
        .as_ref()
        .map(|v| eval::evaluate(&net, &p, &v.xs, &v.ys, v.labels.as_deref()))
        .transpose()?;
    let provenance = Provenance {
        optimizer: summary.method.clone(),
        epochs: summary.history.len() as u64,
        train_cost: train_eval.cost,
        validation_cost: validation.as_ref().map(|v| v.cost),
        data_file_hash,
        data_file,
    };
    Ok(TrainOutcome {
        weights: weights_of(model, &p, Some(provenance)),
        summary,
        train: train_eval,
        validation,
        elapsed,
        advice: Vec::new(),
    })
}
