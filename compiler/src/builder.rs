//! The build API: compile spec files from a `build.rs` into Rust modules in `OUT_DIR`.
//!
//! ```no_run
//! // build.rs
//! fn main() -> Result<(), Box<dyn std::error::Error>> {
//!     sinew::Builder::new().spec("models/pump_health.sinew").compile()?;
//!     Ok(())
//! }
//! ```
//! ```ignore
//! // src/lib.rs
//! include!(concat!(env!("OUT_DIR"), "/pump_health.rs"));
//! ```
//!
//! For every spec, [`Builder::compile`] reads the file, checks it, renders its diagnostics
//! (warnings too) to stderr, fails with a [`BuildError`] naming the file and the error count if
//! there are errors, and otherwise generates `<model>.rs` into the output folder, rewriting it only
//! when its content changed (temporary file in the same folder, then rename), so Cargo does not
//! recompile the including crate for nothing.
//!
//! **Cargo watching.** For every input spec it prints `cargo:rerun-if-changed=<path>`. As soon
//! as a build script prints one such line, Cargo stops its default of rerunning the script when
//! any file of the package changes and reruns it only when a listed path (or the build script
//! itself) changes: list every other input your `build.rs` reads yourself. Turn the lines off with
//! [`Builder::cargo_metadata`] when calling the builder outside a build script.

use crate::diag::{self, Severity};
use crate::emit::{self, EmitOptions};
use crate::fsutil;
use crate::weights::Weights;
use std::fmt;
use std::path::{Component, Path, PathBuf};

/// One spec to compile, with everything that is per spec (a weights file to bake in joins the
/// path here, and `compile_one` turns it into `EmitOptions::weights`).
#[derive(Debug, Clone, PartialEq)]
struct SpecEntry {
    /// The spec file, as given.
    path: PathBuf,
    /// A weights file to bake in as `TRAINED`, if any.
    weights: Option<PathBuf>,
}

/// Compiles spec files into Rust modules; setters return `&mut Self`, in the style of
/// prost-build.
///
/// # Examples
///
/// ```no_run
/// let written = sinew::Builder::new()
///     .spec("models/pump_health.sinew")
///     .spec("models/valve_gate.sinew")
///     .out_dir("generated")
///     .compile()
///     .expect("specs compile");
/// assert_eq!(written.len(), 2);
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct Builder {
    specs: Vec<SpecEntry>,
    out_dir: Option<PathBuf>,
    unroll_below: usize,
    cargo_metadata: bool,
    cargo_warnings: bool,
    color: bool,
}

impl Default for Builder {
    /// Every default, in one place: no specs; the output folder is `OUT_DIR`; no unrolling
    /// (`unroll_below` 0); `cargo:rerun-if-changed` and `cargo:warning` lines printed;
    /// diagnostics without colour.
    fn default() -> Self {
        Builder {
            specs: Vec::new(),
            out_dir: None,
            unroll_below: 0,
            cargo_metadata: true,
            cargo_warnings: true,
            color: false,
        }
    }
}

impl Builder {
    /// A builder with the defaults of [`Builder::default`].
    pub fn new() -> Self {
        Self::default()
    }

    /// Adds a spec file to compile (relative paths are relative to the current folder, which for
    /// a build script is the package root).
    pub fn spec(&mut self, path: impl AsRef<Path>) -> &mut Self {
        self.specs.push(SpecEntry {
            path: path.as_ref().to_path_buf(),
            weights: None,
        });
        self
    }

    /// Adds a spec file together with a weights file (the JSON form written by `sinew train`);
    /// the generated module then holds the parameters as `pub static TRAINED: Params`, exact to
    /// the bit. The weights are checked against the spec (fingerprint, layers, shapes) and a
    /// mismatch fails the build. Both files are watched by Cargo.
    ///
    /// # Examples
    ///
    /// ```no_run
    /// // build.rs: the generated `pump_health.rs` then holds `pub static TRAINED: Params`.
    /// sinew::Builder::new()
    ///     .spec_with_weights("models/pump_health.sinew", "models/pump_health.weights.json")
    ///     .compile()
    ///     .expect("the spec compiles and the weights fit it");
    /// ```
    pub fn spec_with_weights(
        &mut self,
        path: impl AsRef<Path>,
        weights: impl AsRef<Path>,
    ) -> &mut Self {
        self.specs.push(SpecEntry {
            path: path.as_ref().to_path_buf(),
            weights: Some(weights.as_ref().to_path_buf()),
        });
        self
    }

    /// Adds several spec files.
    ///
    /// # Examples
    ///
    /// ```no_run
    /// // build.rs: every spec in `models/`, in a stable order.
    /// let mut specs: Vec<_> = std::fs::read_dir("models")
    ///     .expect("a models folder")
    ///     .map(|e| e.expect("a folder entry").path())
    ///     .filter(|p| p.extension().is_some_and(|x| x == "sinew"))
    ///     .collect();
    /// specs.sort();
    /// sinew::Builder::new().specs(&specs).compile().expect("specs compile");
    /// ```
    pub fn specs<P: AsRef<Path>>(&mut self, paths: impl IntoIterator<Item = P>) -> &mut Self {
        for p in paths {
            self.spec(p);
        }
        self
    }

    /// Writes the generated files into `path` instead of `OUT_DIR` (created if missing).
    pub fn out_dir(&mut self, path: impl AsRef<Path>) -> &mut Self {
        self.out_dir = Some(path.as_ref().to_path_buf());
        self
    }

    /// Unrolls the matrix kernels of every layer with `width * fan_in` below `n` into
    /// straight-line code (see [`EmitOptions::unroll_below`]); 0 never unrolls.
    pub fn unroll_below(&mut self, n: usize) -> &mut Self {
        self.unroll_below = n;
        self
    }

    /// Whether to print `cargo:rerun-if-changed` lines (default true). Turn off only outside a
    /// build script; this also turns off the `cargo:warning` lines.
    pub fn cargo_metadata(&mut self, on: bool) -> &mut Self {
        self.cargo_metadata = on;
        self
    }

    /// Whether to repeat each warning of a spec as a one-line `cargo:warning`, which Cargo shows
    /// on every build of the package (default true). The full rendering goes to stderr either way.
    pub fn cargo_warnings(&mut self, on: bool) -> &mut Self {
        self.cargo_warnings = on;
        self
    }

    /// Whether to colour the diagnostics written to stderr (default false: Cargo captures a
    /// build script's stderr).
    pub fn color(&mut self, on: bool) -> &mut Self {
        self.color = on;
        self
    }

    /// Compiles every spec, in the order given. Returns the path of every generated file,
    /// whether it was rewritten or already up to date.
    ///
    /// Stops at the first spec that fails; the diagnostics of every spec compiled so far have been
    /// written to stderr.
    ///
    /// # Examples
    ///
    /// Outside a build script, into a folder of one's own:
    ///
    /// ```
    /// let dir = std::env::temp_dir().join(format!("sinew-doc-compile-{}", std::process::id()));
    /// std::fs::create_dir_all(&dir)?;
    /// let spec = dir.join("door.sinew");
    /// std::fs::write(
    ///     &spec,
    ///     "model door\ninput x 2\noutput y 1 sigmoid\nloss cross_entropy\n",
    /// )?;
    ///
    /// let out = dir.join("generated");
    /// let written = sinew::Builder::new()
    ///     .spec(&spec)
    ///     .out_dir(&out)
    ///     .cargo_metadata(false)
    ///     .compile()?;
    /// assert_eq!(written, [out.join("door.rs")]);
    /// assert!(std::fs::read_to_string(&written[0])?.contains("FINGERPRINT"));
    ///
    /// // A spec with errors renders its diagnostics to stderr and fails the build.
    /// std::fs::write(
    ///     &spec,
    ///     "model door\ninput x 0\noutput y 1 sigmoid\nloss cross_entropy\n",
    /// )?;
    /// let err = sinew::Builder::new()
    ///     .spec(&spec)
    ///     .out_dir(&out)
    ///     .cargo_metadata(false)
    ///     .compile()
    ///     .unwrap_err();
    /// assert!(matches!(err, sinew::builder::BuildError::Spec { errors: 1, .. }));
    /// std::fs::remove_dir_all(&dir)?;
    /// # Ok::<(), Box<dyn std::error::Error>>(())
    /// ```
    pub fn compile(&self) -> Result<Vec<PathBuf>, BuildError> {
        self.compile_inner()
    }

    /// [`Builder::compile`] for a `build.rs`: on failure, prints the error as one line after the
    /// diagnostics already rendered and ends the build script with exit status 1, so the build
    /// fails with clean messages and no panic message or backtrace.
    ///
    /// ```no_run
    /// // in build.rs, `fn main`:
    /// sinew::Builder::new()
    ///     .spec_with_weights("models/pump_health.sinew", "models/pump_health.json")
    ///     .compile_or_exit();
    /// ```
    pub fn compile_or_exit(&self) -> Vec<PathBuf> {
        match self.compile_inner() {
            Ok(files) => files,
            Err(e) => {
                eprintln!("error: {e}");
                std::process::exit(1)
            }
        }
    }

    fn compile_inner(&self) -> Result<Vec<PathBuf>, BuildError> {
        let out_dir = match &self.out_dir {
            Some(d) => d.clone(),
            None => std::env::var_os("OUT_DIR")
                .map(PathBuf::from)
                .ok_or(BuildError::NoOutDir)?,
        };
        std::fs::create_dir_all(&out_dir).map_err(|source| BuildError::Write {
            path: out_dir.clone(),
            source,
        })?;
        if self.cargo_metadata {
            for entry in &self.specs {
                println!("cargo:rerun-if-changed={}", entry.path.display());
                if let Some(w) = &entry.weights {
                    println!("cargo:rerun-if-changed={}", w.display());
                }
            }
        }
        let mut written: Vec<(String, PathBuf, PathBuf)> = Vec::new();
        for entry in &self.specs {
            let out = self.compile_one(entry, &out_dir, &written)?;
            written.push(out);
        }
        Ok(written.into_iter().map(|(_, _, out)| out).collect())
    }

    /// Compiles one spec; returns (model name, spec path, output path).
    fn compile_one(
        &self,
        entry: &SpecEntry,
        out_dir: &Path,
        done: &[(String, PathBuf, PathBuf)],
    ) -> Result<(String, PathBuf, PathBuf), BuildError> {
        let path = &entry.path;
        let src = fsutil::read_spec(path).map_err(|source| BuildError::Read {
            path: path.clone(),
            source,
        })?;
        let checked = crate::check_source(&src);
        let shown = path.display().to_string();
        if !checked.diagnostics.is_empty() {
            let text = diag::render(&shown, &src, &checked.diagnostics, self.color);
            // `eprint!`, not a raw stderr handle, so that a test harness captures it.
            eprint!("{text}");
            if self.cargo_metadata && self.cargo_warnings {
                for d in checked
                    .diagnostics
                    .iter()
                    .filter(|d| d.severity == Severity::Warning)
                {
                    println!("cargo:warning={shown}: warning[{}]: {}", d.code, d.message);
                }
            }
        }
        let errors = checked.diagnostics.iter().filter(|d| d.is_error()).count();
        let model = match checked.model {
            Some(m) if errors == 0 => m,
            _ => {
                return Err(BuildError::Spec {
                    path: path.clone(),
                    errors: errors.max(1),
                })
            }
        };
        let file_name = output_file_name(&model.name).ok_or_else(|| BuildError::OutputName {
            spec: path.clone(),
            name: model.name.clone(),
        })?;
        if let Some((_, first, _)) = done.iter().find(|(name, _, _)| *name == model.name) {
            return Err(BuildError::DuplicateModel {
                name: model.name.clone(),
                first: first.clone(),
                second: path.clone(),
            });
        }
        let options = EmitOptions {
            spec_name: spec_display_name(path),
            unroll_below: self.unroll_below,
        };
        let code = match &entry.weights {
            Some(w) => {
                let trained = Weights::load_fitted(w, &model).map_err(|e| {
                    // Rendered like a spec's diagnostics: file, code, message, hint.
                    eprintln!("{e}");
                    BuildError::Weights {
                        spec: path.clone(),
                        message: e.to_string(),
                    }
                })?;
                emit::generate_trained(&trained, &options)
            }
            None => emit::generate(&model, &options),
        };
        let out = out_dir.join(file_name);
        fsutil::write_if_changed(&out, code.as_bytes()).map_err(|source| BuildError::Write {
            path: out.clone(),
            source,
        })?;
        Ok((model.name, path.clone(), out))
    }
}

/// The spec's file name (last component) for the generated header.
fn spec_display_name(path: &Path) -> String {
    path.file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default()
}

/// `<name>.rs` when `name` is a plain lower_snake identifier, so that the file lands inside the
/// output folder; `None` for anything that could name another place (separators, `..`, an
/// absolute path, an empty name).
fn output_file_name(name: &str) -> Option<String> {
    let mut chars = name.chars();
    let first_ok = chars.next().is_some_and(|c| c.is_ascii_lowercase());
    let rest_ok = chars.all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_');
    let file = format!("{name}.rs");
    let mut components = Path::new(&file).components();
    let single =
        matches!(components.next(), Some(Component::Normal(_))) && components.next().is_none();
    (first_ok && rest_ok && single).then_some(file)
}

/// Why [`Builder::compile`] failed.
#[derive(Debug)]
pub enum BuildError {
    /// A weights file could not be read or does not fit its spec.
    Weights {
        /// The spec file.
        spec: PathBuf,
        /// What is wrong, with the weights file's name.
        message: String,
    },
    /// No output folder: `OUT_DIR` is unset (not in a build script) and none was set.
    NoOutDir,
    /// A spec file could not be read.
    Read {
        /// The spec file.
        path: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
    /// A spec has errors; they were rendered to stderr.
    Spec {
        /// The spec file.
        path: PathBuf,
        /// How many errors.
        errors: usize,
    },
    /// A model name would not make a file name inside the output folder.
    OutputName {
        /// The spec file.
        spec: PathBuf,
        /// The model name.
        name: String,
    },
    /// Two specs declare the same model, so both would write `<model>.rs`.
    DuplicateModel {
        /// The model name.
        name: String,
        /// The spec compiled first.
        first: PathBuf,
        /// The spec that repeats the name.
        second: PathBuf,
    },
    /// An output file (or the output folder) could not be written.
    Write {
        /// The file or folder.
        path: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
}

impl fmt::Display for BuildError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            BuildError::NoOutDir => {
                write!(
                    f,
                    "no output folder: OUT_DIR is not set (call `out_dir` outside a build script)"
                )
            }
            BuildError::Read { path, source } => {
                write!(f, "cannot read spec `{}`: {source}", path.display())
            }
            BuildError::Weights { spec, .. } => {
                write!(
                    f,
                    "the weights for spec `{}` do not fit it (diagnostic above)",
                    spec.display()
                )
            }
            BuildError::Spec { path, errors } => write!(
                f,
                "spec `{}` has {errors} error{} (diagnostics above)",
                path.display(),
                if *errors == 1 { "" } else { "s" }
            ),
            BuildError::OutputName { spec, name } => write!(
                f,
                "spec `{}`: model name `{name}` does not make a file name inside the output folder",
                spec.display()
            ),
            BuildError::DuplicateModel {
                name,
                first,
                second,
            } => write!(
                f,
                "model `{name}` is declared by both `{}` and `{}`",
                first.display(),
                second.display()
            ),
            BuildError::Write { path, source } => {
                write!(f, "cannot write `{}`: {source}", path.display())
            }
        }
    }
}

impl std::error::Error for BuildError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            BuildError::Read { source, .. } | BuildError::Write { source, .. } => Some(source),
            _ => None,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scratch(name: &str) -> PathBuf {
        let dir = std::env::temp_dir().join(format!("sinew-builder-{}-{name}", std::process::id()));
        let _ = std::fs::remove_dir_all(&dir);
        std::fs::create_dir_all(&dir).unwrap();
        dir
    }

    const SPEC: &str = "model door_latch\nscalar f64\ninput sensors 2\nlayer hidden 3 tanh\noutput open 1 sigmoid\nloss cross_entropy\n";

    #[test]
    fn output_names_stay_inside_the_folder() {
        assert_eq!(
            output_file_name("pump_health").as_deref(),
            Some("pump_health.rs")
        );
        for bad in [
            "", "..", "../x", "a/b", "/abs", "A", "a.b", "a\\b", "1a", "a b",
        ] {
            assert_eq!(output_file_name(bad), None, "{bad:?}");
        }
    }

    #[test]
    fn compiles_and_leaves_unchanged_output_alone() {
        let dir = scratch("unchanged");
        let spec = dir.join("door_latch.sinew");
        std::fs::write(&spec, SPEC).unwrap();
        let out = dir.join("out");
        let mut b = Builder::new();
        b.spec(&spec).out_dir(&out).cargo_metadata(false);
        let files = b.compile().unwrap();
        assert_eq!(files, [out.join("door_latch.rs")]);
        let text = std::fs::read_to_string(&files[0]).unwrap();
        assert!(text.starts_with("// Generated by sinew "));
        assert!(text.contains("from door_latch.sinew (fingerprint 0x"));
        let before = std::fs::metadata(&files[0]).unwrap().modified().unwrap();
        std::thread::sleep(std::time::Duration::from_millis(20));
        b.compile().unwrap();
        let after = std::fs::metadata(&files[0]).unwrap().modified().unwrap();
        assert_eq!(before, after);
        // No temporary file is left behind.
        let names: Vec<_> = std::fs::read_dir(&out)
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(names, ["door_latch.rs"]);
    }

    #[test]
    fn errors_name_the_file_and_count() {
        let dir = scratch("errors");
        let spec = dir.join("broken.sinew");
        std::fs::write(&spec, "model broken\ninput x 2\noutput y 1 softmax\n").unwrap();
        let err = Builder::new()
            .spec(&spec)
            .out_dir(dir.join("out"))
            .cargo_metadata(false)
            .compile()
            .unwrap_err();
        match &err {
            BuildError::Spec { path, errors } => {
                assert_eq!(path, &spec);
                assert_eq!(*errors, 2);
            }
            other => panic!("unexpected {other:?}"),
        }
        let text = err.to_string();
        assert!(
            text.contains("broken.sinew") && text.contains("has 2 errors"),
            "{text}"
        );
    }

    #[test]
    fn duplicate_models_and_missing_files_are_errors() {
        let dir = scratch("dup");
        let a = dir.join("a.sinew");
        let b = dir.join("b.sinew");
        std::fs::write(&a, SPEC).unwrap();
        std::fs::write(&b, SPEC).unwrap();
        let err = Builder::new()
            .specs([&a, &b])
            .out_dir(dir.join("out"))
            .cargo_metadata(false)
            .compile()
            .unwrap_err();
        assert!(matches!(err, BuildError::DuplicateModel { ref name, .. } if name == "door_latch"));
        let err = Builder::new()
            .spec(dir.join("missing.sinew"))
            .out_dir(dir.join("out"))
            .cargo_metadata(false)
            .compile()
            .unwrap_err();
        assert!(matches!(err, BuildError::Read { .. }));
        assert!(err.to_string().contains("missing.sinew"));
    }
}
