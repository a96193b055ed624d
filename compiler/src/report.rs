//! Cost report: parameters, bytes and multiply-adds, computed from the IR alone.
//!
//! These are the figures `budget` is checked against. They describe the code that `emit`
//! generates, which holds one buffer per layer as a local array:
//!
//! - **flash** (`flash_bytes`): the baked parameters (every weight and bias) plus, with
//!   `standardize`, the per-feature mean and standard deviation. Machine code is measured on the
//!   compiled firmware, not estimated here.
//! - **inference RAM** (`ram_inference_bytes`): the buffers (`buffer_inference_bytes`: the
//!   output, and the two halves that the other buffers alternate between: the standardized input
//!   with `standardize`, then each hidden layer's activations, layer `k` written into one half
//!   while layer `k - 1` is read from the other, each half as long as the longest buffer it holds
//!   (`plan::Plan::inference_halves`); so only the largest buffers alive together count, not the
//!   sum of all; activations are applied in place over `z`) plus the call frames of `predict` and the runtime kernels and
//!   libm functions it calls (`frames_inference_bytes`, [`INFERENCE_FRAMES_F32`] for `f32`, twice
//!   that for `f64`). The frames do not grow with the widths (the kernels loop over slices); their
//!   allowance is the largest stack the device test (`tests/tests/device.rs`) paints on three
//!   microcontroller targets at `opt-level = "z"` and `3`, less the buffers, rounded up to leave a
//!   margin. The test fails if a measured high-water mark exceeds this figure.
//! - **training RAM** (`ram_training_bytes`), for the on-device trainer: parameters, gradient
//!   accumulators and optimizer state (none for plain SGD, one copy for momentum, two for Adam),
//!   plus the per-sample working set: the inference buffers, the output logits kept for the
//!   loss, and one error buffer (delta) per layer (together `buffer_training_bytes`), plus the call
//!   frames of one training step (`frames_training_bytes`, [`TRAINING_FRAMES_F32`] for `f32`).
//!
//! The frame allowances hold for the loop form of the generated code. Code unrolled with
//! `unroll_below` keeps its values in its own frame, which grows with the layer; measure it.
//! - **multiply-adds**: `sum width * fan_in` per inference; a training sample adds the gradient
//!   outer products (`sum width * fan_in`) and the back-propagated errors through every layer but
//!   the first (`sum_{l >= 2} width * fan_in`).

use crate::ir::{Model, Optimizer};
use serde::Serialize;

/// Stack bytes of the call frames of one `f32` inference beyond its buffers: `predict`, the
/// runtime kernels and libm. The device test measures at most 968 B (a painted high-water mark
/// of 1076 B less 108 B of buffers, Cortex-M0 at `opt-level = "z"`); this leaves 312 B to spare.
/// `f64` models get twice as much (not measured: no `f64` firmware is built).
pub const INFERENCE_FRAMES_F32: u64 = 1280;

/// Stack bytes of the call frames of one `f32` training step beyond the trainer and its
/// per-sample buffers. The device test measures at most 1268 B (trainer and painted stack
/// 4432 B less 3164 B of buffers, Cortex-M0 at `opt-level = "z"`); this leaves 524 B to spare.
/// `f64` models get twice as much (not measured).
pub const TRAINING_FRAMES_F32: u64 = 1792;

/// Figures for one layer.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct LayerReport {
    /// Layer name.
    pub name: String,
    /// What it computes: `dense`, `conv`, `depthwise`, `pool max`, `pool average`.
    pub kind: &'static str,
    /// Rows of its weights: units, filters or channels (0 for a pooling).
    pub width: usize,
    /// Columns of its weights: the values feeding one unit (0 for a pooling).
    pub fan_in: usize,
    /// The shape it writes, as the spec writes shapes (`48 x 8`).
    pub shape: String,
    /// Values it writes per sample.
    pub size: usize,
    /// Activation keyword.
    pub activation: &'static str,
    /// `width * fan_in`.
    pub weights: u64,
    /// `width`.
    pub biases: u64,
    /// `weights + biases`.
    pub parameters: u64,
    /// Multiply-adds in the forward pass: `width * fan_in` for a dense layer; for a
    /// convolution, the taps inside the input summed over the output values
    /// ([`crate::ir::Layer::macs`]); none for a pooling.
    pub macs: u64,
}

/// Figures for a whole model.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Report {
    /// Per layer, in order (the output last).
    pub layers: Vec<LayerReport>,
    /// All trainable parameters.
    pub parameters: u64,
    /// Bytes of one scalar value.
    pub scalar_bytes: u64,
    /// Bytes of all parameters.
    pub parameter_bytes: u64,
    /// Bytes of the standardization mean and std (0 without `standardize`).
    pub scaling_bytes: u64,
    /// Flash for the baked model: `parameter_bytes + scaling_bytes`.
    pub flash_bytes: u64,
    /// Buffers `predict` holds (standardized input copy, one buffer per layer).
    pub buffer_inference_bytes: u64,
    /// Allowance for the call frames of one inference ([`INFERENCE_FRAMES_F32`], scaled).
    pub frames_inference_bytes: u64,
    /// RAM of one inference: `buffer_inference_bytes + frames_inference_bytes`.
    pub ram_inference_bytes: u64,
    /// The on-device trainer (parameters, gradients, optimizer state) and one training sample's
    /// buffers.
    pub buffer_training_bytes: u64,
    /// Allowance for the call frames of one training step ([`TRAINING_FRAMES_F32`], scaled).
    pub frames_training_bytes: u64,
    /// RAM of training: `buffer_training_bytes + frames_training_bytes`.
    pub ram_training_bytes: u64,
    /// Multiply-adds per inference.
    pub macs_inference: u64,
    /// Multiply-adds per training sample (forward and backward).
    pub macs_training: u64,
}

impl Report {
    /// Computes the report of a checked model.
    ///
    /// # Examples
    /// A 6-10-8-3 network has 6*10+10 + 10*8+8 + 8*3+3 = 70 + 88 + 27 = 185 parameters; the
    /// tests in this module work through every figure.
    pub fn of(model: &Model) -> Report {
        let b = model.scalar.bytes();
        let layers: Vec<LayerReport> = model
            .layers
            .iter()
            .map(|l| {
                let weights = (l.width * l.fan_in) as u64;
                LayerReport {
                    name: l.name.clone(),
                    kind: l.kind.words(),
                    width: l.width,
                    fan_in: l.fan_in,
                    shape: l.output.words(),
                    size: l.size(),
                    activation: l.activation.keyword(),
                    weights,
                    biases: l.width as u64,
                    parameters: weights + l.width as u64,
                    macs: l.macs(),
                }
            })
            .collect();
        let parameters: u64 = layers.iter().map(|l| l.parameters).sum();
        let std_values = if model.input.standardize {
            model.input.width as u64
        } else {
            0
        };
        let widths: u64 = layers.iter().map(|l| l.size as u64).sum();
        let out = model.output().width as u64;
        let optimizer_copies = match model.train.optimizer {
            Optimizer::Sgd { momentum: 0.0, .. } => 0,
            Optimizer::Sgd { .. } => 1,
            Optimizer::Adam { .. } => 2,
        };
        // Inference holds two halves that the buffers alternate between, and the output
        // (`plan::Plan::inference_halves`); training holds every buffer of a sample.
        let (even, odd) = crate::plan::Plan::new(model).inference_halves();
        let inference_values = (even + odd) as u64 + out;
        let sample_values = std_values + widths;
        // The trainer's parameters carry the input's mean and std too.
        let training_values =
            parameters * (2 + optimizer_copies) + 2 * std_values + sample_values + out + widths;
        // The frames hold scalars (accumulators, padded tails): they scale with the scalar size.
        let frames_inference = INFERENCE_FRAMES_F32 * b / 4;
        let frames_training = TRAINING_FRAMES_F32 * b / 4;
        let macs_inference: u64 = layers.iter().map(|l| l.macs).sum();
        let macs_back: u64 = layers.iter().skip(1).map(|l| l.macs).sum();
        Report {
            parameters,
            scalar_bytes: b,
            parameter_bytes: parameters * b,
            scaling_bytes: 2 * std_values * b,
            flash_bytes: (parameters + 2 * std_values) * b,
            buffer_inference_bytes: inference_values * b,
            frames_inference_bytes: frames_inference,
            ram_inference_bytes: inference_values * b + frames_inference,
            buffer_training_bytes: training_values * b,
            frames_training_bytes: frames_training,
            ram_training_bytes: training_values * b + frames_training,
            macs_inference,
            macs_training: 2 * macs_inference + macs_back,
            layers,
        }
    }
}

/// Formats a byte count the way the spec writes budgets: `B` below 1 KiB, else KiB or MiB with
/// up to two decimals.
pub fn human_bytes(n: u64) -> String {
    if n < 1024 {
        format!("{n} B")
    } else if n < 1024 * 1024 {
        trim(n as f64 / 1024.0, "KiB")
    } else {
        trim(n as f64 / (1024.0 * 1024.0), "MiB")
    }
}

fn trim(v: f64, unit: &str) -> String {
    let s = format!("{v:.2}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    format!("{s} {unit}")
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::ir::*;

    fn layer(name: &str, width: usize, fan_in: usize, activation: Activation) -> Layer {
        Layer::dense(name, width, fan_in, activation)
    }

    fn net_6_10_8_3(scalar: Scalar, standardize: bool, optimizer: Optimizer) -> Model {
        Model {
            name: "pump_health".into(),
            scalar,
            input: Input::vector("features", 6, standardize),
            layers: vec![
                layer("hidden1", 10, 6, Activation::Sigmoid),
                layer("hidden2", 8, 10, Activation::Tanh),
                layer("state", 3, 8, Activation::Softmax),
            ],
            classes: None,
            loss: Loss::CrossEntropy,
            penalty: Penalty::L2(0.01),
            init: Init::Glorot,
            seed: 7,
            train: Train {
                optimizer,
                batch: 32,
                epochs: 200,
            },
            budget: Budget::default(),
        }
    }

    const ADAM: Optimizer = Optimizer::Adam {
        rate: 0.001,
        beta1: 0.9,
        beta2: 0.999,
        epsilon: 1e-8,
    };

    #[test]
    fn parameters_of_6_10_8_3() {
        let r = Report::of(&net_6_10_8_3(Scalar::F32, false, ADAM));
        // hidden1: 6*10 weights + 10 biases = 70
        // hidden2: 10*8 weights + 8 biases  = 88
        // state:   8*3 weights + 3 biases   = 27
        let per: Vec<u64> = r.layers.iter().map(|l| l.parameters).collect();
        assert_eq!(per, vec![70, 88, 27]);
        assert_eq!(r.parameters, 70 + 88 + 27);
        assert_eq!(r.parameters, 185);
    }

    #[test]
    fn bytes_of_6_10_8_3_f32_adam_standardized() {
        let r = Report::of(&net_6_10_8_3(Scalar::F32, true, ADAM));
        // parameters: 185 * 4 B = 740 B
        assert_eq!(r.parameter_bytes, 740);
        // scaling: mean and std of 6 features = 12 values * 4 B = 48 B
        assert_eq!(r.scaling_bytes, 48);
        assert_eq!(r.flash_bytes, 788);
        // inference: the standardized input (6) and hidden2 (8) share the even half (8), hidden1
        // the odd half (10), plus the output 3: 21 values * 4 B = 84 B (the sum of all buffers,
        // 6 + 10 + 8 + 3 = 27 values, would be 108 B)
        assert_eq!(r.buffer_inference_bytes, 84);
        // plus the frame allowance for f32: 84 + 1280 = 1364 B
        assert_eq!(r.frames_inference_bytes, 1280);
        assert_eq!(r.ram_inference_bytes, 1364);
        // training: params 185 + gradients 185 + Adam m and v 2*185 = 740 values
        //           + inference 27 + output logits 3 + deltas 10 + 8 + 3 = 51 values
        //           + the trainer's input mean and std 12 values
        //           = 803 values * 4 B = 3212 B, plus 1792 B of frames = 5004 B
        assert_eq!(r.buffer_training_bytes, 3212);
        assert_eq!(r.ram_training_bytes, 3212 + 1792);
    }

    #[test]
    fn bytes_of_6_10_8_3_f64_plain_sgd() {
        let sgd = Optimizer::Sgd {
            rate: 0.1,
            momentum: 0.0,
        };
        let r = Report::of(&net_6_10_8_3(Scalar::F64, false, sgd));
        // 185 * 8 B = 1480 B; no scaling
        assert_eq!(r.flash_bytes, 1480);
        // inference: 10 + 8 + 3 = 21 values * 8 B = 168 B, plus 2 * 1280 B of frames
        assert_eq!(r.buffer_inference_bytes, 168);
        assert_eq!(r.ram_inference_bytes, 168 + 2560);
        // training: params + gradients 370 + 21 + 3 + 21 = 415 values * 8 B = 3320 B
        assert_eq!(r.buffer_training_bytes, 3320);
        assert_eq!(r.ram_training_bytes, 3320 + 3584);
        let momentum = Optimizer::Sgd {
            rate: 0.1,
            momentum: 0.9,
        };
        let r = Report::of(&net_6_10_8_3(Scalar::F64, false, momentum));
        // one velocity copy more: 415 + 185 = 600 values * 8 B = 4800 B
        assert_eq!(r.buffer_training_bytes, 4800);
    }

    #[test]
    fn multiply_adds_of_6_10_8_3() {
        let r = Report::of(&net_6_10_8_3(Scalar::F32, false, ADAM));
        // forward: 6*10 + 10*8 + 8*3 = 60 + 80 + 24 = 164
        assert_eq!(r.macs_inference, 164);
        // training: forward 164 + gradient outer products 164 + errors back through
        //           hidden2 and state (80 + 24 = 104) = 432
        assert_eq!(r.macs_training, 432);
    }

    #[test]
    fn human_bytes_units() {
        assert_eq!(human_bytes(0), "0 B");
        assert_eq!(human_bytes(1023), "1023 B");
        assert_eq!(human_bytes(1024), "1 KiB");
        assert_eq!(human_bytes(1536), "1.5 KiB");
        assert_eq!(human_bytes(3 * 1024 * 1024), "3 MiB");
    }
}
