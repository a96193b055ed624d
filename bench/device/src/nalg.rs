//! (b) N1 and N2 hand-written with nalgebra's static matrices, `no_std`: the forms of
//! `bench/src/nalg.rs` (`W a + b`, `map` for the activation, softmax from the maximum) with
//! libm's functions, what a `no_std` engineer calls (sinew's runtime has its own f32 `exp` and
//! `tanh`). The matrices are held by value: there is no heap on the board.

use nalgebra::{SMatrix, SVector};

/// The logistic sigmoid `1 / (1 + e^-z)`, as an engineer writes it.
#[inline]
fn sigmoid(z: f32) -> f32 {
    1.0 / (1.0 + libm::expf(-z))
}

/// `tanh z`.
#[inline]
fn tanh(z: f32) -> f32 {
    libm::tanhf(z)
}

/// One dense layer: `O x I` weights and `O` biases.
#[derive(Debug, Clone)]
pub struct Dense<const I: usize, const O: usize> {
    /// Weights.
    pub w: SMatrix<f32, O, I>,
    /// Biases.
    pub b: SVector<f32, O>,
}

impl<const I: usize, const O: usize> Dense<I, O> {
    /// From row-major weights (`O` rows of `I`) and `O` biases.
    pub fn new(w: &[f32], b: &[f32]) -> Self {
        Dense {
            w: SMatrix::from_row_slice(w),
            b: SVector::from_column_slice(b),
        }
    }

    /// `z = W x + b`.
    #[inline]
    pub fn apply(&self, x: &SVector<f32, I>) -> SVector<f32, O> {
        self.w * x + self.b
    }
}

/// `softmax(z)`.
#[inline]
pub fn softmax<const O: usize>(z: &SVector<f32, O>) -> SVector<f32, O> {
    let m = z.max();
    let e = z.map(|v| libm::expf(v - m));
    let s = e.sum();
    e / s
}

/// N1 = 6-10-8-3, sigmoid, sigmoid, softmax.
#[derive(Debug, Clone)]
pub struct N1 {
    /// First hidden layer.
    pub l1: Dense<6, 10>,
    /// Second hidden layer.
    pub l2: Dense<10, 8>,
    /// Output layer.
    pub l3: Dense<8, 3>,
}

impl N1 {
    /// Inference.
    pub fn predict(&self, x: &SVector<f32, 6>) -> SVector<f32, 3> {
        let a1 = self.l1.apply(x).map(sigmoid);
        let a2 = self.l2.apply(&a1).map(sigmoid);
        softmax(&self.l3.apply(&a2))
    }
}

/// N2 = 64-32-10, tanh, softmax.
#[derive(Debug, Clone)]
pub struct N2 {
    /// Hidden layer.
    pub l1: Dense<64, 32>,
    /// Output layer.
    pub l2: Dense<32, 10>,
}

impl N2 {
    /// Inference.
    pub fn predict(&self, x: &SVector<f32, 64>) -> SVector<f32, 10> {
        let a1 = self.l1.apply(x).map(tanh);
        softmax(&self.l2.apply(&a1))
    }
}
