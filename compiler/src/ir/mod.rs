//! The Model IR: a fully resolved, typed description of one network.
//!
//! Only [`crate::check`] builds a [`Model`] from source; every back end (emit, report, engine)
//! reads it and none re-validates it. `check` guarantees these invariants:
//!
//! - `name`, every layer name and every class name is a lower_snake identifier (`[a-z][a-z0-9_]*`)
//!   that is not a Rust keyword, and layer names are unique (and differ from the input name);
//! - there is at least one layer; the last layer is the output; every width is in `1..=65535`;
//! - `Softmax` appears only on the output layer, with at least 2 units;
//! - `Loss::CrossEntropy` only with a `Sigmoid` or `Softmax` output;
//! - `classes`, when present, has exactly as many names as the output has units (or 2 names for a
//!   one-unit sigmoid output), all distinct, and the loss is cross-entropy;
//! - the total parameter count is at most 16 Mi;
//! - every hyper-parameter is finite and in its documented range;
//! - the model fits its `budget`, if any.

use serde::Serialize;

mod dump;
pub use dump::dump;

/// The floating-point type of parameters and arithmetic.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Scalar {
    /// IEEE 754 binary32.
    F32,
    /// IEEE 754 binary64.
    F64,
}

impl Scalar {
    /// Size of one value in bytes.
    pub fn bytes(self) -> u64 {
        match self {
            Scalar::F32 => 4,
            Scalar::F64 => 8,
        }
    }

    /// The Rust type name (`f32` / `f64`).
    pub fn rust_name(self) -> &'static str {
        match self {
            Scalar::F32 => "f32",
            Scalar::F64 => "f64",
        }
    }
}

/// An activation function `a = g(z)`, applied element-wise except for `Softmax`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Activation {
    /// g(z) = z; g'(z) = 1.
    Identity,
    /// g(z) = 1 / (1 + e^-z); g'(z) = a (1 - a).
    Sigmoid,
    /// g(z) = tanh z; g'(z) = 1 - a^2.
    Tanh,
    /// g(z) = max(0, z); g'(z) = 1 if z > 0 else 0.
    Relu,
    /// g(z) = z if z > 0 else alpha z; g'(z) = 1 if z > 0 else alpha. `alpha` is in [0, 1).
    LeakyRelu(f64),
    /// g(z)_j = e^{z_j} / sum_k e^{z_k}, computed as e^{z_j - max z}; Jacobian
    /// d a_j / d z_k = a_j (delta_jk - a_k). Output layer only.
    Softmax,
}

impl Activation {
    /// The spec keyword (without the `leaky_relu` parameter).
    pub fn keyword(self) -> &'static str {
        match self {
            Activation::Identity => "identity",
            Activation::Sigmoid => "sigmoid",
            Activation::Tanh => "tanh",
            Activation::Relu => "relu",
            Activation::LeakyRelu(_) => "leaky_relu",
            Activation::Softmax => "softmax",
        }
    }
}

/// The per-sample loss.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Loss {
    /// With a sigmoid output (per-unit logistic):
    /// `sum_j softplus(z_j) - y_j z_j`, i.e. `-sum_j [y_j ln a_j + (1 - y_j) ln(1 - a_j)]`.
    /// With a softmax output (categorical): `sum_j y_j (lse(z) - z_j)`, i.e. `-sum_j y_j ln a_j`.
    /// Both are computed from the logits z. Output error: `delta = a - y`.
    CrossEntropy,
    /// `1/2 sum_j (a_j - y_j)^2`. Output error: `delta = (a - y) .* g'(z)` (the softmax Jacobian
    /// for a softmax output).
    SquaredError,
}

impl Loss {
    /// The spec keyword.
    pub fn keyword(self) -> &'static str {
        match self {
            Loss::CrossEntropy => "cross_entropy",
            Loss::SquaredError => "squared_error",
        }
    }
}

/// The penalty on weights (never on biases), added to the batch cost of m samples.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "snake_case", tag = "kind", content = "lambda")]
pub enum Penalty {
    /// No penalty.
    None,
    /// `(lambda / 2m) sum W^2`; gradient `(lambda / m) W`.
    L2(f64),
    /// `(lambda / m) sum |W|`; gradient `(lambda / m) sign(W)`, with sign(0) = 0.
    L1(f64),
}

/// How weights are drawn before training; biases always start at zero.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "snake_case", tag = "kind")]
pub enum Init {
    /// Uniform on `[-eps, eps]`.
    Uniform {
        /// Half-width of the interval.
        eps: f64,
    },
    /// Glorot and Bengio (2010) uniform: `[-r, r]`, `r = sqrt(6 / (fan_in + fan_out))`.
    Glorot,
    /// He et al. (2015): normal with mean 0 and standard deviation `sqrt(2 / fan_in)`.
    He,
}

/// The optimizer named on the `train` line.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "snake_case", tag = "kind")]
pub enum Optimizer {
    /// Gradient descent with optional classical momentum:
    /// `v <- momentum v - rate g; w <- w + v` (momentum 0 gives plain `w <- w - rate g`).
    Sgd {
        /// Learning rate, > 0.
        rate: f64,
        /// Momentum in [0, 1).
        momentum: f64,
    },
    /// Adam (Kingma and Ba 2015) with bias correction.
    Adam {
        /// Learning rate, > 0.
        rate: f64,
        /// First-moment decay in (0, 1); default 0.9.
        beta1: f64,
        /// Second-moment decay in (0, 1); default 0.999.
        beta2: f64,
        /// Denominator guard; fixed at 1e-8 (not settable in spec v1).
        epsilon: f64,
    },
}

/// Training settings.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Train {
    /// The optimizer and its hyper-parameters.
    pub optimizer: Optimizer,
    /// Samples per mini-batch, >= 1.
    pub batch: u32,
    /// Passes over the training set, >= 1.
    pub epochs: u32,
}

/// Optional memory limits in bytes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize)]
pub struct Budget {
    /// Limit on flash (parameter bytes), if given.
    pub flash: Option<u64>,
    /// Limit on RAM held by inference (`report::Report::ram_inference_bytes`), if given.
    pub ram: Option<u64>,
    /// Limit on RAM held by one on-device training step
    /// (`report::Report::ram_training_bytes`), if given.
    pub train_ram: Option<u64>,
}

/// The shape of a map of values: a vector (`6`), a window of steps (`100 x 6`) or a grid of
/// rows and columns (`8 x 8 x 1`). Stored row-major, channel fastest: the value of row `r`,
/// column `c`, channel `k` is at `(r * cols + c) * channels + k`. A vector is one position with
/// `channels` values; a window has one column.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
pub struct Shape {
    /// 1 (vector), 2 (window) or 3 (grid).
    pub rank: u8,
    /// Rows (steps of a window; 1 for a vector).
    pub rows: usize,
    /// Columns (1 for a vector or a window).
    pub cols: usize,
    /// Values per position (the width of a vector).
    pub channels: usize,
}

impl Input {
    /// A vector input of `width` features.
    pub fn vector(name: &str, width: usize, standardize: bool) -> Input {
        Input {
            name: name.to_string(),
            width,
            shape: Shape::vector(width),
            standardize,
        }
    }
}

impl Shape {
    /// A vector of `n` values.
    pub fn vector(n: usize) -> Shape {
        Shape {
            rank: 1,
            rows: 1,
            cols: 1,
            channels: n,
        }
    }

    /// Values in the map: `rows * cols * channels`.
    pub fn len(&self) -> usize {
        self.rows * self.cols * self.channels
    }

    /// True when the map holds no value (never for a checked model: every size is at least 1).
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// True for a vector, which only dense layers read.
    pub fn is_vector(&self) -> bool {
        self.rank == 1
    }

    /// As the spec writes it: `6`, `100 x 6`, `8 x 8 x 1`.
    pub fn words(&self) -> String {
        match self.rank {
            1 => self.channels.to_string(),
            2 => format!("{} x {}", self.rows, self.channels),
            _ => format!("{} x {} x {}", self.rows, self.cols, self.channels),
        }
    }
}

/// Padding of a convolution.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Pad {
    /// No padding: `floor((n - k) / s) + 1` positions.
    Valid,
    /// `ceil(n / s)` positions; total zeros `max((out - 1) s + k - n, 0)`, the smaller half
    /// before.
    Same,
}

/// A pooling operation.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum PoolOp {
    /// The largest value of the window; its gradient goes to the first maximal element in scan
    /// order.
    Max,
    /// The mean of the window: the sum in scan order divided by the number of taps.
    Average,
}

/// The geometry of a sliding window over a map (`Window` in the runtime): the input map, the
/// kernel, stride, zeros before, and the output positions. A window of steps has one column,
/// `k_cols = 1`, `stride_cols = 1`, `pad_left = 0`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
pub struct Window {
    /// Input rows.
    pub rows: usize,
    /// Input columns.
    pub cols: usize,
    /// Input channels.
    pub channels: usize,
    /// Kernel rows.
    pub k_rows: usize,
    /// Kernel columns.
    pub k_cols: usize,
    /// Stride along rows.
    pub stride_rows: usize,
    /// Stride along columns.
    pub stride_cols: usize,
    /// Zero rows before the first.
    pub pad_top: usize,
    /// Zero columns before the first.
    pub pad_left: usize,
    /// Output rows.
    pub out_rows: usize,
    /// Output columns.
    pub out_cols: usize,
}

impl Window {
    /// Kernel taps: `k_rows * k_cols`.
    pub fn taps(&self) -> usize {
        self.k_rows * self.k_cols
    }

    /// Output positions: `out_rows * out_cols`.
    pub fn positions(&self) -> usize {
        self.out_rows * self.out_cols
    }
}

/// What a layer computes.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "snake_case", tag = "kind")]
pub enum LayerKind {
    /// `z = W a + b` over the flattened input.
    Dense,
    /// `z[p][f] = sum_{taps, c} W[f][tap][c] a[p + tap][c] + b[f]`.
    Conv {
        /// The sliding window.
        window: Window,
        /// Padding as written.
        pad: Pad,
    },
    /// `z[p][c] = sum_{taps} W[c][tap] a[p + tap][c] + b[c]`: one filter per channel.
    Depthwise {
        /// The sliding window.
        window: Window,
        /// Padding as written.
        pad: Pad,
    },
    /// Max or average over windows that do not overlap (stride = window); no parameters.
    Pool {
        /// Max or average.
        op: PoolOp,
        /// The window (`all`: the whole map).
        window: Window,
        /// Written as `all`.
        all: bool,
    },
}

impl LayerKind {
    /// The sliding window, for every kind but dense.
    pub fn window(&self) -> Option<&Window> {
        match self {
            LayerKind::Dense => None,
            LayerKind::Conv { window, .. }
            | LayerKind::Depthwise { window, .. }
            | LayerKind::Pool { window, .. } => Some(window),
        }
    }

    /// The spec word: `dense`, `conv`, `depthwise`, `pool max`, `pool average`.
    pub fn words(&self) -> &'static str {
        match self {
            LayerKind::Dense => "dense",
            LayerKind::Conv { .. } => "conv",
            LayerKind::Depthwise { .. } => "depthwise",
            LayerKind::Pool {
                op: PoolOp::Max, ..
            } => "pool max",
            LayerKind::Pool {
                op: PoolOp::Average,
                ..
            } => "pool average",
        }
    }
}

/// The input.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Input {
    /// Name from the spec.
    pub name: String,
    /// Number of values: `shape.len()`.
    pub width: usize,
    /// The input's shape.
    pub shape: Shape,
    /// When true the model holds a per-feature mean and standard deviation and computes
    /// `x' = (x - mean) / std` before the first layer (per channel for a window or a grid: one
    /// mean and std per channel, over every position).
    pub standardize: bool,
}

/// One layer `z = f(W, a_prev) + b`, `a = g(z)`. The last layer of a model is its output, and
/// is dense. The weights are held as a matrix of `width` rows (units, filters or channels) of
/// `fan_in` values each: dense `[width][inputs]`, conv `[F][KH][KW][C]` flattened per filter,
/// depthwise `[C][KH][KW]` flattened per channel; a pooling has none (`width = fan_in = 0`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Layer {
    /// Name from the spec (`layer NAME ...` or `output NAME ...`).
    pub name: String,
    /// What it computes.
    pub kind: LayerKind,
    /// Rows of W and length of b: dense units, conv filters, depthwise channels; 0 for a pooling.
    pub width: usize,
    /// Columns of W: the flattened input length (dense), `taps * channels` (conv), `taps`
    /// (depthwise); 0 for a pooling.
    pub fan_in: usize,
    /// The shape it reads.
    pub input: Shape,
    /// The shape it writes (`output.len()` values per sample).
    pub output: Shape,
    /// Its activation (the identity for a pooling).
    pub activation: Activation,
}

impl Layer {
    /// A dense layer of `width` units reading a vector of `fan_in` values.
    pub fn dense(name: &str, width: usize, fan_in: usize, activation: Activation) -> Layer {
        Layer {
            name: name.to_string(),
            kind: LayerKind::Dense,
            width,
            fan_in,
            input: Shape::vector(fan_in),
            output: Shape::vector(width),
            activation,
        }
    }

    /// Weights plus biases.
    pub fn parameters(&self) -> usize {
        self.width * self.fan_in + self.width
    }

    /// Values it writes per sample.
    pub fn size(&self) -> usize {
        self.output.len()
    }

    /// The fan-in and fan-out of one weight, for `init glorot` and `he`: dense `(inputs,
    /// units)`; conv `(taps * C, taps * F)`; depthwise `(taps, taps)`.
    pub fn fans(&self) -> (usize, usize) {
        match &self.kind {
            LayerKind::Conv { window, .. } => (self.fan_in, window.taps() * self.width),
            LayerKind::Depthwise { window, .. } => (window.taps(), window.taps()),
            _ => (self.fan_in, self.width),
        }
    }

    /// Multiply-adds of its forward pass: each output value of a convolution sums the taps that
    /// fall inside the input (padding adds none), a pooling none counted. Saturates at
    /// `u64::MAX` (a checked model is far below).
    pub fn macs(&self) -> u64 {
        // Taps inside the input along one axis, summed over its output positions: for output
        // `o` the taps `t` with `0 <= o s + t - pad < n`, counted in closed form.
        let axis = |n: usize, k: usize, s: usize, pad: usize, out: usize| -> u128 {
            (0..out)
                .map(|o| {
                    let start = o * s;
                    let lo = pad.saturating_sub(start);
                    let hi = k.min((n + pad).saturating_sub(start));
                    hi.saturating_sub(lo) as u128
                })
                .sum()
        };
        let inside = |w: &Window| {
            axis(w.rows, w.k_rows, w.stride_rows, w.pad_top, w.out_rows)
                * axis(w.cols, w.k_cols, w.stride_cols, w.pad_left, w.out_cols)
        };
        let macs: u128 = match &self.kind {
            LayerKind::Dense => self.width as u128 * self.fan_in as u128,
            LayerKind::Conv { window, .. } => {
                inside(window) * window.channels as u128 * self.width as u128
            }
            LayerKind::Depthwise { window, .. } => inside(window) * window.channels as u128,
            LayerKind::Pool { .. } => 0,
        };
        u64::try_from(macs).unwrap_or(u64::MAX)
    }
}

/// A checked network. Only `check` builds one (the fields are crate-private and read through
/// the accessors below), so every back end may rely on its invariants without checking again:
/// at least one layer, names that are lower_snake Rust identifiers, widths >= 1, each layer's
/// `fan_in` equal to the width before it, hyper-parameters in range.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Model {
    /// lower_snake name; the generated module's name.
    pub(crate) name: String,
    /// Scalar type.
    pub(crate) scalar: Scalar,
    /// The input.
    pub(crate) input: Input,
    /// Hidden layers in order, then the output layer (always at least one layer).
    pub(crate) layers: Vec<Layer>,
    /// Class names of a classifying output, if given.
    pub(crate) classes: Option<Vec<String>>,
    /// The loss.
    pub(crate) loss: Loss,
    /// The penalty.
    pub(crate) penalty: Penalty,
    /// Weight initialisation.
    pub(crate) init: Init,
    /// Seed of the initialisation PRNG (SplitMix64).
    pub(crate) seed: u64,
    /// Training settings.
    pub(crate) train: Train,
    /// Memory limits.
    pub(crate) budget: Budget,
}

/// Defaults applied by `check` where the spec is silent; listed once, here.
pub mod defaults {
    use super::*;
    /// `scalar f32`.
    pub const SCALAR: Scalar = Scalar::F32;
    /// `penalty none`.
    pub const PENALTY: Penalty = Penalty::None;
    /// `init glorot`.
    pub const INIT: Init = Init::Glorot;
    /// `seed 0`.
    pub const SEED: u64 = 0;
    /// Adam's default first-moment decay (Kingma and Ba 2015).
    pub const BETA1: f64 = 0.9;
    /// Adam's default second-moment decay (Kingma and Ba 2015).
    pub const BETA2: f64 = 0.999;
    /// Adam's epsilon (Kingma and Ba 2015).
    pub const ADAM_EPSILON: f64 = 1e-8;
    /// SGD momentum when not given.
    pub const MOMENTUM: f64 = 0.0;
    /// `train adam rate 0.001 batch 32 epochs 100` when there is no `train` line.
    pub const TRAIN: Train = Train {
        optimizer: Optimizer::Adam {
            rate: 0.001,
            beta1: BETA1,
            beta2: BETA2,
            epsilon: ADAM_EPSILON,
        },
        batch: 32,
        epochs: 100,
    };
}

impl Model {
    /// lower_snake name; the generated module's name.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// Scalar type.
    pub fn scalar(&self) -> Scalar {
        self.scalar
    }

    /// The input.
    pub fn input(&self) -> &Input {
        &self.input
    }

    /// Hidden layers in order, then the output layer (at least one layer).
    pub fn layers(&self) -> &[Layer] {
        &self.layers
    }

    /// Class names of a classifying output, if given.
    pub fn classes(&self) -> Option<&[String]> {
        self.classes.as_deref()
    }

    /// The loss.
    pub fn loss(&self) -> Loss {
        self.loss
    }

    /// The penalty.
    pub fn penalty(&self) -> Penalty {
        self.penalty
    }

    /// Weight initialisation.
    pub fn init(&self) -> Init {
        self.init
    }

    /// Seed of the initialisation PRNG (SplitMix64).
    pub fn seed(&self) -> u64 {
        self.seed
    }

    /// Training settings.
    pub fn train(&self) -> Train {
        self.train
    }

    /// Memory limits.
    pub fn budget(&self) -> Budget {
        self.budget
    }

    /// The output layer.
    pub fn output(&self) -> &Layer {
        // `check` guarantees at least one layer.
        &self.layers[self.layers.len() - 1]
    }

    /// Hidden layers (all but the output).
    pub fn hidden(&self) -> &[Layer] {
        &self.layers[..self.layers.len() - 1]
    }

    /// Total number of trainable parameters (weights and biases).
    pub fn parameters(&self) -> usize {
        self.layers.iter().map(Layer::parameters).sum()
    }

    /// True when the output is read as class scores (cross-entropy loss).
    pub fn is_classifier(&self) -> bool {
        self.loss == Loss::CrossEntropy
    }

    /// The shape signature hashed into the fingerprint: scalar, input width and scaling, then each
    /// layer's width and activation (with its parameter). Names, loss and training settings are
    /// not part of it: weights trained under another loss still fit.
    pub fn signature(&self) -> String {
        let input = match self.input.shape.rank {
            1 => self.input.width.to_string(),
            _ => self.input.shape.words().replace(' ', ""),
        };
        let mut s = format!(
            "sinew-shape-1;{};in={}{}",
            self.scalar.rust_name(),
            input,
            if self.input.standardize { "+std" } else { "" }
        );
        for l in &self.layers {
            // Dense layers keep the form of version 1, so that its fingerprints stay valid.
            let geometry = |w: &Window, pad: &str| {
                format!("k{}x{}s{}{pad}", w.k_rows, w.k_cols, w.stride_rows)
            };
            let kind = match &l.kind {
                LayerKind::Dense => String::new(),
                LayerKind::Conv { window, pad } => {
                    format!(
                        "conv{}",
                        geometry(window, if *pad == Pad::Same { "same" } else { "valid" })
                    )
                }
                LayerKind::Depthwise { window, pad } => {
                    format!(
                        "dw{}",
                        geometry(window, if *pad == Pad::Same { "same" } else { "valid" })
                    )
                }
                LayerKind::Pool { op, window, .. } => format!(
                    "pool{}{}",
                    if *op == PoolOp::Max { "max" } else { "avg" },
                    geometry(window, "")
                ),
            };
            s.push_str(&format!(";{kind}{}:{}", l.width, l.activation.keyword()));
            if let Activation::LeakyRelu(a) = l.activation {
                s.push_str(&format!("({:016x})", a.to_bits()));
            }
        }
        s
    }

    /// 64-bit FNV-1a hash of [`Model::signature`] (Fowler, Noll, Vo; offset basis
    /// 0xcbf29ce484222325, prime 0x100000001b3).
    pub fn fingerprint(&self) -> u64 {
        fnv1a64(self.signature().as_bytes())
    }
}

/// 64-bit FNV-1a.
pub fn fnv1a64(bytes: &[u8]) -> u64 {
    fnv1a64_extend(FNV1A64_OFFSET, bytes)
}

/// The 64-bit FNV-1a offset basis: the hash of no bytes.
pub const FNV1A64_OFFSET: u64 = 0xcbf2_9ce4_8422_2325;

/// Continues a 64-bit FNV-1a hash `h` over `bytes`, so that a file can be hashed in pieces:
/// `fnv1a64_extend(fnv1a64(a), b) == fnv1a64(a ++ b)`.
pub fn fnv1a64_extend(mut h: u64, bytes: &[u8]) -> u64 {
    for &b in bytes {
        h ^= u64::from(b);
        h = h.wrapping_mul(0x0000_0100_0000_01b3);
    }
    h
}

#[cfg(test)]
mod tests {
    use super::fnv1a64;

    #[test]
    fn fnv1a64_published_vectors() {
        // Test vectors from the FNV reference page (Noll): "" and "a" (values from memory).
        assert_eq!(fnv1a64(b""), 0xcbf29ce484222325);
        assert_eq!(fnv1a64(b"a"), 0xaf63dc4c8601ec8c);
        assert_eq!(super::fnv1a64_extend(fnv1a64(b"ab"), b"c"), fnv1a64(b"abc"));
    }
}
