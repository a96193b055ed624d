//! Shapes: the input's shape and, layer by layer, what each layer reads and writes (`S0401`,
//! `S0402` for each size, `S0404` to `S0409` for the sliding windows).
//!
//! Rules (the reference's "Shapes" section):
//! - an input has one size (a vector), two (`STEPS x CHANNELS`, a window) or three
//!   (`ROWS x COLS x CHANNELS`, a grid); a map holds at most [`MAX_MAP`] values;
//! - a dense layer reads any shape, flattened row-major with the channel fastest, and writes a
//!   vector; `conv`, `depthwise` and `pool` read a window or a grid and write one of the same
//!   rank, so they come before the first dense layer;
//! - a kernel or pooling window has one size on a window; on a grid one (square) or two
//!   (`ROWS x COLS`);
//! - `pad valid` gives `floor((n - k) / s) + 1` positions on an axis of `n`, and needs `k <= n`;
//!   `pad same` gives `ceil(n / s)`, with `max((out - 1) s + k - n, 0)` zeros, the smaller half
//!   before (common practice);
//! - a pooling's stride is its window; it drops a short tail: `floor(n / k)` positions.

use super::shapes::whole;
use crate::diag::{Code, Diagnostic};
use crate::ir::{LayerKind, Pad, PoolOp, Shape, Window};
use crate::span::Span;
use crate::syntax::ast::{self, Dims, Integer, LayerBody, LayerDecl, PoolWindow, WindowDecl};
use crate::text::quote;

/// The largest size of one axis, and the largest width.
pub const MAX_WIDTH: u64 = 65535;

/// The most values one map (the input, or what a layer writes) may hold: 1 Mi.
pub const MAX_MAP: u64 = 1024 * 1024;

/// A layer's resolved geometry.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Resolved {
    /// What it computes.
    pub kind: LayerKind,
    /// Rows of W (units, filters, channels; 0 for a pooling).
    pub width: usize,
    /// Columns of W.
    pub fan_in: usize,
    /// What it reads.
    pub input: Shape,
    /// What it writes.
    pub output: Shape,
}

/// One size: `S0401` for 0, `S0402` above [`MAX_WIDTH`].
pub(crate) fn size(
    w: &Integer,
    whose: &str,
    what: &str,
    diags: &mut Vec<Diagnostic>,
) -> Option<usize> {
    // Counted nouns read "has 0 channels"; the others "has width 0".
    let counted = matches!(what, "steps" | "channels" | "rows" | "columns" | "filters");
    let has = |v: &str| {
        if counted {
            format!("{whose} has {v} {what}")
        } else {
            format!("{whose} has {what} {v}")
        }
    };
    match whole(w) {
        Some(0) => {
            diags.push(
                Diagnostic::error(Code::S0401, has("0"), w.span)
                    .label(if what == "width" { "0 units" } else { "0 here" })
                    .with_help(if counted {
                        "every size of a shape is at least 1".to_string()
                    } else {
                        format!("a {what} is at least 1")
                    }),
            );
            None
        }
        Some(v) if v <= MAX_WIDTH => usize::try_from(v).ok(),
        _ => {
            diags.push(
                Diagnostic::error(
                    Code::S0402,
                    format!("{}, above the limit of {MAX_WIDTH}", has(&quote(&w.node))),
                    w.span,
                )
                .label(if what == "width" {
                    "too wide"
                } else {
                    "too large"
                })
                .with_help(if counted {
                    format!("at most {MAX_WIDTH} {what}")
                } else {
                    format!("a {what} is at most {MAX_WIDTH}")
                }),
            );
            None
        }
    }
}

/// `S0408` when a map of `shape` holds more than [`MAX_MAP`] values.
fn map_limit(len: u128, whose: &str, words: &str, at: Span, diags: &mut Vec<Diagnostic>) -> bool {
    if len > u128::from(MAX_MAP) {
        diags.push(
            Diagnostic::error(
                Code::S0408,
                format!(
                    "{whose} holds {words} = {len} values, above the limit of {MAX_MAP} (1 Mi)"
                ),
                at,
            )
            .label("too many values")
            .with_help("use a shorter window, fewer channels or filters, or a stride"),
        );
        return false;
    }
    true
}

/// The input's shape.
pub(crate) fn input(name: &str, dims: &Dims, diags: &mut Vec<Diagnostic>) -> Option<Shape> {
    let whose = format!("input `{name}`");
    if dims.sizes.len() > 3 {
        diags.push(
            Diagnostic::error(
                Code::S0409,
                format!(
                    "{whose} has {} sizes; an input has at most 3",
                    dims.sizes.len()
                ),
                dims.span,
            )
            .label("too many sizes")
            .with_help(
                "write a vector `WIDTH`, a window `STEPS x CHANNELS` or a grid \
                 `ROWS x COLS x CHANNELS`",
            ),
        );
        return None;
    }
    let what = match dims.sizes.len() {
        1 => ["width"].as_slice(),
        2 => &["steps", "channels"],
        _ => &["rows", "columns", "channels"],
    };
    let sizes: Vec<Option<usize>> = dims
        .sizes
        .iter()
        .zip(what)
        .map(|(s, w)| size(s, &whose, w, diags))
        .collect();
    let sizes: Vec<usize> = sizes.into_iter().collect::<Option<_>>()?;
    let shape = match sizes.as_slice() {
        [n] => Shape::vector(*n),
        [r, c] => Shape {
            rank: 2,
            rows: *r,
            cols: 1,
            channels: *c,
        },
        [r, c, k] => Shape {
            rank: 3,
            rows: *r,
            cols: *c,
            channels: *k,
        },
        _ => return None,
    };
    let len = sizes.iter().map(|&s| s as u128).product();
    let words = sizes
        .iter()
        .map(usize::to_string)
        .collect::<Vec<_>>()
        .join(" x ");
    map_limit(len, &whose, &words, dims.span, diags).then_some(shape)
}

/// What came before a layer, for messages.
pub(crate) struct Before<'a> {
    /// Its shape, when known.
    pub shape: Option<Shape>,
    /// `input `x`` or `layer `mix``.
    pub who: String,
    /// Where it is declared.
    pub at: Span,
    /// The declaration, for a layer.
    pub decl: Option<&'a LayerDecl>,
    /// True when it is a vector whatever its sizes (a one-size input, a dense layer), so that
    /// `S0407` is reported even when a size of it is invalid.
    pub vector: bool,
}

/// The geometry of one layer after `before`.
pub(crate) fn layer(
    decl: &LayerDecl,
    before: &Before<'_>,
    diags: &mut Vec<Diagnostic>,
) -> Option<Resolved> {
    let whose = format!("layer `{}`", decl.name.node);
    match &decl.body {
        LayerBody::Dense { width } => {
            let width = size(width, &whose, "width", diags)?;
            let input = before.shape?;
            Some(Resolved {
                kind: LayerKind::Dense,
                width,
                fan_in: input.len(),
                input,
                output: Shape::vector(width),
            })
        }
        LayerBody::Conv {
            keyword,
            filters,
            window,
        } => {
            let f = size(filters, &whose, "filters", diags);
            let (w, pad) = sliding(decl, *keyword, "conv", window, before, diags)?;
            let f = f?;
            let output = Shape {
                rank: w.1.rank,
                rows: w.0.out_rows,
                cols: w.0.out_cols,
                channels: f,
            };
            fits(&whose, output, decl, diags)?;
            Some(Resolved {
                kind: LayerKind::Conv { window: w.0, pad },
                width: f,
                fan_in: w.0.taps() * w.0.channels,
                input: w.1,
                output,
            })
        }
        LayerBody::Depthwise { keyword, window } => {
            let (w, pad) = sliding(decl, *keyword, "depthwise", window, before, diags)?;
            let output = Shape {
                rank: w.1.rank,
                rows: w.0.out_rows,
                cols: w.0.out_cols,
                channels: w.0.channels,
            };
            Some(Resolved {
                kind: LayerKind::Depthwise { window: w.0, pad },
                width: w.0.channels,
                fan_in: w.0.taps(),
                input: w.1,
                output,
            })
        }
        LayerBody::Pool {
            keyword,
            op,
            window,
        } => {
            let sizes = match window {
                PoolWindow::Size(dims) => {
                    let what = ["window size", "window size"];
                    let s: Vec<Option<usize>> = dims
                        .sizes
                        .iter()
                        .zip(what.iter().cycle())
                        .map(|(s, w)| size(s, &whose, w, diags))
                        .collect();
                    Some(s.into_iter().collect::<Option<Vec<usize>>>()?)
                }
                PoolWindow::All(_) => None,
            };
            let input = shaped(*keyword, "pool", before, diags)?;
            let (k_rows, k_cols) = match &sizes {
                None => (input.rows, input.cols),
                Some(s) => kernel_rank(s, input, window.span(), &whose, "pooling window", diags)?,
            };
            let mut ok = true;
            for (k, n, axis) in [
                (k_rows, input.rows, rows_word(input)),
                (k_cols, input.cols, "columns"),
            ] {
                if k > n {
                    ok = false;
                    diags.push(
                        Diagnostic::error(
                            Code::S0406,
                            format!("{whose} pools windows of {k} {axis}, but its input has {n}"),
                            window.span(),
                        )
                        .label(format!("{k} {axis}"))
                        .with_secondary(
                            before.at,
                            format!("{} gives {}", before.who, input.words()),
                        )
                        .with_help(format!(
                            "use a window of at most {n}, or `pool {} all`",
                            op_word(op.node)
                        )),
                    );
                }
            }
            if !ok {
                return None;
            }
            let w = Window {
                rows: input.rows,
                cols: input.cols,
                channels: input.channels,
                k_rows,
                k_cols,
                stride_rows: k_rows,
                stride_cols: k_cols,
                pad_top: 0,
                pad_left: 0,
                out_rows: input.rows / k_rows,
                out_cols: input.cols / k_cols,
            };
            let op = match op.node {
                ast::PoolOp::Max => PoolOp::Max,
                ast::PoolOp::Average => PoolOp::Average,
            };
            Some(Resolved {
                kind: LayerKind::Pool {
                    op,
                    window: w,
                    all: sizes.is_none(),
                },
                width: 0,
                fan_in: 0,
                input,
                output: Shape {
                    rank: input.rank,
                    rows: w.out_rows,
                    cols: w.out_cols,
                    channels: input.channels,
                },
            })
        }
    }
}

fn op_word(op: ast::PoolOp) -> &'static str {
    match op {
        ast::PoolOp::Max => "max",
        ast::PoolOp::Average => "average",
    }
}

/// `steps` on a window, `rows` on a grid.
fn rows_word(s: Shape) -> &'static str {
    if s.rank == 2 {
        "steps"
    } else {
        "rows"
    }
}

/// The shape before a sliding-window layer: `S0407` when it is a vector.
fn shaped(
    keyword: Span,
    word: &str,
    before: &Before<'_>,
    diags: &mut Vec<Diagnostic>,
) -> Option<Shape> {
    if before.vector || before.shape.is_some_and(|s| s.is_vector()) {
        let of = before
            .shape
            .map(|s| format!(" of {}", s.channels))
            .unwrap_or_default();
        let (why, help) = match before.decl {
            Some(_) => (
                format!("{} is dense and gives a vector{of}", before.who),
                "put the `conv`, `depthwise` and `pool` layers before the first dense layer",
            ),
            None => (
                format!("{} is a vector{of}", before.who),
                "declare the input as a window `STEPS x CHANNELS` (e.g. `input imu 100 x 6`) or \
                 a grid `ROWS x COLS x CHANNELS`",
            ),
        };
        diags.push(
            Diagnostic::error(
                Code::S0407,
                format!("`{word}` needs a window or a grid, but {why}"),
                keyword,
            )
            .label(format!("`{word}` reads a window or a grid"))
            .with_secondary(before.at, "a vector")
            .with_help(help),
        );
        return None;
    }
    before.shape
}

/// The kernel's rows and columns from its sizes: one size on a window; one (square) or two on a
/// grid (`S0409` otherwise).
fn kernel_rank(
    sizes: &[usize],
    input: Shape,
    at: Span,
    whose: &str,
    what: &str,
    diags: &mut Vec<Diagnostic>,
) -> Option<(usize, usize)> {
    match (input.rank, sizes) {
        (2, [k]) => Some((*k, 1)),
        (3, [k]) => Some((*k, *k)),
        (3, [r, c]) => Some((*r, *c)),
        _ => {
            let want = if input.rank == 2 {
                "one size (the input is a window of steps)"
            } else {
                "one or two sizes (the input is a grid)"
            };
            diags.push(
                Diagnostic::error(
                    Code::S0409,
                    format!(
                        "{whose} has a {what} of {} sizes; it needs {want}",
                        sizes.len()
                    ),
                    at,
                )
                .label(format!("{} sizes", sizes.len()))
                .with_help(if input.rank == 2 {
                    "write one size, e.g. `kernel 5`"
                } else {
                    "write `3` or `3 x 3`"
                }),
            );
            None
        }
    }
}

/// Kernel, stride and padding of a convolution against its input: the window and the input.
fn sliding(
    decl: &LayerDecl,
    keyword: Span,
    word: &str,
    w: &WindowDecl,
    before: &Before<'_>,
    diags: &mut Vec<Diagnostic>,
) -> Option<((Window, Shape), Pad)> {
    let whose = format!("layer `{}`", decl.name.node);
    let sizes: Vec<Option<usize>> = w
        .kernel
        .sizes
        .iter()
        .map(|s| size(s, &whose, "kernel size", diags))
        .collect();
    let stride = match &w.stride {
        None => Some(1),
        Some(s) if whole(s) == Some(0) => {
            diags.push(
                Diagnostic::error(Code::S0405, format!("{whose} has stride 0"), s.span)
                    .label("stride 0")
                    .with_help(
                        "a stride is at least 1 (1 visits every position; it is the default)",
                    ),
            );
            None
        }
        Some(s) => size(s, &whose, "stride", diags),
    };
    let pad = match w.pad.as_ref().map(|p| p.node) {
        Some(ast::Pad::Same) => Pad::Same,
        _ => Pad::Valid,
    };
    let input = shaped(keyword, word, before, diags)?;
    let sizes: Vec<usize> = sizes.into_iter().collect::<Option<_>>()?;
    let stride = stride?;
    let (k_rows, k_cols) = kernel_rank(&sizes, input, w.kernel.span, &whose, "kernel", diags)?;
    let stride_cols = if input.rank == 2 { 1 } else { stride };
    let mut axes = Vec::new();
    for (n, k, s, axis) in [
        (input.rows, k_rows, stride, rows_word(input)),
        (input.cols, k_cols, stride_cols, "columns"),
    ] {
        match pad {
            Pad::Valid if k > n => {
                diags.push(
                    Diagnostic::error(
                        Code::S0404,
                        format!("{whose} has a kernel of {k} {axis}, larger than its input of {n}"),
                        w.kernel.span,
                    )
                    .label(format!("{k} {axis}"))
                    .with_secondary(before.at, format!("{} gives {}", before.who, input.words()))
                    .with_help(format!(
                        "use a kernel of at most {n}, or `pad same` to pad the input with zeros"
                    )),
                );
                axes.push(None);
            }
            Pad::Valid => axes.push(Some(((n - k) / s + 1, 0))),
            Pad::Same => {
                let out = n.div_ceil(s);
                let total = ((out - 1) * s + k).saturating_sub(n);
                axes.push(Some((out, total / 2)));
            }
        }
    }
    let (out_rows, pad_top) = axes.first().copied().flatten()?;
    let (out_cols, pad_left) = axes.get(1).copied().flatten()?;
    Some((
        (
            Window {
                rows: input.rows,
                cols: input.cols,
                channels: input.channels,
                k_rows,
                k_cols,
                stride_rows: stride,
                stride_cols,
                pad_top,
                pad_left,
                out_rows,
                out_cols,
            },
            input,
        ),
        pad,
    ))
}

/// `S0408` when what a layer writes is too large.
fn fits(whose: &str, out: Shape, decl: &LayerDecl, diags: &mut Vec<Diagnostic>) -> Option<()> {
    let len = out.rows as u128 * out.cols as u128 * out.channels as u128;
    map_limit(len, whose, &out.words(), decl.size_span(), diags).then_some(())
}
