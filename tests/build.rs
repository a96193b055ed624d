//! Compiles every spec in `samples/` and `tests/fixtures/` through the public build API, exactly
//! as a user's crate would, then writes `OUT_DIR/index.rs`, which `src/lib.rs` includes:
//!
//! - every model as `sinew_tests::<model>` (from `OUT_DIR/<model>.rs`);
//! - the small models again with element-level unrolling as `sinew_tests::unrolled::<model>`;
//! - two models with baked weights (through `sinew::emit::generate`) as `sinew_tests::baked::<model>`;
//! - for each of them an `impl sinew_harness::Net` (the glue of `sinew_harness::glue`) and
//!   visitor functions that run a generic test over every model.

use sinew::emit::EmitOptions;
use sinew::ir::Model;
use sinew::weights::{FlatLayer, Standardization, Weights};
use sinew_harness::files::specs_in;
use sinew_harness::glue::{for_each, include_generated, net_impl, SpecFile};
use std::error::Error;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

include!("src/baked_values.rs");

include!("src/variants.rs");

fn main() -> Result<(), Box<dyn Error>> {
    let manifest = PathBuf::from(std::env::var("CARGO_MANIFEST_DIR")?);
    let out_dir = PathBuf::from(std::env::var("OUT_DIR")?);
    let samples = manifest.join("../samples");
    let fixtures = manifest.join("fixtures");
    // The builder prints one `rerun-if-changed` per spec; watch the folders too so that a new
    // spec file reruns this script, and the shared values file.
    println!("cargo:rerun-if-changed={}", samples.display());
    println!("cargo:rerun-if-changed={}", fixtures.display());
    println!("cargo:rerun-if-changed=src/baked_values.rs");
    println!("cargo:rerun-if-changed=src/variants.rs");

    let mut all: Vec<(PathBuf, String)> = Vec::new();
    for p in specs_in(&samples)? {
        all.push((p.clone(), format!("../samples/{}", file_name(&p))));
    }
    for p in specs_in(&fixtures)? {
        all.push((p.clone(), format!("fixtures/{}", file_name(&p))));
    }

    // Exactly what a user's build.rs does. One fixture (conveyor_jam) deliberately draws warning
    // W0101 (squared error with a softmax output, to cover the softmax Jacobian); it is still
    // rendered to stderr, but not repeated as a `cargo:warning` on every build of this crate.
    sinew::Builder::new()
        .specs(all.iter().map(|(p, _)| p))
        .cargo_warnings(false)
        .compile()?;

    let mut index = String::new();
    let mut models = Vec::new();
    for (path, rel) in &all {
        let model = model_of(path)?;
        index.push_str(&include_generated("", model.name()));
        index.push_str(&net_impl(&model, SpecFile::InManifestDir(rel), false));
        models.push((model, rel.clone()));
    }

    let unrolled_dir = out_dir.join("unrolled");
    let unrolled: Vec<&(Model, String)> = models
        .iter()
        .filter(|(m, _)| UNROLLED.contains(&m.name()))
        .collect();
    sinew::Builder::new()
        .specs(
            all.iter()
                .filter(|(p, _)| {
                    UNROLLED
                        .iter()
                        .any(|n| file_name(p) == format!("{n}.sinew"))
                })
                .map(|(p, _)| p),
        )
        .out_dir(&unrolled_dir)
        .unroll_below(UNROLL_BELOW)
        .cargo_warnings(false)
        .compile()?;
    index.push_str(
        "/// The small models again, with every matrix kernel unrolled.\npub mod unrolled {\n",
    );
    for (m, rel) in &unrolled {
        index.push_str(&include_generated("unrolled", m.name()));
        index.push_str(&net_impl(m, SpecFile::InManifestDir(rel), true));
    }
    index.push_str("}\n");

    let baked_dir = out_dir.join("baked");
    std::fs::create_dir_all(&baked_dir)?;
    index.push_str("/// Models with baked weights (`TRAINED`), values from `baked_values.rs`.\npub mod baked {\n");
    for (m, rel) in models.iter().filter(|(m, _)| BAKED.contains(&m.name())) {
        let options = EmitOptions {
            spec_name: file_name(Path::new(rel)),
            unroll_below: 0,
        };
        let code = sinew::emit::generate_trained(&baked_params(m).fit(m)?, &options);
        sinew::fsutil::write_if_changed(
            &baked_dir.join(format!("{}.rs", m.name())),
            code.as_bytes(),
        )?;
        index.push_str(&include_generated("baked", m.name()));
        index.push_str(&net_impl(m, SpecFile::InManifestDir(rel), false));
    }
    index.push_str("}\n");

    index.push_str(&for_each(
        "Runs `v` over every model (samples and fixtures).",
        "for_each_model",
        models.iter().map(|(m, _)| m.name()),
    ));
    index.push_str("/// Runs `v` over every (rolled, unrolled) pair of the same model.\npub fn for_each_unrolled_pair(v: &mut impl ::sinew_harness::VisitPair) {\n");
    for (m, _) in &unrolled {
        let _ = writeln!(
            index,
            "    v.visit::<{0}::Params, unrolled::{0}::Params>();",
            m.name()
        );
    }
    index.push_str("}\n");
    sinew::fsutil::write_if_changed(&out_dir.join("index.rs"), index.as_bytes())?;
    Ok(())
}

fn file_name(p: &Path) -> String {
    p.file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default()
}

fn model_of(path: &Path) -> Result<Model, Box<dyn Error>> {
    let src = std::fs::read_to_string(path)?;
    sinew::check_source(&src)
        .model
        .ok_or_else(|| format!("{} does not check", path.display()).into())
}

fn baked_params(m: &Model) -> Weights {
    let layers = m
        .layers()
        .iter()
        .enumerate()
        .map(|(i, l)| {
            let weights = (0..l.width * l.fan_in)
                .map(|k| baked_value(2 * i, k))
                .collect();
            let bias = (0..l.width).map(|k| baked_value(2 * i + 1, k)).collect();
            FlatLayer { weights, bias }
        })
        .collect();
    let scaling = |f: fn(usize) -> f64| (0..m.input().width).map(f).collect::<Vec<f64>>();
    let standardization = m.input().standardize.then(|| Standardization {
        mean: scaling(baked_mean),
        std: scaling(baked_std),
    });
    Weights::from_params(m, layers, standardization, None)
}
