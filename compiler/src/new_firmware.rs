//! `sinew new-firmware`: a ready `no_std` firmware crate around one checked spec.
//!
//! The crate is the folder `DIR` with `Cargo.toml`, `build.rs` (the [`crate::Builder`] on the
//! copied spec), `src/lib.rs` (`#![no_std]`, `#![forbid(unsafe_code)]`, the generated module
//! and one function that uses it), `models/<model>.sinew` (and `models/<model>.json` with
//! weights) and `.gitignore`. The package name is `DIR`'s last component made a valid crate name
//! ([`package_name`]).
//!
//! The sinew dependency lines ([`Dependencies`]) are path dependencies on a sinew checkout (by
//! default the one this binary was built from, while it still exists) or the registry form.
//! Everything is decided and rendered before the first byte is written ([`Firmware::new`]); the
//! folder must not exist or be empty ([`check_target`]), so nothing is ever overwritten.

use crate::commands::CommandError;
use crate::ir::Model;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

/// Where the generated crate takes `sinew` and `sinew-runtime` from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Dependencies {
    /// Path dependencies on the checkout at this folder (it holds `compiler/` and `runtime/`).
    Checkout(PathBuf),
    /// The registry versions, `major.minor` of this build (`"0.1"`).
    Registry,
}

impl Dependencies {
    /// The checkout this binary was built from (the folder above the compiler package, fixed at
    /// compile time), when it still holds both packages; otherwise [`Dependencies::Registry`].
    pub fn of_this_build() -> Dependencies {
        let compiler = Path::new(env!("CARGO_MANIFEST_DIR"));
        match compiler.parent().map(Dependencies::checkout) {
            Some(Ok(d)) => d,
            _ => Dependencies::Registry,
        }
    }

    /// Path dependencies on the checkout `root`, made absolute; an error (usage) when `root`
    /// does not hold `compiler/Cargo.toml` and `runtime/Cargo.toml`.
    pub fn checkout(root: &Path) -> Result<Dependencies, CommandError> {
        let holds = |p: &str| root.join(p).join("Cargo.toml").is_file();
        if !(holds("compiler") && holds("runtime")) {
            return Err(CommandError::Usage(format!(
                "{} is not a sinew checkout (it needs compiler/Cargo.toml and runtime/Cargo.toml)",
                root.display()
            )));
        }
        let abs = root.canonicalize().map_err(|source| CommandError::Read {
            path: root.to_path_buf(),
            source,
        })?;
        Ok(Dependencies::Checkout(abs))
    }

    /// The `sinew-runtime` and `sinew` dependency values (right of `=`), in that order.
    fn values(&self) -> (String, String) {
        let version = env!("CARGO_PKG_VERSION");
        match self {
            Dependencies::Checkout(root) => (
                format!(
                    "{{ path = {}, version = \"{version}\" }}",
                    toml_string(&root.join("runtime").display().to_string())
                ),
                format!(
                    "{{ path = {}, version = \"{version}\", default-features = false }}",
                    toml_string(&root.join("compiler").display().to_string())
                ),
            ),
            Dependencies::Registry => {
                let short = registry_version();
                (
                    format!("\"{short}\""),
                    format!("{{ version = \"{short}\", default-features = false }}"),
                )
            }
        }
    }

    /// One line for the command's report: where the dependencies point.
    pub fn describe(&self) -> String {
        match self {
            Dependencies::Checkout(root) => format!("path dependencies on {}", root.display()),
            Dependencies::Registry => format!("registry version {}", registry_version()),
        }
    }
}

/// `major.minor` of this build's version: the registry requirement that accepts every
/// compatible release (`0.1` for `0.1.0`).
fn registry_version() -> String {
    let v = env!("CARGO_PKG_VERSION");
    let mut parts = v.split('.');
    match (parts.next(), parts.next()) {
        (Some(major), Some(minor)) => format!("{major}.{minor}"),
        _ => v.to_string(),
    }
}

/// `s` as a TOML basic string (quotes, backslashes and control characters escaped).
fn toml_string(s: &str) -> String {
    let mut out = String::from("\"");
    for c in s.chars() {
        match c {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            c if c.is_control() => {
                let _ = write!(out, "\\u{:04X}", u32::from(c));
            }
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

/// Names a package may not take: Rust keywords (the library's crate name would be one), the
/// built-in crates, and the two crates the firmware depends on.
const RESERVED: &[&str] = &[
    "abstract",
    "alloc",
    "as",
    "async",
    "await",
    "become",
    "box",
    "build",
    "break",
    "const",
    "continue",
    "core",
    "crate",
    "do",
    "dyn",
    "else",
    "enum",
    "extern",
    "false",
    "final",
    "fn",
    "for",
    "gen",
    "if",
    "impl",
    "in",
    "let",
    "loop",
    "macro",
    "match",
    "mod",
    "move",
    "mut",
    "override",
    "priv",
    "proc_macro",
    "pub",
    "ref",
    "return",
    "self",
    "sinew",
    "sinew_runtime",
    "static",
    "std",
    "struct",
    "super",
    "test",
    "trait",
    "true",
    "try",
    "type",
    "typeof",
    "unsafe",
    "unsized",
    "use",
    "virtual",
    "where",
    "while",
    "yield",
];

/// The package name for the folder `dir`: its last component in lower case, every character
/// other than ASCII letters, digits, `-` and `_` replaced by `-`, leading characters that are
/// not letters dropped (`firmware` when nothing is left), and `-firmware` appended to a reserved
/// name (a keyword, `std`, `core`, `sinew`, ...). An error (usage) when `dir` has no last
/// component (`/`, `..`).
///
/// ```
/// use sinew::new_firmware::package_name;
/// use std::path::Path;
/// assert_eq!(package_name(Path::new("boards/Pump Monitor")).unwrap(), "pump-monitor");
/// assert_eq!(package_name(Path::new("2nd_try")).unwrap(), "nd_try");
/// assert_eq!(package_name(Path::new("sinew")).unwrap(), "sinew-firmware");
/// ```
pub fn package_name(dir: &Path) -> Result<String, CommandError> {
    let abs = std::path::absolute(dir).unwrap_or_else(|_| dir.to_path_buf());
    let last = abs.file_name().ok_or_else(|| {
        CommandError::Usage(format!(
            "cannot name a package after {}: give a folder with a name",
            dir.display()
        ))
    })?;
    let mapped: String = last
        .to_string_lossy()
        .chars()
        .map(|c| match c {
            'a'..='z' | '0'..='9' | '-' | '_' => c,
            'A'..='Z' => c.to_ascii_lowercase(),
            _ => '-',
        })
        .collect();
    let name = mapped.trim_start_matches(|c: char| !c.is_ascii_lowercase());
    let name = if name.is_empty() { "firmware" } else { name };
    if RESERVED.contains(&name.replace('-', "_").as_str()) {
        return Ok(format!("{name}-firmware"));
    }
    Ok(name.to_string())
}

/// Refuses (usage) a target that exists and is not an empty folder: nothing may be overwritten.
pub fn check_target(dir: &Path) -> Result<(), CommandError> {
    if !dir.exists() {
        return Ok(());
    }
    let empty = std::fs::read_dir(dir).map(|mut d| d.next().is_none());
    match empty {
        Ok(true) => Ok(()),
        Ok(false) => Err(CommandError::Usage(format!(
            "{} exists and is not empty; nothing was written",
            dir.display()
        ))),
        Err(_) => Err(CommandError::Usage(format!(
            "{} exists and is not an empty folder; nothing was written",
            dir.display()
        ))),
    }
}

/// What the generated `src/lib.rs` exposes, chosen from the model.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Shape {
    /// The spec names classes: `decide` returns the generated `Class` and its probability.
    Classes,
    /// No class names (a regressor, or scores without names): `predict` returns the outputs.
    Outputs,
}

impl Shape {
    /// [`Shape::Classes`] when the model names its classes (the generated module then has a
    /// `Class` enum and `Params::classify`).
    pub fn of(model: &Model) -> Shape {
        if model.classes().is_some() {
            Shape::Classes
        } else {
            Shape::Outputs
        }
    }
}

/// The files of one firmware crate, rendered and not yet written.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Firmware {
    /// The package name.
    pub package: String,
    /// What `src/lib.rs` exposes.
    pub shape: Shape,
    /// Every file: its path relative to the crate folder (`/`-separated) and its bytes.
    pub files: Vec<(String, Vec<u8>)>,
}

/// The manifest. `{PACKAGE}`, `{RUST_VERSION}`, `{NOTE}`, `{RUNTIME}` and `{SINEW}` are filled in.
const CARGO_TOML: &str = r#"[package]
name = "{PACKAGE}"
version = "0.1.0"
edition = "2021"
rust-version = "{RUST_VERSION}"
publish = false

# {NOTE}
[dependencies]
sinew-runtime = {RUNTIME}

[build-dependencies]
# `default-features = false`: a build script needs none of the command-line dependencies.
sinew = {SINEW}

# A workspace of its own, so that the crate builds wherever its folder is; remove this table to
# make it a member of an enclosing workspace instead.
[workspace]
"#;

/// The note above the dependencies, for path dependencies.
const NOTE_CHECKOUT: &str = "The sinew crates from a checkout. To build this crate elsewhere, \
edit the two sinew lines:\n# the checkout's path, a git dependency, or the registry version once \
published\n# (`sinew-runtime = \"{SHORT}\"` and `sinew = { version = \"{SHORT}\", \
default-features = false }`).";

/// The note above the dependencies, for registry dependencies.
const NOTE_REGISTRY: &str = "The sinew crates from the registry. To use a checkout instead, \
edit the two sinew lines:\n# `{ path = \"CHECKOUT/runtime\" }` and \
`{ path = \"CHECKOUT/compiler\", default-features = false }`.";

/// The build script. `{MODEL}` and `{CALL}` are filled in.
const BUILD_RS: &str = r#"//! Generates the `{MODEL}` module into `OUT_DIR` from the spec in `models/`.

fn main() {
    // Prints `cargo:rerun-if-changed` for its inputs; on errors it renders the diagnostics and
    // fails the build with exit status 1.
    sinew::Builder::new()
        .{CALL}
        .compile_or_exit();
}
"#;

/// The library's head. `{MODEL}`, `{ORIGIN}` and `{ITEMS}` are filled in.
const LIB_HEAD: &str = r#"//! Firmware library around the `{MODEL}` network, made by `sinew new-firmware`.
//!
//! `build.rs` generates the network's module at build time from
//! {ORIGIN}.
//! The crate is `no_std`, allocates nothing and has no `unsafe`.

#![no_std]
#![forbid(unsafe_code)]

include!(concat!(env!("OUT_DIR"), "/{MODEL}.rs"));

pub use {MODEL}::{{ITEMS}};
"#;

/// `decide` with parameters passed in (a classifier without baked weights).
const DECIDE: &str = r#"
/// The most likely class of one raw reading and its probability, under `params`.
pub fn decide(params: &Params, reading: &[Scalar; INPUTS]) -> (Class, Scalar) {
    params.classify(reading)
}
"#;

/// `decide` with the baked weights.
const DECIDE_TRAINED: &str = r#"
/// The most likely class of one raw reading and its probability, under the baked weights.
pub fn decide(reading: &[Scalar; INPUTS]) -> (Class, Scalar) {
    TRAINED.classify(reading)
}
"#;

/// `predict` with parameters passed in (no class names, no baked weights).
const PREDICT: &str = r#"
/// The outputs for one raw reading, under `params`.
pub fn predict(params: &Params, reading: &[Scalar; INPUTS]) -> [Scalar; OUTPUTS] {
    params.predict(reading)
}
"#;

/// `predict` with the baked weights.
const PREDICT_TRAINED: &str = r#"
/// The outputs for one raw reading, under the baked weights.
pub fn predict(reading: &[Scalar; INPUTS]) -> [Scalar; OUTPUTS] {
    TRAINED.predict(reading)
}
"#;

/// `learn`, for every model; `{SAMPLES}` is filled in.
const LEARN: &str = r#"
/// One optimizer step of `trainer` over {SAMPLES}; returns the batch cost before the step.
pub fn learn(
    trainer: &mut Trainer,
    xs: &[[Scalar; INPUTS]],
    ys: &[[Scalar; OUTPUTS]],
) -> Scalar {
    trainer.step(xs, ys)
}
"#;

impl Firmware {
    /// Renders the crate for `model` (checked from `spec`, whose text is copied) with the
    /// weights file's bytes `weights` (already checked against the model) baked in when given.
    pub fn new(
        package: &str,
        model: &Model,
        spec: &str,
        weights: Option<&[u8]>,
        deps: &Dependencies,
    ) -> Firmware {
        let name = model.name();
        let shape = Shape::of(model);
        let spec_file = format!("models/{name}.sinew");
        let weights_file = format!("models/{name}.json");

        let short = registry_version();
        let note = match deps {
            Dependencies::Checkout(_) => NOTE_CHECKOUT,
            Dependencies::Registry => NOTE_REGISTRY,
        }
        .replace("{SHORT}", &short);
        let (runtime, sinew) = deps.values();
        let manifest = CARGO_TOML
            .replace("{PACKAGE}", package)
            .replace("{RUST_VERSION}", env!("CARGO_PKG_RUST_VERSION"))
            .replace("{NOTE}", &note)
            .replace("{RUNTIME}", &runtime)
            .replace("{SINEW}", &sinew);

        let call = match weights {
            None => format!("spec({spec_file:?})"),
            Some(_) => format!("spec_with_weights({spec_file:?}, {weights_file:?})"),
        };
        let build = BUILD_RS.replace("{MODEL}", name).replace("{CALL}", &call);

        let trained = weights.is_some();
        let mut items = vec!["Params", "Scalar", "Trainer", "INPUTS", "OUTPUTS"];
        if shape == Shape::Classes {
            items.insert(0, "Class");
        }
        if trained {
            items.push("TRAINED");
        }
        let origin = if trained {
            format!("`{spec_file}`,\n//! with the weights of `{weights_file}` baked in")
        } else {
            format!("`{spec_file}`")
        };
        let mut lib = LIB_HEAD
            .replace("{MODEL}", name)
            .replace("{ORIGIN}", &origin)
            .replace("{ITEMS}", &items.join(", "));
        lib.push_str(match (shape, trained) {
            (Shape::Classes, false) => DECIDE,
            (Shape::Classes, true) => DECIDE_TRAINED,
            (Shape::Outputs, false) => PREDICT,
            (Shape::Outputs, true) => PREDICT_TRAINED,
        });
        lib.push_str(&LEARN.replace(
            "{SAMPLES}",
            match shape {
                Shape::Classes => "labelled samples (`Class::target` gives a class's\n/// target)",
                Shape::Outputs => "samples with known targets",
            },
        ));

        let mut files = vec![
            ("Cargo.toml".to_string(), manifest.into_bytes()),
            ("build.rs".to_string(), build.into_bytes()),
            ("src/lib.rs".to_string(), lib.into_bytes()),
            (spec_file, spec.as_bytes().to_vec()),
            (".gitignore".to_string(), b"/target\n".to_vec()),
        ];
        if let Some(w) = weights {
            files.push((weights_file, w.to_vec()));
        }
        Firmware {
            package: package.to_string(),
            shape,
            files,
        }
    }

    /// Writes every file below `dir` (created with its parents), in order.
    pub fn write(&self, dir: &Path) -> Result<(), CommandError> {
        for (rel, bytes) in &self.files {
            let path = dir.join(rel);
            if let Some(parent) = path.parent() {
                std::fs::create_dir_all(parent).map_err(|source| CommandError::CreateDir {
                    path: parent.to_path_buf(),
                    source,
                })?;
            }
            std::fs::write(&path, bytes).map_err(|source| CommandError::Write { path, source })?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::check_source;

    fn model(src: &str) -> Model {
        check_source(src).model.expect("the spec checks")
    }

    const CLASSIFIER: &str = "model door\ninput x 2\noutput y 1 sigmoid classes shut, open\n\
                              loss cross_entropy\n";
    const REGRESSOR: &str = "model level\ninput x 2\noutput y 1 identity\nloss squared_error\n";

    fn text(f: &Firmware, rel: &str) -> String {
        let (_, bytes) = f.files.iter().find(|(p, _)| p == rel).expect(rel);
        String::from_utf8(bytes.clone()).expect("UTF-8")
    }

    #[test]
    fn package_names_are_valid_crate_names() {
        let name = |d: &str| package_name(Path::new(d)).expect(d);
        assert_eq!(name("fw"), "fw");
        assert_eq!(name("a/b/My.Board v2"), "my-board-v2");
        assert_eq!(name("fw/."), "fw");
        assert_eq!(name("__"), "firmware");
        assert_eq!(name("std"), "std-firmware");
        assert_eq!(name("sinew-runtime"), "sinew-runtime-firmware");
        assert_eq!(name("Fn"), "fn-firmware");
        assert!(package_name(Path::new("/")).is_err());
    }

    #[test]
    fn toml_strings_escape_quotes_and_backslashes() {
        assert_eq!(toml_string(r#"C:\a "b""#), r#""C:\\a \"b\"""#);
    }

    #[test]
    fn a_classifier_decides_with_its_classes() {
        let f = Firmware::new(
            "door-fw",
            &model(CLASSIFIER),
            CLASSIFIER,
            None,
            &Dependencies::Registry,
        );
        assert_eq!(f.shape, Shape::Classes);
        let lib = text(&f, "src/lib.rs");
        assert!(lib.contains("pub use door::{Class, Params, Scalar, Trainer, INPUTS, OUTPUTS};"));
        assert!(lib.contains("pub fn decide(params: &Params"));
        assert!(!lib.contains("TRAINED"));
        assert!(text(&f, "build.rs").contains(".spec(\"models/door.sinew\")"));
        assert_eq!(text(&f, "models/door.sinew"), CLASSIFIER);
        let manifest = text(&f, "Cargo.toml");
        assert!(manifest.contains("name = \"door-fw\""));
        assert!(manifest.contains("sinew-runtime = \"0.1\"\n"));
        assert!(manifest.contains("sinew = { version = \"0.1\", default-features = false }\n"));
    }

    #[test]
    fn a_regressor_with_weights_predicts_with_them() {
        let f = Firmware::new(
            "level",
            &model(REGRESSOR),
            REGRESSOR,
            Some(b"{}"),
            &Dependencies::Checkout(PathBuf::from("/opt/sinew")),
        );
        assert_eq!(f.shape, Shape::Outputs);
        let lib = text(&f, "src/lib.rs");
        assert!(lib.contains("pub use level::{Params, Scalar, Trainer, INPUTS, OUTPUTS, TRAINED};"));
        assert!(lib.contains("TRAINED.predict(reading)"));
        assert!(!lib.contains("Class"));
        assert!(text(&f, "build.rs")
            .contains(".spec_with_weights(\"models/level.sinew\", \"models/level.json\")"));
        assert_eq!(text(&f, "models/level.json"), "{}");
        let manifest = text(&f, "Cargo.toml");
        let runtime = Path::new("/opt/sinew")
            .join("runtime")
            .display()
            .to_string();
        assert!(manifest.contains(&format!(
            "sinew-runtime = {{ path = {}, version = \"{}\" }}",
            toml_string(&runtime),
            env!("CARGO_PKG_VERSION")
        )));
    }

    #[test]
    fn this_build_points_at_its_checkout() {
        // The tests run from a checkout, which holds both packages.
        let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
        assert_eq!(
            Dependencies::of_this_build(),
            Dependencies::checkout(&root).expect("a checkout")
        );
        assert!(Dependencies::checkout(&root.join("compiler")).is_err());
    }
}
