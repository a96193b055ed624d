//! Sliding-window kernels: 1-D and 2-D convolution, depthwise convolution, max and average
//! pooling, each with its gradient accumulation and its backward pass.
//!
//! # Layout
//!
//! Every map is row-major `[rows][cols][channels]`, channel fastest: value `(y, x, c)` of a map
//! of `cols` columns and `channels` channels is at `(y*cols + x)*channels + c`. A 1-D signal of
//! `steps x channels` is the same thing with `cols = 1` and `k_cols = 1`. An output map has
//! [`Window::positions`] positions `p = oy*out_cols + ox`, in that row-major order, each holding
//! one value per filter (convolution) or per channel (depthwise, pooling).
//!
//! Weights: a convolution holds `[F][k_rows][k_cols][channels]` (filter `f`, tap `(ky, kx)`,
//! channel `c`) and `F` biases; a depthwise convolution `[channels][k_rows][k_cols]` and one bias
//! per channel. The kernels compute a cross-correlation (the window is not flipped), as neural
//! network layers do (common practice).
//!
//! # Geometry
//!
//! Tap `(ky, kx)` of output position `(oy, ox)` reads the input at
//!
//! ```text
//! iy = oy*stride_rows + ky - pad_top        ix = ox*stride_cols + kx - pad_left
//! ```
//!
//! A tap with `iy` outside `0..rows` or `ix` outside `0..cols` lies in the zero padding and is
//! skipped: no product, no addition (so a padded sum has the bits of the sum of its inside
//! terms). The indices are computed with checked arithmetic; a step that would overflow or go
//! below zero is a tap outside. The loops visit the `k_rows * k_cols` taps of every window in
//! scan order: `ky` increasing, then `kx` increasing.
//!
//! # Order of arithmetic
//!
//! Every sum starts at `ZERO` and adds in the order the kernel's doc states; no fused
//! multiply-add. A backward pass (`_back`) first sets its whole output to `ZERO`, then adds into
//! it position by position. A gradient accumulation (`_acc`) adds into its operands (one sample;
//! callers zero them once per batch).
//!
//! # Lengths
//!
//! A slice kernel checks every operand's length against the [`Window`] (and, for a
//! convolution, the number of filters) before it writes anything, and returns
//! [`LengthMismatch`] when one disagrees; then the loops cannot run past an operand, and an
//! output that was not checked is never written. The sizes of [`Window`] multiply with
//! saturation: a product that overflows is `usize::MAX`, which no slice of a [`Real`] holds.
//! Each array form (`_n`) runs the same kernel through its slice form and returns nothing: the
//! geometry that the compiler derived for the layer always agrees with the array lengths of the
//! generated code; a geometry that disagrees leaves the outputs untouched.
//!
//! # Examples
//!
//! A 1-D convolution of one channel, `x = (1, 2, 3, 4, 5)` with the kernel `(1, 0, -1)` and bias
//! `0.5`: each output is `x_i - x_(i+2) + 0.5 = -1.5`.
//!
//! ```
//! use sinew_runtime::conv::{self, Window};
//!
//! const G: Window = Window {
//!     rows: 5, cols: 1, channels: 1,
//!     k_rows: 3, k_cols: 1,
//!     stride_rows: 1, stride_cols: 1,
//!     pad_top: 0, pad_left: 0,
//!     out_rows: 3, out_cols: 1,
//! };
//! let w = [[1.0_f64, 0.0, -1.0]];
//! let mut out = [0.0; 3];
//! conv::conv_n(&w, &[0.5], &[1.0, 2.0, 3.0, 4.0, 5.0], &mut out, &G);
//! assert_eq!(out, [-1.5, -1.5, -1.5]);
//!
//! // The slice form checks the lengths: a short output is an error, and nothing is written.
//! let mut short = [9.0; 2];
//! assert!(conv::conv(w.as_flattened(), &[0.5], &[1.0, 2.0, 3.0, 4.0, 5.0], &mut short, &G).is_err());
//! assert_eq!(short, [9.0; 2]);
//! ```

use crate::each::{pieces, pieces_mut};
use crate::shape::{self, LengthMismatch};
use crate::Real;

#[cfg(test)]
mod tests;

/// Geometry of one sliding-window layer: the input map, the window, its strides, the zero
/// padding before the first row and column, and the output positions. Plain data, so that
/// generated code writes it as a `const`.
///
/// The kernels take the output size as given (the compiler derives it); they never read a tap
/// outside the input, whatever the numbers. For a layer without padding (`valid`, and every
/// pooling layer) `out_rows = (rows - k_rows) / stride_rows + 1`, and the same for columns.
///
/// # Examples
///
/// ```
/// use sinew_runtime::conv::Window;
///
/// // 4 x 4 map of 2 channels, 3 x 3 window, stride 1, one row and column of zeros on each side.
/// const G: Window = Window {
///     rows: 4, cols: 4, channels: 2,
///     k_rows: 3, k_cols: 3,
///     stride_rows: 1, stride_cols: 1,
///     pad_top: 1, pad_left: 1,
///     out_rows: 4, out_cols: 4,
/// };
/// assert_eq!((G.in_len(), G.positions(), G.taps(), G.filter_len()), (32, 16, 9, 18));
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Window {
    /// Rows of the input map (time steps of a 1-D signal).
    pub rows: usize,
    /// Columns of the input map (1 for a 1-D signal).
    pub cols: usize,
    /// Channels of the input map, the fastest index.
    pub channels: usize,
    /// Rows of the window (kernel or pooling window).
    pub k_rows: usize,
    /// Columns of the window (1 for a 1-D signal).
    pub k_cols: usize,
    /// Rows between two output positions.
    pub stride_rows: usize,
    /// Columns between two output positions.
    pub stride_cols: usize,
    /// Rows of zeros before the first input row (0 for pooling).
    pub pad_top: usize,
    /// Columns of zeros before the first input column (0 for pooling).
    pub pad_left: usize,
    /// Output rows.
    pub out_rows: usize,
    /// Output columns.
    pub out_cols: usize,
}

impl Window {
    /// Values of the input map: `rows * cols * channels` (saturating).
    #[inline]
    pub const fn in_len(&self) -> usize {
        self.rows
            .saturating_mul(self.cols)
            .saturating_mul(self.channels)
    }

    /// Output positions: `out_rows * out_cols` (saturating).
    #[inline]
    pub const fn positions(&self) -> usize {
        self.out_rows.saturating_mul(self.out_cols)
    }

    /// Taps of the window: `k_rows * k_cols` (saturating).
    #[inline]
    pub const fn taps(&self) -> usize {
        self.k_rows.saturating_mul(self.k_cols)
    }

    /// Weights of one convolution filter: `taps() * channels` (saturating).
    #[inline]
    pub const fn filter_len(&self) -> usize {
        self.taps().saturating_mul(self.channels)
    }
}

/// The output positions `(oy, ox)` in row-major order (none when a dimension is zero).
#[inline]
fn positions(g: &Window) -> impl Iterator<Item = (usize, usize)> {
    let cols = g.out_cols;
    let rows = if cols == 0 { 0 } else { g.out_rows };
    (0..rows).flat_map(move |oy| (0..cols).map(move |ox| (oy, ox)))
}

/// The input coordinate `o*stride + k - pad` of a tap, if it lies in `0..n`.
#[inline(always)]
fn coordinate(o: usize, stride: usize, k: usize, pad: usize, n: usize) -> Option<usize> {
    let i = o.checked_mul(stride)?.checked_add(k)?.checked_sub(pad)?;
    (i < n).then_some(i)
}

/// The taps of the window at output position `(oy, ox)` in scan order (`ky`, then `kx`): for
/// each, the pixel `iy*cols + ix` it reads, or `None` for a tap in the padding.
#[inline]
fn taps(g: &Window, oy: usize, ox: usize) -> impl Iterator<Item = Option<usize>> {
    let g = *g;
    let k_rows = if g.k_cols == 0 { 0 } else { g.k_rows };
    (0..k_rows).flat_map(move |ky| {
        let iy = coordinate(oy, g.stride_rows, ky, g.pad_top, g.rows);
        (0..g.k_cols).map(move |kx| {
            let ix = coordinate(ox, g.stride_cols, kx, g.pad_left, g.cols)?;
            iy?.checked_mul(g.cols)?.checked_add(ix)
        })
    })
}

/// The `c` values of pixel `i` of a map of `c` channels.
#[inline(always)]
fn pixel<T>(map: &[T], i: usize, c: usize) -> Option<&[T]> {
    let start = i.checked_mul(c)?;
    map.get(start..start.checked_add(c)?)
}

/// [`pixel`], writable.
#[inline(always)]
fn pixel_mut<T>(map: &mut [T], i: usize, c: usize) -> Option<&mut [T]> {
    let start = i.checked_mul(c)?;
    map.get_mut(start..start.checked_add(c)?)
}

/// The index of channel `ch` of pixel `i` of a map of `c` channels: `i*c + ch`.
#[inline(always)]
fn at(i: usize, c: usize, ch: usize) -> Option<usize> {
    i.checked_mul(c)?.checked_add(ch)
}

/// Sets every value to `ZERO`.
#[inline(always)]
fn zero<T: Real>(v: &mut [T]) {
    for d in v.iter_mut() {
        *d = T::ZERO;
    }
}

// ---------------------------------------------------------------------------------------------
// Convolution

/// Convolution (cross-correlation) of `F = b.len()` filters over a zero-padded map:
/// `out[p][f] = (sum over the inside taps (ky, kx) and c of w[f][ky][kx][c] * x[iy][ix][c]) + b[f]`.
///
/// Order: for each position `p` in row-major order and each filter `f`, `s = ZERO`; for `ky`,
/// then `kx` (inside taps only), then `c`, each increasing: `s += w[f][ky][kx][c] *
/// x[iy][ix][c]`; then `out[p][f] = s + b[f]`. Lengths: `w` holds `F * g.filter_len()` values,
/// `x` holds `g.in_len()`, `out` holds `g.positions() * F`, else [`LengthMismatch`] and nothing
/// is written.
///
/// # Examples
///
/// ```
/// use sinew_runtime::conv::{conv, Window};
///
/// // 1-D, one channel, kernel (1, 2), stride 2: outputs at x_0, x_2, x_4.
/// let g = Window {
///     rows: 6, cols: 1, channels: 1, k_rows: 2, k_cols: 1,
///     stride_rows: 2, stride_cols: 1, pad_top: 0, pad_left: 0, out_rows: 3, out_cols: 1,
/// };
/// let mut out = [0.0; 3];
/// conv(&[1.0, 2.0], &[0.0], &[1.0, 2.0, 3.0, 4.0, 5.0, 6.0], &mut out, &g)?;
/// assert_eq!(out, [1.0 + 4.0, 3.0 + 8.0, 5.0 + 12.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn conv<T: Real>(
    w: &[T],
    b: &[T],
    x: &[T],
    out: &mut [T],
    g: &Window,
) -> Result<(), LengthMismatch> {
    shape::conv(w, b, x, out, g)?;
    conv_kernel(w, b, x, out, g);
    Ok(())
}

/// The loop of [`conv`], on operands whose lengths agree.
#[inline]
fn conv_kernel<T: Real>(w: &[T], b: &[T], x: &[T], out: &mut [T], g: &Window) {
    let (f, c, kc) = (b.len(), g.channels, g.filter_len());
    if f == 0 {
        return;
    }
    for ((oy, ox), out_p) in positions(g).zip(pieces_mut(out, f)) {
        for ((w_f, b_f), o) in pieces(w, kc).zip(b).zip(out_p.iter_mut()) {
            let mut s = T::ZERO;
            if kc > 0 {
                for (tap, w_t) in taps(g, oy, ox).zip(pieces(w_f, c)) {
                    if let Some(x_t) = tap.and_then(|i| pixel(x, i, c)) {
                        for (wv, xv) in w_t.iter().zip(x_t) {
                            s += *wv * *xv;
                        }
                    }
                }
            }
            *o = s + *b_f;
        }
    }
}

/// Array form of [`conv`]: `F` filters of `KC = g.filter_len()` weights, input of `I =
/// g.in_len()` values, output of `O = g.positions() * F`.
///
/// Runs [`conv`]'s kernel: same operations, same order, same bits. The lengths are the
/// geometry's by construction of the generated code; a `g` that disagrees with them leaves
/// `out` untouched.
#[inline]
pub fn conv_n<T: Real, const KC: usize, const F: usize, const I: usize, const O: usize>(
    w: &[[T; KC]; F],
    b: &[T; F],
    x: &[T; I],
    out: &mut [T; O],
    g: &Window,
) {
    let _ = conv(w.as_flattened(), b, x, out, g);
}

/// Gradient accumulation of a convolution for one sample: with `e = err[p][f]`,
/// `gb[f] += e` and `gw[f][ky][kx][c] += e * x[iy][ix][c]` for the inside taps.
///
/// Order: for each position `p` in row-major order and each filter `f` (`F = gb.len()`):
/// `gb[f] += e`, then for `ky`, `kx` (inside taps only), `c`, each increasing:
/// `gw[f][ky][kx][c] += e * x[iy][ix][c]`. So each gradient value adds its terms in increasing
/// `p`. Lengths: `gw` holds `F * g.filter_len()` values, `err` holds `g.positions() * F`, `x`
/// holds `g.in_len()`, else [`LengthMismatch`] and nothing is written.
///
/// # Examples
///
/// ```
/// use sinew_runtime::conv::{conv_acc, Window};
///
/// let g = Window {
///     rows: 3, cols: 1, channels: 1, k_rows: 2, k_cols: 1,
///     stride_rows: 1, stride_cols: 1, pad_top: 0, pad_left: 0, out_rows: 2, out_cols: 1,
/// };
/// let (mut gw, mut gb) = ([0.0; 2], [0.0; 1]);
/// conv_acc(&mut gw, &mut gb, &[1.0, 10.0], &[1.0, 2.0, 3.0], &g)?;
/// assert_eq!((gw, gb), ([1.0 * 1.0 + 10.0 * 2.0, 1.0 * 2.0 + 10.0 * 3.0], [11.0]));
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn conv_acc<T: Real>(
    gw: &mut [T],
    gb: &mut [T],
    err: &[T],
    x: &[T],
    g: &Window,
) -> Result<(), LengthMismatch> {
    shape::conv_acc(gw, gb, err, x, g)?;
    conv_acc_kernel(gw, gb, err, x, g);
    Ok(())
}

/// The loop of [`conv_acc`], on operands whose lengths agree.
#[inline]
fn conv_acc_kernel<T: Real>(gw: &mut [T], gb: &mut [T], err: &[T], x: &[T], g: &Window) {
    let (f, c, kc) = (gb.len(), g.channels, g.filter_len());
    if f == 0 {
        return;
    }
    for ((oy, ox), err_p) in positions(g).zip(pieces(err, f)) {
        for ((gw_f, gb_f), e) in pieces_mut(gw, kc).zip(gb.iter_mut()).zip(err_p) {
            *gb_f += *e;
            if kc == 0 {
                continue;
            }
            for (tap, gw_t) in taps(g, oy, ox).zip(pieces_mut(gw_f, c)) {
                if let Some(x_t) = tap.and_then(|i| pixel(x, i, c)) {
                    for (gv, xv) in gw_t.iter_mut().zip(x_t) {
                        *gv += *e * *xv;
                    }
                }
            }
        }
    }
}

/// Array form of [`conv_acc`] (shapes as in [`conv_n`]; `err` has the output's length).
///
/// Runs [`conv_acc`]'s kernel: same bits. A `g` that disagrees with the lengths leaves `gw`
/// and `gb` untouched.
#[inline]
pub fn conv_acc_n<T: Real, const KC: usize, const F: usize, const I: usize, const O: usize>(
    gw: &mut [[T; KC]; F],
    gb: &mut [T; F],
    err: &[T; O],
    x: &[T; I],
    g: &Window,
) {
    let _ = conv_acc(gw.as_flattened_mut(), gb, err, x, g);
}

/// Errors of a convolution sent one map down (the transpose of its linear part):
/// `dx[iy][ix][c] = sum over (p, f, inside taps) of w[f][ky][kx][c] * err[p][f]`.
///
/// Order: every `dx` value is set to `ZERO`; then for each position `p` in row-major order and
/// each filter `f`, with `e = err[p][f]`, for `ky`, `kx` (inside taps only), `c`, each
/// increasing: `dx[iy][ix][c] += w[f][ky][kx][c] * e`. Lengths: `dx` holds `g.in_len()`; the
/// filters `F` are the rows of `g.filter_len()` in `w` (which must be whole) and `err` holds
/// `g.positions() * F`; when `g.filter_len()` is 0, `w` must be empty and `F` is the rows of
/// `g.positions()` in `err` (and with both 0, `err` must be empty too). Else
/// [`LengthMismatch`] and nothing is written.
///
/// # Examples
///
/// ```
/// use sinew_runtime::conv::{conv_back, Window};
///
/// let g = Window {
///     rows: 3, cols: 1, channels: 1, k_rows: 2, k_cols: 1,
///     stride_rows: 1, stride_cols: 1, pad_top: 0, pad_left: 0, out_rows: 2, out_cols: 1,
/// };
/// let mut dx = [9.0; 3];
/// conv_back(&[1.0, 2.0], &[1.0, 10.0], &mut dx, &g)?;
/// assert_eq!(dx, [1.0, 2.0 + 10.0, 20.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn conv_back<T: Real>(
    w: &[T],
    err: &[T],
    dx: &mut [T],
    g: &Window,
) -> Result<(), LengthMismatch> {
    let f = shape::conv_back(w, err, dx, g)?;
    conv_back_kernel(w, err, dx, f, g);
    Ok(())
}

/// The loop of [`conv_back`] for `f` filters, on operands whose lengths agree.
#[inline]
fn conv_back_kernel<T: Real>(w: &[T], err: &[T], dx: &mut [T], f: usize, g: &Window) {
    let (c, kc) = (g.channels, g.filter_len());
    zero(dx);
    if f == 0 || kc == 0 {
        return;
    }
    for ((oy, ox), err_p) in positions(g).zip(pieces(err, f)) {
        for (w_f, e) in pieces(w, kc).zip(err_p) {
            for (tap, w_t) in taps(g, oy, ox).zip(pieces(w_f, c)) {
                if let Some(dx_t) = tap.and_then(|i| pixel_mut(dx, i, c)) {
                    for (d, wv) in dx_t.iter_mut().zip(w_t) {
                        *d += *wv * *e;
                    }
                }
            }
        }
    }
}

/// Array form of [`conv_back`] (shapes as in [`conv_n`]).
///
/// Runs [`conv_back`]'s kernel: same bits. A `g` that disagrees with the lengths leaves `dx`
/// untouched.
#[inline]
pub fn conv_back_n<T: Real, const KC: usize, const F: usize, const I: usize, const O: usize>(
    w: &[[T; KC]; F],
    err: &[T; O],
    dx: &mut [T; I],
    g: &Window,
) {
    let _ = conv_back(w.as_flattened(), err, dx, g);
}

// ---------------------------------------------------------------------------------------------
// Depthwise convolution

/// Depthwise convolution: each channel filtered by its own window, `C = g.channels` outputs per
/// position: `out[p][c] = (sum over the inside taps of w[c][ky][kx] * x[iy][ix][c]) + b[c]`.
///
/// Order: for each position `p` in row-major order and each channel `c`, `s = ZERO`; for `ky`,
/// then `kx` (inside taps only), each increasing: `s += w[c][ky][kx] * x[iy][ix][c]`; then
/// `out[p][c] = s + b[c]`. Lengths: `w` holds `C * g.taps()` values, `b` holds `C`, `x` holds
/// `g.in_len()`, `out` holds `g.positions() * C`, else [`LengthMismatch`] and nothing is
/// written.
///
/// # Examples
///
/// ```
/// use sinew_runtime::conv::{depthwise, Window};
///
/// // 1-D, 3 steps of 2 channels, window 2: channel 0 sums its pairs, channel 1 differences them.
/// let g = Window {
///     rows: 3, cols: 1, channels: 2, k_rows: 2, k_cols: 1,
///     stride_rows: 1, stride_cols: 1, pad_top: 0, pad_left: 0, out_rows: 2, out_cols: 1,
/// };
/// let x = [1.0, 10.0, 2.0, 20.0, 3.0, 30.0];
/// let mut out = [0.0; 4];
/// depthwise(&[1.0, 1.0, -1.0, 1.0], &[0.0, 0.5], &x, &mut out, &g)?;
/// assert_eq!(out, [1.0 + 2.0, -10.0 + 20.0 + 0.5, 2.0 + 3.0, -20.0 + 30.0 + 0.5]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn depthwise<T: Real>(
    w: &[T],
    b: &[T],
    x: &[T],
    out: &mut [T],
    g: &Window,
) -> Result<(), LengthMismatch> {
    shape::depthwise(w, b, x, out, g)?;
    depthwise_kernel(w, b, x, out, g);
    Ok(())
}

/// The loop of [`depthwise`], on operands whose lengths agree.
#[inline]
fn depthwise_kernel<T: Real>(w: &[T], b: &[T], x: &[T], out: &mut [T], g: &Window) {
    let (c, k) = (g.channels, g.taps());
    if c == 0 {
        return;
    }
    for ((oy, ox), out_p) in positions(g).zip(pieces_mut(out, c)) {
        for (((w_c, b_c), o), ch) in pieces(w, k).zip(b).zip(out_p.iter_mut()).zip(0..c) {
            let mut s = T::ZERO;
            for (tap, wv) in taps(g, oy, ox).zip(w_c) {
                if let Some(xv) = tap.and_then(|i| x.get(at(i, c, ch)?)) {
                    s += *wv * *xv;
                }
            }
            *o = s + *b_c;
        }
    }
}

/// Array form of [`depthwise`]: `C` channels of `K = g.taps()` weights, input of `I =
/// g.in_len()` values, output of `O = g.positions() * C`.
///
/// Runs [`depthwise`]'s kernel: same bits. A `g` that disagrees with the lengths leaves `out`
/// untouched.
#[inline]
pub fn depthwise_n<T: Real, const K: usize, const C: usize, const I: usize, const O: usize>(
    w: &[[T; K]; C],
    b: &[T; C],
    x: &[T; I],
    out: &mut [T; O],
    g: &Window,
) {
    let _ = depthwise(w.as_flattened(), b, x, out, g);
}

/// Gradient accumulation of a depthwise convolution for one sample: with `e = err[p][c]`,
/// `gb[c] += e` and `gw[c][ky][kx] += e * x[iy][ix][c]` for the inside taps.
///
/// Order: for each position `p` in row-major order and each channel `c`: `gb[c] += e`, then for
/// `ky`, `kx` (inside taps only), each increasing: `gw[c][ky][kx] += e * x[iy][ix][c]`.
/// Lengths: `gw` holds `C * g.taps()` values, `gb` holds `C`, `err` holds `g.positions() * C`,
/// `x` holds `g.in_len()`, else [`LengthMismatch`] and nothing is written.
///
/// # Examples
///
/// ```
/// use sinew_runtime::conv::{depthwise_acc, Window};
///
/// let g = Window {
///     rows: 2, cols: 1, channels: 1, k_rows: 2, k_cols: 1,
///     stride_rows: 1, stride_cols: 1, pad_top: 0, pad_left: 0, out_rows: 1, out_cols: 1,
/// };
/// let (mut gw, mut gb) = ([0.0; 2], [1.0]);
/// depthwise_acc(&mut gw, &mut gb, &[2.0], &[3.0, 4.0], &g)?;
/// assert_eq!((gw, gb), ([6.0, 8.0], [3.0]));
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn depthwise_acc<T: Real>(
    gw: &mut [T],
    gb: &mut [T],
    err: &[T],
    x: &[T],
    g: &Window,
) -> Result<(), LengthMismatch> {
    shape::depthwise_acc(gw, gb, err, x, g)?;
    depthwise_acc_kernel(gw, gb, err, x, g);
    Ok(())
}

/// The loop of [`depthwise_acc`], on operands whose lengths agree.
#[inline]
fn depthwise_acc_kernel<T: Real>(gw: &mut [T], gb: &mut [T], err: &[T], x: &[T], g: &Window) {
    let (c, k) = (g.channels, g.taps());
    if c == 0 {
        return;
    }
    for ((oy, ox), err_p) in positions(g).zip(pieces(err, c)) {
        for (((gw_c, gb_c), e), ch) in pieces_mut(gw, k).zip(gb.iter_mut()).zip(err_p).zip(0..c) {
            *gb_c += *e;
            for (tap, gv) in taps(g, oy, ox).zip(gw_c.iter_mut()) {
                if let Some(xv) = tap.and_then(|i| x.get(at(i, c, ch)?)) {
                    *gv += *e * *xv;
                }
            }
        }
    }
}

/// Array form of [`depthwise_acc`] (shapes as in [`depthwise_n`]).
///
/// Runs [`depthwise_acc`]'s kernel: same bits. A `g` that disagrees with the lengths leaves
/// `gw` and `gb` untouched.
#[inline]
pub fn depthwise_acc_n<T: Real, const K: usize, const C: usize, const I: usize, const O: usize>(
    gw: &mut [[T; K]; C],
    gb: &mut [T; C],
    err: &[T; O],
    x: &[T; I],
    g: &Window,
) {
    let _ = depthwise_acc(gw.as_flattened_mut(), gb, err, x, g);
}

/// Errors of a depthwise convolution sent one map down:
/// `dx[iy][ix][c] = sum over (p, inside taps) of w[c][ky][kx] * err[p][c]`.
///
/// Order: every `dx` value is set to `ZERO`; then for each position `p` in row-major order and
/// each channel `c`, for `ky`, `kx` (inside taps only), each increasing:
/// `dx[iy][ix][c] += w[c][ky][kx] * err[p][c]`. Lengths: `w` holds `C * g.taps()` values, `err`
/// holds `g.positions() * C`, `dx` holds `g.in_len()`, else [`LengthMismatch`] and nothing is
/// written.
///
/// # Examples
///
/// ```
/// use sinew_runtime::conv::{depthwise_back, Window};
///
/// let g = Window {
///     rows: 3, cols: 1, channels: 1, k_rows: 2, k_cols: 1,
///     stride_rows: 1, stride_cols: 1, pad_top: 0, pad_left: 0, out_rows: 2, out_cols: 1,
/// };
/// let mut dx = [9.0; 3];
/// depthwise_back(&[1.0, 2.0], &[1.0, 10.0], &mut dx, &g)?;
/// assert_eq!(dx, [1.0, 2.0 + 10.0, 20.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn depthwise_back<T: Real>(
    w: &[T],
    err: &[T],
    dx: &mut [T],
    g: &Window,
) -> Result<(), LengthMismatch> {
    shape::depthwise_back(w, err, dx, g)?;
    depthwise_back_kernel(w, err, dx, g);
    Ok(())
}

/// The loop of [`depthwise_back`], on operands whose lengths agree.
#[inline]
fn depthwise_back_kernel<T: Real>(w: &[T], err: &[T], dx: &mut [T], g: &Window) {
    let (c, k) = (g.channels, g.taps());
    zero(dx);
    if c == 0 {
        return;
    }
    for ((oy, ox), err_p) in positions(g).zip(pieces(err, c)) {
        for ((w_c, e), ch) in pieces(w, k).zip(err_p).zip(0..c) {
            for (tap, wv) in taps(g, oy, ox).zip(w_c) {
                if let Some(d) = tap.and_then(|i| dx.get_mut(at(i, c, ch)?)) {
                    *d += *wv * *e;
                }
            }
        }
    }
}

/// Array form of [`depthwise_back`] (shapes as in [`depthwise_n`]).
///
/// Runs [`depthwise_back`]'s kernel: same bits. A `g` that disagrees with the lengths leaves
/// `dx` untouched.
#[inline]
pub fn depthwise_back_n<T: Real, const K: usize, const C: usize, const I: usize, const O: usize>(
    w: &[[T; K]; C],
    err: &[T; O],
    dx: &mut [T; I],
    g: &Window,
) {
    let _ = depthwise_back(w.as_flattened(), err, dx, g);
}

// ---------------------------------------------------------------------------------------------
// Pooling

/// The first maximal inside tap of channel `ch` of the window at `(oy, ox)`: its index in the
/// map and its value. Scan order; the first inside tap is the start, and a later tap replaces
/// the best only when `v > best`, so of equal values the first wins (and a NaN start stays).
/// `None` when no tap is inside.
#[inline]
fn first_max<T: Real>(x: &[T], g: &Window, oy: usize, ox: usize, ch: usize) -> Option<(usize, T)> {
    let c = g.channels;
    let mut best: Option<(usize, T)> = None;
    for i in taps(g, oy, ox).flatten() {
        let Some(i) = at(i, c, ch) else { continue };
        let Some(v) = x.get(i) else { continue };
        match best {
            Some((_, b)) if *v > b => best = Some((i, *v)),
            None => best = Some((i, *v)),
            Some(_) => {}
        }
    }
    best
}

/// Max pooling: `out[p][c]` = the largest `x[iy][ix][c]` over the window's taps.
///
/// Order: the taps in scan order (`ky`, then `kx`); the first one is the start, and a later
/// one replaces the best only when `v > best`: of equal values the first wins (and so a NaN in
/// the first tap is the result, a later NaN is passed over). A window with no tap inside the
/// input (impossible without padding, for a valid geometry) gives `ZERO`. Lengths: `x` holds
/// `g.in_len()` values and `out` holds `g.positions() * g.channels`, else [`LengthMismatch`]
/// and nothing is written.
///
/// # Examples
///
/// ```
/// use sinew_runtime::conv::{pool_max, Window};
///
/// // 2 x 2 windows with stride 2 over a 2 x 4 map of one channel.
/// let g = Window {
///     rows: 2, cols: 4, channels: 1, k_rows: 2, k_cols: 2,
///     stride_rows: 2, stride_cols: 2, pad_top: 0, pad_left: 0, out_rows: 1, out_cols: 2,
/// };
/// let x = [1.0, 5.0, -1.0, -2.0, 3.0, 4.0, -3.0, -4.0];
/// let mut out = [0.0; 2];
/// pool_max(&x, &mut out, &g)?;
/// assert_eq!(out, [5.0, -1.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn pool_max<T: Real>(x: &[T], out: &mut [T], g: &Window) -> Result<(), LengthMismatch> {
    shape::pool(x, out, g)?;
    pool_max_kernel(x, out, g);
    Ok(())
}

/// The loop of [`pool_max`], on operands whose lengths agree.
#[inline]
fn pool_max_kernel<T: Real>(x: &[T], out: &mut [T], g: &Window) {
    let c = g.channels;
    if c == 0 {
        return;
    }
    for ((oy, ox), out_p) in positions(g).zip(pieces_mut(out, c)) {
        for (o, ch) in out_p.iter_mut().zip(0..c) {
            *o = first_max(x, g, oy, ox, ch).map_or(T::ZERO, |(_, v)| v);
        }
    }
}

/// Array form of [`pool_max`]: input of `I = g.in_len()` values, output of `O = g.positions() *
/// g.channels`.
///
/// Runs [`pool_max`]'s kernel: same bits. A `g` that disagrees with the lengths leaves `out`
/// untouched.
#[inline]
pub fn pool_max_n<T: Real, const I: usize, const O: usize>(
    x: &[T; I],
    out: &mut [T; O],
    g: &Window,
) {
    let _ = pool_max(x, out, g);
}

/// Errors of max pooling sent one map down: each `err[p][c]` goes to the first maximal tap of
/// its window (as [`pool_max`] chooses it), `dx` is zero elsewhere.
///
/// Order: every `dx` value is set to `ZERO`; then for each position `p` in row-major order and
/// each channel `c`: `dx[i] += err[p][c]` at the first maximal tap `i` (nothing for a window
/// with no tap inside). Overlapping windows add in increasing `p`. Lengths: `x` and `dx` hold
/// `g.in_len()` values, `err` holds `g.positions() * g.channels`, else [`LengthMismatch`] and
/// nothing is written.
///
/// # Examples
///
/// ```
/// use sinew_runtime::conv::{pool_max_back, Window};
///
/// let g = Window {
///     rows: 2, cols: 2, channels: 1, k_rows: 2, k_cols: 2,
///     stride_rows: 2, stride_cols: 2, pad_top: 0, pad_left: 0, out_rows: 1, out_cols: 1,
/// };
/// // A tie between x_1 and x_2: the first gets the error.
/// let mut dx = [9.0; 4];
/// pool_max_back(&[3.0, 5.0, 5.0, 1.0], &[2.0], &mut dx, &g)?;
/// assert_eq!(dx, [0.0, 2.0, 0.0, 0.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn pool_max_back<T: Real>(
    x: &[T],
    err: &[T],
    dx: &mut [T],
    g: &Window,
) -> Result<(), LengthMismatch> {
    shape::pool_max_back(x, err, dx, g)?;
    pool_max_back_kernel(x, err, dx, g);
    Ok(())
}

/// The loop of [`pool_max_back`], on operands whose lengths agree.
#[inline]
fn pool_max_back_kernel<T: Real>(x: &[T], err: &[T], dx: &mut [T], g: &Window) {
    let c = g.channels;
    zero(dx);
    if c == 0 {
        return;
    }
    for ((oy, ox), err_p) in positions(g).zip(pieces(err, c)) {
        for (e, ch) in err_p.iter().zip(0..c) {
            if let Some(d) = first_max(x, g, oy, ox, ch).and_then(|(i, _)| dx.get_mut(i)) {
                *d += *e;
            }
        }
    }
}

/// Array form of [`pool_max_back`] (shapes as in [`pool_max_n`]).
///
/// Runs [`pool_max_back`]'s kernel: same bits. A `g` that disagrees with the lengths leaves
/// `dx` untouched.
#[inline]
pub fn pool_max_back_n<T: Real, const I: usize, const O: usize>(
    x: &[T; I],
    err: &[T; O],
    dx: &mut [T; I],
    g: &Window,
) {
    let _ = pool_max_back(x, err, dx, g);
}

/// Average pooling: `out[p][c] = (sum over the inside taps of x[iy][ix][c]) / n`, with `n =
/// T::from_usize(g.taps())` the tap count of the whole window converted to `T` (one rounding;
/// exact below 2^24 for `f32`).
///
/// Order: `s = ZERO`, the inside taps added in scan order (`ky`, then `kx`), then one division
/// `s / n` (not a product by a reciprocal). Every tap is inside for a valid geometry (pooling
/// has no padding); a window with taps outside still divides by the whole count, and a window
/// of no taps gives `0 / 0`, NaN. Lengths: `x` holds `g.in_len()` values and `out` holds
/// `g.positions() * g.channels`, else [`LengthMismatch`] and nothing is written.
///
/// # Examples
///
/// ```
/// use sinew_runtime::conv::{pool_average, Window};
///
/// let g = Window {
///     rows: 2, cols: 4, channels: 1, k_rows: 2, k_cols: 2,
///     stride_rows: 2, stride_cols: 2, pad_top: 0, pad_left: 0, out_rows: 1, out_cols: 2,
/// };
/// let x = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0];
/// let mut out = [0.0; 2];
/// pool_average(&x, &mut out, &g)?;
/// assert_eq!(out, [(1.0 + 2.0 + 5.0 + 6.0) / 4.0, (3.0 + 4.0 + 7.0 + 8.0) / 4.0]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn pool_average<T: Real>(x: &[T], out: &mut [T], g: &Window) -> Result<(), LengthMismatch> {
    shape::pool(x, out, g)?;
    pool_average_kernel(x, out, g);
    Ok(())
}

/// The loop of [`pool_average`], on operands whose lengths agree.
#[inline]
fn pool_average_kernel<T: Real>(x: &[T], out: &mut [T], g: &Window) {
    let c = g.channels;
    if c == 0 {
        return;
    }
    let n = T::from_usize(g.taps());
    for ((oy, ox), out_p) in positions(g).zip(pieces_mut(out, c)) {
        for (o, ch) in out_p.iter_mut().zip(0..c) {
            let mut s = T::ZERO;
            for i in taps(g, oy, ox).flatten() {
                if let Some(v) = at(i, c, ch).and_then(|i| x.get(i)) {
                    s += *v;
                }
            }
            *o = s / n;
        }
    }
}

/// Array form of [`pool_average`] (shapes as in [`pool_max_n`]).
///
/// Runs [`pool_average`]'s kernel: same bits. A `g` that disagrees with the lengths leaves
/// `out` untouched.
#[inline]
pub fn pool_average_n<T: Real, const I: usize, const O: usize>(
    x: &[T; I],
    out: &mut [T; O],
    g: &Window,
) {
    let _ = pool_average(x, out, g);
}

/// Errors of average pooling sent one map down: each tap of a window receives
/// `err[p][c] / n`, `n = T::from_usize(g.taps())` as in [`pool_average`].
///
/// Order: every `dx` value is set to `ZERO`; then for each position `p` in row-major order and
/// each channel `c`: `v = err[p][c] / n` (one division), and for each inside tap in scan order
/// `dx[iy][ix][c] += v`. Overlapping windows add in increasing `p`. Lengths: `err` holds
/// `g.positions() * g.channels` values and `dx` holds `g.in_len()`, else [`LengthMismatch`] and
/// nothing is written.
///
/// # Examples
///
/// ```
/// use sinew_runtime::conv::{pool_average_back, Window};
///
/// let g = Window {
///     rows: 2, cols: 2, channels: 1, k_rows: 2, k_cols: 2,
///     stride_rows: 2, stride_cols: 2, pad_top: 0, pad_left: 0, out_rows: 1, out_cols: 1,
/// };
/// let mut dx = [9.0; 4];
/// pool_average_back(&[2.0], &mut dx, &g)?;
/// assert_eq!(dx, [0.5; 4]);
/// # Ok::<(), sinew_runtime::LengthMismatch>(())
/// ```
#[inline]
pub fn pool_average_back<T: Real>(
    err: &[T],
    dx: &mut [T],
    g: &Window,
) -> Result<(), LengthMismatch> {
    shape::pool_average_back(err, dx, g)?;
    pool_average_back_kernel(err, dx, g);
    Ok(())
}

/// The loop of [`pool_average_back`], on operands whose lengths agree.
#[inline]
fn pool_average_back_kernel<T: Real>(err: &[T], dx: &mut [T], g: &Window) {
    let c = g.channels;
    zero(dx);
    if c == 0 {
        return;
    }
    let n = T::from_usize(g.taps());
    for ((oy, ox), err_p) in positions(g).zip(pieces(err, c)) {
        for (e, ch) in err_p.iter().zip(0..c) {
            let v = *e / n;
            for i in taps(g, oy, ox).flatten() {
                if let Some(d) = at(i, c, ch).and_then(|i| dx.get_mut(i)) {
                    *d += v;
                }
            }
        }
    }
}

/// Array form of [`pool_average_back`]: errors of `O = g.positions() * g.channels` values,
/// `dx` of `I = g.in_len()`.
///
/// Runs [`pool_average_back`]'s kernel: same bits. A `g` that disagrees with the lengths leaves
/// `dx` untouched.
#[inline]
pub fn pool_average_back_n<T: Real, const I: usize, const O: usize>(
    err: &[T; O],
    dx: &mut [T; I],
    g: &Window,
) {
    let _ = pool_average_back(err, dx, g);
}
