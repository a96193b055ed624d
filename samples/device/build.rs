//! Generates the pump model with its trained weights baked in, packs the same weights as a device
//! weight blob, and picks the memory map of the board the target runs on.
//!
//! Every input is listed with `cargo:rerun-if-changed` (the builder lists the spec and the
//! weights), so Cargo reruns this script when one of them, a memory map or this file changes.

use std::error::Error;
use std::path::{Path, PathBuf};

const SPEC: &str = "../pump_health.sinew";
const WEIGHTS: &str = "pump_health.weights.json";
const WINDOW_SPEC: &str = "../gearbox_window.sinew";
const WINDOW_WEIGHTS: &str = "gearbox_window.weights.json";

/// The memory map (for the `memory.x` of cortex-m-rt and riscv-rt) of each supported target's
/// emulated board.
fn memory_map(target: &str) -> Option<&'static str> {
    match target {
        "thumbv7em-none-eabihf" => Some("memory/mps2-an386.x"),
        "thumbv6m-none-eabi" => Some("memory/microbit.x"),
        "riscv32imc-unknown-none-elf" => Some("memory/virt.x"),
        _ => None,
    }
}

fn main() -> Result<(), Box<dyn Error>> {
    let out = PathBuf::from(std::env::var("OUT_DIR")?);
    let target = std::env::var("TARGET")?;
    // The builder prints the lines of the spec and the weights.
    for input in ["build.rs", "memory"] {
        println!("cargo:rerun-if-changed={input}");
    }

    // The model with its trained weights baked in as `pump_health::TRAINED`: OUT_DIR/pump_health.rs.
    // The shaped model (a window classifier) the same way: OUT_DIR/gearbox_window.rs.
    sinew::Builder::new()
        .spec_with_weights(SPEC, WEIGHTS)
        .spec_with_weights(WINDOW_SPEC, WINDOW_WEIGHTS)
        .compile()?;

    // The same weights as a device weight blob, the bytes `sinew pack` writes.
    let src = std::fs::read_to_string(SPEC)?;
    let model = sinew::check_source(&src)
        .model
        .ok_or_else(|| format!("{SPEC} has errors"))?;
    let weights = sinew::weights::Weights::load_checked(Path::new(WEIGHTS), &model)?;
    let blob = sinew::pack::encode(&model, &weights)?;
    sinew::fsutil::write_if_changed(&out.join("pump_health.bin"), &blob)?;

    println!("cargo:rustc-env=SINEW_DEVICE_TARGET={target}");
    if let Some(map) = memory_map(&target) {
        std::fs::copy(map, out.join("memory.x"))?;
        println!("cargo:rustc-link-search={}", out.display());
        if target.starts_with("riscv") {
            println!("cargo:rustc-link-arg-bins=-Tmemory.x");
        }
        println!("cargo:rustc-link-arg-bins=-Tlink.x");
    }
    Ok(())
}
