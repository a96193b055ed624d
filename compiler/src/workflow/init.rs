//! The spec's initial parameters as a weights file.

use super::convert::weights_of;
use crate::engine::Params;
use crate::ir::{Model, Scalar};
use crate::weights::Weights;

/// Initial parameters from the spec's `init` and `seed` (or `seed` when given), drawn in the
/// model's scalar type.
pub fn init(model: &Model, seed: Option<u64>) -> Weights {
    let seed = seed.unwrap_or(model.seed);
    match model.scalar {
        Scalar::F32 => weights_of(model, &Params::<f32>::init(model, seed), None),
        Scalar::F64 => weights_of(model, &Params::<f64>::init(model, seed), None),
    }
}
