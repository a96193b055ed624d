//! sinew: a compiler for small neural networks.
//!
//! ```text
//! spec text --(pest, compiler/grammar/sinew.pest)--> syntax::Spec (AST with byte spans)
//! syntax::Spec --(check)--> ir::Model + diagnostics (all findings at once)
//! ir::Model --> emit   : Rust source (quote -> syn::File -> prettyplease) calling sinew-runtime
//!           --> report : parameters, flash bytes, RAM bytes, multiply-adds
//!           --> engine : host evaluation and training with the same runtime kernels
//! ```
//! One IR feeds every back end; nothing after `check` re-parses or re-validates.

#![deny(missing_docs)]

pub mod check;
pub mod code;
#[cfg(feature = "train")]
pub mod commands;
#[cfg(feature = "train")]
pub mod data;
pub mod diag;
#[cfg(feature = "train")]
pub mod engine;
pub mod fsutil;
pub mod ir;
#[cfg(feature = "cli")]
pub mod new_firmware;
pub mod pack;
pub mod plan;
#[cfg(feature = "cli")]
pub mod plot;
pub mod report;
pub mod span;
#[cfg(feature = "train")]
pub mod stream;
#[cfg(feature = "train")]
pub mod summary;
pub mod syntax;
pub mod text;
pub mod weights;
pub mod words;
#[cfg(feature = "train")]
pub mod workflow;
pub use check::{check_source, Checked};
pub mod builder;
pub mod emit;
pub use builder::Builder;
