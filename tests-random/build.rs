//! Generates [`NETWORKS`] random valid specs from one seeded SplitMix64 (sinew-runtime's), then
//! compiles every one of them through the public build API into this crate, exactly as a user's
//! `build.rs` would, and writes `OUT_DIR/index.rs` (included by `src/lib.rs`): each model as
//! `sinew_tests_random::<model>`, an `impl sinew_harness::Net` for its `Params` (the glue of
//! `sinew_harness::glue`), and `for_each_net`.
//!
//! What is drawn, per network (see [`spec`]):
//!
//! - `scalar f32` or `f64`; an input of 1 to 64 features, `standardize` or not;
//! - 1 to 4 hidden layers of 1 to 64 units; the first hidden layer of network `i` takes
//!   activation `i mod 5` of identity, sigmoid, tanh, relu, leaky_relu (so all five appear),
//!   the others a random one; leaky_relu slopes in [0, 0.5);
//! - the loss, alternating between networks: `cross_entropy` with a sigmoid (1 to 16 units,
//!   `classes` for one in three) or softmax output (2 to 16 units, `classes` for one in three),
//!   or `squared_error` with any of the six output activations (softmax draws warning W0101,
//!   which is allowed);
//! - penalty none, l2 or l1 with a strength in [0, 0.1] (exactly 0 now and then: warning W0104);
//! - init uniform, glorot or he with a random seed; sgd (with or without momentum) or adam (with
//!   or without betas), batch and epochs; a generous budget on some.
//!
//! One network in five is compiled with unrolled kernels (`unroll_below(48)`, which unrolls its
//! layers of fewer than 48 weights), the rest with the default rolled kernels.

use sinew_harness::glue::{for_each, include_generated, net_impl, SpecFile};
use sinew_runtime::rng::SplitMix64;
use std::error::Error;
use std::fmt::Write as _;
use std::path::PathBuf;

/// How many networks are generated and compiled.
const NETWORKS: usize = 240;
/// The generator's seed: change it to draw a different family of networks.
const SEED: u64 = 0x005e_ed0f_5e1f;
/// Unrolling threshold for the networks compiled with unrolled kernels.
const UNROLL_BELOW: usize = 48;

const HIDDEN: [&str; 5] = ["identity", "sigmoid", "tanh", "relu", "leaky_relu"];
const OUTPUT_SQUARED: [&str; 6] = [
    "identity",
    "sigmoid",
    "tanh",
    "relu",
    "leaky_relu",
    "softmax",
];

/// A uniform draw from `lo..=hi`.
fn int(rng: &mut SplitMix64, lo: usize, hi: usize) -> usize {
    lo + (rng.next_u64() % (hi - lo + 1) as u64) as usize
}

fn pick<'a>(rng: &mut SplitMix64, from: &[&'a str]) -> &'a str {
    from[int(rng, 0, from.len() - 1)]
}

/// A width from 1 to 64, drawn so that the extremes 1 and 64 are common.
fn width(rng: &mut SplitMix64) -> usize {
    match rng.next_u64() % 8 {
        0 => 1,
        1 => 64,
        _ => int(rng, 1, 64),
    }
}

/// A number with 3 decimals in `[lo, hi)`, as spec text.
fn decimal(rng: &mut SplitMix64, lo: f64, hi: f64) -> String {
    format!("{:.3}", rng.uniform(lo, hi))
}

fn activation(rng: &mut SplitMix64, name: &str) -> String {
    if name == "leaky_relu" {
        format!("leaky_relu {}", decimal(rng, 0.0, 0.5))
    } else {
        name.to_string()
    }
}

/// The spec text of network `i`.
fn spec(i: usize, rng: &mut SplitMix64) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "# Random network {i} (tests-random/build.rs)");
    let _ = writeln!(s, "model net_{i:03}");
    let _ = writeln!(s, "scalar {}", pick(rng, &["f32", "f64"]));
    let std = if rng.next_u64().is_multiple_of(3) {
        " standardize"
    } else {
        " unscaled"
    };
    let _ = writeln!(s, "input features {}{std}", width(rng));
    let hidden = int(rng, 1, 4);
    for k in 0..hidden {
        let act = if k == 0 {
            HIDDEN[i % HIDDEN.len()]
        } else {
            pick(rng, &HIDDEN)
        };
        let _ = writeln!(
            s,
            "layer h{} {} {}",
            k + 1,
            width(rng),
            activation(rng, act)
        );
    }
    let classes = |n: usize| -> String {
        let names: Vec<String> = (0..n).map(|k| format!("c{k}")).collect();
        format!(" classes {}", names.join(", "))
    };
    if i.is_multiple_of(2) {
        let softmax = rng.next_u64().is_multiple_of(2);
        let with_classes = rng.next_u64().is_multiple_of(3);
        if softmax {
            let n = int(rng, 2, 16);
            let c = if with_classes {
                classes(n)
            } else {
                String::new()
            };
            let _ = writeln!(s, "output out {n} softmax{c}");
        } else {
            let n = int(rng, 1, 16);
            let c = if with_classes {
                classes(n.max(2))
            } else {
                String::new()
            };
            let _ = writeln!(s, "output out {n} sigmoid{c}");
        }
        let _ = writeln!(s, "loss cross_entropy");
    } else {
        let act = pick(rng, &OUTPUT_SQUARED);
        let n = if act == "softmax" {
            int(rng, 2, 16)
        } else {
            int(rng, 1, 16)
        };
        let _ = writeln!(s, "output out {n} {}", activation(rng, act));
        let _ = writeln!(s, "loss squared_error");
    }
    match rng.next_u64() % 4 {
        0 => {}
        1 => {
            let _ = writeln!(s, "penalty none");
        }
        k => {
            let kind = if k == 2 { "l2" } else { "l1" };
            let lambda = if rng.next_u64().is_multiple_of(8) {
                "0".to_string()
            } else {
                decimal(rng, 0.001, 0.1)
            };
            let _ = writeln!(s, "penalty {kind} {lambda}");
        }
    }
    let seed = rng.next_u64() % 1_000_000;
    match rng.next_u64() % 3 {
        0 => {
            let _ = writeln!(s, "init uniform {} seed {seed}", decimal(rng, 0.05, 1.0));
        }
        1 => {
            let _ = writeln!(s, "init glorot seed {seed}");
        }
        _ => {
            let _ = writeln!(s, "init he seed {seed}");
        }
    }
    let batch = int(rng, 1, 64);
    let epochs = int(rng, 1, 500);
    match rng.next_u64() % 4 {
        0 => {
            let _ = writeln!(
                s,
                "train sgd rate {} batch {batch} epochs {epochs}",
                decimal(rng, 0.001, 0.5)
            );
        }
        1 => {
            let _ = writeln!(
                s,
                "train sgd rate {} momentum {} batch {batch} epochs {epochs}",
                decimal(rng, 0.001, 0.5),
                decimal(rng, 0.0, 0.99)
            );
        }
        2 => {
            let _ = writeln!(
                s,
                "train adam rate {} beta1 {} beta2 {} batch {batch}",
                decimal(rng, 0.001, 0.1),
                decimal(rng, 0.5, 0.95),
                decimal(rng, 0.9, 0.999)
            );
        }
        _ => {
            let _ = writeln!(s, "train adam rate {}", decimal(rng, 0.001, 0.1));
        }
    }
    if rng.next_u64().is_multiple_of(6) {
        let _ = writeln!(s, "budget flash 4 MiB ram 1 MiB");
    }
    s
}

fn main() -> Result<(), Box<dyn Error>> {
    // Only this script is an input: the specs are drawn here. (Cargo reruns a build script
    // anyway when its build-dependencies, sinew among them, change.)
    println!("cargo:rerun-if-changed=build.rs");
    let out_dir = PathBuf::from(std::env::var("OUT_DIR")?);
    let spec_dir = out_dir.join("specs");
    std::fs::create_dir_all(&spec_dir)?;
    let mut rng = SplitMix64::new(SEED);
    let mut rolled = Vec::new();
    let mut unrolled = Vec::new();
    let mut index = String::new();
    for i in 0..NETWORKS {
        let text = spec(i, &mut rng);
        let checked = sinew::check_source(&text);
        if checked.has_errors() {
            let shown = sinew::diag::render("random.sinew", &text, &checked.diagnostics, false);
            return Err(format!("network {i} does not check:\n{text}\n{shown}").into());
        }
        let path = spec_dir.join(format!("net_{i:03}.sinew"));
        sinew::fsutil::write_if_changed(&path, text.as_bytes())?;
        let unrolled_here = i % 5 == 4;
        let (list, folder) = if unrolled_here {
            (&mut unrolled, "unrolled")
        } else {
            (&mut rolled, "rolled")
        };
        list.push(path);
        let Some(model) = checked.model else {
            return Err(format!("network {i} has no model").into());
        };
        let spec_file = format!("specs/{}.sinew", model.name());
        index.push_str(&include_generated(folder, model.name()));
        index.push_str(&net_impl(
            &model,
            SpecFile::InOutDir(&spec_file),
            unrolled_here,
        ));
    }
    // Exactly what a user's build.rs does (the specs are generated, so no rerun lines for them).
    sinew::Builder::new()
        .specs(&rolled)
        .out_dir(out_dir.join("rolled"))
        .cargo_metadata(false)
        .compile()?;
    sinew::Builder::new()
        .specs(&unrolled)
        .out_dir(out_dir.join("unrolled"))
        .unroll_below(UNROLL_BELOW)
        .cargo_metadata(false)
        .compile()?;

    let names: Vec<String> = (0..NETWORKS).map(|i| format!("net_{i:03}")).collect();
    index.push_str(&for_each(
        "Runs `v` over every random network, in order.",
        "for_each_net",
        names.iter().map(String::as_str),
    ));
    let _ = writeln!(
        index,
        "/// How many random networks this crate holds.\npub const NETWORKS: usize = {NETWORKS};"
    );
    sinew::fsutil::write_if_changed(&out_dir.join("index.rs"), index.as_bytes())?;
    Ok(())
}
