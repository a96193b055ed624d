//! Random valid networks, compiled by `build.rs` through the public build API: each is
//! `sinew_tests_random::net_NNN` (see `build.rs` for what is drawn), with an [`Net`] impl so
//! that the tests in `tests/` can run one generic check over all of them with
//! [`for_each_net`].
//!
//! Like the generated code it holds, this crate is `no_std`, forbids `unsafe` and denies missing
//! docs: building it proves that no random network needs any of those.

#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]

/// Uniform access to one generated model; each method forwards to the generated API of the same
/// name (written by `build.rs`).
pub trait Net: Sized + 'static {
    /// The generated `Scalar`.
    type Scalar: sinew_runtime::Real + Into<f64>;
    /// The generated `Gradients`.
    type Gradients;
    /// `[Scalar; INPUTS]`.
    type X: Copy + AsRef<[Self::Scalar]> + AsMut<[Self::Scalar]>;
    /// `[Scalar; OUTPUTS]`.
    type Y: Copy + AsRef<[Self::Scalar]> + AsMut<[Self::Scalar]>;
    /// The generated `Trainer`.
    type Trainer;
    /// The model name.
    const NAME: &'static str;
    /// The spec source text.
    const SPEC: &'static str;
    /// True when the model was compiled with unrolled kernels.
    const UNROLLED: bool;
    /// `Params::init(seed)`.
    fn seeded(seed: u64) -> Self;
    /// `Gradients::zeroed()`.
    fn grad_zero() -> Self::Gradients;
    /// `[0.0; INPUTS]`.
    fn x_zero() -> Self::X;
    /// `[0.0; OUTPUTS]`.
    fn y_zero() -> Self::Y;
    /// Calls `f` on every trainable array in model order: per layer its weights (flattened,
    /// row major), then its biases.
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
    /// `Trainer::new(params)`.
    fn trainer(params: Self) -> Self::Trainer;
    /// `Trainer::step`.
    fn trainer_step(t: &mut Self::Trainer, xs: &[Self::X], ys: &[Self::Y]) -> Self::Scalar;
    /// The trainer's parameters.
    fn trainer_params(t: &Self::Trainer) -> &Self;
}

/// A callback given a model's input mean and std, `f(mean, std)`.
pub type ScalingFn<'a, S> = dyn FnMut(&mut [S], &mut [S]) + 'a;

/// A generic check run over every random network by [`for_each_net`].
pub trait Visit {
    /// Runs the check on model `M`.
    fn visit<M: Net>(&mut self);
}

include!(concat!(env!("OUT_DIR"), "/index.rs"));
