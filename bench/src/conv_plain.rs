//! (c) The conv network C1 hand-written as plain nested loops over fixed-size arrays, the way a
//! firmware engineer writes it: the input `[step][channel]`, each conv filter `[tap][channel]`,
//! every index computed in the loop, the bias added first, relu with `max`, libm's `expf` and
//! `logf` for the softmax and the loss. `core` only, so that the Cortex-M4F firmware of
//! `bench/device` includes this very file.
//!
//! C1: input 128 x 3; conv 16 kernel 5 stride 2 relu (62 x 16); max pool 2 (31 x 16); conv 16
//! kernel 3 relu (29 x 16); average over the window (16); dense 16 relu; softmax 4.

// Kept as a user writes it (indexed loops included).
#![allow(clippy::needless_range_loop, clippy::neg_cmp_op_on_partial_ord)]

/// Steps of the input window.
pub const T: usize = 128;
/// Channels of the input.
pub const C: usize = 3;
/// Filters of the first conv.
pub const F1: usize = 16;
/// Taps of the first conv.
pub const K1: usize = 5;
/// Stride of the first conv.
pub const S1: usize = 2;
/// Positions of the first conv: `(T - K1) / S1 + 1`.
pub const P1: usize = (T - K1) / S1 + 1;
/// Positions after the max pool of 2.
pub const Q: usize = P1 / 2;
/// Filters of the second conv.
pub const F2: usize = 16;
/// Taps of the second conv.
pub const K2: usize = 3;
/// Positions of the second conv.
pub const P2: usize = Q - K2 + 1;
/// Units of the dense layer.
pub const H: usize = 16;
/// Classes.
pub const O: usize = 4;
/// Input values per sample.
pub const IN: usize = T * C;

/// The parameters, each weight matrix row-major as sinew stores them (conv rows `[tap][channel]`).
#[derive(Debug, Clone)]
pub struct Net {
    /// First conv, one row per filter.
    pub w1: [[f32; K1 * C]; F1],
    /// First conv biases.
    pub b1: [f32; F1],
    /// Second conv, one row per filter.
    pub w2: [[f32; K2 * F1]; F2],
    /// Second conv biases.
    pub b2: [f32; F2],
    /// Dense layer.
    pub w3: [[f32; F2]; H],
    /// Dense biases.
    pub b3: [f32; H],
    /// Output layer.
    pub w4: [[f32; H]; O],
    /// Output biases.
    pub b4: [f32; O],
}

/// The values of one forward pass that backprop needs.
#[derive(Debug, Clone)]
pub struct Forward {
    /// First conv after relu, `[position][filter]`.
    pub a1: [[f32; F1]; P1],
    /// After the max pool.
    pub m1: [[f32; F1]; Q],
    /// Second conv after relu.
    pub a2: [[f32; F2]; P2],
    /// The average over the window.
    pub avg: [f32; F2],
    /// The dense layer after relu.
    pub h: [f32; H],
    /// The output logits.
    pub z: [f32; O],
}

impl Forward {
    /// All zero.
    pub const fn zeroed() -> Forward {
        Forward {
            a1: [[0.0; F1]; P1],
            m1: [[0.0; F1]; Q],
            a2: [[0.0; F2]; P2],
            avg: [0.0; F2],
            h: [0.0; H],
            z: [0.0; O],
        }
    }
}

impl Net {
    /// All zero (also the gradient accumulator).
    pub const fn zeroed() -> Net {
        Net {
            w1: [[0.0; K1 * C]; F1],
            b1: [0.0; F1],
            w2: [[0.0; K2 * F1]; F2],
            b2: [0.0; F2],
            w3: [[0.0; F2]; H],
            b3: [0.0; H],
            w4: [[0.0; H]; O],
            b4: [0.0; O],
        }
    }

    /// The forward pass of one sample `x` (`[step][channel]`, `IN` values) into `f`.
    pub fn forward(&self, x: &[f32], f: &mut Forward) {
        for p in 0..P1 {
            for k in 0..F1 {
                let mut s = self.b1[k];
                for t in 0..K1 {
                    for c in 0..C {
                        s += self.w1[k][t * C + c] * x[(p * S1 + t) * C + c];
                    }
                }
                f.a1[p][k] = s.max(0.0);
            }
        }
        for q in 0..Q {
            for k in 0..F1 {
                f.m1[q][k] = f.a1[2 * q][k].max(f.a1[2 * q + 1][k]);
            }
        }
        for p in 0..P2 {
            for k in 0..F2 {
                let mut s = self.b2[k];
                for t in 0..K2 {
                    for c in 0..F1 {
                        s += self.w2[k][t * F1 + c] * f.m1[p + t][c];
                    }
                }
                f.a2[p][k] = s.max(0.0);
            }
        }
        for k in 0..F2 {
            let mut s = 0.0;
            for p in 0..P2 {
                s += f.a2[p][k];
            }
            f.avg[k] = s / P2 as f32;
        }
        for j in 0..H {
            let mut s = self.b3[j];
            for i in 0..F2 {
                s += self.w3[j][i] * f.avg[i];
            }
            f.h[j] = s.max(0.0);
        }
        for j in 0..O {
            let mut s = self.b4[j];
            for i in 0..H {
                s += self.w4[j][i] * f.h[i];
            }
            f.z[j] = s;
        }
    }

    /// Class probabilities of one sample.
    pub fn predict(&self, x: &[f32]) -> [f32; O] {
        let mut f = Forward::zeroed();
        self.forward(x, &mut f);
        softmax(&f.z)
    }

    /// One sample's forward and backward pass: adds its gradient to `g`, returns its loss
    /// `lse(z) - z . y`.
    pub fn backprop(&self, x: &[f32], y: &[f32], g: &mut Net) -> f32 {
        let mut f = Forward::zeroed();
        self.forward(x, &mut f);
        let m = f.z.iter().fold(f32::NEG_INFINITY, |a, &b| a.max(b));
        let mut s = 0.0;
        for j in 0..O {
            s += libm::expf(f.z[j] - m);
        }
        let lse = m + libm::logf(s);
        let mut loss = 0.0;
        let mut d4 = [0.0; O];
        for j in 0..O {
            loss += y[j] * (lse - f.z[j]);
            d4[j] = libm::expf(f.z[j] - lse) - y[j];
        }
        // Output layer.
        let mut dh = [0.0; H];
        for j in 0..O {
            g.b4[j] += d4[j];
            for i in 0..H {
                g.w4[j][i] += d4[j] * f.h[i];
                dh[i] += self.w4[j][i] * d4[j];
            }
        }
        for i in 0..H {
            if !(f.h[i] > 0.0) {
                dh[i] = 0.0;
            }
        }
        // Dense layer.
        let mut davg = [0.0; F2];
        for j in 0..H {
            g.b3[j] += dh[j];
            for i in 0..F2 {
                g.w3[j][i] += dh[j] * f.avg[i];
                davg[i] += self.w3[j][i] * dh[j];
            }
        }
        // Average pool and the second conv's relu.
        let mut d2 = [[0.0; F2]; P2];
        for p in 0..P2 {
            for k in 0..F2 {
                if f.a2[p][k] > 0.0 {
                    d2[p][k] = davg[k] / P2 as f32;
                }
            }
        }
        // Second conv.
        let mut dm1 = [[0.0; F1]; Q];
        for p in 0..P2 {
            for k in 0..F2 {
                let d = d2[p][k];
                g.b2[k] += d;
                for t in 0..K2 {
                    for c in 0..F1 {
                        g.w2[k][t * F1 + c] += d * f.m1[p + t][c];
                        dm1[p + t][c] += self.w2[k][t * F1 + c] * d;
                    }
                }
            }
        }
        // Max pool (to the first maximum) and the first conv's relu.
        let mut d1 = [[0.0; F1]; P1];
        for q in 0..Q {
            for k in 0..F1 {
                let i = if f.a1[2 * q][k] >= f.a1[2 * q + 1][k] {
                    2 * q
                } else {
                    2 * q + 1
                };
                if f.a1[i][k] > 0.0 {
                    d1[i][k] = dm1[q][k];
                }
            }
        }
        // First conv (no error to the input).
        for p in 0..P1 {
            for k in 0..F1 {
                let d = d1[p][k];
                g.b1[k] += d;
                for t in 0..K1 {
                    for c in 0..C {
                        g.w1[k][t * C + c] += d * x[(p * S1 + t) * C + c];
                    }
                }
            }
        }
        loss
    }

    /// Cost J (mean loss plus `lambda / (2m) sum w^2`) and its gradient over a batch of
    /// row-major samples, written to `g`.
    pub fn gradient(&self, xs: &[f32], ys: &[f32], lambda: f32, g: &mut Net) -> f32 {
        *g = Net::zeroed();
        let mut sum = 0.0;
        let mut m = 0;
        for (x, y) in xs.chunks_exact(IN).zip(ys.chunks_exact(O)) {
            sum += self.backprop(x, y, g);
            m += 1;
        }
        let m = m as f32;
        let mut sq = 0.0;
        let mut finish = |gw: &mut [f32], w: &[f32]| {
            for (gv, wv) in gw.iter_mut().zip(w) {
                *gv = *gv / m + lambda / m * wv;
                sq += wv * wv;
            }
        };
        finish(g.w1.as_flattened_mut(), self.w1.as_flattened());
        finish(g.w2.as_flattened_mut(), self.w2.as_flattened());
        finish(g.w3.as_flattened_mut(), self.w3.as_flattened());
        finish(g.w4.as_flattened_mut(), self.w4.as_flattened());
        for b in [&mut g.b1[..], &mut g.b2[..], &mut g.b3[..], &mut g.b4[..]] {
            b.iter_mut().for_each(|v| *v /= m);
        }
        sum / m + lambda / (2.0 * m) * sq
    }
}

/// Softmax from the maximum.
pub fn softmax(z: &[f32; O]) -> [f32; O] {
    let m = z.iter().fold(f32::NEG_INFINITY, |a, &b| a.max(b));
    let mut e = [0.0; O];
    let mut s = 0.0;
    for j in 0..O {
        e[j] = libm::expf(z[j] - m);
        s += e[j];
    }
    for v in e.iter_mut() {
        *v /= s;
    }
    e
}
