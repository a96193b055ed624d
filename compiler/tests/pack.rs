//! `sinew pack`: writes the device weight blob of trained weights, with exit codes 0 (written), 1
//! (the spec has errors or the weights do not fit it) and 2 (a file cannot be read or written).

mod common;

use common::*;
use std::path::{Path, PathBuf};
use std::process::Output;

/// Fresh weights of the valve sample in `dir` (by `sinew initial-weights`), its path.
fn init_valve(dir: &Path) -> PathBuf {
    let weights = dir.join("valve.json");
    let o = sinew(&[
        "initial-weights",
        "samples/valve_gate.sinew",
        "-o",
        weights.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    weights
}

/// `sinew pack SPEC --weights WEIGHTS -o OUT`.
fn pack(spec: &str, weights: &str, out: &str) -> Output {
    sinew(&["pack", spec, "--weights", weights, "-o", out])
}

#[test]
fn pack_writes_the_blob_into_a_new_folder() {
    let dir = scratch("pack-cli", "ok");
    let weights = init_valve(&dir);
    let out = dir.join("nested/deeper/valve.bin");
    let o = pack(
        "samples/valve_gate.sinew",
        weights.to_str().unwrap(),
        out.to_str().unwrap(),
    );
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let m = model("samples/valve_gate.sinew");
    let blob = std::fs::read(&out).unwrap();
    // 2*3 + 3 + 3*1 + 1 = 13 f64 values: 24 + 13 * 8 bytes.
    assert_eq!(blob.len(), 24 + 13 * 8);
    assert!(
        String::from_utf8_lossy(&o.stdout).contains("128 bytes: 13 f64 values"),
        "{}",
        text(&o)
    );
    let w = sinew::weights::Weights::load(&weights).unwrap();
    assert_eq!(blob, sinew::pack::encode(&m, &w).unwrap());
    assert_eq!(
        sinew::pack::decode(&m, &blob).unwrap(),
        sinew::pack::values(&w)
    );
    // Only the blob is left in the folder: the temporary file was renamed over it.
    let names: Vec<_> = std::fs::read_dir(dir.join("nested/deeper"))
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    assert_eq!(names, ["valve.bin"]);
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn weights_of_another_model_exit_1_and_write_nothing() {
    let dir = scratch("pack-cli", "mismatch");
    let weights = init_valve(&dir);
    let out = dir.join("pump.bin");
    let o = pack(
        "samples/pump_health.sinew",
        weights.to_str().unwrap(),
        out.to_str().unwrap(),
    );
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(text(&o).contains("error[F07]"), "{}", text(&o));
    assert!(!out.exists());
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn unreadable_and_unwritable_files_exit_2() {
    let dir = scratch("pack-cli", "io");
    let o = pack(
        "samples/valve_gate.sinew",
        dir.join("missing.json").to_str().unwrap(),
        dir.join("x.bin").to_str().unwrap(),
    );
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    let weights = init_valve(&dir);
    // The output's "folder" is a file: it cannot be created.
    let o = pack(
        "samples/valve_gate.sinew",
        weights.to_str().unwrap(),
        weights.join("x.bin").to_str().unwrap(),
    );
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    let o = pack(
        dir.join("missing.sinew").to_str().unwrap(),
        weights.to_str().unwrap(),
        dir.join("x.bin").to_str().unwrap(),
    );
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn a_spec_with_errors_exits_1() {
    let dir = scratch("pack-cli", "spec");
    let spec = dir.join("bad.sinew");
    std::fs::write(&spec, "model bad\ninput x 2\noutput y 1 softmax\n").unwrap();
    let o = pack(
        spec.to_str().unwrap(),
        "w.json",
        dir.join("x.bin").to_str().unwrap(),
    );
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    std::fs::remove_dir_all(&dir).unwrap();
}
