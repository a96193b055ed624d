//! The glue generator: Rust source text that the build scripts of the test crates write into
//! `OUT_DIR/index.rs`, which their `src/lib.rs` include.
//!
//! For each generated module `m` (written by `sinew::Builder` or `sinew::emit::generate` to
//! `OUT_DIR/<folder>/m.rs`) a build script writes [`include_generated`] and [`net_impl`] side by
//! side, in the module that should hold `m`, and at the end one [`for_each`] visitor over the
//! models. The impl forwards every method of [`crate::Net`] to the generated API; the field
//! names come from `sinew::emit::ident`, the code that names the generated fields, so the glue
//! follows any renaming there.

use sinew::emit::ident::{Names, MEAN_FIELD, STD_FIELD};
use sinew::ir::Model;
use std::fmt::Write as _;
use std::format;
use std::string::{String, ToString};

/// Where the spec text of a model lies at build time (it becomes [`crate::Net::SPEC`] through
/// `include_str!`). Both paths are relative and use `/`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SpecFile<'a> {
    /// Relative to the test crate's folder (`CARGO_MANIFEST_DIR`), e.g. `fixtures/x.sinew`.
    InManifestDir(&'a str),
    /// Relative to the build script's `OUT_DIR`, e.g. `specs/net_000.sinew` (a drawn spec).
    InOutDir(&'a str),
}

/// The line `include!(concat!(env!("OUT_DIR"), "/<folder>/<model>.rs"));` (without the folder
/// when `folder` is empty), ending in a newline.
pub fn include_generated(folder: &str, model: &str) -> String {
    let path = if folder.is_empty() {
        format!("{model}.rs")
    } else {
        format!("{folder}/{model}.rs")
    };
    format!("include!(concat!(env!(\"OUT_DIR\"), \"/{path}\"));\n")
}

/// `impl ::sinew_harness::Net for <model>::Params`, to be placed beside the model's module.
/// `unrolled` is the value of [`crate::Net::UNROLLED`]: whether the module was compiled with
/// unrolled kernels.
pub fn net_impl(model: &Model, spec: SpecFile<'_>, unrolled: bool) -> String {
    let names = Names::of(model);
    let mut each_mut = String::new();
    let mut each = String::new();
    let mut each_grad = String::new();
    // A pooling has no parameters, hence no fields.
    for (l, _) in names
        .layers
        .iter()
        .zip(model.layers())
        .filter(|(_, ml)| ml.parameters() > 0)
    {
        let (w, b) = (&l.weights, &l.bias);
        let _ = write!(
            each_mut,
            "f(self.{w}.as_flattened_mut()); f(&mut self.{b}); "
        );
        let _ = write!(each, "f(self.{w}.as_flattened()); f(&self.{b}); ");
        let _ = write!(each_grad, "f(g.{w}.as_flattened()); f(&g.{b}); ");
    }
    let scaling = if model.input().standardize {
        format!("f(&mut self.{MEAN_FIELD}, &mut self.{STD_FIELD});")
    } else {
        "let _ = f;".to_string()
    };
    let spec = match spec {
        SpecFile::InManifestDir(rel) => format!("env!(\"CARGO_MANIFEST_DIR\"), \"/{rel}\""),
        SpecFile::InOutDir(rel) => format!("env!(\"OUT_DIR\"), \"/{rel}\""),
    };
    let name = &model.name();
    format!(
        r#"
impl ::sinew_harness::Net for {name}::Params {{
    type Scalar = {name}::Scalar;
    type Gradients = {name}::Gradients;
    type X = [{name}::Scalar; {name}::INPUTS];
    type Y = [{name}::Scalar; {name}::OUTPUTS];
    type Trainer = {name}::Trainer;
    const NAME: &'static str = "{name}";
    const SPEC: &'static str = include_str!(concat!({spec}));
    const FINGERPRINT: u64 = {name}::FINGERPRINT;
    const UNROLLED: bool = {unrolled};
    fn zero() -> Self {{ {name}::Params::zeroed() }}
    fn seeded(seed: u64) -> Self {{ {name}::Params::init(seed) }}
    fn grad_zero() -> Self::Gradients {{ {name}::Gradients::zeroed() }}
    fn x_zero() -> Self::X {{ [0.0; {name}::INPUTS] }}
    fn y_zero() -> Self::Y {{ [0.0; {name}::OUTPUTS] }}
    fn arrays_mut(&mut self, f: &mut dyn FnMut(&mut [Self::Scalar])) {{ {each_mut}}}
    fn arrays(&self, f: &mut dyn FnMut(&[Self::Scalar])) {{ {each}}}
    fn grad_arrays(g: &Self::Gradients, f: &mut dyn FnMut(&[Self::Scalar])) {{ {each_grad}}}
    fn scaling_mut(&mut self, f: &mut ::sinew_harness::ScalingFn<'_, Self::Scalar>) {{ {scaling} }}
    fn forward(&self, x: &Self::X) -> Self::Y {{ self.predict(x) }}
    fn sample_loss(&self, x: &Self::X, y: &Self::Y) -> Self::Scalar {{ self.loss(x, y) }}
    fn sample_backprop(&self, x: &Self::X, y: &Self::Y, g: &mut Self::Gradients) -> Self::Scalar {{ self.backprop(x, y, g) }}
    fn finish(&self, g: &mut Self::Gradients, m: usize) {{ g.finish(self, m) }}
    fn batch_cost(&self, xs: &[Self::X], ys: &[Self::Y]) -> Self::Scalar {{ self.cost(xs, ys) }}
    fn penalty(&self, m: usize) -> Self::Scalar {{ self.penalty_cost(m) }}
    fn trainer(params: Self) -> Self::Trainer {{ {name}::Trainer::new(params) }}
    fn trainer_step(t: &mut Self::Trainer, xs: &[Self::X], ys: &[Self::Y]) -> Self::Scalar {{ t.step(xs, ys) }}
    fn trainer_params(t: &Self::Trainer) -> &Self {{ &t.params }}
}}
"#
    )
}

/// A documented function `pub fn <function>(v: &mut impl ::sinew_harness::Visit)` that calls
/// `v.visit::<m::Params>()` for every model path `m` of `models`, in order.
pub fn for_each<'a>(
    doc: &str,
    function: &str,
    models: impl IntoIterator<Item = &'a str>,
) -> String {
    let mut s = format!("/// {doc}\npub fn {function}(v: &mut impl ::sinew_harness::Visit) {{\n");
    for m in models {
        let _ = writeln!(s, "    v.visit::<{m}::Params>();");
    }
    s.push_str("}\n");
    s
}
