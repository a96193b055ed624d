//! One fuzz input through the front end or a file reader, asserting the invariants that must
//! hold for every input. A panic here is a bug in sinew (or a broken invariant); the function
//! returns normally for every input that sinew handles as documented, accepted or refused.
//!
//! Used by `fuzz/fuzz_targets/*.rs` (libFuzzer, nightly) and by
//! `compiler/tests/fuzz_regressions.rs` (corpus replay and proptest, stable).

use sinew::data;
use sinew::emit::{self, EmitOptions};
use sinew::engine::{self, Scratch};
use sinew::ir::Model;
use sinew::pack;
use sinew::weights::{FlatLayer, Standardization, Weights};
use sinew_runtime::blob;

/// Models above this many parameters are checked, reported and dumped, but not emitted or
/// evaluated (that would only make each fuzz run slow, not find more).
const EMIT_LIMIT: usize = 4096;

/// Spec bytes (lossily decoded as UTF-8) through `check_source`, `render`, the report, the IR
/// dump, and for a small valid model the emitter (rolled, unrolled, and with its initial
/// weights baked in) and one engine pass.
///
/// Invariants: a model comes back exactly when there is no error; every span lies inside the
/// source on character boundaries; at most 101 findings; the rendering is empty exactly when
/// there are no findings; generated code for a checked model never falls back to
/// `compile_error!` (the emitter's output always parses).
pub fn parse_check(data: &[u8]) {
    let src = String::from_utf8_lossy(data);
    let checked = sinew::check_source(&src);
    assert_eq!(checked.model.is_some(), !checked.has_errors());
    for d in &checked.diagnostics {
        for span in std::iter::once(d.primary.span).chain(d.secondary.iter().map(|l| l.span)) {
            assert!(span.start <= span.end && span.end <= src.len(), "{span:?}");
            assert!(
                src.is_char_boundary(span.start) && src.is_char_boundary(span.end),
                "{span:?}"
            );
        }
        assert!(!d.message.is_empty());
    }
    assert!(checked.diagnostics.len() <= sinew::check::MAX_DIAGNOSTICS + 1);
    let text = sinew::diag::render("fuzz.sinew", &src, &checked.diagnostics, false);
    assert_eq!(text.is_empty(), checked.diagnostics.is_empty());
    if let Some(model) = &checked.model {
        valid_model(model);
    }
}

fn valid_model(model: &Model) {
    let report = sinew::report::Report::of(model);
    assert_eq!(report.parameters as usize, model.parameters());
    let _ = sinew::ir::dump(model);
    let _ = sinew::summary::table(model);
    if model.parameters() > EMIT_LIMIT {
        return;
    }
    let init = sinew::workflow::init(model, None);
    let trained = match init.fit(model) {
        Ok(t) => t,
        Err(e) => panic!("the initial weights of a checked model do not fit it: {e}"),
    };
    for (unroll_below, baked) in [(0, false), (64, false), (0, true)] {
        let options = EmitOptions {
            spec_name: "fuzz.sinew".to_string(),
            unroll_below,
        };
        let code = if baked {
            emit::generate_trained(&trained, &options)
        } else {
            emit::generate(model, &options)
        };
        assert!(
            !code.contains("compile_error!"),
            "the emitter failed on a checked model:\n{code}"
        );
    }
    match model.scalar() {
        sinew::ir::Scalar::F32 => engine_pass::<f32>(model),
        sinew::ir::Scalar::F64 => engine_pass::<f64>(model),
    }
}

/// Initialises the model, predicts, back-propagates one sample and takes one trainer step.
fn engine_pass<T: sinew_runtime::Real + Send + Sync>(model: &Model) {
    let net = engine::Net::<T>::new(model);
    let params = engine::Params::<T>::init(model, model.seed());
    let mut s = Scratch::new(model);
    let x = vec![T::from_f64(0.5); model.input().width];
    let y = vec![T::ZERO; model.output().width];
    let mut out = vec![T::ZERO; model.output().width];
    net.predict(&params, &x, &mut s, &mut out)
        .expect("operands of the model's widths");
    let mut g = engine::Params::zero_gradient(model);
    let _ = net
        .backprop(&params, &x, &y, &mut g, &mut s)
        .expect("operands of the model's widths");
    net.finish(&mut g, &params, 1)
        .expect("operands of the model's widths");
    let mut trainer = engine::Trainer::new(model, params);
    let _ = trainer
        .step(&x, &y)
        .expect("operands of the model's widths");
}

/// Three small models every file input is read against: a standardized one-unit classifier
/// (f64), a three-class softmax classifier (f32) and a two-output regressor (f64).
const MODELS: [&str; 3] = [
    "model gate\nscalar f64\ninput x 2 standardize\nlayer h 3 tanh\n\
     output y 1 sigmoid classes shut, open\nloss cross_entropy\n",
    "model kind\ninput x 3\noutput y 3 softmax classes idle, run, fault\nloss cross_entropy\n",
    "model level\nscalar f64\ninput x 2\nlayer h 2 relu\noutput y 2 identity\nloss squared_error\n",
];

fn models() -> Vec<Model> {
    MODELS
        .iter()
        .filter_map(|s| sinew::check_source(s).model)
        .collect()
}

/// A file input: the first byte picks the reader (`byte % 3`: 0 weights JSON, 1 CSV, 2 device
/// blob) and, for CSV, the model (`(byte / 3) % 3`); the rest is the file.
///
/// Invariants: an accepted weights file round-trips (save form, read again, same values and
/// the same text), and fits or is refused by each model without a panic, and evaluates when
/// it fits; an accepted CSV has at least one sample, rows of the model's widths, only finite
/// values and labels in range, and can be split and standardized; a blob that decodes (for one
/// of the models, or for the fingerprint and count in its own header) is re-encoded by both
/// encoders, the runtime's `Writer` and `sinew::pack`, to exactly its own bytes.
pub fn files(data: &[u8]) {
    let Some((&selector, rest)) = data.split_first() else {
        return;
    };
    let models = models();
    let text = String::from_utf8_lossy(rest);
    match selector % 3 {
        0 => weights(&text, &models),
        1 => {
            if let Some(model) = models.get(usize::from(selector / 3) % models.len()) {
                csv(&text, model);
            }
        }
        _ => blob(rest, &models),
    }
}

fn weights(text: &str, models: &[Model]) {
    let Ok(w) = Weights::from_json("fuzz.json", text) else {
        return;
    };
    let first = w.to_json();
    let again = match Weights::from_json("fuzz.json", &first) {
        Ok(a) => a,
        Err(e) => panic!("the save form of an accepted file is refused: {e}\n{first}"),
    };
    assert_eq!(again, w);
    assert_eq!(again.to_json(), first);
    for model in models {
        if w.check_against(model).is_ok() {
            let layers = w.layers_flat();
            let p = engine::Params::<f64>::from_f64(&layers, w.standardization.as_ref());
            let net = engine::Net::<f64>::new(model);
            let mut s = Scratch::new(model);
            let x = vec![1.0; model.input().width];
            let mut out = vec![0.0; model.output().width];
            net.predict(&p, &x, &mut s, &mut out)
                .expect("operands of the model's widths");
        }
    }
}

fn csv(text: &str, model: &Model) {
    let Ok(ds) = data::read_csv_str("fuzz.csv", text, model) else {
        return;
    };
    assert!(!ds.is_empty());
    assert_eq!(ds.inputs.len(), ds.targets.len());
    for (x, y) in ds.inputs.iter().zip(&ds.targets) {
        assert_eq!(x.len(), model.input().width);
        assert_eq!(y.len(), model.output().width);
        assert!(x.iter().chain(y).all(|v| v.is_finite()));
    }
    if let Some(labels) = &ds.labels {
        assert_eq!(labels.len(), ds.len());
        let classes = model.output().width.max(2);
        assert!(labels.iter().all(|&l| l < classes));
    }
    let (train, validation) = data::split(&ds, 0.25, 7);
    assert_eq!(train.len() + validation.len(), ds.len());
    let _ = data::mean_std(&ds);
}

fn blob(bytes: &[u8], models: &[Model]) {
    let Ok(header) = blob::Header::parse(bytes) else {
        return;
    };
    let count = usize::try_from(header.count).unwrap_or(usize::MAX);
    // Against the blob's own header: reaches the length, checksum and value checks.
    match header.kind {
        blob::ScalarKind::F32 => reencode::<f32>(bytes, header.fingerprint, count),
        blob::ScalarKind::F64 => reencode::<f64>(bytes, header.fingerprint, count),
    }
    for model in models {
        if let Ok(values) = pack::decode(model, bytes) {
            assert_eq!(values.len(), pack::value_count(model));
            assert_eq!(bytes.len(), pack::blob_len(model));
            // Through the weights form and `sinew pack`'s encoder.
            let mut at = 0;
            let mut layers = Vec::new();
            for l in model.layers() {
                let n = l.width * l.fan_in;
                layers.push(FlatLayer {
                    weights: values[at..at + n].to_vec(),
                    bias: values[at + n..at + n + l.width].to_vec(),
                });
                at += n + l.width;
            }
            let scaling = model.input().standardize.then(|| {
                let w = model.input().width;
                Standardization {
                    mean: values[at..at + w].to_vec(),
                    std: values[at + w..at + 2 * w].to_vec(),
                }
            });
            let w = Weights::from_params(model, layers, scaling, None);
            if let Ok(again) = pack::encode(model, &w) {
                assert_eq!(
                    again, bytes,
                    "sinew pack re-encodes a decoded blob differently"
                );
            }
        }
    }
}

/// Decodes with the runtime's `Values` and, when that succeeds, writes the values back with the
/// runtime's `Writer`: the bytes must be the same.
fn reencode<T: blob::BlobScalar + Copy + Default>(bytes: &[u8], fingerprint: u64, count: usize) {
    let Ok(mut values) = blob::Values::<T>::open(bytes, fingerprint, count) else {
        return;
    };
    let mut v = vec![T::default(); count];
    assert_eq!(values.read_into(&mut v), count);
    assert_eq!(values.remaining(), 0);
    let mut out = vec![0u8; bytes.len()];
    let Ok(mut w) = blob::Writer::<T>::new(&mut out, fingerprint, count) else {
        panic!("a blob that decodes cannot be written again");
    };
    w.write(&v);
    assert_eq!(w.finish().ok(), Some(bytes.len()));
    assert_eq!(out, bytes);
}
