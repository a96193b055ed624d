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

use serde_json::Value;
use sinew::engine::{batch, Net, Params, Scratch};
use sinew::ir::{Activation, Loss, Model, Penalty};
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

/// The spec text of a golden's network (f64; the names of its layers; `x` for the input).
fn spec_text(name: &str, net: &Value) -> String {
    let mut s = format!("model {name}\nscalar f64\n");
    let std = if net["standardize"].as_bool() == Some(true) {
        " standardize"
    } else {
        " unscaled"
    };
    s += &format!("input x {}{std}\n", net["inputs"]);
    let layers = net["layers"].as_array().expect("layers");
    for (i, l) in layers.iter().enumerate() {
        let kind = if i + 1 == layers.len() {
            "output"
        } else {
            "layer"
        };
        let act = l["activation"].as_str().expect("activation");
        let act = match l.get("alpha").and_then(Value::as_f64) {
            Some(alpha) => format!("{act} {alpha}"),
            None => act.to_string(),
        };
        s += &format!(
            "{kind} {} {} {act}\n",
            l["name"].as_str().expect("name"),
            l["width"]
        );
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
    let layers: Vec<FlatLayer> = v["params"]["layers"]
        .as_array()
        .expect("params.layers")
        .iter()
        .map(|l| {
            FlatLayer::new(
                rows(&l["weights"], "weights").concat(),
                numbers(&l["bias"], "bias"),
            )
        })
        .collect();
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
    let (mean, std) = if model.input().standardize {
        (
            numbers(&v["params"]["mean"], "mean"),
            numbers(&v["params"]["std"], "std"),
        )
    } else {
        (Vec::new(), Vec::new())
    };
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
        GRAD_REL,
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
        && a.layers().iter().zip(b.layers()).all(|(x, y)| {
            x.width == y.width && x.fan_in == y.fan_in && x.activation == y.activation
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
