//! What `sinew check` shows for a spec: a compact table and a JSON form, both built from the IR
//! and the cost report only.

use crate::diag::Diagnostic;
use crate::ir::{Activation, Model};
use crate::report::{human_bytes, Report};
use crate::words;
use serde::Serialize;
use std::fmt::Write;

/// The `--json` form of one checked file.
#[derive(Debug, Serialize)]
pub struct FileSummary<'a> {
    /// The file as named on the command line.
    pub file: &'a str,
    /// True when the spec has no errors.
    pub ok: bool,
    /// Every finding, errors and warnings, in source order, with line and column.
    pub diagnostics: Vec<Located<'a>>,
    /// The checked model and its report, when there are no errors.
    pub model: Option<ModelSummary<'a>>,
}

/// The model part of a [`FileSummary`].
#[derive(Debug, Serialize)]
pub struct ModelSummary<'a> {
    /// The IR.
    pub ir: &'a Model,
    /// Its fingerprint as 16 hex digits.
    pub fingerprint: String,
    /// Its cost report.
    pub report: Report,
}

/// A place in the spec text: 1-based line and column (in characters), as an editor shows them.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct Position {
    /// Line, from 1.
    pub line: usize,
    /// Column, from 1, counted in characters.
    pub column: usize,
}

impl Position {
    /// The position of byte offset `at` in `src` (clamped to the text).
    pub fn of(src: &str, at: usize) -> Position {
        let mut at = at.min(src.len());
        while !src.is_char_boundary(at) {
            at -= 1;
        }
        let before = &src[..at];
        let line_start = before.rfind('\n').map_or(0, |i| i + 1);
        Position {
            line: before.matches('\n').count() + 1,
            column: before[line_start..].chars().count() + 1,
        }
    }
}

/// Where a span starts and ends.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct Location {
    /// First character.
    pub start: Position,
    /// One past the last character.
    pub end: Position,
}

/// A diagnostic in the `--json` form: its fields (byte spans included), plus the line and column
/// of the primary span and of each secondary span.
#[derive(Debug, Serialize)]
pub struct Located<'a> {
    /// The diagnostic.
    #[serde(flatten)]
    pub diagnostic: &'a Diagnostic,
    /// Where its primary span is.
    pub location: Location,
    /// Where each secondary span is, in order.
    pub secondary_locations: Vec<Location>,
}

impl<'a> FileSummary<'a> {
    /// Builds the summary of one file; `src` is its text, for line and column.
    pub fn new(
        file: &'a str,
        src: &str,
        model: Option<&'a Model>,
        diagnostics: &'a [Diagnostic],
    ) -> Self {
        let loc = |sp: crate::span::Span| Location {
            start: Position::of(src, sp.start),
            end: Position::of(src, sp.end),
        };
        FileSummary {
            file,
            ok: !diagnostics.iter().any(Diagnostic::is_error),
            diagnostics: diagnostics
                .iter()
                .map(|d| Located {
                    diagnostic: d,
                    location: loc(d.primary.span),
                    secondary_locations: d.secondary.iter().map(|l| loc(l.span)).collect(),
                })
                .collect(),
            model: model.map(|m| ModelSummary {
                ir: m,
                fingerprint: format!("{:016x}", m.fingerprint()),
                report: Report::of(m),
            }),
        }
    }
}

fn activation_text(a: Activation) -> String {
    match a {
        Activation::LeakyRelu(alpha) => format!("leaky_relu {alpha}"),
        other => other.keyword().to_string(),
    }
}

/// The compact human table: one row per layer, then the report figures and the settings.
pub fn table(model: &Model) -> String {
    let r = Report::of(model);
    // A model with a window or a grid shows each layer's kind and the shape it writes
    // (`edges  conv  48 x 8`); a dense model keeps the units column.
    let shaped = !model.input.shape.is_vector();
    let mut rows: Vec<Vec<String>> = Vec::new();
    let head: &[&str] = if shaped {
        &[
            "layer",
            "kind",
            "shape",
            "activation",
            "parameters",
            "mult-adds",
        ]
    } else {
        &["layer", "units", "activation", "parameters", "mult-adds"]
    };
    rows.push(head.iter().map(|h| h.to_string()).collect());
    let scaling = if model.input.standardize {
        "standardize".to_string()
    } else {
        "-".to_string()
    };
    if shaped {
        rows.push(vec![
            format!("{} (input)", model.input.name),
            "-".into(),
            model.input.shape.words(),
            scaling,
            "-".into(),
            "-".into(),
        ]);
    } else {
        rows.push(vec![
            format!("{} (input)", model.input.name),
            model.input.width.to_string(),
            scaling,
            "-".into(),
            "-".into(),
        ]);
    }
    for (l, lr) in model.layers.iter().zip(&r.layers) {
        let mut row = vec![l.name.clone()];
        if shaped {
            row.push(l.kind.words().to_string());
            row.push(l.output.words());
        } else {
            row.push(l.width.to_string());
        }
        let act = match l.kind {
            crate::ir::LayerKind::Pool { .. } => "-".to_string(),
            _ => activation_text(l.activation),
        };
        row.extend([act, lr.parameters.to_string(), lr.macs.to_string()]);
        rows.push(row);
    }
    let n = head.len();
    let mut widths = vec![0usize; n];
    for row in &rows {
        for (w, cell) in widths.iter_mut().zip(row) {
            *w = (*w).max(cell.chars().count());
        }
    }
    // Text columns to the left, numbers to the right.
    let right: &[bool] = if shaped {
        &[false, false, true, false, true, true]
    } else {
        &[false, true, false, true, true]
    };
    let mut s = String::new();
    let _ = writeln!(
        s,
        "model {} ({}, fingerprint {:016x})",
        model.name,
        model.scalar.rust_name(),
        model.fingerprint()
    );
    for (i, row) in rows.iter().enumerate() {
        let cells: Vec<String> = row
            .iter()
            .zip(&widths)
            .zip(right)
            .map(|((c, &w), &r)| {
                if r {
                    format!("{c:>w$}")
                } else {
                    format!("{c:<w$}")
                }
            })
            .collect();
        let _ = writeln!(s, "  {}", cells.join("  ").trim_end());
        if i == 0 {
            let total: usize = widths.iter().sum::<usize>() + 2 * (n - 1);
            let _ = writeln!(s, "  {}", "-".repeat(total));
        }
    }
    if let Some(c) = &model.classes {
        let _ = writeln!(s, "  classes: {}", c.join(", "));
    }
    let penalty = words::penalty_spec(model.penalty);
    let optimizer = words::optimizer_spec(model.train.optimizer);
    let _ = writeln!(
        s,
        "  loss {}, penalty {penalty}, train {optimizer} batch {} epochs {}",
        model.loss.keyword(),
        model.train.batch,
        model.train.epochs
    );
    let _ = writeln!(
        s,
        "  parameters {} ({})",
        r.parameters,
        human_bytes(r.parameter_bytes)
    );
    let scaling = if r.scaling_bytes > 0 {
        ", input mean and std"
    } else {
        ""
    };
    let _ = writeln!(
        s,
        "  flash {}: weights, biases{scaling} (machine code not counted)",
        budget_text(r.flash_bytes, model.budget.flash, "flash")
    );
    let _ = writeln!(
        s,
        "  RAM for inference {}: layer buffers and call frames",
        budget_text(r.ram_inference_bytes, model.budget.ram, "ram")
    );
    let _ = writeln!(
        s,
        "  RAM for on-device training {}: parameters, gradient, optimizer state, buffers and \
         call frames",
        budget_text(r.ram_training_bytes, model.budget.train_ram, "train_ram")
    );
    let _ = writeln!(
        s,
        "  multiply-adds: {} per inference, {} per training sample",
        r.macs_inference, r.macs_training
    );
    s
}

/// A figure with the budget word that limits it: `788 B of 16 KiB (budget flash)`, or
/// `4.84 KiB (no budget train_ram)`.
fn budget_text(used: u64, limit: Option<u64>, word: &str) -> String {
    match limit {
        Some(l) => format!(
            "{} of {} (budget {word})",
            human_bytes(used),
            human_bytes(l)
        ),
        None => format!("{} (no budget {word})", human_bytes(used)),
    }
}

/// The end-of-training summary: method, epochs, time, costs and the headline metric.
pub fn training(model: &Model, o: &crate::workflow::TrainOutcome) -> String {
    let mut s = String::new();
    let h = &o.summary.history;
    let _ = writeln!(
        s,
        "trained {} with {}: {} epoch{} in {:.2} s{}",
        model.name,
        o.summary.method,
        h.len(),
        if h.len() == 1 { "" } else { "s" },
        o.elapsed.as_secs_f64(),
        if o.summary.stopped_early {
            format!(" (stopped early; kept epoch {})", o.summary.best_epoch)
        } else {
            String::new()
        }
    );
    let line = |s: &mut String, name: &str, e: &crate::engine::eval::Evaluation| {
        let _ = write!(
            s,
            "  {name:<10} {:>6} samples  cost (with penalty) {:.6}",
            e.samples, e.cost
        );
        if let Some(a) = e.accuracy {
            let _ = write!(s, "  accuracy {:.2}%", a * 100.0);
        }
        if let Some(r) = &e.rmse {
            let _ = write!(s, "  rmse {}", join(r));
        }
        let _ = writeln!(s);
    };
    line(&mut s, "training", &o.train);
    if let Some(v) = &o.validation {
        line(&mut s, "validation", v);
    }
    s
}

fn join(v: &[f64]) -> String {
    v.iter()
        .map(|x| format!("{x:.4}"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// The `sinew eval` report: cost, then accuracy and a confusion matrix for classifiers, or the
/// mean absolute and root-mean-square error per output for regressors.
pub fn evaluation(model: &Model, e: &crate::engine::eval::Evaluation) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "{}: {} samples, cost (with penalty) {:.6}",
        model.name, e.samples, e.cost
    );
    if let (Some(acc), Some(conf), Some(classes)) = (e.accuracy, &e.confusion, &e.classes) {
        let _ = writeln!(s, "accuracy {:.2}%", acc * 100.0);
        let w = classes.iter().map(|c| c.len()).max().unwrap_or(1).max(6);
        let _ = writeln!(s, "confusion (rows: true class, columns: predicted)");
        let _ = write!(s, "  {:<w$}", "");
        for c in classes {
            let _ = write!(s, " {c:>w$}");
        }
        let _ = writeln!(s);
        for (c, row) in classes.iter().zip(conf) {
            let _ = write!(s, "  {c:<w$}");
            for n in row {
                let _ = write!(s, " {n:>w$}");
            }
            let _ = writeln!(s);
        }
    }
    if let (Some(mae), Some(rmse)) = (&e.mae, &e.rmse) {
        let out = model.output();
        for (j, (a, r)) in mae.iter().zip(rmse).enumerate() {
            // A single output is named as in the spec; several get their unit index.
            let name = if mae.len() == 1 {
                out.name.clone()
            } else {
                format!("{}[{j}]", out.name)
            };
            let _ = writeln!(s, "  {name}: mean absolute error {a:.6}, rms error {r:.6}");
        }
    }
    s
}

/// The `sinew gradcheck` report of `outcome`, checked with relative tolerance `threshold` and
/// absolute tolerance `atol`: one line per layer, then the verdict.
pub fn gradcheck(
    model: &Model,
    outcome: &crate::workflow::GradcheckOutcome,
    threshold: f64,
    atol: f64,
) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "{}: backprop against central differences (f64)",
        model.name
    );
    for c in &outcome.layers {
        let _ = writeln!(
            s,
            "  {:<16} {:>6}/{:<6} worst relative error {:.3e} at {}, worst absolute {:.3e}  {}",
            c.layer,
            c.checked,
            c.total,
            c.worst_relative_error,
            c.worst_at,
            c.worst_absolute_error,
            if c.passed() {
                "ok".to_string()
            } else {
                format!("FAIL ({} outside tolerance)", c.failures)
            }
        );
    }
    let _ = writeln!(
        s,
        "{} (|backprop - difference| <= {atol:.0e} + {threshold:.0e} * max magnitude)",
        outcome.verdict.word()
    );
    s
}

/// The `sinew grad` report without `--json`: the batch cost, then per layer the largest
/// magnitude and the Euclidean norm of `dJ/dW` and of `dJ/db`.
pub fn gradient(model: &Model, g: &crate::workflow::Gradient) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "{}: {} samples, cost {:.6}",
        model.name, g.samples, g.cost
    );
    let stats = |v: &mut dyn Iterator<Item = f64>| {
        v.fold((0.0f64, 0.0f64), |(max, sq), x| {
            (max.max(x.abs()), sq + x * x)
        })
    };
    for l in &g.layers {
        let (wmax, wsq) = stats(&mut l.weights.iter().flatten().copied());
        let (bmax, bsq) = stats(&mut l.bias.iter().copied());
        let _ = writeln!(
            s,
            "  {:<16} dJ/dW max {wmax:.3e} norm {:.3e}   dJ/db max {bmax:.3e} norm {:.3e}",
            l.name,
            wsq.sqrt(),
            bsq.sqrt()
        );
    }
    s
}
