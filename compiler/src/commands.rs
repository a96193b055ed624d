//! The library side of the `sinew` command: each function does one command's work and returns
//! data or a [`CommandError`], so the binary only parses arguments, calls these, prints and
//! exits with [`CommandError::exit_status`].

use crate::check::{check_source, Checked};
use crate::code::ExitStatus;
use crate::emit::{self, EmitOptions};
use crate::fsutil;
use crate::ir::Model;
use crate::pack::{self, PackError};
use crate::weights::{Weights, WeightsError};
use crate::workflow::WorkflowError;
use std::fmt;
use std::path::{Path, PathBuf};

/// Why a command failed. `Display` gives the message the command prints to stderr.
#[derive(Debug)]
pub enum CommandError {
    /// A spec file could not be read, or is not UTF-8 text.
    Read {
        /// The spec file.
        path: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
    /// A spec has errors; its diagnostics are in [`SpecFile::checked`] (no further message).
    Spec,
    /// A workflow failed (data, weights, training).
    Workflow(WorkflowError),
    /// A weights file could not be read, does not fit, or could not be written.
    Weights(WeightsError),
    /// A device blob could not be made or written.
    Pack(PackError),
    /// A folder for an output could not be created.
    CreateDir {
        /// The folder.
        path: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
    /// An output file could not be written.
    Write {
        /// The file.
        path: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
    /// An argument out of its range, or output that could not be made (JSON, a plot).
    Usage(String),
}

impl CommandError {
    /// The command's exit status; see [`ExitStatus`].
    pub fn exit_status(&self) -> ExitStatus {
        match self {
            CommandError::Spec => ExitStatus::Spec,
            CommandError::Workflow(e) => e.exit_status(),
            CommandError::Weights(e) => e.code.exit_status(),
            CommandError::Pack(e) => e.exit_status(),
            CommandError::Read { .. }
            | CommandError::CreateDir { .. }
            | CommandError::Write { .. }
            | CommandError::Usage(_) => ExitStatus::Usage,
        }
    }
}

impl fmt::Display for CommandError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            CommandError::Read { path, source } => {
                write!(f, "error: cannot read {}: {source}", path.display())
            }
            CommandError::Spec => Ok(()),
            CommandError::Workflow(e) => write!(f, "{e}"),
            CommandError::Weights(e) => write!(f, "{e}"),
            CommandError::Pack(e) => write!(f, "{e}"),
            CommandError::CreateDir { path, source } => {
                write!(f, "error: cannot create {}: {source}", path.display())
            }
            CommandError::Write { path, source } => {
                write!(f, "error: cannot write {}: {source}", path.display())
            }
            CommandError::Usage(message) => write!(f, "error: {message}"),
        }
    }
}

impl std::error::Error for CommandError {}

impl From<WorkflowError> for CommandError {
    fn from(e: WorkflowError) -> Self {
        CommandError::Workflow(e)
    }
}

impl From<WeightsError> for CommandError {
    fn from(e: WeightsError) -> Self {
        CommandError::Weights(e)
    }
}

impl From<PackError> for CommandError {
    fn from(e: PackError) -> Self {
        CommandError::Pack(e)
    }
}

/// A spec file as read and checked.
#[derive(Debug)]
pub struct SpecFile {
    /// The path as given, for messages.
    pub name: String,
    /// The text.
    pub src: String,
    /// The model and every diagnostic.
    pub checked: Checked,
}

impl SpecFile {
    /// Reads the spec at `path` as the build API does ([`fsutil::read_spec`]: at most
    /// [`fsutil::MAX_SPEC_BYTES`], strictly UTF-8) and checks it.
    pub fn read(path: &Path) -> Result<SpecFile, CommandError> {
        let src = fsutil::read_spec(path).map_err(|source| CommandError::Read {
            path: path.to_path_buf(),
            source,
        })?;
        let checked = check_source(&src);
        Ok(SpecFile {
            name: path.display().to_string(),
            src,
            checked,
        })
    }

    /// The model, or [`CommandError::Spec`] when the spec has errors.
    pub fn model(&self) -> Result<&Model, CommandError> {
        self.checked.model.as_ref().ok_or(CommandError::Spec)
    }
}

/// Creates the folder an output file goes into, as users expect of a command-line tool.
pub fn create_parent(path: &Path) -> Result<(), CommandError> {
    match path.parent() {
        Some(dir) if !dir.as_os_str().is_empty() => {
            std::fs::create_dir_all(dir).map_err(|source| CommandError::CreateDir {
                path: dir.to_path_buf(),
                source,
            })
        }
        _ => Ok(()),
    }
}

/// Saves a weights file ([`Weights::save`]), creating its folder first.
pub fn save_weights(w: &Weights, path: &Path) -> Result<(), CommandError> {
    create_parent(path)?;
    Ok(w.save(path)?)
}

/// Loads the weights at `path` checked against `model`, if a path is given.
pub fn load_weights(model: &Model, path: Option<&Path>) -> Result<Option<Weights>, CommandError> {
    Ok(path.map(|p| Weights::load_checked(p, model)).transpose()?)
}

/// The Rust module of `model` from the spec at `spec`, with the weights at `weights` baked in
/// as `TRAINED` when given, and layers below `unroll_below` weights unrolled.
pub fn emit(
    model: &Model,
    spec: &Path,
    weights: Option<&Path>,
    unroll_below: usize,
) -> Result<String, CommandError> {
    let options = EmitOptions {
        spec_name: spec
            .file_name()
            .map(|f| f.to_string_lossy().into_owned())
            .unwrap_or_else(|| spec.display().to_string()),
        unroll_below,
    };
    Ok(match weights {
        Some(path) => emit::generate_trained(&Weights::load_fitted(path, model)?, &options),
        None => emit::generate(model, &options),
    })
}

/// Writes `bytes` to `path` unless it already holds them ([`fsutil::write_if_changed`]),
/// creating its folder first.
pub fn write_output(path: &Path, bytes: &[u8]) -> Result<(), CommandError> {
    create_parent(path)?;
    fsutil::write_if_changed(path, bytes)
        .map(|_| ())
        .map_err(|source| CommandError::Write {
            path: path.to_path_buf(),
            source,
        })
}

/// A device blob as written by [`pack`].
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Packed {
    /// The blob's length in bytes.
    pub bytes: usize,
    /// The values it holds ([`pack::value_count`]).
    pub values: usize,
    /// Its CRC-32 (the trailing four bytes).
    pub crc32: u32,
}

/// Encodes the weights at `weights` for `model` as a device blob and writes it to `output`
/// (replaced atomically; its folder is created).
pub fn pack(model: &Model, weights: &Path, output: &Path) -> Result<Packed, CommandError> {
    let w = Weights::load_checked(weights, model)?;
    let blob = pack::encode(model, &w)?;
    pack::write(output, &blob)?;
    Ok(Packed {
        bytes: blob.len(),
        values: pack::value_count(model),
        crc32: pack::crc32(blob.get(..blob.len().saturating_sub(4)).unwrap_or(&[])),
    })
}

/// Refuses a validation fraction outside [0, 1).
pub fn check_split(split: f64) -> Result<(), CommandError> {
    if (0.0..1.0).contains(&split) {
        Ok(())
    } else {
        Err(CommandError::Usage(format!(
            "--split must be in [0, 1), found {split}"
        )))
    }
}

/// `value` as pretty JSON.
pub fn json<T: serde::Serialize + ?Sized>(value: &T) -> Result<String, CommandError> {
    serde_json::to_string_pretty(value)
        .map_err(|e| CommandError::Usage(format!("cannot encode JSON: {e}")))
}
