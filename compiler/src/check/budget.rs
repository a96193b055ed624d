//! The memory budget (`S07xx`).
//!
//! `budget flash N UNIT` is checked against [`Report::flash_bytes`] (every weight and bias, plus
//! the standardization mean and std), `budget ram N UNIT` against
//! [`Report::ram_inference_bytes`] (the buffers `predict` holds plus the allowance for its call
//! frames) and `budget train_ram N UNIT` against [`Report::ram_training_bytes`] (the trainer's
//! parameters, gradient and optimizer state, the per-sample buffers of one step and the allowance
//! for its call frames). The device test holds both frame allowances against the stack measured
//! on microcontrollers. The figure and the limit appear in each message.

use super::Parts;
use crate::diag::{Code, Diagnostic};
use crate::ir::{Budget, Model, Optimizer};
use crate::report::{human_bytes, Report};
use crate::syntax::ast::{Size, Unit};

fn unit_word(u: Unit) -> &'static str {
    match u {
        Unit::B => "B",
        Unit::KiB => "KiB",
        Unit::MiB => "MiB",
    }
}

/// The size in bytes, or `None` (after reporting `S0703`) when it does not fit in 64 bits.
fn bytes(size: &Size, what: &str, diags: &mut Vec<Diagnostic>) -> Option<u64> {
    let v = super::shapes::whole(&size.amount).and_then(|n| n.checked_mul(size.unit.node.bytes()));
    if v.is_none() {
        diags.push(
            Diagnostic::error(
                Code::S0703,
                format!(
                    "{what} budget `{} {}` is above the limit of {} bytes",
                    size.amount.node.chars().take(40).collect::<String>(),
                    unit_word(size.unit.node),
                    u64::MAX
                ),
                size.span,
            )
            .label("too large")
            .with_help("a budget is a byte count that fits in 64 bits"),
        );
    }
    v
}

/// Reads the limits; the default is no limit.
pub(crate) fn limits(parts: &Parts<'_>, diags: &mut Vec<Diagnostic>) -> Option<Budget> {
    let Some(b) = parts.budget else {
        return Some(Budget::default());
    };
    let flash = b.flash.map(|s| bytes(s, "flash", diags));
    let ram = b.ram.map(|s| bytes(s, "ram", diags));
    let train_ram = b.train_ram.map(|s| bytes(s, "train_ram", diags));
    match (flash, ram, train_ram) {
        (Some(None), _, _) | (_, Some(None), _) | (_, _, Some(None)) => None,
        (f, r, t) => Some(Budget {
            flash: f.flatten(),
            ram: r.flatten(),
            train_ram: t.flatten(),
        }),
    }
}

/// Both the rounded and the exact figure, e.g. `1.5 KiB (1536 B)`.
fn figure(n: u64) -> String {
    if n < 1024 {
        human_bytes(n)
    } else {
        format!("{} ({n} B)", human_bytes(n))
    }
}

/// The smallest budget in the spec's own units that holds `n` bytes.
fn enough(n: u64) -> String {
    if n <= 1024 {
        format!("{n} B")
    } else if n <= 1024 * 1024 {
        format!("{} KiB", n.div_ceil(1024))
    } else {
        format!("{} MiB", n.div_ceil(1024 * 1024))
    }
}

/// Checks a built model against its budget (`S0701` flash, `S0702` inference RAM, `S0704`
/// training RAM).
pub(crate) fn check(model: &Model, parts: &Parts<'_>, diags: &mut Vec<Diagnostic>) {
    let Some(b) = parts.budget else { return };
    let report = Report::of(model);
    let decls: Vec<_> = parts
        .layers
        .iter()
        .copied()
        .chain(parts.output.map(|o| o.layer))
        .collect();
    let scalar = model.scalar.rust_name();
    let sb = report.scalar_bytes;

    if let (Some(limit), Some(size)) = (model.budget.flash, b.flash) {
        if report.flash_bytes > limit {
            let mut d = Diagnostic::error(
                Code::S0701,
                format!(
                    "the model needs {} of flash, more than the budget of {}",
                    figure(report.flash_bytes),
                    figure(limit)
                ),
                size.span,
            )
            .label(format!("budget of {}", figure(limit)));
            let biggest = report
                .layers
                .iter()
                .zip(&decls)
                .max_by_key(|(l, _)| l.parameters);
            if let Some((l, d_)) = biggest {
                d = d.with_secondary(
                    d_.size_span(),
                    format!(
                        "layer `{}` holds {} parameters: {}",
                        l.name,
                        l.parameters,
                        human_bytes(l.parameters * sb)
                    ),
                );
            }
            let scaling = if report.scaling_bytes > 0 {
                format!(
                    " plus the input's mean and std ({} values)",
                    report.scaling_bytes / sb
                )
            } else {
                String::new()
            };
            diags.push(d.with_help(format!(
                "flash holds every weight and bias ({} {scalar} values){scaling}; raise the flash \
                 budget to at least {}, or make the layers narrower",
                report.parameters,
                enough(report.flash_bytes)
            )));
        }
    }

    if let (Some(limit), Some(size)) = (model.budget.ram, b.ram) {
        if report.ram_inference_bytes > limit {
            let mut d = Diagnostic::error(
                Code::S0702,
                format!(
                    "the model needs {} of RAM for inference, more than the budget of {}",
                    figure(report.ram_inference_bytes),
                    figure(limit)
                ),
                size.span,
            )
            .label(format!("budget of {}", figure(limit)));
            let widest = report.layers.iter().zip(&decls).max_by_key(|(l, _)| l.size);
            if let Some((l, d_)) = widest {
                d = d.with_secondary(
                    d_.size_span(),
                    format!(
                        "layer `{}` keeps {} values: {}",
                        l.name,
                        l.size,
                        human_bytes(l.size as u64 * sb)
                    ),
                );
            }
            let (even, odd) = crate::plan::Plan::new(model).inference_halves();
            diags.push(d.with_help(format!(
                "inference keeps two halves of working memory that the layers' buffers take in \
                 turn ({even} and {odd} {scalar} values: the largest buffers alive together) and \
                 the output ({} value{}), {} in all, and {} of call frames; raise the ram budget \
                 to at least {}, or make the largest layers smaller",
                model.output().width,
                if model.output().width == 1 { "" } else { "s" },
                human_bytes(report.buffer_inference_bytes),
                human_bytes(report.frames_inference_bytes),
                enough(report.ram_inference_bytes)
            )));
        }
    }

    if let (Some(limit), Some(size)) = (model.budget.train_ram, b.train_ram) {
        if report.ram_training_bytes > limit {
            let mut d = Diagnostic::error(
                Code::S0704,
                format!(
                    "one on-device training step needs {} of RAM, more than the budget of {}",
                    figure(report.ram_training_bytes),
                    figure(limit)
                ),
                size.span,
            )
            .label(format!("budget of {}", figure(limit)));
            let (copies, state, lighter) = match model.train.optimizer {
                Optimizer::Sgd { momentum: 0.0, .. } => ("", "", ""),
                Optimizer::Sgd { .. } => (
                    " and a velocity",
                    "momentum keeps a velocity",
                    " (sgd without momentum)",
                ),
                Optimizer::Adam { .. } => (
                    " and two moment estimates",
                    "adam keeps two moment estimates",
                    " (sgd)",
                ),
            };
            if let (Some(t), false) = (parts.train, state.is_empty()) {
                d = d.with_secondary(t.optimizer.span, format!("{state} per parameter"));
            }
            diags.push(d.with_help(format!(
                "a step keeps the {} parameters ({}), their gradient{copies}, and the buffers \
                 of one sample: {} in all, plus {} of call frames; raise the train_ram budget \
                 to at least {}, or use a lighter optimizer{lighter} or narrower layers",
                report.parameters,
                human_bytes(report.parameter_bytes),
                human_bytes(report.buffer_training_bytes),
                human_bytes(report.frames_training_bytes),
                enough(report.ram_training_bytes)
            )));
        }
    }
}

#[cfg(test)]
mod tests {
    use super::{enough, figure};
    use crate::check_source;
    use crate::diag::Code;

    #[test]
    fn figures_and_smallest_sufficient_budget() {
        assert_eq!(figure(788), "788 B");
        assert_eq!(figure(1536), "1.5 KiB (1536 B)");
        assert_eq!(enough(1024), "1024 B");
        assert_eq!(enough(1025), "2 KiB");
        assert_eq!(enough(2 * 1024 * 1024 + 1), "3 MiB");
    }

    #[test]
    fn pump_health_figures_against_budgets() {
        // 6-10-8-3, f32, standardized: flash 788 B and inference RAM 84 B of buffers + 1280 B
        // of call frames = 1364 B (report.rs works through both figures).
        let spec = |budget: &str| {
            format!(
                "model pump_health\ninput features 6 standardize\nlayer hidden1 10 sigmoid\n\
                 layer hidden2 8 tanh\noutput state 3 softmax\nloss cross_entropy\n{budget}\n"
            )
        };
        let codes = |b: &str| -> Vec<Code> {
            check_source(&spec(b))
                .diagnostics
                .iter()
                .map(|d| d.code)
                .collect()
        };
        assert!(codes("budget flash 788 B ram 1364 B").is_empty());
        assert_eq!(codes("budget flash 787 B"), ["S0701"]);
        assert_eq!(codes("budget ram 1363 B"), ["S0702"]);
        // Training (default optimizer adam): 185 parameters x 4 copies (parameters, gradient,
        // two moments) + 27 inference values + 3 output values + 21 error terms = 791 values
        // + the trainer's input mean and std (12 values) = 803 values = 3212 B, plus 1792 B of
        // frames = 5004 B (report.rs works through this figure).
        assert!(codes("budget train_ram 5004 B").is_empty());
        assert_eq!(codes("budget train_ram 5003 B"), ["S0704"]);
        assert_eq!(
            codes("budget flash 787 B ram 1363 B train_ram 5003 B"),
            ["S0701", "S0702", "S0704"]
        );
        assert!(codes("budget ram 2 KiB train_ram 5 KiB").is_empty());
        assert_eq!(codes("budget train_ram 4 KiB"), ["S0704"]);
        let d = &check_source(&spec("budget flash 787 B")).diagnostics[0];
        assert_eq!(
            d.message,
            "the model needs 788 B of flash, more than the budget of 787 B"
        );
        assert_eq!(codes("budget ram 18014398509481984 MiB"), ["S0703"]); // 2^54 MiB = 2^74 B
    }
}
