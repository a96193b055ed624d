//! Generates the pump model from its spec, exactly as a firmware crate would.

fn main() {
    // Writes OUT_DIR/pump_health.rs and prints `cargo:rerun-if-changed` for the spec, so Cargo
    // reruns this script only when the spec (or this file) changes. The spec is inside the crate
    // (a copy of `samples/pump_health.sinew`, kept equal to it by `tests/tests/template.rs`), so
    // a copy of this folder builds anywhere. On errors it renders the diagnostics and fails the
    // build with exit status 1.
    sinew::Builder::new()
        .spec("models/pump_health.sinew")
        .compile_or_exit();
}
