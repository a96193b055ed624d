//! `sinew-runtime`: the `no_std` kernels behind the code sinew generates, and behind its host
//! engine.
//!
//! No heap, no `std`, no `unsafe`, no panicking paths; the only dependency is `libm`, which
//! supplies every transcendental function on the host and on the device alike. The host engine
//! calls the slice forms, generated code calls the const-generic array forms, and both forms run
//! the same kernel once the lengths are known to agree, so they perform the same operations in
//! the same order and produce the same bits. The accumulation order of every reduction is
//! documented on the kernel and is part of the contract; [`reference`](mod@reference) holds that
//! contract as plain loops, one per reduction, and every fast path is tested bit for bit against
//! it. The fold order of the lane sums of a dot product is written once, in
//! [`linalg::fold_lanes`].
//!
//! Lengths: a slice kernel whose operands must agree checks every length before it writes
//! anything and returns [`LengthMismatch`] when one disagrees (never a panic, never a
//! truncation); its array form (`_n`) takes fixed-size arrays whose types make a mismatch
//! impossible, and returns no `Result`. See [`shape`].
//!
//! # Kernels
//!
//! | module | kernels |
//! | --- | --- |
//! | [`reference`](mod@reference) | the contract: plain-loop kernels ([`reference::affine`], [`reference::back`], ..., [`reference::softmax_cross_entropy_batch`]) whose docs give each formula and order of additions; [`linalg::fold_lanes`], the one fold order of the lane sums |
//! | [`shape`] | [`LengthMismatch`], the error of the slice kernels; [`shape::Flat`], the arrays of the optimizer and penalty array forms |
//! | [`real`] | [`Real`]: the scalar trait (`f32`, `f64`) over libm |
//! | [`linalg`] | [`affine`] `z = W x + b`, [`back`] `out = W^T d`, [`outer_acc`] `G += d a^T`, [`add_acc`] `g += d`, [`standardize`] `(x - mean) / std`, each with an `_n` array form where shapes matter; their batch forms over a block of samples ([`affine_batch`], [`back_batch`], [`outer_acc_batch`] and its row-range form [`outer_acc_batch_rows`], [`add_acc_batch`]), bit for bit the per-sample loop (layers of at most 16 inputs or outputs run eight samples side by side, one per SIMD lane) |
//! | [`act`] | [`act::identity`], [`act::sigmoid`], [`act::tanh`], [`act::relu`], [`act::leaky_relu`], [`act::softmax`] and their `_grad` forms; [`act::Activation`] |
//! | [`loss`] | [`loss::softplus`], [`loss::log_sum_exp`], [`loss::logistic_cross_entropy`], [`loss::softmax_cross_entropy`], [`loss::squared_error`], [`loss::output_error`]; softmax outputs with their cross-entropy in one pass: [`loss::softmax_with_cross_entropy`] and its batch forms [`loss::softmax_cross_entropy_batch`], [`loss::softmax_cross_entropy_batch_n`] |
//! | [`penalty`] | [`penalty::Penalty`] (none, L2, L1: cost term and gradient), [`penalty::finish_bias`] |
//! | [`optim`] | [`optim::sgd`], [`optim::momentum`], [`optim::adam`] |
//! | [`rng`] | [`rng::SplitMix64`] with uniform and normal draws; [`rng::fill_uniform`], [`rng::fill_normal`], [`rng::glorot_limit`], [`rng::he_std`] |
//! | [`each`] | [`each::blocks`]: iteration with no panicking path at any optimisation level (and the crate's own forms of it) |
//! | [`conv`] | sliding windows over row-major `[rows][cols][channels]` maps ([`conv::Window`]): [`conv::conv`] (1-D and 2-D convolution, zero padding, strides), [`conv::depthwise`], [`conv::pool_max`], [`conv::pool_average`], each with its gradient accumulation (`_acc`) or backward pass (`_back`) and an `_n` array form |
//! | [`blob`] | the device weight blob: [`blob::Values`] (checked decoding), [`blob::Writer`], [`blob::crc32`] |
//!
//! # Examples
//!
//! One sigmoid layer, forward and backward, as generated code does it:
//!
//! ```
//! use sinew_runtime as rt;
//!
//! let w = [[0.5_f64, -0.5], [1.0, 1.0]];
//! let b = [0.0, -1.0];
//! let x = [1.0, 1.0];
//! let y = [1.0, 0.0];
//!
//! let mut a = [0.0; 2];
//! rt::affine_n(&w, &b, &x, &mut a); // z = (0, 1)
//! rt::act::sigmoid(&mut a);
//! assert_eq!(a[0], 0.5);
//!
//! let loss = rt::loss::squared_error_n(&a, &y);
//! let mut d = [0.0; 2];
//! rt::loss::output_error_n(&a, &y, &mut d);
//! rt::act::sigmoid_grad_n(&a, &mut d);
//!
//! let mut gw = [[0.0; 2]; 2];
//! let mut gb = [0.0; 2];
//! rt::outer_acc_n(&mut gw, &d, &x);
//! rt::add_acc_n(&mut gb, &d);
//!
//! // The slice forms check lengths: a short operand is an error, and nothing is written.
//! let mut short = [0.0; 1];
//! assert!(rt::loss::output_error(&a, &y, &mut short).is_err());
//! assert_eq!(gw[0], [-0.125, -0.125]); // (0.5 - 1) * 0.5 * 0.5 * x
//! assert!(loss > 0.0);
//! ```

#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]

#[cfg(test)]
extern crate std;

/// `$body` with `$k` a `const usize` equal to `$n` when `$n` is 1 to 16 (so that the body can use
/// it as a const generic argument), else `$other`: how the slice forms, whose lengths are known
/// only at run time (the engine's), reach the const-length code that the array forms run.
macro_rules! by_length_1_to_16 {
    ($n:expr, $k:ident => $body:expr, _ => $other:expr) => {
        by_length_1_to_16!(@arms $n, $k, $body, $other; 1 2 3 4 5 6 7 8 9 10 11 12 13 14 15 16)
    };
    (@arms $n:expr, $k:ident, $body:expr, $other:expr; $($v:literal)*) => {
        match $n {
            $($v => {
                const $k: usize = $v;
                $body
            })*
            _ => $other,
        }
    };
}

#[cfg(test)]
mod testutil;

mod block;

pub mod act;
pub mod blob;
pub mod conv;
pub mod each;
pub mod linalg;
pub mod loss;
pub mod math;
pub mod optim;
pub mod penalty;
pub mod real;
pub mod reference;
pub mod rng;
pub mod shape;

pub use linalg::{
    add_acc, add_acc_batch, add_acc_batch_n, add_acc_n, affine, affine_batch, affine_batch_n,
    affine_n, back, back_batch, back_batch_n, back_n, outer_acc, outer_acc_batch,
    outer_acc_batch_n, outer_acc_batch_rows, outer_acc_n, standardize, standardize_n,
};
pub use real::Real;
pub use shape::LengthMismatch;
