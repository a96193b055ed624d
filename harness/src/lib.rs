//! The test harness shared by the two crates that compile generated models and run them:
//! `tests/` (crate `sinew-tests`: every spec of `samples/` and `tests/fixtures/`) and
//! `tests-random/` (crate `sinew-tests-random`: the random valid networks).
//!
//! It holds three things, one per way those crates use it:
//!
//! - the [`Net`] trait and the visitors [`Visit`] and [`VisitPair`], always built and `no_std`:
//!   the libraries of both test crates depend on it, their generated `Params` implement [`Net`],
//!   and their integration tests run one generic check over every model through it;
//! - `glue` (feature `glue`, for the build scripts): writes the `impl Net` of a generated module
//!   and the lines of the `OUT_DIR/index.rs` that the test crates' `src/lib.rs` include;
//! - `files` (either feature): the spec files of a folder, in order;
//! - `host` (feature `host`, for the integration tests, as a dev-dependency): a model's values as
//!   `f64`, parameters at a generic point, test data, the engine's parameters holding the same
//!   values, an independent reference forward pass over dual numbers; and `toolchain` (feature
//!   `host`), what the device tests ask of the Rust toolchain.
//!
//! The flow, for one model `m`:
//!
//! ```text
//! build.rs:  sinew::Builder -> OUT_DIR/m.rs        glue::net_impl(m) -> OUT_DIR/index.rs
//! src/lib.rs: include!(index.rs)  =>  impl sinew_harness::Net for m::Params
//! tests/*.rs: impl Visit for Check { fn visit<M: Net>(..) }  +  for_each_model(&mut Check)
//! ```
//!
//! Invariant: [`Net::arrays`], [`Net::arrays_mut`] and [`Net::grad_arrays`] visit the trainable
//! arrays in model order (per layer its weights, flattened row major, then its biases), the
//! order of every flat parameter vector in the helpers and in `sinew::engine`.

#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]

#[cfg(any(feature = "glue", feature = "host"))]
extern crate std;

#[cfg(any(feature = "glue", feature = "host"))]
pub mod files;
#[cfg(feature = "glue")]
pub mod glue;
#[cfg(feature = "host")]
pub mod host;
#[cfg(feature = "host")]
pub mod toolchain;

/// Uniform access to one generated model, for tests that run over every model. Each method
/// forwards to the generated API of the same name (the impl is written by `glue::net_impl` in
/// the build scripts).
pub trait Net: Sized + 'static {
    /// The generated `Scalar`.
    type Scalar: sinew_runtime::Real + Into<f64> + Send + Sync;
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
    /// The generated `FINGERPRINT`.
    const FINGERPRINT: u64;
    /// True when the model was compiled with unrolled kernels.
    const UNROLLED: bool;
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
    /// `Trainer::new(params)`.
    fn trainer(params: Self) -> Self::Trainer;
    /// `Trainer::step`.
    fn trainer_step(t: &mut Self::Trainer, xs: &[Self::X], ys: &[Self::Y]) -> Self::Scalar;
    /// The trainer's parameters.
    fn trainer_params(t: &Self::Trainer) -> &Self;
}

/// A callback given a model's input mean and std, `f(mean, std)`.
pub type ScalingFn<'a, S> = dyn FnMut(&mut [S], &mut [S]) + 'a;

/// A generic check run over every model of a test crate (its `for_each_model` or
/// `for_each_net`).
pub trait Visit {
    /// Runs the check on model `M`.
    fn visit<M: Net>(&mut self);
}

/// A generic check run over the same model compiled two ways (`for_each_unrolled_pair`).
pub trait VisitPair {
    /// Runs the check on `A` (rolled kernels) and `B` (unrolled kernels).
    fn visit<A: Net, B: Net<Scalar = A::Scalar, X = A::X, Y = A::Y>>(&mut self);
}
