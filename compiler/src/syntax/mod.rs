//! Syntax: spec text to a syntax tree with byte spans.
//!
//! The grammar is `grammar/sinew.pest`; [`parse`] is the entry point. This module knows nothing
//! of sizes or ranges: everything about meaning is checked in [`crate::check`].

pub mod ast;
mod parse;

/// The one quoting function, [`crate::text::quote`], under the name `emit` still uses.
pub(crate) use crate::text::quote;
pub use ast::Spec;
pub use parse::parse;
