//! Generates the pump model from its spec, exactly as a firmware crate would.

fn main() -> Result<(), Box<dyn std::error::Error>> {
    // Writes OUT_DIR/pump_health.rs and prints `cargo:rerun-if-changed` for the spec, so Cargo
    // reruns this script only when the spec (or this file) changes.
    sinew::Builder::new()
        .spec("../pump_health.sinew")
        .compile()?;
    Ok(())
}
