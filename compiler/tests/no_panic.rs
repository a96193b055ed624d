//! The front end never panics: random bytes and random mutations of the samples go through
//! parse, check and render, and every diagnostic points inside the source on character
//! boundaries.

use proptest::prelude::*;
use std::path::Path;

fn samples() -> Vec<String> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("../samples");
    let mut paths: Vec<_> = std::fs::read_dir(dir)
        .expect("samples folder")
        .map(|e| e.expect("entry").path())
        .filter(|p| p.extension().is_some_and(|e| e == "sinew"))
        .collect();
    paths.sort();
    paths
        .iter()
        .map(|p| std::fs::read_to_string(p).expect("read sample"))
        .collect()
}

/// Runs the whole front end on `src` and checks every span.
fn front_end(src: &str) {
    let checked = sinew::check_source(src);
    assert_eq!(checked.model.is_some(), !checked.has_errors());
    for d in &checked.diagnostics {
        for span in std::iter::once(d.primary.span).chain(d.secondary.iter().map(|l| l.span)) {
            assert!(
                span.start <= span.end && span.end <= src.len(),
                "{span:?} in {} bytes",
                src.len()
            );
            assert!(
                src.is_char_boundary(span.start) && src.is_char_boundary(span.end),
                "{span:?}"
            );
        }
        assert!(!d.message.is_empty());
        // Grammar rule names never reach the user.
        let words = format!("{} {} {:?}", d.message, d.primary.message, d.help);
        for rule in [
            "kw_",
            "_stmt",
            "_limit",
            "simple_activation",
            "word_char",
            "EOI",
            "single_line",
        ] {
            assert!(!words.contains(rule), "{rule} in {words}");
        }
    }
    assert!(checked.diagnostics.len() <= sinew::check::MAX_DIAGNOSTICS + 1);
    let text = sinew::diag::render("fuzz.sinew", src, &checked.diagnostics, false);
    assert_eq!(text.is_empty(), checked.diagnostics.is_empty());
}

/// Words worth inserting: keywords, edge numbers, separators and troublesome characters.
const TOKENS: &[&str] = &[
    "model",
    "scalar",
    "input",
    "layer",
    "output",
    "loss",
    "penalty",
    "init",
    "train",
    "budget",
    "classes",
    "standardize",
    "softmax",
    "sigmoid",
    "leaky_relu",
    "relu",
    "tanh",
    "identity",
    "cross_entropy",
    "squared_error",
    "l1",
    "l2",
    "none",
    "uniform",
    "glorot",
    "he",
    "seed",
    "sgd",
    "adam",
    "rate",
    "momentum",
    "beta1",
    "beta2",
    "batch",
    "epochs",
    "flash",
    "ram",
    "B",
    "KiB",
    "MiB",
    "0",
    "1",
    "-1",
    "65535",
    "65536",
    "1e999",
    "1e-400",
    "-0",
    "4294967296",
    "18446744073709551616",
    "99999999999999999999999999999999",
    "0.5",
    "r#x",
    "fn",
    "Self",
    ",",
    "#",
    " ",
    "\t",
    "\n",
    "\r\n",
    "\r",
    "\u{e9}",
    "\u{435}",
    "\u{1F600}",
    "\u{0}",
    "\u{feff}",
    "\u{200b}",
];

#[derive(Debug, Clone)]
enum Edit {
    InsertByte(usize, u8),
    DeleteByte(usize),
    ReplaceByte(usize, u8),
    InsertToken(usize, usize),
    DeleteLine(usize),
    DuplicateLine(usize),
}

fn edit() -> impl Strategy<Value = Edit> {
    prop_oneof![
        (any::<usize>(), any::<u8>()).prop_map(|(p, b)| Edit::InsertByte(p, b)),
        any::<usize>().prop_map(Edit::DeleteByte),
        (any::<usize>(), any::<u8>()).prop_map(|(p, b)| Edit::ReplaceByte(p, b)),
        (any::<usize>(), 0..TOKENS.len()).prop_map(|(p, t)| Edit::InsertToken(p, t)),
        any::<usize>().prop_map(Edit::DeleteLine),
        any::<usize>().prop_map(Edit::DuplicateLine),
    ]
}

fn apply(src: &str, edits: &[Edit]) -> String {
    let mut bytes = src.as_bytes().to_vec();
    for e in edits {
        let at = |p: usize, len: usize| if len == 0 { 0 } else { p % (len + 1) };
        match *e {
            Edit::InsertByte(p, b) => bytes.insert(at(p, bytes.len()), b),
            Edit::DeleteByte(p) if !bytes.is_empty() => {
                bytes.remove(p % bytes.len());
            }
            Edit::ReplaceByte(p, b) if !bytes.is_empty() => {
                let i = p % bytes.len();
                bytes[i] = b;
            }
            Edit::InsertToken(p, t) => {
                let i = at(p, bytes.len());
                bytes.splice(i..i, TOKENS[t].bytes());
            }
            Edit::DeleteLine(p) | Edit::DuplicateLine(p) => {
                let text = String::from_utf8_lossy(&bytes).into_owned();
                let mut lines: Vec<&str> = text.split('\n').collect();
                let i = p % lines.len();
                if matches!(e, Edit::DeleteLine(_)) {
                    lines.remove(i);
                } else {
                    lines.insert(i, lines[i]);
                }
                bytes = lines.join("\n").into_bytes();
            }
            _ => {}
        }
    }
    String::from_utf8_lossy(&bytes).into_owned()
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 1000, ..ProptestConfig::default() })]

    #[test]
    fn random_bytes_never_panic(bytes in prop::collection::vec(any::<u8>(), 0..300)) {
        front_end(&String::from_utf8_lossy(&bytes));
    }

    #[test]
    fn random_token_soup_never_panics(tokens in prop::collection::vec(0..TOKENS.len(), 0..60)) {
        let src: String = tokens.iter().map(|&t| TOKENS[t]).collect::<Vec<_>>().join(" ");
        front_end(&src);
    }

    #[test]
    fn mutated_samples_never_panic(
        which in any::<usize>(),
        edits in prop::collection::vec(edit(), 1..8),
    ) {
        let samples = samples();
        let src = apply(&samples[which % samples.len()], &edits);
        front_end(&src);
    }
}

#[test]
fn edge_inputs_never_panic() {
    let long_name = "a".repeat(100_000);
    let long_classes: Vec<String> = (0..20_000).map(|i| format!("c{i}")).collect();
    let long_classes = long_classes.join(", ");
    let repeated_classes = vec!["c"; 5_000].join(", ");
    let cases = [
        String::new(),
        "\n".into(),
        "\r".into(),
        "\r\n\r\n".into(),
        "#".into(),
        "\u{feff}model x".into(),
        "model".into(),
        "model \u{0}".into(),
        format!("model {long_name}"),
        format!(
            "model x\ninput i 1\noutput y 3 softmax classes {long_classes}\nloss cross_entropy"
        ),
        format!(
            "model x\ninput i 1\noutput y 3 softmax classes {repeated_classes}\nloss cross_entropy"
        ),
        "Layer X 0 Softmax\n".repeat(500),
        "layer h 99999999999999999999999999999999999999999999999999 relu".into(),
        "budget flash 18446744073709551615 MiB ram 18446744073709551616 B".into(),
        "train adam rate 1e99999999999999999999 beta1 -1e-99999999 beta2 NaN".into(),
        "model x\ninput i 65535\nlayer a 65535 relu\nlayer b 65535 relu\noutput y 65535 softmax\n\
         loss cross_entropy"
            .into(),
        "\t\t\tmodel\t\tx\t\t#\t\n".into(),
        "é".repeat(5000),
    ];
    for src in &cases {
        front_end(src);
    }
}

#[test]
fn line_endings_and_tabs_do_not_change_the_model() {
    for src in samples() {
        let plain = sinew::check_source(&src).model.expect("sample is valid");
        let crlf = src.replace('\n', "\r\n");
        let tabs = src.replace(' ', "\t");
        for variant in [crlf, tabs] {
            assert_eq!(sinew::check_source(&variant).model.as_ref(), Some(&plain));
        }
    }
}
