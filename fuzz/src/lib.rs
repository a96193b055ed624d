//! The fuzz harness: what each cargo-fuzz target does with one input, and the invariants it
//! asserts. The same file is compiled into `compiler/tests/fuzz_regressions.rs`, which replays
//! the regression corpus and runs a bounded proptest variant on stable, so every crash found
//! by fuzzing stays fixed under `cargo test`.

#![deny(missing_docs)]

mod harness;

pub use harness::{files, parse_check};
