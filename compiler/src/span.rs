//! Byte spans into spec source text.
//!
//! pest reports byte offsets, and every renderer in this crate indexes by bytes, so spans stay
//! exact on non-ASCII input.

use serde::Serialize;

/// A half-open byte range `start..end` into the spec source.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default, Serialize)]
pub struct Span {
    /// First byte of the range.
    pub start: usize,
    /// One past the last byte of the range.
    pub end: usize,
}

impl Span {
    /// A span from `start` to `end` (bytes).
    pub const fn new(start: usize, end: usize) -> Self {
        Span { start, end }
    }

    /// The smallest span covering both `self` and `other`.
    pub fn to(self, other: Span) -> Span {
        Span::new(self.start.min(other.start), self.end.max(other.end))
    }

    /// The span as a `Range`, for renderers.
    pub fn range(self) -> core::ops::Range<usize> {
        self.start..self.end
    }
}

/// A value together with the span of source text it came from.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Spanned<T> {
    /// The value.
    pub node: T,
    /// Where it was written.
    pub span: Span,
}

impl<T> Spanned<T> {
    /// Pairs a value with its span.
    pub fn new(node: T, span: Span) -> Self {
        Spanned { node, span }
    }
}
