//! Diagnostics as users see them: every bad spec in `tests/bad/` rendered to text and compared
//! with its reviewed snapshot, the IR dump of every sample, and inline cases for warnings.

use sinew::diag::{render, Severity};
use std::path::{Path, PathBuf};

/// Renders the diagnostics of a spec (colour off), as `sinew check` prints them.
fn rendered(file_name: &str, src: &str) -> String {
    let checked = sinew::check_source(src);
    render(file_name, src, &checked.diagnostics, false)
}

fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

fn spec_files(dir: &str) -> Vec<PathBuf> {
    let mut files: Vec<PathBuf> = std::fs::read_dir(repo().join(dir))
        .expect("folder exists")
        .map(|e| e.expect("folder entry").path())
        .filter(|p| p.extension().is_some_and(|e| e == "sinew"))
        .collect();
    files.sort();
    files
}

fn file_name(path: &Path) -> String {
    path.file_name()
        .expect("file name")
        .to_string_lossy()
        .into_owned()
}

#[test]
fn bad_specs_render_as_reviewed() {
    insta::glob!("../../tests/bad", "*.sinew", |path| {
        let src = std::fs::read_to_string(path).expect("read bad spec");
        insta::assert_snapshot!(rendered(&file_name(path), &src));
    });
}

#[test]
fn every_bad_spec_has_an_error_with_a_location() {
    let files = spec_files("tests/bad");
    assert!(
        files.len() >= 30,
        "the bad corpus has {} files",
        files.len()
    );
    for path in files {
        let src = std::fs::read_to_string(&path).expect("read bad spec");
        let checked = sinew::check_source(&src);
        assert!(checked.has_errors(), "{} produced no error", path.display());
        assert!(
            checked.model.is_none(),
            "{} produced a model",
            path.display()
        );
        let name = file_name(&path);
        let text = rendered(&name, &src);
        assert!(
            text.contains(&format!("{name}:")),
            "{name}: no location in\n{text}"
        );
        for d in &checked.diagnostics {
            assert!(d.help.is_some(), "{name}: {} has no help", d.code);
        }
    }
}

/// The codes listed in the reference's table.
fn documented_codes() -> Vec<String> {
    let reference =
        std::fs::read_to_string(repo().join("grammar/REFERENCE.md")).expect("read reference");
    let mut codes: Vec<String> = reference
        .lines()
        .filter_map(|l| l.strip_prefix("| `"))
        .filter_map(|l| l.split('`').next())
        .filter(|c| {
            c.len() == 5
                && (c.starts_with('S') || c.starts_with('W'))
                && c[1..].bytes().all(|b| b.is_ascii_digit())
        })
        .map(str::to_string)
        .collect();
    codes.dedup();
    codes
}

#[test]
fn every_documented_error_code_is_exercised_by_the_corpus() {
    let mut seen = std::collections::BTreeSet::new();
    for path in spec_files("tests/bad") {
        let src = std::fs::read_to_string(&path).expect("read bad spec");
        for d in sinew::check_source(&src).diagnostics {
            seen.insert(d.code.to_string());
        }
    }
    let documented = documented_codes();
    assert!(
        documented.len() >= 40,
        "only {} codes documented",
        documented.len()
    );
    // S0100 (too many problems) needs over a hundred errors; `too_many_problems_are_capped`
    // covers it.
    for code in documented
        .iter()
        .filter(|c| c.starts_with('S') && *c != "S0100")
    {
        assert!(seen.contains(code), "no bad spec produces {code}");
    }
    for code in &seen {
        assert!(
            documented.contains(code),
            "{code} is not in grammar/REFERENCE.md"
        );
    }
}

#[test]
fn samples_check_clean_and_dump_as_reviewed() {
    let samples = spec_files("samples");
    assert!(samples.len() >= 3);
    for path in samples {
        let src = std::fs::read_to_string(&path).expect("read sample");
        let checked = sinew::check_source(&src);
        assert!(
            checked.diagnostics.is_empty(),
            "{}:\n{}",
            path.display(),
            rendered("s", &src)
        );
        let model = checked.model.expect("a sample yields a model");
        insta::assert_snapshot!(
            format!("sample_{}", file_name(&path).trim_end_matches(".sinew")),
            sinew::ir::dump(&model)
        );
    }
}

/// A valid spec to which each warning case adds one suspicious line.
const BASE: &str = "model pump_health\ninput features 6 unscaled\n";

fn warning_case(name: &str, body: &str) {
    let src = format!("{BASE}{body}");
    let checked = sinew::check_source(&src);
    assert!(
        checked.model.is_some(),
        "{name}: warnings must not reject the spec"
    );
    assert!(
        !checked.diagnostics.is_empty(),
        "{name}: expected a warning"
    );
    assert!(checked
        .diagnostics
        .iter()
        .all(|d| d.severity == Severity::Warning));
    insta::assert_snapshot!(name, rendered(&format!("{name}.sinew"), &src));
}

#[test]
fn too_many_problems_are_capped() {
    // Each line has two errors: a name that is not lower_snake and a width of 0.
    let src = "layer Hidden 0 relu\n".repeat(60);
    let d = sinew::check_source(&src).diagnostics;
    assert_eq!(d.len(), sinew::check::MAX_DIAGNOSTICS + 1);
    let last = d.last().expect("capped list");
    assert_eq!(last.code, "S0100");
    // 60 lines * 2 errors + 4 missing sections = 124 findings; 100 shown.
    assert_eq!(last.message, "24 more problems are not shown");
}

#[test]
fn warnings_accompany_a_model() {
    warning_case(
        "warn_squared_error_with_softmax",
        "output state 3 softmax\nloss squared_error\n",
    );
    warning_case(
        "warn_five_sigmoid_layers",
        "layer h1 8 sigmoid\nlayer h2 8 sigmoid\nlayer h3 8 sigmoid\nlayer h4 8 sigmoid\n\
         layer h5 8 sigmoid\nlayer h6 8 sigmoid\noutput state 3 softmax\nloss cross_entropy\n",
    );
    warning_case(
        "warn_large_batch",
        "output state 3 softmax\nloss cross_entropy\ntrain adam rate 0.001 batch 4096\n",
    );
    warning_case(
        "warn_zero_penalty",
        "output state 3 softmax\nloss cross_entropy\npenalty l1 0\n",
    );
}

/// A greenhouse model fed raw readings: air temperature in degrees, humidity in percent, CO2 in
/// ppm and light in lux differ by orders of magnitude (invented scenario).
const UNSCALED: &str = "model greenhouse_raw\ninput climate 4\nlayer hidden 12 relu\n\
                        output humidity 1 identity\nloss squared_error\n";

#[test]
fn an_input_without_scaling_warns_unless_declared() {
    let checked = sinew::check_source(UNSCALED);
    assert!(
        checked.model.is_some(),
        "a warning must not reject the spec"
    );
    let codes: Vec<_> = checked.diagnostics.iter().map(|d| d.code).collect();
    assert_eq!(codes, ["W0105"]);
    insta::assert_snapshot!(
        "warn_unscaled_input",
        rendered("greenhouse_raw.sinew", UNSCALED)
    );
    for word in ["standardize", "unscaled"] {
        let src = UNSCALED.replace("climate 4", &format!("climate 4 {word}"));
        assert!(sinew::check_source(&src).diagnostics.is_empty(), "{word}");
    }
}

#[test]
fn every_documented_warning_is_exercised() {
    let cases = [
        "output state 3 softmax\nloss squared_error\n",
        "layer h1 8 sigmoid\nlayer h2 8 sigmoid\nlayer h3 8 sigmoid\nlayer h4 8 sigmoid\n\
         layer h5 8 sigmoid\noutput state 3 softmax\nloss cross_entropy\n",
        "output state 3 softmax\nloss cross_entropy\ntrain adam rate 0.001 batch 4096\n",
        "output state 3 softmax\nloss cross_entropy\npenalty l2 0\n",
    ];
    let mut seen: Vec<String> = cases
        .iter()
        .flat_map(|body| sinew::check_source(&format!("{BASE}{body}")).diagnostics)
        .map(|d| d.code.to_string())
        .collect();
    let unscaled = sinew::check_source(UNSCALED).diagnostics;
    seen.extend(unscaled.iter().map(|d| d.code.to_string()));
    // `W02xx` come after training: `compiler/tests/cli.rs` and `workflow::advice` cover them.
    for code in documented_codes().iter().filter(|c| c.starts_with("W01")) {
        assert!(seen.contains(code), "no case produces {code}");
    }
}

#[test]
fn four_sigmoid_layers_in_a_row_are_fine() {
    let src = format!(
        "{BASE}layer h1 8 sigmoid\nlayer h2 8 sigmoid\nlayer h3 8 sigmoid\nlayer h4 8 sigmoid\n\
         output state 3 softmax\nloss cross_entropy\n"
    );
    assert!(sinew::check_source(&src).diagnostics.is_empty());
}

#[test]
fn defaults_come_from_the_ir() {
    let src = format!("{BASE}output state 3 softmax\nloss cross_entropy\n");
    let model = sinew::check_source(&src).model.expect("valid");
    assert_eq!(model.scalar(), sinew::ir::defaults::SCALAR);
    assert_eq!(model.penalty(), sinew::ir::defaults::PENALTY);
    assert_eq!(model.init(), sinew::ir::defaults::INIT);
    assert_eq!(model.seed(), sinew::ir::defaults::SEED);
    assert_eq!(model.train(), sinew::ir::defaults::TRAIN);
    assert_eq!(model.budget(), sinew::ir::Budget::default());

    let src = format!("{BASE}output state 3 softmax\nloss cross_entropy\ntrain sgd rate 0.1\n");
    let model = sinew::check_source(&src).model.expect("valid");
    assert_eq!(
        model.train().optimizer,
        sinew::ir::Optimizer::Sgd {
            rate: 0.1,
            momentum: sinew::ir::defaults::MOMENTUM
        }
    );
    assert_eq!(model.train().batch, sinew::ir::defaults::TRAIN.batch);
    assert_eq!(model.train().epochs, sinew::ir::defaults::TRAIN.epochs);
}

#[test]
fn numbers_in_exponent_form_and_every_option() {
    let src = format!(
        "{BASE}layer h 4 leaky_relu 1e-2\noutput state 3 softmax\nloss cross_entropy\n\
         penalty l2 5E-4\ninit uniform 0.5 seed 18446744073709551615\n\
         train adam rate 1e-3 beta1 0.8 beta2 0.99 batch 8 epochs 3\nbudget ram 1 MiB\n"
    );
    let m = sinew::check_source(&src).model.expect("valid");
    assert_eq!(
        m.layers()[0].activation,
        sinew::ir::Activation::LeakyRelu(0.01)
    );
    assert_eq!(m.penalty(), sinew::ir::Penalty::L2(5e-4));
    assert_eq!(m.init(), sinew::ir::Init::Uniform { eps: 0.5 });
    assert_eq!(m.seed(), u64::MAX);
    assert_eq!(
        m.train().optimizer,
        sinew::ir::Optimizer::Adam {
            rate: 1e-3,
            beta1: 0.8,
            beta2: 0.99,
            epsilon: sinew::ir::defaults::ADAM_EPSILON
        }
    );
    assert_eq!((m.train().batch, m.train().epochs), (8, 3));
    assert_eq!(
        m.budget(),
        sinew::ir::Budget {
            flash: None,
            ram: Some(1024 * 1024),
            train_ram: None,
        }
    );
}

#[test]
fn a_budget_that_is_exactly_met_passes() {
    // 2-1 sigmoid: 2 weights + 1 bias = 3 values * 4 B = 12 B of flash; 1 buffer value = 4 B
    // of RAM plus the f32 frame allowance of 1280 B = 1284 B (report.rs documents both figures).
    let src = "model gate\ninput x 2 unscaled\noutput y 1 sigmoid\nloss cross_entropy\nbudget flash 12 B ram 1284 B\n";
    assert!(sinew::check_source(src).diagnostics.is_empty());
    let src = "model gate\ninput x 2 unscaled\noutput y 1 sigmoid\nloss cross_entropy\nbudget flash 11 B ram 1283 B\n";
    let codes: Vec<_> = sinew::check_source(src)
        .diagnostics
        .iter()
        .map(|d| d.code)
        .collect();
    assert_eq!(codes, ["S0701", "S0702"]);
}

#[test]
fn colour_is_only_added_on_request() {
    let src = "model demo\nlayer h 4 sigmod\n";
    let d = sinew::check_source(src).diagnostics;
    assert!(!render("demo.sinew", src, &d, false).contains('\u{1b}'));
    assert!(render("demo.sinew", src, &d, true).contains('\u{1b}'));
}
