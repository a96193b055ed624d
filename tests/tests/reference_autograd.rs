//! sinew against an automatic-differentiation oracle outside the project: numpy and the HIPS
//! `autograd` package (PyPI; versions pinned in `tests/reference/requirements.txt`).
//!
//! `tests/reference/autograd_reference.py` evaluates each network of its case table from the
//! formulas of the language reference (standardize, `z = W a + b`, `a = g(z)`; cross-entropy
//! from the logits with `logaddexp` / log-softmax; `1/2 sum (a - y)^2`; `J = (1/m) sum loss + P`
//! with `P = lambda/(2m) sum W^2` or `lambda/m sum |W|`, biases never penalised) and
//! differentiates `J` by reverse-mode autodiff. It writes the network, its parameters and
//! samples, and the expected outputs, per-sample losses, penalty, cost and gradient to
//! `tests/reference/goldens/*.json` with every float in its shortest exact (repr) form. The
//! goldens are committed, so these tests need no Python; `.ci/run` regenerates them and fails if
//! they changed.
//!
//! Each test writes a spec from the golden's description, checks it with `sinew::check_source`,
//! loads the golden parameters and compares:
//!
//! - the engine (`sinew::engine`: `Net::predict`, `Net::loss`, `batch::gradient_into`,
//!   `Net::penalty_cost`) on every golden;
//! - the generated code (`sinew_tests::<model>`, compiled by this crate's `build.rs`) on every
//!   golden that names a fixture of the same shape, loss and penalty (`"fixture"` in the file).
//!   The others (networks no fixture has: no hidden layer with a softmax or sigmoid output,
//!   saturated logits, three hidden layers with l1, one sample) are compared through the engine
//!   only; the engine is proven bit-identical to generated code by the bit-identity tests of this
//!   crate.
//!
//! # Tolerances (f64)
//!
//! A value passes when `|sinew - oracle| <= REL * max(|sinew|, |oracle|) + FLOOR`.
//!
//! - Outputs, losses, penalty and cost: `REL = 1e-12`, `FLOOR = 1e-15`. Both sides compute the
//!   same formulas in f64, but in different orders and forms: numpy multiplies whole batches
//!   (BLAS dot products, pairwise `mean`) where sinew sums sequentially; the oracle's sigmoid is
//!   `exp(-logaddexp(0, -z))` and its softmax `exp(z - logsumexp(z))` where sinew uses
//!   `1/(1 + e^-z)` and `e^(z - max) / sum`; the oracle's cross-entropies are
//!   `-sum y log softmax(z)` and `-[y log s + (1 - y) log(1 - s)]` through `logaddexp` where
//!   sinew forms `sum y (lse - z)` and `softplus(z) - y z`. Each form is accurate to a few ulps
//!   per operation, and the networks here have at most a few hundred operations per value, so
//!   honest differences stay below about 1e-14 relative; 1e-12 leaves two orders of margin. The
//!   floor covers a value that is a difference of O(1) terms (an identity output near zero),
//!   whose error is a few ulps of the terms (2^-52 is 2.2e-16), not of the value.
//! - Gradients: `REL = 1e-9`, `FLOOR = 1e-12`. Reverse-mode autodiff and sinew's backprop
//!   accumulate the chain rule in different orders (numpy sums over the batch inside each matrix
//!   product; sinew adds one sample's outer product at a time), and a gradient entry is a sum of
//!   per-sample terms that can cancel, so its relative error grows with the cancellation; the
//!   floor keeps entries that are nearly zero (a saturated unit's `a - y` of about 1e-18, which
//!   sinew rounds to exactly 0) from failing on their relative error. A wrong formula (a missing
//!   `1/m`, a wrong derivative) changes entries by orders of magnitude more than either bound.
//! - Gradients of the shaped goldens: `REL = 1e-10`, `FLOOR = 1e-12`. These networks are small
//!   (at most a few hundred parameters and four samples) and their largest measured difference
//!   is 3.7e-13 relative (an entry of a conv gradient summed over positions and samples), so
//!   the bound is ten times tighter than the dense one and still leaves over two orders of
//!   margin. The oracle sums a convolution over taps and channels at once (`einsum`) where sinew
//!   adds tap by tap, channel by channel.
//!
//! # Shaped networks
//!
//! A golden with a `shape` describes a window or grid input and `conv`, `depthwise` and `pool`
//! layers (REFERENCE.md, "Shapes: windows and grids"). The oracle computes every layer's
//! positions and zeros from the reference's rules and pads, gathers and contracts the taps in
//! numpy; its parameters follow sinew's layout (conv `[F][KH][KW][C]`, depthwise `[C][KH][KW]`,
//! no entry for a pooling) and its mean and std are per channel, which this test repeats for
//! every position. Besides the values above, [`shaped_geometry_matches_the_reference_rules`]
//! asserts that the shapes, kernels, strides and paddings sinew infers are the oracle's.

use serde_json::Value;
use sinew::engine::{batch, Net, Params, Scratch};
use sinew::ir::{Activation, LayerKind, Loss, Model, Pad, Penalty};
use sinew::weights::{FlatLayer, Standardization};
use sinew_harness::host::{backprop_gradient, is_f64, model_of, set_flat};
use sinew_harness::Visit;
use sinew_runtime::Real;
use std::collections::BTreeSet;
use std::path::PathBuf;

/// Relative tolerance of outputs, losses, penalty and cost.
const VALUE_REL: f64 = 1e-12;
/// Absolute floor of outputs, losses, penalty and cost.
const VALUE_FLOOR: f64 = 1e-15;
/// Relative tolerance of gradients.
const GRAD_REL: f64 = 1e-9;
/// Absolute floor of gradients.
const GRAD_FLOOR: f64 = 1e-12;
/// Relative tolerance of the gradients of the shaped goldens (window or grid inputs); their
/// floor is [`GRAD_FLOOR`].
const SHAPED_GRAD_REL: f64 = 1e-10;

/// One golden file, read.
struct Golden {
    file: String,
    fixture: Option<String>,
    model: Model,
    /// Per layer (row-major weights, bias).
    layers: Vec<FlatLayer>,
    mean: Vec<f64>,
    std: Vec<f64>,
    xs: Vec<Vec<f64>>,
    ys: Vec<Vec<f64>>,
    outputs: Vec<Vec<f64>>,
    losses: Vec<f64>,
    penalty: f64,
    cost: f64,
    /// Every gradient entry in model order (per layer: weights row-major, then bias).
    gradient: Vec<f64>,
    /// The network has a window or grid input.
    shaped: bool,
    /// The oracle's per-layer geometry (shaped goldens).
    geometry: Option<Value>,
}

fn goldens_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("reference")
        .join("goldens")
}

fn numbers(v: &Value, what: &str) -> Vec<f64> {
    v.as_array()
        .unwrap_or_else(|| panic!("{what}: not an array"))
        .iter()
        .map(|x| {
            x.as_f64()
                .unwrap_or_else(|| panic!("{what}: not a number: {x}"))
        })
        .collect()
}

fn rows(v: &Value, what: &str) -> Vec<Vec<f64>> {
    v.as_array()
        .unwrap_or_else(|| panic!("{what}: not an array"))
        .iter()
        .map(|r| numbers(r, what))
        .collect()
}

/// Sizes as the spec writes them: `12`, `3 x 2`.
fn sizes(v: &Value) -> String {
    numbers(v, "sizes")
        .iter()
        .map(|n| format!("{n}"))
        .collect::<Vec<_>>()
        .join(" x ")
}

/// The spec text of a golden's network (f64; the names of its layers; `x` for the input). A
/// shaped golden's `shape` becomes `input x 12 x 2` or `input x 6 x 5 x 2`, and its layers the
/// clauses of REFERENCE.md, "Shapes: windows and grids", `stride` and `pad` only where the
/// golden gives them.
fn spec_text(name: &str, net: &Value) -> String {
    let mut s = format!("model {name}\nscalar f64\n");
    let std = if net["standardize"].as_bool() == Some(true) {
        " standardize"
    } else {
        " unscaled"
    };
    let input = match net.get("shape") {
        Some(shape) => sizes(shape),
        None => net["inputs"].to_string(),
    };
    s += &format!("input x {input}{std}\n");
    let layers = net["layers"].as_array().expect("layers");
    for (i, l) in layers.iter().enumerate() {
        let place = if i + 1 == layers.len() {
            "output"
        } else {
            "layer"
        };
        let layer_name = l["name"].as_str().expect("name");
        let kind = l.get("kind").and_then(Value::as_str).unwrap_or("dense");
        if kind == "pool" {
            let size = match &l["size"] {
                Value::String(all) => all.clone(),
                v => sizes(v),
            };
            let op = l["op"].as_str().expect("op");
            s += &format!("{place} {layer_name} pool {op} {size}\n");
            continue;
        }
        let act = l["activation"].as_str().expect("activation");
        let act = match l.get("alpha").and_then(Value::as_f64) {
            Some(alpha) => format!("{act} {alpha}"),
            None => act.to_string(),
        };
        let what = match kind {
            "dense" => l["width"].to_string(),
            "conv" | "depthwise" => {
                let mut w = match kind {
                    "conv" => format!("conv {} kernel {}", l["filters"], sizes(&l["kernel"])),
                    _ => format!("depthwise kernel {}", sizes(&l["kernel"])),
                };
                if let Some(stride) = l.get("stride") {
                    w += &format!(" stride {stride}");
                }
                if let Some(pad) = l.get("pad").and_then(Value::as_str) {
                    w += &format!(" pad {pad}");
                }
                w
            }
            other => panic!("unknown layer kind {other:?}"),
        };
        s += &format!("{place} {layer_name} {what} {act}\n");
    }
    s += &format!("loss {}\n", net["loss"].as_str().expect("loss"));
    match net["penalty"]["kind"].as_str().expect("penalty kind") {
        "none" => s += "penalty none\n",
        kind => {
            s += &format!(
                "penalty {kind} {}\n",
                net["penalty"]["lambda"].as_f64().expect("lambda")
            )
        }
    }
    s
}

fn load(path: &std::path::Path) -> Golden {
    let file = path
        .file_name()
        .map(|f| f.to_string_lossy().into_owned())
        .unwrap_or_default();
    let text = std::fs::read_to_string(path).unwrap_or_else(|e| panic!("{file}: {e}"));
    let v: Value = serde_json::from_str(&text).unwrap_or_else(|e| panic!("{file}: {e}"));
    assert_eq!(
        v["format"], "sinew-reference-golden-1",
        "{file}: unknown format"
    );
    let name = v["name"].as_str().expect("name");
    let spec = spec_text(name, &v["network"]);
    let checked = sinew::check_source(&spec);
    let model = checked.model.unwrap_or_else(|| {
        panic!(
            "{file}: spec does not check:\n{spec}\n{:?}",
            checked.diagnostics
        )
    });
    // The golden lists the layers with parameters (a pooling has none, as in a weights file);
    // the engine takes one entry per layer, empty for a pooling.
    let mut file_layers = v["params"]["layers"]
        .as_array()
        .expect("params.layers")
        .iter()
        .map(|l| {
            FlatLayer::new(
                rows(&l["weights"], "weights").concat(),
                numbers(&l["bias"], "bias"),
            )
        });
    let layers: Vec<FlatLayer> = model
        .layers()
        .iter()
        .map(|l| match l.parameters() {
            0 => FlatLayer::default(),
            _ => file_layers
                .next()
                .unwrap_or_else(|| panic!("{file}: fewer parameter layers than the model")),
        })
        .collect();
    assert!(
        file_layers.next().is_none(),
        "{file}: more parameter layers than the model"
    );
    let e = &v["expected"];
    let gradient = e["gradients"]["layers"]
        .as_array()
        .expect("gradients")
        .iter()
        .flat_map(|l| {
            let mut g = rows(&l["weights"], "gradient weights").concat();
            g.extend(numbers(&l["bias"], "gradient bias"));
            g
        })
        .collect();
    // A shaped golden holds one mean and std per channel; the model stores them repeated for
    // every position, channel fastest (REFERENCE.md, "Shapes: windows and grids").
    let per_position = |values: Vec<f64>| -> Vec<f64> {
        let positions = model.input().width / values.len().max(1);
        (0..positions)
            .flat_map(|_| values.iter().copied())
            .collect()
    };
    let (mean, std) = if model.input().standardize {
        (
            per_position(numbers(&v["params"]["mean"], "mean")),
            per_position(numbers(&v["params"]["std"], "std")),
        )
    } else {
        (Vec::new(), Vec::new())
    };
    assert_eq!(
        mean.len(),
        if model.input().standardize {
            model.input().width
        } else {
            0
        }
    );
    Golden {
        file,
        fixture: v["fixture"].as_str().map(str::to_string),
        model,
        layers,
        mean,
        std,
        xs: rows(&v["samples"]["inputs"], "inputs"),
        ys: rows(&v["samples"]["targets"], "targets"),
        outputs: rows(&e["outputs"], "outputs"),
        losses: numbers(&e["losses"], "losses"),
        penalty: e["penalty"].as_f64().expect("penalty"),
        cost: e["cost"].as_f64().expect("cost"),
        gradient,
        shaped: v["network"].get("shape").is_some(),
        geometry: e.get("geometry").cloned(),
    }
}

fn goldens() -> Vec<Golden> {
    let mut paths: Vec<PathBuf> = std::fs::read_dir(goldens_dir())
        .expect("tests/reference/goldens exists")
        .map(|e| e.expect("directory entry").path())
        .filter(|p| p.extension().is_some_and(|x| x == "json"))
        .collect();
    paths.sort();
    paths.iter().map(|p| load(p)).collect()
}

/// Compares values, recording a line per failure and returning the worst relative error.
fn compare(
    what: &str,
    got: &[f64],
    want: &[f64],
    rel: f64,
    floor: f64,
    failures: &mut Vec<String>,
) -> f64 {
    if got.len() != want.len() {
        failures.push(format!(
            "{what}: {} values, the oracle has {}",
            got.len(),
            want.len()
        ));
        return f64::INFINITY;
    }
    let mut worst = 0.0f64;
    for (k, (&a, &b)) in got.iter().zip(want).enumerate() {
        let diff = (a - b).abs();
        let scale = a.abs().max(b.abs());
        if diff.is_nan() || diff > rel * scale + floor {
            failures.push(format!(
                "{what}[{k}]: sinew {a:e}, oracle {b:e} (difference {diff:.2e})"
            ));
        }
        if scale > 0.0 {
            worst = worst.max(diff / scale);
        }
    }
    worst
}

/// What one implementation computed for a golden.
struct Computed {
    outputs: Vec<Vec<f64>>,
    losses: Vec<f64>,
    penalty: f64,
    cost: f64,
    gradient: Vec<f64>,
}

fn compare_all(label: &str, g: &Golden, c: &Computed, failures: &mut Vec<String>) -> (f64, f64) {
    let mut worst_value = 0.0f64;
    for (i, (got, want)) in c.outputs.iter().zip(&g.outputs).enumerate() {
        let w = compare(
            &format!("{label} {}: output of sample {i}", g.file),
            got,
            want,
            VALUE_REL,
            VALUE_FLOOR,
            failures,
        );
        worst_value = worst_value.max(w);
    }
    let w = compare(
        &format!("{label} {}: losses", g.file),
        &c.losses,
        &g.losses,
        VALUE_REL,
        VALUE_FLOOR,
        failures,
    );
    worst_value = worst_value.max(w);
    let w = compare(
        &format!("{label} {}: penalty", g.file),
        &[c.penalty],
        &[g.penalty],
        VALUE_REL,
        VALUE_FLOOR,
        failures,
    );
    worst_value = worst_value.max(w);
    let w = compare(
        &format!("{label} {}: cost J", g.file),
        &[c.cost],
        &[g.cost],
        VALUE_REL,
        VALUE_FLOOR,
        failures,
    );
    worst_value = worst_value.max(w);
    let worst_grad = compare(
        &format!("{label} {}: gradient", g.file),
        &c.gradient,
        &g.gradient,
        if g.shaped { SHAPED_GRAD_REL } else { GRAD_REL },
        GRAD_FLOOR,
        failures,
    );
    (worst_value, worst_grad)
}

fn engine_run(g: &Golden) -> Computed {
    let scaling = g.model.input().standardize.then(|| Standardization {
        mean: g.mean.clone(),
        std: g.std.clone(),
    });
    let p = Params::<f64>::from_f64(&g.layers, scaling.as_ref());
    let net = Net::<f64>::new(&g.model);
    let mut s = Scratch::new(&g.model);
    let n_out = g.model.output().width;
    let mut outputs = Vec::new();
    let mut losses = Vec::new();
    for (x, y) in g.xs.iter().zip(&g.ys) {
        let mut out = vec![0.0; n_out];
        net.predict(&p, x, &mut s, &mut out)
            .expect("operands of the model's widths");
        outputs.push(out);
        losses.push(
            net.loss(&p, x, y, &mut s)
                .expect("operands of the model's widths"),
        );
    }
    let xs: Vec<f64> = g.xs.concat();
    let ys: Vec<f64> = g.ys.concat();
    let mut grad = Params::zero_gradient(&g.model);
    let cost = batch::gradient_into(&net, &p, &xs, &ys, &mut grad)
        .expect("whole samples")
        .expect("a non-empty batch");
    assert_eq!(
        cost.to_bits(),
        net.cost(&p, &xs, &ys)
            .expect("operands of the model's widths")
            .to_bits(),
        "{}: the batch cost is the plain cost",
        g.file
    );
    Computed {
        outputs,
        losses,
        penalty: net.penalty_cost(&p, g.xs.len()),
        cost,
        gradient: grad.flat_f64(),
    }
}

#[test]
fn engine_matches_autograd_goldens() {
    let all = goldens();
    let mut failures = Vec::new();
    for g in &all {
        let c = engine_run(g);
        let (v, gr) = compare_all("engine", g, &c, &mut failures);
        println!(
            "{}: worst relative difference: values {v:.1e}, gradient {gr:.1e}",
            g.file
        );
    }
    assert!(
        failures.is_empty(),
        "{} differences from the autograd oracle:\n{}",
        failures.len(),
        failures.join("\n")
    );
}

/// The goldens cover every activation (leaky_relu with several slopes), both losses with both
/// cross-entropy outputs, every penalty, inputs with and without `standardize`, 0 to 4 hidden
/// layers and a single-sample batch: deleting a golden that is the only one of its kind fails
/// here.
#[test]
fn goldens_cover_every_activation_loss_and_penalty() {
    let all = goldens();
    assert!(all.len() >= 20, "{} goldens", all.len());
    let mut seen: BTreeSet<String> = BTreeSet::new();
    for g in &all {
        let m = &g.model;
        for (i, l) in m.layers().iter().enumerate() {
            let place = if i + 1 == m.layers().len() {
                "output"
            } else {
                "hidden"
            };
            seen.insert(format!("{place} {}", l.activation.keyword()));
        }
        seen.insert(format!(
            "loss {} with {} output",
            m.loss().keyword(),
            m.output().activation.keyword()
        ));
        seen.insert(match m.penalty() {
            Penalty::None => "penalty none".into(),
            Penalty::L2(_) => "penalty l2".into(),
            Penalty::L1(_) => "penalty l1".into(),
        });
        seen.insert(format!("standardize {}", m.input().standardize));
        seen.insert(format!("hidden layers {}", m.hidden().len()));
        if g.xs.len() == 1 {
            seen.insert("one sample".into());
        }
        if m.loss() == Loss::CrossEntropy
            && g.outputs.iter().flatten().any(|&a| a == 1.0 || a < 1e-30)
        {
            seen.insert(format!("saturated {}", m.output().activation.keyword()));
        }
    }
    let slopes: BTreeSet<u64> = all
        .iter()
        .flat_map(|g| g.model.layers().iter())
        .filter_map(|l| match l.activation {
            Activation::LeakyRelu(a) => Some(a.to_bits()),
            _ => None,
        })
        .collect();
    assert!(slopes.len() >= 3, "leaky_relu slopes: {slopes:?}");
    let mut want: Vec<String> = ["identity", "sigmoid", "tanh", "relu", "leaky_relu"]
        .iter()
        .map(|a| format!("hidden {a}"))
        .collect();
    want.extend(
        ["identity", "sigmoid", "tanh", "softmax"]
            .iter()
            .map(|a| format!("output {a}")),
    );
    want.extend(
        [
            "loss cross_entropy with sigmoid output",
            "loss cross_entropy with softmax output",
            "loss squared_error with identity output",
            "loss squared_error with sigmoid output",
            "loss squared_error with softmax output",
            "penalty none",
            "penalty l2",
            "penalty l1",
            "standardize true",
            "standardize false",
            "hidden layers 0",
            "hidden layers 1",
            "hidden layers 2",
            "hidden layers 3",
            "hidden layers 4",
            "one sample",
            "saturated sigmoid",
            "saturated softmax",
        ]
        .map(String::from),
    );
    let missing: Vec<&String> = want.iter().filter(|w| !seen.contains(*w)).collect();
    assert!(missing.is_empty(), "not covered by any golden: {missing:?}");
}

fn ints(v: &Value, what: &str) -> Vec<usize> {
    v.as_array()
        .unwrap_or_else(|| panic!("{what}: not an array"))
        .iter()
        .map(|x| {
            x.as_u64()
                .unwrap_or_else(|| panic!("{what}: not a whole number: {x}")) as usize
        })
        .collect()
}

/// The shapes sinew infers agree with the ones the oracle computed from REFERENCE.md's rules
/// (`valid`: `floor((n - k) / s) + 1` positions; `same`: `ceil(n / s)` positions and
/// `max((out - 1) s + k - n, 0)` zeros, the smaller half before; pooling: `floor(n / k)`
/// positions, stride `k`; `all`: the whole map). The zeros after an axis are not stored by sinew;
/// they are what its windows read past the end: `max((out - 1) s + k - n - pad_before, 0)`.
#[test]
fn shaped_geometry_matches_the_reference_rules() {
    let mut checked = 0;
    for g in goldens().iter().filter(|g| g.shaped) {
        let geometry = g.geometry.as_ref().expect("a shaped golden has a geometry");
        let geometry = geometry.as_array().expect("geometry");
        let layers = g.model.layers();
        assert_eq!(geometry.len(), layers.len(), "{}: layers", g.file);
        for (l, want) in layers.iter().zip(geometry) {
            let at = format!("{} layer `{}`", g.file, l.name);
            let kind = match l.kind {
                LayerKind::Dense => "dense",
                LayerKind::Conv { .. } => "conv",
                LayerKind::Depthwise { .. } => "depthwise",
                LayerKind::Pool { .. } => "pool",
            };
            assert_eq!(Some(kind), want["kind"].as_str(), "{at}: kind");
            let dims = |s: &sinew::ir::Shape| vec![s.rows, s.cols, s.channels];
            assert_eq!(dims(&l.input), ints(&want["input"], "input"), "{at}: input");
            assert_eq!(
                dims(&l.output),
                ints(&want["output"], "output"),
                "{at}: output"
            );
            assert_eq!(
                Some(u64::from(l.output.rank)),
                want["rank"].as_u64(),
                "{at}: rank"
            );
            let Some(w) = l.kind.window() else {
                assert!(
                    want.get("kernel").is_none(),
                    "{at}: the oracle has a window"
                );
                continue;
            };
            let after = |n: usize, k: usize, s: usize, before: usize, out: usize| {
                ((out - 1) * s + k).saturating_sub(n + before)
            };
            let got = [
                vec![w.rows, w.cols, w.channels],
                vec![w.out_rows, w.out_cols, l.output.channels],
                vec![w.k_rows, w.k_cols],
                vec![w.stride_rows, w.stride_cols],
                vec![w.pad_top, w.pad_left],
                vec![
                    after(w.rows, w.k_rows, w.stride_rows, w.pad_top, w.out_rows),
                    after(w.cols, w.k_cols, w.stride_cols, w.pad_left, w.out_cols),
                ],
            ];
            let keys = [
                "input",
                "output",
                "kernel",
                "stride",
                "pad_before",
                "pad_after",
            ];
            for (key, got) in keys.iter().zip(got) {
                assert_eq!(got, ints(&want[*key], key), "{at}: {key}");
            }
            checked += 1;
        }
    }
    assert!(checked >= 25, "{checked} windowed layers checked");
}

/// The shaped goldens cover what REFERENCE.md, "Shapes: windows and grids", defines: conv and
/// depthwise on windows and grids with both paddings and strides 1 and above, square, non-square
/// and even kernels, max and average pooling on windows and grids (also `all`, and straight on
/// the input), `standardize` per channel, each loss head and each penalty.
#[test]
fn shaped_goldens_cover_the_shape_rules() {
    let all = goldens();
    let mut seen: BTreeSet<String> = BTreeSet::new();
    for g in all.iter().filter(|g| g.shaped) {
        let m = &g.model;
        let rank = |r: u8| if r == 2 { "window" } else { "grid" };
        seen.insert(format!("{} input", rank(m.input().shape.rank)));
        seen.insert(format!(
            "standardize {} {}",
            m.input().standardize,
            rank(m.input().shape.rank)
        ));
        for (i, l) in m.layers().iter().enumerate() {
            let on = rank(l.input.rank);
            match &l.kind {
                LayerKind::Conv { window, pad } | LayerKind::Depthwise { window, pad } => {
                    let stride = if window.stride_rows > 1 {
                        "strided"
                    } else {
                        "stride 1"
                    };
                    seen.insert(format!("{} {on} {pad:?} {stride}", l.kind.words()));
                    if window.k_rows % 2 == 0 && *pad == Pad::Same {
                        seen.insert("even kernel same".into());
                    }
                    if window.stride_rows > window.k_rows && *pad == Pad::Same {
                        seen.insert("stride above kernel same".into());
                    }
                    if on == "grid" && window.k_rows != window.k_cols {
                        seen.insert(format!("{} non-square kernel", l.kind.words()));
                    }
                }
                LayerKind::Pool { all, .. } => {
                    let size = if *all { "all" } else { "sized" };
                    seen.insert(format!("{} {on} {size}", l.kind.words()));
                    if i == 0 {
                        seen.insert(format!("{} on the input", l.kind.words()));
                    }
                }
                LayerKind::Dense => {}
            }
        }
        seen.insert(format!(
            "loss {} with {} output",
            m.loss().keyword(),
            m.output().activation.keyword()
        ));
        seen.insert(match m.penalty() {
            Penalty::None => "penalty none".into(),
            Penalty::L2(_) => "penalty l2".into(),
            Penalty::L1(_) => "penalty l1".into(),
        });
    }
    let mut want: Vec<String> = Vec::new();
    for kind in ["conv", "depthwise"] {
        for on in ["window", "grid"] {
            want.push(format!("{kind} {on} Valid stride 1"));
            want.push(format!("{kind} {on} Same stride 1"));
            want.push(format!("{kind} {on} Valid strided"));
        }
        want.push(format!("{kind} non-square kernel"));
    }
    want.extend(
        [
            "conv window Same strided",
            "conv grid Same strided",
            "even kernel same",
            "stride above kernel same",
            "window input",
            "grid input",
            "standardize true window",
            "standardize true grid",
            "standardize false window",
            "standardize false grid",
            "loss cross_entropy with sigmoid output",
            "loss cross_entropy with softmax output",
            "loss squared_error with identity output",
            "penalty none",
            "penalty l2",
            "penalty l1",
        ]
        .map(String::from),
    );
    for op in ["pool max", "pool average"] {
        for on in ["window", "grid"] {
            for size in ["sized", "all"] {
                want.push(format!("{op} {on} {size}"));
            }
        }
        want.push(format!("{op} on the input"));
    }
    let missing: Vec<&String> = want.iter().filter(|w| !seen.contains(*w)).collect();
    assert!(
        missing.is_empty(),
        "not covered by any shaped golden: {missing:?}"
    );
}

/// Runs the generated code of every fixture that a golden names.
struct Generated<'a> {
    goldens: &'a [Golden],
    failures: Vec<String>,
    compared: Vec<String>,
    /// Generated results bit for bit unequal to the engine's.
    not_bitwise: Vec<String>,
}

fn to_array<M: sinew_harness::Net, A: Copy + AsMut<[M::Scalar]>>(zero: A, v: &[f64]) -> A {
    let mut a = zero;
    for (s, &x) in a.as_mut().iter_mut().zip(v) {
        *s = M::Scalar::from_f64(x);
    }
    a
}

fn same_shape(a: &Model, b: &Model) -> bool {
    a.scalar() == b.scalar()
        && a.input().width == b.input().width
        && a.input().standardize == b.input().standardize
        && a.loss() == b.loss()
        && a.penalty() == b.penalty()
        && a.layers().len() == b.layers().len()
        && a.input().shape == b.input().shape
        && a.layers().iter().zip(b.layers()).all(|(x, y)| {
            x.kind == y.kind
                && x.width == y.width
                && x.fan_in == y.fan_in
                && x.activation == y.activation
        })
}

impl Visit for Generated<'_> {
    fn visit<M: sinew_harness::Net>(&mut self) {
        let Some(g) = self
            .goldens
            .iter()
            .find(|g| g.fixture.as_deref() == Some(M::NAME))
        else {
            return;
        };
        let fixture = model_of::<M>();
        if !is_f64::<M>() || !same_shape(&fixture, &g.model) {
            self.failures.push(format!(
                "{} names fixture `{}`, whose spec no longer has the golden's shape, loss and penalty: \
                 update the case table of tests/reference/autograd_reference.py and regenerate",
                g.file,
                M::NAME
            ));
            return;
        }
        let mut p = M::zero();
        set_flat(
            &mut p,
            &g.layers
                .iter()
                .flat_map(|l| l.weights.iter().chain(&l.bias))
                .copied()
                .collect::<Vec<f64>>(),
        );
        p.scaling_mut(&mut |mean, std| {
            for (m, &v) in mean.iter_mut().zip(&g.mean) {
                *m = M::Scalar::from_f64(v);
            }
            for (s, &v) in std.iter_mut().zip(&g.std) {
                *s = M::Scalar::from_f64(v);
            }
        });
        let xs: Vec<M::X> =
            g.xs.iter()
                .map(|x| to_array::<M, _>(M::x_zero(), x))
                .collect();
        let ys: Vec<M::Y> =
            g.ys.iter()
                .map(|y| to_array::<M, _>(M::y_zero(), y))
                .collect();
        let outputs: Vec<Vec<f64>> = xs
            .iter()
            .map(|x| p.forward(x).as_ref().iter().map(|&v| v.into()).collect())
            .collect();
        let losses: Vec<f64> = xs
            .iter()
            .zip(&ys)
            .map(|(x, y)| p.sample_loss(x, y).into())
            .collect();
        let gradient = backprop_gradient::<M>(&p, &xs, &ys);
        let c = Computed {
            outputs,
            losses,
            penalty: p.penalty(xs.len()).into(),
            cost: p.batch_cost(&xs, &ys).into(),
            gradient,
        };
        let (v, gr) = compare_all("generated", g, &c, &mut self.failures);
        println!(
            "{} (generated `{}`): worst relative difference: values {v:.1e}, gradient {gr:.1e}",
            g.file,
            M::NAME
        );
        // The contract of DEVELOPERS.md: generated code and engine agree bit for bit.
        let e = engine_run(g);
        let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<u64>>();
        if bits(&c.outputs.concat()) != bits(&e.outputs.concat())
            || bits(&c.losses) != bits(&e.losses)
            || c.cost.to_bits() != e.cost.to_bits()
            || bits(&c.gradient) != bits(&e.gradient)
        {
            self.not_bitwise.push(M::NAME.to_string());
        }
        self.compared.push(M::NAME.to_string());
    }
}

#[test]
fn generated_code_matches_autograd_goldens() {
    let all = goldens();
    let mut v = Generated {
        goldens: &all,
        failures: Vec::new(),
        compared: Vec::new(),
        not_bitwise: Vec::new(),
    };
    sinew_tests::for_each_model(&mut v);
    let named: BTreeSet<&str> = all.iter().filter_map(|g| g.fixture.as_deref()).collect();
    let compared: BTreeSet<&str> = v.compared.iter().map(String::as_str).collect();
    let missing: Vec<&&str> = named.difference(&compared).collect();
    assert!(
        v.failures.is_empty() && missing.is_empty(),
        "fixtures named by a golden but not generated: {missing:?}\n{} differences:\n{}",
        v.failures.len(),
        v.failures.join("\n")
    );
    assert!(compared.len() >= 10, "{compared:?}");
    assert!(
        v.not_bitwise.is_empty(),
        "generated code and engine differ bitwise on the goldens of {:?}",
        v.not_bitwise
    );
}
