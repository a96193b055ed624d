//! A stable text dump of the IR for snapshot tests.

use super::*;
use std::fmt::Write;

/// Renders `model` as stable, human-readable text (one fact per line).
pub fn dump(model: &Model) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "model {}", model.name);
    let _ = writeln!(s, "scalar {}", model.scalar.rust_name());
    let _ = writeln!(
        s,
        "input {} {}{}",
        model.input.name,
        model.input.shape.words(),
        if model.input.standardize {
            " standardize"
        } else {
            ""
        }
    );
    for (i, l) in model.layers.iter().enumerate() {
        let role = if i + 1 == model.layers.len() {
            "output"
        } else {
            "layer"
        };
        let act = match l.activation {
            Activation::LeakyRelu(a) => format!("leaky_relu {a}"),
            other => other.keyword().to_string(),
        };
        let _ = write!(
            s,
            "{role} {} {}x{} {act} params={}",
            l.name,
            l.width,
            l.fan_in,
            l.parameters()
        );
        if let Some(w) = l.kind.window() {
            let _ = write!(
                s,
                " {} in={} out={} kernel={}x{} stride={}x{} pad={}x{}",
                l.kind.words(),
                l.input.words(),
                l.output.words(),
                w.k_rows,
                w.k_cols,
                w.stride_rows,
                w.stride_cols,
                w.pad_top,
                w.pad_left
            );
        }
        let _ = writeln!(s);
    }
    if let Some(c) = &model.classes {
        let _ = writeln!(s, "classes {}", c.join(", "));
    }
    let _ = writeln!(s, "loss {:?}", model.loss);
    let _ = writeln!(s, "penalty {:?}", model.penalty);
    let _ = writeln!(s, "init {:?} seed {}", model.init, model.seed);
    let _ = writeln!(
        s,
        "train {:?} batch {} epochs {}",
        model.train.optimizer, model.train.batch, model.train.epochs
    );
    let _ = writeln!(
        s,
        "budget flash {:?} ram {:?} train_ram {:?}",
        model.budget.flash, model.budget.ram, model.budget.train_ram
    );
    let _ = writeln!(s, "parameters {}", model.parameters());
    let _ = writeln!(s, "fingerprint {:016x}", model.fingerprint());
    s
}
