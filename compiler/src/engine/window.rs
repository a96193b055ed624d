//! The sliding-window steps of the plan ([`WindowOp`]) on slices: the runtime's `rt::conv`
//! kernels with the layer's geometry, as the generated code calls their array forms.

use super::{LayerParams, LengthMismatch};
use crate::ir;
use crate::plan::WindowOp;
use sinew_runtime::{self as rt, Real};

/// The runtime's form of a layer's geometry.
pub(crate) fn geometry(w: &ir::Window) -> rt::conv::Window {
    rt::conv::Window {
        rows: w.rows,
        cols: w.cols,
        channels: w.channels,
        k_rows: w.k_rows,
        k_cols: w.k_cols,
        stride_rows: w.stride_rows,
        stride_cols: w.stride_cols,
        pad_top: w.pad_top,
        pad_left: w.pad_left,
        out_rows: w.out_rows,
        out_cols: w.out_cols,
    }
}

/// The geometry of layer `layer` of `model`, if it slides a window.
pub(crate) fn of(model: &ir::Model, layer: usize) -> Option<rt::conv::Window> {
    model
        .layers
        .get(layer)
        .and_then(|l| l.kind.window())
        .map(geometry)
}

/// The forward kernel: `z` from `x` (and the layer's parameters for a convolution).
pub(crate) fn forward<T: Real>(
    op: WindowOp,
    lp: &LayerParams<T>,
    g: &rt::conv::Window,
    x: &[T],
    z: &mut [T],
) -> Result<(), LengthMismatch> {
    match op {
        WindowOp::Conv => rt::conv::conv(&lp.weights, &lp.bias, x, z, g),
        WindowOp::Depthwise => rt::conv::depthwise(&lp.weights, &lp.bias, x, z, g),
        WindowOp::MaxPool => rt::conv::pool_max(x, z, g),
        WindowOp::AveragePool => rt::conv::pool_average(x, z, g),
    }
}

/// One sample's gradient terms of a convolution, added to `grad` (nothing for a pooling).
pub(crate) fn accumulate<T: Real>(
    op: WindowOp,
    grad: &mut LayerParams<T>,
    g: &rt::conv::Window,
    d: &[T],
    x: &[T],
) -> Result<(), LengthMismatch> {
    match op {
        WindowOp::Conv => rt::conv::conv_acc(&mut grad.weights, &mut grad.bias, d, x, g),
        WindowOp::Depthwise => rt::conv::depthwise_acc(&mut grad.weights, &mut grad.bias, d, x, g),
        WindowOp::MaxPool | WindowOp::AveragePool => Ok(()),
    }
}

/// The errors one map down: `out` from the layer's errors `d` (and its input `x` for max
/// pooling, its weights for a convolution).
pub(crate) fn backward<T: Real>(
    op: WindowOp,
    lp: &LayerParams<T>,
    g: &rt::conv::Window,
    x: &[T],
    d: &[T],
    out: &mut [T],
) -> Result<(), LengthMismatch> {
    match op {
        WindowOp::Conv => rt::conv::conv_back(&lp.weights, d, out, g),
        WindowOp::Depthwise => rt::conv::depthwise_back(&lp.weights, d, out, g),
        WindowOp::MaxPool => rt::conv::pool_max_back(x, d, out, g),
        WindowOp::AveragePool => rt::conv::pool_average_back(d, out, g),
    }
}
