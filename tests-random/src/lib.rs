//! Random valid networks, compiled by `build.rs` through the public build API: each is
//! `sinew_tests_random::net_NNN` (see `build.rs` for what is drawn), with an
//! [`sinew_harness::Net`] impl so that the tests in `tests/` can run one generic check over all
//! of them with [`for_each_net`].
//!
//! Like the generated code it holds, this crate is `no_std`, forbids `unsafe` and denies missing
//! docs: building it proves that no random network needs any of those.

#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]

include!(concat!(env!("OUT_DIR"), "/index.rs"));
