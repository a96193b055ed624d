//! (b) The benchmark networks hand-written with nalgebra's static matrices, the way an engineer
//! would write them: `W a + b`, `map` for the activation, `tr_mul` for `W^T d`, `ger` for the
//! rank-one gradient update, one sample at a time. Matrices live in a `Box` so that the 400 KB
//! layer of N3 never passes through the stack.

use nalgebra::{SMatrix, SVector};
use std::marker::PhantomData;

/// The transcendental functions a network uses.
pub trait Math {
    /// e^x.
    fn exp(x: f32) -> f32;
    /// tanh x.
    fn tanh(x: f32) -> f32;
    /// ln x.
    fn ln(x: f32) -> f32;
}

/// std's functions (the platform's C library): what a workstation engineer writes.
#[derive(Debug, Clone, Copy)]
pub struct StdMath;
impl Math for StdMath {
    #[inline]
    fn exp(x: f32) -> f32 {
        x.exp()
    }
    #[inline]
    fn tanh(x: f32) -> f32 {
        x.tanh()
    }
    #[inline]
    fn ln(x: f32) -> f32 {
        x.ln()
    }
}

/// libm's functions: what a `no_std` engineer writes (sinew's runtime has its own `f32` `exp` and
/// `tanh`, and calls libm for the rest).
#[derive(Debug, Clone, Copy)]
pub struct LibmMath;
impl Math for LibmMath {
    #[inline]
    fn exp(x: f32) -> f32 {
        libm::expf(x)
    }
    #[inline]
    fn tanh(x: f32) -> f32 {
        libm::tanhf(x)
    }
    #[inline]
    fn ln(x: f32) -> f32 {
        libm::logf(x)
    }
}

/// A hidden-layer activation.
pub trait Act {
    /// g(z).
    fn f<M: Math>(z: f32) -> f32;
    /// g'(z) from a = g(z).
    fn d(a: f32) -> f32;
}

/// `1 / (1 + e^-z)`.
#[derive(Debug, Clone, Copy)]
pub struct Sigmoid;
impl Act for Sigmoid {
    #[inline]
    fn f<M: Math>(z: f32) -> f32 {
        1.0 / (1.0 + M::exp(-z))
    }
    #[inline]
    fn d(a: f32) -> f32 {
        a * (1.0 - a)
    }
}

/// `tanh z`.
#[derive(Debug, Clone, Copy)]
pub struct Tanh;
impl Act for Tanh {
    #[inline]
    fn f<M: Math>(z: f32) -> f32 {
        M::tanh(z)
    }
    #[inline]
    fn d(a: f32) -> f32 {
        1.0 - a * a
    }
}

/// `max(z, 0)`.
#[derive(Debug, Clone, Copy)]
pub struct Relu;
impl Act for Relu {
    #[inline]
    fn f<M: Math>(z: f32) -> f32 {
        z.max(0.0)
    }
    #[inline]
    fn d(a: f32) -> f32 {
        if a > 0.0 {
            1.0
        } else {
            0.0
        }
    }
}

/// One dense layer: `O x I` weights (boxed) and `O` biases.
#[derive(Debug, Clone)]
pub struct Dense<const I: usize, const O: usize> {
    /// Weights.
    pub w: Box<SMatrix<f32, O, I>>,
    /// Biases.
    pub b: SVector<f32, O>,
}

impl<const I: usize, const O: usize> Dense<I, O> {
    /// From row-major weights and biases.
    pub fn new(w: &[f32], b: &[f32]) -> Self {
        let mut m = Box::new(SMatrix::<f32, O, I>::zeros());
        for (j, row) in w.chunks_exact(I).enumerate() {
            for (i, v) in row.iter().enumerate() {
                m[(j, i)] = *v;
            }
        }
        Dense {
            w: m,
            b: SVector::from_column_slice(b),
        }
    }

    /// A zero layer (gradient accumulator).
    pub fn zeros() -> Self {
        Dense {
            w: Box::new(SMatrix::zeros()),
            b: SVector::zeros(),
        }
    }

    /// `z = W x + b`.
    #[inline]
    pub fn apply(&self, x: &SVector<f32, I>) -> SVector<f32, O> {
        &*self.w * x + self.b
    }

    /// `G += d a^T`, `g_b += d`.
    #[inline]
    pub fn accumulate(&mut self, d: &SVector<f32, O>, a: &SVector<f32, I>) {
        self.w.ger(1.0, d, a, 1.0);
        self.b += d;
    }

    /// Batch finish: `G / m + (lambda / m) W`, `g_b / m`; the penalty term `sum W^2`.
    pub fn finish(&mut self, params: &Dense<I, O>, m: f32, lambda: f32) -> f32 {
        *self.w /= m;
        let k = lambda / m;
        self.w.zip_apply(&*params.w, |g, w| *g += k * w);
        self.b /= m;
        params.w.norm_squared()
    }
}

/// `softmax(z)`.
#[inline]
pub fn softmax<M: Math, const O: usize>(z: &SVector<f32, O>) -> SVector<f32, O> {
    let m = z.max();
    let e = z.map(|v| M::exp(v - m));
    let s = e.sum();
    e / s
}

/// Cross-entropy of a softmax output from its logits: `sum_j y_j (lse(z) - z_j)`.
#[inline]
pub fn cross_entropy<M: Math, const O: usize>(z: &SVector<f32, O>, y: &SVector<f32, O>) -> f32 {
    let m = z.max();
    let lse = m + M::ln(z.map(|v| M::exp(v - m)).sum());
    y.dot(&z.map(|v| lse - v))
}

/// A network with two hidden layers (N1, N3).
#[derive(Debug, Clone)]
pub struct Net3<M, A1, A2, const I: usize, const H1: usize, const H2: usize, const O: usize> {
    /// First hidden layer.
    pub l1: Dense<I, H1>,
    /// Second hidden layer.
    pub l2: Dense<H1, H2>,
    /// Output layer.
    pub l3: Dense<H2, O>,
    /// L2 penalty lambda.
    pub lambda: f32,
    _m: PhantomData<(M, A1, A2)>,
}

/// The gradient of a [`Net3`].
pub type Grad3<const I: usize, const H1: usize, const H2: usize, const O: usize> =
    (Dense<I, H1>, Dense<H1, H2>, Dense<H2, O>);

impl<
        M: Math,
        A1: Act,
        A2: Act,
        const I: usize,
        const H1: usize,
        const H2: usize,
        const O: usize,
    > Net3<M, A1, A2, I, H1, H2, O>
{
    /// From row-major (weights, biases) per layer.
    pub fn new(layers: &crate::Layers, lambda: f32) -> Self {
        Net3 {
            l1: Dense::new(&layers[0].0, &layers[0].1),
            l2: Dense::new(&layers[1].0, &layers[1].1),
            l3: Dense::new(&layers[2].0, &layers[2].1),
            lambda,
            _m: PhantomData,
        }
    }

    /// A zero gradient.
    pub fn zero_grad() -> Grad3<I, H1, H2, O> {
        (Dense::zeros(), Dense::zeros(), Dense::zeros())
    }

    /// Inference.
    pub fn predict(&self, x: &SVector<f32, I>) -> SVector<f32, O> {
        let a1 = self.l1.apply(x).map(A1::f::<M>);
        let a2 = self.l2.apply(&a1).map(A2::f::<M>);
        softmax::<M, O>(&self.l3.apply(&a2))
    }

    /// One sample's backprop, accumulated into `g`; returns its loss.
    pub fn backprop(
        &self,
        x: &SVector<f32, I>,
        y: &SVector<f32, O>,
        g: &mut Grad3<I, H1, H2, O>,
    ) -> f32 {
        let a1 = self.l1.apply(x).map(A1::f::<M>);
        let a2 = self.l2.apply(&a1).map(A2::f::<M>);
        let z3 = self.l3.apply(&a2);
        let loss = cross_entropy::<M, O>(&z3, y);
        let d3 = softmax::<M, O>(&z3) - y;
        g.2.accumulate(&d3, &a2);
        let d2 = self.l3.w.tr_mul(&d3).component_mul(&a2.map(A2::d));
        g.1.accumulate(&d2, &a1);
        let d1 = self.l2.w.tr_mul(&d2).component_mul(&a1.map(A1::d));
        g.0.accumulate(&d1, x);
        loss
    }

    /// Cost J and its gradient over a batch: zero, backprop every sample, finish.
    pub fn gradient(
        &self,
        xs: &[SVector<f32, I>],
        ys: &[SVector<f32, O>],
        g: &mut Grad3<I, H1, H2, O>,
    ) -> f32 {
        g.0.w.fill(0.0);
        g.0.b.fill(0.0);
        g.1.w.fill(0.0);
        g.1.b.fill(0.0);
        g.2.w.fill(0.0);
        g.2.b.fill(0.0);
        let mut sum = 0.0;
        for (x, y) in xs.iter().zip(ys) {
            sum += self.backprop(x, y, g);
        }
        let m = xs.len() as f32;
        let sq = g.0.finish(&self.l1, m, self.lambda)
            + g.1.finish(&self.l2, m, self.lambda)
            + g.2.finish(&self.l3, m, self.lambda);
        sum / m + self.lambda / (2.0 * m) * sq
    }
}

/// A network with one hidden layer (N2).
#[derive(Debug, Clone)]
pub struct Net2<M, A1, const I: usize, const H1: usize, const O: usize> {
    /// Hidden layer.
    pub l1: Dense<I, H1>,
    /// Output layer.
    pub l2: Dense<H1, O>,
    /// L2 penalty lambda.
    pub lambda: f32,
    _m: PhantomData<(M, A1)>,
}

/// The gradient of a [`Net2`].
pub type Grad2<const I: usize, const H1: usize, const O: usize> = (Dense<I, H1>, Dense<H1, O>);

impl<M: Math, A1: Act, const I: usize, const H1: usize, const O: usize> Net2<M, A1, I, H1, O> {
    /// From row-major (weights, biases) per layer.
    pub fn new(layers: &crate::Layers, lambda: f32) -> Self {
        Net2 {
            l1: Dense::new(&layers[0].0, &layers[0].1),
            l2: Dense::new(&layers[1].0, &layers[1].1),
            lambda,
            _m: PhantomData,
        }
    }

    /// A zero gradient.
    pub fn zero_grad() -> Grad2<I, H1, O> {
        (Dense::zeros(), Dense::zeros())
    }

    /// Inference.
    pub fn predict(&self, x: &SVector<f32, I>) -> SVector<f32, O> {
        let a1 = self.l1.apply(x).map(A1::f::<M>);
        softmax::<M, O>(&self.l2.apply(&a1))
    }

    /// One sample's backprop, accumulated into `g`; returns its loss.
    pub fn backprop(
        &self,
        x: &SVector<f32, I>,
        y: &SVector<f32, O>,
        g: &mut Grad2<I, H1, O>,
    ) -> f32 {
        let a1 = self.l1.apply(x).map(A1::f::<M>);
        let z2 = self.l2.apply(&a1);
        let loss = cross_entropy::<M, O>(&z2, y);
        let d2 = softmax::<M, O>(&z2) - y;
        g.1.accumulate(&d2, &a1);
        let d1 = self.l2.w.tr_mul(&d2).component_mul(&a1.map(A1::d));
        g.0.accumulate(&d1, x);
        loss
    }

    /// Cost J and its gradient over a batch: zero, backprop every sample, finish.
    pub fn gradient(
        &self,
        xs: &[SVector<f32, I>],
        ys: &[SVector<f32, O>],
        g: &mut Grad2<I, H1, O>,
    ) -> f32 {
        g.0.w.fill(0.0);
        g.0.b.fill(0.0);
        g.1.w.fill(0.0);
        g.1.b.fill(0.0);
        let mut sum = 0.0;
        for (x, y) in xs.iter().zip(ys) {
            sum += self.backprop(x, y, g);
        }
        let m = xs.len() as f32;
        let sq = g.0.finish(&self.l1, m, self.lambda) + g.1.finish(&self.l2, m, self.lambda);
        sum / m + self.lambda / (2.0 * m) * sq
    }
}

/// Rows of `v` as nalgebra vectors.
pub fn vectors<const N: usize>(v: &[f32]) -> Vec<SVector<f32, N>> {
    v.chunks_exact(N).map(SVector::from_column_slice).collect()
}
