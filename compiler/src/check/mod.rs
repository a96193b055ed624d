//! The checker: syntax tree in, [`ir::Model`] and diagnostics out.
//!
//! Every user-facing error about meaning is raised here, and every independent check runs, so
//! one run reports all findings together. The checks, by code family:
//!
//! - `S02xx` sections: missing, duplicate or out of order (this module);
//! - `S03xx` names ([`names`]);
//! - `S04xx` widths and sizes, `S06xx` numeric settings ([`shapes`]);
//! - `S05xx` layer and loss compatibility ([`compat`]);
//! - `S07xx` the memory budget ([`budget`]);
//! - `W01xx` warnings: legal but suspicious choices ([`compat`], [`shapes`]).
//!
//! `S01xx` (syntax) comes from [`crate::syntax::parse`]. A [`Checked`] holds a model exactly
//! when there are no errors; warnings may accompany it.

pub mod budget;
pub mod compat;
pub mod geometry;
pub mod names;
pub mod shapes;

use crate::diag::{Code, Diagnostic};
use crate::ir;
use crate::span::{Span, Spanned};
use crate::syntax::ast::*;

/// The result of checking a spec.
#[derive(Debug, Clone, PartialEq)]
pub struct Checked {
    /// The model, present exactly when `diagnostics` holds no error.
    pub model: Option<ir::Model>,
    /// Every finding (errors and warnings), in source order.
    pub diagnostics: Vec<Diagnostic>,
}

impl Checked {
    /// True when any diagnostic is an error.
    ///
    /// # Examples
    /// ```
    /// let checked = sinew::check_source(
    ///     "model demo\ninput x 0 unscaled\noutput y 1 sigmoid\nloss cross_entropy\n",
    /// );
    /// assert!(checked.has_errors());
    /// assert!(checked.model.is_none());
    /// assert_eq!(checked.diagnostics[0].code, "S0401"); // a width of 0
    /// ```
    pub fn has_errors(&self) -> bool {
        self.diagnostics.iter().any(Diagnostic::is_error)
    }
}

/// Parses and checks spec source text; syntax errors and check findings come together, in
/// source order.
///
/// # Examples
/// ```
/// let checked = sinew::check_source(
///     "model demo\ninput x 2 unscaled\noutput y 1 sigmoid\nloss cross_entropy\n",
/// );
/// let model = checked.model.expect("a valid spec");
/// assert_eq!(model.parameters(), 3);
/// ```
pub fn check_source(src: &str) -> Checked {
    let (spec, mut diagnostics) = crate::syntax::parse(src);
    let checked = check_all(&spec);
    diagnostics.extend(checked.diagnostics);
    diagnostics.sort_by_key(|d| d.primary.span.start);
    let model = if diagnostics.iter().any(Diagnostic::is_error) {
        None
    } else {
        checked.model
    };
    Checked {
        model,
        diagnostics: cap(diagnostics),
    }
}

/// At most this many findings are reported; a final `S0100` says that more were left out.
pub const MAX_DIAGNOSTICS: usize = 100;

/// Keeps the first [`MAX_DIAGNOSTICS`] findings (so that a pathological file cannot produce
/// gigabytes of output) and says how many more there were.
fn cap(mut diags: Vec<Diagnostic>) -> Vec<Diagnostic> {
    if diags.len() <= MAX_DIAGNOSTICS {
        return diags;
    }
    let rest = diags.split_off(MAX_DIAGNOSTICS);
    let at = rest[0].primary.span;
    let message = match rest.len() {
        1 => "1 more problem is not shown".to_string(),
        n => format!("{n} more problems are not shown"),
    };
    let note = if rest.iter().any(Diagnostic::is_error) {
        Diagnostic::error(Code::S0100, message, at)
    } else {
        Diagnostic::warning(Code::S0100, message, at)
    };
    diags.push(
        note.label("the next one is here")
            .with_help(format!("fix the first {MAX_DIAGNOSTICS} and check again")),
    );
    diags
}

/// Checks a parsed spec. A spec holding lines with syntax errors ([`Item::Invalid`]) never
/// yields a model; those errors are the parser's to report.
///
/// # Examples
/// ```
/// let (spec, _) = sinew::syntax::parse("model demo\ninput x 2 unscaled\noutput y 1 softmax\n");
/// let checked = sinew::check::check(&spec);
/// let codes: Vec<_> = checked.diagnostics.iter().map(|d| d.code).collect();
/// assert_eq!(codes, ["S0204", "S0502"]); // no `loss` line; softmax needs 2 units
/// ```
pub fn check(spec: &Spec) -> Checked {
    let checked = check_all(spec);
    Checked {
        model: checked.model,
        diagnostics: cap(checked.diagnostics),
    }
}

/// [`check`] without the cap on the number of findings.
fn check_all(spec: &Spec) -> Checked {
    let mut diags = Vec::new();
    let parts = sections(spec, &mut diags);
    names::check(&parts, &mut diags);
    let widths = shapes::widths(&parts, &mut diags);
    let activations = shapes::activations(&parts, &mut diags);
    let settings = shapes::settings(&parts, &mut diags);
    compat::check(&parts, &widths, &mut diags);
    let limits = budget::limits(&parts, &mut diags);

    let mut model = None;
    if !parts.has_invalid && !diags.iter().any(Diagnostic::is_error) {
        model = build(&parts, &widths, &activations, &settings, limits);
    }
    match &model {
        Some(m) => budget::check(m, &parts, &mut diags),
        // Other errors do not hide the budget: whenever the figures can be computed (the sizes
        // and the scalar are known), they are held against it too.
        None if !parts.has_invalid => {
            if let Some(m) = provisional(&parts, &widths, &activations, &settings, limits) {
                budget::check(&m, &parts, &mut diags);
            }
        }
        None => {}
    }
    diags.sort_by_key(|d| d.primary.span.start);
    if diags.iter().any(Diagnostic::is_error) {
        model = None;
    }
    Checked {
        model,
        diagnostics: diags,
    }
}

/// The input line's parts.
#[derive(Debug, Clone, Copy)]
pub(crate) struct InputPart<'a> {
    pub name: &'a Name,
    pub shape: &'a Dims,
    pub standardize: bool,
    pub unscaled: bool,
}

/// The output line's parts.
#[derive(Debug, Clone, Copy)]
pub(crate) struct OutputPart<'a> {
    pub layer: &'a LayerDecl,
    pub classes: Option<&'a Classes>,
}

/// The train line's parts.
#[derive(Debug, Clone, Copy)]
pub(crate) struct TrainPart<'a> {
    pub optimizer: &'a Spanned<OptimizerKind>,
    pub batch: Option<&'a Integer>,
    pub epochs: Option<&'a Integer>,
}

/// The budget line's parts.
#[derive(Debug, Clone, Copy)]
pub(crate) struct BudgetPart<'a> {
    pub flash: Option<&'a Size>,
    pub ram: Option<&'a Size>,
    pub train_ram: Option<&'a Size>,
}

/// The first statement of each section (later duplicates are reported and ignored), and every
/// hidden layer in order.
#[derive(Debug, Default)]
pub(crate) struct Parts<'a> {
    pub model: Option<&'a Name>,
    pub scalar: Option<&'a Spanned<ScalarKind>>,
    pub input: Option<InputPart<'a>>,
    pub layers: Vec<&'a LayerDecl>,
    pub output: Option<OutputPart<'a>>,
    pub loss: Option<&'a Spanned<LossKind>>,
    pub penalty: Option<&'a Spanned<PenaltyKind>>,
    pub init: Option<(&'a Spanned<InitKind>, Option<&'a Integer>)>,
    pub train: Option<TrainPart<'a>>,
    pub budget: Option<BudgetPart<'a>>,
    /// Some line had a syntax error.
    pub has_invalid: bool,
}

/// Collects the sections and checks their presence, uniqueness and order (`S02xx`).
fn sections<'a>(spec: &'a Spec, diags: &mut Vec<Diagnostic>) -> Parts<'a> {
    let mut parts = Parts::default();
    let mut first: Vec<(Section, Span)> = Vec::new();
    let mut latest: Option<(Section, Span)> = None;
    for stmt in &spec.statements {
        if let Item::Invalid { .. } = stmt.item {
            parts.has_invalid = true;
        }
        let Some(section) = stmt.item.section() else {
            continue;
        };
        let kw = section.keyword();
        if section != Section::Layer {
            if let Some(&(_, prev)) = first.iter().find(|(s, _)| *s == section) {
                diags.push(
                    Diagnostic::error(
                        Code::S0205,
                        format!("the spec has a second `{kw}` line"),
                        stmt.keyword,
                    )
                    .label("second one")
                    .with_secondary(prev, "first one")
                    .with_help(format!("a spec has at most one `{kw}` line; remove one")),
                );
                continue;
            }
            first.push((section, stmt.keyword));
        }
        match latest {
            Some((later, at)) if section < later => {
                diags.push(
                    Diagnostic::error(
                        Code::S0206,
                        format!("the `{kw}` line comes after the `{}` line", later.keyword()),
                        stmt.keyword,
                    )
                    .label("out of order")
                    .with_secondary(at, format!("`{}` is here", later.keyword()))
                    .with_help(format!(
                        "move it above the `{}` line; the order is {}",
                        later.keyword(),
                        Section::ALL.map(Section::keyword).join(", ")
                    )),
                );
            }
            _ => latest = Some((section, stmt.keyword)),
        }
        match &stmt.item {
            Item::Model { name } => parts.model = Some(name),
            Item::Scalar { kind } => parts.scalar = Some(kind),
            Item::Input {
                name,
                shape,
                standardize,
                unscaled,
            } => {
                parts.input = Some(InputPart {
                    name,
                    shape,
                    standardize: standardize.is_some(),
                    unscaled: unscaled.is_some(),
                })
            }
            Item::Layer(layer) => parts.layers.push(layer),
            Item::Output { layer, classes } => {
                parts.output = Some(OutputPart {
                    layer,
                    classes: classes.as_ref(),
                })
            }
            Item::Loss { kind } => parts.loss = Some(kind),
            Item::Penalty { kind } => parts.penalty = Some(kind),
            Item::Init { kind, seed } => parts.init = Some((kind, seed.as_ref())),
            Item::Train {
                optimizer,
                batch,
                epochs,
            } => {
                parts.train = Some(TrainPart {
                    optimizer,
                    batch: batch.as_ref(),
                    epochs: epochs.as_ref(),
                })
            }
            Item::Budget {
                flash,
                ram,
                train_ram,
            } => {
                parts.budget = Some(BudgetPart {
                    flash: flash.as_ref(),
                    ram: ram.as_ref(),
                    train_ram: train_ram.as_ref(),
                })
            }
            Item::Invalid { .. } => {}
        }
    }

    let model_at = first
        .iter()
        .find(|(s, _)| *s == Section::Model)
        .map(|&(_, at)| at);
    let first_statement = spec.statements.first().map(|s| s.keyword);
    let anchor = model_at.or(first_statement).unwrap_or_default();
    let missing = [
        (Section::Model, Code::S0201, "add `model NAME` as the first line, e.g. `model pump_health`"),
        (Section::Input, Code::S0202, "add `input NAME WIDTH` after the `model` line, e.g. `input features 6`"),
        (
            Section::Output,
            Code::S0203,
            "add `output NAME WIDTH ACTIVATION` after the last `layer` line, e.g. `output state 3 softmax`",
        ),
        (
            Section::Loss,
            Code::S0204,
            "add `loss cross_entropy` (for classes) or `loss squared_error` (for values) after the \
             `output` line",
        ),
    ];
    for (section, code, help) in missing {
        if first.iter().any(|(s, _)| *s == section) {
            continue;
        }
        let label = match (model_at, parts.model, first_statement) {
            (Some(_), Some(name), _) => {
                format!("model `{}` has no `{}` line", name.node, section.keyword())
            }
            (None, _, Some(_)) => "the spec starts here".to_string(),
            _ => String::new(),
        };
        diags.push(
            Diagnostic::error(
                code,
                format!("the spec has no `{}` line", section.keyword()),
                anchor,
            )
            .label(label)
            .with_help(help),
        );
    }
    parts
}

/// A model with every size and the scalar of the spec, for the memory figures only, while other
/// lines have errors: a setting that is missing or wrong takes its default (an activation, the
/// identity; the loss, squared error). `None` when a size is unknown or there is no budget.
fn provisional(
    parts: &Parts<'_>,
    widths: &shapes::Widths,
    activations: &[Option<ir::Activation>],
    settings: &shapes::Settings,
    budget: Option<ir::Budget>,
) -> Option<ir::Model> {
    parts.budget?;
    let input = parts.input?;
    // Figures only for a model within the limits (a larger one is an error already, and its
    // byte counts could overflow).
    let total: u128 = widths
        .layers
        .iter()
        .flatten()
        .map(|r| (r.width as u128) * (r.fan_in as u128) + r.width as u128)
        .sum();
    if total > shapes::MAX_PARAMETERS {
        return None;
    }
    let identity = |i: usize| {
        Some(
            activations
                .get(i)
                .copied()
                .flatten()
                .unwrap_or(ir::Activation::Identity),
        )
    };
    let (layers, scalar) = assemble(parts, widths, identity)?;
    Some(ir::Model {
        name: parts
            .model
            .map_or_else(|| "model".to_string(), |m| m.node.clone()),
        scalar,
        input: ir::Input {
            name: input.name.node.clone(),
            width: widths.input?.len(),
            shape: widths.input?,
            standardize: input.standardize,
        },
        layers,
        classes: None,
        loss: ir::Loss::SquaredError,
        penalty: settings.penalty.unwrap_or(ir::defaults::PENALTY),
        init: settings.init.unwrap_or(ir::defaults::INIT),
        seed: settings.seed.unwrap_or(ir::defaults::SEED),
        train: settings.train.unwrap_or(ir::defaults::TRAIN),
        budget: budget?,
    })
}

/// The layers (sizes from `widths`, activation `i` from `activation(i)`) and the scalar; `None`
/// when a size or an activation is unknown.
fn assemble(
    parts: &Parts<'_>,
    widths: &shapes::Widths,
    activation: impl Fn(usize) -> Option<ir::Activation>,
) -> Option<(Vec<ir::Layer>, ir::Scalar)> {
    let output = parts.output?;
    let decls = parts
        .layers
        .iter()
        .copied()
        .chain(std::iter::once(output.layer));
    let mut layers = Vec::new();
    for (i, (decl, r)) in decls.zip(&widths.layers).enumerate() {
        let r = (*r)?;
        layers.push(ir::Layer {
            name: decl.name.node.clone(),
            kind: r.kind,
            width: r.width,
            fan_in: r.fan_in,
            input: r.input,
            output: r.output,
            activation: activation(i)?,
        });
    }
    let scalar = match parts.scalar.map(|s| s.node) {
        Some(ScalarKind::F32) => ir::Scalar::F32,
        Some(ScalarKind::F64) => ir::Scalar::F64,
        None => ir::defaults::SCALAR,
    };
    Some((layers, scalar))
}

/// Assembles the model once every check has passed.
fn build(
    parts: &Parts<'_>,
    widths: &shapes::Widths,
    activations: &[Option<ir::Activation>],
    settings: &shapes::Settings,
    budget: Option<ir::Budget>,
) -> Option<ir::Model> {
    let input = parts.input?;
    let output = parts.output?;
    let (layers, scalar) = assemble(parts, widths, |i| activations.get(i).copied().flatten())?;
    let loss = match parts.loss?.node {
        LossKind::CrossEntropy => ir::Loss::CrossEntropy,
        LossKind::SquaredError => ir::Loss::SquaredError,
    };
    Some(ir::Model {
        name: parts.model?.node.clone(),
        scalar,
        input: ir::Input {
            name: input.name.node.clone(),
            width: widths.input?.len(),
            shape: widths.input?,
            standardize: input.standardize,
        },
        layers,
        classes: output
            .classes
            .map(|c| c.names.iter().map(|n| n.node.clone()).collect()),
        loss,
        penalty: settings.penalty?,
        init: settings.init?,
        seed: settings.seed?,
        train: settings.train?,
        budget: budget?,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn codes(src: &str) -> Vec<Code> {
        check_source(src)
            .diagnostics
            .iter()
            .map(|d| d.code)
            .collect()
    }

    const OK: &str = "model m\ninput x 2 unscaled\noutput y 1 sigmoid\nloss cross_entropy\n";

    #[test]
    fn a_budget_error_is_reported_with_the_others() {
        // Two unrelated errors (a layer name used twice, a bad rate) and a flash budget far
        // below the model's parameters: all three are reported in one run.
        let src =
            "model m\ninput x 2 unscaled\nlayer h 16 relu\nlayer h 4 relu\noutput y 1 sigmoid\n\
                   loss cross_entropy\ntrain sgd rate -1\nbudget flash 8 B\n";
        let found = codes(src);
        assert!(found.contains(&Code::S0701), "{found:?}");
        assert!(found.len() >= 3, "{found:?}");
    }

    #[test]
    fn a_minimal_spec_is_clean() {
        let checked = check_source(OK);
        assert!(checked.diagnostics.is_empty());
        let m = checked.model.expect("model");
        // 2 weights + 1 bias.
        assert_eq!((m.layers.len(), m.parameters()), (1, 3));
        assert_eq!(m.layers[0].fan_in, 2);
    }

    #[test]
    fn every_missing_required_section_is_reported() {
        assert_eq!(codes(""), ["S0201", "S0202", "S0203", "S0204"]);
        assert_eq!(codes("model m\n"), ["S0202", "S0203", "S0204"]);
    }

    #[test]
    fn a_misspelt_keyword_does_not_also_count_as_missing() {
        // `modle` is taken to be the `model` line, so S0201 would only be noise.
        assert_eq!(codes(&OK.replace("model m", "modle m")), ["S0101"]);
        assert_eq!(
            codes(&OK.replace("loss cross_entropy", "loss cross_entrpy")),
            [Code::S0103]
        );
    }

    #[test]
    fn duplicates_and_order() {
        assert_eq!(codes(&format!("{OK}loss squared_error\n")), ["S0205"]);
        assert_eq!(codes(&format!("{OK}scalar f64\n")), ["S0206"]);
        // Several hidden layers are fine; a layer after the output is not.
        let two = OK.replace("output", "layer a 3 relu\nlayer b 3 relu\noutput");
        assert!(codes(&two).is_empty());
        assert_eq!(codes(&format!("{OK}layer late 3 relu\n")), ["S0206"]);
    }

    #[test]
    fn warnings_keep_the_model() {
        let src = format!("{OK}penalty l2 0\n");
        let checked = check_source(&src);
        assert_eq!(checked.diagnostics.len(), 1);
        assert!(!checked.has_errors());
        assert!(checked.model.is_some());
    }

    #[test]
    fn a_byte_order_mark_is_ignored() {
        let src = format!("\u{feff}{OK}");
        assert!(check_source(&src).diagnostics.is_empty());
        let bad = format!("\u{feff}{}", OK.replace("sigmoid", "sigmod"));
        let d = &check_source(&bad).diagnostics[0];
        assert_eq!(&bad[d.primary.span.range()], "sigmod");
    }
}
