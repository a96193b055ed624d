//! The `sinew` command end to end: every subcommand's success and failure paths and exit codes
//! (0 success, 1 errors in a spec or in data/weights that do not fit it, 2 usage or I/O).

mod common;

use common::*;

fn samples() -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(root().join("samples"))
        .unwrap()
        .filter_map(|e| e.ok())
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|x| x == "sinew"))
        .map(|p| format!("samples/{}", p.file_name().unwrap().to_string_lossy()))
        .collect();
    v.sort();
    v
}

#[test]
fn check_accepts_every_sample_and_prints_its_summary() {
    let files = samples();
    assert!(files.len() >= 3);
    let mut args = vec!["check"];
    args.extend(files.iter().map(String::as_str));
    let o = sinew(&args);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let out = String::from_utf8_lossy(&o.stdout);
    for f in &files {
        assert!(out.contains(&format!("{f}: ok")), "{out}");
    }
    assert!(
        out.contains("parameters 185"),
        "the 6-10-8-3 pump model has 185 parameters:\n{out}"
    );
}

#[test]
fn check_rejects_every_bad_spec_with_its_location() {
    let dir = root().join("tests/bad");
    let mut n = 0;
    for e in std::fs::read_dir(&dir).unwrap() {
        let p = e.unwrap().path();
        if p.extension().is_none_or(|x| x != "sinew") {
            continue;
        }
        let rel = format!("tests/bad/{}", p.file_name().unwrap().to_string_lossy());
        let o = sinew(&["check", &rel]);
        assert_eq!(o.status.code(), Some(1), "{rel}: {}", text(&o));
        let t = text(&o);
        let located = t.lines().any(|l| {
            l.split_once(&format!("{rel}:")).is_some_and(|(_, rest)| {
                let mut it = rest.split(':');
                let line = it.next().unwrap_or("");
                let col = it.next().unwrap_or("").trim_end();
                let col: String = col.chars().take_while(char::is_ascii_digit).collect();
                line.parse::<u32>().is_ok() && col.parse::<u32>().is_ok()
            })
        });
        assert!(located, "{rel} must print FILE:LINE:COL:\n{t}");
        n += 1;
    }
    assert!(n >= 30, "the bad corpus has {n} files");
}

#[test]
fn check_json_is_json_and_usage_and_io_errors_exit_2() {
    let o = sinew(&["check", "--json", "samples/pump_health.sinew"]);
    assert_eq!(o.status.code(), Some(0));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(v[0]["ok"], true);
    assert_eq!(v[0]["model"]["report"]["parameters"], 185);
    assert_eq!(
        sinew(&["check", "no/such/file.sinew"]).status.code(),
        Some(2)
    );
    assert_eq!(sinew(&["frobnicate"]).status.code(), Some(2));
    assert_eq!(sinew(&["check"]).status.code(), Some(2));
}

#[test]
fn emit_prints_rust_and_rejects_bad_specs() {
    let o = sinew(&["emit", "samples/pump_health.sinew"]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let code = String::from_utf8_lossy(&o.stdout);
    assert!(code.contains("pub mod pump_health"));
    syn::parse_file(&code).expect("emitted code parses as Rust");
    let bad = root().join("tests/bad");
    let first = std::fs::read_dir(bad)
        .unwrap()
        .filter_map(|e| e.ok())
        .map(|e| e.path())
        .find(|p| p.extension().is_some_and(|x| x == "sinew"))
        .unwrap();
    assert_eq!(
        sinew(&["emit", first.to_str().unwrap()]).status.code(),
        Some(1)
    );
    let dir = scratch("cli", "emit");
    let out = dir.join("deep/pump.rs");
    let o = sinew(&[
        "emit",
        "samples/pump_health.sinew",
        "-o",
        out.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    assert_eq!(std::fs::read_to_string(&out).unwrap(), code);
}

#[test]
fn init_train_eval_grad_gradcheck_round_trip() {
    let dir = scratch("cli", "train");
    let w0 = dir.join("init.json");
    let w = dir.join("w.json");
    let plot = dir.join("loss.svg");
    let (w0s, ws, plots) = (
        w0.to_str().unwrap(),
        w.to_str().unwrap(),
        plot.to_str().unwrap(),
    );
    let spec = "samples/pump_health.sinew";
    let data = "samples/pump_health.csv";

    let o = sinew(&["initial-weights", spec, "-o", w0s]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let o = sinew(&[
        "train", spec, "--data", data, "-o", ws, "--epochs", "20", "--quiet", "--plot", plots,
    ]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let out = String::from_utf8_lossy(&o.stdout);
    assert!(
        out.contains("validation") && out.contains("accuracy"),
        "{out}"
    );
    assert!(std::fs::read_to_string(&plot).unwrap().contains("<svg"));

    let o = sinew(&["eval", spec, "--weights", ws, "--data", data, "--json"]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert!(v["accuracy"].as_f64().unwrap() > 0.8, "{v}");
    assert_eq!(v["confusion"].as_array().unwrap().len(), 3);
    let o = sinew(&["eval", spec, "--weights", ws, "--data", data]);
    assert!(String::from_utf8_lossy(&o.stdout).contains("confusion"));

    let o = sinew(&["grad", spec, "--weights", ws, "--data", data, "--json"]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert!(v["cost"].as_f64().unwrap().is_finite());
    assert_eq!(
        v["gradients"]["hidden1"]["weights"]
            .as_array()
            .unwrap()
            .len(),
        10
    );
    assert_eq!(v["gradients"]["state"]["bias"].as_array().unwrap().len(), 3);

    let o = sinew(&["gradcheck", spec, "--weights", ws, "--data", data]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    // Start from the initial weights instead of the spec's initialisation.
    let o = sinew(&[
        "train",
        spec,
        "--data",
        data,
        "-o",
        ws,
        "--epochs",
        "2",
        "--quiet",
        "--weights",
        w0s,
        "--optimizer",
        "lbfgs",
    ]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
}

#[test]
fn gradcheck_passes_on_every_sample() {
    for f in samples() {
        let o = sinew(&["gradcheck", &f]);
        assert_eq!(o.status.code(), Some(0), "{f}: {}", text(&o));
        assert!(String::from_utf8_lossy(&o.stdout).contains("passed"));
    }
}

#[test]
fn failures_exit_with_their_codes_and_write_nothing() {
    let dir = scratch("cli", "fail");
    let w = dir.join("w.json");
    let ws = w.to_str().unwrap();
    // Weights of another model are refused by fingerprint.
    let other = dir.join("other.json");
    assert_eq!(
        sinew(&[
            "initial-weights",
            "samples/greenhouse_humidity.sinew",
            "-o",
            other.to_str().unwrap()
        ])
        .status
        .code(),
        Some(0)
    );
    let o = sinew(&[
        "eval",
        "samples/pump_health.sinew",
        "--weights",
        other.to_str().unwrap(),
        "--data",
        "samples/pump_health.csv",
    ]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(
        text(&o).contains("other.json")
            && text(&o).contains("error[F07]")
            && text(&o).contains("weights of model `greenhouse_humidity`"),
        "{}",
        text(&o)
    );
    // Data that does not fit the spec.
    let o = sinew(&[
        "train",
        "samples/pump_health.sinew",
        "--data",
        "samples/greenhouse_humidity.csv",
        "-o",
        ws,
        "--quiet",
    ]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(!w.exists());
    // Divergence: a huge rate; nothing is written.
    let o = sinew(&[
        "train",
        "samples/greenhouse_humidity.sinew",
        "--data",
        "samples/greenhouse_humidity.csv",
        "-o",
        ws,
        "--quiet",
        "--rate",
        "1e12",
        "--epochs",
        "3",
    ]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(
        text(&o).contains("diverged") && text(&o).contains("nothing was written"),
        "{}",
        text(&o)
    );
    assert!(!w.exists());
    // Missing files are I/O errors.
    let o = sinew(&[
        "train",
        "samples/pump_health.sinew",
        "--data",
        "no/such.csv",
        "-o",
        ws,
        "--quiet",
    ]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    let o = sinew(&[
        "eval",
        "samples/pump_health.sinew",
        "--weights",
        "no/such.json",
        "--data",
        "samples/pump_health.csv",
    ]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
}

#[test]
fn check_json_gives_line_and_column_of_each_span() {
    let dir = scratch("cli", "json-lines");
    // A non-ASCII name before the error on line 3: columns count characters, not bytes.
    let spec = dir.join("wide.sinew");
    std::fs::write(
        &spec,
        "# pompe à eau\nmodel m\ninput x 0 unscaled\noutput y 1 sigmoid\nloss cross_entropy\n",
    )
    .unwrap();
    let o = sinew(&["check", "--json", spec.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let d = &v[0]["diagnostics"][0];
    assert_eq!(d["code"], "S0401");
    assert_eq!(d["location"]["start"]["line"], 3);
    assert_eq!(d["location"]["start"]["column"], 9);
    assert_eq!(d["location"]["end"]["column"], 10);
    // The byte span is still there.
    assert_eq!(d["primary"]["span"]["start"], 31);
    let _ = std::fs::remove_dir_all(dir);
}

#[test]
fn training_on_unscaled_columns_warns_about_scales_and_a_class_never_predicted() {
    // Breast Cancer Wisconsin (Diagnostic), the copy scikit-learn ships (tests/data/NOTICE.md):
    // `worst_area` spreads in the hundreds, `fractal_dimension_error` in the thousandths. Fed
    // raw, the reference spec's network settles on the majority class (`benign`, 357 of 569).
    let dir = scratch("cli", "unscaled");
    let reference =
        std::fs::read_to_string(common::root().join("tests/reference/specs/breast_cancer.sinew"))
            .unwrap();
    let raw = reference.replace("input nuclei 30 standardize", "input nuclei 30");
    assert_ne!(raw, reference);
    let spec = dir.join("raw.sinew");
    std::fs::write(&spec, raw).unwrap();
    let weights = dir.join("w.json");
    let run = |spec: &str| {
        sinew(&[
            "train",
            spec,
            "--data",
            "tests/data/breast_cancer.csv",
            "-o",
            weights.to_str().unwrap(),
        ])
    };
    let o = run(spec.to_str().unwrap());
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    assert!(err.contains("warning[W0105]"), "{err}");
    assert!(
        err.contains(
            "tests/data/breast_cancer.csv: warning[W0201]: the spreads of the input columns"
        ),
        "{err}"
    );
    assert!(
        err.contains(
            "warning[W0202]: class `malignant` is never predicted on the validation split"
        ),
        "{err}"
    );
    assert!(weights.exists(), "the weights are still written");
    // Standardized, the same network predicts both classes: no finding.
    let o = run("tests/reference/specs/breast_cancer.sinew");
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    assert!(
        !String::from_utf8_lossy(&o.stderr).contains("warning"),
        "{}",
        text(&o)
    );
    let _ = std::fs::remove_dir_all(dir);
}
