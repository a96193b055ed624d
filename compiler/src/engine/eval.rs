//! Metrics of a trained model on a data set.

use super::{batch, LengthMismatch, Net, Params};
use crate::ir::Activation;
use serde::Serialize;
use sinew_runtime::Real;

/// The class a network output stands for: argmax for several units (first maximum wins), and
/// for one sigmoid unit class 1 iff the output is above 0.5.
pub fn class_of<T: Real>(out: &[T]) -> usize {
    if out.len() == 1 {
        return usize::from(out.first().is_some_and(|&a| a > T::HALF));
    }
    let mut best = 0;
    for (i, &v) in out.iter().enumerate() {
        if out.get(best).is_some_and(|&b| v > b) {
            best = i;
        }
    }
    best
}

/// Fraction of samples whose predicted class equals `labels` (0 for no samples). `xs` must hold
/// whole samples, one label each.
pub fn accuracy<T: Real + Send + Sync>(
    net: &Net<'_, T>,
    p: &Params<T>,
    xs: &[T],
    labels: &[usize],
) -> Result<f64, LengthMismatch> {
    let n_out = net.model.output().width;
    let out = batch::predict_all(net, p, xs)?;
    let total = out.len().checked_div(n_out).unwrap_or(0);
    LengthMismatch::check("labels", total, labels.len())?;
    if total == 0 {
        return Ok(0.0);
    }
    let hits = out
        .chunks_exact(n_out)
        .zip(labels)
        .filter(|(o, &l)| class_of(o) == l)
        .count();
    Ok(hits as f64 / total as f64)
}

/// Evaluation figures.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Evaluation {
    /// Samples evaluated.
    pub samples: usize,
    /// J including the penalty.
    pub cost: f64,
    /// Classifiers: fraction correct.
    pub accuracy: Option<f64>,
    /// Classifiers: `confusion[true][predicted]` counts.
    pub confusion: Option<Vec<Vec<usize>>>,
    /// Class names in matrix order (classifiers).
    pub classes: Option<Vec<String>>,
    /// Regressors: mean absolute error per output.
    pub mae: Option<Vec<f64>>,
    /// Regressors: root-mean-square error per output.
    pub rmse: Option<Vec<f64>>,
}

/// Evaluates `p` on samples (row-major); `labels` for classifiers. `xs` and `ys` must hold the
/// same number of whole samples, and `labels` one per sample.
pub fn evaluate<T: Real + Send + Sync>(
    net: &Net<'_, T>,
    p: &Params<T>,
    xs: &[T],
    ys: &[T],
    labels: Option<&[usize]>,
) -> Result<Evaluation, LengthMismatch> {
    let model = net.model;
    let n_out = model.output().width;
    let cost = batch::cost(net, p, xs, ys)?.to_f64();
    let out = batch::predict_all(net, p, xs)?;
    let samples = out.len().checked_div(n_out).unwrap_or(0);
    if let Some(l) = labels {
        LengthMismatch::check("labels", samples, l.len())?;
    }
    if model.is_classifier() {
        let n_classes = if n_out == 1 && model.output().activation == Activation::Sigmoid {
            2
        } else {
            n_out
        };
        let derived: Vec<usize>;
        let labels = match labels {
            Some(l) => l,
            None => {
                derived = ys.chunks_exact(n_out).map(class_of).collect();
                &derived
            }
        };
        let mut confusion = vec![vec![0usize; n_classes]; n_classes];
        let mut hits = 0;
        for (o, &l) in out.chunks_exact(n_out).zip(labels) {
            let c = class_of(o);
            if c == l {
                hits += 1;
            }
            if let Some(cell) = confusion.get_mut(l).and_then(|row| row.get_mut(c)) {
                *cell += 1;
            }
        }
        let classes = model
            .classes
            .clone()
            .or_else(|| Some((0..n_classes).map(|i| i.to_string()).collect()));
        Ok(Evaluation {
            samples,
            cost,
            accuracy: Some(if samples == 0 {
                0.0
            } else {
                hits as f64 / samples as f64
            }),
            confusion: Some(confusion),
            classes,
            mae: None,
            rmse: None,
        })
    } else {
        let mut abs = vec![0.0f64; n_out];
        let mut sq = vec![0.0f64; n_out];
        for (o, y) in out.chunks_exact(n_out).zip(ys.chunks_exact(n_out)) {
            for ((a, s), (&p, &t)) in abs.iter_mut().zip(&mut sq).zip(o.iter().zip(y)) {
                let e = p.to_f64() - t.to_f64();
                *a += e.abs();
                *s += e * e;
            }
        }
        let n = samples.max(1) as f64;
        Ok(Evaluation {
            samples,
            cost,
            accuracy: None,
            confusion: None,
            classes: None,
            mae: Some(abs.iter().map(|a| a / n).collect()),
            rmse: Some(sq.iter().map(|s| (s / n).sqrt()).collect()),
        })
    }
}
