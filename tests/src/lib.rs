//! Every spec of `samples/` and `tests/fixtures/`, compiled by `build.rs` through the public
//! build API: each model is `sinew_tests::<model>`; the small ones again with unrolled kernels in
//! [`unrolled`], two with baked weights in [`baked`].
//!
//! This crate is `no_std`, forbids `unsafe` and denies missing docs, so building it proves that
//! generated code needs none of those. `build.rs` implements [`sinew_harness::Net`] for every
//! generated `Params` and writes the visitors [`for_each_model`] and [`for_each_unrolled_pair`],
//! so the integration tests in `tests/` run one generic check over every model.

#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]

include!("baked_values.rs");
include!("variants.rs");

include!(concat!(env!("OUT_DIR"), "/index.rs"));
