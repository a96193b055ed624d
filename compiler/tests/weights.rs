//! Weights files: exact round trips, checks against a spec, damaged files and atomic saves.

use proptest::prelude::*;
use sinew::ir::Model;
use sinew::weights::{data_hash, FlatLayer, Provenance, Standardization, Weights};
use std::fs;
use std::path::{Path, PathBuf};

fn sample_text(name: &str) -> String {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../samples")
        .join(format!("{name}.sinew"));
    fs::read_to_string(path).unwrap()
}

fn spec(text: &str) -> Model {
    let checked = sinew::check_source(text);
    checked
        .model
        .unwrap_or_else(|| panic!("spec does not check: {:?}", checked.diagnostics))
}

/// The model of `samples/<name>.sinew` after replacing `from` with `to` in its text, without
/// its `budget` line (a variant, f64 say, may need more memory than the sample allows).
fn variant(name: &str, from: &str, to: &str) -> Model {
    let text = sample_text(name);
    assert!(text.contains(from), "`{from}` is not in {name}");
    let text: String = text
        .replace(from, to)
        .lines()
        .filter(|l| !l.starts_with("budget"))
        .map(|l| format!("{l}\n"))
        .collect();
    spec(&text)
}

fn sample(name: &str) -> Model {
    spec(&sample_text(name))
}

/// A fresh scratch folder under Cargo's per-target temporary directory.
fn scratch(name: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR"))
        .join("weights-tests")
        .join(name);
    let _ = fs::remove_dir_all(&dir);
    fs::create_dir_all(&dir).unwrap();
    dir
}

fn entries(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

/// Per-layer parameters of `model` drawn from `values`, cycling.
fn params_from(model: &Model, values: &[f64]) -> Vec<FlatLayer> {
    let mut it = values.iter().copied().cycle();
    model
        .layers()
        .iter()
        .map(|l| {
            let weights = (&mut it).take(l.width * l.fan_in).collect();
            let bias = (&mut it).take(l.width).collect();
            FlatLayer { weights, bias }
        })
        .collect()
}

fn bits(layers: &[FlatLayer]) -> Vec<u64> {
    layers
        .iter()
        .flat_map(|l| l.weights.iter().chain(&l.bias))
        .map(|v| v.to_bits())
        .collect()
}

/// Hard cases for decimal text: values with no short exact decimal, both zeros, the extremes
/// and subnormals of f64.
const F64_CASES: [f64; 14] = [
    0.1,
    1e-300,
    -0.0,
    0.0,
    1.0 / 3.0,
    std::f64::consts::PI,
    f64::MAX,
    f64::MIN,
    f64::MIN_POSITIVE,
    5e-324,
    -2.225073858507201e-308,
    f64::EPSILON,
    9007199254740992.0,  // 2^53
    0.30000000000000004, // 0.1 + 0.2
];

#[test]
fn f64_values_round_trip_bitwise() {
    let model = sample("valve_gate");
    let layers = params_from(&model, &F64_CASES);
    let w = Weights::from_params(&model, layers.clone(), None, None);
    let back = Weights::from_json("w.json", &w.to_json()).unwrap();
    assert_eq!(bits(&back.layers_flat()), bits(&layers));
    back.check_against(&model).unwrap();

    let dir = scratch("f64");
    let path = dir.join("w.json");
    w.save(&path).unwrap();
    let loaded = Weights::load_checked(&path, &model).unwrap();
    assert_eq!(bits(&loaded.layers_flat()), bits(&layers));
    assert_eq!(entries(&dir), ["w.json"]);
}

#[test]
fn f32_values_are_stored_as_their_exact_widening_and_round_trip_bitwise() {
    let model = sample("pump_health");
    let cases: Vec<f64> = [
        0.1f32,
        -0.0,
        f32::MAX,
        f32::MIN,
        f32::MIN_POSITIVE,
        f32::from_bits(1), // the smallest subnormal
        f32::EPSILON,
        1.0 / 3.0,
        16_777_217.0, // rounds to 2^24 as f32
    ]
    .iter()
    .map(|&v| f64::from(v))
    .collect();
    let layers = params_from(&model, &cases);
    let mean: Vec<f64> = (0..6).map(|i| f64::from(i as f32 * 0.1)).collect();
    let std: Vec<f64> = (1..=6).map(|i| f64::from(i as f32 / 7.0)).collect();
    let w = Weights::from_params(
        &model,
        layers.clone(),
        Some(Standardization {
            mean: mean.clone(),
            std: std.clone(),
        }),
        None,
    );
    let text = w.to_json();
    // The widening of 0.1f32 is 0.100000001490116119384765625; its shortest f64 text is written.
    assert!(text.contains("0.10000000149011612"), "{text}");
    let back = Weights::from_json("w.json", &text).unwrap();
    back.check_against(&model).unwrap();
    assert_eq!(bits(&back.layers_flat()), bits(&layers));
    let st = back.standardization.unwrap();
    assert_eq!(
        st.mean.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
        mean.iter().map(|v| v.to_bits()).collect::<Vec<_>>()
    );
    assert_eq!(
        st.std.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
        std.iter().map(|v| v.to_bits()).collect::<Vec<_>>()
    );
}

#[test]
fn from_params_rounds_f64_values_to_f32_for_an_f32_model() {
    let model = sample("pump_health");
    let w = Weights::from_params(
        &model,
        params_from(&model, &[0.1]),
        Some(Standardization {
            mean: vec![0.1; 6],
            std: vec![1.0; 6],
        }),
        None,
    );
    assert_eq!(w.layers[0].weights[0][0], f64::from(0.1f32));
    assert_eq!(w.standardization.unwrap().mean[0], f64::from(0.1f32));
}

#[test]
fn a_hand_typed_value_in_an_f32_file_is_rounded_to_the_nearest_f32() {
    let model = sample("pump_health");
    let w = Weights::from_params(
        &model,
        params_from(&model, &[0.5]),
        Some(Standardization {
            mean: vec![0.0; 6],
            std: vec![1.0; 6],
        }),
        None,
    );
    let text = w.to_json().replacen("0.5", "0.1", 1);
    let back = Weights::from_json("w.json", &text).unwrap();
    assert_eq!(
        back.layers[0].weights[0][0].to_bits(),
        f64::from(0.1f32).to_bits()
    );
}

proptest! {
    #[test]
    fn random_finite_f64_values_round_trip_bitwise(
        raw in proptest::collection::vec(any::<u64>(), 1..64),
    ) {
        let model = sample("valve_gate");
        let values: Vec<f64> = raw.iter().map(|&b| f64::from_bits(b)).filter(|v| v.is_finite()).collect();
        prop_assume!(!values.is_empty());
        let layers = params_from(&model, &values);
        let w = Weights::from_params(&model, layers.clone(), None, None);
        let back = Weights::from_json("w.json", &w.to_json()).unwrap();
        prop_assert_eq!(bits(&back.layers_flat()), bits(&layers));
    }
}

#[test]
fn the_json_form() {
    let model = sample("valve_gate");
    let layers = vec![
        FlatLayer {
            weights: vec![0.5, -1.25, 2.0, 0.125, -0.75, 1.0],
            bias: vec![0.0, 0.1, -0.2],
        },
        FlatLayer {
            weights: vec![1.5, -2.0, 0.25],
            bias: vec![0.3],
        },
    ];
    let provenance = Provenance {
        optimizer: "sgd".into(),
        epochs: 2000,
        train_cost: 0.0123,
        validation_cost: None,
        data_file_hash: data_hash(b"switch_a,switch_b,label\n"),
        data_file: "valve_gate.csv".into(),
    };
    let w = Weights::from_params(&model, layers.clone(), None, Some(provenance.clone()));
    // Rows are units of the layer, columns the units feeding it.
    assert_eq!(
        w.layers[0].weights,
        vec![vec![0.5, -1.25], vec![2.0, 0.125], vec![-0.75, 1.0]]
    );
    assert_eq!(w.layers_flat(), layers);
    let text = w.to_json();
    insta::assert_snapshot!(text);
    // serde_json reads it as plain JSON too.
    let v: serde_json::Value = serde_json::from_str(&text).unwrap();
    assert_eq!(v["fingerprint"], format!("{:016x}", model.fingerprint()));
    assert_eq!(v["layers"][1]["weights"][0][2], 0.25);
    let back = Weights::from_json("w.json", &text).unwrap();
    assert_eq!(back, w);
    assert_eq!(back.provenance, Some(provenance));
}

#[test]
fn data_hash_is_fnv1a_64_in_hex() {
    // FNV-1a 64 test vectors from the FNV reference page by Noll (from memory).
    assert_eq!(data_hash(b""), "cbf29ce484222325");
    assert_eq!(data_hash(b"a"), "af63dc4c8601ec8c");
    assert_eq!(data_hash(b"foobar"), "85944171f73967e8");
}

fn weights_for(model: &Model) -> Weights {
    let st = model.input().standardize.then(|| Standardization {
        mean: vec![0.0; model.input().width],
        std: vec![1.0; model.input().width],
    });
    Weights::from_params(model, params_from(model, &[0.25, -0.5]), st, None)
}

fn refusal(file: &Model, spec: &Model) -> String {
    weights_for(file)
        .check_against(spec)
        .unwrap_err()
        .to_string()
}

#[test]
fn a_changed_activation_is_a_fingerprint_mismatch() {
    let spec = sample("valve_gate");
    let file = variant(
        "valve_gate",
        "layer hidden 3 tanh",
        "layer hidden 3 sigmoid",
    );
    insta::assert_snapshot!(refusal(&file, &spec), @r"
    error[F07]: fingerprint 4dbc573167aad91b in the file does not match the spec's 6dafdb91fac07e3c
      help: the layer sizes agree, so an activation (or its parameter) differs from the spec the weights were made for: retrain, or use that spec
    ");
}

#[test]
fn a_wrong_shape_names_the_layer_and_the_dimension() {
    let spec = sample("pump_health");
    let fewer_units = variant(
        "pump_health",
        "layer hidden2 8 tanh",
        "layer hidden2 7 tanh",
    );
    insta::assert_snapshot!(refusal(&fewer_units, &spec), @"error[F10]: layer `hidden2` has 7 rows (units) in the file, the spec declares 8");

    let mut short_row = weights_for(&spec);
    short_row.layers[2].weights[1].pop();
    insta::assert_snapshot!(short_row.check_against(&spec).unwrap_err().to_string(), @"error[F10]: layer `state` row 2 has 7 columns (units feeding it) in the file, the spec declares 8");

    let mut short_bias = weights_for(&spec);
    short_bias.layers[0].bias.push(0.0);
    insta::assert_snapshot!(short_bias.check_against(&spec).unwrap_err().to_string(), @"error[F10]: layer `hidden1` has 11 biases in the file, the spec declares 10 (one per unit)");
}

#[test]
fn a_wrong_layer_count_name_scalar_or_scaling_is_refused() {
    let spec = sample("pump_health");
    let extra = variant(
        "pump_health",
        "layer hidden2 8 tanh",
        "layer hidden2 8 tanh\nlayer hidden3 8 tanh",
    );
    insta::assert_snapshot!(refusal(&extra, &spec), @"error[F08]: the file has 4 layers, the spec declares 3 (hidden1, hidden2, state)");
    let renamed = variant("pump_health", "layer hidden2 8 tanh", "layer middle 8 tanh");
    insta::assert_snapshot!(refusal(&renamed, &spec), @"error[F09]: layer 2 is named `middle` in the file, the spec names it `hidden2`");
    let wide = variant("pump_health", "scalar f32", "scalar f64");
    insta::assert_snapshot!(refusal(&wide, &spec), @"error[F11]: the file holds f64 values, the spec declares `scalar f32`");
    let unscaled = variant(
        "pump_health",
        "input features 6 standardize",
        "input features 6",
    );
    insta::assert_snapshot!(refusal(&unscaled, &spec), @r#"
    error[F12]: the file has no standardization statistics, but input `features` is declared `standardize`
      help: train the model to compute the mean and std from the data, or write `"standardization": {"mean": [...], "std": [...]}`
    "#);
    insta::assert_snapshot!(refusal(&spec, &unscaled), @"error[F12]: the file has standardization statistics, but input `features` is not declared `standardize`");
    let mut short = weights_for(&spec);
    if let Some(st) = short.standardization.as_mut() {
        st.std.pop();
    }
    insta::assert_snapshot!(short.check_against(&spec).unwrap_err().to_string(), @"error[F12]: standardization `std` has 5 values in the file, input `features` has 6 features");
    // The model name is informational.
    let other_name = variant("pump_health", "model pump_health", "model pump_health_v2");
    weights_for(&other_name).check_against(&spec).unwrap();
}

#[test]
fn load_checked_names_the_file() {
    let spec = sample("valve_gate");
    let dir = scratch("load_checked");
    let path = dir.join("w.json");
    weights_for(&variant("valve_gate", "scalar f64", "scalar f32"))
        .save(&path)
        .unwrap();
    let err = Weights::load_checked(&path, &spec).unwrap_err();
    assert_eq!(err.code, "F11");
    assert!(
        err.to_string()
            .starts_with(&format!("{}: error[F11]", path.display())),
        "{err}"
    );
}

/// The message for `text` read as a weights file named `w.json`.
fn read_error(text: &str) -> String {
    Weights::from_json("w.json", text).unwrap_err().to_string()
}

#[test]
fn a_truncated_file_is_named_as_such() {
    let model = sample("valve_gate");
    let text = weights_for(&model).to_json();
    let cut = &text[..text.len() / 2];
    insta::assert_snapshot!(read_error(cut), @r"
    w.json:13:1: error[F03]: the file ends early (EOF while parsing a value): it is truncated
      help: the file was cut short, perhaps by an interrupted copy; write it again
    ");
    let dir = scratch("truncated");
    let path = dir.join("w.json");
    fs::write(&path, &text.as_bytes()[..text.len() - 3]).unwrap();
    assert_eq!(Weights::load(&path).unwrap_err().code, "F03");
    fs::write(&path, "").unwrap();
    assert_eq!(Weights::load(&path).unwrap_err().code, "F03");
}

#[test]
fn damaged_files_are_refused_with_their_place() {
    let model = sample("valve_gate");
    let good = weights_for(&model).to_json();
    insta::assert_snapshot!(read_error("{\"format\": sinew}"), @"w.json:1:12: error[F02]: not valid JSON: expected value");
    insta::assert_snapshot!(read_error("{\"weights\": []}"), @r#"
    w.json: error[F05]: not a sinew weights file: it has no `format` field
      help: a weights file starts with `"format": "sinew-weights"`
    "#);
    insta::assert_snapshot!(read_error(&good.replace("\"sinew-weights\"", "\"other\"")), @r#"w.json: error[F05]: not a sinew weights file: `format` is "other", expected "sinew-weights""#);
    insta::assert_snapshot!(read_error(&good.replace("\"version\": 1", "\"version\": 2")), @"w.json: error[F05]: unsupported version 2, this sinew reads version 1");
    insta::assert_snapshot!(read_error(&good.replacen("0.25", "null", 1)), @r"
    w.json:11:13: error[F04]: not a weights file of version 1: invalid type: null, expected f64
      help: JSON has no NaN or infinity: a `null` where a number belongs stands for a non-finite value
    ");
    insta::assert_snapshot!(read_error(&good.replacen("0.25", "1e999", 1)), @"w.json:11:14: error[F06]: a number is too large for an f64 (it would be infinite)");
    insta::assert_snapshot!(read_error(&good.replace("\"bias\"", "\"biases\"")), @"w.json:15:14: error[F04]: not a weights file of version 1: unknown field `biases`, expected one of `name`, `weights`, `bias`");
    insta::assert_snapshot!(read_error("[1, 2]"), @"w.json: error[F05]: not a sinew weights file: it does not start with `{`");
    insta::assert_snapshot!(read_error(&good.replace("\"scalar\": \"f64\"", "\"scalar\": \"f16\"")), @"w.json:6:17: error[F04]: not a weights file of version 1: unknown variant `f16`, expected `f32` or `f64`");
    let one_layer_a_number = good.replacen(
        "    {\n      \"name\": \"hidden\"",
        "    3, {\n      \"name\": \"hidden\"",
        1,
    );
    insta::assert_snapshot!(read_error(&one_layer_a_number), @"w.json:8:5: error[F04]: not a weights file of version 1: invalid type: integer `3`, expected a layer object with `name`, `weights` and `bias`");
    insta::assert_snapshot!(read_error(&good.replace("\"standardization\": null", "\"standardization\": 1")), @"w.json:25:22: error[F04]: not a weights file of version 1: invalid type: integer `1`, expected null or an object with `mean` and `std`");
    let fp = format!("{:016x}", model.fingerprint());
    insta::assert_snapshot!(read_error(&good.replace(&fp, "12345")), @"w.json: error[F05]: fingerprint `12345` is not 16 hex digits");
}

#[test]
fn values_outside_the_f32_range_in_an_f32_file_are_refused() {
    let model = sample("pump_health");
    let text = weights_for(&model).to_json().replacen("0.25", "1e39", 1);
    insta::assert_snapshot!(read_error(&text), @"w.json: error[F06]: layer `hidden1` weight row 1 column 1 = 1e+39 is outside the f32 range of an f32 file");
}

#[test]
fn a_zero_standard_deviation_is_refused() {
    let model = sample("pump_health");
    let mut w = weights_for(&model);
    if let Some(st) = w.standardization.as_mut() {
        st.std[3] = 0.0;
    }
    insta::assert_snapshot!(read_error(&w.to_json()), @"w.json: error[F12]: standardization std 4 is 0.0, it must be > 0");
}

#[test]
fn non_finite_values_are_refused_on_save_and_the_old_file_stays() {
    let model = sample("valve_gate");
    let dir = scratch("non_finite");
    let path = dir.join("w.json");
    let good = weights_for(&model);
    good.save(&path).unwrap();
    let before = fs::read(&path).unwrap();
    for bad_value in [f64::NAN, f64::INFINITY, f64::NEG_INFINITY] {
        let mut bad = good.clone();
        bad.layers[1].bias[0] = bad_value;
        let err = bad.save(&path).unwrap_err();
        assert_eq!(err.code, "F06", "{err}");
        // Written anyway as JSON text, it cannot be loaded back.
        assert!(Weights::from_json("w.json", &bad.to_json()).is_err());
    }
    let mut bad = good.clone();
    bad.layers[1].bias[0] = f64::NAN;
    insta::assert_snapshot!(bad.save(&path).unwrap_err().to_string().replace(&path.display().to_string(), "w.json"), @r"
    w.json: error[F06]: layer `open` bias 1 is NaN, not a finite number
      help: JSON has no NaN or infinity; a diverged training run produces such values: retrain with a smaller rate
    ");
    let mut bad = good.clone();
    bad.provenance = Some(Provenance {
        optimizer: "adam".into(),
        epochs: 3,
        train_cost: f64::INFINITY,
        validation_cost: None,
        data_file_hash: data_hash(b""),
        data_file: "d.csv".into(),
    });
    assert_eq!(bad.save(&path).unwrap_err().code, "F06");
    assert_eq!(fs::read(&path).unwrap(), before);
    assert_eq!(entries(&dir), ["w.json"]);
}

#[test]
fn a_failing_write_leaves_the_old_file_and_no_temporary_file() {
    let model = sample("valve_gate");
    let w = weights_for(&model);
    let dir = scratch("atomic");

    // Into a folder that does not exist: nothing is created.
    let missing = dir.join("no_such_dir").join("w.json");
    let err = w.save(&missing).unwrap_err();
    assert_eq!(err.code, "F01");
    assert!(
        err.message.starts_with("cannot write the weights file: "),
        "{err}"
    );
    assert!(entries(&dir).is_empty());

    // Onto a path that is a (non-empty) folder: the folder and its contents stay, and no
    // temporary file is left beside it.
    let folder = dir.join("w.json");
    fs::create_dir(&folder).unwrap();
    fs::write(folder.join("old.txt"), "old").unwrap();
    assert_eq!(w.save(&folder).unwrap_err().code, "F01");
    assert_eq!(entries(&dir), ["w.json"]);
    assert_eq!(entries(&folder), ["old.txt"]);
    assert_eq!(fs::read_to_string(folder.join("old.txt")).unwrap(), "old");

    // A successful save replaces an old, longer file completely.
    let path = dir.join("v.json");
    fs::write(&path, "x".repeat(100_000)).unwrap();
    w.save(&path).unwrap();
    assert_eq!(fs::read_to_string(&path).unwrap(), w.to_json());
    assert_eq!(entries(&dir), ["v.json", "w.json"]);
}

#[test]
fn a_missing_file_is_an_io_error() {
    let err = Weights::load(Path::new("no_such_weights.json")).unwrap_err();
    assert_eq!(err.code, "F01");
    assert!(err
        .to_string()
        .starts_with("no_such_weights.json: error[F01]: cannot read the weights file: "));
}
