//! The build API bakes a weights file into the generated module, exact to the bit, and refuses
//! weights that belong to another model.

mod common;

use common::*;

#[test]
fn baked_weights_appear_with_exact_bit_patterns() {
    let dir = scratch("bw", "ok");
    let spec = root().join("samples/valve_gate.sinew");
    let m = model("samples/valve_gate.sinew");
    let w = sinew::workflow::init(&m, Some(42));
    let wpath = dir.join("valve.json");
    w.save(&wpath).unwrap();
    let out = sinew::Builder::new()
        .spec_with_weights(&spec, &wpath)
        .out_dir(&dir)
        .cargo_metadata(false)
        .compile()
        .unwrap();
    let code = std::fs::read_to_string(&out[0]).unwrap();
    assert!(code.contains("pub static TRAINED: Params"), "{code}");
    // Every weight of the file appears as its f64 bit pattern.
    for l in w.layers_flat() {
        for v in l.weights.iter().chain(&l.bias) {
            let pat = format!("{:#x}", v.to_bits());
            let plain = format!("{:x}", v.to_bits());
            assert!(
                code.contains(&pat) || code.contains(&plain) || *v == 0.0,
                "missing {v} ({pat})"
            );
        }
    }
}

#[test]
fn weights_of_another_model_fail_the_build() {
    let dir = scratch("bw", "bad");
    let other = sinew::workflow::init(&model("samples/greenhouse_humidity.sinew"), None);
    let wpath = dir.join("other.json");
    other.save(&wpath).unwrap();
    let err = sinew::Builder::new()
        .spec_with_weights(root().join("samples/pump_health.sinew"), &wpath)
        .out_dir(&dir)
        .cargo_metadata(false)
        .compile()
        .unwrap_err();
    let text = err.to_string();
    assert!(
        matches!(err, sinew::builder::BuildError::Weights { .. }),
        "{text}"
    );
    assert!(text.contains("other.json"), "{text}");
    assert!(!dir.join("pump_health.rs").exists());
}
