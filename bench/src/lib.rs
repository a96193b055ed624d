//! Benchmarks of sinew against what an engineer would otherwise write or use, in one run.
//!
//! The three dense networks of the performance issue and the conv network C1, each in four forms
//! with the same parameters:
//!
//! - (a) [`generated`]: the code `bench/build.rs` generates from `bench/specs/` through the public
//!   build API ([`unrolled`] holds N1 and N2 again with every matrix kernel unrolled);
//! - (b) [`nalg`]: the same network hand-written with nalgebra's static matrices (`SMatrix`),
//!   with std's `exp`/`tanh` ([`nalg::StdMath`]) or libm's ([`nalg::LibmMath`], what a `no_std` engineer calls);
//! - (c) [`plain`]: hand-written `Vec<f32>` loops;
//! - for C1, (b) [`conv_nalg`] (im2col and static matrix products) and (c) [`conv_plain`] (nested
//!   loops over arrays), both `core` only and shared with the Cortex-M4F firmware;
//! - (d) the sinew host engine (`sinew::engine`).
//!
//! [`Shape`] gives the multiply-add counts behind the GFLOP/s figures (two flops per
//! multiply-add); [`Data`] the samples. The criterion benches are in `benches/nets.rs`, the table
//! printer in `src/bin/table.rs`, the instruction-count driver in `src/bin/count.rs`, and
//! `bench/run.sh` runs everything.

// The hand-written baselines are kept as a user would write them (indexed loops included).
#![allow(
    clippy::needless_range_loop,
    clippy::neg_cmp_op_on_partial_ord,
    clippy::op_ref
)]
#![deny(missing_docs)]

use sinew_runtime::rng::SplitMix64;

pub mod cases;
pub mod check;
pub mod conv_nalg;
pub mod conv_plain;
pub mod nalg;
pub mod plain;

/// The generated modules (`bench_n1`, `bench_n2`, `bench_n3`, `bench_c1`), default options.
#[allow(missing_docs)]
pub mod generated {
    include!(concat!(env!("OUT_DIR"), "/bench_n1.rs"));
    include!(concat!(env!("OUT_DIR"), "/bench_n2.rs"));
    include!(concat!(env!("OUT_DIR"), "/bench_n3.rs"));
    include!(concat!(env!("OUT_DIR"), "/bench_c1.rs"));
}

/// N1 and N2 generated with every matrix kernel unrolled (`unroll_below(usize::MAX)`).
#[allow(missing_docs)]
pub mod unrolled {
    include!(concat!(env!("OUT_DIR"), "/unrolled/bench_n1.rs"));
    include!(concat!(env!("OUT_DIR"), "/unrolled/bench_n2.rs"));
}

/// The spec text of each network (what `build.rs` compiled).
pub const SPECS: [(&str, &str); 4] = [
    ("n1", include_str!("../specs/bench_n1.sinew")),
    ("n2", include_str!("../specs/bench_n2.sinew")),
    ("n3", include_str!("../specs/bench_n3.sinew")),
    ("c1", include_str!("../specs/bench_c1.sinew")),
];

/// Samples in the batch-gradient benchmark.
pub const BATCH: usize = 256;

/// A network's layer widths, input first.
#[derive(Debug, Clone, Copy)]
pub struct Shape {
    /// `n1`, `n2`, `n3`.
    pub name: &'static str,
    /// Widths (values per sample of each layer), input first.
    pub widths: &'static [usize],
    /// Multiply-adds of (inference, one sample's backprop) when they do not follow from the
    /// widths (conv networks); `None` for dense networks.
    pub macs: Option<(usize, usize)>,
}

/// N1 = 6-10-8-3 (sigmoid, sigmoid, softmax).
pub const N1: Shape = Shape {
    name: "n1",
    widths: &[6, 10, 8, 3],
    macs: None,
};
/// N2 = 64-32-10 (tanh, softmax).
pub const N2: Shape = Shape {
    name: "n2",
    widths: &[64, 32, 10],
    macs: None,
};
/// N3 = 784-128-64-10 (relu, relu, softmax).
pub const N3: Shape = Shape {
    name: "n3",
    widths: &[784, 128, 64, 10],
    macs: None,
};

/// C1 = window 128 x 3, conv 16 k5 s2 relu (62 x 16), max pool 2 (31 x 16), conv 16 k3 relu
/// (29 x 16), average all (16), dense 16 relu, softmax 4. Multiply-adds: inference
/// `62*16*15 + 29*16*48 + 16*16 + 16*4` = 37 472; backprop adds the weight gradients (the same
/// again) and the errors below every layer but the first conv (37 472 - 14 880), 97 536 in all.
pub const C1: Shape = Shape {
    name: "c1",
    widths: &[384, 992, 496, 464, 16, 16, 4],
    macs: Some((37_472, 97_536)),
};

/// All four, in order.
pub const SHAPES: [Shape; 4] = [N1, N2, N3, C1];

impl Shape {
    /// Multiply-adds of one inference: `sum W` over the layers.
    pub fn macs_inference(&self) -> usize {
        if let Some((m, _)) = self.macs {
            return m;
        }
        self.widths.windows(2).map(|w| w[0] * w[1]).sum()
    }

    /// Multiply-adds of one sample's backprop: the forward pass, `W^T d` for every layer but the
    /// first, and the outer product `d a^T` of every layer.
    pub fn macs_backprop(&self) -> usize {
        if let Some((_, m)) = self.macs {
            return m;
        }
        let fwd = self.macs_inference();
        let first = self.widths[0] * self.widths[1];
        fwd + (fwd - first) + fwd
    }

    /// Input width.
    pub fn inputs(&self) -> usize {
        self.widths[0]
    }

    /// Output width.
    pub fn outputs(&self) -> usize {
        self.widths[self.widths.len() - 1]
    }
}

/// Benchmark samples: inputs uniform on [-1, 1), one-hot targets, drawn from SplitMix64.
#[derive(Debug, Clone)]
pub struct Data {
    /// Inputs, row-major (`BATCH` rows).
    pub xs: Vec<f32>,
    /// One-hot targets, row-major.
    pub ys: Vec<f32>,
}

impl Data {
    /// `m` samples for `shape` from `seed`.
    pub fn new(shape: Shape, m: usize, seed: u64) -> Data {
        let mut rng = SplitMix64::new(seed);
        let (n_in, n_out) = (shape.inputs(), shape.outputs());
        let mut xs = Vec::with_capacity(m * n_in);
        let mut ys = Vec::with_capacity(m * n_out);
        for _ in 0..m {
            xs.extend((0..n_in).map(|_| rng.uniform(-1.0, 1.0) as f32));
            let c = (rng.next_u64() % n_out as u64) as usize;
            ys.extend((0..n_out).map(|j| if j == c { 1.0 } else { 0.0 }));
        }
        Data { xs, ys }
    }

    /// The inputs as fixed-size rows (the generated API's form).
    pub fn x_rows<const I: usize>(&self) -> Vec<[f32; I]> {
        self.xs
            .chunks_exact(I)
            .map(|c| c.try_into().expect("row width"))
            .collect()
    }

    /// The targets as fixed-size rows.
    pub fn y_rows<const O: usize>(&self) -> Vec<[f32; O]> {
        self.ys
            .chunks_exact(O)
            .map(|c| c.try_into().expect("row width"))
            .collect()
    }
}

/// Parameters as plain row-major vectors: per layer (weights, biases).
pub type Layers = Vec<(Vec<f32>, Vec<f32>)>;

/// The model of a spec (panics on a bad spec: the specs are this crate's own).
pub fn model(name: &str) -> sinew::ir::Model {
    let src = SPECS
        .iter()
        .find(|(n, _)| *n == name)
        .map(|(_, s)| *s)
        .expect("known network");
    sinew::check_source(src).model.expect("spec checks")
}

/// The engine's parameters holding `layers`.
pub fn engine_params(layers: &Layers) -> sinew::engine::Params<f32> {
    sinew::engine::Params {
        layers: layers
            .iter()
            .map(|(w, b)| sinew::engine::LayerParams {
                weights: w.as_slice().into(),
                bias: b.clone(),
            })
            .collect(),
        mean: Vec::new(),
        std: Vec::new(),
    }
}

/// N1's generated parameters as [`Layers`].
pub fn n1_layers(p: &generated::bench_n1::Params) -> Layers {
    vec![
        (p.h1_weights.as_flattened().to_vec(), p.h1_bias.to_vec()),
        (p.h2_weights.as_flattened().to_vec(), p.h2_bias.to_vec()),
        (p.y_weights.as_flattened().to_vec(), p.y_bias.to_vec()),
    ]
}

/// N2's generated parameters as [`Layers`].
pub fn n2_layers(p: &generated::bench_n2::Params) -> Layers {
    vec![
        (p.h1_weights.as_flattened().to_vec(), p.h1_bias.to_vec()),
        (p.y_weights.as_flattened().to_vec(), p.y_bias.to_vec()),
    ]
}

/// N3's generated parameters as [`Layers`].
pub fn n3_layers(p: &generated::bench_n3::Params) -> Layers {
    vec![
        (p.h1_weights.as_flattened().to_vec(), p.h1_bias.to_vec()),
        (p.h2_weights.as_flattened().to_vec(), p.h2_bias.to_vec()),
        (p.y_weights.as_flattened().to_vec(), p.y_bias.to_vec()),
    ]
}

/// N1's generated gradient as [`Layers`].
pub fn n1_grad(g: &generated::bench_n1::Gradients) -> Layers {
    vec![
        (g.h1_weights.as_flattened().to_vec(), g.h1_bias.to_vec()),
        (g.h2_weights.as_flattened().to_vec(), g.h2_bias.to_vec()),
        (g.y_weights.as_flattened().to_vec(), g.y_bias.to_vec()),
    ]
}

/// N2's generated gradient as [`Layers`].
pub fn n2_grad(g: &generated::bench_n2::Gradients) -> Layers {
    vec![
        (g.h1_weights.as_flattened().to_vec(), g.h1_bias.to_vec()),
        (g.y_weights.as_flattened().to_vec(), g.y_bias.to_vec()),
    ]
}

/// N3's generated gradient as [`Layers`].
pub fn n3_grad(g: &generated::bench_n3::Gradients) -> Layers {
    vec![
        (g.h1_weights.as_flattened().to_vec(), g.h1_bias.to_vec()),
        (g.h2_weights.as_flattened().to_vec(), g.h2_bias.to_vec()),
        (g.y_weights.as_flattened().to_vec(), g.y_bias.to_vec()),
    ]
}

/// C1's generated parameters as [`Layers`]: one entry per layer, the poolings empty (the
/// engine's layout).
pub fn c1_layers(p: &generated::bench_c1::Params) -> Layers {
    vec![
        (
            p.edges_weights.as_flattened().to_vec(),
            p.edges_bias.to_vec(),
        ),
        (Vec::new(), Vec::new()),
        (
            p.detail_weights.as_flattened().to_vec(),
            p.detail_bias.to_vec(),
        ),
        (Vec::new(), Vec::new()),
        (p.mix_weights.as_flattened().to_vec(), p.mix_bias.to_vec()),
        (p.y_weights.as_flattened().to_vec(), p.y_bias.to_vec()),
    ]
}

/// C1's generated gradient as [`Layers`] (poolings empty).
pub fn c1_grad(g: &generated::bench_c1::Gradients) -> Layers {
    vec![
        (
            g.edges_weights.as_flattened().to_vec(),
            g.edges_bias.to_vec(),
        ),
        (Vec::new(), Vec::new()),
        (
            g.detail_weights.as_flattened().to_vec(),
            g.detail_bias.to_vec(),
        ),
        (Vec::new(), Vec::new()),
        (g.mix_weights.as_flattened().to_vec(), g.mix_bias.to_vec()),
        (g.y_weights.as_flattened().to_vec(), g.y_bias.to_vec()),
    ]
}

/// C1's parameter layers (poolings dropped) in the order of the hand-written forms.
fn c1_param_layers(layers: &Layers) -> Vec<&(Vec<f32>, Vec<f32>)> {
    layers.iter().filter(|(_, b)| !b.is_empty()).collect()
}

/// The plain-loop form of C1 holding `layers`.
pub fn c1_plain(layers: &Layers) -> conv_plain::Net {
    let l = c1_param_layers(layers);
    let mut n = conv_plain::Net::zeroed();
    n.w1.as_flattened_mut().copy_from_slice(&l[0].0);
    n.b1.copy_from_slice(&l[0].1);
    n.w2.as_flattened_mut().copy_from_slice(&l[1].0);
    n.b2.copy_from_slice(&l[1].1);
    n.w3.as_flattened_mut().copy_from_slice(&l[2].0);
    n.b3.copy_from_slice(&l[2].1);
    n.w4.as_flattened_mut().copy_from_slice(&l[3].0);
    n.b4.copy_from_slice(&l[3].1);
    n
}

/// The plain-loop gradient as [`Layers`] (poolings empty).
pub fn c1_plain_grad(g: &conv_plain::Net) -> Layers {
    vec![
        (g.w1.as_flattened().to_vec(), g.b1.to_vec()),
        (Vec::new(), Vec::new()),
        (g.w2.as_flattened().to_vec(), g.b2.to_vec()),
        (Vec::new(), Vec::new()),
        (g.w3.as_flattened().to_vec(), g.b3.to_vec()),
        (g.w4.as_flattened().to_vec(), g.b4.to_vec()),
    ]
}

/// The nalgebra form of C1 holding `layers`.
pub fn c1_nalg(layers: &Layers) -> conv_nalg::Net {
    let l = c1_param_layers(layers);
    conv_nalg::Net::from_rows(
        &l[0].0, &l[0].1, &l[1].0, &l[1].1, &l[2].0, &l[2].1, &l[3].0, &l[3].1,
    )
}

/// The nalgebra gradient as [`Layers`] (poolings empty), row-major.
pub fn c1_nalg_grad(g: &conv_nalg::Net) -> Layers {
    fn rows<const R: usize, const K: usize>(m: &nalgebra::SMatrix<f32, R, K>) -> Vec<f32> {
        m.transpose().as_slice().to_vec()
    }
    vec![
        (rows(&g.w1), g.b1.as_slice().to_vec()),
        (Vec::new(), Vec::new()),
        (rows(&g.w2), g.b2.as_slice().to_vec()),
        (Vec::new(), Vec::new()),
        (rows(&g.w3), g.b3.as_slice().to_vec()),
        (rows(&g.w4), g.b4.as_slice().to_vec()),
    ]
}
