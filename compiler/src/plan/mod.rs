//! The execution plan: the checked [`Model`] lowered once into what the back ends run.
//!
//! [`Plan::new`] resolves the output [`Head`] (the only place the pair loss and output
//! activation is matched), lists the working [`Buffer`]s with their widths, and writes each pass
//! as an ordered list of runtime kernel calls ([`Step`]) with their operands:
//!
//! - [`Plan::inference`]: the input to the output activations;
//! - [`Plan::loss`]: the input to one sample's loss;
//! - [`Plan::backprop`]: the input to the loss, the error terms and the gradient accumulation of
//!   one sample. The batch gradient runs the same steps over a block of samples (each kernel in
//!   its batch form, which gives the per-sample bits sample by sample), then [`Plan::params`]
//!   finishes the sums;
//! - [`Plan::update`] over [`Plan::params`]: the optimizer step.
//!
//! `emit` renders each step as Rust source, `engine` executes it on slices; both walk the same
//! list, so they make the same runtime calls in the same order, and the runtime kernels fix the
//! order of every addition (`sinew_runtime::reference`). A new layer kind or number form is one
//! new step variant here, then one arm in each back end.
//!
//! Invariants (from `check`'s guarantees on the model): a step reads only buffers written by an
//! earlier step of its pass or the pass's operands ([`Buf::Input`], [`Buf::Target`]); every
//! layer index names a layer of the model; steps for the identity activation are left out.

use crate::ir::{Activation, LayerKind, Loss, Model, Optimizer, PoolOp};

/// The output layer's activation and the loss, resolved together.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Head {
    /// Softmax outputs with categorical cross-entropy `sum_j y_j (lse(z) - z_j)` from the logits.
    /// In backprop the outputs and the loss come from one kernel that shares the exponentials
    /// (the same bits as the two separate kernels). Output error `a - y`.
    SoftmaxCrossEntropy,
    /// Sigmoid outputs with per-unit logistic cross-entropy `sum_j softplus(z_j) - y_j z_j` from
    /// the logits. Output error `a - y`.
    Logistic,
    /// Squared error `1/2 sum_j (a_j - y_j)^2` on the outputs of the activation. Output error
    /// `(a - y) .* g'(z)`.
    SquaredError(Activation),
}

impl Head {
    /// The head of `model`. `check` admits cross-entropy only on a sigmoid or softmax output, so
    /// every cross-entropy output that is not softmax is the logistic head.
    pub fn of(model: &Model) -> Head {
        match (model.loss, model.output().activation) {
            (Loss::CrossEntropy, Activation::Softmax) => Head::SoftmaxCrossEntropy,
            (Loss::CrossEntropy, _) => Head::Logistic,
            (Loss::SquaredError, act) => Head::SquaredError(act),
        }
    }

    /// The output layer's activation.
    pub fn activation(self) -> Activation {
        match self {
            Head::SoftmaxCrossEntropy => Activation::Softmax,
            Head::Logistic => Activation::Sigmoid,
            Head::SquaredError(act) => act,
        }
    }

    /// The buffer the loss reads: the logits for cross-entropy, the outputs for squared error.
    pub fn loss_operand(self, output: usize) -> Buf {
        match self {
            Head::SquaredError(_) => Buf::Act(output),
            _ => Buf::Logits,
        }
    }

    /// One line for docs: the loss and where it is computed from.
    pub fn words(self) -> &'static str {
        match self {
            Head::SoftmaxCrossEntropy => "categorical cross-entropy, from the logits",
            Head::Logistic => "per-unit logistic cross-entropy, from the logits",
            Head::SquaredError(_) => "squared error, 1/2 sum (a - y)^2",
        }
    }
}

/// A working buffer of one sample (a row of a block, in the batch forms), or an operand.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Buf {
    /// The sample's input `x` (an operand, read only).
    Input,
    /// The sample's target `y` (an operand, read only).
    Target,
    /// The standardized input `(x - mean) / std`.
    Standardized,
    /// The activations of layer `l` (for the output layer: the network's outputs).
    Act(usize),
    /// The output layer's logits `z`, kept for the loss.
    Logits,
    /// The error terms `delta` of layer `l`.
    Err(usize),
}

/// A working buffer and its width (values per sample).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Buffer {
    /// Which buffer.
    pub buf: Buf,
    /// Values per sample.
    pub width: usize,
}

/// The kernel family of a sliding-window layer (`rt::conv::*`), with the layer's
/// `ir::Window` giving its geometry.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum WindowOp {
    /// Convolution with `F` filters: `z[p][f] = (sum over taps inside, channels: W[f][tap][c]
    /// a[p + tap][c]) + b[f]`, one running sum in index order.
    Conv,
    /// Depthwise convolution: `z[p][c] = (sum over taps inside: W[c][tap] a[p + tap][c]) + b[c]`.
    Depthwise,
    /// Max pooling; the gradient goes to the first maximal element in scan order.
    MaxPool,
    /// Average pooling: the sum in scan order divided by the number of taps.
    AveragePool,
}

impl WindowOp {
    /// The kernel family of a layer kind (`None` for dense).
    pub fn of(kind: &LayerKind) -> Option<WindowOp> {
        Some(match kind {
            LayerKind::Dense => return None,
            LayerKind::Conv { .. } => WindowOp::Conv,
            LayerKind::Depthwise { .. } => WindowOp::Depthwise,
            LayerKind::Pool {
                op: PoolOp::Max, ..
            } => WindowOp::MaxPool,
            LayerKind::Pool {
                op: PoolOp::Average,
                ..
            } => WindowOp::AveragePool,
        })
    }

    /// True when the layer has weights and biases.
    pub fn has_params(self) -> bool {
        matches!(self, WindowOp::Conv | WindowOp::Depthwise)
    }

    /// The runtime kernel's name in `rt::conv`: forward, accumulation (with parameters) and
    /// backward.
    pub fn kernels(self) -> (&'static str, Option<&'static str>, &'static str) {
        match self {
            WindowOp::Conv => ("conv", Some("conv_acc"), "conv_back"),
            WindowOp::Depthwise => ("depthwise", Some("depthwise_acc"), "depthwise_back"),
            WindowOp::MaxPool => ("pool_max", None, "pool_max_back"),
            WindowOp::AveragePool => ("pool_average", None, "pool_average_back"),
        }
    }
}

/// One runtime kernel call with its operands.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Step {
    /// `to = (from - mean) / std`, element by element (`rt::standardize`).
    Standardize {
        /// The raw input.
        from: Buf,
        /// The standardized copy.
        to: Buf,
    },
    /// `out = W(layer) input + b(layer)` (`rt::affine`; each sum in the lane order).
    Affine {
        /// Layer index.
        layer: usize,
        /// Its input (fan-in values).
        input: Buf,
        /// Its output (width values).
        out: Buf,
    },
    /// A sliding-window layer's forward pass (`rt::conv::<op>`): `out` from `input` (and the
    /// layer's weights and biases for a convolution).
    Window {
        /// Layer index.
        layer: usize,
        /// The kernel family.
        op: WindowOp,
        /// Its input map.
        input: Buf,
        /// Its output map.
        out: Buf,
    },
    /// A convolution's gradient terms of one sample (`rt::conv::<op>_acc`): weights and biases
    /// from the layer's errors and input.
    WindowAcc {
        /// Layer index.
        layer: usize,
        /// `Conv` or `Depthwise`.
        op: WindowOp,
        /// The layer's errors.
        err: Buf,
        /// The layer's input.
        input: Buf,
    },
    /// A sliding-window layer's errors sent one map down (`rt::conv::<op>_back`), before `g'`:
    /// `out` is set, every element.
    WindowBack {
        /// Layer index (at least 1).
        layer: usize,
        /// The kernel family.
        op: WindowOp,
        /// The layer's input (max pooling finds its maxima there).
        input: Buf,
        /// The layer's errors.
        err: Buf,
        /// The errors of the layer below.
        out: Buf,
    },
    /// `to = from` (the outputs start as a copy of the logits).
    Copy {
        /// Source.
        from: Buf,
        /// Destination, of the same width.
        to: Buf,
    },
    /// `buf = g(buf)` in place (`rt::act::*`). Never the identity.
    Activate {
        /// The activation.
        act: Activation,
        /// The buffer.
        buf: Buf,
    },
    /// `out = softmax(logits)` and the sample's loss `sum_j y_j (lse(z) - z_j)` from one kernel
    /// (`rt::loss::softmax_with_cross_entropy`).
    SoftmaxWithLoss {
        /// The logits.
        logits: Buf,
        /// The outputs.
        out: Buf,
    },
    /// The sample's loss against [`Buf::Target`] (`rt::loss::*`).
    Loss {
        /// The resolved head.
        head: Head,
        /// What it reads ([`Head::loss_operand`]).
        operand: Buf,
    },
    /// `err = out - y` (`rt::loss::output_error`).
    OutputError {
        /// The outputs.
        out: Buf,
        /// The output errors.
        err: Buf,
    },
    /// `err = err .* g'(.)` given the activations `act_of` (`rt::act::*_grad`). Never the
    /// identity.
    ActivationGrad {
        /// The activation.
        act: Activation,
        /// Its outputs.
        act_of: Buf,
        /// The errors scaled in place.
        err: Buf,
    },
    /// `G(layer) += err input^T` (`rt::outer_acc`): one sample's weight-gradient terms.
    OuterAcc {
        /// Layer index.
        layer: usize,
        /// The layer's errors.
        err: Buf,
        /// The layer's input.
        input: Buf,
    },
    /// `g_b(layer) += err` (`rt::add_acc`): one sample's bias-gradient terms.
    AddAcc {
        /// Layer index.
        layer: usize,
        /// The layer's errors.
        err: Buf,
    },
    /// `out = W(layer)^T err` (`rt::back`): the errors one layer down, before `g'`.
    Back {
        /// Layer index (at least 1).
        layer: usize,
        /// The layer's errors.
        err: Buf,
        /// The errors of the layer below.
        out: Buf,
    },
}

impl Step {
    /// True for the gradient accumulation ([`Step::OuterAcc`], [`Step::AddAcc`]), which the
    /// batch forms may run after the error terms of a whole block.
    pub fn accumulates(&self) -> bool {
        matches!(
            self,
            Step::OuterAcc { .. } | Step::AddAcc { .. } | Step::WindowAcc { .. }
        )
    }

    /// The buffer the step's kernel reads as its input, for the steps that start a new buffer
    /// ([`Step::Standardize`], [`Step::Affine`], [`Step::Window`], [`Step::Copy`]).
    pub fn reads_buffer(&self) -> Option<Buf> {
        match *self {
            Step::Standardize { from, .. } | Step::Copy { from, .. } => Some(from),
            Step::Affine { input, .. } | Step::Window { input, .. } => Some(input),
            _ => None,
        }
    }

    /// The buffer the step writes, if any (the gradient and the loss are not buffers).
    pub fn writes(&self) -> Option<Buf> {
        match *self {
            Step::Standardize { to, .. } | Step::Copy { to, .. } => Some(to),
            Step::Affine { out, .. }
            | Step::SoftmaxWithLoss { out, .. }
            | Step::OutputError { err: out, .. }
            | Step::Back { out, .. }
            | Step::Window { out, .. }
            | Step::WindowBack { out, .. } => Some(out),
            Step::Activate { buf, .. } => Some(buf),
            Step::ActivationGrad { err, .. } => Some(err),
            Step::Loss { .. }
            | Step::OuterAcc { .. }
            | Step::AddAcc { .. }
            | Step::WindowAcc { .. } => None,
        }
    }
}

/// A trainable array: the optimizer, the batch finish and the penalty visit them in
/// [`Plan::params`] order.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ParamArray {
    /// The weight matrix of layer `l` (penalised).
    Weights(usize),
    /// The bias vector of layer `l` (never penalised).
    Bias(usize),
}

/// The optimizer update of one parameter array, resolved from [`Optimizer`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Update {
    /// `w -= rate g` (`rt::optim::sgd`).
    Sgd {
        /// Learning rate.
        rate: f64,
    },
    /// `v = mu v - rate g; w += v` (`rt::optim::momentum`).
    Momentum {
        /// Learning rate.
        rate: f64,
        /// Momentum coefficient.
        mu: f64,
    },
    /// Adam with bias correction (`rt::optim::adam`).
    Adam {
        /// Learning rate.
        rate: f64,
        /// First-moment decay.
        beta1: f64,
        /// Second-moment decay.
        beta2: f64,
        /// Denominator guard.
        eps: f64,
    },
}

impl Update {
    /// The update an optimizer performs: SGD with momentum 0 is plain gradient descent.
    pub fn of(o: Optimizer) -> Update {
        match o {
            Optimizer::Sgd {
                rate,
                momentum: 0.0,
            } => Update::Sgd { rate },
            Optimizer::Sgd { rate, momentum } => Update::Momentum { rate, mu: momentum },
            Optimizer::Adam {
                rate,
                beta1,
                beta2,
                epsilon,
            } => Update::Adam {
                rate,
                beta1,
                beta2,
                eps: epsilon,
            },
        }
    }
}

/// The execution plan of one model.
#[derive(Debug, Clone, PartialEq)]
pub struct Plan {
    /// The output head.
    pub head: Head,
    /// Index of the output layer.
    pub output: usize,
    /// The working buffers of one sample, in layout order: the standardized input (with
    /// `standardize`), each layer's activations, the output logits, each layer's errors.
    pub buffers: Vec<Buffer>,
    /// Inference: the input to the output activations ([`Buf::Act`] of the output layer).
    pub inference: Vec<Step>,
    /// One sample's loss (no penalty); the last step is [`Step::Loss`].
    pub loss: Vec<Step>,
    /// One sample's backprop: the loss (from [`Step::Loss`] or [`Step::SoftmaxWithLoss`]), the
    /// output error, then from the output layer down: accumulate, propagate.
    pub backprop: Vec<Step>,
    /// The trainable arrays in update order: per layer its weights, then its bias.
    pub params: Vec<ParamArray>,
    /// The spec's optimizer update.
    pub update: Update,
}

impl Plan {
    /// Lowers a checked model.
    pub fn new(model: &Model) -> Plan {
        let output = model.layers.len().saturating_sub(1);
        let head = Head::of(model);
        let std = model.input.standardize;
        let input_of = |l: usize| match l {
            0 if std => Buf::Standardized,
            0 => Buf::Input,
            l => Buf::Act(l - 1),
        };

        let mut buffers = Vec::new();
        if std {
            buffers.push(Buffer {
                buf: Buf::Standardized,
                width: model.input.width,
            });
        }
        for (l, layer) in model.layers.iter().enumerate() {
            buffers.push(Buffer {
                buf: Buf::Act(l),
                width: layer.size(),
            });
        }
        buffers.push(Buffer {
            buf: Buf::Logits,
            width: model.output().width,
        });
        for (l, layer) in model.layers.iter().enumerate() {
            buffers.push(Buffer {
                buf: Buf::Err(l),
                width: layer.size(),
            });
        }

        // Standardize and every hidden layer: how every per-sample pass starts.
        let mut hidden = Vec::new();
        if std {
            hidden.push(Step::Standardize {
                from: Buf::Input,
                to: Buf::Standardized,
            });
        }
        for (l, layer) in model.layers.iter().enumerate().take(output) {
            hidden.push(match WindowOp::of(&layer.kind) {
                None => Step::Affine {
                    layer: l,
                    input: input_of(l),
                    out: Buf::Act(l),
                },
                Some(op) => Step::Window {
                    layer: l,
                    op,
                    input: input_of(l),
                    out: Buf::Act(l),
                },
            });
            push_activate(&mut hidden, layer.activation, Buf::Act(l));
        }
        let out_act = head.activation();
        let logits = Step::Affine {
            layer: output,
            input: input_of(output),
            out: Buf::Logits,
        };
        let outputs_from_logits = |steps: &mut Vec<Step>| {
            steps.push(Step::Copy {
                from: Buf::Logits,
                to: Buf::Act(output),
            });
            push_activate(steps, out_act, Buf::Act(output));
        };
        let loss_step = Step::Loss {
            head,
            operand: head.loss_operand(output),
        };

        let mut inference = hidden.clone();
        inference.push(Step::Affine {
            layer: output,
            input: input_of(output),
            out: Buf::Act(output),
        });
        push_activate(&mut inference, out_act, Buf::Act(output));

        let mut loss = hidden.clone();
        loss.push(logits);
        if matches!(head, Head::SquaredError(_)) {
            outputs_from_logits(&mut loss);
        }
        loss.push(loss_step);

        let mut backprop = hidden;
        backprop.push(logits);
        if head == Head::SoftmaxCrossEntropy {
            backprop.push(Step::SoftmaxWithLoss {
                logits: Buf::Logits,
                out: Buf::Act(output),
            });
        } else {
            outputs_from_logits(&mut backprop);
            backprop.push(loss_step);
        }
        backprop.push(Step::OutputError {
            out: Buf::Act(output),
            err: Buf::Err(output),
        });
        if let Head::SquaredError(act) = head {
            push_grad(&mut backprop, act, Buf::Act(output), Buf::Err(output));
        }
        for l in (0..=output).rev() {
            let op = model.layers.get(l).and_then(|x| WindowOp::of(&x.kind));
            match op {
                None => {
                    backprop.push(Step::OuterAcc {
                        layer: l,
                        err: Buf::Err(l),
                        input: input_of(l),
                    });
                    backprop.push(Step::AddAcc {
                        layer: l,
                        err: Buf::Err(l),
                    });
                }
                Some(op) if op.has_params() => backprop.push(Step::WindowAcc {
                    layer: l,
                    op,
                    err: Buf::Err(l),
                    input: input_of(l),
                }),
                Some(_) => {}
            }
            if let Some(below) = l.checked_sub(1) {
                backprop.push(match op {
                    None => Step::Back {
                        layer: l,
                        err: Buf::Err(l),
                        out: Buf::Err(below),
                    },
                    Some(op) => Step::WindowBack {
                        layer: l,
                        op,
                        input: input_of(l),
                        err: Buf::Err(l),
                        out: Buf::Err(below),
                    },
                });
                let act = model
                    .layers
                    .get(below)
                    .map_or(Activation::Identity, |b| b.activation);
                push_grad(&mut backprop, act, Buf::Act(below), Buf::Err(below));
            }
        }

        // A pooling has no parameters, hence no arrays.
        let params = (0..model.layers.len())
            .filter(|&l| model.layers.get(l).is_some_and(|x| x.parameters() > 0))
            .flat_map(|l| [ParamArray::Weights(l), ParamArray::Bias(l)])
            .collect();
        Plan {
            head,
            output,
            buffers,
            inference,
            loss,
            backprop,
            params,
            update: Update::of(model.train.optimizer),
        }
    }

    /// The lengths of the two halves of inference's working memory: the buffers of the
    /// inference pass but the output (the standardized input, then each hidden layer's
    /// activations) alternate between them, the first in the even half; each half is as long as
    /// the longest buffer it holds (0 when it holds none). The generated `predict_into` holds
    /// these two arrays and nothing else; the caller holds the output.
    pub fn inference_halves(&self) -> (usize, usize) {
        let mut halves = [0usize, 0];
        let chain = self
            .inference
            .iter()
            .filter(|s| {
                matches!(
                    s,
                    Step::Standardize { .. } | Step::Affine { .. } | Step::Window { .. }
                )
            })
            .filter_map(Step::writes)
            .filter(|&b| b != Buf::Act(self.output));
        for (k, b) in chain.enumerate() {
            if let Some(h) = halves.get_mut(k % 2) {
                *h = (*h).max(self.width(b).unwrap_or(0));
            }
        }
        (halves[0], halves[1])
    }

    /// The width of a working buffer (`None` for the operands and for buffers the model lacks).
    pub fn width(&self, buf: Buf) -> Option<usize> {
        self.buffers.iter().find(|b| b.buf == buf).map(|b| b.width)
    }

    /// The position of a working buffer in [`Plan::buffers`].
    pub fn slot(&self, buf: Buf) -> Option<usize> {
        self.buffers.iter().position(|b| b.buf == buf)
    }
}

/// `steps += [Activate]` unless `act` is the identity.
fn push_activate(steps: &mut Vec<Step>, act: Activation, buf: Buf) {
    if act != Activation::Identity {
        steps.push(Step::Activate { act, buf });
    }
}

/// `steps += [ActivationGrad]` unless `act` is the identity.
fn push_grad(steps: &mut Vec<Step>, act: Activation, act_of: Buf, err: Buf) {
    if act != Activation::Identity {
        steps.push(Step::ActivationGrad { act, act_of, err });
    }
}

#[cfg(test)]
mod tests;
