//! The bundled demos (invented pump-health data and gearbox windows from
//! `compiler/examples/demo_data.rs`): for the pump, both Adam (the spec's optimizer) and
//! full-batch L-BFGS reach the validation accuracy the README states, 95 %, on the seed-0
//! stratified 80/20 split; the gearbox's convolutional classifier too.

use sinew::engine::train::{Method, TrainOptions};
use sinew::workflow::{train, TrainRequest};
use std::path::Path;

fn run(method: Option<Method>, epochs: Option<u32>) -> f64 {
    run_sample("pump_health", 120, method, epochs)
}

/// The seed-0 80/20 validation accuracy of `samples/<name>.sinew` on `samples/<name>.csv`.
fn run_sample(name: &str, validation: usize, method: Option<Method>, epochs: Option<u32>) -> f64 {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
    let src = std::fs::read_to_string(root.join(format!("samples/{name}.sinew"))).unwrap();
    let model = sinew::check_source(&src).model.unwrap();
    let data = root.join(format!("samples/{name}.csv"));
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
    assert_eq!(v.samples, validation);
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

/// The shaped sample (invented gearbox windows, 48 steps x 3 axes, from the same generator): the
/// convolutional classifier reaches the validation accuracy the README states, 95 %.
#[test]
fn the_window_classifier_reaches_the_stated_validation_accuracy() {
    let acc = run_sample("gearbox_window", 72, None, None);
    assert!(acc >= 0.95, "gearbox_window: validation accuracy {acc}");
}
