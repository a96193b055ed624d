//! The contributor map cannot fall behind the code, and the README stays short.
//!
//! Rule (also stated at the top of `DEVELOPERS.md`): every module of `compiler/src` and
//! `runtime/src` is named in `DEVELOPERS.md` by its path from the repository root, in backticks:
//!
//! - a file `foo.rs` (module `foo`) as `` `compiler/src/foo.rs` ``, at any depth
//!   (`` `compiler/src/check/names.rs` ``, `` `runtime/src/linalg/across.rs` ``);
//! - a folder module `foo/mod.rs` (module `foo`) as its folder, `` `compiler/src/foo/` ``.
//!
//! `lib.rs` and `main.rs` (at any depth, e.g. the command's `cli/main.rs`) are crate roots, not
//! modules, and are skipped. Paths rather than bare module names, because bare names repeat
//! across the two crates (`optim`, `blob`, `batch`, `tests`): a path names exactly one file.
//!
//! The README limit is the one of issue 22: at most 25,000 bytes, so that it stays what a user
//! needs from clone to device; tables and method live in `bench/README.md`.

use std::fs;
use std::path::{Path, PathBuf};

/// The largest README, in bytes.
const README_MAX_BYTES: usize = 25_000;

/// The repository root: the compiler crate's folder joined with `..` (no absolute paths).
fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

/// Every `.rs` file below `dir`, as paths relative to the repository root with `/` separators,
/// sorted.
fn rust_files(root: &Path, rel: &str, out: &mut Vec<String>) {
    let dir = root.join(rel);
    let mut entries: Vec<_> = fs::read_dir(&dir)
        .unwrap_or_else(|e| panic!("cannot read {}: {e}", dir.display()))
        .map(|e| e.expect("a directory entry"))
        .collect();
    entries.sort_by_key(|e| e.file_name());
    for e in entries {
        let name = e.file_name().to_string_lossy().into_owned();
        let path = format!("{rel}/{name}");
        let kind = e.file_type().expect("a file type");
        if kind.is_dir() {
            rust_files(root, &path, out);
        } else if name.ends_with(".rs") {
            out.push(path);
        }
    }
}

/// A module and the path by which the map must name it.
struct Module {
    /// The module's name (`foo` for `foo.rs` and for `foo/mod.rs`).
    name: String,
    /// The file that holds it.
    file: String,
    /// What `DEVELOPERS.md` must contain, in backticks.
    named_as: String,
}

/// The modules of one crate's `src` folder (crate roots `lib.rs` and `main.rs` skipped).
fn modules(root: &Path, src: &str) -> Vec<Module> {
    let mut files = Vec::new();
    rust_files(root, src, &mut files);
    let mut out = Vec::new();
    for file in files {
        let (folder, base) = file.rsplit_once('/').expect("a path below src");
        if base == "lib.rs" || base == "main.rs" {
            continue;
        }
        let Some(stem) = base.strip_suffix(".rs") else {
            continue;
        };
        let (name, named_as) = if stem == "mod" {
            let name = folder.rsplit_once('/').map_or(folder, |(_, n)| n);
            (name.to_string(), format!("{folder}/"))
        } else {
            (stem.to_string(), file.clone())
        };
        out.push(Module {
            name,
            file,
            named_as,
        });
    }
    out
}

#[test]
fn the_map_names_every_module() {
    let root = root();
    let map = fs::read_to_string(root.join("DEVELOPERS.md")).expect("DEVELOPERS.md is readable");
    let mut all = modules(&root, "compiler/src");
    let runtime = modules(&root, "runtime/src");
    assert!(
        !all.is_empty() && !runtime.is_empty(),
        "found no module files: is the repository root {}?",
        root.display()
    );
    all.extend(runtime);
    let missing: Vec<String> = all
        .iter()
        .filter(|m| !map.contains(&format!("`{}`", m.named_as)))
        .map(|m| format!("  module `{}` ({}): write `{}`", m.name, m.file, m.named_as))
        .collect();
    assert!(
        missing.is_empty(),
        "DEVELOPERS.md does not name {} of {} modules (rule: the path in backticks, a folder \
         module as its folder with a trailing `/`):\n{}",
        missing.len(),
        all.len(),
        missing.join("\n")
    );
}

#[test]
fn the_readme_is_at_most_25000_bytes() {
    let readme = fs::read(root().join("README.md")).expect("README.md is readable");
    assert!(
        readme.len() <= README_MAX_BYTES,
        "README.md has {} bytes, more than {README_MAX_BYTES}: move tables and method to \
         bench/README.md, release notes to CHANGELOG.md",
        readme.len()
    );
}
