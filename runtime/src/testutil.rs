//! Helpers shared by the unit tests.

use crate::Real;
use std::vec::Vec;

/// The bits of each value, every NaN as one: Rust leaves the sign and payload of a NaN result
/// unspecified (they follow the operand order of the hardware's NaN propagation), so the contract
/// of the same bits holds for every value but NaN, which stays NaN.
pub(crate) fn same_bits<T: Real>(v: &[T]) -> Vec<u64> {
    v.iter()
        .map(|x| {
            if x.to_f64().is_nan() {
                u64::MAX
            } else {
                x.to_f64().to_bits()
            }
        })
        .collect()
}
