//! Lengths of the operands of the slice kernels: the one error they return, [`LengthMismatch`],
//! the rules they check, and [`Flat`], the fixed-size arrays whose types make a mismatch
//! impossible.
//!
//! Invariant: a slice kernel checks the length of every operand before it writes anything, so
//! a kernel that returns `Err` has left every output untouched. No kernel truncates: operands
//! whose lengths disagree are rejected, never paired up to the shortest.

use crate::conv::Window;

/// A slice operand whose length disagrees with the shape the other operands (and any given row
/// length) call for.
///
/// `operand` is the parameter's name in the kernel's signature; `expected` is the length the
/// other operands call for (for a bound, the largest length allowed); `found` is the length
/// given.
///
/// # Examples
///
/// ```
/// use sinew_runtime::shape::LengthMismatch;
///
/// let mut g = [0.0_f64; 2];
/// let err = sinew_runtime::add_acc(&mut g, &[1.0, 2.0, 3.0]);
/// assert_eq!(err, Err(LengthMismatch { operand: "d", expected: 2, found: 3 }));
/// assert_eq!(g, [0.0; 2]);
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct LengthMismatch {
    /// The operand's parameter name.
    pub operand: &'static str,
    /// The length the other operands call for.
    pub expected: usize,
    /// The length given.
    pub found: usize,
}

impl LengthMismatch {
    /// `Ok` when `found == expected`, else the mismatch of `operand`: the one length rule every
    /// check is made of, for callers that check their own operands too.
    ///
    /// # Examples
    /// ```
    /// use sinew_runtime::LengthMismatch;
    /// assert!(LengthMismatch::check("x", 3, 3).is_ok());
    /// let e = LengthMismatch::check("x", 3, 2).unwrap_err();
    /// assert_eq!((e.operand, e.expected, e.found), ("x", 3, 2));
    /// ```
    #[inline(always)]
    pub fn check(
        operand: &'static str,
        expected: usize,
        found: usize,
    ) -> Result<(), LengthMismatch> {
        expect(operand, expected, found)
    }
}

impl core::fmt::Display for LengthMismatch {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        write!(
            f,
            "operand `{}` holds {} values, expected {}",
            self.operand, self.found, self.expected
        )
    }
}

impl core::error::Error for LengthMismatch {}

/// `Ok` when `found == expected`, else the mismatch of `operand`.
#[inline(always)]
pub(crate) fn expect(
    operand: &'static str,
    expected: usize,
    found: usize,
) -> Result<(), LengthMismatch> {
    if found == expected {
        Ok(())
    } else {
        Err(LengthMismatch {
            operand,
            expected,
            found,
        })
    }
}

/// The number of samples `m` of operands made of rows: `(operand, length, row length)` each,
/// every length `m * row length`. `m` is set by the first operand with a non-zero row length
/// (its length must be a whole number of rows); an operand with rows of length zero must be
/// empty. Returns 0 when every row length is zero.
#[inline(always)]
pub(crate) fn samples(ops: &[(&'static str, usize, usize)]) -> Result<usize, LengthMismatch> {
    let mut m = None;
    for &(operand, len, width) in ops {
        match m {
            None if width > 0 => {
                let rows = len / width;
                expect(operand, rows * width, len)?;
                m = Some(rows);
            }
            None => expect(operand, 0, len)?,
            Some(m) => expect(operand, m.saturating_mul(width), len)?,
        }
    }
    Ok(m.unwrap_or(0))
}

/// The rows of `n` values in a matrix operand of `len` values: `len / n`, an error unless `n`
/// divides `len` (with `n = 0` the operand must be empty, and it has no rows).
#[inline(always)]
pub(crate) fn rows_of(
    operand: &'static str,
    len: usize,
    n: usize,
) -> Result<usize, LengthMismatch> {
    match len.checked_div(n) {
        Some(rows) => expect(operand, rows * n, len).map(|()| rows),
        None => expect(operand, 0, len).map(|()| 0),
    }
}

/// The lengths of `affine(w, b, x, z)`: `w` holds `n * o` values and `z` holds `o`, with
/// `n = x.len()` and `o = b.len()`.
#[inline(always)]
pub(crate) fn affine<T>(w: &[T], b: &[T], x: &[T], z: &[T]) -> Result<(), LengthMismatch> {
    let (n, o) = (x.len(), b.len());
    expect("w", n.saturating_mul(o), w.len())?;
    expect("z", o, z.len())
}

/// The lengths of `back(w, d, out)` and `outer_acc(w, d, out)`: `w` holds `n * o` values, with
/// `n = out.len()` and `o = d.len()`.
#[inline(always)]
pub(crate) fn matrix<T>(
    operand: &'static str,
    w: &[T],
    d: &[T],
    n: usize,
) -> Result<(), LengthMismatch> {
    expect(operand, n.saturating_mul(d.len()), w.len())
}

/// The lengths of `affine_batch(w, b, xs, zs, n)`: `w` holds `n * o` values (`o = b.len()`),
/// `xs` and `zs` the rows of `n` and of `o` of the same `m` samples.
#[inline(always)]
pub(crate) fn affine_batch<T>(
    w: &[T],
    b: &[T],
    xs: &[T],
    zs: &[T],
    n: usize,
) -> Result<(), LengthMismatch> {
    let o = b.len();
    expect("w", n.saturating_mul(o), w.len())?;
    samples(&[("xs", xs.len(), n), ("zs", zs.len(), o)]).map(|_| ())
}

/// The lengths of `back_batch(w, ds, outs, n)` (and, with `g` and `xs`, of
/// `outer_acc_batch(g, ds, xs, n)`): `w` holds `o` whole rows of `n`, and `ds` and `outs` the
/// rows of `o` and of `n` of the same `m` samples. With `n = 0`, `w` and `outs` are empty and the
/// width of the rows of `ds` is unknown: `ds` is not checked (nothing is written).
#[inline(always)]
pub(crate) fn batch_of_rows<T>(
    (w_name, w): (&'static str, &[T]),
    ds: &[T],
    (rows_name, rows): (&'static str, &[T]),
    n: usize,
) -> Result<(), LengthMismatch> {
    let o = rows_of(w_name, w.len(), n)?;
    if n == 0 {
        return expect(rows_name, 0, rows.len());
    }
    samples(&[(rows_name, rows.len(), n), ("ds", ds.len(), o)]).map(|_| ())
}

/// The lengths of `outer_acc_batch_rows(g, ds, xs, n, (first, o))`: `g` holds whole rows of
/// `n`, at most `o - first` of them, and `ds` and `xs` the rows of `o` and of `n` of the same
/// `m` samples.
#[inline(always)]
pub(crate) fn outer_acc_batch_rows<T>(
    g: &[T],
    ds: &[T],
    xs: &[T],
    n: usize,
    (first, o): (usize, usize),
) -> Result<(), LengthMismatch> {
    let rows = rows_of("g", g.len(), n)?;
    let most = o.saturating_sub(first);
    if rows > most {
        return expect("g", most.saturating_mul(n), g.len());
    }
    samples(&[("xs", xs.len(), n), ("ds", ds.len(), o)]).map(|_| ())
}

/// The lengths of `softmax_cross_entropy_batch(zs, ys, as_, losses, o)`: `zs`, `ys` and `as_`
/// the rows of `o` of the same `m` samples, `losses` one value per sample.
#[inline(always)]
pub(crate) fn softmax_cross_entropy_batch<T>(
    zs: &[T],
    ys: &[T],
    as_: &[T],
    losses: &[T],
    o: usize,
) -> Result<(), LengthMismatch> {
    samples(&[
        ("zs", zs.len(), o),
        ("ys", ys.len(), o),
        ("as_", as_.len(), o),
        ("losses", losses.len(), 1),
    ])
    .map(|_| ())
}

/// The lengths of `conv(w, b, x, out, g)`: with `F = b.len()` filters, `w` holds
/// `F * g.filter_len()` values, `x` holds `g.in_len()` and `out` holds `g.positions() * F`.
#[inline(always)]
pub(crate) fn conv<T>(
    w: &[T],
    b: &[T],
    x: &[T],
    out: &[T],
    g: &Window,
) -> Result<(), LengthMismatch> {
    let f = b.len();
    expect("w", f.saturating_mul(g.filter_len()), w.len())?;
    expect("x", g.in_len(), x.len())?;
    expect("out", g.positions().saturating_mul(f), out.len())
}

/// The lengths of `conv_acc(gw, gb, err, x, g)`: with `F = gb.len()` filters, `gw` holds
/// `F * g.filter_len()` values, `err` holds `g.positions() * F` and `x` holds `g.in_len()`.
#[inline(always)]
pub(crate) fn conv_acc<T>(
    gw: &[T],
    gb: &[T],
    err: &[T],
    x: &[T],
    g: &Window,
) -> Result<(), LengthMismatch> {
    let f = gb.len();
    expect("gw", f.saturating_mul(g.filter_len()), gw.len())?;
    expect("err", g.positions().saturating_mul(f), err.len())?;
    expect("x", g.in_len(), x.len())
}

/// The lengths of `conv_back(w, err, dx, g)`, and its number of filters `F`: the rows of
/// `g.filter_len()` in `w` (whole rows), with `err` holding `g.positions() * F`; when
/// `g.filter_len()` is 0, `w` must be empty and `F` is the rows of `g.positions()` in `err`
/// (0 when that is 0 too, with `err` empty). `dx` holds `g.in_len()`.
#[inline(always)]
pub(crate) fn conv_back<T>(
    w: &[T],
    err: &[T],
    dx: &[T],
    g: &Window,
) -> Result<usize, LengthMismatch> {
    let (kc, positions) = (g.filter_len(), g.positions());
    let f = if kc > 0 {
        let f = rows_of("w", w.len(), kc)?;
        expect("err", positions.saturating_mul(f), err.len())?;
        f
    } else {
        expect("w", 0, w.len())?;
        rows_of("err", err.len(), positions)?
    };
    expect("dx", g.in_len(), dx.len())?;
    Ok(f)
}

/// The lengths of `depthwise(w, b, x, out, g)`: with `C = g.channels`, `w` holds
/// `C * g.taps()` values, `b` holds `C`, `x` holds `g.in_len()` and `out` holds
/// `g.positions() * C`.
#[inline(always)]
pub(crate) fn depthwise<T>(
    w: &[T],
    b: &[T],
    x: &[T],
    out: &[T],
    g: &Window,
) -> Result<(), LengthMismatch> {
    let c = g.channels;
    expect("w", c.saturating_mul(g.taps()), w.len())?;
    expect("b", c, b.len())?;
    expect("x", g.in_len(), x.len())?;
    expect("out", g.positions().saturating_mul(c), out.len())
}

/// The lengths of `depthwise_acc(gw, gb, err, x, g)`: those of `depthwise` with `gw`, `gb`
/// and `err` in the places of `w`, `b` and `out`.
#[inline(always)]
pub(crate) fn depthwise_acc<T>(
    gw: &[T],
    gb: &[T],
    err: &[T],
    x: &[T],
    g: &Window,
) -> Result<(), LengthMismatch> {
    let c = g.channels;
    expect("gw", c.saturating_mul(g.taps()), gw.len())?;
    expect("gb", c, gb.len())?;
    expect("err", g.positions().saturating_mul(c), err.len())?;
    expect("x", g.in_len(), x.len())
}

/// The lengths of `depthwise_back(w, err, dx, g)`: with `C = g.channels`, `w` holds
/// `C * g.taps()` values, `err` holds `g.positions() * C` and `dx` holds `g.in_len()`.
#[inline(always)]
pub(crate) fn depthwise_back<T>(
    w: &[T],
    err: &[T],
    dx: &[T],
    g: &Window,
) -> Result<(), LengthMismatch> {
    let c = g.channels;
    expect("w", c.saturating_mul(g.taps()), w.len())?;
    expect("err", g.positions().saturating_mul(c), err.len())?;
    expect("dx", g.in_len(), dx.len())
}

/// The lengths of `pool_max(x, out, g)` and `pool_average(x, out, g)`: `x` holds
/// `g.in_len()` values and `out` holds `g.positions() * g.channels`.
#[inline(always)]
pub(crate) fn pool<T>(x: &[T], out: &[T], g: &Window) -> Result<(), LengthMismatch> {
    expect("x", g.in_len(), x.len())?;
    expect("out", g.positions().saturating_mul(g.channels), out.len())
}

/// The lengths of `pool_max_back(x, err, dx, g)`: `x` and `dx` hold `g.in_len()` values and
/// `err` holds `g.positions() * g.channels`.
#[inline(always)]
pub(crate) fn pool_max_back<T>(
    x: &[T],
    err: &[T],
    dx: &[T],
    g: &Window,
) -> Result<(), LengthMismatch> {
    expect("x", g.in_len(), x.len())?;
    pool_average_back(err, dx, g)
}

/// The lengths of `pool_average_back(err, dx, g)`: `err` holds `g.positions() * g.channels`
/// values and `dx` holds `g.in_len()`.
#[inline(always)]
pub(crate) fn pool_average_back<T>(err: &[T], dx: &[T], g: &Window) -> Result<(), LengthMismatch> {
    expect("err", g.positions().saturating_mul(g.channels), err.len())?;
    expect("dx", g.in_len(), dx.len())
}

/// A fixed-size array of `T`, a vector `[T; N]` or a row-major matrix `[[T; I]; O]`, seen as
/// its values in order. Two operands of one such type hold the same number of values, known
/// from the type: the array forms of the optimizer steps and of the penalty take them, so
/// their lengths cannot disagree. Sealed: only these two shapes implement it.
///
/// # Examples
///
/// ```
/// use sinew_runtime::shape::Flat;
///
/// let w = [[1.0_f32, 2.0], [3.0, 4.0]];
/// assert_eq!(Flat::<f32>::values(&w), &[1.0, 2.0, 3.0, 4.0]);
/// ```
pub trait Flat<T>: sealed::Sealed<T> {
    /// The values, row by row.
    fn values(&self) -> &[T];
    /// The values, row by row, writable.
    fn values_mut(&mut self) -> &mut [T];
}

mod sealed {
    /// Implemented only by the shapes of [`super::Flat`].
    pub trait Sealed<T> {}
    impl<T, const N: usize> Sealed<T> for [T; N] {}
    impl<T, const I: usize, const O: usize> Sealed<T> for [[T; I]; O] {}
}

impl<T, const N: usize> Flat<T> for [T; N] {
    #[inline(always)]
    fn values(&self) -> &[T] {
        self
    }
    #[inline(always)]
    fn values_mut(&mut self) -> &mut [T] {
        self
    }
}

impl<T, const I: usize, const O: usize> Flat<T> for [[T; I]; O] {
    #[inline(always)]
    fn values(&self) -> &[T] {
        self.as_flattened()
    }
    #[inline(always)]
    fn values_mut(&mut self) -> &mut [T] {
        self.as_flattened_mut()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sample_counts_and_rows() {
        assert_eq!(samples(&[("xs", 6, 2), ("zs", 9, 3)]), Ok(3));
        assert_eq!(
            samples(&[("xs", 6, 2), ("zs", 8, 3)]),
            Err(LengthMismatch {
                operand: "zs",
                expected: 9,
                found: 8
            })
        );
        assert_eq!(
            samples(&[("xs", 5, 2)]),
            Err(LengthMismatch {
                operand: "xs",
                expected: 4,
                found: 5
            })
        );
        assert_eq!(samples(&[("xs", 0, 0), ("zs", 6, 3)]), Ok(2));
        assert!(samples(&[("xs", 1, 0), ("zs", 6, 3)]).is_err());
        assert_eq!(samples(&[("xs", 0, 0)]), Ok(0));
        assert_eq!(rows_of("w", 6, 3), Ok(2));
        assert!(rows_of("w", 7, 3).is_err());
        assert_eq!(rows_of("w", 0, 0), Ok(0));
        assert!(rows_of("w", 1, 0).is_err());
        let e = LengthMismatch {
            operand: "y",
            expected: 3,
            found: 2,
        };
        assert_eq!(
            std::format!("{e}"),
            "operand `y` holds 2 values, expected 3"
        );
    }
}
