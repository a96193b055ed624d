//! (b) The conv network C1 hand-written with nalgebra's static matrices: each conv as im2col
//! (one column of the patch matrix per output position, the patch in the `[tap][channel]` order
//! of the filter rows) and one matrix product `W P` of the filters by the patches, the bias
//! added to every column; the gradient as the transposed products `D P^T` (weights) and `W^T D`
//! (errors of the patches, added back into the positions they came from). libm's `expf` and
//! `logf` (four of each per sample), no heap: `core` only, so that the Cortex-M4F firmware of
//! `bench/device` includes this very file. Shapes as in `conv_plain.rs`.

use super::conv_plain::{C, F1, F2, H, IN, K1, K2, O, P1, P2, Q, S1};
use nalgebra::{SMatrix, SVector};

/// Rows of the first patch matrix: taps x channels.
const R1: usize = K1 * C;
/// Rows of the second patch matrix.
const R2: usize = K2 * F1;

/// The parameters as static matrices.
#[derive(Debug, Clone)]
pub struct Net {
    /// First conv filters, `F1 x (K1 C)`.
    pub w1: SMatrix<f32, F1, R1>,
    /// First conv biases.
    pub b1: SVector<f32, F1>,
    /// Second conv filters, `F2 x (K2 F1)`.
    pub w2: SMatrix<f32, F2, R2>,
    /// Second conv biases.
    pub b2: SVector<f32, F2>,
    /// Dense layer.
    pub w3: SMatrix<f32, H, F2>,
    /// Dense biases.
    pub b3: SVector<f32, H>,
    /// Output layer.
    pub w4: SMatrix<f32, O, H>,
    /// Output biases.
    pub b4: SVector<f32, O>,
}

/// The values of one forward pass that the gradient needs (columns are positions).
struct Forward {
    x1: SMatrix<f32, R1, P1>,
    a1: SMatrix<f32, F1, P1>,
    x2: SMatrix<f32, R2, P2>,
    a2: SMatrix<f32, F2, P2>,
    avg: SVector<f32, F2>,
    h: SVector<f32, H>,
    z: SVector<f32, O>,
}

fn relu<const R: usize, const K: usize>(m: &mut SMatrix<f32, R, K>) {
    m.apply(|v| *v = v.max(0.0));
}

/// Softmax from the maximum.
pub fn softmax(z: &SVector<f32, O>) -> SVector<f32, O> {
    let m = z.max();
    let e = z.map(|v| libm::expf(v - m));
    e / e.sum()
}

impl Net {
    /// All zero (also the gradient accumulator).
    pub fn zeroed() -> Net {
        Net {
            w1: SMatrix::zeros(),
            b1: SVector::zeros(),
            w2: SMatrix::zeros(),
            b2: SVector::zeros(),
            w3: SMatrix::zeros(),
            b3: SVector::zeros(),
            w4: SMatrix::zeros(),
            b4: SVector::zeros(),
        }
    }

    /// From sinew's row-major parameters, in layer order.
    #[allow(clippy::too_many_arguments)]
    pub fn from_rows(
        w1: &[f32],
        b1: &[f32],
        w2: &[f32],
        b2: &[f32],
        w3: &[f32],
        b3: &[f32],
        w4: &[f32],
        b4: &[f32],
    ) -> Net {
        Net {
            w1: SMatrix::from_row_slice(w1),
            b1: SVector::from_column_slice(b1),
            w2: SMatrix::from_row_slice(w2),
            b2: SVector::from_column_slice(b2),
            w3: SMatrix::from_row_slice(w3),
            b3: SVector::from_column_slice(b3),
            w4: SMatrix::from_row_slice(w4),
            b4: SVector::from_column_slice(b4),
        }
    }

    fn forward(&self, x: &[f32]) -> Forward {
        // The patch of position p is the contiguous run x[p S1 C .. p S1 C + K1 C].
        let x1 = SMatrix::<f32, R1, P1>::from_fn(|r, p| x[p * S1 * C + r]);
        let mut a1 = self.w1 * x1;
        for mut col in a1.column_iter_mut() {
            col += self.b1;
        }
        relu(&mut a1);
        let m1 = SMatrix::<f32, F1, Q>::from_fn(|k, q| a1[(k, 2 * q)].max(a1[(k, 2 * q + 1)]));
        let x2 = SMatrix::<f32, R2, P2>::from_fn(|r, p| m1[(r % F1, p + r / F1)]);
        let mut a2 = self.w2 * x2;
        for mut col in a2.column_iter_mut() {
            col += self.b2;
        }
        relu(&mut a2);
        let avg = a2.column_sum() / P2 as f32;
        let h = (self.w3 * avg + self.b3).map(|v| v.max(0.0));
        let z = self.w4 * h + self.b4;
        Forward {
            x1,
            a1,
            x2,
            a2,
            avg,
            h,
            z,
        }
    }

    /// Class probabilities of one sample (`IN` values, `[step][channel]`).
    pub fn predict(&self, x: &[f32]) -> SVector<f32, O> {
        softmax(&self.forward(x).z)
    }

    /// One sample's forward and backward pass: adds its gradient to `g`, returns its loss.
    pub fn backprop(&self, x: &[f32], y: &SVector<f32, O>, g: &mut Net) -> f32 {
        let f = self.forward(x);
        let m = f.z.max();
        let lse = m + libm::logf(f.z.map(|v| libm::expf(v - m)).sum());
        let loss = lse * y.sum() - f.z.dot(y);
        let d4 = f.z.map(|v| libm::expf(v - lse)) - y;
        g.w4.ger(1.0, &d4, &f.h, 1.0);
        g.b4 += d4;
        let dh = self
            .w4
            .tr_mul(&d4)
            .zip_map(&f.h, |d, a| if a > 0.0 { d } else { 0.0 });
        g.w3.ger(1.0, &dh, &f.avg, 1.0);
        g.b3 += dh;
        let davg = self.w3.tr_mul(&dh) / P2 as f32;
        let d2 =
            SMatrix::<f32, F2, P2>::from_fn(|k, p| if f.a2[(k, p)] > 0.0 { davg[k] } else { 0.0 });
        g.w2.gemm(1.0, &d2, &f.x2.transpose(), 1.0);
        g.b2 += d2.column_sum();
        let dx2 = self.w2.tr_mul(&d2);
        let mut dm1 = SMatrix::<f32, F1, Q>::zeros();
        for p in 0..P2 {
            for r in 0..R2 {
                dm1[(r % F1, p + r / F1)] += dx2[(r, p)];
            }
        }
        let mut d1 = SMatrix::<f32, F1, P1>::zeros();
        for q in 0..Q {
            for k in 0..F1 {
                let i = if f.a1[(k, 2 * q)] >= f.a1[(k, 2 * q + 1)] {
                    2 * q
                } else {
                    2 * q + 1
                };
                if f.a1[(k, i)] > 0.0 {
                    d1[(k, i)] = dm1[(k, q)];
                }
            }
        }
        g.w1.gemm(1.0, &d1, &f.x1.transpose(), 1.0);
        g.b1 += d1.column_sum();
        loss
    }

    /// Cost J and its gradient over a batch of row-major samples, written to `g`.
    pub fn gradient(&self, xs: &[f32], ys: &[SVector<f32, O>], lambda: f32, g: &mut Net) -> f32 {
        *g = Net::zeroed();
        let mut sum = 0.0;
        let mut m = 0;
        for (x, y) in xs.chunks_exact(IN).zip(ys) {
            sum += self.backprop(x, y, g);
            m += 1;
        }
        let m = m as f32;
        let sq = self.w1.norm_squared()
            + self.w2.norm_squared()
            + self.w3.norm_squared()
            + self.w4.norm_squared();
        g.w1 = g.w1 / m + self.w1 * (lambda / m);
        g.w2 = g.w2 / m + self.w2 * (lambda / m);
        g.w3 = g.w3 / m + self.w3 * (lambda / m);
        g.w4 = g.w4 / m + self.w4 * (lambda / m);
        g.b1 /= m;
        g.b2 /= m;
        g.b3 /= m;
        g.b4 /= m;
        sum / m + lambda / (2.0 * m) * sq
    }
}
