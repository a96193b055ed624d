//! Atomic file output shared by every writer (generated code, weights, blobs, plots).
//!
//! A file is written to a temporary sibling, flushed to disk, then renamed over the target, so a
//! reader (or an interrupted run) sees either the old file or the complete new one, never a
//! truncated one.

use std::fs;
use std::io::{self, Write};
use std::path::{Path, PathBuf};

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
