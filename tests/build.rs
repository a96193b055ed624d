//! Compiles every spec in `samples/` and `tests/fixtures/` through the public build API, exactly
//! as a user's crate would, then writes `OUT_DIR/index.rs`, which `src/lib.rs` includes:
//!
//! - every model as `sinew_tests::<model>` (from `OUT_DIR/<model>.rs`);
//! - the small models again with element-level unrolling as `sinew_tests::unrolled::<model>`;
//! - two models with baked weights (through `sinew::emit::generate`) as `sinew_tests::baked::<model>`;
//! - for each of them an `impl Net` (test glue over the generated API, field names taken from
//!   `sinew::emit::ident`, the same code that names the generated fields) and visitor functions
//!   that run a generic test over every model.

use sinew::emit::ident::Names;
use sinew::emit::{BakedParams, EmitOptions};
use sinew::ir::Model;
use std::error::Error;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

include!("src/baked_values.rs");

include!("src/variants.rs");

fn specs_in(dir: &Path) -> Result<Vec<PathBuf>, Box<dyn Error>> {
    let mut v = Vec::new();
    for entry in std::fs::read_dir(dir)? {
        let p = entry?.path();
        if p.extension().is_some_and(|e| e == "sinew") {
            v.push(p);
        }
    }
    v.sort();
    Ok(v)
}

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
        let _ = writeln!(
            index,
            "include!(concat!(env!(\"OUT_DIR\"), \"/{}.rs\"));",
            model.name
        );
        index.push_str(&glue(&model, rel));
        models.push((model, rel.clone()));
    }

    let unrolled_dir = out_dir.join("unrolled");
    let unrolled: Vec<&(Model, String)> = models
        .iter()
        .filter(|(m, _)| UNROLLED.contains(&m.name.as_str()))
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
        let _ = writeln!(
            index,
            "include!(concat!(env!(\"OUT_DIR\"), \"/unrolled/{}.rs\"));",
            m.name
        );
        index.push_str(&glue(m, rel));
    }
    index.push_str("}\n");

    let baked_dir = out_dir.join("baked");
    std::fs::create_dir_all(&baked_dir)?;
    index.push_str("/// Models with baked weights (`TRAINED`), values from `baked_values.rs`.\npub mod baked {\n");
    for (m, rel) in models
        .iter()
        .filter(|(m, _)| BAKED.contains(&m.name.as_str()))
    {
        let options = EmitOptions {
            spec_name: file_name(Path::new(rel)),
            unroll_below: 0,
            weights: Some(baked_params(m)),
        };
        let code = sinew::emit::generate(m, &options);
        sinew::fsutil::write_if_changed(
            &baked_dir.join(format!("{}.rs", m.name)),
            code.as_bytes(),
        )?;
        let _ = writeln!(
            index,
            "include!(concat!(env!(\"OUT_DIR\"), \"/baked/{}.rs\"));",
            m.name
        );
        index.push_str(&glue(m, rel));
    }
    index.push_str("}\n");

    index.push_str("/// Runs `v` over every model (samples and fixtures).\npub fn for_each_model(v: &mut impl crate::Visit) {\n");
    for (m, _) in &models {
        let _ = writeln!(index, "    v.visit::<{}::Params>();", m.name);
    }
    index.push_str("}\n/// Runs `v` over every (rolled, unrolled) pair of the same model.\npub fn for_each_unrolled_pair(v: &mut impl crate::VisitPair) {\n");
    for (m, _) in &unrolled {
        let _ = writeln!(
            index,
            "    v.visit::<{0}::Params, unrolled::{0}::Params>();",
            m.name
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

fn baked_params(m: &Model) -> BakedParams {
    let layers = m
        .layers
        .iter()
        .enumerate()
        .map(|(i, l)| {
            let w = (0..l.width * l.fan_in)
                .map(|k| baked_value(2 * i, k))
                .collect();
            let b = (0..l.width).map(|k| baked_value(2 * i + 1, k)).collect();
            (w, b)
        })
        .collect();
    let scaling = |f: fn(usize) -> f64| (0..m.input.width).map(f).collect::<Vec<f64>>();
    BakedParams {
        layers,
        mean: m.input.standardize.then(|| scaling(baked_mean)),
        std: m.input.standardize.then(|| scaling(baked_std)),
    }
}

/// `impl crate::Net for <model>::Params`, placed beside the model's module.
fn glue(m: &Model, spec_rel: &str) -> String {
    let names = Names::of(m);
    let md = &m.name;
    let mut each_mut = String::new();
    let mut each = String::new();
    let mut each_grad = String::new();
    for l in &names.layers {
        let _ = write!(
            each_mut,
            "f(self.{}.as_flattened_mut()); f(&mut self.{});",
            l.weights, l.bias
        );
        let _ = write!(
            each,
            "f(self.{}.as_flattened()); f(&self.{});",
            l.weights, l.bias
        );
        let _ = write!(
            each_grad,
            "f(g.{}.as_flattened()); f(&g.{});",
            l.weights, l.bias
        );
    }
    let scaling = if m.input.standardize {
        format!(
            "f(&mut self.{}, &mut self.{});",
            sinew::emit::ident::MEAN_FIELD,
            sinew::emit::ident::STD_FIELD
        )
    } else {
        "let _ = f;".to_string()
    };
    format!(
        r#"
impl crate::Net for {md}::Params {{
    type Scalar = {md}::Scalar;
    type Gradients = {md}::Gradients;
    type X = [{md}::Scalar; {md}::INPUTS];
    type Y = [{md}::Scalar; {md}::OUTPUTS];
    const NAME: &'static str = "{name}";
    const SPEC: &'static str = include_str!(concat!(env!("CARGO_MANIFEST_DIR"), "/{spec_rel}"));
    const FINGERPRINT: u64 = {md}::FINGERPRINT;
    fn zero() -> Self {{ {md}::Params::zeroed() }}
    fn seeded(seed: u64) -> Self {{ {md}::Params::init(seed) }}
    fn grad_zero() -> Self::Gradients {{ {md}::Gradients::zeroed() }}
    fn x_zero() -> Self::X {{ [0.0; {md}::INPUTS] }}
    fn y_zero() -> Self::Y {{ [0.0; {md}::OUTPUTS] }}
    fn arrays_mut(&mut self, f: &mut dyn FnMut(&mut [Self::Scalar])) {{ {each_mut} }}
    fn arrays(&self, f: &mut dyn FnMut(&[Self::Scalar])) {{ {each} }}
    fn grad_arrays(g: &Self::Gradients, f: &mut dyn FnMut(&[Self::Scalar])) {{ {each_grad} }}
    fn scaling_mut(&mut self, f: &mut crate::ScalingFn<'_, Self::Scalar>) {{ {scaling} }}
    fn forward(&self, x: &Self::X) -> Self::Y {{ self.predict(x) }}
    fn sample_loss(&self, x: &Self::X, y: &Self::Y) -> Self::Scalar {{ self.loss(x, y) }}
    fn sample_backprop(&self, x: &Self::X, y: &Self::Y, g: &mut Self::Gradients) -> Self::Scalar {{ self.backprop(x, y, g) }}
    fn finish(&self, g: &mut Self::Gradients, m: usize) {{ g.finish(self, m) }}
    fn batch_cost(&self, xs: &[Self::X], ys: &[Self::Y]) -> Self::Scalar {{ self.cost(xs, ys) }}
    fn penalty(&self, m: usize) -> Self::Scalar {{ self.penalty_cost(m) }}
    type Trainer = {md}::Trainer;
    fn trainer(params: Self) -> Self::Trainer {{ {md}::Trainer::new(params) }}
    fn trainer_step(t: &mut Self::Trainer, xs: &[Self::X], ys: &[Self::Y]) -> Self::Scalar {{ t.step(xs, ys) }}
    fn trainer_params(t: &Self::Trainer) -> &Self {{ &t.params }}
}}
"#,
        name = m.name
    )
}
