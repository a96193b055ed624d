//! Atomic file output shared by every writer (generated code, weights, blobs, plots), and the
//! bounded read of spec and weights files (data is read by [`crate::stream`]).
//!
//! A file is written to a temporary sibling, flushed to disk, then renamed over the target, so a
//! reader (or an interrupted run) sees either the old file or the complete new one, never a
//! truncated one. A run killed midway can leave its temporary file behind (named
//! `<file>.<pid>-<n>.tmp`); it never replaces the target.

use std::fs;
use std::io::{self, Read, Write};
use std::path::{Path, PathBuf};

/// The largest spec file that the build API and the `sinew` command read: 1 MiB. A spec is a
/// short text file; a larger one (a generator gone wrong, a wrong path) is refused after
/// reading at most one byte more than this, so it never fills memory.
pub const MAX_SPEC_BYTES: u64 = 1 << 20;

/// The largest weights file read: 1 GiB. The JSON of the largest model `check` accepts
/// (16 Mi parameters, at most 26 bytes each in the shortest round-trip form) fits in it.
pub const MAX_WEIGHTS_BYTES: u64 = 1 << 30;

/// Reads the whole file at `path` when it holds at most `limit` bytes. A longer file is refused
/// with an [`io::ErrorKind::InvalidData`] error saying so, after reading at most `limit + 1`
/// bytes of it (so a huge file, or an endless one such as a device, costs no more memory).
///
/// # Examples
/// ```
/// let dir = std::env::temp_dir().join(format!("sinew-doc-read-limited-{}", std::process::id()));
/// std::fs::create_dir_all(&dir).unwrap();
/// let path = dir.join("spec.sinew");
/// std::fs::write(&path, "model m\n").unwrap();
/// assert_eq!(sinew::fsutil::read_limited(&path, 8).unwrap(), b"model m\n");
/// let err = sinew::fsutil::read_limited(&path, 7).unwrap_err();
/// assert_eq!(err.to_string(), "the file is larger than 7 bytes");
/// # std::fs::remove_dir_all(dir).unwrap();
/// ```
pub fn read_limited(path: &Path, limit: u64) -> io::Result<Vec<u8>> {
    let mut bytes = Vec::new();
    fs::File::open(path)?
        .take(limit.saturating_add(1))
        .read_to_end(&mut bytes)?;
    if bytes.len() as u64 > limit {
        return Err(io::Error::new(
            io::ErrorKind::InvalidData,
            format!("the file is larger than {limit} bytes"),
        ));
    }
    Ok(bytes)
}

/// Reads a spec file as UTF-8 text, refusing one larger than [`MAX_SPEC_BYTES`] (see
/// [`read_limited`]) or one that is not UTF-8.
pub fn read_spec(path: &Path) -> io::Result<String> {
    let bytes = read_limited(path, MAX_SPEC_BYTES).map_err(|e| {
        if e.kind() == io::ErrorKind::InvalidData {
            io::Error::new(
                io::ErrorKind::InvalidData,
                format!("{e} (1 MiB), the limit for a spec file"),
            )
        } else {
            e
        }
    })?;
    String::from_utf8(bytes).map_err(|e| {
        io::Error::new(
            io::ErrorKind::InvalidData,
            format!(
                "the file is not UTF-8 text (invalid byte at offset {})",
                e.utf8_error().valid_up_to()
            ),
        )
    })
}

fn temp_sibling(path: &Path) -> io::Result<PathBuf> {
    let name = path.file_name().ok_or_else(|| {
        io::Error::new(
            io::ErrorKind::InvalidInput,
            "the output path has no file name",
        )
    })?;
    // Process id and a per-process counter: concurrent writers never share a temporary file.
    static NEXT: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(0);
    let n = NEXT.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
    let mut tmp = name.to_os_string();
    tmp.push(format!(".{}-{n}.tmp", std::process::id()));
    Ok(path.with_file_name(tmp))
}

/// Writes `bytes` to `path` atomically (temporary file in the same folder, fsync, rename).
/// On failure the previous content of `path`, if any, is left intact and no temporary file
/// remains.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> io::Result<()> {
    let tmp = temp_sibling(path)?;
    let result = (|| {
        let mut f = fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        drop(f);
        fs::rename(&tmp, path)
    })();
    if result.is_err() {
        let _ = fs::remove_file(&tmp);
    }
    result
}

/// Writes `bytes` to `path` atomically unless the file already holds exactly these bytes.
/// Returns whether the file was written. Leaving an unchanged file alone keeps its mtime, so
/// Cargo does not rebuild what includes it.
pub fn write_if_changed(path: &Path, bytes: &[u8]) -> io::Result<bool> {
    if let Ok(old) = fs::read(path) {
        if old == bytes {
            return Ok(false);
        }
    }
    write_atomic(path, bytes)?;
    Ok(true)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scratch(name: &str) -> PathBuf {
        let dir = std::env::temp_dir().join(format!("sinew-fsutil-{}-{name}", std::process::id()));
        let _ = fs::remove_dir_all(&dir);
        fs::create_dir_all(&dir).unwrap();
        dir
    }

    #[test]
    fn unchanged_content_is_not_rewritten() {
        let dir = scratch("unchanged");
        let p = dir.join("m.rs");
        assert!(write_if_changed(&p, b"abc").unwrap());
        assert!(!write_if_changed(&p, b"abc").unwrap());
        assert!(write_if_changed(&p, b"abcd").unwrap());
        assert_eq!(fs::read(&p).unwrap(), b"abcd");
        fs::remove_dir_all(dir).unwrap();
    }

    #[test]
    fn failed_write_keeps_old_file_and_leaves_no_temp() {
        let dir = scratch("fail");
        let p = dir.join("w.json");
        write_atomic(&p, b"old").unwrap();
        // Renaming a file over a non-empty directory fails on every platform we support.
        let blocker = dir.join("blocker");
        fs::create_dir_all(blocker.join("inner")).unwrap();
        assert!(write_atomic(&blocker, b"new").is_err());
        assert_eq!(fs::read(&p).unwrap(), b"old");
        let leftovers: Vec<_> = fs::read_dir(&dir)
            .unwrap()
            .filter_map(|e| e.ok())
            .filter(|e| e.file_name().to_string_lossy().ends_with(".tmp"))
            .collect();
        assert!(leftovers.is_empty(), "temporary files left: {leftovers:?}");
        fs::remove_dir_all(dir).unwrap();
    }
}
