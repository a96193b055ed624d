//! A block of samples side by side: [`BLOCK`] samples, one per SIMD lane, and the transpositions
//! between sample rows (`m[s][j]`) and their transposed form (`t[j][s]`, an [`Across`] per
//! element).
//!
//! The across-samples fast paths ([`crate::linalg`]'s short rows, [`crate::loss`]'s batch
//! softmax) do every operation of the per-sample order on the [`BLOCK`] samples at once, so each
//! sample sees exactly its own additions in its own order and the bits equal the per-sample
//! kernel's. Invariant: nothing here computes; it only moves values.

/// Samples per block: one per lane of a 256-bit register of `f32`.
pub(crate) const BLOCK: usize = 8;

/// [`BLOCK`] values, one per sample of a block.
pub(crate) type Across<T> = [T; BLOCK];

/// The transpose `t[c][r] = m[r][c]` of an `R x C` array (`fill` only initialises). With
/// `R = BLOCK` it turns a block of sample rows into one [`Across`] per element.
#[inline(always)]
pub(crate) fn transpose<T: Copy, const R: usize, const C: usize>(
    m: &[[T; C]; R],
    fill: T,
) -> [[T; R]; C] {
    let mut t = [[fill; R]; C];
    for (r, row) in m.iter().enumerate() {
        for (col, v) in t.iter_mut().zip(row) {
            if let Some(x) = col.get_mut(r) {
                *x = *v;
            }
        }
    }
    t
}

/// The way back: `rows[s][c] = t[c][s]` for the samples of a block, written in place.
#[inline(always)]
pub(crate) fn store_rows<T: Copy, const C: usize>(t: &[Across<T>; C], rows: &mut [[T; C]; BLOCK]) {
    for (s, row) in rows.iter_mut().enumerate() {
        for (v, col) in row.iter_mut().zip(t) {
            if let Some(x) = col.get(s) {
                *v = *x;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn transpose_and_back() {
        let m = [[1, 2, 3], [4, 5, 6]];
        assert_eq!(transpose(&m, 0), [[1, 4], [2, 5], [3, 6]]);
        let rows: [[u32; 3]; BLOCK] = core::array::from_fn(|s| [s as u32, 10 + s as u32, 7]);
        let t = transpose(&rows, 0);
        let mut back = [[0; 3]; BLOCK];
        store_rows(&t, &mut back);
        assert_eq!(back, rows);
    }
}
