//! The blocked batch gradient: `BatchScratch`, `Params::backprop_batch` and `Params::gradient`.
//!
//! Samples go through the network a block at a time ([`BLOCK`] of them): each layer's affine map
//! runs over the whole block with `rt::affine_batch_n`, and the gradient of each layer is
//! accumulated with `rt::outer_acc_batch_n` (`G += D^T A` over the block, every element adding
//! the samples in order), so each weight tile is read once per block instead of once per sample.
//! Every runtime batch kernel gives, sample by sample, the bits of its per-sample kernel, and the
//! elementwise activations give the same bits on a block as on one sample; so the result equals
//! the per-sample loop of `Trainer::step` (and the host engine) bit for bit.

use super::{ident, steps, usize_lit, Ctx};
use crate::plan::Buf;
use proc_macro2::{Ident, TokenStream};
use quote::quote;

/// Samples per block (rows of every `BatchScratch` array): large enough to amortise reading a
/// weight tile, small enough that a block of activations stays in the first-level cache
/// (measurements: `bench/README.md`).
pub(crate) const BLOCK: usize = 32;

/// `BatchScratch`, its `impl`, and the two `Params` methods.
pub(super) fn items(cx: &Ctx) -> TokenStream {
    let block = usize_lit(BLOCK);
    // Scratch fields: the plan's working buffers, a block of rows each.
    let fields: Vec<(Ident, Ident)> = cx
        .plan
        .buffers
        .iter()
        .map(|b| {
            let width = match b.buf {
                Buf::Act(l) | Buf::Err(l) => cx.width_const(l),
                Buf::Logits => cx.width_const(cx.plan.output),
                _ => ident("INPUTS"),
            };
            (steps::block_name(cx, b.buf), width)
        })
        .collect();
    let names: Vec<&Ident> = fields.iter().map(|(f, _)| f).collect();
    let decls = fields
        .iter()
        .map(|(f, w)| quote!(#f: [[Scalar; #w]; #block],));
    let zeros = fields.iter().map(|(f, w)| quote!(#f: [[0.0; #w]; #block],));
    let gets = fields.iter().map(|(f, _)| quote!(#f.get_mut(..m)));
    let somes = fields.iter().map(|(f, _)| quote!(Some(#f)));
    let body = steps::block(cx, &cx.plan.backprop);

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
                    #body
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
