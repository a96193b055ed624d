//! Compatibility of layers, output and loss (`S05xx`), and the warnings about legal but
//! suspicious architectures (`W0101`, `W0102`) and about inputs fed without scaling (`W0105`).

use super::shapes::Widths;
use super::Parts;
use crate::diag::{Code, Diagnostic};
use crate::span::Span;
use crate::syntax::ast::*;

/// Sigmoid hidden layers in a row beyond this count draw a warning.
pub const SIGMOID_RUN: usize = 4;

fn act_word(a: &ActivationKind) -> &'static str {
    match a {
        ActivationKind::Identity => "identity",
        ActivationKind::Sigmoid => "sigmoid",
        ActivationKind::Tanh => "tanh",
        ActivationKind::Relu => "relu",
        ActivationKind::LeakyRelu { .. } => "leaky_relu",
        ActivationKind::Softmax => "softmax",
    }
}

/// Checks softmax placement, the loss against the output activation, and the classes list.
pub(crate) fn check(parts: &Parts<'_>, widths: &Widths, diags: &mut Vec<Diagnostic>) {
    if let Some(input) = &parts.input {
        if !input.standardize && !input.unscaled {
            diags.push(
                Diagnostic::warning(
                    Code::W0105,
                    format!(
                        "input `{}` is fed to the network without scaling",
                        input.name.node
                    ),
                    Span::new(input.name.span.start, input.shape.span.end),
                )
                .label("neither `standardize` nor `unscaled`")
                .with_help(
                    "features on very different scales slow training and can leave a model \
                     predicting the majority class; add `standardize` (the model then scales \
                     each feature by the training data's mean and standard deviation), or \
                     `unscaled` when the features are already on comparable scales",
                ),
            );
        }
    }
    for layer in &parts.layers {
        if layer.activation.node == ActivationKind::Softmax {
            diags.push(
                Diagnostic::error(
                    Code::S0501,
                    format!("hidden layer `{}` uses softmax", layer.name.node),
                    layer.activation.span,
                )
                .label("softmax on a hidden layer")
                .with_help(
                    "softmax is for the `output` line only; hidden layers usually use `relu`, \
                     `tanh` or `sigmoid`",
                ),
            );
        }
    }

    // W0102: a long run of sigmoid hidden layers.
    let mut run: Option<(usize, &LayerDecl)> = None;
    for layer in &parts.layers {
        if layer.activation.node == ActivationKind::Sigmoid {
            let (n, start) = match run {
                Some((n, start)) => (n + 1, start),
                None => (1, *layer),
            };
            if n == SIGMOID_RUN + 1 {
                diags.push(
                    Diagnostic::warning(
                        Code::W0102,
                        format!("more than {SIGMOID_RUN} sigmoid hidden layers in a row"),
                        layer.activation.span,
                    )
                    .label(format!("sigmoid layer number {n} in a row"))
                    .with_secondary(start.activation.span, "the run starts here")
                    .with_help(
                        "the error shrinks by a factor of at most 1/4 through each sigmoid layer, \
                         so the first layers barely learn; consider `relu` or `tanh`",
                    ),
                );
            }
            run = Some((n, start));
        } else {
            run = None;
        }
    }

    let Some(output) = parts.output else { return };
    let out = output.layer;
    let out_width = widths.output(parts);
    let is_sigmoid = out.activation.node == ActivationKind::Sigmoid;
    let is_softmax = out.activation.node == ActivationKind::Softmax;

    if is_softmax && out_width == Some(1) {
        diags.push(
            Diagnostic::error(
                Code::S0502,
                format!("softmax output `{}` has 1 unit", out.name.node),
                out.size_span(),
            )
            .label("softmax needs at least 2 units")
            .with_secondary(out.activation.span, "softmax here")
            .with_help(
                "for a yes/no output use one `sigmoid` unit (with `loss cross_entropy`), or \
                     give softmax one unit per class",
            ),
        );
    }

    let loss = parts.loss;
    if let Some(loss) = loss {
        match loss.node {
            LossKind::CrossEntropy if !is_sigmoid && !is_softmax => diags.push(
                Diagnostic::error(
                    Code::S0503,
                    format!(
                        "cross_entropy needs a sigmoid or softmax output, but output `{}` uses {}",
                        out.name.node,
                        act_word(&out.activation.node)
                    ),
                    loss.span,
                )
                .label("cross_entropy")
                .with_secondary(
                    out.activation.span,
                    format!("output `{}` uses this", out.name.node),
                )
                .with_help(
                    "use `softmax` for one class out of several, `sigmoid` for independent yes/no \
                     outputs, or `loss squared_error` to predict values",
                ),
            ),
            LossKind::SquaredError if is_softmax => diags.push(
                Diagnostic::warning(
                    Code::W0101,
                    "squared_error with a softmax output",
                    loss.span,
                )
                .label("squared_error")
                .with_secondary(out.activation.span, "softmax output")
                .with_help(
                    "squared_error through softmax learns slowly when the output is confidently \
                         wrong; `loss cross_entropy` is the usual choice for classes",
                ),
            ),
            _ => {}
        }
    }

    let Some(classes) = output.classes else {
        return;
    };
    if let Some(loss) = loss.filter(|l| l.node == LossKind::SquaredError) {
        diags.push(
            Diagnostic::error(
                Code::S0505,
                format!(
                    "output `{}` lists classes, but the loss is squared_error",
                    out.name.node
                ),
                classes.span,
            )
            .label("classes")
            .with_secondary(loss.span, "this loss predicts values, not classes")
            .with_help(
                "remove `classes`, or use `loss cross_entropy` with a sigmoid or softmax output",
            ),
        );
        return;
    }
    if !is_sigmoid && !is_softmax {
        diags.push(
            Diagnostic::error(
                Code::S0505,
                format!(
                    "output `{}` lists classes, but its activation does not classify",
                    out.name.node
                ),
                classes.span,
            )
            .label("classes")
            .with_secondary(out.activation.span, "this output predicts values")
            .with_help(
                "remove `classes`, or make the output `sigmoid` or `softmax` with `loss \
                 cross_entropy`",
            ),
        );
        return;
    }
    let Some(width) = out_width else { return };
    let found = classes.names.len();
    let one_sigmoid = width == 1 && is_sigmoid;
    let expected = if one_sigmoid { 2 } else { width };
    if found != expected {
        let (secondary, help) = if one_sigmoid {
            (
                format!("output `{}` has 1 sigmoid unit", out.name.node),
                "a one-unit sigmoid output takes exactly 2 class names: the negative class, then \
                 the positive one"
                    .to_string(),
            )
        } else {
            let units = if width == 1 { "unit" } else { "units" };
            (
                format!("output `{}` has {width} {units} here", out.name.node),
                if found >= 1 && !(is_softmax && found < 2) {
                    format!(
                        "list one class name per output unit ({width}), or change the width to \
                         {found}"
                    )
                } else {
                    format!("list one class name per output unit ({width})")
                },
            )
        };
        diags.push(
            Diagnostic::error(
                Code::S0504,
                format!(
                    "expected {expected} class {}, found {found}",
                    if expected == 1 { "name" } else { "names" }
                ),
                classes.span,
            )
            .label(format!(
                "{found} {}",
                if found == 1 { "name" } else { "names" }
            ))
            .with_secondary(out.size_span(), secondary)
            .with_help(help),
        );
    }
}

#[cfg(test)]
mod tests {
    use crate::check_source;
    use crate::diag::Code;

    fn codes(output: &str, loss: &str) -> Vec<Code> {
        let src = format!("model m\ninput x 4 unscaled\n{output}\nloss {loss}\n");
        check_source(&src)
            .diagnostics
            .iter()
            .map(|d| d.code)
            .collect()
    }

    #[test]
    fn loss_and_output_pairs() {
        for act in ["sigmoid", "softmax"] {
            assert!(
                codes(&format!("output y 3 {act}"), "cross_entropy").is_empty(),
                "{act}"
            );
        }
        for act in ["identity", "tanh", "relu", "leaky_relu 0.1"] {
            assert_eq!(
                codes(&format!("output y 3 {act}"), "cross_entropy"),
                [Code::S0503],
                "{act}"
            );
            assert!(
                codes(&format!("output y 3 {act}"), "squared_error").is_empty(),
                "{act}"
            );
        }
        assert_eq!(codes("output y 3 softmax", "squared_error"), ["W0101"]);
        assert_eq!(codes("output y 1 softmax", "cross_entropy"), ["S0502"]);
    }

    #[test]
    fn class_counts() {
        let ok = |o: &str| assert!(codes(o, "cross_entropy").is_empty(), "{o}");
        let bad = |o: &str| assert_eq!(codes(o, "cross_entropy"), ["S0504"], "{o}");
        ok("output y 2 softmax classes a, b");
        ok("output y 1 sigmoid classes no, yes");
        ok("output y 3 sigmoid classes a, b, c");
        bad("output y 1 sigmoid classes yes");
        bad("output y 1 sigmoid classes a, b, c");
        bad("output y 2 sigmoid classes a, b, c");
        bad("output y 3 softmax classes a, b");
        assert_eq!(
            codes("output y 2 identity classes a, b", "squared_error"),
            [Code::S0505]
        );
    }
}
