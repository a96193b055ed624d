//! The sliding-window kernels against checks from outside the module:
//!
//! - worked examples computed by hand from the definitions (common practice: a layer computes
//!   a cross-correlation, the window is not flipped; zero padding adds nothing; of equal maxima
//!   the first in scan order takes the gradient);
//! - an independent naive implementation written here from the textbook formula (common
//!   practice): the input copied into an explicitly zero-padded array, then
//!   `out[oy][ox][f] = b[f] + sum w[f][ky][kx][c] * xp[oy*sr + ky][ox*sc + kx][c]` with
//!   nested loops in `f64`, over random shapes, both paddings, strides 1 to 3, 1-D and 2-D;
//! - gradients by central finite differences (gradient checking, h = 1e-6; common practice)
//!   of `L = sum r[p][f] * out[p][f]` with random `r`, and the adjoint identity
//!   `<A x, e> = <x, A^T e>` of the linear maps (common practice: the backward pass is the
//!   transpose of the forward linear map);
//! - the length rules, and the array forms against the slice forms bit for bit.

use super::*;
use crate::rng::SplitMix64;
use crate::testutil::same_bits;
use std::vec;
use std::vec::Vec;

/// A geometry and the zeros after the last row and column (which the kernels do not need: the
/// output size implies them; the naive implementation pads explicitly).
#[derive(Debug, Clone, Copy)]
struct Layer {
    g: Window,
    pad_bottom: usize,
    pad_right: usize,
}

/// Output size and padding of one dimension of `n` values, window `k`, stride `s`.
/// `valid`: no padding, `(n - k) / s + 1` outputs (needs `k <= n`). `same`: `ceil(n / s)`
/// outputs, `max((out - 1)*s + k - n, 0)` zeros in all, half before and the odd one after
/// (common practice).
fn dimension(n: usize, k: usize, s: usize, same: bool) -> (usize, usize, usize) {
    if same {
        let out = n.div_ceil(s);
        let total = ((out - 1) * s + k).saturating_sub(n);
        (out, total / 2, total - total / 2)
    } else {
        ((n - k) / s + 1, 0, 0)
    }
}

/// The layer of a `rows x cols x channels` map, `k_rows x k_cols` window, given strides.
fn layer(
    (rows, cols, channels): (usize, usize, usize),
    (k_rows, k_cols): (usize, usize),
    (stride_rows, stride_cols): (usize, usize),
    same: bool,
) -> Layer {
    let (out_rows, pad_top, pad_bottom) = dimension(rows, k_rows, stride_rows, same);
    let (out_cols, pad_left, pad_right) = dimension(cols, k_cols, stride_cols, same);
    Layer {
        g: Window {
            rows,
            cols,
            channels,
            k_rows,
            k_cols,
            stride_rows,
            stride_cols,
            pad_top,
            pad_left,
            out_rows,
            out_cols,
        },
        pad_bottom,
        pad_right,
    }
}

/// A random layer: 1-D (`cols = k_cols = 1`) or 2-D, sizes 1 to `most`, channels 1 to 3,
/// windows 1 to 4 (at most the input for `valid`), strides 1 to 3.
fn random_layer(rng: &mut SplitMix64, most: usize, same: bool, two_d: bool) -> Layer {
    let mut draw = |lo: usize, hi: usize| lo + (rng.next_u64() % (hi - lo + 1) as u64) as usize;
    let rows = draw(1, most);
    let cols = if two_d { draw(1, most) } else { 1 };
    let channels = draw(1, 3);
    let k_rows = draw(1, if same { 4 } else { rows.min(4) });
    let k_cols = if two_d {
        draw(1, if same { 4 } else { cols.min(4) })
    } else {
        1
    };
    let strides = (draw(1, 3), if two_d { draw(1, 3) } else { 1 });
    layer((rows, cols, channels), (k_rows, k_cols), strides, same)
}

fn data(len: usize, rng: &mut SplitMix64) -> Vec<f64> {
    (0..len).map(|_| rng.uniform(-1.0, 1.0)).collect()
}

/// `len` distinct values in random order, at least 0.37 apart (so a max is differentiable and
/// stays the max under a step of 1e-6): a Fisher–Yates shuffle of `0.37 * (i - len/2)`.
fn distinct(len: usize, rng: &mut SplitMix64) -> Vec<f64> {
    let mut v: Vec<f64> = (0..len)
        .map(|i| 0.37 * (i as f64 - len as f64 / 2.0))
        .collect();
    for i in (1..len).rev() {
        let j = (rng.next_u64() % (i as u64 + 1)) as usize;
        v.swap(i, j);
    }
    v
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    assert_eq!(a.len(), b.len());
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

/// `|a - b| / max(|a|, |b|, 1)`: relative, with an absolute floor at 1.
fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / a.abs().max(b.abs()).max(1.0)
}

fn assert_close(got: &[f64], want: &[f64], tol: f64, what: &str) {
    assert_eq!(got.len(), want.len(), "{what}: lengths");
    for (i, (a, b)) in got.iter().zip(want).enumerate() {
        assert!(rel(*a, *b) <= tol, "{what}[{i}]: {a} against {b}");
    }
}

/// The input copied into an explicitly zero-padded array of
/// `(rows + pad_top + pad_bottom) x (cols + pad_left + pad_right) x channels`, and its column
/// count.
fn padded(l: &Layer, x: &[f64]) -> (Vec<f64>, usize) {
    let g = l.g;
    let pr = g.rows + g.pad_top + l.pad_bottom;
    let pc = g.cols + g.pad_left + l.pad_right;
    let c = g.channels;
    let mut xp = vec![0.0; pr * pc * c];
    for y in 0..g.rows {
        for xx in 0..g.cols {
            for ch in 0..c {
                xp[((y + g.pad_top) * pc + xx + g.pad_left) * c + ch] =
                    x[(y * g.cols + xx) * c + ch];
            }
        }
    }
    (xp, pc)
}

/// The naive convolution: the textbook formula over the padded array.
fn naive_conv(l: &Layer, w: &[f64], b: &[f64], x: &[f64]) -> Vec<f64> {
    let g = l.g;
    let (xp, pc) = padded(l, x);
    let (c, f) = (g.channels, b.len());
    let mut out = vec![0.0; g.out_rows * g.out_cols * f];
    for oy in 0..g.out_rows {
        for ox in 0..g.out_cols {
            for ff in 0..f {
                let mut s = 0.0;
                for ky in 0..g.k_rows {
                    for kx in 0..g.k_cols {
                        for ch in 0..c {
                            let wv = w[((ff * g.k_rows + ky) * g.k_cols + kx) * c + ch];
                            let py = oy * g.stride_rows + ky;
                            let px = ox * g.stride_cols + kx;
                            s += wv * xp[(py * pc + px) * c + ch];
                        }
                    }
                }
                out[(oy * g.out_cols + ox) * f + ff] = s + b[ff];
            }
        }
    }
    out
}

/// The naive depthwise convolution over the padded array.
fn naive_depthwise(l: &Layer, w: &[f64], b: &[f64], x: &[f64]) -> Vec<f64> {
    let g = l.g;
    let (xp, pc) = padded(l, x);
    let c = g.channels;
    let mut out = vec![0.0; g.out_rows * g.out_cols * c];
    for oy in 0..g.out_rows {
        for ox in 0..g.out_cols {
            for ch in 0..c {
                let mut s = 0.0;
                for ky in 0..g.k_rows {
                    for kx in 0..g.k_cols {
                        let py = oy * g.stride_rows + ky;
                        let px = ox * g.stride_cols + kx;
                        s += w[(ch * g.k_rows + ky) * g.k_cols + kx] * xp[(py * pc + px) * c + ch];
                    }
                }
                out[(oy * g.out_cols + ox) * c + ch] = s + b[ch];
            }
        }
    }
    out
}

/// The naive pooling (no padding): every window's values, reduced by `reduce`.
fn naive_pool(g: &Window, x: &[f64], reduce: impl Fn(&[f64]) -> f64) -> Vec<f64> {
    let c = g.channels;
    let mut out = vec![0.0; g.out_rows * g.out_cols * c];
    for oy in 0..g.out_rows {
        for ox in 0..g.out_cols {
            for ch in 0..c {
                let mut window = Vec::new();
                for ky in 0..g.k_rows {
                    for kx in 0..g.k_cols {
                        let y = oy * g.stride_rows + ky;
                        let xx = ox * g.stride_cols + kx;
                        window.push(x[(y * g.cols + xx) * c + ch]);
                    }
                }
                out[(oy * g.out_cols + ox) * c + ch] = reduce(&window);
            }
        }
    }
    out
}

fn max_of(v: &[f64]) -> f64 {
    v.iter().copied().fold(f64::NEG_INFINITY, f64::max)
}

fn mean_of(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

/// The kernels' forward maps for tests, returning a new vector.
fn conv_of(g: &Window, w: &[f64], b: &[f64], x: &[f64]) -> Vec<f64> {
    let mut out = vec![0.0; g.positions() * b.len()];
    conv(w, b, x, &mut out, g).unwrap();
    out
}

fn depthwise_of(g: &Window, w: &[f64], b: &[f64], x: &[f64]) -> Vec<f64> {
    let mut out = vec![0.0; g.positions() * g.channels];
    depthwise(w, b, x, &mut out, g).unwrap();
    out
}

fn pool_max_of(g: &Window, x: &[f64]) -> Vec<f64> {
    let mut out = vec![0.0; g.positions() * g.channels];
    pool_max(x, &mut out, g).unwrap();
    out
}

fn pool_average_of(g: &Window, x: &[f64]) -> Vec<f64> {
    let mut out = vec![0.0; g.positions() * g.channels];
    pool_average(x, &mut out, g).unwrap();
    out
}

/// Central differences `(L(v + h e_i) - L(v - h e_i)) / 2h` for every `i`, h = 1e-6.
fn central_differences(v: &[f64], loss: impl Fn(&[f64]) -> f64) -> Vec<f64> {
    let h = 1e-6;
    let mut p = v.to_vec();
    (0..v.len())
        .map(|i| {
            p[i] = v[i] + h;
            let up = loss(&p);
            p[i] = v[i] - h;
            let down = loss(&p);
            p[i] = v[i];
            (up - down) / (2.0 * h)
        })
        .collect()
}

// ---------------------------------------------------------------------------------------------
// Worked examples, by hand

#[test]
fn one_d_valid_convolution_by_hand() {
    // x = (1, 2, 3, 4, 5), kernel (1, 0, -1), bias 0.5: each output is x_i - x_(i+2) + 0.5 =
    // -2 + 0.5 = -1.5 (cross-correlation, by hand).
    let l = layer((5, 1, 1), (3, 1), (1, 1), false);
    assert_eq!(l.g.out_rows, 3);
    let out = conv_of(&l.g, &[1.0, 0.0, -1.0], &[0.5], &[1.0, 2.0, 3.0, 4.0, 5.0]);
    assert_eq!(out, [-1.5, -1.5, -1.5]);
}

#[test]
fn one_d_stride_two_convolutions_by_hand() {
    // One channel: x = (1, ..., 7), kernel (1, 2), stride 2: (7 - 2) / 2 + 1 = 3 outputs at
    // steps 0, 2, 4: 1 + 2*2 = 5, 3 + 2*4 = 11, 5 + 2*6 = 17.
    let l = layer((7, 1, 1), (2, 1), (2, 1), false);
    assert_eq!(l.g.out_rows, 3);
    let x = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0];
    assert_eq!(conv_of(&l.g, &[1.0, 2.0], &[0.0], &x), [5.0, 11.0, 17.0]);

    // Two channels, two filters, window 3, stride 2: steps (1, -1), (2, -2), ..., (5, -5);
    // (5 - 3) / 2 + 1 = 2 outputs at steps 0 and 2. Filter 0 sums channel 0 over the window:
    // 1 + 2 + 3 = 6, 3 + 4 + 5 = 12. Filter 1 is channel 1 of the first tap minus that of the
    // last, plus 1: -1 - (-3) + 1 = 3, -3 - (-5) + 1 = 3. Output order: [p][f].
    let l = layer((5, 1, 2), (3, 1), (2, 1), false);
    let x = [1.0, -1.0, 2.0, -2.0, 3.0, -3.0, 4.0, -4.0, 5.0, -5.0];
    #[rustfmt::skip]
    let w = [
        1.0, 0.0, 1.0, 0.0, 1.0, 0.0, // filter 0: [tap][channel]
        0.0, 1.0, 0.0, 0.0, 0.0, -1.0, // filter 1
    ];
    assert_eq!(conv_of(&l.g, &w, &[0.0, 1.0], &x), [6.0, 3.0, 12.0, 3.0]);
}

#[test]
fn same_padded_three_by_three_convolution_by_hand() {
    // x[r][c] = 3r + c + 1 (1..9), k[ky][kx] = 3ky + kx + 1 (1..9), one row and column of
    // zeros on each side, out[oy][ox] = sum k[ky][kx] * x[oy + ky - 1][ox + kx - 1] over the
    // taps inside (by hand):
    let corner_00 = 5.0 * 1.0 + 6.0 * 2.0 + 8.0 * 4.0 + 9.0 * 5.0; // 94
    let edge_01 = 4.0 * 1.0 + 5.0 * 2.0 + 6.0 * 3.0 + 7.0 * 4.0 + 8.0 * 5.0 + 9.0 * 6.0; // 154
    let corner_02 = 4.0 * 2.0 + 5.0 * 3.0 + 7.0 * 5.0 + 8.0 * 6.0; // 106
    let edge_10 = 2.0 * 1.0 + 3.0 * 2.0 + 5.0 * 4.0 + 6.0 * 5.0 + 8.0 * 7.0 + 9.0 * 8.0; // 186
    let centre: f64 = (1..=9).map(|v| f64::from(v * v)).sum(); // 285
    let edge_12 = 1.0 * 2.0 + 2.0 * 3.0 + 4.0 * 5.0 + 5.0 * 6.0 + 7.0 * 8.0 + 8.0 * 9.0; // 186
    let corner_20 = 2.0 * 4.0 + 3.0 * 5.0 + 5.0 * 7.0 + 6.0 * 8.0; // 106
    let edge_21 = 1.0 * 4.0 + 2.0 * 5.0 + 3.0 * 6.0 + 4.0 * 7.0 + 5.0 * 8.0 + 6.0 * 9.0; // 154
    let corner_22 = 1.0 * 5.0 + 2.0 * 6.0 + 4.0 * 8.0 + 5.0 * 9.0; // 94
    let want = [
        corner_00, edge_01, corner_02, edge_10, centre, edge_12, corner_20, edge_21, corner_22,
    ];
    assert_eq!(
        want,
        [94.0, 154.0, 106.0, 186.0, 285.0, 186.0, 106.0, 154.0, 94.0]
    );

    let l = layer((3, 3, 1), (3, 3), (1, 1), true);
    assert_eq!(
        (l.g.pad_top, l.g.pad_left, l.g.out_rows, l.g.out_cols),
        (1, 1, 3, 3)
    );
    let x: Vec<f64> = (1..=9).map(f64::from).collect();
    assert_eq!(conv_of(&l.g, &x, &[0.0], &x), want);
    // Depthwise with one channel is the same sum.
    assert_eq!(depthwise_of(&l.g, &x, &[0.0], &x), want);
    // The naive implementation agrees.
    assert_eq!(naive_conv(&l, &x, &[0.0], &x), want);
}

#[test]
fn max_pooling_ties_by_hand() {
    // One 2 x 2 window over (3, 5; 5, 1): the max is 5, at x_1 and x_2; the first in scan
    // order, x_1, takes the error.
    let g = layer((2, 2, 1), (2, 2), (2, 2), false).g;
    let x = [3.0, 5.0, 5.0, 1.0];
    assert_eq!(pool_max_of(&g, &x), [5.0]);
    let mut dx = [9.0; 4];
    pool_max_back(&x, &[2.0], &mut dx, &g).unwrap();
    assert_eq!(dx, [0.0, 2.0, 0.0, 0.0]);

    // Overlapping windows of 2 with stride 1 over (1, 3, 3): both maxima are 3, both at x_1
    // (the first of the tie 3, 3 in the second window), so x_1 receives 1 + 10.
    let g = layer((1, 3, 1), (1, 2), (1, 1), false).g;
    let x = [1.0, 3.0, 3.0];
    assert_eq!(pool_max_of(&g, &x), [3.0, 3.0]);
    let mut dx = [9.0; 3];
    pool_max_back(&x, &[1.0, 10.0], &mut dx, &g).unwrap();
    assert_eq!(dx, [0.0, 11.0, 0.0]);

    // Two channels pool separately: channel 0 (4, 4; 4, 4) ties everywhere (the first tap
    // wins), channel 1 (-1, -2; -3, 0) has its max at the last tap.
    let g = layer((2, 2, 2), (2, 2), (2, 2), false).g;
    let x = [4.0, -1.0, 4.0, -2.0, 4.0, -3.0, 4.0, 0.0];
    assert_eq!(pool_max_of(&g, &x), [4.0, 0.0]);
    let mut dx = [9.0; 8];
    pool_max_back(&x, &[1.0, 2.0], &mut dx, &g).unwrap();
    assert_eq!(dx, [1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 2.0]);
}

#[test]
fn average_pooling_by_hand() {
    // 4 x 4 map of 1..16, 2 x 2 windows, stride 2: (1 + 2 + 5 + 6) / 4 = 3.5,
    // (3 + 4 + 7 + 8) / 4 = 5.5, (9 + 10 + 13 + 14) / 4 = 11.5, (11 + 12 + 15 + 16) / 4 = 13.5.
    let g = layer((4, 4, 1), (2, 2), (2, 2), false).g;
    let x: Vec<f64> = (1..=16).map(f64::from).collect();
    assert_eq!(pool_average_of(&g, &x), [3.5, 5.5, 11.5, 13.5]);
    // Backward: each tap of window p receives err[p] / 4.
    let mut dx = [9.0; 16];
    pool_average_back(&[4.0, 8.0, 12.0, 16.0], &mut dx, &g).unwrap();
    #[rustfmt::skip]
    let want = [
        1.0, 1.0, 2.0, 2.0,
        1.0, 1.0, 2.0, 2.0,
        3.0, 3.0, 4.0, 4.0,
        3.0, 3.0, 4.0, 4.0,
    ];
    assert_eq!(dx, want);
}

#[test]
fn gradient_accumulation_adds_and_backward_passes_overwrite_by_hand() {
    // 1-D, one channel, kernel 2 over x = (1, 2, 3), err = (1, 10):
    // gw = (1*1 + 10*2, 1*2 + 10*3) = (21, 32), gb = 11, added to what is there;
    // dx = (w0*1, w1*1 + w0*10, w1*10) with w = (1, 2): (1, 12, 20), whatever dx held.
    let g = layer((3, 1, 1), (2, 1), (1, 1), false).g;
    let (mut gw, mut gb) = ([100.0, 200.0], [1000.0]);
    conv_acc(&mut gw, &mut gb, &[1.0, 10.0], &[1.0, 2.0, 3.0], &g).unwrap();
    assert_eq!((gw, gb), ([121.0, 232.0], [1011.0]));
    let mut dx = [9.0; 3];
    conv_back(&[1.0, 2.0], &[1.0, 10.0], &mut dx, &g).unwrap();
    assert_eq!(dx, [1.0, 12.0, 20.0]);
}

// ---------------------------------------------------------------------------------------------
// Against the naive implementation

/// The random layers of the sweeps: 1-D and 2-D, valid and same, 12 of each.
fn layers(seed: u64, most: usize) -> Vec<Layer> {
    let mut rng = SplitMix64::new(seed);
    let mut all = Vec::new();
    for two_d in [false, true] {
        for same in [false, true] {
            for _ in 0..12 {
                all.push(random_layer(&mut rng, most, same, two_d));
            }
        }
    }
    all
}

#[test]
fn forward_kernels_match_the_naive_formula_on_random_shapes() {
    let mut rng = SplitMix64::new(41);
    let mut strides = [false; 4];
    for l in layers(7, 9) {
        let g = l.g;
        strides[g.stride_rows] = true;
        let f = 1 + (rng.next_u64() % 4) as usize;
        let x = data(g.in_len(), &mut rng);
        let w = data(f * g.filter_len(), &mut rng);
        let b = data(f, &mut rng);
        let what = std::format!("conv {g:?} F = {f}");
        assert_close(
            &conv_of(&g, &w, &b, &x),
            &naive_conv(&l, &w, &b, &x),
            1e-12,
            &what,
        );

        let wd = data(g.channels * g.taps(), &mut rng);
        let bd = data(g.channels, &mut rng);
        let what = std::format!("depthwise {g:?}");
        let got = depthwise_of(&g, &wd, &bd, &x);
        assert_close(&got, &naive_depthwise(&l, &wd, &bd, &x), 1e-12, &what);

        if l.g.pad_top == 0 && l.g.pad_left == 0 && l.pad_bottom == 0 && l.pad_right == 0 {
            let what = std::format!("pool {g:?}");
            assert_close(
                &pool_max_of(&g, &x),
                &naive_pool(&g, &x, max_of),
                0.0,
                &what,
            );
            let got = pool_average_of(&g, &x);
            assert_close(&got, &naive_pool(&g, &x, mean_of), 1e-12, &what);
        }
    }
    assert_eq!(strides, [false, true, true, true], "strides 1 to 3 drawn");
}

// ---------------------------------------------------------------------------------------------
// Gradients

#[test]
fn convolution_gradients_match_central_differences_and_the_adjoint() {
    let mut rng = SplitMix64::new(43);
    for l in layers(11, 6) {
        let g = l.g;
        let f = 1 + (rng.next_u64() % 3) as usize;
        let x = data(g.in_len(), &mut rng);
        let w = data(f * g.filter_len(), &mut rng);
        let b = data(f, &mut rng);
        let r = data(g.positions() * f, &mut rng);
        let what = std::format!("{g:?} F = {f}");

        // The kernels: dL/dw, dL/db by conv_acc (from zero), dL/dx by conv_back.
        let (mut gw, mut gb) = (vec![0.0; w.len()], vec![0.0; f]);
        conv_acc(&mut gw, &mut gb, &r, &x, &g).unwrap();
        let mut dx = vec![0.0; x.len()];
        conv_back(&w, &r, &mut dx, &g).unwrap();

        let fd_w = central_differences(&w, |w| dot(&r, &conv_of(&g, w, &b, &x)));
        let fd_b = central_differences(&b, |b| dot(&r, &conv_of(&g, &w, b, &x)));
        let fd_x = central_differences(&x, |x| dot(&r, &conv_of(&g, &w, &b, x)));
        assert_close(&gw, &fd_w, 1e-7, &std::format!("gw {what}"));
        assert_close(&gb, &fd_b, 1e-7, &std::format!("gb {what}"));
        assert_close(&dx, &fd_x, 1e-7, &std::format!("dx {what}"));

        // Adjoint: <A x, e> = <x, A^T e> with A the map x -> conv(w, 0, x), and the same for
        // the map w -> conv(w, 0, x), whose transpose is conv_acc.
        let zero_b = vec![0.0; f];
        let forward = dot(&conv_of(&g, &w, &zero_b, &x), &r);
        assert!(rel(forward, dot(&x, &dx)) <= 1e-12, "x adjoint {what}");
        assert!(rel(forward, dot(&w, &gw)) <= 1e-12, "w adjoint {what}");
    }
}

#[test]
fn depthwise_gradients_match_central_differences_and_the_adjoint() {
    let mut rng = SplitMix64::new(47);
    for l in layers(13, 6) {
        let g = l.g;
        let c = g.channels;
        let x = data(g.in_len(), &mut rng);
        let w = data(c * g.taps(), &mut rng);
        let b = data(c, &mut rng);
        let r = data(g.positions() * c, &mut rng);
        let what = std::format!("{g:?}");

        let (mut gw, mut gb) = (vec![0.0; w.len()], vec![0.0; c]);
        depthwise_acc(&mut gw, &mut gb, &r, &x, &g).unwrap();
        let mut dx = vec![0.0; x.len()];
        depthwise_back(&w, &r, &mut dx, &g).unwrap();

        let fd_w = central_differences(&w, |w| dot(&r, &depthwise_of(&g, w, &b, &x)));
        let fd_b = central_differences(&b, |b| dot(&r, &depthwise_of(&g, &w, b, &x)));
        let fd_x = central_differences(&x, |x| dot(&r, &depthwise_of(&g, &w, &b, x)));
        assert_close(&gw, &fd_w, 1e-7, &std::format!("gw {what}"));
        assert_close(&gb, &fd_b, 1e-7, &std::format!("gb {what}"));
        assert_close(&dx, &fd_x, 1e-7, &std::format!("dx {what}"));

        let forward = dot(&depthwise_of(&g, &w, &vec![0.0; c], &x), &r);
        assert!(rel(forward, dot(&x, &dx)) <= 1e-12, "x adjoint {what}");
        assert!(rel(forward, dot(&w, &gw)) <= 1e-12, "w adjoint {what}");
    }
}

#[test]
fn pooling_gradients_match_central_differences_and_the_adjoint() {
    let mut rng = SplitMix64::new(53);
    for l in layers(17, 7) {
        let g = l.g;
        if l.g.pad_top + l.g.pad_left + l.pad_bottom + l.pad_right > 0 {
            continue; // pooling has no padding
        }
        let what = std::format!("{g:?}");
        let x = distinct(g.in_len(), &mut rng);
        let r = data(g.positions() * g.channels, &mut rng);

        let mut dx = vec![0.0; x.len()];
        pool_max_back(&x, &r, &mut dx, &g).unwrap();
        let fd = central_differences(&x, |x| dot(&r, &pool_max_of(&g, x)));
        assert_close(&dx, &fd, 1e-7, &std::format!("max {what}"));
        // With the maxima fixed, max pooling is the linear map that picks them; its transpose
        // is the backward pass.
        let forward = dot(&pool_max_of(&g, &x), &r);
        assert!(rel(forward, dot(&x, &dx)) <= 1e-12, "max adjoint {what}");

        pool_average_back(&r, &mut dx, &g).unwrap();
        let fd = central_differences(&x, |x| dot(&r, &pool_average_of(&g, x)));
        assert_close(&dx, &fd, 1e-7, &std::format!("average {what}"));
        let forward = dot(&pool_average_of(&g, &x), &r);
        assert!(
            rel(forward, dot(&x, &dx)) <= 1e-12,
            "average adjoint {what}"
        );
    }
}

// ---------------------------------------------------------------------------------------------
// Lengths

/// For every operand of a kernel (`(name, correct length)`), lengths one longer and one
/// shorter: `run` (given the lengths of every operand, outputs filled with a sentinel) must
/// return the mismatch of `blamed(name)` and leave its outputs untouched; the correct lengths
/// must pass.
fn each_wrong_length(
    lens: &[(&'static str, usize)],
    blamed: impl Fn(&'static str) -> &'static str,
    run: impl Fn(&[usize]) -> (Result<(), LengthMismatch>, bool),
) {
    let correct: Vec<usize> = lens.iter().map(|&(_, n)| n).collect();
    let (ok, _) = run(&correct);
    assert_eq!(ok, Ok(()), "{lens:?}");
    for (k, &(name, n)) in lens.iter().enumerate() {
        for wrong in [n + 1, n.wrapping_sub(1)] {
            if wrong == usize::MAX {
                continue;
            }
            let mut l = correct.clone();
            l[k] = wrong;
            let (res, untouched) = run(&l);
            let err = res.expect_err(name);
            assert_eq!(err.operand, blamed(name), "{name} of {wrong}");
            assert!(untouched, "{name} of {wrong}: an output was written");
        }
    }
}

const SENTINEL: f64 = 7.0;

fn ones(n: usize) -> Vec<f64> {
    vec![1.0; n]
}

fn sentinels(n: usize) -> Vec<f64> {
    vec![SENTINEL; n]
}

fn untouched(v: &[f64]) -> bool {
    v.iter().all(|&x| x == SENTINEL)
}

#[test]
fn wrong_lengths_are_rejected_before_anything_is_written() {
    // 2-D 4 x 4 x 2, window 3 x 3, same padding: 16 positions, filter_len 18, 3 filters.
    let g = layer((4, 4, 2), (3, 3), (1, 1), true).g;
    let (n, p, c, k, kc, f) = (32, 16, 2, 9, 18, 3);
    assert_eq!(
        (g.in_len(), g.positions(), g.taps(), g.filter_len()),
        (n, p, k, kc)
    );
    let b_sets_f = |name: &'static str| -> &'static str {
        if name == "b" {
            "w"
        } else {
            name
        }
    };
    let gb_sets_f = |name: &'static str| -> &'static str {
        if name == "gb" {
            "gw"
        } else {
            name
        }
    };
    let same = |name: &'static str| -> &'static str { name };

    each_wrong_length(
        &[("w", f * kc), ("b", f), ("x", n), ("out", p * f)],
        b_sets_f,
        |l| {
            let mut out = sentinels(l[3]);
            (
                conv(&ones(l[0]), &ones(l[1]), &ones(l[2]), &mut out, &g),
                untouched(&out),
            )
        },
    );
    each_wrong_length(
        &[("gw", f * kc), ("gb", f), ("err", p * f), ("x", n)],
        gb_sets_f,
        |l| {
            let (mut gw, mut gb) = (sentinels(l[0]), sentinels(l[1]));
            let res = conv_acc(&mut gw, &mut gb, &ones(l[2]), &ones(l[3]), &g);
            (res, untouched(&gw) && untouched(&gb))
        },
    );
    each_wrong_length(&[("w", f * kc), ("err", p * f), ("dx", n)], same, |l| {
        let mut dx = sentinels(l[2]);
        (
            conv_back(&ones(l[0]), &ones(l[1]), &mut dx, &g),
            untouched(&dx),
        )
    });
    each_wrong_length(
        &[("w", c * k), ("b", c), ("x", n), ("out", p * c)],
        same,
        |l| {
            let mut out = sentinels(l[3]);
            (
                depthwise(&ones(l[0]), &ones(l[1]), &ones(l[2]), &mut out, &g),
                untouched(&out),
            )
        },
    );
    each_wrong_length(
        &[("gw", c * k), ("gb", c), ("err", p * c), ("x", n)],
        same,
        |l| {
            let (mut gw, mut gb) = (sentinels(l[0]), sentinels(l[1]));
            let res = depthwise_acc(&mut gw, &mut gb, &ones(l[2]), &ones(l[3]), &g);
            (res, untouched(&gw) && untouched(&gb))
        },
    );
    each_wrong_length(&[("w", c * k), ("err", p * c), ("dx", n)], same, |l| {
        let mut dx = sentinels(l[2]);
        (
            depthwise_back(&ones(l[0]), &ones(l[1]), &mut dx, &g),
            untouched(&dx),
        )
    });

    // Pooling: 2 x 2 windows, stride 2 over the same map: 4 positions.
    let g = layer((4, 4, 2), (2, 2), (2, 2), false).g;
    let p = 4;
    each_wrong_length(&[("x", n), ("out", p * c)], same, |l| {
        let mut out = sentinels(l[1]);
        (pool_max(&ones(l[0]), &mut out, &g), untouched(&out))
    });
    each_wrong_length(&[("x", n), ("out", p * c)], same, |l| {
        let mut out = sentinels(l[1]);
        (pool_average(&ones(l[0]), &mut out, &g), untouched(&out))
    });
    each_wrong_length(&[("x", n), ("err", p * c), ("dx", n)], same, |l| {
        let mut dx = sentinels(l[2]);
        (
            pool_max_back(&ones(l[0]), &ones(l[1]), &mut dx, &g),
            untouched(&dx),
        )
    });
    each_wrong_length(&[("err", p * c), ("dx", n)], same, |l| {
        let mut dx = sentinels(l[1]);
        (pool_average_back(&ones(l[0]), &mut dx, &g), untouched(&dx))
    });
}

#[test]
fn degenerate_geometries_neither_panic_nor_write_out_of_place() {
    // Sizes whose products overflow saturate, and no slice can be that long.
    let huge = Window {
        rows: usize::MAX,
        cols: 2,
        channels: 1,
        k_rows: usize::MAX,
        k_cols: 3,
        stride_rows: usize::MAX,
        stride_cols: usize::MAX,
        pad_top: usize::MAX,
        pad_left: 0,
        out_rows: usize::MAX,
        out_cols: 5,
    };
    assert_eq!(
        (huge.in_len(), huge.positions(), huge.taps()),
        (usize::MAX, usize::MAX, usize::MAX)
    );
    let mut out = sentinels(4);
    assert!(conv(&ones(3), &ones(1), &ones(2), &mut out, &huge).is_err());
    assert!(pool_max(&ones(2), &mut out, &huge).is_err());
    assert!(untouched(&out));

    // No filters, no channels, empty windows: nothing to read, biases only, or zeros.
    let g = layer((3, 3, 2), (2, 2), (1, 1), false).g;
    let mut none: [f64; 0] = [];
    conv(&[], &[], &ones(18), &mut none, &g).unwrap();
    conv_back(&[], &[], &mut sentinels(18), &g).unwrap();
    let empty_window = Window {
        k_rows: 0,
        k_cols: 0,
        ..g
    };
    let mut out = sentinels(4 * 2);
    conv(&[], &[0.5, -0.5], &ones(18), &mut out, &empty_window).unwrap();
    assert_eq!(out, [0.5, -0.5, 0.5, -0.5, 0.5, -0.5, 0.5, -0.5]);
    let mut dx = sentinels(18);
    conv_back(&[], &ones(8), &mut dx, &empty_window).unwrap();
    assert_eq!(dx, vec![0.0; 18]);
    pool_max(&ones(18), &mut out, &empty_window).unwrap();
    assert_eq!(out, vec![0.0; 8]);
    pool_average(&ones(18), &mut out, &empty_window).unwrap();
    assert!(out.iter().all(|v| v.is_nan()), "0 / 0");

    // Strides and paddings so large that every tap is outside: only the bias.
    // (Stride 1: row oy + ky - usize::MAX is below zero for every small oy + ky.)
    let far = Window {
        pad_top: usize::MAX,
        out_rows: 2,
        out_cols: 1,
        ..g
    };
    let mut out = sentinels(4);
    depthwise(&ones(8), &[0.25, 0.75], &ones(18), &mut out, &far).unwrap();
    assert_eq!(out, [0.25, 0.75, 0.25, 0.75]);
}

// ---------------------------------------------------------------------------------------------
// Array forms

/// 1-D: 8 steps of 2 channels, 3 filters of window 3, valid: 6 positions.
const LINE: Window = Window {
    rows: 8,
    cols: 1,
    channels: 2,
    k_rows: 3,
    k_cols: 1,
    stride_rows: 1,
    stride_cols: 1,
    pad_top: 0,
    pad_left: 0,
    out_rows: 6,
    out_cols: 1,
};

/// 2-D: 4 x 4 x 2, window 3 x 3, stride 1, same padding: 16 positions.
const SQUARE: Window = Window {
    rows: 4,
    cols: 4,
    channels: 2,
    k_rows: 3,
    k_cols: 3,
    stride_rows: 1,
    stride_cols: 1,
    pad_top: 1,
    pad_left: 1,
    out_rows: 4,
    out_cols: 4,
};

/// 2-D pooling: 4 x 4 x 2, window 2 x 2, stride 2: 4 positions.
const POOL: Window = Window {
    rows: 4,
    cols: 4,
    channels: 2,
    k_rows: 2,
    k_cols: 2,
    stride_rows: 2,
    stride_cols: 2,
    pad_top: 0,
    pad_left: 0,
    out_rows: 2,
    out_cols: 2,
};

fn random_array<T: Real, const N: usize>(rng: &mut SplitMix64) -> [T; N] {
    let mut a = [T::ZERO; N];
    for v in a.iter_mut() {
        *v = T::from_f64(rng.uniform(-1.0, 1.0));
    }
    a
}

fn random_matrix<T: Real, const I: usize, const O: usize>(rng: &mut SplitMix64) -> [[T; I]; O] {
    let mut a = [[T::ZERO; I]; O];
    for row in a.iter_mut() {
        *row = random_array(rng);
    }
    a
}

/// Every array form against its slice form, bit for bit, for a convolution of `F` filters and
/// a depthwise convolution on `g`.
fn conv_forms<
    T: Real,
    const KC: usize,
    const K: usize,
    const F: usize,
    const I: usize,
    const O: usize,
    const OD: usize,
>(
    g: &Window,
    rng: &mut SplitMix64,
) {
    let x: [T; I] = random_array(rng);
    let w: [[T; KC]; F] = random_matrix(rng);
    let b: [T; F] = random_array(rng);
    let e: [T; O] = random_array(rng);

    let (mut a, mut s) = ([T::ZERO; O], vec![T::ZERO; O]);
    conv_n(&w, &b, &x, &mut a, g);
    conv(w.as_flattened(), &b, &x, &mut s, g).unwrap();
    assert_eq!(same_bits(&a), same_bits(&s), "conv_n");

    let (mut gwa, mut gba) = (w, b);
    let (mut gws, mut gbs) = (w.as_flattened().to_vec(), b.to_vec());
    conv_acc_n(&mut gwa, &mut gba, &e, &x, g);
    conv_acc(&mut gws, &mut gbs, &e, &x, g).unwrap();
    assert_eq!(
        same_bits(gwa.as_flattened()),
        same_bits(&gws),
        "conv_acc_n gw"
    );
    assert_eq!(same_bits(&gba), same_bits(&gbs), "conv_acc_n gb");

    let (mut da, mut ds) = ([T::ONE; I], vec![T::ONE; I]);
    conv_back_n(&w, &e, &mut da, g);
    conv_back(w.as_flattened(), &e, &mut ds, g).unwrap();
    assert_eq!(same_bits(&da), same_bits(&ds), "conv_back_n");

    let wd: [[T; K]; 2] = random_matrix(rng);
    let bd: [T; 2] = random_array(rng);
    let ed: [T; OD] = random_array(rng);
    let (mut a, mut s) = ([T::ZERO; OD], vec![T::ZERO; OD]);
    depthwise_n(&wd, &bd, &x, &mut a, g);
    depthwise(wd.as_flattened(), &bd, &x, &mut s, g).unwrap();
    assert_eq!(same_bits(&a), same_bits(&s), "depthwise_n");

    let (mut gwa, mut gba) = (wd, bd);
    let (mut gws, mut gbs) = (wd.as_flattened().to_vec(), bd.to_vec());
    depthwise_acc_n(&mut gwa, &mut gba, &ed, &x, g);
    depthwise_acc(&mut gws, &mut gbs, &ed, &x, g).unwrap();
    assert_eq!(
        same_bits(gwa.as_flattened()),
        same_bits(&gws),
        "depthwise_acc_n gw"
    );
    assert_eq!(same_bits(&gba), same_bits(&gbs), "depthwise_acc_n gb");

    let (mut da, mut ds) = ([T::ONE; I], vec![T::ONE; I]);
    depthwise_back_n(&wd, &ed, &mut da, g);
    depthwise_back(wd.as_flattened(), &ed, &mut ds, g).unwrap();
    assert_eq!(same_bits(&da), same_bits(&ds), "depthwise_back_n");

    // A geometry that disagrees with the array lengths leaves the outputs untouched.
    let wrong = Window {
        rows: g.rows + 1,
        ..*g
    };
    let mut a = [T::ONE; O];
    conv_n(&w, &b, &x, &mut a, &wrong);
    assert!(
        a.iter().all(|v| *v == T::ONE),
        "conv_n with a wrong geometry"
    );
    let mut da = [T::ONE; I];
    depthwise_back_n(&wd, &ed, &mut da, &wrong);
    assert!(
        da.iter().all(|v| *v == T::ONE),
        "depthwise_back_n with a wrong geometry"
    );
}

fn pool_forms<T: Real>(rng: &mut SplitMix64) {
    let g = &POOL;
    let x: [T; 32] = random_array(rng);
    let e: [T; 8] = random_array(rng);
    let (mut a, mut s) = ([T::ZERO; 8], vec![T::ZERO; 8]);
    pool_max_n(&x, &mut a, g);
    pool_max(&x, &mut s, g).unwrap();
    assert_eq!(same_bits(&a), same_bits(&s), "pool_max_n");
    pool_average_n(&x, &mut a, g);
    pool_average(&x, &mut s, g).unwrap();
    assert_eq!(same_bits(&a), same_bits(&s), "pool_average_n");

    let (mut da, mut ds) = ([T::ONE; 32], vec![T::ONE; 32]);
    pool_max_back_n(&x, &e, &mut da, g);
    pool_max_back(&x, &e, &mut ds, g).unwrap();
    assert_eq!(same_bits(&da), same_bits(&ds), "pool_max_back_n");
    pool_average_back_n(&e, &mut da, g);
    pool_average_back(&e, &mut ds, g).unwrap();
    assert_eq!(same_bits(&da), same_bits(&ds), "pool_average_back_n");

    let wrong = Window { channels: 1, ..*g };
    let mut a = [T::ONE; 8];
    pool_max_n(&x, &mut a, &wrong);
    pool_average_n(&x, &mut a, &wrong);
    assert!(a.iter().all(|v| *v == T::ONE), "pool with a wrong geometry");
}

#[test]
fn array_forms_give_the_bits_of_the_slice_forms() {
    let mut rng = SplitMix64::new(59);
    // LINE: KC = 3*2, K = 3, 3 filters, I = 16, O = 6*3, OD = 6*2.
    conv_forms::<f32, 6, 3, 3, 16, 18, 12>(&LINE, &mut rng);
    conv_forms::<f64, 6, 3, 3, 16, 18, 12>(&LINE, &mut rng);
    // SQUARE: KC = 9*2, K = 9, 2 filters, I = 32, O = 16*2, OD = 16*2.
    conv_forms::<f32, 18, 9, 2, 32, 32, 32>(&SQUARE, &mut rng);
    conv_forms::<f64, 18, 9, 2, 32, 32, 32>(&SQUARE, &mut rng);
    pool_forms::<f32>(&mut rng);
    pool_forms::<f64>(&mut rng);
}
