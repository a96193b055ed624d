//! Conversions between the file forms and the engine's forms: a weights file to and from
//! [`Params`], a data set to [`Samples`]. Values are widened to `f64` in files and narrowed to the
//! model's scalar type `T` in the engine (exact for values that came from `T`).

use crate::data::Dataset;
use crate::engine::train::Samples;
use crate::engine::Params;
use crate::ir::Model;
use crate::weights::{Provenance, Weights};
use sinew_runtime::Real;

/// The engine parameters of a weights file. A model declared `standardize` whose file holds no
/// statistics gets the neutral ones (mean 0, std 1) of [`Params::zeroed`].
pub fn params_of<T: Real>(model: &Model, w: &Weights) -> Params<T> {
    let layers = w.layers_of(model);
    let mut p = Params::<T>::from_f64(&layers, w.standardization.as_ref());
    if model.input.standardize && p.mean.is_empty() {
        let z = Params::<T>::zeroed(model);
        p.mean = z.mean;
        p.std = z.std;
    }
    p
}

/// The weights file form of engine parameters, with their standardization when the model
/// declares `standardize`.
pub fn weights_of<T: Real>(
    model: &Model,
    p: &Params<T>,
    provenance: Option<Provenance>,
) -> Weights {
    let scaling = if model.input.standardize {
        p.scaling_f64()
    } else {
        None
    };
    Weights::from_params(model, p.layers_f64(), scaling, provenance)
}

/// A data set's rows as engine samples in `T`.
pub fn samples<T: Real>(ds: &Dataset) -> Samples<T> {
    Samples::from_rows(&ds.inputs, &ds.targets, ds.labels.as_deref())
}
