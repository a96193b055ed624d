//! Every spec of `samples/` and `tests/fixtures/`, compiled by `build.rs` through the public
//! build API: each model is `sinew_tests::<model>`; the small ones again with unrolled kernels in
//! [`unrolled`], two with baked weights in [`baked`].
//!
//! This crate is `no_std`, forbids `unsafe` and denies missing docs, so building it proves that
//! generated code needs none of those. The [`Net`] trait (implemented by `build.rs` for every
//! generated `Params`) lets the integration tests in `tests/` run one generic check over every
//! model.

#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]

include!("baked_values.rs");
include!("variants.rs");

/// Uniform access to one generated model, for tests that run over every model. Each method
/// forwards to the generated API of the same name (see `build.rs`).
pub trait Net: Sized + 'static {
    /// The generated `Scalar`.
    type Scalar: sinew_runtime::Real + Into<f64> + Send + Sync;
    /// The generated `Gradients`.
    type Gradients;
    /// `[Scalar; INPUTS]`.
    type X: Copy + AsRef<[Self::Scalar]> + AsMut<[Self::Scalar]>;
    /// `[Scalar; OUTPUTS]`.
    type Y: Copy + AsRef<[Self::Scalar]> + AsMut<[Self::Scalar]>;
    /// The model name.
    const NAME: &'static str;
    /// The spec source text.
    const SPEC: &'static str;
    /// The generated `FINGERPRINT`.
    const FINGERPRINT: u64;
    /// `Params::zeroed()`.
    fn zero() -> Self;
    /// `Params::init(seed)`.
    fn seeded(seed: u64) -> Self;
    /// `Gradients::zeroed()`.
    fn grad_zero() -> Self::Gradients;
    /// `[0.0; INPUTS]`.
    fn x_zero() -> Self::X;
    /// `[0.0; OUTPUTS]`.
    fn y_zero() -> Self::Y;
    /// Calls `f` on every trainable array in model order: per layer its weights (flattened, row
    /// major), then its biases.
    fn arrays_mut(&mut self, f: &mut dyn FnMut(&mut [Self::Scalar]));
    /// Like [`Net::arrays_mut`], shared.
    fn arrays(&self, f: &mut dyn FnMut(&[Self::Scalar]));
    /// The arrays of a gradient, in the order of [`Net::arrays`].
    fn grad_arrays(g: &Self::Gradients, f: &mut dyn FnMut(&[Self::Scalar]));
    /// Calls `f(mean, std)` with `standardize`; does nothing without.
    fn scaling_mut(&mut self, f: &mut ScalingFn<'_, Self::Scalar>);
    /// `Params::predict`.
    fn forward(&self, x: &Self::X) -> Self::Y;
    /// `Params::loss`.
    fn sample_loss(&self, x: &Self::X, y: &Self::Y) -> Self::Scalar;
    /// `Params::backprop`.
    fn sample_backprop(&self, x: &Self::X, y: &Self::Y, g: &mut Self::Gradients) -> Self::Scalar;
    /// `Gradients::finish`.
    fn finish(&self, g: &mut Self::Gradients, m: usize);
    /// `Params::cost`.
    fn batch_cost(&self, xs: &[Self::X], ys: &[Self::Y]) -> Self::Scalar;
    /// `Params::penalty_cost`.
    fn penalty(&self, m: usize) -> Self::Scalar;
    /// The generated `Trainer`.
    type Trainer;
    /// `Trainer::new(params)`.
    fn trainer(params: Self) -> Self::Trainer;
    /// `Trainer::step`.
    fn trainer_step(t: &mut Self::Trainer, xs: &[Self::X], ys: &[Self::Y]) -> Self::Scalar;
    /// The trainer's parameters.
    fn trainer_params(t: &Self::Trainer) -> &Self;
}

/// A callback given a model's input mean and std, `f(mean, std)`.
pub type ScalingFn<'a, S> = dyn FnMut(&mut [S], &mut [S]) + 'a;

/// A generic check run over every model by [`for_each_model`].
pub trait Visit {
    /// Runs the check on model `M`.
    fn visit<M: Net>(&mut self);
}

/// A generic check run over the same model compiled two ways, by [`for_each_unrolled_pair`].
pub trait VisitPair {
    /// Runs the check on `A` (rolled kernels) and `B` (unrolled kernels).
    fn visit<A: Net, B: Net<Scalar = A::Scalar, X = A::X, Y = A::Y>>(&mut self);
}

include!(concat!(env!("OUT_DIR"), "/index.rs"));
