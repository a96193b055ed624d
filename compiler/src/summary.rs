//! What `sinew check` shows for a spec: a compact table and a JSON form, both built from the IR
//! and the cost report only.

use crate::diag::Diagnostic;
use crate::ir::{Activation, Model, Optimizer, Penalty};
use crate::report::{human_bytes, Report};
use serde::Serialize;
use std::fmt::Write;

/// The `--json` form of one checked file.
#[derive(Debug, Serialize)]
pub struct FileSummary<'a> {
    /// The file as named on the command line.
    pub file: &'a str,
    /// True when the spec has no errors.
    pub ok: bool,
    /// Every finding, errors and warnings, in source order.
    pub diagnostics: &'a [Diagnostic],
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

impl<'a> FileSummary<'a> {
    /// Builds the summary of one file.
    pub fn new(file: &'a str, model: Option<&'a Model>, diagnostics: &'a [Diagnostic]) -> Self {
        FileSummary {
            file,
            ok: !diagnostics.iter().any(Diagnostic::is_error),
            diagnostics,
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
    let mut rows: Vec<[String; 5]> = vec![[
        "layer".into(),
        "units".into(),
        "activation".into(),
        "parameters".into(),
        "mult-adds".into(),
    ]];
    rows.push([
        format!("{} (input)", model.input.name),
        model.input.width.to_string(),
        if model.input.standardize { "standardize".into() } else { "-".into() },
        "-".into(),
        "-".into(),
    ]);
    for (l, lr) in model.layers.iter().zip(&r.layers) {
        rows.push([
            l.name.clone(),
            l.width.to_string(),
            activation_text(l.activation),
            lr.parameters.to_string(),
            lr.macs.to_string(),
        ]);
    }
    let mut widths = [0usize; 5];
    for row in &rows {
        for (w, cell) in widths.iter_mut().zip(row) {
            *w = (*w).max(cell.chars().count());
        }
    }
    let mut s = String::new();
    let _ = writeln!(
        s,
        "model {} ({}, fingerprint {:016x})",
        model.name,
        model.scalar.rust_name(),
        model.fingerprint()
    );
    for (i, row) in rows.iter().enumerate() {
        let _ = writeln!(
            s,
            "  {:<w0$}  {:>w1$}  {:<w2$}  {:>w3$}  {:>w4$}",
            row[0],
            row[1],
            row[2],
            row[3],
            row[4],
            w0 = widths[0],
            w1 = widths[1],
            w2 = widths[2],
            w3 = widths[3],
            w4 = widths[4]
        );
        if i == 0 {
            let total: usize = widths.iter().sum::<usize>() + 8;
            let _ = writeln!(s, "  {}", "-".repeat(total));
        }
    }
    if let Some(c) = &model.classes {
        let _ = writeln!(s, "  classes: {}", c.join(", "));
    }
    let penalty = match model.penalty {
        Penalty::None => "none".to_string(),
        Penalty::L2(l) => format!("l2 {l}"),
        Penalty::L1(l) => format!("l1 {l}"),
    };
    let optimizer = match model.train.optimizer {
        Optimizer::Sgd { rate, momentum } if momentum == 0.0 => format!("sgd rate {rate}"),
        Optimizer::Sgd { rate, momentum } => format!("sgd rate {rate} momentum {momentum}"),
        Optimizer::Adam { rate, beta1, beta2, .. } => {
            format!("adam rate {rate} beta1 {beta1} beta2 {beta2}")
        }
    };
    let _ = writeln!(
        s,
        "  loss {}, penalty {penalty}, train {optimizer} batch {} epochs {}",
        model.loss.keyword(),
        model.train.batch,
        model.train.epochs
    );
    let _ = writeln!(
        s,
        "  parameters {} ({}), flash {}, RAM inference {}, RAM training {}",
        r.parameters,
        human_bytes(r.parameter_bytes),
        budget_text(r.flash_bytes, model.budget.flash),
        budget_text(r.ram_inference_bytes, model.budget.ram),
        human_bytes(r.ram_training_bytes),
    );
    let _ = writeln!(
        s,
        "  multiply-adds: {} per inference, {} per training sample",
        r.macs_inference, r.macs_training
    );
    s
}

fn budget_text(used: u64, limit: Option<u64>) -> String {
    match limit {
        Some(l) => format!("{} of {}", human_bytes(used), human_bytes(l)),
        None => human_bytes(used),
    }
}
