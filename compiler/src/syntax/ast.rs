//! The syntax tree of a spec: plain data with a byte span on every node.
//!
//! Invariant: the tree knows nothing of sizes or ranges. Numbers are kept as the text the user
//! wrote (already known to have the right form), names as written; `check` converts and
//! validates them, so every user-facing error about meaning is raised there.

use crate::span::{Span, Spanned};

/// A name as written (not yet validated as an identifier).
pub type Name = Spanned<String>;

/// A number as written: decimal or exponent form, optionally signed (`0.01`, `-2`, `1e-3`).
pub type Number = Spanned<String>;

/// A whole number as written: decimal digits only, any length.
pub type Integer = Spanned<String>;

/// A parsed spec: its statements in source order.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Spec {
    /// One entry per non-blank line, in order; lines with syntax errors appear as
    /// [`Item::Invalid`] so that later stages know a section was attempted there.
    pub statements: Vec<Statement>,
}

/// One statement (one line of the spec, without its comment).
#[derive(Debug, Clone, PartialEq)]
pub struct Statement {
    /// The statement's first word.
    pub keyword: Span,
    /// The whole statement, from its first word to its last.
    pub span: Span,
    /// What it says.
    pub item: Item,
}

/// The sections of a spec, in the order they must appear.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Section {
    /// `model`
    Model,
    /// `scalar`
    Scalar,
    /// `input`
    Input,
    /// `layer` (the only section that may repeat)
    Layer,
    /// `output`
    Output,
    /// `loss`
    Loss,
    /// `penalty`
    Penalty,
    /// `init`
    Init,
    /// `train`
    Train,
    /// `budget`
    Budget,
}

impl Section {
    /// Every section, in the required order.
    pub const ALL: [Section; 10] = [
        Section::Model,
        Section::Scalar,
        Section::Input,
        Section::Layer,
        Section::Output,
        Section::Loss,
        Section::Penalty,
        Section::Init,
        Section::Train,
        Section::Budget,
    ];

    /// The keyword that starts the section's line.
    pub fn keyword(self) -> &'static str {
        match self {
            Section::Model => "model",
            Section::Scalar => "scalar",
            Section::Input => "input",
            Section::Layer => "layer",
            Section::Output => "output",
            Section::Loss => "loss",
            Section::Penalty => "penalty",
            Section::Init => "init",
            Section::Train => "train",
            Section::Budget => "budget",
        }
    }

    /// The section started by `word`, if it is a section keyword.
    pub fn from_keyword(word: &str) -> Option<Section> {
        Section::ALL.into_iter().find(|s| s.keyword() == word)
    }

    /// How the section's line is written, for hints.
    pub fn form(self) -> &'static str {
        match self {
            Section::Model => "model NAME",
            Section::Scalar => "scalar f32|f64",
            Section::Input => "input NAME WIDTH | STEPS x CHANNELS | ROWS x COLS x CHANNELS [standardize | unscaled]",
            Section::Layer => {
                "layer NAME WIDTH ACTIVATION | layer NAME conv FILTERS kernel K [x K] [stride S] \
                 [pad valid|same] ACTIVATION | layer NAME depthwise kernel K [x K] [stride S] \
                 [pad valid|same] ACTIVATION | layer NAME pool max|average N [x N] | all"
            }
            Section::Output => "output NAME WIDTH ACTIVATION [classes A, B, ...]",
            Section::Loss => "loss cross_entropy|squared_error",
            Section::Penalty => "penalty none | penalty l2 LAMBDA | penalty l1 LAMBDA",
            Section::Init => "init uniform BOUND|glorot|he [seed N]",
            Section::Train => {
                "train sgd rate R [momentum M] [batch N] [epochs N] \
                 | train adam rate R [beta1 B1] [beta2 B2] [batch N] [epochs N]"
            }
            Section::Budget => {
                "budget [flash N UNIT] [ram N UNIT] [train_ram N UNIT] (UNIT is B, KiB or MiB)"
            }
        }
    }
}

/// What one statement says.
#[derive(Debug, Clone, PartialEq)]
pub enum Item {
    /// `model NAME`
    Model {
        /// The model's name.
        name: Name,
    },
    /// `scalar f32|f64`
    Scalar {
        /// The type.
        kind: Spanned<ScalarKind>,
    },
    /// `input NAME WIDTH [standardize | unscaled]`
    Input {
        /// The input's name.
        name: Name,
        /// Its shape: the number of features, or `STEPS x CHANNELS`, or `ROWS x COLS x CHANNELS`.
        shape: Dims,
        /// Where `standardize` was written, if it was.
        standardize: Option<Span>,
        /// Where `unscaled` was written, if it was: the features are fed as they are on purpose.
        unscaled: Option<Span>,
    },
    /// `layer NAME WIDTH ACTIVATION`
    Layer(LayerDecl),
    /// `output NAME WIDTH ACTIVATION [classes ...]`
    Output {
        /// Name, width and activation.
        layer: LayerDecl,
        /// The class names, if given.
        classes: Option<Classes>,
    },
    /// `loss KIND`
    Loss {
        /// The loss.
        kind: Spanned<LossKind>,
    },
    /// `penalty none | l2 LAMBDA | l1 LAMBDA`
    Penalty {
        /// The penalty.
        kind: Spanned<PenaltyKind>,
    },
    /// `init KIND [seed N]`
    Init {
        /// The initialisation.
        kind: Spanned<InitKind>,
        /// The seed, if given.
        seed: Option<Integer>,
    },
    /// `train OPTIMIZER [batch N] [epochs N]`
    Train {
        /// The optimizer and its settings.
        optimizer: Spanned<OptimizerKind>,
        /// Samples per batch, if given.
        batch: Option<Integer>,
        /// Passes over the data, if given.
        epochs: Option<Integer>,
    },
    /// `budget [flash N UNIT] [ram N UNIT] [train_ram N UNIT]`
    Budget {
        /// The flash limit, if given.
        flash: Option<Size>,
        /// The limit on the RAM of inference, if given.
        ram: Option<Size>,
        /// The limit on the RAM of one on-device training step, if given.
        train_ram: Option<Size>,
    },
    /// A line with a syntax error (already reported by the parser).
    Invalid {
        /// The section the line was meant to be, when that is clear from its first word.
        meant: Option<Section>,
    },
}

impl Item {
    /// The section this item belongs to (`None` for an invalid line of unknown kind).
    pub fn section(&self) -> Option<Section> {
        Some(match self {
            Item::Model { .. } => Section::Model,
            Item::Scalar { .. } => Section::Scalar,
            Item::Input { .. } => Section::Input,
            Item::Layer(_) => Section::Layer,
            Item::Output { .. } => Section::Output,
            Item::Loss { .. } => Section::Loss,
            Item::Penalty { .. } => Section::Penalty,
            Item::Init { .. } => Section::Init,
            Item::Train { .. } => Section::Train,
            Item::Budget { .. } => Section::Budget,
            Item::Invalid { meant } => return *meant,
        })
    }
}

/// Sizes separated by `x`, as written: `6`, `100 x 6`, `3 x 3`.
#[derive(Debug, Clone, PartialEq)]
pub struct Dims {
    /// From the first size to the last.
    pub span: Span,
    /// The sizes in order (at least one).
    pub sizes: Vec<Integer>,
}

/// Name, kind and activation of a layer.
#[derive(Debug, Clone, PartialEq)]
pub struct LayerDecl {
    /// The layer's name.
    pub name: Name,
    /// What kind of layer, with its sizes.
    pub body: LayerBody,
    /// Its activation. A pooling has none: it reads as `identity`, spanned at its `pool` word.
    pub activation: Spanned<ActivationKind>,
}

impl LayerDecl {
    /// Where the layer's sizes are written: the width of a dense layer, else from the kind's
    /// word to the last size.
    pub fn size_span(&self) -> Span {
        match &self.body {
            LayerBody::Dense { width } => width.span,
            LayerBody::Conv {
                keyword, window, ..
            }
            | LayerBody::Depthwise { keyword, window } => {
                Span::new(keyword.start, window.kernel.span.end)
            }
            LayerBody::Pool {
                keyword, window, ..
            } => Span::new(keyword.start, window.span().end),
        }
    }
}

/// The kinds of layer, as written.
#[derive(Debug, Clone, PartialEq)]
pub enum LayerBody {
    /// `WIDTH ACTIVATION`: dense.
    Dense {
        /// Its number of units.
        width: Integer,
    },
    /// `conv FILTERS kernel K [x K] [stride S] [pad P] ACTIVATION`.
    Conv {
        /// The word `conv`.
        keyword: Span,
        /// The number of filters.
        filters: Integer,
        /// Kernel, stride and padding.
        window: WindowDecl,
    },
    /// `depthwise kernel K [x K] [stride S] [pad P] ACTIVATION`.
    Depthwise {
        /// The word `depthwise`.
        keyword: Span,
        /// Kernel, stride and padding.
        window: WindowDecl,
    },
    /// `pool max | average WINDOW | all`.
    Pool {
        /// The word `pool`.
        keyword: Span,
        /// Max or average.
        op: Spanned<PoolOp>,
        /// The window.
        window: PoolWindow,
    },
}

/// The sliding window of a convolution.
#[derive(Debug, Clone, PartialEq)]
pub struct WindowDecl {
    /// `kernel K` or `kernel KH x KW`: the sizes after `kernel`.
    pub kernel: Dims,
    /// `stride S`, if given.
    pub stride: Option<Integer>,
    /// `pad valid | same`, if given.
    pub pad: Option<Spanned<Pad>>,
}

/// A padding as written.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Pad {
    /// `valid`: no padding.
    Valid,
    /// `same`: zeros around the input.
    Same,
}

/// A pooling operation as written.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PoolOp {
    /// `max`
    Max,
    /// `average`
    Average,
}

/// The window of a pooling as written.
#[derive(Debug, Clone, PartialEq)]
pub enum PoolWindow {
    /// `all`: every position.
    All(Span),
    /// `N` or `N x M`.
    Size(Dims),
}

impl PoolWindow {
    /// Where it is written.
    pub fn span(&self) -> Span {
        match self {
            PoolWindow::All(s) => *s,
            PoolWindow::Size(d) => d.span,
        }
    }
}

/// The `classes` clause of an output line.
#[derive(Debug, Clone, PartialEq)]
pub struct Classes {
    /// From `classes` to the last name.
    pub span: Span,
    /// The names in order.
    pub names: Vec<Name>,
}

/// `f32` or `f64`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ScalarKind {
    /// `f32`
    F32,
    /// `f64`
    F64,
}

/// An activation as written.
#[derive(Debug, Clone, PartialEq)]
pub enum ActivationKind {
    /// `identity`
    Identity,
    /// `sigmoid`
    Sigmoid,
    /// `tanh`
    Tanh,
    /// `relu`
    Relu,
    /// `leaky_relu ALPHA`
    LeakyRelu {
        /// The slope below zero.
        alpha: Number,
    },
    /// `softmax`
    Softmax,
}

/// A loss as written.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LossKind {
    /// `cross_entropy`
    CrossEntropy,
    /// `squared_error`
    SquaredError,
}

/// A penalty as written.
#[derive(Debug, Clone, PartialEq)]
pub enum PenaltyKind {
    /// `none`
    None,
    /// `l2 LAMBDA`
    L2 {
        /// Its strength.
        lambda: Number,
    },
    /// `l1 LAMBDA`
    L1 {
        /// Its strength.
        lambda: Number,
    },
}

/// An initialisation as written.
#[derive(Debug, Clone, PartialEq)]
pub enum InitKind {
    /// `uniform BOUND`
    Uniform {
        /// Half-width of the interval.
        eps: Number,
    },
    /// `glorot`
    Glorot,
    /// `he`
    He,
}

/// An optimizer as written.
#[derive(Debug, Clone, PartialEq)]
pub enum OptimizerKind {
    /// `sgd rate R [momentum M]`
    Sgd {
        /// The learning rate.
        rate: Number,
        /// The momentum, if given.
        momentum: Option<Number>,
    },
    /// `adam rate R [beta1 B1] [beta2 B2]`
    Adam {
        /// The learning rate.
        rate: Number,
        /// First-moment decay, if given.
        beta1: Option<Number>,
        /// Second-moment decay, if given.
        beta2: Option<Number>,
    },
}

/// A memory amount `N UNIT`.
#[derive(Debug, Clone, PartialEq)]
pub struct Size {
    /// The whole amount, from the number to the unit.
    pub span: Span,
    /// The number.
    pub amount: Integer,
    /// The unit.
    pub unit: Spanned<Unit>,
}

/// A unit of memory.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Unit {
    /// `B`: one byte.
    B,
    /// `KiB`: 1024 bytes.
    KiB,
    /// `MiB`: 1024 * 1024 bytes.
    MiB,
}

impl Unit {
    /// Bytes in one unit.
    pub fn bytes(self) -> u64 {
        match self {
            Unit::B => 1,
            Unit::KiB => 1024,
            Unit::MiB => 1024 * 1024,
        }
    }
}
