//! Names: every model, input, layer and class name must be a lower_snake identifier
//! (`[a-z][a-z0-9_]*`, ASCII only) that is not a Rust keyword, because each one becomes a name
//! in the generated Rust code. Layer names (and the input's) are unique, and so are class names.

use super::Parts;
use crate::diag::{Code, Diagnostic};
use crate::span::Span;
use crate::syntax::ast::Name;
use crate::text::quote;
use std::collections::HashMap;

/// Rust's strict and reserved keywords in every edition up to 2024, including `self`, `Self`,
/// `crate` and `super` (The Rust Reference, "Keywords").
pub(crate) const RUST_KEYWORDS: [&str; 52] = [
    // strict, 2015
    "as", "break", "const", "continue", "crate", "else", "enum", "extern", "false", "fn", "for",
    "if", "impl", "in", "let", "loop", "match", "mod", "move", "mut", "pub", "ref", "return",
    "self", "Self", "static", "struct", "super", "trait", "true", "type", "unsafe", "use", "where",
    "while", // strict, 2018 and later
    "async", "await", "dyn", // reserved
    "abstract", "become", "box", "do", "final", "macro", "override", "priv", "typeof", "unsized",
    "virtual", "yield", "try", "gen",
];

/// True for `[a-z][a-z0-9_]*`.
pub(crate) fn is_lower_snake(s: &str) -> bool {
    let mut bytes = s.bytes();
    matches!(bytes.next(), Some(b'a'..=b'z'))
        && bytes.all(|b| matches!(b, b'a'..=b'z' | b'0'..=b'9' | b'_'))
}

/// A lower_snake spelling of `s`, when one can be made from its ASCII letters and digits.
fn snake_suggestion(s: &str) -> Option<String> {
    let mut out = String::new();
    let mut prev_lower = false;
    for c in s.chars() {
        if c.is_ascii_uppercase() {
            if prev_lower {
                out.push('_');
            }
            out.push(c.to_ascii_lowercase());
            prev_lower = false;
        } else if c.is_ascii_lowercase() || c.is_ascii_digit() {
            out.push(c);
            prev_lower = true;
        } else if matches!(c, '_' | '-' | '.' | ' ') {
            if !out.is_empty() && !out.ends_with('_') {
                out.push('_');
            }
            prev_lower = false;
        } else {
            return None;
        }
    }
    let out = out.trim_end_matches('_').to_string();
    if out.starts_with(|c: char| c.is_ascii_digit()) {
        return Some(format!("n{out}"));
    }
    (is_lower_snake(&out) && !RUST_KEYWORDS.contains(&out.as_str())).then_some(out)
}

/// Checks one name; `what` says what it names ("model name", "layer name", ...). Returns true
/// when the name is valid.
pub(crate) fn check_name(name: &Name, what: &str, diags: &mut Vec<Diagnostic>) -> bool {
    let s = name.node.as_str();
    if let Some(rest) = s.strip_prefix("r#") {
        diags.push(
            Diagnostic::error(
                Code::S0304,
                format!("{what} {} is a raw identifier", quote(s)),
                name.span,
            )
            .label("raw identifiers are not allowed")
            .with_help(format!(
                "write a plain lower_snake name, such as `{rest}_1`"
            )),
        );
        return false;
    }
    if let Some((i, c)) = s.char_indices().find(|(_, c)| !c.is_ascii()) {
        let at = Span::new(name.span.start + i, name.span.start + i + c.len_utf8());
        let mut d = Diagnostic::error(
            Code::S0303,
            format!(
                "{what} {} contains the non-ASCII character `{c}` (U+{:04X})",
                quote(s),
                c as u32
            ),
            at,
        )
        .label("not an ASCII letter, digit or `_`");
        d = d.with_help(
            "names use ASCII only: lowercase letters `a`-`z`, digits and `_`; retype the \
             character, which may be a look-alike from another alphabet",
        );
        diags.push(d);
        return false;
    }
    if !is_lower_snake(s) {
        let help = match snake_suggestion(s) {
            Some(t) if t != s => format!(
                "names are lowercase ASCII letters, digits and `_`, starting with a letter: \
                 try `{t}`"
            ),
            _ => "names are lowercase ASCII letters, digits and `_`, starting with a letter"
                .to_string(),
        };
        diags.push(
            Diagnostic::error(
                Code::S0301,
                format!("{what} {} is not a lower_snake name", quote(s)),
                name.span,
            )
            .label("not lower_snake")
            .with_help(help),
        );
        return false;
    }
    if RUST_KEYWORDS.contains(&s) {
        diags.push(
            Diagnostic::error(
                Code::S0302,
                format!("{what} `{s}` is a Rust keyword"),
                name.span,
            )
            .label("reserved by Rust")
            .with_help(format!(
                "every name becomes a Rust identifier in the generated code; choose \
                     another, such as `{s}_1`"
            )),
        );
        return false;
    }
    true
}

/// Checks every name in the spec and the uniqueness of layer and class names.
pub(crate) fn check(parts: &Parts<'_>, diags: &mut Vec<Diagnostic>) {
    if let Some(name) = parts.model {
        check_name(name, "model name", diags);
    }
    let mut seen: HashMap<&str, (Span, &'static str)> = HashMap::new();
    if let Some(input) = &parts.input {
        if check_name(input.name, "input name", diags) {
            seen.insert(&input.name.node, (input.name.span, "the input"));
        }
    }
    let layers = parts
        .layers
        .iter()
        .map(|l| &l.name)
        .chain(parts.output.iter().map(|o| &o.layer.name));
    for name in layers {
        if !check_name(name, "layer name", diags) {
            continue;
        }
        match seen.get(name.node.as_str()) {
            Some(&(first, whose)) => diags.push(
                Diagnostic::error(
                    Code::S0305,
                    format!("the name `{}` is used twice", name.node),
                    name.span,
                )
                .label("used again here")
                .with_secondary(first, format!("first used here, for {whose}"))
                .with_help("give every layer and the input a name of its own"),
            ),
            None => {
                seen.insert(&name.node, (name.span, "a layer"));
            }
        }
    }
    if let Some(classes) = parts.output.as_ref().and_then(|o| o.classes) {
        let mut seen: HashMap<&str, (Span, bool)> = HashMap::new();
        for name in &classes.names {
            if !check_name(name, "class name", diags) {
                continue;
            }
            match seen.get_mut(name.node.as_str()) {
                // Each repeated name is reported once, at its first repeat.
                Some((_, true)) => {}
                Some((first, reported)) => {
                    *reported = true;
                    diags.push(
                        Diagnostic::error(
                            Code::S0306,
                            format!("class `{}` is listed twice", name.node),
                            name.span,
                        )
                        .label("listed again here")
                        .with_secondary(*first, "first listed here")
                        .with_help("every class needs a name of its own"),
                    )
                }
                None => {
                    seen.insert(&name.node, (name.span, false));
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::span::Spanned;

    fn codes(s: &str) -> Vec<Code> {
        let mut d = Vec::new();
        check_name(
            &Spanned::new(s.to_string(), Span::new(0, s.len())),
            "layer name",
            &mut d,
        );
        d.iter().map(|d| d.code).collect()
    }

    #[test]
    fn lower_snake_names() {
        assert!(codes("hidden_1").is_empty());
        assert!(codes("a").is_empty());
        assert_eq!(codes("Hidden"), ["S0301"]);
        assert_eq!(codes("_x"), ["S0301"]);
        assert_eq!(codes("1x"), ["S0301"]);
        assert_eq!(codes("a-b"), ["S0301"]);
    }

    #[test]
    fn keywords_raw_and_non_ascii() {
        for k in [
            "fn", "type", "async", "await", "dyn", "try", "self", "crate", "super", "gen",
        ] {
            assert_eq!(codes(k), ["S0302"], "{k}");
        }
        assert_eq!(codes("Self"), ["S0301"]);
        assert_eq!(codes("r#type"), ["S0304"]);
        // U+0435 CYRILLIC SMALL LETTER IE looks like `e`.
        assert_eq!(codes("h\u{0435}llo"), ["S0303"]);
    }

    #[test]
    fn non_ascii_span_is_the_character() {
        let mut d = Vec::new();
        let s = "x\u{00e9}y";
        check_name(
            &Spanned::new(s.to_string(), Span::new(10, 10 + s.len())),
            "layer name",
            &mut d,
        );
        assert_eq!(d[0].primary.span, Span::new(11, 13));
    }

    #[test]
    fn snake_suggestions() {
        assert_eq!(
            snake_suggestion("PumpHealth").as_deref(),
            Some("pump_health")
        );
        assert_eq!(
            snake_suggestion("pump-health").as_deref(),
            Some("pump_health")
        );
        assert_eq!(snake_suggestion("9lives").as_deref(), Some("n9lives"));
        assert_eq!(snake_suggestion("a$b"), None);
    }
}
