//! Back end: Model IR -> standalone fixed-size `no_std` Rust that calls `sinew-runtime`.
//!
//! [`generate`] builds the module from `quote!` fragments (one file per concern: [`ident`] picks
//! every name, `params` the sizes, structs, initialisation and baked weights, `forward` inference
//! and the cost, `backward` backprop and the batch finish, `batch` the blocked batch gradient,
//! `classes` the class enum, `optim` the on-device trainer), then `pretty` parses it into a
//! `syn::File`, prints it with prettyplease and prepends the header. It does no I/O; [`crate::builder`] writes the files.
//!
//! Invariants of the output (tests check each one):
//!
//! - one `pub mod <model>`; it uses only `core` and `sinew_runtime` (no `std`, no heap, no
//!   `unsafe`), has no panicking paths (no indexing: arrays are passed whole to the runtime or
//!   destructured; no `unwrap`), and compiles under `#![deny(missing_docs)]` and clippy;
//! - every size is a constant: each layer is its own straight-line step, there is no loop over
//!   layers; the only loops are over the samples of a batch and over the classes in `classify`;
//! - the runtime calls follow the per-sample order of the generated-code contract, which the host
//!   engine follows too, so host and device results are bit-identical;
//! - the output is a pure function of the model and the options (deterministic, byte for byte).

pub mod ident;

mod backward;
mod batch;
mod blob;
mod classes;
mod forward;
mod optim;
mod params;
mod pretty;
mod steps;

use crate::ir::{Activation, Init, Layer, Model, Optimizer, Penalty, Scalar};
use crate::plan::{Head, Plan};
use ident::{LayerNames, Names};
use proc_macro2::{Ident, Literal, Span, TokenStream};
use quote::quote;
use std::fmt;

/// Options of [`generate`]. Every default is in [`EmitOptions::default`].
#[derive(Debug, Clone, PartialEq, Default)]
pub struct EmitOptions {
    /// The spec's file name for the header (a path is cut down to its last component).
    pub spec_name: String,
    /// Element-level full unrolling of the matrix kernels (affine map, transposed product,
    /// outer-product accumulate) for every layer with `width * fan_in` below this; `0` (the
    /// default) never unrolls. Unrolled code performs the runtime's documented operations in the
    /// runtime's documented order, so it gives the same bits; destructuring keeps it free of
    /// indexing.
    pub unroll_below: usize,
    /// Trained parameters to bake in as `pub static TRAINED: Params`, if any.
    pub weights: Option<BakedParams>,
}

/// Trained parameter values to bake into the generated module, in `f64` whatever the model's
/// scalar (each value is converted with `as` to the model's scalar, then written as its exact bit
/// pattern).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct BakedParams {
    /// Per layer in model order: the weights row-major (row `j` holds the weights into unit `j`,
    /// `width * fan_in` values) and the biases (`width` values).
    pub layers: Vec<(Vec<f64>, Vec<f64>)>,
    /// Per-feature input mean; required exactly when the model has `standardize`.
    pub mean: Option<Vec<f64>>,
    /// Per-feature input standard deviation; required exactly when the model has `standardize`.
    pub std: Option<Vec<f64>>,
}

/// Why a [`BakedParams`] does not fit a model.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ShapeMismatch {
    /// What differs, e.g. "layer `hidden` has 12 biases, expected 10".
    pub message: String,
}

impl fmt::Display for ShapeMismatch {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.message)
    }
}

impl std::error::Error for ShapeMismatch {}

impl BakedParams {
    /// Checks that every vector has the length `model` needs.
    ///
    /// [`generate`] emits `TRAINED` only for values that fit; for values that do not it emits a
    /// `compile_error!` naming the mismatch, so call this first (the builder does).
    pub fn check(&self, model: &Model) -> Result<(), ShapeMismatch> {
        let err = |message: String| Err(ShapeMismatch { message });
        if self.layers.len() != model.layers.len() {
            return err(format!(
                "{} layers of weights given, model `{}` has {}",
                self.layers.len(),
                model.name,
                model.layers.len()
            ));
        }
        for (layer, (w, b)) in model.layers.iter().zip(&self.layers) {
            if w.len() != layer.width * layer.fan_in {
                return err(format!(
                    "layer `{}` has {} weights, expected {} ({} x {})",
                    layer.name,
                    w.len(),
                    layer.width * layer.fan_in,
                    layer.width,
                    layer.fan_in
                ));
            }
            if b.len() != layer.width {
                return err(format!(
                    "layer `{}` has {} biases, expected {}",
                    layer.name,
                    b.len(),
                    layer.width
                ));
            }
        }
        let n = model.input.width;
        for (what, v) in [("mean", &self.mean), ("std", &self.std)] {
            match (model.input.standardize, v) {
                (true, Some(v)) if v.len() != n => {
                    return err(format!("input {what} has {} values, expected {n}", v.len()))
                }
                (true, None) => {
                    return err(format!(
                        "input {what} missing: the model standardizes its input"
                    ))
                }
                (false, Some(_)) => {
                    return err(format!(
                        "input {what} given, but the model does not standardize its input"
                    ))
                }
                _ => {}
            }
        }
        Ok(())
    }
}

/// Generates the Rust source of `model`: a header comment, then `pub mod <model> { ... }`.
///
/// Pure: no I/O, and the same inputs give the same bytes.
///
/// # Examples
///
/// ```
/// let spec = "model demo\ninput x 2\noutput y 1 sigmoid\nloss cross_entropy\n";
/// let model = sinew::check_source(spec).model.expect("a valid spec");
/// let options =
///     sinew::emit::EmitOptions { spec_name: "demo.sinew".into(), ..Default::default() };
/// let source = sinew::emit::generate(&model, &options);
/// assert!(source.starts_with("// Generated by sinew "));
/// assert!(source.contains("pub mod demo {"));
/// assert!(source.contains("pub fn predict(&self, x: &[Scalar; INPUTS]) -> [Scalar; OUTPUTS]"));
/// ```
pub fn generate(model: &Model, options: &EmitOptions) -> String {
    if model.layers.is_empty() {
        // `check` guarantees at least one layer; hand-built IR without one gets a loud error.
        let e = compile_error("the model has no layers");
        return pretty::render(e, "// Generated by sinew: invalid model.\n");
    }
    if let Some(bad) = invalid_name(model) {
        // Likewise for a name `check` would have refused (S03xx): it never becomes an
        // identifier, so it can neither panic the token builder nor inject code.
        let e = compile_error(&format!(
            "{} is not a lower_snake name that Rust accepts as an identifier",
            crate::syntax::quote(bad)
        ));
        return pretty::render(e, "// Generated by sinew: invalid model.\n");
    }
    let cx = Ctx::new(model, options);
    let module = ident(&model.name);
    let docs = wrap(&module_doc(model, &cx.spec_name).join("\n"));
    let consts = params::consts(&cx);
    let structs = params::structs(&cx);
    let classes = classes::items(&cx);
    let params_impl = params::impl_params(&cx);
    let gradients_impl = params::impl_gradients(&cx);
    let batch = batch::items(&cx);
    let trainer = optim::items(&cx);
    let blob = blob::items(&cx);
    let trained = options.weights.as_ref().map(|w| params::trained(&cx, w));
    let tokens = quote! {
        pub mod #module {
            #(#![doc = #docs])*
            use sinew_runtime as rt;
            #consts
            #structs
            #classes
            #params_impl
            #gradients_impl
            #batch
            #trainer
            #blob
            #trained
        }
    };
    let header = format!(
        "// Generated by sinew {} from {} (fingerprint 0x{:016x}). Do not edit.\n",
        env!("CARGO_PKG_VERSION"),
        cx.spec_name,
        model.fingerprint()
    );
    pretty::render(tokens, &header)
}

/// The first model, input, layer or class name that is not a lower_snake identifier outside
/// Rust's keywords (the rule `check` enforces), if any.
fn invalid_name(model: &Model) -> Option<&str> {
    use crate::check::names::{is_lower_snake, RUST_KEYWORDS};
    std::iter::once(&model.name)
        .chain(std::iter::once(&model.input.name))
        .chain(model.layers.iter().map(|l| &l.name))
        .chain(model.classes.iter().flatten())
        .map(String::as_str)
        .find(|n| !is_lower_snake(n) || RUST_KEYWORDS.contains(n))
}

/// The spec file name for the header and docs: the last path component, with control characters
/// replaced so the header stays one comment line.
fn spec_file_name(spec_name: &str) -> String {
    let last = spec_name.rsplit(['/', '\\']).next().unwrap_or(spec_name);
    let name: String = last
        .chars()
        .map(|c| if c.is_control() { '?' } else { c })
        .collect();
    if name.is_empty() {
        "<unnamed spec>".to_string()
    } else {
        name
    }
}

/// The module's inner doc: the network in one line per layer, then loss, penalty, init, trainer.
fn module_doc(model: &Model, spec_name: &str) -> Vec<String> {
    let mut d = vec![
        format!(
            "Network `{}` ({}), generated by sinew from `{}`:",
            model.name,
            model.scalar.rust_name(),
            spec_name
        ),
        String::new(),
    ];
    // Lines starting with "- " are list items; `wrap` keeps each on its own paragraph.
    let std = if model.input.standardize {
        ", standardized as `(x - input_mean) / input_std`"
    } else {
        ""
    };
    d.push(format!(
        "- input `{}`: {} values{std}",
        model.input.name, model.input.width
    ));
    let last = model.layers.len() - 1;
    for (i, l) in model.layers.iter().enumerate() {
        let role = if i == last { "output" } else { "layer" };
        let units = if l.width == 1 { "unit" } else { "units" };
        let mut line = format!(
            "- {role} `{}`: {} {units}, {}",
            l.name,
            l.width,
            activation_words(l.activation)
        );
        if i == last {
            if let Some(c) = &model.classes {
                let names: Vec<String> = c.iter().map(|c| format!("`{c}`")).collect();
                line.push_str(&format!("; classes {}", names.join(", ")));
            }
        }
        d.push(line);
    }
    d.push(String::new());
    d.push(format!(
        "Loss: {}. Penalty: {}. Init: {}, seed {}. Trainer: {}, batch {}, {} epochs. {} parameters.",
        Head::of(model).words(),
        penalty_words(model.penalty),
        init_words(model.init),
        model.seed,
        optimizer_words(model.train.optimizer),
        model.train.batch,
        model.train.epochs,
        model.parameters()
    ));
    d
}

fn activation_words(a: Activation) -> String {
    match a {
        Activation::LeakyRelu(alpha) => format!("leaky_relu (alpha {})", num(alpha)),
        other => other.keyword().to_string(),
    }
}

fn penalty_words(p: Penalty) -> String {
    crate::words::penalty_prose(p)
}

fn init_words(i: Init) -> String {
    match i {
        Init::Uniform { eps } => format!("uniform on [-{e}, {e}]", e = num(eps)),
        Init::Glorot => "Glorot uniform".to_string(),
        Init::He => "He normal".to_string(),
    }
}

fn optimizer_words(o: Optimizer) -> String {
    crate::words::optimizer_prose(o)
}

/// What every fragment needs: the model, its names and the options.
pub(crate) struct Ctx<'a> {
    pub model: &'a Model,
    pub plan: Plan,
    pub names: Names,
    pub unroll_below: usize,
    pub spec_name: String,
}

impl<'a> Ctx<'a> {
    fn new(model: &'a Model, options: &EmitOptions) -> Self {
        Ctx {
            model,
            plan: Plan::new(model),
            names: Names::of(model),
            unroll_below: options.unroll_below,
            spec_name: spec_file_name(&options.spec_name),
        }
    }

    /// Layers with their names, in order.
    pub fn layers(&self) -> impl Iterator<Item = (usize, &'a Layer, &LayerNames)> + '_ {
        self.model
            .layers
            .iter()
            .zip(&self.names.layers)
            .enumerate()
            .map(|(i, (l, n))| (i, l, n))
    }

    /// Index of the output layer.
    pub fn last(&self) -> usize {
        self.model.layers.len() - 1
    }

    /// The width constant of layer `i`.
    pub fn width_const(&self, i: usize) -> Ident {
        match self.names.layers.get(i) {
            Some(n) => ident(&n.width_const),
            None => ident("OUTPUTS"),
        }
    }

    /// The constant of layer `i`'s fan-in: `INPUTS` for the first layer, else the previous width.
    pub fn fan_in_const(&self, i: usize) -> Ident {
        if i == 0 {
            ident("INPUTS")
        } else {
            self.width_const(i - 1)
        }
    }

    /// True when the matrix kernels of layer `i` are unrolled.
    pub fn unrolled_at(&self, i: usize) -> bool {
        self.model
            .layers
            .get(i)
            .is_some_and(|l| self.unroll_below > 0 && l.width * l.fan_in < self.unroll_below)
    }

    /// The scalar type's name as a token (`f32` / `f64`).
    pub fn scalar_type(&self) -> Ident {
        ident(self.model.scalar.rust_name())
    }

    /// An unsuffixed literal of `v` converted to the model's scalar, in the shortest form that
    /// reads back as exactly that value; non-finite values are written as their bit pattern.
    pub fn scalar_lit(&self, v: f64) -> TokenStream {
        match self.model.scalar {
            Scalar::F32 => {
                let v = v as f32;
                if v.is_finite() {
                    float_lit(format!("{v}"), format!("{v:e}"), v.abs().into())
                } else {
                    self.bits(v.to_bits().into())
                }
            }
            Scalar::F64 => {
                if v.is_finite() {
                    float_lit(format!("{v}"), format!("{v:e}"), v.abs())
                } else {
                    self.bits(v.to_bits())
                }
            }
        }
    }

    /// `f32::from_bits(0x........)` / `f64::from_bits(0x................)`.
    pub fn bits(&self, bits: u64) -> TokenStream {
        let t = self.scalar_type();
        let hex = match self.model.scalar {
            Scalar::F32 => format!("0x{bits:08x}"),
            Scalar::F64 => format!("0x{bits:016x}"),
        };
        let lit = syn::LitInt::new(&hex, Span::call_site());
        quote!(#t::from_bits(#lit))
    }

    /// `f32::from_bits(..)` of `v` converted to the model's scalar (exact, whatever the value).
    pub fn exact(&self, v: f64) -> TokenStream {
        match self.model.scalar {
            Scalar::F32 => self.bits((v as f32).to_bits().into()),
            Scalar::F64 => self.bits(v.to_bits()),
        }
    }
}

use quote::ToTokens;

/// Doc lines wrapped at [`DOC_WIDTH`]: one `#[doc]` attribute per line (so prettyplease prints
/// `///` comments, never a `/** */` block); `\n` separates paragraphs.
pub(crate) fn doc(text: &str) -> TokenStream {
    let lines = wrap(text);
    quote!(#(#[doc = #lines])*)
}

/// Width of generated doc text (without the indentation and `/// `).
pub(crate) const DOC_WIDTH: usize = 88;

fn wrap(text: &str) -> Vec<String> {
    let mut lines = Vec::new();
    for para in text.split('\n') {
        let mut line = String::new();
        for word in unbreakable_words(para) {
            if !line.is_empty() && line.len() + 1 + word.len() > DOC_WIDTH {
                lines.push(format!(" {line}"));
                line.clear();
                if para.starts_with("- ") {
                    // A list item's continuation lines are indented under its text.
                    line.push_str("  ");
                }
            }
            if !line.is_empty() && !line.ends_with(' ') {
                line.push(' ');
            }
            line.push_str(&word);
        }
        lines.push(if line.is_empty() {
            String::new()
        } else {
            format!(" {line}")
        });
    }
    lines
}

/// Words of `para`, keeping each `code span` (which may hold spaces) in one piece.
fn unbreakable_words(para: &str) -> Vec<String> {
    let mut words: Vec<String> = Vec::new();
    let mut in_code = false;
    for word in para.split_whitespace() {
        match words.last_mut() {
            Some(last) if in_code => {
                last.push(' ');
                last.push_str(word);
            }
            _ => words.push(word.to_string()),
        }
        if word.matches('`').count() % 2 == 1 {
            in_code = !in_code;
        }
    }
    words
}

/// A number for doc text: Rust's shortest round-trip form, in exponent form for very small or
/// large magnitudes (`1e-8`, not `0.00000001`).
pub(crate) fn num(v: f64) -> String {
    let a = v.abs();
    if a != 0.0 && a.is_finite() && !(1e-4..1e16).contains(&a) {
        format!("{v:e}")
    } else {
        format!("{v}")
    }
}

/// A float literal whose text reads back as exactly `v` in a context of type `f32`/`f64`: the
/// shortest round-trip form (Rust's `Display`/`LowerExp` of the value in that type), in exponent
/// form for very small or large magnitudes. `v` must be finite.
fn float_lit(display: String, exp: String, abs: f64) -> TokenStream {
    let text = if abs != 0.0 && !(1e-4..1e16).contains(&abs) {
        exp
    } else {
        display
    };
    let text = if text.contains(['.', 'e', 'E']) {
        text
    } else {
        format!("{text}.0")
    };
    syn::LitFloat::new(&text, Span::call_site()).into_token_stream()
}

/// An identifier token.
pub(crate) fn ident(name: &str) -> Ident {
    Ident::new(name, Span::call_site())
}

/// `usize` literal.
pub(crate) fn usize_lit(n: usize) -> Literal {
    Literal::usize_unsuffixed(n)
}

/// A `compile_error!` item: emitted instead of code for a model that `check` would have rejected
/// (hand-built IR), so `generate` never panics and the mistake is still loud.
pub(crate) fn compile_error(message: &str) -> TokenStream {
    let msg = format!("sinew: {message}");
    quote!(compile_error!(#msg);)
}

#[cfg(test)]
pub(crate) mod tests;
