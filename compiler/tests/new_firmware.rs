//! `sinew new-firmware` end to end: the crate it writes builds with `cargo build` and passes
//! `cargo clippy -- -D warnings` without a single warning, for a classifier, a regressor and a
//! classifier with baked weights; and it refuses (exit status, one-line error, nothing written)
//! a folder that is not empty, a spec with errors and a `--sinew-path` that is no checkout.
//!
//! The nested builds run outside the workspace (in the system's temporary folder) and share one
//! target folder, `<target>/tmp/template-check` (also used by `tests/tests/template.rs`), so
//! the sinew crates are compiled once for all of them. They use the workspace's `Cargo.lock`
//! (copied in, so the versions are the ones this build already has) and `--offline`.

mod common;

use common::*;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

/// The target folder shared by the nested builds.
fn shared_target() -> PathBuf {
    Path::new(env!("CARGO_TARGET_TMPDIR")).join("template-check")
}

/// `cargo SUBCOMMAND --offline ARGS` in `dir`, with nothing of the outer build leaking in.
fn cargo(dir: &Path, subcommand: &str, args: &[&str]) -> Output {
    let mut c = Command::new(std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into()));
    c.arg(subcommand)
        .arg("--offline")
        .args(args)
        .current_dir(dir)
        .env("CARGO_TARGET_DIR", shared_target())
        .env("CARGO_TERM_COLOR", "never")
        .stdin(Stdio::null());
    for v in [
        "RUSTFLAGS",
        "CARGO_ENCODED_RUSTFLAGS",
        "CARGO_BUILD_RUSTFLAGS",
        "CARGO_BUILD_TARGET",
        "CARGO_MAKEFLAGS",
        "MAKEFLAGS",
        "MFLAGS",
        "OUT_DIR",
        "RUSTC",
        "RUSTC_WRAPPER",
        "RUSTC_WORKSPACE_WRAPPER",
        "RUSTDOC",
        "RUSTUP_TOOLCHAIN",
    ] {
        c.env_remove(v);
    }
    c.output().expect("cargo runs")
}

/// Every file below `dir`, relative, sorted.
fn files(dir: &Path) -> Vec<String> {
    fn walk(base: &Path, dir: &Path, out: &mut Vec<String>) {
        for e in std::fs::read_dir(dir).expect("a folder").flatten() {
            let p = e.path();
            if p.is_dir() {
                walk(base, &p, out);
            } else {
                let rel = p.strip_prefix(base).expect("below the base");
                out.push(rel.to_string_lossy().replace('\\', "/"));
            }
        }
    }
    let mut out = Vec::new();
    walk(dir, dir, &mut out);
    out.sort();
    out
}

/// Runs `sinew new-firmware DIR ARGS` (paths relative to the repository root), then builds and
/// lints the crate; returns its `src/lib.rs`. Panics on a failure or a warning.
fn new_and_build(name: &str, args: &[&str]) -> String {
    let scratch = scratch("new-firmware", name);
    let dir = scratch.join(name);
    let dir_arg = dir.to_string_lossy().into_owned();
    let mut all = vec!["new-firmware", dir_arg.as_str()];
    all.extend_from_slice(args);
    let o = sinew(&all);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let manifest = std::fs::read_to_string(dir.join("Cargo.toml")).expect("Cargo.toml");
    // By default the dependencies are paths into this checkout, which the tests run from.
    let checkout = root().canonicalize().expect("the checkout");
    let runtime_path = checkout.join("runtime").display().to_string();
    assert!(
        manifest.contains(&runtime_path.replace('\\', "\\\\")),
        "{manifest}"
    );
    std::fs::copy(root().join("Cargo.lock"), dir.join("Cargo.lock")).expect("copy Cargo.lock");
    for (sub, args) in [
        ("build", &[][..]),
        ("clippy", &["--all-targets", "--", "-D", "warnings"][..]),
    ] {
        let step = format!("cargo {sub} {}", args.join(" "));
        let o = cargo(&dir, sub, args);
        let err = String::from_utf8_lossy(&o.stderr);
        assert!(o.status.success(), "{step} in {name}:\n{err}");
        assert!(!err.contains("warning"), "{step} in {name} warns:\n{err}");
    }
    let lib = std::fs::read_to_string(dir.join("src/lib.rs")).expect("src/lib.rs");
    let _ = std::fs::remove_dir_all(&scratch);
    lib
}

#[test]
fn a_classifier_crate_builds_without_warnings() {
    let lib = new_and_build("pump-fw", &["--spec", "samples/pump_health.sinew"]);
    assert!(lib.contains("pub fn decide(params: &Params"), "{lib}");
    assert!(lib.contains("#![no_std]") && lib.contains("#![forbid(unsafe_code)]"));
}

#[test]
fn a_regressor_crate_builds_without_warnings() {
    let lib = new_and_build("humidity", &["--spec", "samples/greenhouse_humidity.sinew"]);
    assert!(lib.contains("pub fn predict(params: &Params"), "{lib}");
    assert!(!lib.contains("Class,"), "a regressor has no Class:\n{lib}");
}

#[test]
fn a_crate_with_baked_weights_builds_without_warnings() {
    let dir = scratch("new-firmware", "weights-file");
    let w = dir.join("w.json");
    let w_arg = w.to_string_lossy().into_owned();
    let o = sinew(&[
        "initial-weights",
        "samples/pump_health.sinew",
        "-o",
        w_arg.as_str(),
    ]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let lib = new_and_build(
        "pump-trained",
        &["--spec", "samples/pump_health.sinew", "--weights", &w_arg],
    );
    assert!(lib.contains("TRAINED.classify(reading)"), "{lib}");
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn the_registry_form_and_a_chosen_checkout() {
    let scratch = scratch("new-firmware", "deps");
    let manifest = |name: &str, extra: &[&str]| {
        let dir = scratch.join(name);
        let d = dir.to_string_lossy().into_owned();
        let mut args = vec![
            "new-firmware",
            d.as_str(),
            "--spec",
            "samples/valve_gate.sinew",
        ];
        args.extend_from_slice(extra);
        let o = sinew(&args);
        assert_eq!(o.status.code(), Some(0), "{}", text(&o));
        std::fs::read_to_string(dir.join("Cargo.toml")).expect("Cargo.toml")
    };
    let registry = manifest("reg", &["--registry"]);
    assert!(
        registry.contains("\nsinew-runtime = \"0.1\"\n"),
        "{registry}"
    );
    assert!(
        registry.contains("\nsinew = { version = \"0.1\", default-features = false }\n"),
        "{registry}"
    );
    let chosen = manifest("chosen", &["--sinew-path", "."]);
    let compiler = root().canonicalize().unwrap().join("compiler");
    assert!(
        chosen.contains(&compiler.display().to_string().replace('\\', "\\\\")),
        "{chosen}"
    );
    // `--registry` and `--sinew-path` exclude each other (a usage error, as clap reports it).
    let d = scratch.join("both").to_string_lossy().into_owned();
    let o = sinew(&[
        "new-firmware",
        &d,
        "--spec",
        "samples/valve_gate.sinew",
        "--registry",
        "--sinew-path",
        ".",
    ]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(!scratch.join("both").exists());
    let _ = std::fs::remove_dir_all(&scratch);
}

#[test]
fn refusals_write_nothing() {
    let scratch = scratch("new-firmware", "refusals");

    // A folder that is not empty: exit status 2 (usage), one line, the folder untouched.
    let full = scratch.join("full");
    std::fs::create_dir_all(&full).unwrap();
    std::fs::write(full.join("notes.txt"), "mine").unwrap();
    let d = full.to_string_lossy().into_owned();
    let o = sinew(&["new-firmware", &d, "--spec", "samples/pump_health.sinew"]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(err.contains("exists and is not empty"), "{err}");
    assert_eq!(files(&full), ["notes.txt"]);

    // A spec with errors: its diagnostics as `check` renders them, exit status 1, no folder.
    let bad = scratch.join("bad.sinew");
    std::fs::write(
        &bad,
        "model door\ninput x 0 unscaled\noutput y 1 sigmoid\nloss cross_entropy\n",
    )
    .unwrap();
    let b = bad.to_string_lossy().into_owned();
    let check = sinew(&["check", &b]);
    let target = scratch.join("from-bad");
    let d = target.to_string_lossy().into_owned();
    let o = sinew(&["new-firmware", &d, "--spec", &b]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    let err = String::from_utf8_lossy(&o.stderr);
    let diagnostics = String::from_utf8_lossy(&check.stderr);
    let first = diagnostics.lines().next().unwrap_or("");
    assert!(first.starts_with("error[S0401]"), "{diagnostics}");
    assert!(err.contains(first), "{err}");
    assert!(err.contains("nothing was written"), "{err}");
    assert!(!target.exists());

    // A spec with errors into an empty folder: the folder stays empty.
    let empty = scratch.join("empty");
    std::fs::create_dir_all(&empty).unwrap();
    let d = empty.to_string_lossy().into_owned();
    let o = sinew(&["new-firmware", &d, "--spec", &b]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(files(&empty).is_empty());

    // Weights that do not fit the spec: the weights error, nothing written.
    let wrong = scratch.join("wrong.json");
    let w = wrong.to_string_lossy().into_owned();
    let o = sinew(&["initial-weights", "samples/valve_gate.sinew", "-o", &w]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let target = scratch.join("wrong-weights");
    let d = target.to_string_lossy().into_owned();
    let o = sinew(&[
        "new-firmware",
        &d,
        "--spec",
        "samples/pump_health.sinew",
        "--weights",
        &w,
    ]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(!target.exists());

    // A `--sinew-path` that holds no checkout: exit status 2, nothing written.
    let target = scratch.join("no-checkout");
    let d = target.to_string_lossy().into_owned();
    let o = sinew(&[
        "new-firmware",
        &d,
        "--spec",
        "samples/pump_health.sinew",
        "--sinew-path",
        "samples",
    ]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(String::from_utf8_lossy(&o.stderr).contains("is not a sinew checkout"));
    assert!(!target.exists());
    let _ = std::fs::remove_dir_all(&scratch);
}
