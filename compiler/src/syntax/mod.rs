//! Syntax: spec text to a syntax tree with byte spans.
//!
//! The grammar is `compiler/grammar/sinew.pest`; [`parse`] is the entry point. This module knows nothing
//! of sizes or ranges: everything about meaning is checked in [`crate::check`].

pub mod ast;
mod parse;

pub use ast::Spec;
pub use parse::parse;
