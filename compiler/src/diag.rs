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
pub use crate::code::Code;

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
            primary: Label {
                span,
                message: String::new(),
            },
            secondary: Vec::new(),
            help: None,
        }
    }

    /// A warning with a primary span.
    pub fn warning(code: Code, message: impl Into<String>, span: Span) -> Self {
        Diagnostic {
            severity: Severity::Warning,
            ..Diagnostic::error(code, message, span)
        }
    }

    /// Sets the primary label's text.
    pub fn label(mut self, message: impl Into<String>) -> Self {
        self.primary.message = message.into();
        self
    }

    /// Adds a secondary label.
    pub fn with_secondary(mut self, span: Span, message: impl Into<String>) -> Self {
        self.secondary.push(Label {
            span,
            message: message.into(),
        });
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

/// Renders diagnostics the way a compiler prints them: `file:line:col`, the source line, the
/// span underlined with its label, secondary labels, and a `help:` line. `color` adds ANSI
/// colours (use it only on a terminal).
///
/// Spans are byte ranges (as pest reports them), so positions stay exact on non-ASCII text;
/// a span that falls outside `src` or inside a character is moved to the nearest valid place
/// rather than causing a panic.
///
/// # Examples
/// ```
/// use sinew::diag::{render, Code, Diagnostic};
/// use sinew::span::Span;
/// let src = "model demo\nlayer h 4 sigmod\n";
/// let d = Diagnostic::error(Code::S0102, "unknown activation `sigmod`", Span::new(21, 27))
///     .label("not an activation")
///     .with_help("did you mean `sigmoid`?");
/// let text = render("demo.sinew", src, &[d], false);
/// assert!(text.contains("demo.sinew:2:11"));
/// assert!(text.contains("help: did you mean `sigmoid`?"));
/// ```
pub fn render(file_name: &str, src: &str, diags: &[Diagnostic], color: bool) -> String {
    use codespan_reporting::diagnostic as cs;
    use codespan_reporting::files::SimpleFile;
    use codespan_reporting::term::{self, termcolor};

    let file = SimpleFile::new(file_name, src);
    let config = term::Config::default();
    let fix = |span: Span| -> core::ops::Range<usize> {
        let floor = |mut i: usize| {
            i = i.min(src.len());
            while !src.is_char_boundary(i) {
                i -= 1;
            }
            i
        };
        let start = floor(span.start);
        start..floor(span.end).max(start)
    };
    let mut out: Vec<u8> = Vec::new();
    for d in diags {
        let severity = match d.severity {
            Severity::Error => cs::Severity::Error,
            Severity::Warning => cs::Severity::Warning,
        };
        let mut labels = vec![
            cs::Label::primary((), fix(d.primary.span)).with_message(d.primary.message.clone())
        ];
        labels.extend(
            d.secondary
                .iter()
                .map(|l| cs::Label::secondary((), fix(l.span)).with_message(l.message.clone())),
        );
        let notes = d.help.iter().map(|h| format!("help: {h}")).collect();
        let diagnostic = cs::Diagnostic::new(severity)
            .with_code(d.code.as_str())
            .with_message(d.message.clone())
            .with_labels(labels)
            .with_notes(notes);
        let result = if color {
            let mut w = termcolor::Ansi::new(&mut out);
            term::emit(&mut w, &config, &file, &diagnostic)
        } else {
            let mut w = termcolor::NoColor::new(&mut out);
            term::emit(&mut w, &config, &file, &diagnostic)
        };
        if result.is_err() {
            // The renderer refused a location; fall back to a plain line so nothing is lost.
            let at = fix(d.primary.span).start;
            let kind = if d.is_error() { "error" } else { "warning" };
            let line = format!(
                "{kind}[{}]: {} ({file_name}, byte {at})\n",
                d.code, d.message
            );
            out.extend_from_slice(line.as_bytes());
        }
    }
    String::from_utf8_lossy(&out).into_owned()
}
