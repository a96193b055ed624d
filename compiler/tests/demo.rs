//! The bundled demo (invented pump-health data from `compiler/examples/demo_data.rs`): both
//! Adam (the spec's optimizer) and full-batch L-BFGS reach the validation accuracy the README
//! states, 95 %, on the seed-0 stratified 80/20 split.

use sinew::engine::train::{Method, TrainOptions};
use sinew::workflow::{train, TrainRequest};
use std::path::Path;

fn run(method: Option<Method>, epochs: Option<u32>) -> f64 {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
    let src = std::fs::read_to_string(root.join("samples/pump_health.sinew")).unwrap();
    let model = sinew::check_source(&src).model.unwrap();
    let data = root.join("samples/pump_health.csv");
    let req = TrainRequest {
        data: &data,
        split: 0.2,
        seed: 0,
        options: TrainOptions {
            method,
            epochs,
            ..Default::default()
        },
        start: None,
    };
    let out = train(&model, &req, &mut |_| {}).unwrap();
    let v = out.validation.unwrap();
    assert_eq!(v.samples, 120);
    v.accuracy.unwrap()
}

#[test]
fn adam_reaches_the_stated_validation_accuracy() {
    let acc = run(None, None);
    assert!(acc >= 0.95, "adam: validation accuracy {acc}");
}

#[test]
fn lbfgs_reaches_the_stated_validation_accuracy() {
    let acc = run(Some(Method::Lbfgs { memory: 7 }), Some(200));
    assert!(acc >= 0.95, "l-bfgs: validation accuracy {acc}");
}
