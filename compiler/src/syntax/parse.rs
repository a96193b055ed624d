//! The parser: the only code that touches pest pairs.
//!
//! A spec is line based, so the parser checks it one line at a time with the grammar's
//! `single_line` rule: one bad line never hides the next, and every bad line is reported in the
//! same run. Grammar rule names never reach the user; [`expectation`] turns them into words.

use super::ast::*;
use crate::diag::{Code, Diagnostic};
use crate::span::{Span, Spanned};
use crate::text::{quote, suggest};
use pest::iterators::Pair;
use pest::Parser;

/// The parser generated from `compiler/grammar/sinew.pest` (private: rule names never reach users).
mod generated {
    #![allow(missing_docs)]
    #[derive(pest_derive::Parser)]
    #[grammar = "grammar/sinew.pest"]
    pub struct SpecParser;
}
pub(crate) use generated::{Rule, SpecParser};

/// Parses a whole spec.
///
/// Returns the statements that could be read (lines with syntax errors appear as
/// [`Item::Invalid`]) and one diagnostic per bad line. Never panics.
///
/// # Examples
/// ```
/// let (spec, diags) = sinew::syntax::parse("model demo\nlayer h 4 sigmod\n");
/// assert_eq!(spec.statements.len(), 2);
/// assert_eq!(diags[0].code, "S0102");
/// ```
pub fn parse(src: &str) -> (Spec, Vec<Diagnostic>) {
    let mut spec = Spec::default();
    let mut diags = Vec::new();
    // A byte-order mark at the start of the file (some editors write one) is not part of the
    // text; spans still count it, so they stay offsets into `src`.
    let bom = if src.starts_with('\u{feff}') {
        '\u{feff}'.len_utf8()
    } else {
        0
    };
    let mut start = bom;
    for raw in src[bom..].split('\n') {
        let line = raw.strip_suffix('\r').unwrap_or(raw);
        if let Some(stmt) = parse_line(line, start, &mut diags) {
            spec.statements.push(stmt);
        }
        start += raw.len() + 1;
    }
    (spec, diags)
}

/// Parses one line whose first byte is at `offset` in the source.
fn parse_line(line: &str, offset: usize, diags: &mut Vec<Diagnostic>) -> Option<Statement> {
    match SpecParser::parse(Rule::single_line, line) {
        Ok(pairs) => {
            let stmt = pairs.flatten().find(|p| is_statement(p.as_rule()))?;
            match build_statement(stmt.clone(), offset) {
                Some(s) => Some(s),
                None => {
                    // The grammar guarantees the shape of every statement, so this is not
                    // expected; report it rather than panic.
                    let span = span_of(&stmt, offset);
                    diags.push(
                        Diagnostic::error(Code::S0104, "this line could not be read", span)
                            .label("not understood"),
                    );
                    Some(Statement {
                        keyword: span,
                        span,
                        item: Item::Invalid { meant: None },
                    })
                }
            }
        }
        Err(err) => {
            let (diag, meant) = syntax_error(line, offset, &err);
            diags.push(diag);
            let first = first_word(line)?;
            let content_end = content_end(line).max(first.end);
            Some(Statement {
                keyword: shift(first, offset),
                span: Span::new(first.start + offset, content_end + offset),
                item: Item::Invalid { meant },
            })
        }
    }
}

fn is_statement(rule: Rule) -> bool {
    matches!(
        rule,
        Rule::model_stmt
            | Rule::scalar_stmt
            | Rule::input_stmt
            | Rule::layer_stmt
            | Rule::output_stmt
            | Rule::loss_stmt
            | Rule::penalty_stmt
            | Rule::init_stmt
            | Rule::train_stmt
            | Rule::budget_stmt
    )
}

fn shift(span: Span, offset: usize) -> Span {
    Span::new(span.start + offset, span.end + offset)
}

fn span_of(pair: &Pair<'_, Rule>, offset: usize) -> Span {
    let s = pair.as_span();
    Span::new(s.start() + offset, s.end() + offset)
}

fn text(pair: &Pair<'_, Rule>, offset: usize) -> Spanned<String> {
    Spanned::new(pair.as_str().to_string(), span_of(pair, offset))
}

// ---------------------------------------------------------------------------------------------
// Building the tree from pairs
// ---------------------------------------------------------------------------------------------

fn build_statement(stmt: Pair<'_, Rule>, off: usize) -> Option<Statement> {
    let span = span_of(&stmt, off);
    let rule = stmt.as_rule();
    let mut it = stmt.into_inner().peekable();
    let keyword = span_of(&it.next()?, off);
    let item = match rule {
        Rule::model_stmt => Item::Model {
            name: text(&it.next()?, off),
        },
        Rule::scalar_stmt => {
            let p = it.next()?;
            let kind = if p.as_str() == "f64" {
                ScalarKind::F64
            } else {
                ScalarKind::F32
            };
            Item::Scalar {
                kind: Spanned::new(kind, span_of(&p, off)),
            }
        }
        Rule::input_stmt => {
            let name = text(&it.next()?, off);
            let shape = dims(it.next()?, off);
            let scaling = it.next();
            let (mut standardize, mut unscaled) = (None, None);
            if let Some(p) = scaling {
                if p.as_rule() == Rule::kw_unscaled {
                    unscaled = Some(span_of(&p, off));
                } else {
                    standardize = Some(span_of(&p, off));
                }
            }
            Item::Input {
                name,
                shape,
                standardize,
                unscaled,
            }
        }
        Rule::layer_stmt => Item::Layer(build_layer(&mut it, off)?),
        Rule::output_stmt => {
            let layer = build_layer(&mut it, off)?;
            let classes = match it.next() {
                Some(p) => {
                    let span = span_of(&p, off);
                    let names = p
                        .into_inner()
                        .filter(|n| n.as_rule() == Rule::name)
                        .map(|n| text(&n, off))
                        .collect();
                    Some(Classes { span, names })
                }
                None => None,
            };
            Item::Output { layer, classes }
        }
        Rule::loss_stmt => {
            let p = it.next()?;
            let kind = if p.as_str() == "squared_error" {
                LossKind::SquaredError
            } else {
                LossKind::CrossEntropy
            };
            Item::Loss {
                kind: Spanned::new(kind, span_of(&p, off)),
            }
        }
        Rule::penalty_stmt => {
            let p = it.next()?;
            let pspan = span_of(&p, off);
            let kind = match p.as_rule() {
                Rule::l2_penalty => PenaltyKind::L2 {
                    lambda: second_text(p, off)?,
                },
                Rule::l1_penalty => PenaltyKind::L1 {
                    lambda: second_text(p, off)?,
                },
                _ => PenaltyKind::None,
            };
            Item::Penalty {
                kind: Spanned::new(kind, pspan),
            }
        }
        Rule::init_stmt => {
            let p = it.next()?;
            let kspan = span_of(&p, off);
            let kind = match p.as_rule() {
                Rule::uniform_init => InitKind::Uniform {
                    eps: second_text(p, off)?,
                },
                Rule::kw_he => InitKind::He,
                _ => InitKind::Glorot,
            };
            let seed = match it.next() {
                Some(s) => Some(second_text(s, off)?),
                None => None,
            };
            Item::Init {
                kind: Spanned::new(kind, kspan),
                seed,
            }
        }
        Rule::train_stmt => {
            let p = it.next()?;
            let ospan = span_of(&p, off);
            let orule = p.as_rule();
            let mut opts = p.into_inner();
            let _kw = opts.next()?;
            let rate = second_text(opts.next()?, off)?;
            let mut first = None;
            let mut second = None;
            for o in opts {
                match o.as_rule() {
                    Rule::momentum | Rule::beta1 => first = Some(second_text(o, off)?),
                    _ => second = Some(second_text(o, off)?),
                }
            }
            let optimizer = if orule == Rule::sgd {
                OptimizerKind::Sgd {
                    rate,
                    momentum: first,
                }
            } else {
                OptimizerKind::Adam {
                    rate,
                    beta1: first,
                    beta2: second,
                }
            };
            let mut batch = None;
            let mut epochs = None;
            for o in it {
                if o.as_rule() == Rule::batch {
                    batch = Some(second_text(o, off)?);
                } else {
                    epochs = Some(second_text(o, off)?);
                }
            }
            Item::Train {
                optimizer: Spanned::new(optimizer, ospan),
                batch,
                epochs,
            }
        }
        Rule::budget_stmt => {
            let mut flash = None;
            let mut ram = None;
            let mut train_ram = None;
            for limit in it {
                let rule = limit.as_rule();
                let mut parts = limit.into_inner();
                let _kw = parts.next()?;
                let size = parts.next()?;
                let sspan = span_of(&size, off);
                let mut sp = size.into_inner();
                let amount = text(&sp.next()?, off);
                let u = sp.next()?;
                let unit = match u.as_str() {
                    "KiB" => Unit::KiB,
                    "MiB" => Unit::MiB,
                    _ => Unit::B,
                };
                let size = Size {
                    span: sspan,
                    amount,
                    unit: Spanned::new(unit, span_of(&u, off)),
                };
                match rule {
                    Rule::flash_limit => flash = Some(size),
                    Rule::ram_limit => ram = Some(size),
                    _ => train_ram = Some(size),
                }
            }
            Item::Budget {
                flash,
                ram,
                train_ram,
            }
        }
        _ => return None,
    };
    Some(Statement {
        keyword,
        span,
        item,
    })
}

/// The text of the second child of `pair` (the value after a keyword).
fn second_text(pair: Pair<'_, Rule>, off: usize) -> Option<Spanned<String>> {
    pair.into_inner().nth(1).map(|p| text(&p, off))
}

/// Sizes separated by `x` (a `dims` pair).
fn dims(pair: Pair<'_, Rule>, off: usize) -> Dims {
    let sizes: Vec<Spanned<String>> = pair
        .clone()
        .into_inner()
        .filter(|p| p.as_rule() == Rule::width)
        .map(|p| text(&p, off))
        .collect();
    // From the first size to the last (the pair may hold the spaces after them).
    let span = match (sizes.first(), sizes.last()) {
        (Some(a), Some(b)) => Span::new(a.span.start, b.span.end),
        _ => span_of(&pair, off),
    };
    Dims { span, sizes }
}

/// An activation pair.
fn activation(act: Pair<'_, Rule>, off: usize) -> Option<Spanned<ActivationKind>> {
    let aspan = span_of(&act, off);
    let inner = act.into_inner().next()?;
    let kind = match inner.as_rule() {
        Rule::leaky_relu => ActivationKind::LeakyRelu {
            alpha: second_text(inner, off)?,
        },
        _ => match inner.as_str() {
            "identity" => ActivationKind::Identity,
            "sigmoid" => ActivationKind::Sigmoid,
            "tanh" => ActivationKind::Tanh,
            "relu" => ActivationKind::Relu,
            _ => ActivationKind::Softmax,
        },
    };
    Some(Spanned::new(kind, aspan))
}

/// `kernel ... [stride S] [pad P]`, then the activation, from the pairs after the kind's word.
fn window<'a>(
    it: &mut std::iter::Peekable<impl Iterator<Item = Pair<'a, Rule>>>,
    off: usize,
) -> Option<(WindowDecl, Spanned<ActivationKind>)> {
    let kernel = dims(it.next()?.into_inner().nth(1)?, off);
    let mut stride = None;
    let mut pad = None;
    while let Some(p) = it.next_if(|p| matches!(p.as_rule(), Rule::stride | Rule::padding)) {
        let rule = p.as_rule();
        let value = p.into_inner().nth(1)?;
        if rule == Rule::stride {
            stride = Some(text(&value, off));
        } else {
            let kind = if value.as_str() == "same" {
                Pad::Same
            } else {
                Pad::Valid
            };
            pad = Some(Spanned::new(kind, span_of(&value, off)));
        }
    }
    let act = activation(it.next()?, off)?;
    Some((
        WindowDecl {
            kernel,
            stride,
            pad,
        },
        act,
    ))
}

/// A layer's name and body: a `layer` line's (any kind) or an `output` line's (dense).
fn build_layer<'a>(it: &mut impl Iterator<Item = Pair<'a, Rule>>, off: usize) -> Option<LayerDecl> {
    let name = text(&it.next()?, off);
    let first = it.next()?;
    let (body, activation) = match first.as_rule() {
        Rule::width => {
            let width = text(&first, off);
            (LayerBody::Dense { width }, activation(it.next()?, off)?)
        }
        Rule::dense_layer => {
            let mut inner = first.into_inner();
            let width = text(&inner.next()?, off);
            (LayerBody::Dense { width }, activation(inner.next()?, off)?)
        }
        Rule::conv_layer => {
            let mut inner = first.into_inner().peekable();
            let keyword = span_of(&inner.next()?, off);
            let filters = text(&inner.next()?, off);
            let (window, act) = window(&mut inner, off)?;
            (
                LayerBody::Conv {
                    keyword,
                    filters,
                    window,
                },
                act,
            )
        }
        Rule::depthwise_layer => {
            let mut inner = first.into_inner().peekable();
            let keyword = span_of(&inner.next()?, off);
            let (window, act) = window(&mut inner, off)?;
            (LayerBody::Depthwise { keyword, window }, act)
        }
        Rule::pool_layer => {
            let mut inner = first.into_inner();
            let keyword = span_of(&inner.next()?, off);
            let opp = inner.next()?;
            let op = if opp.as_str() == "max" {
                PoolOp::Max
            } else {
                PoolOp::Average
            };
            let op = Spanned::new(op, span_of(&opp, off));
            let w = inner.next()?;
            let window = if w.as_rule() == Rule::kw_all {
                PoolWindow::All(span_of(&w, off))
            } else {
                PoolWindow::Size(dims(w, off))
            };
            (
                LayerBody::Pool {
                    keyword,
                    op,
                    window,
                },
                Spanned::new(ActivationKind::Identity, keyword),
            )
        }
        _ => return None,
    };
    Some(LayerDecl {
        name,
        body,
        activation,
    })
}

// ---------------------------------------------------------------------------------------------
// Syntax errors in words users know
// ---------------------------------------------------------------------------------------------

/// The activation keywords, for suggestions.
pub(crate) const ACTIVATIONS: [&str; 6] = [
    "identity",
    "sigmoid",
    "tanh",
    "relu",
    "leaky_relu",
    "softmax",
];

/// What the grammar wanted at the place a line stopped making sense.
#[derive(Debug, Clone, PartialEq)]
enum Want {
    /// One fixed word.
    Word(&'static str),
    /// One of a closed set of words, e.g. an activation.
    OneOf(&'static str, &'static [&'static str]),
    /// A value: a name or a number.
    Value(&'static str),
    /// The end of the line.
    End,
}

/// Maps a grammar rule to what a user would call it.
fn expectation(rule: Rule) -> Option<Want> {
    use Want::*;
    Some(match rule {
        Rule::EOI => End,
        Rule::name => Value("a name"),
        Rule::width => Value("a width"),
        Rule::integer | Rule::size => Value("a whole number"),
        Rule::number => Value("a number"),
        Rule::activation | Rule::simple_activation | Rule::leaky_relu => {
            OneOf("activation", &ACTIVATIONS)
        }
        Rule::scalar_type => OneOf("scalar type", &["f32", "f64"]),
        Rule::loss_kind => OneOf("loss", &["cross_entropy", "squared_error"]),
        Rule::unit => OneOf("unit", &["B", "KiB", "MiB"]),
        Rule::model_stmt | Rule::kw_model => Word("model"),
        Rule::scalar_stmt | Rule::kw_scalar => Word("scalar"),
        Rule::input_stmt | Rule::kw_input => Word("input"),
        Rule::kw_standardize => Word("standardize"),
        Rule::kw_unscaled => Word("unscaled"),
        Rule::layer_stmt | Rule::kw_layer => Word("layer"),
        Rule::output_stmt | Rule::kw_output => Word("output"),
        Rule::classes | Rule::kw_classes => Word("classes"),
        Rule::kw_leaky_relu => Word("leaky_relu"),
        Rule::dims | Rule::dense_layer => Value("a width"),
        Rule::kw_x => Word("x"),
        Rule::conv_layer | Rule::kw_conv => Word("conv"),
        Rule::depthwise_layer | Rule::kw_depthwise => Word("depthwise"),
        Rule::pool_layer | Rule::kw_pool => Word("pool"),
        Rule::kw_all => Word("all"),
        Rule::kernel | Rule::kw_kernel => Word("kernel"),
        Rule::stride | Rule::kw_stride => Word("stride"),
        Rule::padding | Rule::kw_pad => Word("pad"),
        Rule::pad_kind => OneOf("padding", &["valid", "same"]),
        Rule::pool_kind => OneOf("pooling", &["max", "average"]),
        Rule::loss_stmt | Rule::kw_loss => Word("loss"),
        Rule::penalty_stmt | Rule::kw_penalty => Word("penalty"),
        Rule::kw_none => Word("none"),
        Rule::l2_penalty | Rule::kw_l2 => Word("l2"),
        Rule::l1_penalty | Rule::kw_l1 => Word("l1"),
        Rule::init_stmt | Rule::kw_init => Word("init"),
        Rule::uniform_init | Rule::kw_uniform => Word("uniform"),
        Rule::kw_glorot => Word("glorot"),
        Rule::kw_he => Word("he"),
        Rule::seed | Rule::kw_seed => Word("seed"),
        Rule::train_stmt | Rule::kw_train => Word("train"),
        Rule::sgd | Rule::kw_sgd => Word("sgd"),
        Rule::adam | Rule::kw_adam => Word("adam"),
        Rule::rate | Rule::kw_rate => Word("rate"),
        Rule::momentum | Rule::kw_momentum => Word("momentum"),
        Rule::beta1 | Rule::kw_beta1 => Word("beta1"),
        Rule::beta2 | Rule::kw_beta2 => Word("beta2"),
        Rule::batch | Rule::kw_batch => Word("batch"),
        Rule::epochs | Rule::kw_epochs => Word("epochs"),
        Rule::budget_stmt | Rule::kw_budget => Word("budget"),
        Rule::flash_limit | Rule::kw_flash => Word("flash"),
        Rule::ram_limit | Rule::kw_ram => Word("ram"),
        Rule::train_ram_limit | Rule::kw_train_ram => Word("train_ram"),
        Rule::spec
        | Rule::single_line
        | Rule::line
        | Rule::word_char
        | Rule::line_break
        | Rule::WHITESPACE
        | Rule::COMMENT
        | Rule::statement => return None,
    })
}

/// Characters that do not show, or show as a plain space, in most editors.
fn is_invisible(c: char) -> bool {
    (c.is_whitespace() && c != ' ' && c != '\t')
        || c.is_control()
        || matches!(c, '\u{200b}'..='\u{200f}' | '\u{2060}' | '\u{feff}')
}

/// The name of a few invisible characters that turn up in pasted text.
fn char_name(c: char) -> Option<&'static str> {
    Some(match c {
        '\u{0}' => "null",
        '\r' => "carriage return",
        '\u{b}' => "vertical tab",
        '\u{c}' => "form feed",
        '\u{a0}' => "no-break space",
        '\u{2007}' => "figure space",
        '\u{202f}' => "narrow no-break space",
        '\u{200b}' => "zero-width space",
        '\u{feff}' => "zero-width no-break space",
        _ => return None,
    })
}

/// True for characters that can be part of a word (see `word_char` in the grammar).
fn is_word_char(c: char) -> bool {
    !matches!(c, ' ' | '\t' | ',' | '#' | '\r' | '\n')
}

/// The span (relative to the line) of the word starting at byte `pos`, or of the single
/// character there when it cannot start a word; `None` at the end of the line.
fn word_at(line: &str, pos: usize) -> Option<Span> {
    let rest = line.get(pos..)?;
    let mut chars = rest.char_indices();
    let (_, first) = chars.next()?;
    if !is_word_char(first) {
        return Some(Span::new(pos, pos + first.len_utf8()));
    }
    let len = rest.find(|c: char| !is_word_char(c)).unwrap_or(rest.len());
    Some(Span::new(pos, pos + len))
}

/// The first word of a line, if it has one.
fn first_word(line: &str) -> Option<Span> {
    let start = line.find(|c: char| c != ' ' && c != '\t')?;
    if line[start..].starts_with('#') {
        return None;
    }
    word_at(line, start)
}

/// The word just before byte `pos`, if any.
fn previous_word(line: &str, pos: usize) -> Option<&str> {
    let before = line.get(..pos)?.trim_end_matches([' ', '\t']);
    let start = before
        .rfind(|c: char| !is_word_char(c))
        .map_or(0, |i| i + 1);
    let w = &before[start..];
    (!w.is_empty()).then_some(w)
}

/// Where the statement text ends: before a comment and trailing spaces.
fn content_end(line: &str) -> usize {
    let code = match line.find('#') {
        Some(i) => &line[..i],
        None => line,
    };
    code.trim_end_matches([' ', '\t']).len()
}

/// Joins `a`, `b` and `c` as "a, b or c".
fn join_or(items: &[String]) -> String {
    match items {
        [] => String::new(),
        [one] => one.clone(),
        [rest @ .., last] => format!("{} or {}", rest.join(", "), last),
    }
}

/// Turns a pest error on one line into a diagnostic, and says which section the line was meant
/// to be when its first word tells.
fn syntax_error(
    line: &str,
    offset: usize,
    err: &pest::error::Error<Rule>,
) -> (Diagnostic, Option<Section>) {
    let mut pos = match err.location {
        pest::error::InputLocation::Pos(p) => p,
        pest::error::InputLocation::Span((s, _)) => s,
    }
    .min(line.len());
    while !line.is_char_boundary(pos) {
        pos -= 1;
    }
    let mut wants: Vec<Want> = Vec::new();
    if let pest::error::ErrorVariant::ParsingError { positives, .. } = &err.variant {
        for w in positives.iter().filter_map(|r| expectation(*r)) {
            if !wants.contains(&w) {
                wants.push(w);
            }
        }
    }
    // The end of the line reads best last: "expected `standardize` or end of line".
    wants.sort_by_key(|w| *w == Want::End);
    let first = first_word(line);
    let meant = first.and_then(|f| Section::from_keyword(&line[f.range()]));
    let found = word_at(line, pos);
    let found_text = found.map(|f| &line[f.range()]);
    let at = |s: Span| shift(s, offset);
    let eol = Span::new(offset + pos, offset + pos);

    // An invisible character (no-break space, control character, ...) inside the word.
    if let Some(f) = found {
        if let Some((i, c)) = line[f.range()]
            .char_indices()
            .find(|&(_, c)| is_invisible(c))
        {
            let at_char = Span::new(f.start + i, f.start + i + c.len_utf8());
            let meant = meant.or_else(|| {
                (Some(f.start) == first.map(|w| w.start))
                    .then(|| Section::from_keyword(&line[f.start..f.start + i]))
                    .flatten()
            });
            let d = Diagnostic::error(
                Code::S0106,
                format!(
                    "the line contains the invisible character U+{:04X}{}",
                    c as u32,
                    char_name(c).map(|n| format!(" ({n})")).unwrap_or_default()
                ),
                at(at_char),
            )
            .label("invisible character")
            .with_help("delete it, or replace it with a plain space");
            return (d, meant);
        }
    }

    // An unknown word at the start of the line.
    if let (Some(f), Some(word), None) = (first, found_text, meant) {
        if f.start == pos {
            let keywords: Vec<&str> = Section::ALL.iter().map(|s| s.keyword()).collect();
            let guess = suggest(word, &keywords);
            let help = match guess {
                Some(g) => format!("did you mean `{g}`?"),
                None => format!("a line starts with one of: {}", keywords.join(", ")),
            };
            let d = Diagnostic::error(
                Code::S0101,
                format!("unknown keyword {}", quote(word)),
                at(f),
            )
            .label("not a keyword")
            .with_help(help);
            return (d, guess.and_then(Section::from_keyword));
        }
    }

    let form_help = |section: Option<Section>| match section {
        Some(s) => format!(
            "{} `{}` line reads `{}`",
            article(s.keyword()),
            s.keyword(),
            s.form()
        ),
        None => "each line holds one statement".to_string(),
    };
    let describe = |w: &Want| match w {
        Want::Word(k) => format!("`{k}`"),
        Want::OneOf(what, _) => format!("{} {what}", article(what)),
        Want::Value(v) => v.to_string(),
        Want::End => "end of line".to_string(),
    };
    let expected = join_or(&wants.iter().map(describe).collect::<Vec<_>>());
    let previous = previous_word(line, pos);
    let after = previous
        .filter(|w| KEYWORDS.contains(w))
        .map(|w| format!(" after `{w}`"))
        .unwrap_or_default();
    let after_comma = line
        .get(..pos)
        .is_some_and(|b| b.trim_end_matches([' ', '\t']).ends_with(','));

    if after_comma && wants == [Want::Value("a name")] {
        let shown = found_text.map_or("end of line".to_string(), quote);
        let d = Diagnostic::error(
            Code::S0104,
            format!("expected a class name after `,`, found {shown}"),
            found.map_or(eol, at),
        )
        .label("expected a class name")
        .with_help("remove the extra comma, or add the missing class name");
        return (d, meant);
    }
    // `x` out of place: not between two sizes, or sizes written without spaces (`100x6`).
    let glued = found_text.and_then(|w| {
        let (a, b) = w.split_once(['x', 'X'])?;
        let digits = |t: &str| !t.is_empty() && t.chars().all(|c| c.is_ascii_digit());
        (digits(a) && (digits(b) || b.is_empty())).then(|| format!("{a} x {b}"))
    });
    let x_misplaced = found_text == Some("x") && !wants.contains(&Want::Word("x"));
    let after_x = previous == Some("x") && wants.contains(&Want::Value("a width"));
    if glued.is_some() || x_misplaced || after_x {
        let (message, label, help) = if let Some(g) = glued {
            (
                format!(
                    "sizes must be separated by ` x `, found {}",
                    quote(found_text.unwrap_or(""))
                ),
                "sizes written together".to_string(),
                format!("put spaces around `x`: `{}`", g.trim_end()),
            )
        } else if x_misplaced {
            (
                "`x` must stand between two sizes".to_string(),
                format!("expected {expected}"),
                "a shape reads `STEPS x CHANNELS` or `ROWS x COLS x CHANNELS`, a kernel `K` or \
                 `KH x KW`"
                    .to_string(),
            )
        } else {
            (
                format!(
                    "`x` must be followed by a size, found {}",
                    found_text.map_or("end of line".to_string(), quote)
                ),
                "expected a size".to_string(),
                "write the size after `x` (e.g. `100 x 6`), or remove the `x`".to_string(),
            )
        };
        let d = Diagnostic::error(Code::S0107, message, found.map_or(eol, at))
            .label(label)
            .with_help(help);
        return (d, meant);
    }
    let (Some(span), Some(word)) = (found, found_text) else {
        // The line ends too early.
        let help = match previous {
            Some("leaky_relu") => {
                "write the slope after `leaky_relu`, e.g. `leaky_relu 0.01`".to_string()
            }
            _ => form_help(meant),
        };
        let d = Diagnostic::error(
            Code::S0104,
            format!("expected {expected}{after}, found end of line"),
            eol,
        )
        .label(format!("expected {expected} here"))
        .with_help(help);
        return (d, meant);
    };

    // An unknown activation.
    if let Some(Want::OneOf(_, acts)) = wants
        .iter()
        .find(|w| matches!(w, Want::OneOf("activation", _)))
    {
        if !wants.iter().any(|w| matches!(w, Want::Value(_))) {
            let help = match suggest(word, acts) {
                Some(g) => format!("did you mean `{g}`?"),
                None => format!(
                    "the activations are {}",
                    join_or(&acts.iter().map(|a| format!("`{a}`")).collect::<Vec<_>>())
                ),
            };
            let d = Diagnostic::error(
                Code::S0102,
                format!("unknown activation {}", quote(word)),
                at(span),
            )
            .label("not an activation")
            .with_help(help);
            return (d, meant);
        }
    }

    // A fixed word was expected: an unknown option or kind, or text after the end.
    if !wants.iter().any(|w| matches!(w, Want::Value(_))) && !wants.is_empty() {
        let mut candidates: Vec<&str> = Vec::new();
        for w in &wants {
            match w {
                Want::Word(k) => candidates.push(k),
                Want::OneOf(_, ks) => candidates.extend_from_slice(ks),
                _ => {}
            }
        }
        let unknown = match wants.as_slice() {
            [Want::OneOf(what, _)] => format!("unknown {what} {}", quote(word)),
            _ => format!("unknown word {}", quote(word)),
        };
        if let (Some(g), true) = (
            unit_alias(word),
            wants.iter().any(|w| matches!(w, Want::OneOf("unit", _))),
        ) {
            let d = Diagnostic::error(Code::S0103, unknown, at(span))
                .label(format!("expected {expected}"))
                .with_help(format!(
                    "did you mean `{g}`? memory is counted in binary units: 1 KiB = 1024 B, 1 MiB = 1024 KiB"
                ));
            return (d, meant);
        }
        if let Some(g) = suggest(word, &candidates) {
            let d = Diagnostic::error(Code::S0103, unknown, at(span))
                .label(format!("expected {expected}"))
                .with_help(format!("did you mean `{g}`?"));
            return (d, meant);
        }
        if wants.contains(&Want::End) {
            let what = meant
                .map(|s| format!(" in the `{}` line", s.keyword()))
                .unwrap_or_default();
            let d = Diagnostic::error(
                Code::S0105,
                format!("unexpected {}{what}", quote(word)),
                at(span),
            )
            .label(format!("expected {expected}"))
            .with_help(form_help(meant));
            return (d, meant);
        }
        let (msg, help) = match wants.as_slice() {
            [Want::OneOf(what, words)] => (
                unknown,
                format!(
                    "the {what}s are {}",
                    join_or(&words.iter().map(|w| format!("`{w}`")).collect::<Vec<_>>())
                        .replacen(" or ", " and ", 1)
                ),
            ),
            _ => (
                format!("expected {expected}{after}, found {}", quote(word)),
                form_help(meant),
            ),
        };
        let d = Diagnostic::error(Code::S0103, msg, at(span))
            .label(format!("expected {expected}"))
            .with_help(help);
        return (d, meant);
    }

    // A value was expected.
    let help = if wants.contains(&Want::Value("a number")) {
        "write a number such as `0.01`, `2` or `1e-3`".to_string()
    } else if word.starts_with(|c: char| c.is_ascii_digit())
        && wants.contains(&Want::Value("a whole number"))
        && word
            .trim_start_matches(|c: char| c.is_ascii_digit())
            .starts_with(['B', 'K', 'M'])
    {
        let digits = word.len() - word.trim_start_matches(|c: char| c.is_ascii_digit()).len();
        format!(
            "put a space between the number and the unit: `{} {}`",
            &word[..digits],
            &word[digits..]
        )
    } else if wants.contains(&Want::Value("a width"))
        || wants.contains(&Want::Value("a whole number"))
    {
        "write a whole number such as `8`".to_string()
    } else {
        form_help(meant)
    };
    let d = Diagnostic::error(
        Code::S0104,
        format!("expected {expected}{after}, found {}", quote(word)),
        at(span),
    )
    .label(format!("expected {expected}"))
    .with_help(help);
    (d, meant)
}

/// Every fixed word of the language, for "expected X after `rate`" messages.
const KEYWORDS: [&str; 40] = [
    "x",
    "conv",
    "depthwise",
    "pool",
    "all",
    "kernel",
    "stride",
    "pad",
    "model",
    "scalar",
    "input",
    "standardize",
    "unscaled",
    "layer",
    "output",
    "classes",
    "leaky_relu",
    "loss",
    "penalty",
    "none",
    "l2",
    "l1",
    "init",
    "uniform",
    "glorot",
    "he",
    "seed",
    "train",
    "sgd",
    "adam",
    "rate",
    "momentum",
    "beta1",
    "beta2",
    "batch",
    "epochs",
    "budget",
    "flash",
    "ram",
    "train_ram",
];

/// The unit meant by a common spelling that sinew does not use.
fn unit_alias(word: &str) -> Option<&'static str> {
    match word {
        "b" | "byte" | "bytes" => Some("B"),
        "K" | "k" | "KB" | "kB" | "kb" | "Kb" | "kib" | "KIB" => Some("KiB"),
        "M" | "m" | "MB" | "mb" | "Mb" | "mib" | "MIB" => Some("MiB"),
        _ => None,
    }
}

/// The indefinite article for a noun in a message.
fn article(noun: &str) -> &'static str {
    if noun.starts_with(['a', 'e', 'i', 'o']) {
        "an"
    } else {
        "a"
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn grammar_spec_rule_accepts_the_samples() {
        let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../samples");
        for entry in std::fs::read_dir(dir).expect("samples folder") {
            let path = entry.expect("entry").path();
            if path.extension().is_some_and(|e| e == "sinew") {
                let src = std::fs::read_to_string(&path).expect("read sample");
                assert!(
                    SpecParser::parse(Rule::spec, &src).is_ok(),
                    "{}",
                    path.display()
                );
                let (_, diags) = parse(&src);
                assert!(diags.is_empty(), "{}: {diags:?}", path.display());
            }
        }
    }

    #[test]
    fn spec_rule_and_line_rule_agree_on_bad_input() {
        let src = "model a\nlayer h 4 sigmod\r\noutput y 1 sigmoid # ok\n";
        assert!(SpecParser::parse(Rule::spec, src).is_err());
        let (spec, diags) = parse(src);
        assert_eq!(spec.statements.len(), 3);
        assert_eq!(diags.len(), 1);
        assert_eq!(&src[diags[0].primary.span.range()], "sigmod");
    }

    #[test]
    fn words_and_suggestions() {
        assert_eq!(suggest("sigmod", &ACTIVATIONS), Some("sigmoid"));
        assert_eq!(suggest("Layer", &["layer", "loss"]), Some("layer"));
        assert_eq!(suggest("zzz", &ACTIVATIONS), None);
        assert_eq!(word_at("ab cd", 3), Some(Span::new(3, 5)));
        assert_eq!(word_at("ab", 2), None);
        assert_eq!(previous_word("rate  x", 6), Some("rate"));
    }
}
