//! Every name that appears in generated code is chosen here, and only here.
//!
//! The spec's names are lower_snake identifiers that are not Rust keywords (guaranteed by
//! `check`), so they are valid Rust field and module names as they are. What this module adds is
//! the derived names and their collisions:
//!
//! - one `pub const` per layer, the layer name upper-cased (`hidden1` -> `HIDDEN1`); when that
//!   collides with a fixed module item ([`RESERVED_CONSTS`]) or another layer's constant, `_UNITS`
//!   is appended (and then a number, until it is unique);
//! - per-layer fields `<layer>_weights` and `<layer>_bias` (these cannot collide: no name ends in
//!   both suffixes), and the scaling fields [`MEAN_FIELD`] and [`STD_FIELD`];
//! - class enum variants in UpperCamelCase (`worn_bearing` -> `WornBearing`); names that differ
//!   only in underscores (`a_b`, `a__b`) get a number appended, and `Self` becomes `SelfClass`;
//! - local buffers: `a_<layer>` (activations), `z_<layer>` (output logits), `d_<layer>` (errors)
//!   and [`STANDARDIZED_INPUT`]; every local derived from a layer carries a prefix, so none can
//!   collide with a parameter (`x`, `y`, `out`, `grad`, `m`, `seed`, `xs`, `ys`, `params`).

use crate::ir::Model;
use std::collections::BTreeSet;

/// Module-level constants and statics that generated code always defines; layer constants must
/// avoid them.
pub const RESERVED_CONSTS: [&str; 6] = [
    "INPUTS",
    "OUTPUTS",
    "PARAMETERS",
    "FINGERPRINT",
    "ZERO",
    "TRAINED",
];

/// Field of [`Model::input`]'s per-feature mean (with `standardize`).
pub const MEAN_FIELD: &str = "input_mean";
/// Field of the per-feature standard deviation (with `standardize`).
pub const STD_FIELD: &str = "input_std";
/// Local buffer holding the standardized input.
pub const STANDARDIZED_INPUT: &str = "x0";
/// The class enum.
pub const CLASS_ENUM: &str = "Class";

/// The names of one layer's items.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LayerNames {
    /// The layer's width constant, e.g. `HIDDEN1`.
    pub width_const: String,
    /// Weight matrix field, e.g. `hidden1_weights`.
    pub weights: String,
    /// Bias vector field, e.g. `hidden1_bias`.
    pub bias: String,
    /// Activation buffer (a local), e.g. `a_hidden1`.
    pub activations: String,
    /// Logits buffer of the output layer (a local), e.g. `z_state`.
    pub logits: String,
    /// Error buffer (a local), e.g. `d_hidden1`.
    pub errors: String,
    /// For a sliding-window layer: its geometry constant (`EDGES_WINDOW`), and for a
    /// convolution the constants of its weights' rows and columns (`EDGES_KERNELS`,
    /// `EDGES_TAPS`).
    pub window: Option<WindowNames>,
}

/// The constants of a sliding-window layer.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct WindowNames {
    /// The `rt::conv::Window` constant.
    pub geometry: String,
    /// Rows of the weights: filters (conv) or channels (depthwise).
    pub kernels: String,
    /// Columns of the weights: `taps * channels` (conv) or `taps` (depthwise).
    pub taps: String,
}

/// Every generated name of one model.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Names {
    /// The module name (the model name).
    pub module: String,
    /// Per layer, in order.
    pub layers: Vec<LayerNames>,
    /// Class enum variants in output order (empty without `classes`).
    pub classes: Vec<String>,
}

impl Names {
    /// Chooses every name of `model`.
    pub fn of(model: &Model) -> Names {
        let mut taken: BTreeSet<String> = RESERVED_CONSTS.iter().map(|s| s.to_string()).collect();
        let layers = model
            .layers
            .iter()
            .map(|l| {
                let width_const = unique(&mut taken, l.name.to_ascii_uppercase(), "_UNITS");
                let upper = l.name.to_ascii_uppercase();
                let window = l.kind.window().map(|_| WindowNames {
                    geometry: unique(&mut taken, format!("{upper}_WINDOW"), "_"),
                    kernels: unique(&mut taken, format!("{upper}_KERNELS"), "_"),
                    taps: unique(&mut taken, format!("{upper}_TAPS"), "_"),
                });
                LayerNames {
                    window,
                    width_const,
                    weights: format!("{}_weights", l.name),
                    bias: format!("{}_bias", l.name),
                    activations: format!("a_{}", l.name),
                    logits: format!("z_{}", l.name),
                    errors: format!("d_{}", l.name),
                }
            })
            .collect();
        let mut taken = BTreeSet::new();
        let classes = model
            .classes
            .iter()
            .flatten()
            .map(|c| {
                let mut v = upper_camel(c);
                if v == "Self" {
                    v.push_str("Class");
                }
                unique(&mut taken, v, "")
            })
            .collect();
        Names {
            module: model.name.clone(),
            layers,
            classes,
        }
    }
}

/// `worn_bearing` -> `WornBearing`, `a1_b` -> `A1B`.
pub fn upper_camel(snake: &str) -> String {
    let mut out = String::with_capacity(snake.len());
    for part in snake.split('_').filter(|p| !p.is_empty()) {
        let mut chars = part.chars();
        if let Some(first) = chars.next() {
            out.push(first.to_ascii_uppercase());
            out.extend(chars);
        }
    }
    if out.is_empty() {
        // `check` rules this out (names start with a letter); keep the result a valid identifier.
        out.push_str("Unnamed");
    }
    out
}

/// Returns `want` if it is free, else `want + suffix`, else `want + suffix + 2, 3, ...`; records
/// the result as taken.
fn unique(taken: &mut BTreeSet<String>, want: String, suffix: &str) -> String {
    let mut name = want.clone();
    if taken.contains(&name) && !suffix.is_empty() {
        name = format!("{want}{suffix}");
    }
    let base = name.clone();
    let mut n = 2;
    while taken.contains(&name) {
        name = format!("{base}{n}");
        n += 1;
    }
    taken.insert(name.clone());
    name
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::emit::tests::model;
    use crate::ir::Activation;

    #[test]
    fn layer_names_follow_the_spec() {
        let m = model(
            &[(6, "f"), (10, "hidden1"), (3, "state")],
            Activation::Softmax,
        );
        let n = Names::of(&m);
        assert_eq!(n.layers[0].width_const, "HIDDEN1");
        assert_eq!(n.layers[0].weights, "hidden1_weights");
        assert_eq!(n.layers[0].bias, "hidden1_bias");
        assert_eq!(n.layers[1].activations, "a_state");
        assert_eq!(n.layers[1].logits, "z_state");
        assert_eq!(n.layers[1].errors, "d_state");
    }

    #[test]
    fn layer_constants_avoid_fixed_items_and_each_other() {
        let m = model(
            &[
                (2, "f"),
                (3, "outputs"),
                (3, "outputs_units"),
                (3, "zero"),
                (2, "inputs"),
            ],
            Activation::Softmax,
        );
        let n = Names::of(&m);
        let consts: Vec<&str> = n.layers.iter().map(|l| l.width_const.as_str()).collect();
        assert_eq!(
            consts,
            [
                "OUTPUTS_UNITS",
                "OUTPUTS_UNITS_UNITS",
                "ZERO_UNITS",
                "INPUTS_UNITS"
            ]
        );
    }

    #[test]
    fn class_variants_are_upper_camel_and_unique() {
        assert_eq!(upper_camel("worn_bearing"), "WornBearing");
        assert_eq!(upper_camel("a1_b"), "A1B");
        assert_eq!(upper_camel("idle"), "Idle");
        assert_eq!(upper_camel("x__y_"), "XY");
        let mut m = model(&[(2, "f"), (4, "state")], Activation::Softmax);
        m.classes = Some(vec![
            "a_b".into(),
            "a__b".into(),
            "self_".into(),
            "ab".into(),
        ]);
        assert_eq!(Names::of(&m).classes, ["AB", "AB2", "SelfClass", "Ab"]);
    }
}
