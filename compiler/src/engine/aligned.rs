//! [`Lines`]: a run-time sized buffer whose first element starts a cache line.
//!
//! The engine's kernels read weight rows with 32- and 64-byte vector loads. A `Vec` of a large
//! matrix comes from the system allocator 16 bytes past a page boundary (glibc's `mmap` chunks),
//! so on x86-64 every other 32-byte load of a row straddled two cache lines: on one Intel Xeon
//! the engine's N3 inference took 6.6 us against 4.5 us with the same kernel on aligned rows
//! (`bash bench/run.sh --builds v3 --filter n3_inference`). Alignment changes no result: the same
//! operations run in the same order on the same values.
//!
//! Safe code only: the buffer over-allocates by one line and the values live from the first
//! element that starts a line. The `Vec` is never grown, so its allocation (and that offset)
//! stays put for the life of the value; a clone computes its own offset.

use std::fmt;
use std::ops::{Deref, DerefMut};

/// Bytes of the boundary [`Lines`] aligns to (a cache line on current x86-64 and AArch64 cores).
pub const LINE: usize = 64;

/// `len` values of `T` stored from a [`LINE`]-byte boundary; derefs to `[T]`.
pub struct Lines<T> {
    buf: Vec<T>,
    start: usize,
    len: usize,
}

/// Elements allocated beyond the values, room for any offset.
fn spare<T>() -> usize {
    LINE / std::mem::size_of::<T>().max(1)
}

/// The first index of `buf` that starts a line (0 if none does within [`spare`]).
fn line_start<T>(buf: &[T]) -> usize {
    // The address as a number only (no pointer is made from it): how far the allocation starts
    // before the next line boundary, in elements. `Vec<T>` is aligned to `T`, and `LINE` is a
    // multiple of the size of every scalar, so the distance divides evenly.
    let misplaced = buf.as_ptr() as usize % LINE;
    if misplaced == 0 {
        0
    } else {
        ((LINE - misplaced) / std::mem::size_of::<T>().max(1)).min(spare::<T>())
    }
}

impl<T: Clone> Lines<T> {
    /// `len` copies of `fill`.
    pub fn filled(fill: T, len: usize) -> Self {
        let buf = vec![fill; len + spare::<T>()];
        let start = line_start(&buf);
        Lines { buf, start, len }
    }

    /// A copy of `values`.
    pub fn from_slice(values: &[T]) -> Self
    where
        T: Default + Copy,
    {
        let mut lines = Self::filled(T::default(), values.len());
        lines.copy_from_slice(values);
        lines
    }
}

impl<T> Deref for Lines<T> {
    type Target = [T];
    fn deref(&self) -> &[T] {
        self.buf
            .get(self.start..self.start + self.len)
            .unwrap_or(&[])
    }
}

impl<T> DerefMut for Lines<T> {
    fn deref_mut(&mut self) -> &mut [T] {
        let range = self.start..self.start + self.len;
        self.buf.get_mut(range).unwrap_or(&mut [])
    }
}

impl<T: Clone> Clone for Lines<T> {
    fn clone(&self) -> Self {
        let mut buf = self.buf.clone();
        let start = line_start(&buf);
        if let Some(dst) = buf.get_mut(start..start + self.len) {
            dst.clone_from_slice(self);
        }
        Lines {
            buf,
            start,
            len: self.len,
        }
    }
}

impl<T: Copy + Default> From<Vec<T>> for Lines<T> {
    fn from(v: Vec<T>) -> Self {
        Self::from_slice(&v)
    }
}

impl<T: Copy + Default> From<&[T]> for Lines<T> {
    fn from(v: &[T]) -> Self {
        Self::from_slice(v)
    }
}

impl<T: PartialEq> PartialEq for Lines<T> {
    fn eq(&self, other: &Self) -> bool {
        **self == **other
    }
}

impl<T: PartialEq> PartialEq<[T]> for Lines<T> {
    fn eq(&self, other: &[T]) -> bool {
        **self == *other
    }
}

impl<T: PartialEq> PartialEq<Vec<T>> for Lines<T> {
    fn eq(&self, other: &Vec<T>) -> bool {
        **self == **other
    }
}

impl<T: fmt::Debug> fmt::Debug for Lines<T> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        (**self).fmt(f)
    }
}

impl<'a, T> IntoIterator for &'a Lines<T> {
    type Item = &'a T;
    type IntoIter = std::slice::Iter<'a, T>;
    fn into_iter(self) -> Self::IntoIter {
        self.iter()
    }
}

impl<'a, T> IntoIterator for &'a mut Lines<T> {
    type Item = &'a mut T;
    type IntoIter = std::slice::IterMut<'a, T>;
    fn into_iter(self) -> Self::IntoIter {
        self.iter_mut()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn starts_a_line<T>(s: &[T]) -> bool {
        (s.as_ptr() as usize).is_multiple_of(LINE)
    }

    #[test]
    fn every_length_starts_a_line_and_holds_its_values() {
        // Small and large lengths: the large ones come from `mmap` chunks (16 bytes past a page
        // on glibc), the small ones from the heap's bins at various offsets.
        for len in [0, 1, 3, 7, 16, 17, 100, 4096, 100_352, 300_000] {
            let v: Vec<f32> = (0..len).map(|i| i as f32 * 0.5 - 3.0).collect();
            let a = Lines::from_slice(&v);
            assert_eq!(a.len(), len);
            assert_eq!(&*a, &v[..]);
            assert!(len == 0 || starts_a_line(&a), "f32 len {len}");
            let b = a.clone();
            assert!(len == 0 || starts_a_line(&b), "clone, len {len}");
            assert_eq!(a, b);
            let d: Lines<f64> = Lines::filled(-0.0, len);
            assert!(len == 0 || starts_a_line(&d), "f64 len {len}");
            assert!(d.iter().all(|x| x.to_bits() == (-0.0f64).to_bits()));
        }
    }

    #[test]
    fn writes_land_in_the_values_and_survive_a_move() {
        let mut a: Lines<f32> = Lines::filled(0.0, 10);
        a[9] = 4.0;
        a.iter_mut().take(2).for_each(|x| *x = 1.0);
        let moved = Box::new(a);
        assert_eq!(**moved, [1.0, 1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 4.0]);
        assert!(starts_a_line(&moved));
        assert_eq!(
            *moved,
            vec![1.0, 1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 4.0]
        );
    }
}
