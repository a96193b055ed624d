//! (c) The benchmark networks as plain `Vec<f32>` loops: indexed loops over row-major weights, a
//! fresh vector per layer per call, std's `exp`/`tanh`, one sample at a time.

/// A layer's activation.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Act {
    /// `1 / (1 + e^-z)`.
    Sigmoid,
    /// `tanh z`.
    Tanh,
    /// `max(z, 0)`.
    Relu,
    /// Softmax (output only).
    Softmax,
}

/// One dense layer, row-major `o x n`.
#[derive(Debug, Clone)]
pub struct Layer {
    /// Weights, row `j` into unit `j`.
    pub w: Vec<f32>,
    /// Biases.
    pub b: Vec<f32>,
    /// Fan-in.
    pub n: usize,
    /// Width.
    pub o: usize,
    /// Activation.
    pub act: Act,
}

/// A network of [`Layer`]s with an L2 penalty and cross-entropy loss.
#[derive(Debug, Clone)]
pub struct Net {
    /// Layers, output last.
    pub layers: Vec<Layer>,
    /// L2 lambda.
    pub lambda: f32,
}

/// A gradient: per layer (weights, biases).
pub type Grad = Vec<(Vec<f32>, Vec<f32>)>;

impl Net {
    /// From (weights, biases) per layer and the activations.
    pub fn new(layers: &crate::Layers, acts: &[Act], lambda: f32) -> Net {
        Net {
            layers: layers
                .iter()
                .zip(acts)
                .map(|((w, b), &act)| Layer {
                    n: w.len() / b.len(),
                    o: b.len(),
                    w: w.clone(),
                    b: b.clone(),
                    act,
                })
                .collect(),
            lambda,
        }
    }

    /// A zero gradient.
    pub fn zero_grad(&self) -> Grad {
        self.layers
            .iter()
            .map(|l| (vec![0.0; l.w.len()], vec![0.0; l.b.len()]))
            .collect()
    }

    /// Activations of every layer (the last is the output) and the output logits.
    fn forward(&self, x: &[f32]) -> (Vec<Vec<f32>>, Vec<f32>) {
        let mut acts: Vec<Vec<f32>> = Vec::new();
        let mut logits = Vec::new();
        for (k, l) in self.layers.iter().enumerate() {
            let input: &[f32] = if k == 0 { x } else { &acts[k - 1] };
            let mut z = vec![0.0; l.o];
            for j in 0..l.o {
                let mut s = l.b[j];
                for i in 0..l.n {
                    s += l.w[j * l.n + i] * input[i];
                }
                z[j] = s;
            }
            let a = match l.act {
                Act::Sigmoid => z.iter().map(|v| 1.0 / (1.0 + (-v).exp())).collect(),
                Act::Tanh => z.iter().map(|v| v.tanh()).collect(),
                Act::Relu => z.iter().map(|v| v.max(0.0)).collect(),
                Act::Softmax => {
                    logits = z.clone();
                    let m = z.iter().cloned().fold(f32::NEG_INFINITY, f32::max);
                    let e: Vec<f32> = z.iter().map(|v| (v - m).exp()).collect();
                    let s: f32 = e.iter().sum();
                    e.iter().map(|v| v / s).collect()
                }
            };
            acts.push(a);
        }
        (acts, logits)
    }

    /// Inference.
    pub fn predict(&self, x: &[f32]) -> Vec<f32> {
        self.forward(x).0.pop().unwrap_or_default()
    }

    /// One sample's backprop, accumulated into `g`; returns its loss.
    pub fn backprop(&self, x: &[f32], y: &[f32], g: &mut Grad) -> f32 {
        let (acts, z) = self.forward(x);
        let m = z.iter().cloned().fold(f32::NEG_INFINITY, f32::max);
        let lse = m + z.iter().map(|v| (v - m).exp()).sum::<f32>().ln();
        let mut loss = 0.0;
        for j in 0..z.len() {
            loss += y[j] * (lse - z[j]);
        }
        let last = self.layers.len() - 1;
        let mut d: Vec<f32> = (0..y.len()).map(|j| acts[last][j] - y[j]).collect();
        for k in (0..self.layers.len()).rev() {
            let l = &self.layers[k];
            let input: &[f32] = if k == 0 { x } else { &acts[k - 1] };
            for j in 0..l.o {
                for i in 0..l.n {
                    g[k].0[j * l.n + i] += d[j] * input[i];
                }
                g[k].1[j] += d[j];
            }
            if k > 0 {
                let prev = &self.layers[k - 1];
                let mut dp = vec![0.0; l.n];
                for j in 0..l.o {
                    for i in 0..l.n {
                        dp[i] += l.w[j * l.n + i] * d[j];
                    }
                }
                for i in 0..l.n {
                    let a = acts[k - 1][i];
                    dp[i] *= match prev.act {
                        Act::Sigmoid => a * (1.0 - a),
                        Act::Tanh => 1.0 - a * a,
                        Act::Relu => {
                            if a > 0.0 {
                                1.0
                            } else {
                                0.0
                            }
                        }
                        Act::Softmax => 1.0,
                    };
                }
                d = dp;
            }
        }
        loss
    }

    /// Cost J and its gradient over a batch (row-major samples).
    pub fn gradient(&self, xs: &[f32], ys: &[f32], g: &mut Grad) -> f32 {
        for (w, b) in g.iter_mut() {
            w.iter_mut().for_each(|v| *v = 0.0);
            b.iter_mut().for_each(|v| *v = 0.0);
        }
        let (n_in, n_out) = (self.layers[0].n, self.layers[self.layers.len() - 1].o);
        let mut sum = 0.0;
        let mut m = 0;
        for (x, y) in xs.chunks_exact(n_in).zip(ys.chunks_exact(n_out)) {
            sum += self.backprop(x, y, g);
            m += 1;
        }
        let m = m as f32;
        let mut sq = 0.0;
        for (l, (gw, gb)) in self.layers.iter().zip(g.iter_mut()) {
            for (gv, wv) in gw.iter_mut().zip(&l.w) {
                *gv = *gv / m + self.lambda / m * wv;
                sq += wv * wv;
            }
            gb.iter_mut().for_each(|v| *v /= m);
        }
        sum / m + self.lambda / (2.0 * m) * sq
    }
}
