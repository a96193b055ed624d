//! Generates the pump model with its trained weights baked in, packs the same weights as a device
//! weight blob, and picks the memory map of the board the target runs on.
//!
//! Every input is listed with `cargo:rerun-if-changed`, so Cargo reruns this script when the spec,
//! the weights, a memory map or this file changes.

use std::error::Error;
use std::path::{Path, PathBuf};

const SPEC: &str = "../pump_health.sinew";
const WEIGHTS: &str = "pump_health.weights.json";

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
    for input in [SPEC, WEIGHTS, "build.rs", "memory"] {
        println!("cargo:rerun-if-changed={input}");
    }

    let src = std::fs::read_to_string(SPEC)?;
    let checked = sinew::check_source(&src);
    if !checked.diagnostics.is_empty() {
        eprint!(
            "{}",
            sinew::diag::render(SPEC, &src, &checked.diagnostics, false)
        );
    }
    let model = checked
        .model
        .ok_or_else(|| format!("{SPEC} has errors (diagnostics above)"))?;
    let weights = sinew::weights::Weights::load_checked(Path::new(WEIGHTS), &model)?;

    let options = sinew::emit::EmitOptions {
        spec_name: "pump_health.sinew".into(),
        unroll_below: 0,
        weights: Some(sinew::workflow::baked(&weights)),
    };
    let code = sinew::emit::generate(&model, &options);
    sinew::fsutil::write_if_changed(&out.join("pump_health.rs"), code.as_bytes())?;
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
