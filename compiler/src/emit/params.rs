//! Sizes, the `Params` and `Gradients` structs, initialisation and baked weights.

use super::{backward, classes, forward, ident, usize_lit, Ctx, Trained};
use crate::ir::{Init, Penalty};
use crate::weights::Standardization;
use proc_macro2::TokenStream;
use quote::quote;

/// `pub type Scalar`, the size constants and the private `ZERO`.
pub(super) fn consts(cx: &Ctx) -> TokenStream {
    let m = cx.model;
    let t = cx.scalar_type();
    let inputs = usize_lit(m.input.width);
    let outputs = usize_lit(m.output().width);
    let params = usize_lit(m.parameters());
    let fp = syn::LitInt::new(
        &format!("0x{:016x}", m.fingerprint()),
        proc_macro2::Span::call_site(),
    );
    let doc_in = format!(" Input features (`{}`).", m.input.name);
    let doc_in = super::doc(&doc_in);
    let doc_out = format!(" Output units (`{}`).", m.output().name);
    let doc_out = super::doc(&doc_out);
    let doc_params = format!(
        " Trainable parameters: every weight and bias ({}).",
        m.parameters()
    );
    let doc_params = super::doc(&doc_params);
    let layers = cx.layers().map(|(i, l, n)| {
        let c = ident(&n.width_const);
        let w = usize_lit(l.size());
        let role = if i == cx.last() {
            "the output layer"
        } else {
            "layer"
        };
        let doc = match l.kind.window() {
            None => format!(
                " Units of {role} `{}` ({}).",
                l.name,
                l.activation.keyword()
            ),
            Some(_) => format!(
                " Values written by {role} `{}` ({}, {} {}): a map of {}, row-major, channel fastest.",
                l.name,
                l.kind.words(),
                l.output.words(),
                l.activation.keyword(),
                l.output.words()
            ),
        };
        let doc = super::doc(&doc);
        let window = match (&n.window, l.kind.window()) {
            (Some(names), Some(g)) => {
                let (gc, kc, tc) = (ident(&names.geometry), ident(&names.kernels), ident(&names.taps));
                let f = |v: usize| usize_lit(v);
                let (rows, cols, ch) = (f(g.rows), f(g.cols), f(g.channels));
                let (kr, kcol, sr, sc) = (f(g.k_rows), f(g.k_cols), f(g.stride_rows), f(g.stride_cols));
                let (pt, pl, or, oc) = (f(g.pad_top), f(g.pad_left), f(g.out_rows), f(g.out_cols));
                let (kernels, taps) = (f(l.width), f(l.fan_in));
                let gdoc = format!(
                    " Geometry of `{}`: input {}, kernel {} x {}, stride {} x {}, zeros before {} x {}, output {} x {} positions.",
                    l.name, l.input.words(), g.k_rows, g.k_cols, g.stride_rows, g.stride_cols,
                    g.pad_top, g.pad_left, g.out_rows, g.out_cols
                );
                let gdoc = super::doc(&gdoc);
                let params = if l.parameters() > 0 {
                    let kdoc = super::doc(&format!(" Kernels of `{}` (rows of its weights).", l.name));
                    let tdoc = super::doc(&format!(" Weights per kernel of `{}` (columns of its weights).", l.name));
                    quote! {
                        #kdoc
                        pub const #kc: usize = #kernels;
                        #tdoc
                        pub const #tc: usize = #taps;
                    }
                } else {
                    TokenStream::new()
                };
                quote! {
                    #gdoc
                    pub const #gc: rt::conv::Window = rt::conv::Window {
                        rows: #rows, cols: #cols, channels: #ch,
                        k_rows: #kr, k_cols: #kcol,
                        stride_rows: #sr, stride_cols: #sc,
                        pad_top: #pt, pad_left: #pl,
                        out_rows: #or, out_cols: #oc,
                    };
                    #params
                }
            }
            _ => TokenStream::new(),
        };
        quote! {
            #doc
            pub const #c: usize = #w;
            #window
        }
    });
    quote! {
        /// The scalar type of every parameter and of all arithmetic.
        pub type Scalar = #t;
        #doc_in
        pub const INPUTS: usize = #inputs;
        #doc_out
        pub const OUTPUTS: usize = #outputs;
        #(#layers)*
        #doc_params
        pub const PARAMETERS: usize = #params;
        /// Fingerprint of the model's shape (widths, activations, scalar, scaling); weights files
        /// carry it so that mismatched weights are refused.
        pub const FINGERPRINT: u64 = #fp;
        const ZERO: Scalar = 0.0;
    }
}

/// `Params` and `Gradients`.
pub(super) fn structs(cx: &Ctx) -> TokenStream {
    let mut p_fields = Vec::new();
    let mut g_fields = Vec::new();
    for (i, l, n) in cx.param_layers() {
        let w = ident(&n.weights);
        let b = ident(&n.bias);
        let rows = cx.rows_const(i);
        let cols = cx.cols_const(i);
        let dw = match l.kind {
            crate::ir::LayerKind::Conv { .. } => format!(
                " Filters of `{}`: row `f` holds filter `f`'s {} weights, `[rows][cols][channels]` of its kernel.",
                l.name, l.fan_in
            ),
            crate::ir::LayerKind::Depthwise { .. } => format!(
                " Kernels of `{}`: row `c` holds the {} weights of channel `c`'s kernel, `[rows][cols]`.",
                l.name, l.fan_in
            ),
            _ => format!(
                " Weights into `{}`: row `j` holds the {} weights into unit `j`.",
                l.name, l.fan_in
            ),
        };
        let dw = super::doc(&dw);
        let db = format!(" Biases of `{}`.", l.name);
        let db = super::doc(&db);
        p_fields.push(quote! {
            #dw
            pub #w: [[Scalar; #cols]; #rows],
            #db
            pub #b: [Scalar; #rows],
        });
        let gw = format!(
            " Gradient of the weights into `{}` (same layout as the weights).",
            l.name
        );
        let gw = super::doc(&gw);
        let gb = format!(" Gradient of the biases of `{}`.", l.name);
        let gb = super::doc(&gb);
        g_fields.push(quote! {
            #gw
            pub #w: [[Scalar; #cols]; #rows],
            #gb
            pub #b: [Scalar; #rows],
        });
    }
    if cx.model.input.standardize {
        let mean = ident(super::ident::MEAN_FIELD);
        let std = ident(super::ident::STD_FIELD);
        p_fields.push(quote! {
            /// Per-feature mean, subtracted from the input before the first layer.
            pub #mean: [Scalar; INPUTS],
            /// Per-feature standard deviation the centred input is divided by.
            pub #std: [Scalar; INPUTS],
        });
    }
    let line = line_layout();
    quote! {
        /// The model's parameters: per layer a row-major weight matrix and a bias vector.
        ///
        /// Large models: use the in-place forms ([`Params::init_in_place`],
        /// [`Params::predict_into`]) on a value that lives in a `static` (built with the
        /// `const fn` [`Params::zeroed`]) rather than passing it around by value.
        ///
        /// Fields are laid out in declaration order; on x86-64 and AArch64 the value starts a
        /// 64-byte cache line, so the rows of the first matrix (and of every matrix whose
        /// offset is a multiple of 64 bytes) are never split across two lines by vector loads.
        #line
        pub struct Params {
            #(#p_fields)*
        }

        /// Gradient accumulators: the shape of [`Params`] without the scaling fields.
        ///
        /// [`Params::backprop`] adds one sample's terms; [`Gradients::finish`] turns the sum over a
        /// batch into dJ/dW and dJ/db. Laid out like [`Params`].
        #line
        pub struct Gradients {
            #(#g_fields)*
        }
    }
}

/// The derives and layout of the generated arrays-of-parameters structs: fields in declaration
/// order (`repr(C)`), and on x86-64 and AArch64 aligned to a 64-byte cache line. Only where
/// caches have such lines: on the microcontroller targets the padding would cost flash and RAM
/// for nothing. Layout changes no result (same operations in the same order).
pub(super) fn line_layout() -> TokenStream {
    quote! {
        #[derive(Clone, Debug, PartialEq)]
        #[repr(C)]
        #[cfg_attr(any(target_arch = "x86_64", target_arch = "aarch64"), repr(align(64)))]
    }
}

/// The body of a `zeroed()` for `Params` (with scaling) or `Gradients` (without).
pub(super) fn zeroed_body(cx: &Ctx, with_scaling: bool) -> TokenStream {
    let mut fields = Vec::new();
    for (i, _, n) in cx.param_layers() {
        let w = ident(&n.weights);
        let b = ident(&n.bias);
        let rows = cx.rows_const(i);
        let cols = cx.cols_const(i);
        fields.push(quote!(#w: [[0.0; #cols]; #rows], #b: [0.0; #rows],));
    }
    if with_scaling && cx.model.input.standardize {
        let mean = ident(super::ident::MEAN_FIELD);
        let std = ident(super::ident::STD_FIELD);
        fields.push(quote!(#mean: [0.0; INPUTS], #std: [1.0; INPUTS],));
    }
    quote!(Self { #(#fields)* })
}

/// `impl Params`: constructors, then the methods of `forward`, `classes` and `backward`.
pub(super) fn impl_params(cx: &Ctx) -> TokenStream {
    let zeroed = zeroed_body(cx, true);
    let init_in_place = init_in_place(cx);
    let penalty = penalty_const(cx);
    let scaling_doc = if cx.model.input.standardize {
        " and the input scaling is the identity (mean 0, std 1)"
    } else {
        ""
    };
    let zeroed_doc = format!(
        " Every weight and bias zero{scaling_doc}. A `const fn`, so a `static` can hold the parameters without them passing through the stack."
    );
    let zeroed_doc = super::doc(&zeroed_doc);
    let init_doc = format!(
        " Parameters drawn as the spec says ({}), with seed `seed`.",
        super::init_words(cx.model.init)
    );
    let init_doc = super::doc(&init_doc);
    let scaling_kept = if cx.model.input.standardize {
        "\n\n The input scaling fields are left as they are."
    } else {
        ""
    };
    let in_place_doc = format!(
        " Draws every weight as the spec says ({}) from one `rt::rng::SplitMix64::new(seed)`, layer by layer, each matrix row-major, and zeroes every bias.{scaling_kept}",
        super::init_words(cx.model.init)
    );
    let in_place_doc = super::doc(&in_place_doc);
    let forward = forward::methods(cx);
    let classify = classes::classify(cx);
    let backprop = backward::backprop(cx);
    quote! {
        impl Params {
            #penalty

            #zeroed_doc
            pub const fn zeroed() -> Self {
                #zeroed
            }

            #init_doc
            ///
            /// Returns the parameters by value; for a large model prefer
            /// [`Params::init_in_place`].
            pub fn init(seed: u64) -> Self {
                let mut params = Self::zeroed();
                params.init_in_place(seed);
                params
            }

            #in_place_doc
            pub fn init_in_place(&mut self, seed: u64) {
                #init_in_place
            }

            #forward
            #classify
            #backprop
        }
    }
}

fn penalty_const(cx: &Ctx) -> TokenStream {
    let (value, doc) = match cx.model.penalty {
        Penalty::None => (
            quote!(rt::penalty::Penalty::None),
            " The weight penalty: none.".to_string(),
        ),
        Penalty::L2(l) => {
            let l = cx.scalar_lit(l);
            (
                quote!(rt::penalty::Penalty::L2(#l)),
                " The weight penalty: L2, cost term `(lambda / 2m) sum W^2`, never on biases."
                    .to_string(),
            )
        }
        Penalty::L1(l) => {
            let l = cx.scalar_lit(l);
            (
                quote!(rt::penalty::Penalty::L1(#l)),
                " The weight penalty: L1, cost term `(lambda / m) sum |W|`, never on biases."
                    .to_string(),
            )
        }
    };
    let doc = super::doc(&doc);
    quote! {
        #doc
        pub const PENALTY: rt::penalty::Penalty<Scalar> = #value;
    }
}

fn init_in_place(cx: &Ctx) -> TokenStream {
    let mut steps = Vec::new();
    for (i, l, n) in cx.param_layers() {
        let w = ident(&n.weights);
        let b = ident(&n.bias);
        // Dense layers name their sizes; a convolution's fans are its kernel's
        // (`ir::Layer::fans`).
        let (fan_in, width) = match l.kind {
            crate::ir::LayerKind::Dense => {
                let (a, b) = (cx.fan_in_const(i), cx.width_const(i));
                (quote!(#a), quote!(#b))
            }
            _ => {
                let (a, b) = l.fans();
                let (a, b) = (super::usize_lit(a), super::usize_lit(b));
                (quote!(#a), quote!(#b))
            }
        };
        let fill = match cx.model.init {
            Init::Uniform { eps } => {
                let eps =
                    proc_macro2::Literal::f64_unsuffixed(if eps.is_finite() { eps } else { 0.0 });
                quote!(rt::rng::fill_uniform(self.#w.as_flattened_mut(), #eps, &mut rng);)
            }
            Init::Glorot => quote! {
                rt::rng::fill_uniform(self.#w.as_flattened_mut(), rt::rng::glorot_limit(#fan_in, #width), &mut rng);
            },
            Init::He => quote! {
                rt::rng::fill_normal(self.#w.as_flattened_mut(), rt::rng::he_std(#fan_in), &mut rng);
            },
        };
        steps.push(quote! {
            #fill
            self.#b.fill(ZERO);
        });
    }
    quote! {
        let mut rng = rt::rng::SplitMix64::new(seed);
        #(#steps)*
    }
}

/// `pub static TRAINED: Params` with exact bit patterns ([`Trained`] fits the model by
/// construction).
pub(super) fn trained(cx: &Ctx, w: &Trained<'_>) -> TokenStream {
    let mut fields = Vec::new();
    for ((l, n), flat) in cx.model.layers.iter().zip(&cx.names.layers).zip(&w.layers) {
        if l.parameters() == 0 {
            continue;
        }
        let (weights, bias) = (&flat.weights, &flat.bias);
        let wf = ident(&n.weights);
        let bf = ident(&n.bias);
        let rows = weights.chunks_exact(l.fan_in.max(1)).map(|row| {
            let vals = row.iter().map(|&v| cx.exact(v));
            quote!([#(#vals),*])
        });
        let b = bias.iter().map(|&v| cx.exact(v));
        fields.push(quote!(#wf: [#(#rows),*], #bf: [#(#b),*],));
    }
    if let Some(Standardization { mean, std }) = &w.standardization {
        let mf = ident(super::ident::MEAN_FIELD);
        let sf = ident(super::ident::STD_FIELD);
        let mean = mean.iter().map(|&v| cx.exact(v));
        let std = std.iter().map(|&v| cx.exact(v));
        fields.push(quote!(#mf: [#(#mean),*], #sf: [#(#std),*],));
    }
    quote! {
        /// The trained parameters, baked in with the exact bit pattern of every value.
        pub static TRAINED: Params = Params { #(#fields)* };
    }
}

/// `impl Gradients`: `zeroed`, `clear`, `finish`.
pub(super) fn impl_gradients(cx: &Ctx) -> TokenStream {
    let zeroed = zeroed_body(cx, false);
    let clears = cx.param_layers().map(|(_, _, n)| {
        let w = ident(&n.weights);
        let b = ident(&n.bias);
        quote! {
            self.#w.as_flattened_mut().fill(ZERO);
            self.#b.fill(ZERO);
        }
    });
    let finishes = cx.param_layers().map(|(_, _, n)| {
        let w = ident(&n.weights);
        let b = ident(&n.bias);
        quote! {
            penalty.finish_weights_n(&mut self.#w, &params.#w, m);
            rt::penalty::finish_bias(&mut self.#b, m);
        }
    });
    quote! {
        impl Gradients {
            /// Every accumulator zero. A `const fn`, so a `static` can hold it.
            pub const fn zeroed() -> Self {
                #zeroed
            }

            /// Sets every accumulator to zero, in place.
            pub fn clear(&mut self) {
                #(#clears)*
            }

            /// Turns the sums of [`Params::backprop`] over a batch of `m` samples into the
            /// gradient of the cost J: `dJ/dW = sum / m` plus the penalty's derivative (weights
            /// only), `dJ/db = sum / m`. Does nothing for `m = 0`.
            pub fn finish(&mut self, params: &Params, m: usize) {
                if m == 0 {
                    return;
                }
                let m = <Scalar as rt::Real>::from_usize(m);
                let penalty = Params::PENALTY;
                #(#finishes)*
            }
        }
    }
}
