//! What the device tests (`tests/tests/device.rs`, `tests/tests/panic_free.rs`) ask of the
//! machine's Rust toolchain, and the clean environment of the cargo builds they start.

use std::format;
use std::path::PathBuf;
use std::process::{Command, Stdio};
use std::string::String;
use std::vec::Vec;

/// The sysroot of `toolchain` (the default one with `None`) has the standard library of
/// `target`.
pub fn has_target(toolchain: Option<&str>, target: &str) -> bool {
    let mut c = Command::new("rustc");
    if let Some(t) = toolchain {
        c.arg(format!("+{t}"));
    }
    let Ok(out) = c
        .args(["--print", "target-libdir", "--target", target])
        .stderr(Stdio::null())
        .output()
    else {
        return false;
    };
    let dir = PathBuf::from(String::from_utf8_lossy(&out.stdout).trim());
    out.status.success()
        && std::fs::read_dir(dir).is_ok_and(|mut d| {
            d.any(|e| e.is_ok_and(|e| e.file_name().to_string_lossy().starts_with("libcore-")))
        })
}

/// Removes from `c` every variable of the outer build (the test's own cargo run) that would leak
/// into a nested cargo build for a device.
pub fn isolate(c: &mut Command) {
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
        "RUSTDOC",
        "RUSTUP_TOOLCHAIN",
    ] {
        c.env_remove(v);
    }
}

/// The last `n` lines of `text`, in order.
pub fn tail(text: &str, n: usize) -> String {
    let lines: Vec<&str> = text.lines().collect();
    lines[lines.len().saturating_sub(n)..].join("\n")
}
