//! Hostile input: what a spec, a data file or a failing disk can do to the compiler.
//!
//! - Names that are Rust keywords, raw identifiers, Unicode look-alikes, or that try to close a
//!   string, a comment or a block are rejected by the checker with a name error, and never reach
//!   the emitter: `emit::generate` takes a `Model`, only `check` makes one, and for these specs
//!   `check` makes none; the build API then returns `BuildError::Spec` and writes nothing.
//! - No path of the build API escapes the output folder: the generated file is named after the
//!   checked model name, and a symbolic link planted at that name is replaced, not followed.
//! - Enormous widths are refused before anything is allocated for them, a 100 MB spec file and
//!   a CSV file with a 10 MB line fail cleanly, and each of these runs in a child process whose
//!   peak resident memory (`VmHWM` in `/proc/self/status`, Linux) is asserted to stay small.
//! - Every writer (generated code through the build API and `sinew emit`, weights files, device
//!   blobs, plots) is atomic: in a child process limited to a few KiB of file size
//!   (`ulimit -f`), a write that fails midway, or is killed midway by `SIGXFSZ`, leaves the old
//!   file exactly as it was.
//!
//! The child processes run this test binary again with `--ignored --exact child`, selecting the
//! task with an environment variable; `child` is ignored in a normal run.

use sinew::builder::BuildError;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("sinew-hostile-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).expect("create scratch folder");
    dir
}

fn entries(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .map(|rd| {
            rd.filter_map(|e| e.ok())
                .map(|e| e.file_name().to_string_lossy().into_owned())
                .collect()
        })
        .unwrap_or_default();
    v.sort();
    v
}

const BASE: &str = "model MODEL\ninput INPUT 2\nlayer LAYER 3 relu\n\
                    output OUTPUT 2 softmax classes CLASS, other\nloss cross_entropy\n";

/// `BASE` with `name` in one place and plain names everywhere else.
fn spec_with(place: &str, name: &str) -> String {
    let mut s = BASE.to_string();
    for p in ["MODEL", "INPUT", "LAYER", "OUTPUT", "CLASS"] {
        let plain = match p {
            "MODEL" => "gate",
            "INPUT" => "sensors",
            "LAYER" => "hidden",
            "OUTPUT" => "state",
            _ => "open",
        };
        s = s.replace(p, if p == place { name } else { plain });
    }
    s
}

/// Names a spec might use to break out of the generated code, with the family of codes the
/// checker must answer with (`S03` names, `S01` syntax: the grammar already stops some).
const HOSTILE: &[(&str, &str)] = &[
    // Rust keywords, strict and reserved, of every edition.
    ("fn", "S0302"),
    ("type", "S0302"),
    ("self", "S0302"),
    ("crate", "S0302"),
    ("super", "S0302"),
    ("async", "S0302"),
    ("await", "S0302"),
    ("dyn", "S0302"),
    ("try", "S0302"),
    ("gen", "S0302"),
    ("macro", "S0302"),
    ("yield", "S0302"),
    ("unsafe", "S0302"),
    ("Self", "S0301"),
    // Raw identifiers.
    ("r#type", "S0304"),
    ("r#fn", "S0304"),
    ("r#x", "S0304"),
    // Unicode look-alikes of ASCII letters.
    ("g\u{0435}te", "S0303"),   // Cyrillic small ie
    ("gat\u{0435}", "S0303"),   // Cyrillic small ie at the end
    ("\u{0430}", "S0303"),      // Cyrillic small a alone
    ("h\u{03bf}t", "S0303"),    // Greek small omicron
    ("\u{ff47}ate", "S0303"),   // fullwidth g
    ("gate\u{0301}", "S0303"),  // combining acute accent
    ("\u{0131}nput", "S0303"),  // dotless i
    ("\u{212a}elvin", "S0303"), // Kelvin sign
    ("\u{1d41a}bc", "S0303"),   // mathematical bold a
    ("gate\u{200b}x", "S0303"), // zero-width space inside a word
    ("ga\u{200d}te", "S0303"),  // zero-width joiner
    ("gate\u{00a0}x", "S0303"), // no-break space inside a word
    // Trying to close a string, a comment or a block, or to start an item.
    ("x\"", "S0301"),
    ("\"", "S0301"),
    ("x\"}", "S0301"),
    ("}", "S0301"),
    ("x}", "S0301"),
    ("};mod", "S0301"),
    ("x{", "S0301"),
    ("x);", "S0301"),
    ("x*/", "S0301"),
    ("/*x", "S0301"),
    ("x//y", "S0301"),
    ("x\\", "S0301"),
    ("x::y", "S0301"),
    ("x!", "S0301"),
    ("'static", "S0301"),
    ("x'", "S0301"),
    ("x.y", "S0301"),
    ("x-y", "S0301"),
    ("x$", "S0301"),
    ("x;y", "S0301"),
    ("x=1", "S0301"),
    ("x[0]", "S0301"),
    ("x<T>", "S0301"),
    ("X", "S0301"),
    ("_x", "S0301"),
    ("1x", "S0301"),
    ("../x", "S0301"),
    ("/x", "S0301"),
    ("x/y", "S0301"),
];

#[test]
fn hostile_names_are_rejected_in_every_place() {
    let places = ["MODEL", "INPUT", "LAYER", "OUTPUT", "CLASS"];
    let mut cases = 0;
    for &(name, code) in HOSTILE {
        for place in places {
            let src = spec_with(place, name);
            let checked = sinew::check_source(&src);
            assert!(
                checked.model.is_none(),
                "{name:?} as {place}: accepted:\n{src}"
            );
            let codes: Vec<&str> = checked
                .diagnostics
                .iter()
                .map(|d| d.code.as_str())
                .collect();
            assert!(
                codes.contains(&code),
                "{name:?} as {place}: expected {code}, got {codes:?}"
            );
            cases += 1;
        }
    }
    assert_eq!(cases, HOSTILE.len() * places.len());
}

#[test]
fn names_cut_short_by_the_grammar_are_rejected_too() {
    // `#` starts a comment and `,` separates classes: a name can never hold them. What is left
    // of such a line is still refused.
    for src in [
        "model x#\"}\ninput i 2\noutput y 1 sigmoid\nloss cross_entropy\n",
        "model gate\ninput i 2\nlayer h#}\n 3 relu\noutput y 1 sigmoid\nloss cross_entropy\n",
        "model gate\ninput i 2\noutput y 2 softmax classes a,\"b\nloss cross_entropy\n",
        "model gate\ninput i 2\noutput y 2 softmax classes a,,b\nloss cross_entropy\n",
    ] {
        let checked = sinew::check_source(src);
        // The first one is a valid spec with a comment; the others are errors.
        if src.starts_with("model x#") {
            let model = checked.model.expect("a comment is not part of the name");
            assert_eq!(model.name(), "x");
        } else {
            assert!(checked.model.is_none(), "{src}");
        }
    }
}

/// The build API on a hostile spec: `BuildError::Spec`, and nothing is written.
#[test]
fn the_build_api_never_emits_hostile_names() {
    let dir = scratch("build");
    let out = dir.join("out");
    let mut built = 0;
    for &(name, _) in HOSTILE {
        for place in ["MODEL", "LAYER", "CLASS"] {
            let spec = dir.join("hostile.sinew");
            std::fs::write(&spec, spec_with(place, name)).expect("write spec");
            let err = sinew::Builder::new()
                .spec(&spec)
                .out_dir(&out)
                .cargo_metadata(false)
                .compile()
                .expect_err("hostile spec compiled");
            assert!(
                matches!(err, BuildError::Spec { .. }),
                "{name:?} as {place}: {err}"
            );
            assert!(
                entries(&out).is_empty(),
                "{name:?}: wrote {:?}",
                entries(&out)
            );
            built += 1;
        }
    }
    // Nothing was written beside the output folder either (e.g. `../x.rs`).
    assert_eq!(entries(&dir), ["hostile.sinew", "out"]);
    assert_eq!(built, HOSTILE.len() * 3);
    let _ = std::fs::remove_dir_all(dir);
}

#[test]
fn hostile_names_never_reach_the_emitter() {
    // `Model` has crate-private fields and only `check` builds one, so a name reaches `generate`
    // only through the checker, which refuses every hostile name in every place (S03xx).
    for &(name, _) in HOSTILE {
        for place in ["MODEL", "LAYER", "CLASS"] {
            let checked = sinew::check_source(&spec_with(place, name));
            assert!(
                checked.model.is_none(),
                "{name:?} as {place} passed the checker"
            );
        }
    }
}

#[test]
fn generated_files_stay_inside_the_output_folder() {
    let dir = scratch("escape");
    let out = dir.join("out");
    std::fs::create_dir_all(&out).expect("create out");
    let victim = dir.join("victim.rs");
    std::fs::write(&victim, "precious").expect("write victim");
    // A symbolic link planted where the generated file goes is replaced, not written through.
    #[cfg(unix)]
    std::os::unix::fs::symlink(&victim, out.join("gate.rs")).expect("plant link");
    let spec = dir.join("gate.sinew");
    std::fs::write(&spec, spec_with("", "")).expect("write spec");
    let files = sinew::Builder::new()
        .spec(&spec)
        .out_dir(&out)
        .cargo_metadata(false)
        .compile()
        .expect("valid spec");
    assert_eq!(files, [out.join("gate.rs")]);
    assert_eq!(std::fs::read_to_string(&victim).unwrap(), "precious");
    let meta = std::fs::symlink_metadata(out.join("gate.rs")).unwrap();
    assert!(meta.file_type().is_file(), "the link was followed");
    // A model name that would point elsewhere never passes the checker.
    for name in ["../gate", "/tmp/gate", "..", "gate/../../x", "gate.rs", "."] {
        std::fs::write(&spec, spec_with("MODEL", name)).expect("write spec");
        let err = sinew::Builder::new()
            .spec(&spec)
            .out_dir(&out)
            .cargo_metadata(false)
            .compile()
            .expect_err("escaping name");
        assert!(matches!(err, BuildError::Spec { .. }), "{name}: {err}");
    }
    assert_eq!(entries(&out), ["gate.rs"]);
    assert_eq!(entries(&dir), ["gate.sinew", "out", "victim.rs"]);
    let _ = std::fs::remove_dir_all(dir);
}

// ---------------------------------------------------------------------------------------------
// Child processes
// ---------------------------------------------------------------------------------------------

const TASK: &str = "SINEW_HOSTILE_TASK";
const DIR: &str = "SINEW_HOSTILE_DIR";

/// Runs `child` with `task` in a new process of this test binary, through `sh -c` with
/// `shell_prefix` (e.g. a `ulimit`) before the `exec`.
fn run_child(task: &str, dir: &Path, shell_prefix: &str) -> Output {
    let exe = std::env::current_exe().expect("test binary path");
    Command::new("sh")
        .arg("-c")
        .arg(format!("{shell_prefix} exec \"$0\" \"$@\""))
        .arg(exe)
        .args([
            "child",
            "--exact",
            "--ignored",
            "--nocapture",
            "--test-threads=1",
        ])
        .env(TASK, task)
        .env(DIR, dir)
        .output()
        .expect("run the child")
}

fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

/// Peak resident set of the current process in KiB (Linux), or None elsewhere.
fn peak_kib() -> Option<u64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    line.split_whitespace().nth(1)?.parse().ok()
}

/// The child's report: `RESULT <text>` and `PEAK_KIB <n>` lines.
fn report(o: &Output, key: &str) -> Option<String> {
    // libtest prints `test child ... ` before the first line the test prints.
    let text = stdout(o);
    let at = text.find(key)? + key.len();
    let rest = &text[at..];
    Some(rest.lines().next().unwrap_or("").trim().to_string())
}

#[test]
#[ignore = "a child process of the other tests in this file (selected by SINEW_HOSTILE_TASK)"]
fn child() {
    let task = std::env::var(TASK).expect("SINEW_HOSTILE_TASK is set by the parent test");
    let dir = PathBuf::from(std::env::var(DIR).expect("SINEW_HOSTILE_DIR is set"));
    let result = child_task(&task, &dir);
    println!("RESULT {result}");
    if let Some(k) = peak_kib() {
        println!("PEAK_KIB {k}");
    }
}

/// A small standardized classifier used by the writer tasks, with enough weights that its
/// files are tens of KiB.
const WIDE: &str = "model wide\nscalar f64\ninput features 24 standardize\nlayer hidden 48 tanh\n\
                    output state 3 softmax\nloss cross_entropy\n";

fn wide_model() -> sinew::ir::Model {
    sinew::check_source(WIDE).model.expect("WIDE is valid")
}

/// The build error of the spec `file` in `dir`, which must be refused (`why` says why).
fn refused(dir: &Path, file: &str, why: &str) -> String {
    let err = sinew::Builder::new()
        .spec(dir.join(file))
        .out_dir(dir.join("out"))
        .cargo_metadata(false)
        .compile()
        .expect_err(why);
    format!("{err}")
}

fn child_task(task: &str, dir: &Path) -> String {
    match task {
        "huge_spec" => refused(dir, "huge.sinew", "a 100 MB spec is refused"),
        "long_word_spec" => refused(dir, "long_word.sinew", "a spec of one long word is refused"),
        "enormous_widths" => refused(dir, "enormous.sinew", "enormous widths are refused"),
        "long_csv_line" => {
            let model = sinew::check_source(WIDE).model.expect("valid");
            let err = sinew::data::read_csv(&dir.join("long_line.csv"), &model)
                .expect_err("a 10 MB line is refused");
            format!("{} {err}", err.code)
        }
        "write_generated" => {
            match sinew::Builder::new()
                .spec(dir.join("wide.sinew"))
                .out_dir(dir)
                .cargo_metadata(false)
                .compile()
            {
                Ok(_) => "written".to_string(),
                Err(e) => format!("error: {e}"),
            }
        }
        "write_weights" => {
            let w = sinew::workflow::init(&wide_model(), Some(1));
            match w.save(&dir.join("wide.json")) {
                Ok(()) => "written".to_string(),
                Err(e) => format!("error: {e}"),
            }
        }
        "write_blob" => {
            let model = wide_model();
            let w = sinew::workflow::init(&model, Some(1));
            let bytes = sinew::pack::encode(&model, &w).expect("weights fit");
            match sinew::pack::write(&dir.join("wide.blob"), &bytes) {
                Ok(()) => "written".to_string(),
                Err(e) => format!("error: {e}"),
            }
        }
        "write_plot_svg" | "write_plot_png" => {
            let history: Vec<sinew::engine::train::EpochReport> = (0..200)
                .map(|e| sinew::engine::train::EpochReport {
                    epoch: e + 1,
                    epochs: 200,
                    train_cost: 1.0 / f64::from(e + 1),
                    validation_cost: Some(1.2 / f64::from(e + 1)),
                    validation_accuracy: None,
                })
                .collect();
            let ext = if task.ends_with("svg") { "svg" } else { "png" };
            match sinew::plot::cost_curves(&history, "cost", &dir.join(format!("curve.{ext}"))) {
                Ok(_) => "written".to_string(),
                Err(e) => format!("error: {e}"),
            }
        }
        other => panic!("unknown task {other}"),
    }
}

/// Peak memory of a child that refuses a hostile input, in MiB. The bound is far below the
/// input's size: the input is never held whole.
const PEAK_BOUND_MIB: u64 = 48;

fn assert_small_peak(o: &Output, what: &str) {
    if let Some(k) = report(o, "PEAK_KIB ") {
        let kib: u64 = k.parse().expect("a number");
        println!(
            "{what}: peak resident memory {:.1} MiB",
            kib as f64 / 1024.0
        );
        assert!(
            kib < PEAK_BOUND_MIB * 1024,
            "{what}: peak resident memory {kib} KiB"
        );
    }
}

#[test]
fn a_100_mb_spec_file_fails_cleanly_in_little_memory() {
    let dir = scratch("huge_spec");
    // 100 MB of plausible lines: a layer repeated, as a generator gone wrong would write.
    {
        use std::io::Write;
        let mut f = std::io::BufWriter::new(std::fs::File::create(dir.join("huge.sinew")).unwrap());
        f.write_all(b"model huge\ninput x 4\n").unwrap();
        let line = b"layer hidden 4 relu\n";
        for _ in 0..(100_000_000 / line.len()) {
            f.write_all(line).unwrap();
        }
    }
    assert!(std::fs::metadata(dir.join("huge.sinew")).unwrap().len() >= 100_000_000);
    let o = run_child("huge_spec", &dir, "");
    assert!(
        o.status.success(),
        "{}{}",
        stdout(&o),
        String::from_utf8_lossy(&o.stderr)
    );
    let r = report(&o, "RESULT ").expect("a result");
    assert!(r.contains("huge.sinew") && r.contains("larger than"), "{r}");
    assert_small_peak(&o, "100 MB spec");
    assert!(entries(&dir.join("out")).is_empty());
    let _ = std::fs::remove_dir_all(dir);
}

#[test]
fn a_spec_of_one_long_word_fails_cleanly_in_little_memory() {
    // Just under the spec size limit, a single word: the diagnostic machinery (typo
    // suggestions, quoting, rendering) must stay within a small multiple of it.
    let dir = scratch("long_word");
    let len = usize::try_from(sinew::fsutil::MAX_SPEC_BYTES).unwrap() - 1;
    std::fs::write(dir.join("long_word.sinew"), "x".repeat(len)).unwrap();
    let o = run_child("long_word_spec", &dir, "");
    assert!(
        o.status.success(),
        "{}{}",
        stdout(&o),
        String::from_utf8_lossy(&o.stderr)
    );
    let r = report(&o, "RESULT ").expect("a result");
    assert!(r.contains("has"), "{r}");
    assert_small_peak(&o, "1 MiB word");
    let _ = std::fs::remove_dir_all(dir);
}

#[test]
fn enormous_widths_are_refused_before_any_allocation() {
    let dir = scratch("enormous");
    // 65535^2 weights per layer (17 GB of f32 for the three): refused as S0403, while widths
    // past 64 bits are refused as S0402, and nothing is allocated for either.
    std::fs::write(
        dir.join("enormous.sinew"),
        "model enormous\ninput x 65535 unscaled\nlayer a 65535 relu\nlayer b 65535 relu\n\
         layer c 99999999999999999999999999999 relu\noutput y 65535 softmax\nloss cross_entropy\n",
    )
    .unwrap();
    let checked =
        sinew::check_source(&std::fs::read_to_string(dir.join("enormous.sinew")).unwrap());
    let codes: Vec<&str> = checked
        .diagnostics
        .iter()
        .map(|d| d.code.as_str())
        .collect();
    assert_eq!(codes, ["S0402"]);
    let o = run_child("enormous_widths", &dir, "");
    assert!(
        o.status.success(),
        "{}{}",
        stdout(&o),
        String::from_utf8_lossy(&o.stderr)
    );
    assert_small_peak(&o, "enormous widths");
    // Without the over-long width the total is what is refused.
    let no_c = "model enormous\ninput x 65535 unscaled\nlayer a 65535 relu\nlayer b 65535 relu\n\
                output y 65535 softmax\nloss cross_entropy\n";
    std::fs::write(dir.join("enormous.sinew"), no_c).unwrap();
    let codes: Vec<&str> = sinew::check_source(no_c)
        .diagnostics
        .iter()
        .map(|d| d.code.as_str())
        .collect();
    assert_eq!(codes, ["S0403"]);
    let o = run_child("enormous_widths", &dir, "");
    assert!(
        o.status.success(),
        "{}{}",
        stdout(&o),
        String::from_utf8_lossy(&o.stderr)
    );
    assert_small_peak(&o, "16 Gi parameters");
    let _ = std::fs::remove_dir_all(dir);
}

#[test]
fn a_csv_with_a_10_mb_line_fails_cleanly_in_little_memory() {
    let dir = scratch("long_line");
    let mut text = String::from("a");
    for k in 1..24 {
        text.push_str(&format!(",f{k}"));
    }
    text.push_str(",label\n");
    text.push_str(&"1,".repeat(5_000_000));
    text.push_str("idle\n");
    std::fs::write(dir.join("long_line.csv"), &text).unwrap();
    let o = run_child("long_csv_line", &dir, "");
    assert!(
        o.status.success(),
        "{}{}",
        stdout(&o),
        String::from_utf8_lossy(&o.stderr)
    );
    let r = report(&o, "RESULT ").expect("a result");
    assert!(r.starts_with("D11"), "{r}");
    assert_small_peak(&o, "10 MB CSV line");
    let _ = std::fs::remove_dir_all(dir);
}

/// A file size limit for the writer tasks: `ulimit -f` counts 512- or 1024-byte blocks
/// depending on the shell, so the limit is 4 to 8 KiB, well below every new file.
const FILE_LIMIT_BLOCKS: u32 = 8;
const OLD: &str = "the previous version of this file\n";

/// Runs a writer task twice under the file size limit, once with `SIGXFSZ` ignored (the write
/// fails with an error midway) and once with its default action (the process is killed
/// midway), and checks that the old file is intact both times; then once without a limit, to
/// show that the task does write the file.
fn writer_is_atomic(task: &str, file: &str) {
    let dir = scratch(task);
    std::fs::write(dir.join("wide.sinew"), WIDE).unwrap();
    let target = dir.join(file);
    for (how, prefix) in [
        (
            "fails",
            format!("ulimit -f {FILE_LIMIT_BLOCKS}; trap '' XFSZ;"),
        ),
        ("is killed", format!("ulimit -f {FILE_LIMIT_BLOCKS};")),
    ] {
        std::fs::write(&target, OLD).unwrap();
        let o = run_child(task, &dir, &prefix);
        if how == "fails" {
            let r = report(&o, "RESULT ").unwrap_or_default();
            assert!(
                r.starts_with("error"),
                "{task}: the write should fail: {r}\n{}",
                String::from_utf8_lossy(&o.stderr)
            );
            // The failed write cleaned up after itself.
            let left: Vec<String> = entries(&dir)
                .into_iter()
                .filter(|e| e.contains("tmp"))
                .collect();
            assert!(left.is_empty(), "{task}: temporary files left: {left:?}");
        } else {
            assert!(!o.status.success(), "{task}: the child was not stopped");
        }
        assert_eq!(
            std::fs::read_to_string(&target).unwrap(),
            OLD,
            "{task}: the old file changed when the write {how}"
        );
    }
    let o = run_child(task, &dir, "");
    assert_eq!(report(&o, "RESULT ").as_deref(), Some("written"), "{task}");
    let new = std::fs::read(&target).unwrap();
    assert!(
        new.len() > 8 * 1024,
        "{task}: the new file ({} bytes) is not larger than the limit",
        new.len()
    );
    let _ = std::fs::remove_dir_all(dir);
}

#[test]
fn generated_code_is_written_atomically() {
    writer_is_atomic("write_generated", "wide.rs");
}

#[test]
fn weights_files_are_written_atomically() {
    writer_is_atomic("write_weights", "wide.json");
}

#[test]
fn blobs_are_written_atomically() {
    writer_is_atomic("write_blob", "wide.blob");
}

#[test]
fn svg_plots_are_written_atomically() {
    writer_is_atomic("write_plot_svg", "curve.svg");
}

#[test]
fn png_plots_are_written_atomically() {
    writer_is_atomic("write_plot_png", "curve.png");
}

#[test]
fn sinew_emit_writes_atomically() {
    // The command-line writer goes through the same function; checked here end to end.
    let dir = scratch("cli_emit");
    std::fs::write(dir.join("wide.sinew"), WIDE).unwrap();
    let target = dir.join("wide.rs");
    std::fs::write(&target, OLD).unwrap();
    let exe = env!("CARGO_BIN_EXE_sinew");
    let o = Command::new("sh")
        .arg("-c")
        .arg(format!(
            "ulimit -f {FILE_LIMIT_BLOCKS}; trap '' XFSZ; exec \"$0\" \"$@\""
        ))
        .arg(exe)
        .args(["emit", "wide.sinew", "-o", "wide.rs"])
        .current_dir(&dir)
        .output()
        .unwrap();
    assert_eq!(
        o.status.code(),
        Some(2),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    assert_eq!(std::fs::read_to_string(&target).unwrap(), OLD);
    let _ = std::fs::remove_dir_all(dir);
}

#[test]
fn the_cli_refuses_a_huge_spec_file() {
    let dir = scratch("cli_huge");
    let big = "# padding\n".repeat(300_000);
    std::fs::write(dir.join("big.sinew"), big).unwrap();
    let o = Command::new(env!("CARGO_BIN_EXE_sinew"))
        .args(["check", "big.sinew"])
        .current_dir(&dir)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("big.sinew") && err.contains("larger than"),
        "{err}"
    );
    let _ = std::fs::remove_dir_all(dir);
}
