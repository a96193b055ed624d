//! Training on the host: gradient descent, mini-batch SGD with momentum, Adam, and L-BFGS.
//!
//! First-order methods run epochs of mini-batches in a seeded order (SplitMix64, Fisher–Yates),
//! each batch through [`super::batch::gradient_into`] and the same optimizer kernels as the
//! generated trainer. L-BFGS (the `argmin` crate, More–Thuente line search) works on the full
//! training set. With a validation set, `patience` stops training after that many epochs without
//! a lower validation cost and keeps the best parameters. A non-finite cost stops training with
//! [`TrainError::Diverged`].

use super::{batch, eval, LengthMismatch, Net, OptState, Params};
use crate::data::shuffle;
use crate::ir::{defaults, Model, Optimizer};
use sinew_runtime::{rng::SplitMix64, Real};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::mpsc;

/// Samples in the engine's scalar type, stored row-major.
#[derive(Debug, Clone, PartialEq)]
pub struct Samples<T> {
    /// Inputs, `m` rows of the input width.
    pub xs: Vec<T>,
    /// Targets, `m` rows of the output width.
    pub ys: Vec<T>,
    /// Class index per sample, for classifiers.
    pub labels: Option<Vec<usize>>,
    /// Number of samples.
    pub m: usize,
}

impl<T: Real> Samples<T> {
    /// Converts rows of f64 (as read by [`crate::data`]) to `T`.
    pub fn from_rows(inputs: &[Vec<f64>], targets: &[Vec<f64>], labels: Option<&[usize]>) -> Self {
        let conv = |rows: &[Vec<f64>]| {
            rows.iter()
                .flat_map(|r| r.iter().map(|&v| T::from_f64(v)))
                .collect::<Vec<T>>()
        };
        Samples {
            xs: conv(inputs),
            ys: conv(targets),
            labels: labels.map(<[usize]>::to_vec),
            m: inputs.len().min(targets.len()),
        }
    }
}

/// Which method trains.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Method {
    /// Full-batch gradient descent: `w <- w - rate g` once per epoch.
    GradientDescent {
        /// Learning rate.
        rate: f64,
    },
    /// One of the spec's mini-batch optimizers (SGD with optional momentum, or Adam).
    MiniBatch(Optimizer),
    /// Full-batch L-BFGS with `memory` correction pairs; an epoch is one iteration.
    Lbfgs {
        /// Correction pairs kept.
        memory: usize,
    },
}

/// Correction pairs kept by L-BFGS when a run asks for it without a memory: 7, inside the range
/// of 3 to 20 that Nocedal and Wright, *Numerical Optimization*, ch. 7, give as usually
/// sufficient (from memory). Each pair costs two parameter vectors.
pub const DEFAULT_LBFGS_MEMORY: usize = 7;

/// A training method asked for by name, instead of the spec's optimizer.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum MethodChoice {
    /// Full-batch gradient descent at the spec's rate.
    GradientDescent,
    /// Mini-batch SGD: the spec's, or at the spec's rate without momentum.
    Sgd,
    /// Mini-batch Adam: the spec's, or at the spec's rate with the default betas and epsilon.
    Adam,
    /// Full-batch L-BFGS with [`DEFAULT_LBFGS_MEMORY`] pairs.
    Lbfgs,
}

impl Method {
    /// The method `choice` names, taking from the spec's optimizer `spec` what it shares: its
    /// rate, and all its settings when `choice` is the spec's own optimizer; the rest from
    /// [`crate::ir::defaults`] and [`DEFAULT_LBFGS_MEMORY`].
    ///
    /// # Examples
    /// ```
    /// use sinew::engine::train::{Method, MethodChoice};
    /// use sinew::ir::Optimizer;
    /// let spec = Optimizer::Sgd { rate: 0.1, momentum: 0.9 };
    /// assert_eq!(
    ///     Method::chosen(MethodChoice::GradientDescent, spec),
    ///     Method::GradientDescent { rate: 0.1 }
    /// );
    /// assert_eq!(Method::chosen(MethodChoice::Sgd, spec), Method::MiniBatch(spec));
    /// ```
    pub fn chosen(choice: MethodChoice, spec: Optimizer) -> Method {
        match (choice, spec) {
            (MethodChoice::GradientDescent, spec) => Method::GradientDescent {
                rate: rate_of(spec),
            },
            (MethodChoice::Sgd, o @ Optimizer::Sgd { .. }) => Method::MiniBatch(o),
            (MethodChoice::Sgd, spec) => Method::MiniBatch(Optimizer::Sgd {
                rate: rate_of(spec),
                momentum: 0.0,
            }),
            (MethodChoice::Adam, o @ Optimizer::Adam { .. }) => Method::MiniBatch(o),
            (MethodChoice::Adam, spec) => Method::MiniBatch(Optimizer::Adam {
                rate: rate_of(spec),
                beta1: crate::ir::defaults::BETA1,
                beta2: crate::ir::defaults::BETA2,
                epsilon: crate::ir::defaults::ADAM_EPSILON,
            }),
            (MethodChoice::Lbfgs, _) => Method::Lbfgs {
                memory: DEFAULT_LBFGS_MEMORY,
            },
        }
    }
}

/// Options of one training run; `Default` trains as the spec says.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct TrainOptions {
    /// The method; `None` for the spec's optimizer.
    pub method: Option<Method>,
    /// Overrides the learning rate of the spec's optimizer.
    pub rate: Option<f64>,
    /// Overrides the spec's epochs.
    pub epochs: Option<u32>,
    /// Overrides the spec's batch size.
    pub batch: Option<u32>,
    /// Seed of the mini-batch order.
    pub seed: u64,
    /// Early stopping: epochs without a better validation cost before stopping.
    pub patience: Option<u32>,
}

/// What one epoch achieved (costs are J including the penalty).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EpochReport {
    /// 1-based epoch.
    pub epoch: u32,
    /// Epochs planned.
    pub epochs: u32,
    /// J on the training set after the epoch.
    pub train_cost: f64,
    /// J on the validation set after the epoch.
    pub validation_cost: Option<f64>,
    /// Validation accuracy (classifiers).
    pub validation_accuracy: Option<f64>,
}

/// The result of a training run.
#[derive(Debug, Clone, PartialEq)]
pub struct TrainSummary {
    /// One entry per epoch run.
    pub history: Vec<EpochReport>,
    /// The epoch whose parameters were kept.
    pub best_epoch: u32,
    /// True when early stopping ended the run.
    pub stopped_early: bool,
    /// Human name of the method.
    pub method: String,
}

/// Why training stopped without a result.
#[derive(Debug, Clone, PartialEq)]
pub enum TrainError {
    /// The cost became NaN or infinite.
    Diverged {
        /// Epoch in which it happened (1-based).
        epoch: u32,
        /// The learning rate in use, if the method has one.
        rate: Option<f64>,
    },
    /// There are no training samples.
    NoData,
    /// An internal invariant broken: an engine operand whose length disagrees with the model
    /// (the samples are checked against the spec before training, so this is a bug).
    Internal(LengthMismatch),
}

impl From<LengthMismatch> for TrainError {
    fn from(e: LengthMismatch) -> Self {
        TrainError::Internal(e)
    }
}

impl std::fmt::Display for TrainError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            TrainError::Diverged { epoch, rate: Some(r) } => write!(
                f,
                "training diverged in epoch {epoch}: the cost is not finite\n  help: try a smaller rate, e.g. --rate {}",
                r / 10.0
            ),
            TrainError::Diverged { epoch, rate: None } => {
                write!(f, "training diverged in epoch {epoch}: the cost is not finite")
            }
            TrainError::NoData => write!(f, "there are no training samples"),
            TrainError::Internal(e) => write!(f, "internal: {e} (this is a bug in sinew)"),
        }
    }
}

impl std::error::Error for TrainError {}

fn with_rate(o: Optimizer, rate: Option<f64>) -> Optimizer {
    match (o, rate) {
        (Optimizer::Sgd { momentum, .. }, Some(rate)) => Optimizer::Sgd { rate, momentum },
        (
            Optimizer::Adam {
                beta1,
                beta2,
                epsilon,
                ..
            },
            Some(rate),
        ) => Optimizer::Adam {
            rate,
            beta1,
            beta2,
            epsilon,
        },
        (o, None) => o,
    }
}

fn rate_of(o: Optimizer) -> f64 {
    match o {
        Optimizer::Sgd { rate, .. } | Optimizer::Adam { rate, .. } => rate,
    }
}

/// Resolves the method of a run from the spec and the options.
pub fn resolve_method(model: &Model, opts: &TrainOptions) -> Method {
    match opts.method {
        None => Method::MiniBatch(with_rate(model.train.optimizer, opts.rate)),
        Some(Method::MiniBatch(o)) => Method::MiniBatch(with_rate(o, opts.rate)),
        Some(Method::GradientDescent { rate }) => Method::GradientDescent {
            rate: opts.rate.unwrap_or(rate),
        },
        Some(m @ Method::Lbfgs { .. }) => m,
    }
}

/// A plain name of a method, for summaries and provenance.
pub fn method_name(m: &Method) -> String {
    match m {
        Method::GradientDescent { rate } => format!("gradient descent rate {rate}"),
        Method::MiniBatch(o) => crate::words::optimizer_spec(*o),
        Method::Lbfgs { memory } => format!("l-bfgs memory {memory}"),
    }
}

struct Tracker<T> {
    best: Option<(f64, u32, Params<T>)>,
    since_best: u32,
    patience: Option<u32>,
}

impl<T: Clone> Tracker<T> {
    /// Records an epoch; returns true when training should stop.
    fn record(&mut self, r: &EpochReport, p: &Params<T>) -> bool {
        let score = r.validation_cost.unwrap_or(r.train_cost);
        let better = self.best.as_ref().is_none_or(|(b, _, _)| score < *b);
        if better {
            self.best = Some((score, r.epoch, p.clone()));
            self.since_best = 0;
        } else {
            self.since_best += 1;
        }
        match self.patience {
            Some(n) if r.validation_cost.is_some() => self.since_best >= n,
            _ => false,
        }
    }
}

/// Trains `params` in place on `train`, reporting each epoch to `on_epoch`. On success `params`
/// holds the parameters of the best epoch (by validation cost when `valid` is given and
/// `patience` is set, else the last epoch). On divergence `params` is left as it was.
pub fn train<T: Real + Send + Sync>(
    model: &Model,
    params: &mut Params<T>,
    train: &Samples<T>,
    valid: Option<&Samples<T>>,
    opts: &TrainOptions,
    on_epoch: &mut dyn FnMut(&EpochReport),
) -> Result<TrainSummary, TrainError> {
    if train.m == 0 {
        return Err(TrainError::NoData);
    }
    let method = resolve_method(model, opts);
    let epochs = opts.epochs.unwrap_or(model.train.epochs).max(1);
    let net = Net::new(model);
    let mut tracker = Tracker {
        best: None,
        since_best: 0,
        patience: opts.patience,
    };
    let mut history = Vec::new();
    let mut stopped_early = false;
    let report = |epoch: u32, p: &Params<T>| -> Result<EpochReport, LengthMismatch> {
        let train_cost = batch::cost(&net, p, &train.xs, &train.ys)?.to_f64();
        let (validation_cost, validation_accuracy) = match valid {
            Some(v) if v.m > 0 => (
                Some(batch::cost(&net, p, &v.xs, &v.ys)?.to_f64()),
                match v.labels.as_ref() {
                    Some(l) => Some(eval::accuracy(&net, p, &v.xs, l)?),
                    None => None,
                },
            ),
            _ => (None, None),
        };
        Ok(EpochReport {
            epoch,
            epochs,
            train_cost,
            validation_cost,
            validation_accuracy,
        })
    };
    let mut last: Option<(u32, Params<T>)> = None;
    match method {
        Method::Lbfgs { memory } => {
            let start = params.flat_f64();
            let stop = AtomicBool::new(false);
            let (tx, rx) = mpsc::channel::<(u32, Vec<f64>)>();
            let (net_ref, stop_ref, template) = (&net, &stop, params.clone());
            std::thread::scope(|scope| {
                let worker = scope.spawn(move || {
                    lbfgs::run(
                        net_ref, template, train, start, epochs, memory, tx, stop_ref,
                    )
                });
                let mut p = params.clone();
                let mut result = Ok(());
                for (epoch, flat) in rx {
                    if result.is_err() || stopped_early {
                        continue;
                    }
                    p.set_flat_f64(&flat);
                    let r = match report(epoch, &p) {
                        Ok(r) => r,
                        Err(e) => {
                            stop.store(true, Ordering::Relaxed);
                            result = Err(TrainError::Internal(e));
                            continue;
                        }
                    };
                    on_epoch(&r);
                    history.push(r);
                    if !r.train_cost.is_finite() {
                        stop.store(true, Ordering::Relaxed);
                        result = Err(TrainError::Diverged { epoch, rate: None });
                        continue;
                    }
                    last = Some((epoch, p.clone()));
                    if tracker.record(&r, &p) {
                        stopped_early = true;
                        stop.store(true, Ordering::Relaxed);
                    }
                }
                let _ = worker.join();
                result
            })?;
        }
        Method::GradientDescent { rate }
        | Method::MiniBatch(Optimizer::Sgd { rate, .. })
        | Method::MiniBatch(Optimizer::Adam { rate, .. }) => {
            let (optimizer, batch_size) = match method {
                Method::MiniBatch(o) => {
                    (o, opts.batch.unwrap_or(model.train.batch).max(1) as usize)
                }
                _ => (
                    Optimizer::Sgd {
                        rate,
                        momentum: defaults::MOMENTUM,
                    },
                    train.m,
                ),
            };
            let mut p = params.clone();
            let mut grad = Params::zero_gradient(model);
            let mut state = OptState {
                first: None,
                second: None,
                t: 0,
            };
            let mut rng = SplitMix64::new(opts.seed);
            let mut order: Vec<usize> = (0..train.m).collect();
            let (n_in, n_out) = (model.input.width, model.output().width);
            let mut bx: Vec<T> = Vec::with_capacity(batch_size * n_in);
            let mut by: Vec<T> = Vec::with_capacity(batch_size * n_out);
            let mut scratch = batch::BatchScratch::new(model);
            let diverged = |epoch| TrainError::Diverged {
                epoch,
                rate: Some(rate_of(optimizer)),
            };
            for epoch in 1..=epochs {
                shuffle(&mut order, &mut rng);
                for chunk in order.chunks(batch_size) {
                    bx.clear();
                    by.clear();
                    for &i in chunk {
                        bx.extend(train.xs.iter().skip(i * n_in).take(n_in));
                        by.extend(train.ys.iter().skip(i * n_out).take(n_out));
                    }
                    let cost =
                        batch::gradient_into_with(&net, &p, &bx, &by, &mut grad, &mut scratch)?;
                    if cost.is_some_and(|c| !c.to_f64().is_finite()) {
                        return Err(diverged(epoch));
                    }
                    net.update(optimizer, &mut p, &grad, &mut state)?;
                }
                let r = report(epoch, &p)?;
                on_epoch(&r);
                history.push(r);
                if !r.train_cost.is_finite() {
                    return Err(diverged(epoch));
                }
                last = Some((epoch, p.clone()));
                if tracker.record(&r, &p) {
                    stopped_early = true;
                    break;
                }
            }
        }
    }
    let early = tracker.patience.is_some() && valid.is_some_and(|v| v.m > 0);
    let kept = if early {
        tracker.best.map(|(_, e, p)| (e, p))
    } else {
        last
    };
    let (best_epoch, best) = kept.unwrap_or_else(|| (0, params.clone()));
    *params = best;
    Ok(TrainSummary {
        history,
        best_epoch,
        stopped_early,
        method: method_name(&method),
    })
}

mod lbfgs {
    use super::super::{batch, Net, Params};
    use super::Samples;
    use argmin::core::observers::{Observe, ObserverMode};
    use argmin::core::{CostFunction, Error, Executor, Gradient, State, KV};
    use argmin::solver::linesearch::MoreThuenteLineSearch;
    use argmin::solver::quasinewton::LBFGS;
    use sinew_runtime::Real;
    use std::sync::atomic::{AtomicBool, Ordering};
    use std::sync::mpsc::Sender;
    use std::sync::Mutex;

    struct Problem<'a, 'm, T> {
        net: &'a Net<'m, T>,
        data: &'a Samples<T>,
        scratch: Mutex<(Params<T>, Params<T>, batch::BatchScratch<T>)>,
        stop: &'a AtomicBool,
    }

    impl<T: Real + Send + Sync> Problem<'_, '_, T> {
        fn eval(&self, flat: &[f64]) -> Result<(f64, Vec<f64>), Error> {
            if self.stop.load(Ordering::Relaxed) {
                return Err(Error::msg("stopped early"));
            }
            let mut guard = self.scratch.lock().map_err(|_| Error::msg("poisoned"))?;
            let (p, g, s) = &mut *guard;
            p.set_flat_f64(flat);
            let cost = batch::gradient_into_with(self.net, p, &self.data.xs, &self.data.ys, g, s)
                .map_err(|e| Error::msg(format!("internal: {e}")))?
                .map(|c| c.to_f64())
                .unwrap_or(0.0);
            Ok((cost, g.flat_f64()))
        }
    }

    impl<T: Real + Send + Sync> CostFunction for Problem<'_, '_, T> {
        type Param = Vec<f64>;
        type Output = f64;
        fn cost(&self, p: &Vec<f64>) -> Result<f64, Error> {
            self.eval(p).map(|(c, _)| c)
        }
    }

    impl<T: Real + Send + Sync> Gradient for Problem<'_, '_, T> {
        type Param = Vec<f64>;
        type Gradient = Vec<f64>;
        fn gradient(&self, p: &Vec<f64>) -> Result<Vec<f64>, Error> {
            self.eval(p).map(|(_, g)| g)
        }
    }

    struct Forward(Sender<(u32, Vec<f64>)>);

    impl<I> Observe<I> for Forward
    where
        I: State<Param = Vec<f64>, Float = f64>,
    {
        fn observe_iter(&mut self, state: &I, _kv: &KV) -> Result<(), Error> {
            if let Some(p) = state.get_param() {
                let iter = u32::try_from(state.get_iter()).unwrap_or(u32::MAX);
                let _ = self.0.send((iter, p.clone()));
            }
            Ok(())
        }
    }

    #[allow(clippy::too_many_arguments)]
    pub(super) fn run<T: Real + Send + Sync>(
        net: &Net<'_, T>,
        template: Params<T>,
        data: &Samples<T>,
        start: Vec<f64>,
        iters: u32,
        memory: usize,
        tx: Sender<(u32, Vec<f64>)>,
        stop: &AtomicBool,
    ) {
        let grad = Params::zero_gradient(net.model);
        let problem = Problem {
            net,
            data,
            scratch: Mutex::new((template, grad, batch::BatchScratch::new(net.model))),
            stop,
        };
        let solver = LBFGS::new(MoreThuenteLineSearch::new(), memory.max(1));
        let _ = Executor::new(problem, solver)
            .configure(|s| s.param(start).max_iters(u64::from(iters)))
            .add_observer(Forward(tx), ObserverMode::Always)
            .run();
    }
}
