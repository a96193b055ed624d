//! Backprop for one sample and the batch finish (`Gradients`).

use super::forward::{
    activation_mutates, hidden_layers, input_of, loss_expr, matrix_pattern, output_activations,
    output_logits, vector_names,
};
use super::{ident, Ctx};
use crate::ir::{Activation, Loss};
use proc_macro2::{Ident, TokenStream};
use quote::{format_ident, quote};

/// The in-place derivative step `d *= g'(.)` given the activations `a`; nothing for identity.
fn activation_grad(cx: &Ctx, act: Activation, a: &Ident, d: &Ident) -> TokenStream {
    match act {
        Activation::Identity => TokenStream::new(),
        Activation::Sigmoid => quote!(rt::act::sigmoid_grad(&#a, &mut #d);),
        Activation::Tanh => quote!(rt::act::tanh_grad(&#a, &mut #d);),
        Activation::Relu => quote!(rt::act::relu_grad(&#a, &mut #d);),
        Activation::LeakyRelu(alpha) => {
            let alpha = cx.scalar_lit(alpha);
            quote!(rt::act::leaky_relu_grad(&#a, &mut #d, #alpha);)
        }
        Activation::Softmax => quote!(rt::act::softmax_grad(&#a, &mut #d);),
    }
}

/// `grad.<l>_weights += d a_prev^T; grad.<l>_bias += d` for layer `i`.
fn accumulate(cx: &Ctx, i: usize) -> TokenStream {
    let layer = &cx.model.layers[i];
    let n = &cx.names.layers[i];
    let w = ident(&n.weights);
    let b = ident(&n.bias);
    let d = ident(&n.errors);
    let input = input_of(cx, i);
    if !cx.unrolled(layer) {
        let inp = input.r();
        return quote! {
            rt::outer_acc_n(&mut grad.#w, &#d, #inp);
            rt::add_acc(&mut grad.#b, &#d);
        };
    }
    // Unrolled: g_ji += d_j * u_i; c_j += d_j (the runtime's operations).
    let es = vector_names("e", layer.width);
    let us = vector_names("u", layer.fan_in);
    let cs = vector_names("c", layer.width);
    let gpat = matrix_pattern("g", layer.width, layer.fan_in);
    let outer = (0..layer.width).flat_map(|j| {
        let ej = es[j].clone();
        let us = us.clone();
        (0..layer.fan_in).map(move |k| {
            let g = format_ident!("g{}_{}", j, k);
            let u = &us[k];
            quote!(*#g += #ej * #u;)
        })
    });
    let bias = cs.iter().zip(&es).map(|(c, e)| quote!(*#c += #e;));
    let inval = input.value();
    quote! {{
        let [#(#es),*] = #d;
        let [#(#us),*] = #inval;
        let #gpat = &mut grad.#w;
        #(#outer)*
        let [#(#cs),*] = &mut grad.#b;
        #(#bias)*
    }}
}

/// `d_prev = W^T d; d_prev *= g'(a_prev)` from layer `i` to layer `i - 1`.
fn propagate(cx: &Ctx, i: usize) -> TokenStream {
    let layer = &cx.model.layers[i];
    let prev = &cx.model.layers[i - 1];
    let n = &cx.names.layers[i];
    let np = &cx.names.layers[i - 1];
    let w = ident(&n.weights);
    let d = ident(&n.errors);
    let dp = ident(&np.errors);
    let ap = ident(&np.activations);
    let width_prev = cx.width_const(i - 1);
    let grad = activation_grad(cx, prev.activation, &ap, &dp);
    if !cx.unrolled(layer) {
        return quote! {
            let mut #dp = [ZERO; #width_prev];
            rt::back_n(&self.#w, &#d, &mut #dp);
            #grad
        };
    }
    // Unrolled: out_k = ((ZERO + w_0k e_0) + w_1k e_1) + ..., the runtime's order.
    let es = vector_names("e", layer.width);
    let wpat = matrix_pattern("w", layer.width, layer.fan_in);
    let cols = (0..layer.fan_in).map(|k| {
        let terms = (0..layer.width).map(|j| {
            let wjk = format_ident!("w{}_{}", j, k);
            let ej = &es[j];
            quote!(+ #wjk * #ej)
        });
        quote!(ZERO #(#terms)*)
    });
    let binding = if activation_mutates(prev.activation) {
        quote!(let mut #dp)
    } else {
        quote!(let #dp)
    };
    quote! {
        #binding = {
            let #wpat = self.#w;
            let [#(#es),*] = #d;
            [#(#cols),*]
        };
        #grad
    }
}

/// `Params::backprop`.
pub(super) fn backprop(cx: &Ctx) -> TokenStream {
    let hidden = hidden_layers(cx);
    let logits = output_logits(cx);
    let last = cx.last();
    let out = cx.model.output();
    let n = &cx.names.layers[last];
    let a = ident(&n.activations);
    let d = ident(&n.errors);
    let width = cx.width_const(last);
    // Softmax with cross-entropy: the outputs and the loss from one runtime call that shares
    // their exponentials (bit for bit the separate softmax and loss).
    let (acts, loss) =
        if cx.model.loss == Loss::CrossEntropy && out.activation == Activation::Softmax {
            let z = ident(&n.logits);
            (
                quote!(let mut #a = [ZERO; #width];),
                quote!(rt::loss::softmax_with_cross_entropy(&#z, y, &mut #a)),
            )
        } else {
            (output_activations(cx), loss_expr(cx))
        };
    let out_grad = match cx.model.loss {
        Loss::CrossEntropy => TokenStream::new(),
        Loss::SquaredError => activation_grad(cx, out.activation, &a, &d),
    };
    let mut back = Vec::new();
    for i in (0..=last).rev() {
        back.push(accumulate(cx, i));
        if i > 0 {
            back.push(propagate(cx, i));
        }
    }
    let error_doc = match cx.model.loss {
        Loss::CrossEntropy => "`delta = a - y` at the output, for cross-entropy",
        Loss::SquaredError => "`delta = (a - y) .* g'(z)` at the output, for squared error",
    };
    let doc = format!(
        "Forward and backward pass of one sample: adds its terms `delta(l+1) a(l)^T` and `delta(l+1)` to `grad` and returns its loss, the same value as [`Params::loss`]. The error is {error_doc}, and `delta(l) = (W(l)^T delta(l+1)) .* g'(z(l))` below it; the input has none.\n\nCall [`Gradients::finish`] after the last sample of a batch."
    );
    let doc = super::doc(&doc);
    quote! {
        #doc
        pub fn backprop(&self, x: &[Scalar; INPUTS], y: &[Scalar; OUTPUTS], grad: &mut Gradients) -> Scalar {
            #hidden
            #logits
            #acts
            let loss = #loss;
            let mut #d = [ZERO; #width];
            rt::loss::output_error(&#a, y, &mut #d);
            #out_grad
            #(#back)*
            loss
        }
    }
}

/// `impl Gradients`: `zeroed`, `clear`, `finish`.
pub(super) fn impl_gradients(cx: &Ctx) -> TokenStream {
    let zeroed = super::params::zeroed_body(cx, false);
    let clears = cx.names.layers.iter().map(|n| {
        let w = ident(&n.weights);
        let b = ident(&n.bias);
        quote! {
            self.#w.as_flattened_mut().fill(ZERO);
            self.#b.fill(ZERO);
        }
    });
    let finishes = cx.names.layers.iter().map(|n| {
        let w = ident(&n.weights);
        let b = ident(&n.bias);
        quote! {
            penalty.finish_weights(self.#w.as_flattened_mut(), params.#w.as_flattened(), m);
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
