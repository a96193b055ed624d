//! Helpers shared by the integration tests that run the `sinew` binary or read the repository's
//! specs: the repository root, a fresh scratch folder per test, a checked sample model.
//!
//! Each test crate compiles its own copy and uses only some of these.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// The repository root (the compiler crate's parent).
pub fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

/// Runs the `sinew` binary with `args` from the repository root.
pub fn sinew(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_sinew"))
        .args(args)
        .current_dir(root())
        .output()
        .expect("the sinew binary runs")
}

/// Standard output then standard error, as text.
pub fn text(o: &Output) -> String {
    format!(
        "{}{}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    )
}

/// An empty folder under the system's temporary folder, unique to this process, `group` (the
/// test file) and `name` (the test).
pub fn scratch(group: &str, name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("sinew-{group}-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).expect("a scratch folder can be made");
    dir
}

/// The checked model of the spec at `spec` (relative to the repository root).
pub fn model(spec: &str) -> sinew::ir::Model {
    let src = std::fs::read_to_string(root().join(spec)).expect("the spec is readable");
    sinew::check_source(&src).model.expect("the spec checks")
}
