//! Device weight blobs on the workstation: what `sinew pack` writes and what a device decodes.
//!
//! The layout (documented in `grammar/REFERENCE.md`, section "Device weight blob") is defined
//! once, by the constants of [`sinew_runtime::blob`], which this module re-exports and writes
//! with its own encoder; the device side decodes with the runtime's [`Values`] and writes with
//! the runtime's `Writer`, so the two encoders check each other byte for byte in the tests.
//!
//! The values, in order: per layer its weights row-major (row `j` holds the weights into unit
//! `j`) then its biases, layer by layer; then, for a model whose input is declared `standardize`,
//! the input mean and the input std. This is the field order of the generated `Params`.
//!
//! # Examples
//!
//! ```
//! use sinew::pack;
//!
//! let spec = "model door\nscalar f32\ninput x 2\noutput y 1 sigmoid\nloss cross_entropy\n";
//! let model = sinew::check_source(spec).model.expect("a valid spec");
//! let weights = sinew::workflow::init(&model, None);
//! let blob = pack::encode(&model, &weights).expect("weights fit the model");
//! assert_eq!(blob.len(), pack::blob_len(&model));
//! assert_eq!(&blob[..4], b"SNWB");
//! assert_eq!(pack::decode(&model, &blob).expect("a valid blob"), pack::values(&weights));
//! ```

use crate::fsutil;
use crate::ir::{Model, Scalar};
use crate::weights::{Weights, WeightsError};
pub use sinew_runtime::blob::{
    blob_bytes, crc32, offset, BlobError, Header, ScalarKind, Values, CHECKSUM_BYTES, HEADER_BYTES,
    MAGIC, VERSION,
};
use std::fmt;
use std::path::{Path, PathBuf};

/// The blob's scalar kind for a model's scalar type.
pub fn scalar_kind(scalar: Scalar) -> ScalarKind {
    match scalar {
        Scalar::F32 => ScalarKind::F32,
        Scalar::F64 => ScalarKind::F64,
    }
}

/// How many values a blob of `model` holds: every parameter, plus the input mean and std with
/// `standardize`.
pub fn value_count(model: &Model) -> usize {
    let scaling = if model.input.standardize {
        2 * model.input.width
    } else {
        0
    };
    model.parameters() + scaling
}

/// Bytes of a blob of `model` (the generated `Params::BLOB_BYTES`).
pub fn blob_len(model: &Model) -> usize {
    blob_bytes(scalar_kind(model.scalar), value_count(model))
}

/// The values of `weights` in blob order, as stored in the weights file (`f64`).
pub fn values(weights: &Weights) -> Vec<f64> {
    let mut v = Vec::new();
    for l in weights.layers_flat() {
        v.extend(l.weights);
        v.extend(l.bias);
    }
    if let Some(s) = &weights.standardization {
        v.extend(&s.mean);
        v.extend(&s.std);
    }
    v
}

/// Why a blob could not be made or written.
#[derive(Debug)]
pub enum PackError {
    /// The weights do not fit the spec (the weights error says how).
    Weights(WeightsError),
    /// The model has more values than the 32-bit count field holds.
    TooManyValues {
        /// The model's value count.
        count: usize,
    },
    /// The blob file (or its folder) could not be written.
    Io {
        /// The file or folder.
        path: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
}

impl fmt::Display for PackError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            PackError::Weights(e) => write!(f, "{e}"),
            PackError::TooManyValues { count } => write!(
                f,
                "error: the model has {count} values, a blob holds at most {}",
                u32::MAX
            ),
            PackError::Io { path, source } => {
                write!(f, "error: cannot write {}: {source}", path.display())
            }
        }
    }
}

impl std::error::Error for PackError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            PackError::Weights(e) => Some(e),
            PackError::Io { source, .. } => Some(source),
            PackError::TooManyValues { .. } => None,
        }
    }
}

/// The blob of `weights` for `model`: checks that the weights fit the model
/// ([`Weights::check_against`]), then writes the header, every value little-endian in the
/// model's scalar type, and the CRC-32 of everything before it.
pub fn encode(model: &Model, weights: &Weights) -> Result<Vec<u8>, PackError> {
    weights.check_against(model).map_err(PackError::Weights)?;
    let vals = values(weights);
    let count =
        u32::try_from(vals.len()).map_err(|_| PackError::TooManyValues { count: vals.len() })?;
    let kind = scalar_kind(model.scalar);
    let mut out = Vec::with_capacity(blob_bytes(kind, vals.len()));
    out.extend_from_slice(&MAGIC);
    out.extend_from_slice(&VERSION.to_le_bytes());
    out.push(kind.code());
    out.push(0);
    out.extend_from_slice(&model.fingerprint().to_le_bytes());
    out.extend_from_slice(&count.to_le_bytes());
    debug_assert_eq!(out.len(), offset::VALUES);
    for v in vals {
        match kind {
            // An f32 weights file holds exact widenings of f32 values: `as` recovers them.
            ScalarKind::F32 => out.extend_from_slice(&(v as f32).to_le_bytes()),
            ScalarKind::F64 => out.extend_from_slice(&v.to_le_bytes()),
        }
    }
    let crc = crc32(&out);
    out.extend_from_slice(&crc.to_le_bytes());
    Ok(out)
}

/// Decodes a blob of `model` with every check the device makes ([`Values::open`]); returns the
/// values in blob order, widened to `f64`.
pub fn decode(model: &Model, bytes: &[u8]) -> Result<Vec<f64>, BlobError> {
    let n = value_count(model);
    let fp = model.fingerprint();
    match model.scalar {
        Scalar::F32 => {
            let mut v = vec![0.0f32; n];
            Values::<f32>::open(bytes, fp, n)?.read_into(&mut v);
            Ok(v.into_iter().map(f64::from).collect())
        }
        Scalar::F64 => {
            let mut v = vec![0.0f64; n];
            Values::<f64>::open(bytes, fp, n)?.read_into(&mut v);
            Ok(v)
        }
    }
}

impl PackError {
    /// The exit status of `sinew pack` failing with this error: [`ExitStatus::Spec`] for
    /// weights that do not fit the spec or too many values, [`ExitStatus::Usage`] for I/O.
    pub fn exit_status(&self) -> crate::code::ExitStatus {
        match self {
            PackError::Io { .. } => crate::code::ExitStatus::Usage,
            PackError::Weights(_) | PackError::TooManyValues { .. } => {
                crate::code::ExitStatus::Spec
            }
        }
    }
}

/// Writes `bytes` to `path` atomically ([`fsutil::write_atomic`]), creating its folder first.
pub fn write(path: &Path, bytes: &[u8]) -> Result<(), PackError> {
    if let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty()) {
        std::fs::create_dir_all(dir).map_err(|source| PackError::Io {
            path: dir.to_path_buf(),
            source,
        })?;
    }
    fsutil::write_atomic(path, bytes).map_err(|source| PackError::Io {
        path: path.to_path_buf(),
        source,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn model(spec: &str) -> Model {
        crate::check_source(spec).model.expect("spec checks")
    }

    const F32_STD: &str = "model gauge\nscalar f32\ninput x 3 standardize\nlayer h 2 tanh\noutput y 1 identity\nloss squared_error\n";
    const F64: &str = "model latch\nscalar f64\ninput x 2\nlayer h 3 tanh\noutput y 1 sigmoid\nloss cross_entropy\n";

    #[test]
    fn counts_and_lengths() {
        let m = model(F32_STD);
        // 3*2 + 2 + 2*1 + 1 = 11 parameters, plus mean and std of 3 features.
        assert_eq!(value_count(&m), 11 + 6);
        assert_eq!(blob_len(&m), 24 + 17 * 4);
        let m = model(F64);
        assert_eq!(value_count(&m), 2 * 3 + 3 + 3 + 1);
        assert_eq!(blob_len(&m), 24 + 13 * 8);
    }

    #[test]
    #[cfg(feature = "train")]
    fn encode_then_decode_gives_the_values_back() {
        for spec in [F32_STD, F64] {
            let m = model(spec);
            let mut w = crate::workflow::init(&m, Some(5));
            if let Some(s) = &mut w.standardization {
                s.mean = vec![-1.5, 0.0, 2.25];
                s.std = vec![0.5, 1.0, 3.0];
            }
            let blob = encode(&m, &w).unwrap();
            assert_eq!(blob.len(), blob_len(&m));
            let h = Header::parse(&blob).unwrap();
            assert_eq!(h.fingerprint, m.fingerprint());
            assert_eq!(h.kind, scalar_kind(m.scalar));
            let back = decode(&m, &blob).unwrap();
            let want = values(&w);
            assert_eq!(back.len(), want.len());
            for (a, b) in back.iter().zip(&want) {
                assert_eq!(a.to_bits(), b.to_bits());
            }
        }
    }

    #[test]
    #[cfg(feature = "train")]
    fn weights_of_another_shape_are_refused() {
        let w = crate::workflow::init(&model(F64), None);
        // Another model's file is named as such first.
        match encode(&model(F32_STD), &w) {
            Err(PackError::Weights(e)) => assert_eq!(e.code, "F07"),
            other => panic!("unexpected {other:?}"),
        }
        // The same model name with another scalar: the scalar is the first difference.
        let renamed = F32_STD.replace("model gauge", "model latch");
        match encode(&model(&renamed), &w) {
            Err(PackError::Weights(e)) => assert_eq!(e.code, "F11"),
            other => panic!("unexpected {other:?}"),
        }
    }

    #[test]
    fn write_creates_the_folder() {
        let dir = std::env::temp_dir().join(format!("sinew-pack-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&dir);
        let path = dir.join("nested/model.bin");
        write(&path, b"abc").unwrap();
        assert_eq!(std::fs::read(&path).unwrap(), b"abc");
        std::fs::remove_dir_all(&dir).unwrap();
    }
}
