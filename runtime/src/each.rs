//! Iteration with no panicking path at any optimisation level: the forms the kernels (and the
//! generated code) use instead of core's chunk iterators, `array::from_fn` with an indexing
//! closure, and computed indices.
//!
//! Why: `chunks(n)` and `chunks_exact(n)` assert `n != 0`, zipping them computes `len / n` behind a
//! division-by-zero check, and a closure given to `array::from_fn` receives its index as an
//! unknown number. At `opt-level` 2 and 3 the optimiser inlines all of it and proves the checks
//! away; at `"s"` and `"z"` it leaves these small functions out of line, and the panics stay in
//! the image (found by `tests/tests/panic_free.rs`). The forms here split with
//! `split_at_checked`, pair with `zip`, and index only through `get`, so there is nothing to
//! prove: invariant, no function of this module refers to a panic.

/// The consecutive pieces of exactly `n` elements of `s` (a shorter tail is left out), as
/// `s.chunks_exact(n)` gives them but without its division and assertion. With `n = 0` the
/// pieces are empty and never end, so callers zip them with a finite sequence or rule `n = 0`
/// out.
#[inline(always)]
pub(crate) fn pieces<T>(s: &[T], n: usize) -> impl Iterator<Item = &[T]> {
    let mut rest = s;
    core::iter::from_fn(move || {
        let (head, tail) = rest.split_at_checked(n)?;
        rest = tail;
        Some(head)
    })
}

/// [`pieces`] of a mutable slice.
#[inline(always)]
pub(crate) fn pieces_mut<T>(s: &mut [T], n: usize) -> impl Iterator<Item = &mut [T]> {
    let mut rest = s;
    core::iter::from_fn(move || {
        let (head, tail) = core::mem::take(&mut rest).split_at_mut_checked(n)?;
        rest = tail;
        Some(head)
    })
}

/// The consecutive blocks of at most `n` elements of `s`, the last one possibly shorter, as
/// `s.chunks(n)` gives them, but with no assertion and no division; `n = 0` gives no block.
/// Generated batch code walks its samples with it.
///
/// # Examples
///
/// ```
/// use sinew_runtime::each::blocks;
///
/// let v = [1, 2, 3, 4, 5];
/// let b: Vec<&[i32]> = blocks(&v, 2).collect();
/// assert_eq!(b, [&[1, 2][..], &[3, 4], &[5]]);
/// assert_eq!(blocks(&v, 0).count(), 0);
/// ```
#[inline(always)]
pub fn blocks<T>(s: &[T], n: usize) -> impl Iterator<Item = &[T]> {
    let mut rest = s;
    core::iter::from_fn(move || {
        if rest.is_empty() {
            return None;
        }
        let (head, tail) = rest.split_at_checked(n.min(rest.len()))?;
        rest = tail;
        (!head.is_empty()).then_some(head)
    })
}

/// `[f(a_0, b_0), .., f(a_(N-1), b_(N-1))]`, element by element in increasing index.
#[inline(always)]
pub(crate) fn zip_with<T: Copy, const N: usize>(
    a: [T; N],
    b: &[T; N],
    f: impl Fn(T, T) -> T,
) -> [T; N] {
    let mut out = a;
    for (o, v) in out.iter_mut().zip(b) {
        *o = f(*o, *v);
    }
    out
}

/// `[f(a_0), .., f(a_(N-1))]`, element by element in increasing index.
#[inline(always)]
pub(crate) fn map<T: Copy, const N: usize>(a: [T; N], f: impl Fn(T) -> T) -> [T; N] {
    let mut out = a;
    for o in out.iter_mut() {
        *o = f(*o);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::vec::Vec;

    #[test]
    fn pieces_and_blocks_are_the_chunks_of_core() {
        let v: Vec<u32> = (0..23).collect();
        for n in 1..=25 {
            let want: Vec<&[u32]> = v.chunks_exact(n).collect();
            let got: Vec<&[u32]> = pieces(&v, n).collect();
            assert_eq!(got, want, "pieces n = {n}");
            let want: Vec<&[u32]> = v.chunks(n).collect();
            let got: Vec<&[u32]> = blocks(&v, n).collect();
            assert_eq!(got, want, "blocks n = {n}");
            let mut w = v.clone();
            let lens: Vec<usize> = pieces_mut(&mut w, n).map(|p| p.len()).collect();
            assert_eq!(
                lens,
                v.chunks_exact(n).map(<[u32]>::len).collect::<Vec<_>>()
            );
        }
        assert_eq!(pieces(&v, 0).zip(0..3).count(), 3);
        assert_eq!(blocks(&v, 0).count(), 0);
        assert_eq!(blocks::<u32>(&[], 3).count(), 0);
    }

    #[test]
    fn element_wise_forms() {
        assert_eq!(
            zip_with([1, 2, 3], &[10, 20, 30], |a, b| a + b),
            [11, 22, 33]
        );
        assert_eq!(map([1, 2, 3], |a| a * 2), [2, 4, 6]);
    }
}
