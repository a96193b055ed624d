//! Words of user input shown back in messages: quoted safely, and matched against the words
//! that were expected.
//!
//! Every diagnostic and error message that repeats user text (spec words, CSV cells) goes
//! through [`quote`], so a control character, a quote or a very long cell never garbles a
//! terminal or a message.

/// Characters of a word shown in a message; a longer word is cut and ends in `...`.
pub const QUOTE_MAX_CHARS: usize = 40;

/// `word` in backticks for a message: its first [`QUOTE_MAX_CHARS`] characters, escaped as
/// Rust's `escape_debug` does (control characters as `\n`, `\t`, `\u{..}`; quotes and
/// backslashes with a backslash), then `...` when the word was longer.
///
/// # Examples
/// ```
/// use sinew::text::quote;
/// assert_eq!(quote("sigmod"), "`sigmod`");
/// assert_eq!(quote("a\tb\u{7}"), "`a\\tb\\u{7}`");
/// assert_eq!(quote(&"x".repeat(41)), format!("`{}...`", "x".repeat(40)));
/// ```
pub fn quote(word: &str) -> String {
    let mut s: String = word
        .chars()
        .take(QUOTE_MAX_CHARS)
        .collect::<String>()
        .escape_debug()
        .to_string();
    if word.chars().count() > QUOTE_MAX_CHARS {
        s.push_str("...");
    }
    format!("`{s}`")
}

/// The candidate closest to `word`, if it is close enough to be a likely typo.
///
/// Scores each candidate against `word` in lower case with the best of the normalized
/// Damerau-Levenshtein similarity and the Jaro-Winkler similarity minus 0.1; the highest score
/// of at least 0.7 wins, the first candidate on a tie.
///
/// # Examples
/// ```
/// use sinew::text::suggest;
/// assert_eq!(suggest("sigmod", &["sigmoid", "tanh"]), Some("sigmoid"));
/// assert_eq!(suggest("Layer", &["layer", "loss"]), Some("layer"));
/// assert_eq!(suggest("zzz", &["sigmoid", "tanh"]), None);
/// ```
pub fn suggest<'a>(word: &str, candidates: &[&'a str]) -> Option<&'a str> {
    let lower = word.to_lowercase();
    let mut best: Option<(&'a str, f64)> = None;
    for &c in candidates {
        let score = strsim::normalized_damerau_levenshtein(&lower, c)
            .max(strsim::jaro_winkler(&lower, c) - 0.1);
        if score >= 0.7 && best.is_none_or(|(_, b)| score > b) {
            best = Some((c, score));
        }
    }
    best.map(|(c, _)| c)
}
