//! Diagnostics: our own data type and one `render` function.
//!
//! Every user-facing finding is a [`Diagnostic`] with a stable [`Code`], a lowercase message, a
//! primary span, optional secondary spans and a `help:` line. Rendering goes through
//! `codespan-reporting` in [`render`] alone, so the rendering crate can be swapped in one place.

use crate::span::Span;
use serde::Serialize;

/// How serious a finding is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Severity {
    /// The spec is rejected.
    Error,
    /// Legal but suspicious; the spec is accepted.
    Warning,
}

/// A stable diagnostic code such as `S0201`; the list with examples is in `grammar/REFERENCE.md`.
pub type Code = &'static str;

/// A labelled span.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Label {
    /// Where.
    pub span: Span,
    /// What is there (may be empty).
    pub message: String,
}

/// One finding about a spec.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Diagnostic {
    /// Error or warning.
    pub severity: Severity,
    /// Stable code.
    pub code: Code,
    /// Lowercase statement of fact.
    pub message: String,
    /// The local problem.
    pub primary: Label,
    /// The other side of a mismatch, if any.
    pub secondary: Vec<Label>,
    /// How to fix it.
    pub help: Option<String>,
}

impl Diagnostic {
    /// An error with a primary span.
    pub fn error(code: Code, message: impl Into<String>, span: Span) -> Self {
        Diagnostic {
            severity: Severity::Error,
            code,
            message: message.into(),
            primary: Label { span, message: String::new() },
            secondary: Vec::new(),
            help: None,
        }
    }

    /// A warning with a primary span.
    pub fn warning(code: Code, message: impl Into<String>, span: Span) -> Self {
        Diagnostic { severity: Severity::Warning, ..Diagnostic::error(code, message, span) }
    }

    /// Sets the primary label's text.
    pub fn label(mut self, message: impl Into<String>) -> Self {
        self.primary.message = message.into();
        self
    }

    /// Adds a secondary label.
    pub fn with_secondary(mut self, span: Span, message: impl Into<String>) -> Self {
        self.secondary.push(Label { span, message: message.into() });
        self
    }

    /// Sets the hint.
    pub fn with_help(mut self, help: impl Into<String>) -> Self {
        self.help = Some(help.into());
        self
    }

    /// True for errors.
    pub fn is_error(&self) -> bool {
        self.severity == Severity::Error
    }
}
