//! The blocked batch gradient: `BatchScratch`, `Params::backprop_batch` and `Params::gradient`.
//!
//! Samples go through the network a block at a time ([`BLOCK`] of them): each layer's affine map
//! runs over the whole block with `rt::affine_batch_n`, and the gradient of each layer is
//! accumulated with `rt::outer_acc_batch_n` (`G += D^T A` over the block, every element adding
//! the samples in order), so each weight tile is read once per block instead of once per sample.
//! Every runtime batch kernel gives, sample by sample, the bits of its per-sample kernel, and the
//! elementwise activations give the same bits on a block as on one sample; so the result equals
//! the per-sample loop of `Trainer::step` (and the host engine) bit for bit.

use super::{ident, usize_lit, Ctx};
use crate::ir::{Activation, Loss};
use proc_macro2::{Ident, TokenStream};
use quote::quote;

/// Samples per block (rows of every `BatchScratch` array). Chosen by measurement on the
/// benchmark networks (see the README's Performance section): large enough to amortise reading
/// a weight tile, small enough that a block of activations stays in the first-level cache.
pub(crate) const BLOCK: usize = 32;

/// The activation over a whole block, in place (`rows`: `&mut [[Scalar; N]]`). Elementwise
/// activations run on the flattened block; softmax runs row by row.
fn activate_block(cx: &Ctx, act: Activation, rows: &Ident) -> TokenStream {
    match act {
        Activation::Identity => TokenStream::new(),
        Activation::Softmax => quote! {
            for row in #rows.iter_mut() {
                rt::act::softmax(row);
            }
        },
        other => super::forward::activate(cx, other, quote!(#rows.as_flattened_mut())),
    }
}

/// `d *= g'(a)` over a block (`a`, `d`: slices of rows).
fn activation_grad_block(cx: &Ctx, act: Activation, a: &Ident, d: &Ident) -> TokenStream {
    let flat = |f: TokenStream| quote!(#f(#a.as_flattened(), #d.as_flattened_mut()););
    match act {
        Activation::Identity => TokenStream::new(),
        Activation::Sigmoid => flat(quote!(rt::act::sigmoid_grad)),
        Activation::Tanh => flat(quote!(rt::act::tanh_grad)),
        Activation::Relu => flat(quote!(rt::act::relu_grad)),
        Activation::LeakyRelu(alpha) => {
            let alpha = cx.scalar_lit(alpha);
            quote!(rt::act::leaky_relu_grad(#a.as_flattened(), #d.as_flattened_mut(), #alpha);)
        }
        Activation::Softmax => quote! {
            for (a_row, d_row) in #a.iter().zip(#d.iter_mut()) {
                rt::act::softmax_grad(a_row, d_row);
            }
        },
    }
}

/// `BatchScratch`, its `impl`, and the two `Params` methods.
pub(super) fn items(cx: &Ctx) -> TokenStream {
    let block = usize_lit(BLOCK);
    let std = cx.model.input.standardize;
    let x0 = ident(super::ident::STANDARDIZED_INPUT);
    let last = cx.last();

    // Scratch fields: x0 (with standardize), then per layer a_<l>, the output's z_<l>, d_<l>.
    let mut fields = Vec::new();
    if std {
        fields.push((x0.clone(), ident("INPUTS")));
    }
    for (i, _, n) in cx.layers() {
        fields.push((ident(&n.activations), cx.width_const(i)));
    }
    let z_out = ident(&cx.names.layers[last].logits);
    fields.push((z_out.clone(), cx.width_const(last)));
    for (i, _, n) in cx.layers() {
        fields.push((ident(&n.errors), cx.width_const(i)));
    }
    let names: Vec<&Ident> = fields.iter().map(|(f, _)| f).collect();
    let decls = fields
        .iter()
        .map(|(f, w)| quote!(#f: [[Scalar; #w]; #block],));
    let zeros = fields.iter().map(|(f, w)| quote!(#f: [[0.0; #w]; #block],));
    let gets = fields.iter().map(|(f, _)| quote!(#f.get_mut(..m)));
    let somes = fields.iter().map(|(f, _)| quote!(Some(#f)));

    // The input of layer i inside the block loop.
    let input = |i: usize| -> Ident {
        if i == 0 {
            if std {
                x0.clone()
            } else {
                ident("xb")
            }
        } else {
            ident(&cx.names.layers[i - 1].activations)
        }
    };

    let standardize = if std {
        let mean = ident(super::ident::MEAN_FIELD);
        let sd = ident(super::ident::STD_FIELD);
        quote! {
            for (x, x0_row) in xb.iter().zip(#x0.iter_mut()) {
                rt::standardize_n(x, &self.#mean, &self.#sd, x0_row);
            }
        }
    } else {
        TokenStream::new()
    };

    // Softmax with cross-entropy: one runtime call gives the outputs and the losses, sharing
    // the exponentials (bit for bit the separate softmax and loss).
    let fused_softmax =
        cx.model.loss == Loss::CrossEntropy && cx.model.output().activation == Activation::Softmax;
    let mut forward = Vec::new();
    for (i, layer, n) in cx.layers() {
        let w = ident(&n.weights);
        let b = ident(&n.bias);
        let a = ident(&n.activations);
        let inp = input(i);
        if i < last {
            let act = activate_block(cx, layer.activation, &a);
            forward.push(quote! {
                rt::affine_batch_n(&self.#w, &self.#b, #inp, #a);
                #act
            });
        } else if fused_softmax {
            // The softmax outputs come with the loss, below.
            forward.push(quote! {
                rt::affine_batch_n(&self.#w, &self.#b, #inp, #z_out);
            });
        } else {
            let act = activate_block(cx, layer.activation, &a);
            forward.push(quote! {
                rt::affine_batch_n(&self.#w, &self.#b, #inp, #z_out);
                for (a_row, z_row) in #a.iter_mut().zip(#z_out.iter()) {
                    *a_row = *z_row;
                }
                #act
            });
        }
    }

    let out = cx.model.output();
    let out_names = &cx.names.layers[last];
    let a_out = ident(&out_names.activations);
    let d_out = ident(&out_names.errors);
    let loss = match (cx.model.loss, out.activation) {
        (Loss::CrossEntropy, Activation::Softmax) => quote! {
            sum = rt::loss::softmax_cross_entropy_batch_n(#z_out, yb, #a_out, sum);
        },
        (Loss::CrossEntropy, Activation::Sigmoid) => quote! {
            for (z_row, y) in #z_out.iter().zip(yb) {
                sum += rt::loss::logistic_cross_entropy(z_row, y);
            }
        },
        (Loss::CrossEntropy, _) => {
            let e = super::compile_error("cross_entropy needs a sigmoid or softmax output");
            quote!(#e)
        }
        (Loss::SquaredError, _) => quote! {
            for (a_row, y) in #a_out.iter().zip(yb) {
                sum += rt::loss::squared_error(a_row, y);
            }
        },
    };
    let out_grad = match cx.model.loss {
        Loss::CrossEntropy => TokenStream::new(),
        Loss::SquaredError => activation_grad_block(cx, out.activation, &a_out, &d_out),
    };

    let mut backward = Vec::new();
    for i in (0..=last).rev() {
        let n = &cx.names.layers[i];
        let w = ident(&n.weights);
        let b = ident(&n.bias);
        let d = ident(&n.errors);
        let inp = input(i);
        backward.push(quote! {
            rt::outer_acc_batch_n(&mut grad.#w, #d, #inp);
            rt::add_acc_batch(&mut grad.#b, #d.as_flattened());
        });
        if i > 0 {
            let np = &cx.names.layers[i - 1];
            let dp = ident(&np.errors);
            let ap = ident(&np.activations);
            let grad = activation_grad_block(cx, cx.model.layers[i - 1].activation, &ap, &dp);
            backward.push(quote! {
                rt::back_batch_n(&self.#w, #d, #dp);
                #grad
            });
        }
    }

    let block_doc = super::doc(&format!(
        " Samples per block of [`Params::backprop_batch`]: the rows of every array of the scratch ({BLOCK})."
    ));
    let line = super::params::line_layout();
    quote! {
        /// Working memory of [`Params::backprop_batch`]: the activations, output logits and errors
        /// of one block of samples, in fixed arrays. Keep one in a `static` (built with the
        /// `const fn` [`BatchScratch::zeroed`]) or on the heap for a large model. Laid out like
        /// [`Params`].
        #line
        pub struct BatchScratch {
            #(#decls)*
        }

        impl BatchScratch {
            #block_doc
            pub const BLOCK: usize = #block;

            /// Every array zero. A `const fn`, so a `static` can hold it.
            pub const fn zeroed() -> Self {
                Self { #(#zeros)* }
            }
        }

        impl Params {
            /// Backprop of every pair of `xs` and `ys` (as many as the shorter slice holds), a block
            /// of [`BatchScratch::BLOCK`] samples at a time: adds to `grad` exactly what
            /// [`Params::backprop`] on each pair in order adds, bit for bit, and returns the sum of
            /// their losses (added in sample order). Each weight matrix is read once per block.
            pub fn backprop_batch(
                &self,
                xs: &[[Scalar; INPUTS]],
                ys: &[[Scalar; OUTPUTS]],
                grad: &mut Gradients,
                scratch: &mut BatchScratch,
            ) -> Scalar {
                let BatchScratch { #(#names),* } = scratch;
                let mut sum = ZERO;
                let sample_blocks = rt::each::blocks(xs, BatchScratch::BLOCK).zip(rt::each::blocks(ys, BatchScratch::BLOCK));
                for (xb, yb) in sample_blocks {
                    let m = xb.len().min(yb.len());
                    let (Some(xb), Some(yb), #(#somes),*) = (xb.get(..m), yb.get(..m), #(#gets),*) else {
                        break;
                    };
                    #standardize
                    #(#forward)*
                    #loss
                    for ((d_row, a_row), y) in #d_out.iter_mut().zip(#a_out.iter()).zip(yb) {
                        rt::loss::output_error(a_row, y, d_row);
                    }
                    #out_grad
                    #(#backward)*
                }
                sum
            }

            /// The cost J of a batch and its gradient, computed a block at a time: clears `grad`,
            /// runs [`Params::backprop_batch`], then [`Gradients::finish`]. Equal, bit for bit, to
            /// the cost and gradient of [`Trainer::step`] on the same batch (before its update).
            /// An empty batch returns ZERO and leaves `grad` zero.
            pub fn gradient(
                &self,
                xs: &[[Scalar; INPUTS]],
                ys: &[[Scalar; OUTPUTS]],
                grad: &mut Gradients,
                scratch: &mut BatchScratch,
            ) -> Scalar {
                grad.clear();
                let m = xs.len().min(ys.len());
                if m == 0 {
                    return ZERO;
                }
                let sum = self.backprop_batch(xs, ys, grad, scratch);
                grad.finish(self, m);
                sum / <Scalar as rt::Real>::from_usize(m) + self.penalty_cost(m)
            }
        }
    }
}
