//! The spec files the test crates compile: the build script of `tests/` and the panic-freedom
//! proof (`tests/tests/panic_free.rs`) both read `samples/` and `tests/fixtures/` this way, so
//! they see the same models in the same order.

use std::path::{Path, PathBuf};
use std::vec::Vec;

/// Every `*.sinew` file directly in `dir`, sorted by path (so the order does not depend on the
/// file system).
pub fn specs_in(dir: &Path) -> std::io::Result<Vec<PathBuf>> {
    let mut v = Vec::new();
    for entry in std::fs::read_dir(dir)? {
        let p = entry?.path();
        if p.extension().is_some_and(|e| e == "sinew") {
            v.push(p);
        }
    }
    v.sort();
    Ok(v)
}
