//! Inference and the cost: `predict`, `predict_into`, `loss`, `penalty_cost`, `cost`, and the
//! per-layer forward steps that `backward` reuses.

use super::{ident, Ctx};
use crate::ir::{Activation, Layer, Loss};
use proc_macro2::{Ident, TokenStream};
use quote::{format_ident, quote};

/// A fixed-size array the generated code reads or writes: a local (`a_hidden`) or a reference
/// parameter (`x`, `out`).
#[derive(Clone)]
pub(super) struct Buf {
    name: Ident,
    by_ref: bool,
}

impl Buf {
    pub fn local(name: &str) -> Buf {
        Buf {
            name: ident(name),
            by_ref: false,
        }
    }
    pub fn param(name: &str) -> Buf {
        Buf {
            name: ident(name),
            by_ref: true,
        }
    }
    /// `&a` or `x`.
    pub fn r(&self) -> TokenStream {
        let n = &self.name;
        if self.by_ref {
            quote!(#n)
        } else {
            quote!(&#n)
        }
    }
    /// The array value: `a` or `*x`.
    pub fn value(&self) -> TokenStream {
        let n = &self.name;
        if self.by_ref {
            quote!(*#n)
        } else {
            quote!(#n)
        }
    }
}

/// The input of layer `i` inside a method taking `x`.
pub(super) fn input_of(cx: &Ctx, i: usize) -> Buf {
    if i == 0 {
        if cx.model.input.standardize {
            Buf::local(super::ident::STANDARDIZED_INPUT)
        } else {
            Buf::param("x")
        }
    } else {
        Buf::local(&cx.names.layers[i - 1].activations)
    }
}

/// `let mut x0 = ..; rt::standardize_n(..)` with `standardize`, else nothing.
pub(super) fn standardize(cx: &Ctx) -> TokenStream {
    if !cx.model.input.standardize {
        return TokenStream::new();
    }
    let x0 = ident(super::ident::STANDARDIZED_INPUT);
    let mean = ident(super::ident::MEAN_FIELD);
    let std = ident(super::ident::STD_FIELD);
    quote! {
        let mut #x0 = [ZERO; INPUTS];
        rt::standardize_n(x, &self.#mean, &self.#std, &mut #x0);
    }
}

/// Where a layer's affine map goes.
pub(super) enum Dest {
    /// A new local array; `mutable` when something modifies it afterwards.
    Local { name: Ident, mutable: bool },
    /// An existing `&mut [Scalar; N]` parameter.
    Param(Ident),
}

/// `z = W a_prev + b` of layer `i` into `dest`, as a runtime call or unrolled.
pub(super) fn affine(cx: &Ctx, i: usize, dest: Dest) -> TokenStream {
    let layer = &cx.model.layers[i];
    let n = &cx.names.layers[i];
    let w = ident(&n.weights);
    let b = ident(&n.bias);
    let input = input_of(cx, i);
    let width = cx.width_const(i);
    if !cx.unrolled(layer) {
        let inp = input.r();
        return match dest {
            Dest::Local { name, .. } => quote! {
                let mut #name = [ZERO; #width];
                rt::affine_n(&self.#w, &self.#b, #inp, &mut #name);
            },
            Dest::Param(out) => quote! {
                rt::affine_n(&self.#w, &self.#b, #inp, #out);
            },
        };
    }
    // Unrolled: z_j = lane_sum(w_j, u) + b_j, in the runtime's order (see `lane_sum`).
    let wpat = matrix_pattern("w", layer.width, layer.fan_in);
    let bs = vector_names("b", layer.width);
    let us = vector_names("u", layer.fan_in);
    let rows = (0..layer.width).map(|j| {
        let products = (0..layer.fan_in).map(|k| {
            let wk = format_ident!("w{}_{}", j, k);
            let uk = &us[k];
            quote!(#wk * #uk)
        });
        let sum = lane_sum(products.collect());
        let bj = &bs[j];
        quote!(#sum + #bj)
    });
    let inval = input.value();
    let block = quote! {{
        let #wpat = self.#w;
        let [#(#bs),*] = self.#b;
        let [#(#us),*] = #inval;
        [#(#rows),*]
    }};
    match dest {
        Dest::Local {
            name,
            mutable: true,
        } => quote!(let mut #name = #block;),
        Dest::Local {
            name,
            mutable: false,
        } => quote!(let #name = #block;),
        Dest::Param(out) => quote!(*#out = #block;),
    }
}

/// The sum of `products` in the order of `rt::affine` (`sinew_runtime::linalg::LANES` = 8 lane
/// sums from `ZERO`, product `i` into lane `i % 8`, folded `((l0 + l4) + (l2 + l6)) + ((l1 + l5) +
/// (l3 + l7))`), so unrolled code gives the runtime's bits. A lane that receives no product stays
/// `+0` and is left out of the fold: every lane sum starts at `+0` and so is never `-0`, and adding
/// `+0` to anything else but `-0` changes nothing.
fn lane_sum(products: Vec<TokenStream>) -> TokenStream {
    const LANES: usize = sinew_runtime::linalg::LANES;
    let mut lanes: Vec<Option<TokenStream>> = vec![None; LANES];
    for (i, p) in products.into_iter().enumerate() {
        let lane = &mut lanes[i % LANES];
        *lane = Some(match lane.take() {
            None => quote!(ZERO + #p),
            Some(acc) => quote!(#acc + #p),
        });
    }
    let fold = |a: Option<TokenStream>, b: Option<TokenStream>| match (a, b) {
        (Some(a), Some(b)) => Some(quote!((#a) + (#b))),
        (a, None) => a,
        (None, b) => b,
    };
    let mut width = LANES;
    while width > 1 {
        width /= 2;
        let (low, high) = lanes.split_at_mut(width);
        for (l, h) in low.iter_mut().zip(high.iter_mut()) {
            *l = fold(l.take(), h.take());
        }
    }
    lanes
        .into_iter()
        .next()
        .flatten()
        .unwrap_or_else(|| quote!(ZERO))
}

/// `[[w0_0, w0_1], [w1_0, w1_1]]`.
pub(super) fn matrix_pattern(prefix: &str, rows: usize, cols: usize) -> TokenStream {
    let rows = (0..rows).map(|j| {
        let cells = (0..cols).map(|k| format_ident!("{}{}_{}", prefix, j, k));
        quote!([#(#cells),*])
    });
    quote!([#(#rows),*])
}

/// `u0, u1, ...`.
pub(super) fn vector_names(prefix: &str, n: usize) -> Vec<Ident> {
    (0..n).map(|k| format_ident!("{}{}", prefix, k)).collect()
}

/// The in-place activation of a buffer (`&mut a` or `out`); nothing for identity.
pub(super) fn activate(cx: &Ctx, act: Activation, target: TokenStream) -> TokenStream {
    match act {
        Activation::Identity => TokenStream::new(),
        Activation::Sigmoid => quote!(rt::act::sigmoid(#target);),
        Activation::Tanh => quote!(rt::act::tanh(#target);),
        Activation::Relu => quote!(rt::act::relu(#target);),
        Activation::LeakyRelu(alpha) => {
            let alpha = cx.scalar_lit(alpha);
            quote!(rt::act::leaky_relu(#target, #alpha);)
        }
        Activation::Softmax => quote!(rt::act::softmax(#target);),
    }
}

/// True when the layer's buffer is modified after the affine map (by its activation).
pub(super) fn activation_mutates(act: Activation) -> bool {
    act != Activation::Identity
}

/// Layer `i` (not the output) into its activation buffer `a_<layer>`, activated in place.
pub(super) fn hidden_layer(cx: &Ctx, i: usize) -> TokenStream {
    let layer = &cx.model.layers[i];
    let name = ident(&cx.names.layers[i].activations);
    let affine = affine(
        cx,
        i,
        Dest::Local {
            name: name.clone(),
            mutable: activation_mutates(layer.activation),
        },
    );
    let act = activate(cx, layer.activation, quote!(&mut #name));
    quote!(#affine #act)
}

/// Standardize and every hidden layer: the statements every per-sample method starts with.
pub(super) fn hidden_layers(cx: &Ctx) -> TokenStream {
    let std = standardize(cx);
    let hidden = (0..cx.last()).map(|i| hidden_layer(cx, i));
    quote!(#std #(#hidden)*)
}

/// The output logits `z_<out>` (immutable local).
pub(super) fn output_logits(cx: &Ctx) -> TokenStream {
    let last = cx.last();
    let z = ident(&cx.names.layers[last].logits);
    affine(
        cx,
        last,
        Dest::Local {
            name: z,
            mutable: false,
        },
    )
}

/// `let mut a_<out> = z_<out>; act(&mut a_<out>);`
pub(super) fn output_activations(cx: &Ctx) -> TokenStream {
    let last = cx.last();
    let out = cx.model.output();
    let n = &cx.names.layers[last];
    let a = ident(&n.activations);
    let z = ident(&n.logits);
    if activation_mutates(out.activation) {
        let act = activate(cx, out.activation, quote!(&mut #a));
        quote!(let mut #a = #z; #act)
    } else {
        quote!(let #a = #z;)
    }
}

/// The per-sample loss expression, from the logits where that matters.
pub(super) fn loss_expr(cx: &Ctx) -> TokenStream {
    let out: &Layer = cx.model.output();
    let n = &cx.names.layers[cx.last()];
    let z = ident(&n.logits);
    let a = ident(&n.activations);
    match (cx.model.loss, out.activation) {
        (Loss::CrossEntropy, Activation::Sigmoid) => {
            quote!(rt::loss::logistic_cross_entropy(&#z, y))
        }
        (Loss::CrossEntropy, Activation::Softmax) => {
            quote!(rt::loss::softmax_cross_entropy(&#z, y))
        }
        (Loss::CrossEntropy, _) => {
            let e = super::compile_error("cross_entropy needs a sigmoid or softmax output");
            quote!({ #e ZERO })
        }
        (Loss::SquaredError, _) => quote!(rt::loss::squared_error(&#a, y)),
    }
}

/// True when the loss reads the output activations (not only the logits).
pub(super) fn loss_reads_activations(cx: &Ctx) -> bool {
    cx.model.loss == Loss::SquaredError
}

/// `predict`, `predict_into`, `loss`, `penalty_cost`, `cost`.
pub(super) fn methods(cx: &Ctx) -> TokenStream {
    let hidden = hidden_layers(cx);
    let last = cx.last();
    let out_layer = cx.model.output();
    let predict_out = affine(cx, last, Dest::Param(ident("out")));
    let predict_act = activate(cx, out_layer.activation, quote!(out));
    let logits = output_logits(cx);
    let loss_acts = if loss_reads_activations(cx) {
        output_activations(cx)
    } else {
        TokenStream::new()
    };
    let loss = loss_expr(cx);
    let loss_doc = match cx.model.loss {
        Loss::CrossEntropy => {
            " The loss of one sample (no penalty), computed from the output logits."
        }
        Loss::SquaredError => " The loss of one sample (no penalty): `1/2 sum_j (a_j - y_j)^2`.",
    };
    let loss_doc = super::doc(loss_doc);
    let penalty_sums = cx.names.layers.iter().map(|n| {
        let w = ident(&n.weights);
        quote!(sum += Self::PENALTY.sum(self.#w.as_flattened());)
    });
    quote! {
        /// The network's output for one input.
        pub fn predict(&self, x: &[Scalar; INPUTS]) -> [Scalar; OUTPUTS] {
            let mut out = [ZERO; OUTPUTS];
            self.predict_into(x, &mut out);
            out
        }

        /// The network's output for one input, written into `out`.
        pub fn predict_into(&self, x: &[Scalar; INPUTS], out: &mut [Scalar; OUTPUTS]) {
            #hidden
            #predict_out
            #predict_act
        }

        #loss_doc
        pub fn loss(&self, x: &[Scalar; INPUTS], y: &[Scalar; OUTPUTS]) -> Scalar {
            #hidden
            #logits
            #loss_acts
            #loss
        }

        /// The penalty term of the cost of a batch of `m` samples (ZERO for `m = 0`): the layers'
        /// [`rt::penalty::Penalty::sum`] added in order, then [`rt::penalty::Penalty::cost`].
        pub fn penalty_cost(&self, m: usize) -> Scalar {
            if m == 0 {
                return ZERO;
            }
            let mut sum = ZERO;
            #(#penalty_sums)*
            Self::PENALTY.cost(sum, <Scalar as rt::Real>::from_usize(m))
        }

        /// The cost J of a batch: the mean loss over the pairs of `xs` and `ys` (as many as the
        /// shorter slice holds, summed in order) plus [`Params::penalty_cost`]. ZERO for an empty
        /// batch.
        pub fn cost(&self, xs: &[[Scalar; INPUTS]], ys: &[[Scalar; OUTPUTS]]) -> Scalar {
            let m = xs.len().min(ys.len());
            if m == 0 {
                return ZERO;
            }
            let mut sum = ZERO;
            for (x, y) in xs.iter().zip(ys) {
                sum += self.loss(x, y);
            }
            sum / <Scalar as rt::Real>::from_usize(m) + self.penalty_cost(m)
        }
    }
}
