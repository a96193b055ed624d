//! The engine trained on open datasets, against a fixed accuracy target and against a reference
//! MLP of the same size in scikit-learn, on the same split.
//!
//! Data: the copies of three UCI datasets that the scikit-learn package (PyPI, BSD-3-Clause)
//! ships in `sklearn/datasets/data/`, converted by `tests/reference/export_datasets.py` into
//! `tests/data/*.csv` (sources, citations and licences in `tests/data/NOTICE.md`). Specs:
//! `tests/reference/specs/*.sinew` (standardized inputs, one tanh hidden layer, l2 penalty).
//!
//! Every test runs the user's path, `sinew::workflow::train`: `sinew::data::read_csv`, the
//! stratified `sinew::data::split` with [`TEST_FRACTION`] held out and seed [`SPLIT_SEED`]
//! (the held-out part is the test split: without `patience` it only is evaluated, never used to
//! choose parameters), standardization from the training split, the spec's Glorot initialisation
//! with its seed, and full-batch L-BFGS for a fixed number of iterations. It asserts the
//! test-split accuracy reaches both the target and the scikit-learn reference minus
//! [`MARGIN`].
//!
//! The reference figures come from `tests/reference/sklearn_baseline.py` (scikit-learn 1.9.1,
//! numpy 2.4.6; see `tests/reference/requirements-datasets.txt`), which reproduces the split from
//! its documented algorithm, standardizes the same way and trains
//! `MLPClassifier(hidden_layer_sizes=(width,), activation="tanh", solver="lbfgs", alpha=lambda,
//! max_iter=200)` (the same objective as the spec: mean log-loss plus `alpha / 2n` times the sum
//! of squared weights) for `random_state` 0 to 9. It writes `tests/reference/baselines/*.json`,
//! which these tests read: the test indices (checked against sinew's split here, so both ran on
//! the same samples) and the accuracies. Recorded figures (test accuracy, mean of the ten runs,
//! min to max):
//!
//! | dataset | test samples | scikit-learn MLP | target | sinew (measured) |
//! | --- | --- | --- | --- | --- |
//! | Iris, 4-8-3 | 45 | 0.9578 (0.9556 to 0.9778) | 0.92 | 0.9556 |
//! | Breast Cancer Wisconsin (Diagnostic), 30-8-1 | 171 | 0.9655 (0.9591 to 0.9766) | 0.94 | 0.9708 |
//! | Optical digits 8 x 8, 64-32-10 | 539 | 0.9727 (0.9666 to 0.9777) | 0.95 | 0.9852 |
//! | Optical digits as an 8 x 8 x 1 grid: conv 4 (3 x 3, same), max pool 2, 16, 10; 150 iterations | 539 | 0.9727 (the MLP above) | 0.95 | 0.9796 |
//!
//! The convolutional row has no reference of its own: it is held to the same MLP baseline (no
//! published figure for a convolutional network on this 8 x 8 set is quoted here). Its training
//! time at 150 iterations was 20 to 24 s in the test build (`cargo test`, whose profile
//! optimises `sinew` and `sinew-runtime` at level 2) on a shared 2-core machine, and no less in
//! a release build (25 s), against 3 to 5 s for the dense digits model; 200 iterations reach
//! 0.9907 but take about 26 s, too close to the suite's budget of about 30 s per test.
//!
//! [`MARGIN`] is 0.025: a little more than one Iris test sample (1/45 = 0.022), and about the
//! spread between the scikit-learn runs on the larger sets, which differ from sinew's only in
//! their random initialisation and line search.

use serde_json::Value;
use sinew::data::{read_csv, split, Dataset};
use sinew::engine::train::{Method, TrainOptions};
use sinew::ir::Model;
use sinew::workflow::{train, TrainRequest};
use std::path::PathBuf;
use std::time::Instant;

/// Fraction of each dataset held out as the test split.
const TEST_FRACTION: f64 = 0.3;
/// Seed of the stratified split.
const SPLIT_SEED: u64 = 2024;
/// L-BFGS iterations (scikit-learn's `max_iter` in the reference runs).
const ITERATIONS: u32 = 200;
/// L-BFGS iterations of the convolutional digits model (its sliding windows cost more per
/// multiply-add than the dense layers in the test build; see the table above).
const CONV_ITERATIONS: u32 = 150;
/// L-BFGS correction pairs (scikit-learn's L-BFGS-B uses 10).
const MEMORY: usize = 10;
/// How far below the scikit-learn mean test accuracy sinew may land.
const MARGIN: f64 = 0.025;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn model(spec: &str) -> Model {
    let path = root().join("reference").join("specs").join(spec);
    let src = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let checked = sinew::check_source(&src);
    checked
        .model
        .unwrap_or_else(|| panic!("{spec} does not check: {:?}", checked.diagnostics))
}

fn baseline(name: &str) -> Value {
    let path = root()
        .join("reference")
        .join("baselines")
        .join(format!("{name}.json"));
    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

/// The indices (file order) that `split` puts into the held-out part: the split depends only on
/// the sample count, the labels, the fraction and the seed, so splitting a copy whose inputs are
/// the sample indices shows where each sample went.
fn test_indices(ds: &Dataset) -> Vec<usize> {
    let numbered = Dataset {
        inputs: (0..ds.len()).map(|i| vec![i as f64]).collect(),
        targets: ds.targets.clone(),
        labels: ds.labels.clone(),
        input_names: vec!["index".into()],
    };
    let (_, held_out) = split(&numbered, TEST_FRACTION, SPLIT_SEED);
    held_out.inputs.iter().map(|r| r[0] as usize).collect()
}

/// Trains `spec` on `data` for [`ITERATIONS`] and checks the split and the accuracy.
fn run(name: &str, spec: &str, data: &str, target: f64) {
    run_for(name, spec, data, target, ITERATIONS);
}

/// Trains `spec` on `data` for `iterations` of L-BFGS and checks the split and the accuracy
/// against the baseline `name`.
fn run_for(name: &str, spec: &str, data: &str, target: f64, iterations: u32) {
    let m = model(spec);
    let data = root().join("data").join(data);
    let base = baseline(name);
    let name = m.name();
    let ds = read_csv(&data, &m).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(base["split"]["fraction"].as_f64(), Some(TEST_FRACTION));
    assert_eq!(base["split"]["seed"].as_u64(), Some(SPLIT_SEED));
    assert_eq!(base["split"]["samples"].as_u64(), Some(ds.len() as u64));
    let expected: Vec<usize> = base["split"]["test_indices"]
        .as_array()
        .expect("test_indices")
        .iter()
        .map(|v| v.as_u64().expect("an index") as usize)
        .collect();
    assert_eq!(
        test_indices(&ds),
        expected,
        "{name}: sinew's split differs from the one scikit-learn was run on"
    );

    let reference = base["sklearn"]["mean_test_accuracy"]
        .as_f64()
        .expect("mean_test_accuracy");
    let request = TrainRequest {
        data: &data,
        split: TEST_FRACTION,
        seed: SPLIT_SEED,
        options: TrainOptions {
            method: Some(Method::Lbfgs { memory: MEMORY }),
            epochs: Some(iterations),
            ..Default::default()
        },
        start: None,
    };
    let start = Instant::now();
    let outcome = train(&m, &request, &mut |_| {}).unwrap_or_else(|e| panic!("{name}: {e}"));
    let test = outcome.validation.expect("a test split");
    let accuracy = test.accuracy.expect("a classifier");
    let train_accuracy = outcome.train.accuracy.expect("a classifier");
    println!(
        "{name}: test accuracy {accuracy:.4} on {} samples (train {train_accuracy:.4}, {} iterations, {:.1} s); \
         scikit-learn {reference:.4}; target {target}",
        test.samples,
        outcome.summary.history.len(),
        start.elapsed().as_secs_f64()
    );
    assert_eq!(test.samples, expected.len());
    assert!(
        accuracy >= target,
        "{name}: test accuracy {accuracy} is below the target {target}"
    );
    assert!(
        accuracy >= reference - MARGIN,
        "{name}: test accuracy {accuracy} is below scikit-learn's {reference} minus {MARGIN}"
    );
}

/// Iris (Fisher 1936; UCI Machine Learning Repository), 150 samples, 3 classes.
#[test]
fn iris_reaches_the_reference_accuracy() {
    run("iris", "iris.sinew", "iris.csv", 0.92);
}

/// Breast Cancer Wisconsin (Diagnostic) (Wolberg, Street and Mangasarian 1995; UCI Machine
/// Learning Repository), 569 samples, 2 classes on one sigmoid unit.
#[test]
fn breast_cancer_reaches_the_reference_accuracy() {
    run(
        "breast_cancer",
        "breast_cancer.sinew",
        "breast_cancer.csv",
        0.94,
    );
}

/// Optical recognition of handwritten digits, 8 x 8 (Alpaydin and Kaynak 1998; UCI Machine
/// Learning Repository), 1797 samples, 10 classes.
#[test]
fn digits_reaches_the_reference_accuracy() {
    run("digits", "digits.sinew", "digits.csv", 0.95);
}

/// The same digits, read as the 8 x 8 grid of one channel they are (the CSV's 64 pixels are
/// row-major), by a small convolutional network: `tests/reference/specs/digits_conv.sinew`
/// (per-channel `standardize`, a 3 x 3 `conv` of 8 filters with `pad same`, `pool max 2`, a dense
/// tanh layer of 32, softmax over 10). Same split, trainer and iterations as the dense digits test;
/// the reference is the same scikit-learn MLP baseline (`baselines/digits.json`, 0.9727), which
/// sees the pixels as 64 unrelated features.
#[test]
fn digits_conv_reaches_the_reference_accuracy() {
    run_for(
        "digits",
        "digits_conv.sinew",
        "digits.csv",
        0.95,
        CONV_ITERATIONS,
    );
}
