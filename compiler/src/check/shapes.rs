//! Sizes and numbers: widths (`S0401`, `S0402`), the total parameter count (`S0403`), and the
//! range of every numeric setting (`S06xx`), with the warnings about settings (`W0103`,
//! `W0104`). Defaults come from [`ir::defaults`] only.
//!
//! Numbers arrive as the text the user wrote. Whole numbers of any length are parsed without
//! overflow (a number too long for 64 bits is simply "too large"), and parameter counts use
//! 128-bit arithmetic.

use super::geometry::{self, Resolved};
use super::Parts;
use crate::diag::{Code, Diagnostic};
use crate::ir::{self, defaults};
use crate::syntax::ast::*;
use crate::text::quote;

/// The largest width of the input or a layer.
pub const MAX_WIDTH: u64 = super::geometry::MAX_WIDTH;

/// The largest total number of parameters: 16 Mi.
pub const MAX_PARAMETERS: u128 = 16 * 1024 * 1024;

/// Batches above this size draw a warning.
pub const LARGE_BATCH: u64 = 1024;

/// Resolved shapes; `None` where a size is invalid or depends on one that is.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Widths {
    /// The input's shape.
    pub input: Option<ir::Shape>,
    /// Each hidden layer's geometry in order, then the output's (when there is an output line).
    pub layers: Vec<Option<Resolved>>,
}

impl Widths {
    /// The output's width, if it is there and valid.
    pub fn output(&self, parts: &Parts<'_>) -> Option<usize> {
        parts.output?;
        self.layers.last().copied().flatten().map(|r| r.width)
    }
}

/// A whole number as written, or `None` when it does not fit in 64 bits.
pub(crate) fn whole(n: &Integer) -> Option<u64> {
    n.node.parse::<u64>().ok()
}

/// A number as written (decimal or exponent form); overflow gives an infinity.
fn real(n: &Number) -> f64 {
    n.node.parse::<f64>().unwrap_or(f64::NAN)
}

/// Checks every shape and the total parameter count.
pub(crate) fn widths(parts: &Parts<'_>, diags: &mut Vec<Diagnostic>) -> Widths {
    let input = parts
        .input
        .and_then(|i| geometry::input(&i.name.node, i.shape, diags));
    let decls: Vec<&LayerDecl> = parts
        .layers
        .iter()
        .copied()
        .chain(parts.output.map(|o| o.layer))
        .collect();
    let mut before = geometry::Before {
        shape: input,
        who: parts.input.map_or_else(
            || "the input".to_string(),
            |i| format!("input `{}`", i.name.node),
        ),
        at: parts.input.map_or_else(Default::default, |i| i.shape.span),
        decl: None,
        vector: parts.input.is_some_and(|i| i.shape.sizes.len() == 1),
    };
    let mut layers: Vec<Option<Resolved>> = Vec::new();
    for d in &decls {
        let r = geometry::layer(d, &before, diags);
        layers.push(r);
        before = geometry::Before {
            shape: r.map(|r| r.output),
            who: format!("layer `{}`", d.name.node),
            at: d.size_span(),
            decl: Some(d),
            vector: matches!(d.body, LayerBody::Dense { .. }),
        };
    }

    // Parameters: width * fan_in + width per layer, in u128 so that no sum can overflow.
    if layers.iter().all(Option::is_some) && !layers.is_empty() {
        let mut total: u128 = 0;
        let mut largest: Option<(u128, &LayerDecl)> = None;
        for (d, r) in decls.iter().zip(layers.iter().flatten()) {
            let p = (r.width as u128) * (r.fan_in as u128) + r.width as u128;
            total += p;
            if largest.is_none_or(|(q, _)| p > q) {
                largest = Some((p, d));
            }
        }
        if let (true, Some((p, d))) = (total > MAX_PARAMETERS, largest) {
            diags.push(
                Diagnostic::error(
                    Code::S0403,
                    format!(
                        "the model has {total} parameters, above the limit of {MAX_PARAMETERS} (16 Mi)"
                    ),
                    d.size_span(),
                )
                .label(format!("layer `{}` alone has {p} parameters", d.name.node))
                .with_help("make the largest layers narrower"),
            );
        }
    }
    Widths { input, layers }
}

/// Resolves every activation (`S0605` for the slope of `leaky_relu`); hidden layers first, then
/// the output, as in [`Widths::layers`].
pub(crate) fn activations(
    parts: &Parts<'_>,
    diags: &mut Vec<Diagnostic>,
) -> Vec<Option<ir::Activation>> {
    let decls = parts
        .layers
        .iter()
        .copied()
        .chain(parts.output.map(|o| o.layer));
    decls
        .map(|d| match &d.activation.node {
            ActivationKind::Identity => Some(ir::Activation::Identity),
            ActivationKind::Sigmoid => Some(ir::Activation::Sigmoid),
            ActivationKind::Tanh => Some(ir::Activation::Tanh),
            ActivationKind::Relu => Some(ir::Activation::Relu),
            ActivationKind::Softmax => Some(ir::Activation::Softmax),
            ActivationKind::LeakyRelu { alpha } => {
                let a = real(alpha);
                if (0.0..1.0).contains(&a) {
                    Some(ir::Activation::LeakyRelu(a))
                } else {
                    diags.push(
                        Diagnostic::error(
                            Code::S0605,
                            format!("leaky_relu slope {} is outside [0, 1)", quote(&alpha.node)),
                            alpha.span,
                        )
                        .label("not in [0, 1)")
                        .with_help(
                            "use a small slope from 0 up to but not including 1, such as `0.01`",
                        ),
                    );
                    None
                }
            }
        })
        .collect()
}

/// Resolved settings; `None` where a value is invalid. Absent sections take their defaults.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Settings {
    pub penalty: Option<ir::Penalty>,
    pub init: Option<ir::Init>,
    pub seed: Option<u64>,
    pub train: Option<ir::Train>,
}

/// How to report a number outside its range.
struct Range<'a> {
    code: Code,
    /// What the number is, e.g. "learning rate".
    what: &'a str,
    /// The fact when it is finite but out of range, e.g. "is outside [0, 1)".
    fact: &'a str,
    /// The primary label.
    label: &'a str,
    /// The fix.
    help: &'a str,
}

/// Checks one number against a range; `fits` says whether a finite value is acceptable.
fn ranged(
    n: &Number,
    fits: impl Fn(f64) -> bool,
    r: Range<'_>,
    diags: &mut Vec<Diagnostic>,
) -> Option<f64> {
    let v = real(n);
    if v.is_finite() && fits(v) {
        return Some(v);
    }
    let q = quote(&n.node);
    let d = if v.is_finite() {
        Diagnostic::error(r.code, format!("{} {q} {}", r.what, r.fact), n.span).label(r.label)
    } else {
        Diagnostic::error(
            r.code,
            format!("{} {q} is not a finite number", r.what),
            n.span,
        )
        .label("too large for a 64-bit float")
    };
    diags.push(d.with_help(r.help));
    None
}

fn count(n: &Integer, what: &str, least: &str, diags: &mut Vec<Diagnostic>) -> Option<u32> {
    match whole(n) {
        Some(0) => {
            diags.push(
                Diagnostic::error(Code::S0607, format!("{what} is 0"), n.span)
                    .label("must be at least 1")
                    .with_help(format!("use at least {least}")),
            );
            None
        }
        Some(v) if v <= u64::from(u32::MAX) => u32::try_from(v).ok(),
        _ => {
            diags.push(
                Diagnostic::error(
                    Code::S0608,
                    format!(
                        "{what} {} is above the limit of {}",
                        quote(&n.node),
                        u32::MAX
                    ),
                    n.span,
                )
                .label("too large")
                .with_help(format!("use at most {}", u32::MAX)),
            );
            None
        }
    }
}

/// Checks penalty, init, seed and train settings.
pub(crate) fn settings(parts: &Parts<'_>, diags: &mut Vec<Diagnostic>) -> Settings {
    let penalty = match parts.penalty.map(|p| &p.node) {
        None => Some(defaults::PENALTY),
        Some(PenaltyKind::None) => Some(ir::Penalty::None),
        Some(PenaltyKind::L2 { lambda } | PenaltyKind::L1 { lambda }) => {
            let l2 = matches!(parts.penalty.map(|p| &p.node), Some(PenaltyKind::L2 { .. }));
            let range = Range {
                code: Code::S0601,
                what: "penalty strength",
                fact: "is negative",
                label: "must be 0 or more",
                help: "use a finite strength of 0 or more, such as `0.01`",
            };
            let v = ranged(lambda, |v| v >= 0.0, range, diags);
            if v == Some(0.0) {
                diags.push(
                    Diagnostic::warning(
                        Code::W0104,
                        "a penalty of strength 0 has no effect",
                        lambda.span,
                    )
                    .label("strength 0")
                    .with_help("write `penalty none`, or give a positive strength"),
                );
            }
            v.map(|v| {
                if l2 {
                    ir::Penalty::L2(v)
                } else {
                    ir::Penalty::L1(v)
                }
            })
        }
    };

    let (init, seed) = match parts.init {
        None => (Some(defaults::INIT), Some(defaults::SEED)),
        Some((kind, seed)) => {
            let init = match &kind.node {
                InitKind::Glorot => Some(ir::Init::Glorot),
                InitKind::He => Some(ir::Init::He),
                InitKind::Uniform { eps } => {
                    let range = Range {
                        code: Code::S0606,
                        what: "uniform half-width",
                        fact: "is not above 0",
                        label: "must be above 0",
                        help: "use a positive half-width such as `0.5`",
                    };
                    ranged(eps, |v| v > 0.0, range, diags)
                }
                .map(|eps| ir::Init::Uniform { eps }),
            };
            let seed = match seed {
                None => Some(defaults::SEED),
                Some(s) => {
                    let v = whole(s);
                    if v.is_none() {
                        diags.push(
                            Diagnostic::error(
                                Code::S0609,
                                format!(
                                    "seed {} is above the limit of {}",
                                    quote(&s.node),
                                    u64::MAX
                                ),
                                s.span,
                            )
                            .label("does not fit in 64 bits")
                            .with_help(format!("use a seed from 0 to {}", u64::MAX)),
                        );
                    }
                    v
                }
            };
            (init, seed)
        }
    };

    let train = match parts.train {
        None => Some(defaults::TRAIN),
        Some(t) => {
            let rate_check = |rate: &Number, diags: &mut Vec<Diagnostic>| {
                let range = Range {
                    code: Code::S0602,
                    what: "learning rate",
                    fact: "is not above 0",
                    label: "must be above 0",
                    help: "use a positive rate such as `0.01`",
                };
                ranged(rate, |v| v > 0.0, range, diags)
            };
            let optimizer = match &t.optimizer.node {
                OptimizerKind::Sgd { rate, momentum } => {
                    let rate = rate_check(rate, diags);
                    let momentum = match momentum {
                        None => Some(defaults::MOMENTUM),
                        Some(m) => {
                            let range = Range {
                                code: Code::S0603,
                                what: "momentum",
                                fact: "is outside [0, 1)",
                                label: "not in [0, 1)",
                                help:
                                    "use a momentum from 0 up to but not including 1, such as `0.9`",
                            };
                            ranged(m, |v| (0.0..1.0).contains(&v), range, diags)
                        }
                    };
                    match (rate, momentum) {
                        (Some(rate), Some(momentum)) => Some(ir::Optimizer::Sgd { rate, momentum }),
                        _ => None,
                    }
                }
                OptimizerKind::Adam { rate, beta1, beta2 } => {
                    let rate = rate_check(rate, diags);
                    let mut beta =
                        |b: &Option<Number>, name: &str, help: &str, default: f64| match b {
                            None => Some(default),
                            Some(b) => {
                                let range = Range {
                                    code: Code::S0604,
                                    what: name,
                                    fact: "is outside (0, 1)",
                                    label: "not in (0, 1)",
                                    help,
                                };
                                ranged(b, |v| v > 0.0 && v < 1.0, range, diags)
                            }
                        };
                    let usual = |name: &str, v: f64| {
                        format!("Adam's decay rates lie strictly between 0 and 1; the usual {name} is {v}")
                    };
                    let b1 = beta(
                        beta1,
                        "beta1",
                        &usual("beta1", defaults::BETA1),
                        defaults::BETA1,
                    );
                    let b2 = beta(
                        beta2,
                        "beta2",
                        &usual("beta2", defaults::BETA2),
                        defaults::BETA2,
                    );
                    match (rate, b1, b2) {
                        (Some(rate), Some(beta1), Some(beta2)) => Some(ir::Optimizer::Adam {
                            rate,
                            beta1,
                            beta2,
                            epsilon: defaults::ADAM_EPSILON,
                        }),
                        _ => None,
                    }
                }
            };
            let batch = match t.batch {
                None => Some(defaults::TRAIN.batch),
                Some(b) => {
                    let v = count(b, "batch size", "1 sample per batch", diags);
                    if let Some(v) = v.filter(|&v| u64::from(v) > LARGE_BATCH) {
                        diags.push(
                            Diagnostic::warning(
                                Code::W0103,
                                format!("batch size {v} is larger than {LARGE_BATCH}"),
                                b.span,
                            )
                            .label("large batch")
                            .with_help(
                                "each optimizer step averages the whole batch, so an epoch takes few \
                                 steps; batches of 8 to 256 samples are common for small networks",
                            ),
                        );
                    }
                    v
                }
            };
            let epochs = match t.epochs {
                None => Some(defaults::TRAIN.epochs),
                Some(e) => count(e, "number of epochs", "1 epoch", diags),
            };
            match (optimizer, batch, epochs) {
                (Some(optimizer), Some(batch), Some(epochs)) => Some(ir::Train {
                    optimizer,
                    batch,
                    epochs,
                }),
                _ => None,
            }
        }
    };
    Settings {
        penalty,
        init,
        seed,
        train,
    }
}

#[cfg(test)]
mod tests {
    use crate::check_source;
    use crate::diag::Code;

    fn codes(src: &str) -> Vec<Code> {
        check_source(src)
            .diagnostics
            .iter()
            .map(|d| d.code)
            .collect()
    }

    fn net(input: &str, output: &str) -> String {
        format!(
            "model m\ninput x {input} unscaled\noutput y {output} identity\nloss squared_error\n"
        )
    }

    #[test]
    fn widths_from_1_to_65535() {
        assert!(codes(&net("1", "1")).is_empty());
        assert!(codes(&net("65535", "1")).is_empty());
        assert_eq!(codes(&net("65536", "1")), ["S0402"]);
        assert_eq!(codes(&net("0", "1")), ["S0401"]);
        // Far beyond 64 bits: no overflow, just "too wide".
        assert_eq!(codes(&net(&"9".repeat(60), "1")), ["S0402"]);
    }

    #[test]
    fn parameter_limit_is_16_mi() {
        // 4095 inputs, 4096 outputs: 4096 * 4095 weights + 4096 biases = 4096^2 = 16777216,
        // exactly the limit.
        assert!(codes(&net("4095", "4096")).is_empty());
        // One more input: 4096 * 4096 + 4096 = 16781312 > 16777216.
        assert_eq!(codes(&net("4096", "4096")), ["S0403"]);
    }

    #[test]
    fn parameter_count_uses_wide_arithmetic() {
        // Every width at the maximum: 65535 * 65535 + 65535 per layer, about 4.3e9 each; the
        // sum over many layers does not overflow.
        let mut src = String::from("model m\ninput x 65535 unscaled\n");
        for i in 0..50 {
            src.push_str(&format!("layer h{i} 65535 relu\n"));
        }
        src.push_str("output y 65535 identity\nloss squared_error\n");
        assert_eq!(codes(&src), ["S0403"]);
    }

    #[test]
    fn number_ranges() {
        let base = net("2", "1");
        let with = |line: &str| codes(&format!("{base}{line}\n"));
        assert!(with("train sgd rate 1e-3 momentum 0").is_empty());
        assert_eq!(with("train sgd rate -1e-3"), ["S0602"]);
        assert_eq!(with("train sgd rate 1e-400"), ["S0602"]); // underflows to 0
        assert_eq!(with("train sgd rate 0.1 momentum -0.1"), ["S0603"]);
        assert!(with("train adam rate 0.1 beta1 0.5 beta2 0.5").is_empty());
        assert_eq!(
            with("train adam rate 0.1 beta1 0 beta2 1"),
            [Code::S0604, Code::S0604]
        );
        assert_eq!(with("penalty l1 1e400"), ["S0601"]);
        assert_eq!(with("init uniform -1"), ["S0606"]);
        assert!(with("init he seed 18446744073709551615").is_empty());
        assert_eq!(with("init he seed 18446744073709551616"), ["S0609"]);
        assert!(with("train sgd rate 1 batch 4294967295 epochs 1").len() == 1); // W0103
        assert_eq!(with("train sgd rate 1 epochs 4294967296"), ["S0608"]);
    }
}
