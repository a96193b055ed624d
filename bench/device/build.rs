//! Generates N1, N2 and C1 from `../specs` with the public build API, as a user's firmware crate
//! would, and hands the board's memory map to cortex-m-rt's linker script.

use std::error::Error;
use std::path::PathBuf;

fn main() -> Result<(), Box<dyn Error>> {
    let manifest = PathBuf::from(std::env::var("CARGO_MANIFEST_DIR")?);
    let out = PathBuf::from(std::env::var("OUT_DIR")?);
    println!("cargo:rerun-if-changed=build.rs");
    println!("cargo:rerun-if-changed=memory.x");

    let spec = |name: &str| manifest.join("../specs").join(format!("{name}.sinew"));
    sinew::Builder::new()
        .specs(["bench_n1", "bench_n2", "bench_c1"].map(spec))
        .compile()?;

    std::fs::copy(manifest.join("memory.x"), out.join("memory.x"))?;
    println!("cargo:rustc-link-search={}", out.display());
    println!("cargo:rustc-link-arg-bins=-Tlink.x");
    Ok(())
}
