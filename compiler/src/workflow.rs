//! The workstation workflows behind the `sinew` command (init, train, eval, grad, gradcheck),
//! as library functions that return data; the command only parses arguments and prints.
//!
//! Each function dispatches once on the model's scalar type and then runs the engine in that
//! type, so what the workstation computes is what the device computes.

use crate::data::{self, DataError, Dataset};
use crate::engine::train::{EpochReport, Samples, TrainError, TrainOptions, TrainSummary};
use crate::engine::{batch, eval, gradcheck, train, Net, Params};
use crate::ir::{Model, Scalar};
use crate::weights::{Provenance, Weights, WeightsError};
use sinew_runtime::rng::SplitMix64;
use sinew_runtime::Real;
use std::fmt;
use std::path::Path;
use std::time::{Duration, Instant};

/// Why a workflow could not run.
#[derive(Debug)]
pub enum WorkflowError {
    /// The data file.
    Data(DataError),
    /// A weights file.
    Weights(WeightsError),
    /// Training stopped without a result.
    Train(TrainError),
    /// Another I/O problem.
    Io(String),
}

impl fmt::Display for WorkflowError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            WorkflowError::Data(e) => write!(f, "{e}"),
            WorkflowError::Weights(e) => write!(f, "{e}"),
            WorkflowError::Train(e) => write!(f, "error: {e}"),
            WorkflowError::Io(e) => write!(f, "error: {e}"),
        }
    }
}

impl std::error::Error for WorkflowError {}

impl From<DataError> for WorkflowError {
    fn from(e: DataError) -> Self {
        WorkflowError::Data(e)
    }
}

impl From<WeightsError> for WorkflowError {
    fn from(e: WeightsError) -> Self {
        WorkflowError::Weights(e)
    }
}

impl From<TrainError> for WorkflowError {
    fn from(e: TrainError) -> Self {
        WorkflowError::Train(e)
    }
}

/// Per layer: row-major weights and biases, widened to f64.
type LayersF64 = Vec<(Vec<f64>, Vec<f64>)>;

fn params_of<T: Real>(model: &Model, w: &Weights) -> Params<T> {
    let layers = w.layers_flat();
    let mut p = Params::<T>::from_f64(
        &layers,
        w.standardization
            .as_ref()
            .map(|s| (s.mean.as_slice(), s.std.as_slice())),
    );
    if model.input.standardize && p.mean.is_empty() {
        let z = Params::<T>::zeroed(model);
        p.mean = z.mean;
        p.std = z.std;
    }
    p
}

fn weights_of<T: Real>(model: &Model, p: &Params<T>, provenance: Option<Provenance>) -> Weights {
    let scaling = if model.input.standardize {
        p.scaling_f64()
    } else {
        None
    };
    Weights::from_params(model, p.layers_f64(), scaling, provenance)
}

/// Initial parameters from the spec's `init` and `seed` (or `seed` when given).
pub fn init(model: &Model, seed: Option<u64>) -> Weights {
    let seed = seed.unwrap_or(model.seed);
    match model.scalar {
        Scalar::F32 => weights_of(model, &Params::<f32>::init(model, seed), None),
        Scalar::F64 => weights_of(model, &Params::<f64>::init(model, seed), None),
    }
}

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
}

fn samples<T: Real>(ds: &Dataset) -> Samples<T> {
    Samples::from_rows(&ds.inputs, &ds.targets, ds.labels.as_deref())
}

/// [`crate::weights::data_hash`] of the file at `path`, read in pieces so that a large data file is never held
/// in memory whole.
fn file_hash(path: &Path) -> std::io::Result<String> {
    use std::io::Read;
    let mut f = std::fs::File::open(path)?;
    let mut buf = vec![0u8; 1 << 16];
    let mut h = crate::ir::FNV1A64_OFFSET;
    loop {
        let n = match f.read(&mut buf) {
            Ok(0) => break,
            Ok(n) => n,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
            Err(e) => return Err(e),
        };
        h = crate::ir::fnv1a64_extend(h, buf.get(..n).unwrap_or(&[]));
    }
    Ok(format!("{h:016x}"))
}

/// Reads the data, splits it, sets the standardization from the training split, trains, and
/// evaluates. Nothing is written; on divergence the error names the epoch.
pub fn train(
    model: &Model,
    req: &TrainRequest<'_>,
    on_epoch: &mut dyn FnMut(&EpochReport),
) -> Result<TrainOutcome, WorkflowError> {
    let hash = file_hash(req.data)
        .map_err(|e| WorkflowError::Io(format!("cannot read {}: {e}", req.data.display())))?;
    let ds = data::read_csv(req.data, model)?;
    let (tr, va) = if req.split > 0.0 {
        let (t, v) = data::split(&ds, req.split, req.seed);
        (t, Some(v))
    } else {
        (ds, None)
    };
    let file_name = req
        .data
        .file_name()
        .map(|f| f.to_string_lossy().into_owned())
        .unwrap_or_default();
    match model.scalar {
        Scalar::F32 => train_t::<f32>(model, req, &tr, va.as_ref(), file_name, hash, on_epoch),
        Scalar::F64 => train_t::<f64>(model, req, &tr, va.as_ref(), file_name, hash, on_epoch),
    }
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
        let (mean, std) = data::mean_std(tr);
        p.mean = mean.iter().map(|&v| T::from_f64(v)).collect();
        p.std = std.iter().map(|&v| T::from_f64(v)).collect();
    }
    let ts = samples::<T>(tr);
    let vs = va.map(samples::<T>);
    let start = Instant::now();
    let summary = train::train(model, &mut p, &ts, vs.as_ref(), &req.options, on_epoch)?;
    let elapsed = start.elapsed();
    let net = Net::<T>::new(model);
    let train_eval = eval::evaluate(&net, &p, &ts.xs, &ts.ys, ts.labels.as_deref());
    let validation = vs
        .as_ref()
        .map(|v| eval::evaluate(&net, &p, &v.xs, &v.ys, v.labels.as_deref()));
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
    })
}

/// Loads weights checked against the model.
pub fn load_weights(model: &Model, path: &Path) -> Result<Weights, WorkflowError> {
    let w = Weights::load(path)?;
    w.check_against(model).map_err(|mut e| {
        if e.file.is_empty() {
            e.file = path.display().to_string();
        }
        e
    })?;
    Ok(w)
}

/// Cost, accuracy and confusion matrix (classifiers) or MAE / RMSE (regressors) on a data file.
pub fn evaluate(
    model: &Model,
    weights: &Weights,
    data: &Path,
) -> Result<eval::Evaluation, WorkflowError> {
    let ds = data::read_csv(data, model)?;
    Ok(match model.scalar {
        Scalar::F32 => eval_t::<f32>(model, weights, &ds),
        Scalar::F64 => eval_t::<f64>(model, weights, &ds),
    })
}

fn eval_t<T: Real + Send + Sync>(
    model: &Model,
    weights: &Weights,
    ds: &Dataset,
) -> eval::Evaluation {
    let p = params_of::<T>(model, weights);
    let s = samples::<T>(ds);
    eval::evaluate(&Net::new(model), &p, &s.xs, &s.ys, s.labels.as_deref())
}

/// The batch cost J and its gradient over every sample of the data file, as JSON:
/// `{"cost": J, "samples": m, "gradients": {"<layer>": {"weights": [[..]], "bias": [..]}}}`.
pub fn gradient_json(
    model: &Model,
    weights: &Weights,
    data: &Path,
) -> Result<serde_json::Value, WorkflowError> {
    let ds = data::read_csv(data, model)?;
    let (cost, grad) = match model.scalar {
        Scalar::F32 => grad_t::<f32>(model, weights, &ds),
        Scalar::F64 => grad_t::<f64>(model, weights, &ds),
    };
    let mut layers = serde_json::Map::new();
    for (l, (w, b)) in model.layers.iter().zip(grad) {
        let rows: Vec<Vec<f64>> = w.chunks(l.fan_in.max(1)).map(<[f64]>::to_vec).collect();
        layers.insert(
            l.name.clone(),
            serde_json::json!({ "weights": rows, "bias": b }),
        );
    }
    Ok(serde_json::json!({ "cost": cost, "samples": ds.inputs.len(), "gradients": layers }))
}

fn grad_t<T: Real + Send + Sync>(
    model: &Model,
    weights: &Weights,
    ds: &Dataset,
) -> (f64, LayersF64) {
    let p = params_of::<T>(model, weights);
    let s = samples::<T>(ds);
    let net = Net::new(model);
    let mut g = Params::zero_gradient(model);
    let cost = batch::gradient_into(&net, &p, &s.xs, &s.ys, &mut g).map_or(0.0, |c| c.to_f64());
    (cost, g.layers_f64())
}

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

/// Backprop against central differences in f64, on the data file or on drawn samples (inputs
/// uniform on [-1, 1]; targets a random class for classifiers, uniform on [0, 1] otherwise).
pub fn gradcheck(
    model: &Model,
    weights: Option<&Weights>,
    data: Option<&Path>,
    opts: &GradcheckOptions,
) -> Result<Vec<gradcheck::LayerCheck>, WorkflowError> {
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
    Ok(gradcheck::check(model, &p, &xs, &ys, &check))
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

/// The parameters of a weights file in the form the emitter bakes into `TRAINED`.
pub fn baked(w: &Weights) -> crate::emit::BakedParams {
    crate::emit::BakedParams {
        layers: w.layers_flat(),
        mean: w.standardization.as_ref().map(|s| s.mean.clone()),
        std: w.standardization.as_ref().map(|s| s.std.clone()),
    }
}

#[cfg(test)]
mod tests {
    #[test]
    fn file_hash_is_the_data_hash_of_the_bytes() {
        let dir = std::env::temp_dir().join(format!("sinew-workflow-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let path = dir.join("data.csv");
        // More than one read buffer, so the hash is continued across pieces.
        let bytes: Vec<u8> = (0..200_000u32).map(|i| (i % 251) as u8).collect();
        std::fs::write(&path, &bytes).unwrap();
        assert_eq!(
            super::file_hash(&path).unwrap(),
            crate::weights::data_hash(&bytes)
        );
        std::fs::remove_dir_all(dir).unwrap();
    }
}
