//! `samples/firmware` works as a template: a copy of the folder, put anywhere and with only its
//! two sinew dependency lines edited, builds; and its spec never drifts from
//! `samples/pump_health.sinew`.
//!
//! The nested build runs outside the workspace (in the system's temporary folder) in the target
//! folder `<target>/tmp/template-check`, shared with `compiler/tests/new_firmware.rs`, with the
//! workspace's `Cargo.lock` (copied in) and `--offline`.

use sinew_harness::toolchain;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

/// The repository root (this crate's parent).
fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

/// Copies the files of `from` into `to` (created), recursively, leaving out `target`.
fn copy_tree(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).expect("create the copy's folder");
    for e in std::fs::read_dir(from)
        .expect("read the template")
        .flatten()
    {
        let (src, dst) = (e.path(), to.join(e.file_name()));
        if src.is_dir() {
            if e.file_name() != "target" {
                copy_tree(&src, &dst);
            }
        } else {
            std::fs::copy(&src, &dst).expect("copy a template file");
        }
    }
}

#[test]
fn the_firmware_spec_is_the_sample_spec() {
    let sample = std::fs::read(root().join("samples/pump_health.sinew")).expect("the sample");
    let copy = std::fs::read(root().join("samples/firmware/models/pump_health.sinew"))
        .expect("the firmware's copy");
    assert!(
        sample == copy,
        "samples/firmware/models/pump_health.sinew differs from samples/pump_health.sinew: \
         copy the sample over it"
    );
}

#[test]
fn a_copy_of_the_firmware_sample_builds_with_only_its_dependency_lines_edited() {
    let dir = std::env::temp_dir().join(format!("sinew-template-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    let copy = dir.join("my-firmware");
    copy_tree(&root().join("samples/firmware"), &copy);

    // The two lines the manifest's comment says to edit: the paths become this checkout's.
    let checkout = root().canonicalize().expect("the checkout");
    let abs = |p: &str| checkout.join(p).display().to_string().replace('\\', "/");
    let edits = [
        (
            r#"sinew-runtime = { path = "../../runtime", version = "0.1.0" }"#,
            format!(
                r#"sinew-runtime = {{ path = "{}", version = "0.1.0" }}"#,
                abs("runtime")
            ),
        ),
        (
            r#"sinew = { path = "../../compiler", version = "0.1.0", default-features = false }"#,
            format!(
                r#"sinew = {{ path = "{}", version = "0.1.0", default-features = false }}"#,
                abs("compiler")
            ),
        ),
    ];
    let manifest_path = copy.join("Cargo.toml");
    let mut manifest = std::fs::read_to_string(&manifest_path).expect("the manifest");
    for (old, new) in &edits {
        assert_eq!(
            manifest.lines().filter(|l| l == old).count(),
            1,
            "samples/firmware/Cargo.toml has the line `{old}` once"
        );
        manifest = manifest.replace(old, new);
    }
    std::fs::write(&manifest_path, manifest).expect("write the manifest");
    std::fs::copy(root().join("Cargo.lock"), copy.join("Cargo.lock")).expect("copy Cargo.lock");

    let mut c = Command::new(std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into()));
    c.args(["build", "--offline"])
        .current_dir(&copy)
        .env(
            "CARGO_TARGET_DIR",
            Path::new(env!("CARGO_TARGET_TMPDIR")).join("template-check"),
        )
        .env("CARGO_TERM_COLOR", "never")
        .stdin(Stdio::null());
    // Nothing of the outer build may leak into this one.
    toolchain::isolate(&mut c);
    c.env_remove("RUSTC_WRAPPER")
        .env_remove("RUSTC_WORKSPACE_WRAPPER");
    let out = c.output().expect("cargo runs");
    assert!(
        out.status.success(),
        "the copied template does not build:\n{}",
        toolchain::tail(&String::from_utf8_lossy(&out.stderr), 40)
    );
    let _ = std::fs::remove_dir_all(&dir);
}
