//! Data files: the CSV error corpus, both column layouts, the train/validation split and the
//! standardization statistics.

use proptest::prelude::*;
use sinew::data::{mean_std, read_csv, read_csv_str, split, Dataset, MAX_RECORD_BYTES};
use sinew::ir::Model;
use std::fs;
use std::path::{Path, PathBuf};

fn manifest() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

/// The checked model of `samples/<name>.sinew`.
fn sample(name: &str) -> Model {
    let path = manifest().join("../samples").join(format!("{name}.sinew"));
    let text = fs::read_to_string(&path).unwrap();
    spec(&text)
}

fn spec(text: &str) -> Model {
    let checked = sinew::check_source(text);
    checked
        .model
        .unwrap_or_else(|| panic!("spec does not check: {:?}", checked.diagnostics))
}

/// A fresh scratch folder under Cargo's per-target temporary directory.
fn scratch(name: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR"))
        .join("data-tests")
        .join(name);
    let _ = fs::remove_dir_all(&dir);
    fs::create_dir_all(&dir).unwrap();
    dir
}

/// The model a corpus folder is read for: `tests/csv_bad/<dir>.sinew`, else the sample.
fn corpus_model(dir: &str) -> Model {
    let fixture = manifest()
        .join("tests/csv_bad")
        .join(format!("{dir}.sinew"));
    match fs::read_to_string(fixture) {
        Ok(text) => spec(&text),
        Err(_) => sample(dir),
    }
}

#[test]
fn csv_error_corpus() {
    insta::glob!("csv_bad/*/*.csv", |path| {
        // Read through the file path relative to the package root (the test's working directory),
        // so the message shows a stable name.
        let relative = path.strip_prefix(manifest()).unwrap();
        let model_name = path
            .parent()
            .unwrap()
            .file_name()
            .unwrap()
            .to_str()
            .unwrap();
        let err =
            read_csv(relative, &corpus_model(model_name)).expect_err("a bad file must be refused");
        assert!(err.to_string().contains(&format!("error[{}]", err.code)));
        insta::assert_snapshot!(err.to_string());
    });
}

#[test]
fn the_corpus_covers_every_content_error_code() {
    // The corpus covers each code the reader can raise from file contents.
    let mut codes: Vec<&str> = Vec::new();
    for dir in [
        "pump_health",
        "valve_gate",
        "greenhouse_humidity",
        "wear_estimate",
    ] {
        let model = corpus_model(dir);
        for entry in fs::read_dir(manifest().join("tests/csv_bad").join(dir)).unwrap() {
            let path = entry.unwrap().path();
            codes.push(read_csv(&path, &model).unwrap_err().code.as_str());
        }
    }
    codes.sort();
    codes.dedup();
    assert_eq!(
        codes,
        ["D02", "D03", "D04", "D05", "D06", "D07", "D08", "D09", "D10", "D12", "D13"]
    );
}

#[test]
fn a_missing_file_is_an_io_error() {
    let err = read_csv(
        Path::new("tests/csv_bad/no_such_file.csv"),
        &sample("pump_health"),
    )
    .unwrap_err();
    assert_eq!(err.code, "D01");
    assert_eq!(err.line, None);
    assert!(
        err.to_string()
            .starts_with("tests/csv_bad/no_such_file.csv: error[D01]: cannot read the data file: "),
        "{err}"
    );
}

#[test]
fn a_record_longer_than_the_limit_is_refused_while_streaming() {
    // A stray opening quote makes the rest of a 3 MiB file one record.
    let dir = scratch("long_record");
    let path = dir.join("long.csv");
    let mut text = String::from("switch_a,switch_b,label\n0,1,open\n\"1,0,open\n");
    while text.len() < 3 * MAX_RECORD_BYTES as usize {
        text.push_str("1,1,shut\n");
    }
    fs::write(&path, &text).unwrap();
    let err = read_csv(&path, &sample("valve_gate")).unwrap_err();
    assert_eq!(err.code, "D11");
    assert_eq!(err.line, Some(3));
    assert!(err.message.contains("longer than 1048576 bytes"), "{err}");
}

#[test]
fn labels_by_index_and_by_name_give_one_hot_targets() {
    let model = sample("pump_health");
    let text = "a,b,c,d,e,f,label\n\
                1,2,3,4,5,6,normal\n\
                1,2,3,4,5,6,2\n\
                1,2,3,4,5,6,cavitation\n\
                1,2,3,4,5,6,0\n\
                1,2,3,4,5,6,worn_bearing\n";
    let ds = read_csv_str("pump.csv", text, &model).unwrap();
    assert_eq!(ds.labels, Some(vec![0, 2, 1, 0, 2]));
    assert_eq!(
        ds.targets,
        vec![
            vec![1.0, 0.0, 0.0],
            vec![0.0, 0.0, 1.0],
            vec![0.0, 1.0, 0.0],
            vec![1.0, 0.0, 0.0],
            vec![0.0, 0.0, 1.0],
        ]
    );
    assert_eq!(ds.inputs[0], [1.0, 2.0, 3.0, 4.0, 5.0, 6.0]);
    assert_eq!(ds.input_names, ["a", "b", "c", "d", "e", "f"]);
}

#[test]
fn a_one_unit_sigmoid_label_maps_to_zero_or_one() {
    let model = sample("valve_gate");
    let text = "switch_a,switch_b,label\n0,0,shut\n0,1,open\n1,0,1\n1,1,0\n";
    let ds = read_csv_str("gate.csv", text, &model).unwrap();
    assert_eq!(ds.targets, vec![vec![0.0], vec![1.0], vec![1.0], vec![0.0]]);
    assert_eq!(ds.labels, Some(vec![0, 1, 1, 0]));
    assert_eq!(
        ds.inputs,
        vec![
            vec![0.0, 0.0],
            vec![0.0, 1.0],
            vec![1.0, 0.0],
            vec![1.0, 1.0]
        ]
    );
}

#[test]
fn one_column_per_output_reads_targets_and_derives_labels_from_one_hot_rows() {
    let model = sample("pump_health");
    let one_hot =
        "a,b,c,d,e,f,normal,cavitation,worn_bearing\n1,2,3,4,5,6,0,1,0\n1,2,3,4,5,6,1,0,0\n";
    let ds = read_csv_str("pump.csv", one_hot, &model).unwrap();
    assert_eq!(ds.targets, vec![vec![0.0, 1.0, 0.0], vec![1.0, 0.0, 0.0]]);
    assert_eq!(ds.labels, Some(vec![1, 0]));
    // Soft targets are kept as given, and are not classes.
    let soft = "a,b,c,d,e,f,normal,cavitation,worn_bearing\n1,2,3,4,5,6,0.2,0.7,0.1\n";
    let ds = read_csv_str("pump.csv", soft, &model).unwrap();
    assert_eq!(ds.targets, vec![vec![0.2, 0.7, 0.1]]);
    assert_eq!(ds.labels, None);
}

#[test]
fn a_regressor_reads_its_targets_even_from_a_column_named_label() {
    let model = sample("greenhouse_humidity");
    let text = "t,leaf,vent,mist,label\n21.5,20.9,30,0,64.5\n22.0,21.1,35,12,-3e1\n";
    let ds = read_csv_str("gh.csv", text, &model).unwrap();
    assert_eq!(ds.targets, vec![vec![64.5], vec![-30.0]]);
    assert_eq!(ds.labels, None);
}

#[test]
fn spaces_quotes_blank_lines_crlf_and_a_byte_order_mark_are_accepted() {
    let model = sample("valve_gate");
    let text = "\u{feff}switch_a , switch_b,label\r\n\r\n 0 ,\"1\", open \r\n\r\n1,0,\"shut\"\r\n";
    let ds = read_csv_str("gate.csv", text, &model).unwrap();
    assert_eq!(ds.input_names, ["switch_a", "switch_b"]);
    assert_eq!(ds.inputs, vec![vec![0.0, 1.0], vec![1.0, 0.0]]);
    assert_eq!(ds.labels, Some(vec![1, 0]));
    // Line numbers count the blank lines.
    let bad = "a,b,label\n\n0,1,open\n\n1,x,shut\n";
    assert_eq!(
        read_csv_str("gate.csv", bad, &model).unwrap_err().line,
        Some(5)
    );
}

#[test]
fn a_label_without_class_names_must_be_an_index() {
    let model = spec(
        "model sorter\ninput x 2\nlayer h 3 tanh\noutput kind 3 softmax\nloss cross_entropy\n",
    );
    let ds = read_csv_str("s.csv", "a,b,label\n0,1,2\n1,1,0\n", &model).unwrap();
    assert_eq!(ds.labels, Some(vec![2, 0]));
    let err = read_csv_str("s.csv", "a,b,label\n0,1,big\n", &model).unwrap_err();
    insta::assert_snapshot!(err.to_string(), @r"
    s.csv:2: error[D08]: label `big` in column 3 (`label`) is not a class index, and the spec names no classes
      help: use class indices from 0 to 2, or name the classes with `classes ...` on the spec's output line
    ");
}

/// A data set whose sample `i` has input `[i]`, so rows can be traced through a split.
fn traced(labels: Option<Vec<usize>>, n: usize) -> Dataset {
    Dataset {
        inputs: (0..n).map(|i| vec![i as f64]).collect(),
        targets: (0..n)
            .map(|i| vec![labels.as_ref().map_or(0.0, |l| l[i] as f64)])
            .collect(),
        labels,
        input_names: vec!["i".into()],
    }
}

fn ids(ds: &Dataset) -> Vec<usize> {
    ds.inputs.iter().map(|r| r[0] as usize).collect()
}

/// Checks that a split is disjoint and covering, keeps rows intact, and (with labels) gives
/// every class its share within one sample.
fn check_split(ds: &Dataset, fraction: f64, seed: u64) {
    let (train, valid) = split(ds, fraction, seed);
    let n = ds.len();
    let mut all: Vec<usize> = ids(&train).into_iter().chain(ids(&valid)).collect();
    all.sort();
    assert_eq!(all, (0..n).collect::<Vec<_>>(), "disjoint and covering");
    for part in [&train, &valid] {
        for (row, id) in part.targets.iter().zip(ids(part)) {
            assert_eq!(row, &ds.targets[id], "targets travel with their inputs");
        }
        if let (Some(l), Some(all_l)) = (&part.labels, &ds.labels) {
            assert_eq!(l, &ids(part).iter().map(|&i| all_l[i]).collect::<Vec<_>>());
        }
        let order = ids(part);
        assert!(order.windows(2).all(|w| w[0] < w[1]), "file order is kept");
    }
    let f = fraction.clamp(0.0, 1.0);
    assert_eq!(valid.len(), (f * n as f64).round() as usize);
    if let Some(labels) = &ds.labels {
        let k = labels.iter().max().map_or(0, |m| m + 1);
        let vl = valid.labels.as_ref().unwrap();
        for c in 0..k {
            let n_c = labels.iter().filter(|&&l| l == c).count();
            let v_c = vl.iter().filter(|&&l| l == c).count();
            let target = f * n_c as f64;
            assert!(
                (v_c as f64 - target).abs() <= 1.0,
                "class {c}: {v_c} in validation, target {target}"
            );
        }
    }
}

#[test]
fn split_is_deterministic_stratified_disjoint_and_covering() {
    // Classes of 50, 30, 20 and 7 samples, interleaved.
    let mut labels = Vec::new();
    for (c, n) in [50, 30, 20, 7].into_iter().enumerate() {
        labels.extend(std::iter::repeat_n(c, n));
    }
    labels.rotate_left(13);
    let ds = traced(Some(labels), 107);
    check_split(&ds, 0.2, 7);
    let (t1, v1) = split(&ds, 0.2, 7);
    let (t2, v2) = split(&ds, 0.2, 7);
    assert_eq!((&t1, &v1), (&t2, &v2), "same seed, same split");
    let (_, v3) = split(&ds, 0.2, 8);
    assert_ne!(ids(&v1), ids(&v3), "another seed, another split");
    // 0.2 of 50, 30, 20 and 7 is 10, 6, 4 and 1.4: 21 in all (round(0.2 * 107) = 21), so the
    // 7-sample class gives 1 and no class gets an extra sample.
    let vl = v1.labels.unwrap();
    let counts: Vec<usize> = (0..4)
        .map(|c| vl.iter().filter(|&&l| l == c).count())
        .collect();
    assert_eq!(counts, [10, 6, 4, 1]);
}

#[test]
fn split_without_labels_is_a_plain_shuffle() {
    let ds = traced(None, 25);
    check_split(&ds, 0.3, 1);
    let (train, valid) = split(&ds, 0.3, 1);
    assert_eq!((train.len(), valid.len()), (17, 8)); // round(7.5) = 8
    assert_eq!(train.labels, None);
}

#[test]
fn split_edges_zero_one_and_nan() {
    let ds = traced(Some(vec![0, 1, 0, 1, 1]), 5);
    assert_eq!(split(&ds, 0.0, 3).1.len(), 0);
    assert_eq!(split(&ds, 1.0, 3).0.len(), 0);
    assert_eq!(split(&ds, f64::NAN, 3).1.len(), 0);
    assert_eq!(split(&ds, 7.0, 3).1.len(), 5);
    let empty = traced(Some(vec![]), 0);
    let (t, v) = split(&empty, 0.5, 3);
    assert!(t.is_empty() && v.is_empty());
}

#[test]
fn split_follows_splitmix64_and_fisher_yates_by_hand() {
    // Worked by hand. SplitMix64 seeded with 0 first returns 0xe220a8397b1dcdaf (the
    // generator's commonly quoted first output for seed 0, from memory; the runtime's own test
    // checks it too). Fisher–Yates on [0, 1]: i = 1, j = 0xe220a8397b1dcdaf % 2 = 1 (the value
    // is odd), so nothing moves and the first element, sample 0, goes to validation.
    let ds = traced(None, 2);
    let (train, valid) = split(&ds, 0.5, 0);
    assert_eq!((ids(&train), ids(&valid)), (vec![1], vec![0]));
}

proptest! {
    #[test]
    fn split_properties_hold_for_random_data(
        labels in proptest::collection::vec(0usize..5, 0..200),
        fraction in 0.0f64..=1.0,
        seed in any::<u64>(),
        with_labels in any::<bool>(),
    ) {
        let n = labels.len();
        let ds = traced(with_labels.then_some(labels), n);
        check_split(&ds, fraction, seed);
    }
}

#[test]
fn mean_and_population_std_by_hand() {
    // Column 1: 2, 4, 4, 4, 5, 5, 7, 9, the worked example of the "Standard deviation" article
    // of Wikipedia (from memory): mean 40 / 8 = 5; squared deviations 9, 1, 1, 1, 0, 0, 4, 16
    // sum to 32; population variance 32 / 8 = 4; std 2.
    // Column 2: constant 3.5: mean 3.5, std 0, which is replaced by 1.0 (documented).
    // Column 3: -1, 1 repeated: mean 0, every squared deviation 1, variance 1, std 1.
    let col1 = [2.0, 4.0, 4.0, 4.0, 5.0, 5.0, 7.0, 9.0];
    let col3 = [-1.0, 1.0, -1.0, 1.0, -1.0, 1.0, -1.0, 1.0];
    let ds = Dataset {
        inputs: (0..8).map(|i| vec![col1[i], 3.5, col3[i]]).collect(),
        targets: vec![vec![0.0]; 8],
        labels: None,
        input_names: vec!["a".into(), "b".into(), "c".into()],
    };
    let (mean, std) = mean_std(&ds);
    assert_eq!(mean, [5.0, 3.5, 0.0]);
    assert_eq!(std, [2.0, 1.0, 1.0]);
}

#[test]
fn mean_std_of_no_samples_is_the_identity_scaling() {
    let ds = Dataset {
        inputs: vec![],
        targets: vec![],
        labels: None,
        input_names: vec!["a".into(); 3],
    };
    assert_eq!(mean_std(&ds), (vec![0.0; 3], vec![1.0; 3]));
}

#[test]
fn statistics_come_from_the_training_split() {
    let model = sample("valve_gate");
    let mut text = String::from("a,b,label\n");
    for i in 0..20 {
        text.push_str(&format!(
            "{},{},{}\n",
            i,
            i % 3,
            if i % 2 == 0 { "open" } else { "shut" }
        ));
    }
    let ds = read_csv_str("gate.csv", &text, &model).unwrap();
    let (train, valid) = split(&ds, 0.25, 11);
    assert_eq!((train.len(), valid.len()), (15, 5));
    let (mean, _) = mean_std(&train);
    let by_hand: f64 = train.inputs.iter().map(|r| r[0]).sum::<f64>() / 15.0;
    assert_eq!(mean[0], by_hand);
    assert_ne!(mean[0], 9.5, "the mean of all 20 samples would be 9.5");
}

#[test]
fn a_file_without_a_header_is_named_as_such() {
    let m = sample("valve_gate");
    let e = read_csv_str("gate.csv", "0,1,1\n1,1,0\n", &m).unwrap_err();
    assert_eq!(e.code, "D16", "{e}");
    assert!(
        e.to_string().starts_with(
            "gate.csv:1: error[D16]: the first line holds numbers: the file has no header\n  \
             help: a header for `valve_gate` reads `switches1,switches2,label`"
        ),
        "{e}"
    );
}

#[test]
fn a_class_column_not_headed_label_says_what_is_expected() {
    // valve_gate: 2 inputs, a one-unit sigmoid output with classes `shut, open`.
    let m = sample("valve_gate");
    let e = read_csv_str("gate.csv", "a,b,state\n0,1,open\n", &m).unwrap_err();
    assert_eq!(e.code, "D06", "{e}");
    let help = e.help.clone().unwrap_or_default();
    assert!(
        help.contains("headed exactly `label` (it is `state`)"),
        "{help}"
    );
    // pump_health: 6 inputs, a three-unit softmax: 7 columns fit only the label layout.
    let m = sample("pump_health");
    let e = read_csv_str("p.csv", "a,b,c,d,e,f,class\n1,2,3,4,5,6,normal\n", &m).unwrap_err();
    assert_eq!(e.code, "D04", "{e}");
    let help = e.help.clone().unwrap_or_default();
    assert!(
        help.contains("head the last column exactly `label` (it is `class`)"),
        "{help}"
    );
}

/// A window's CSV holds its values row-major, step by step, the channel fastest; a header of the
/// wrong length says how the columns of the shape add up (`4 x 2 = 8`).
#[test]
fn a_window_reads_row_major_and_a_short_header_counts_the_shape() {
    let m = spec(
        "model w\ninput sig 4 x 2 unscaled\nlayer c conv 2 kernel 2 relu\noutput y 2 softmax\n\
         loss cross_entropy\n",
    );
    let header: Vec<String> = (0..8).map(|i| format!("v{i}")).collect();
    let text = format!("{},label\n0,1,2,3,4,5,6,7,1\n", header.join(","));
    let ds = sinew::data::read_csv_str("w.csv", &text, &m).unwrap();
    assert_eq!(
        ds.inputs,
        vec![vec![0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0]]
    );
    assert_eq!(ds.targets, vec![vec![0.0, 1.0]]);

    let short = "v0,v1,v2,v3,v4,v5,v6,label\n0,1,2,3,4,5,6,1\n";
    let e = sinew::data::read_csv_str("w.csv", short, &m).unwrap_err();
    let text = e.to_string();
    assert!(text.contains("D04"), "{text}");
    assert!(text.contains("4 x 2 = 8 input columns"), "{text}");
}
