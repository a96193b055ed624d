//! The on-device trainer: parameters, gradient accumulators and optimizer state in fixed arrays.

use super::{ident, usize_lit, Ctx};
use crate::plan::{ParamArray, Update};
use proc_macro2::{Ident, TokenStream};
use quote::quote;

/// `pub struct Trainer` and its `impl`.
pub(super) fn items(cx: &Ctx) -> TokenStream {
    let k = cx.plan.update;
    let lit = |v: f64| cx.scalar_lit(v);
    let (state_fields, state_zeroed, state_clear, consts, doc) = match k {
        Update::Sgd { rate } => {
            let r = lit(rate);
            (
                quote!(),
                quote!(),
                quote!(),
                quote! {
                    /// Learning rate.
                    pub const RATE: Scalar = #r;
                },
                " plain gradient descent, `w -= rate g`",
            )
        }
        Update::Momentum { rate, mu } => {
            let (r, mu) = (lit(rate), lit(mu));
            (
                quote! {
                    /// Velocity of every parameter (classical momentum).
                    pub velocity: Gradients,
                },
                quote!(velocity: Gradients::zeroed(),),
                quote!(self.velocity.clear();),
                quote! {
                    /// Learning rate.
                    pub const RATE: Scalar = #r;
                    /// Momentum coefficient.
                    pub const MOMENTUM: Scalar = #mu;
                },
                " gradient descent with classical momentum, `v = mu v - rate g; w += v`",
            )
        }
        Update::Adam {
            rate,
            beta1,
            beta2,
            eps,
        } => {
            let (r, b1, b2, e) = (lit(rate), lit(beta1), lit(beta2), lit(eps));
            (
                quote! {
                    /// Adam's first-moment estimate of every parameter's gradient.
                    pub m: Gradients,
                    /// Adam's second-moment estimate of every parameter's gradient.
                    pub v: Gradients,
                },
                quote!(m: Gradients::zeroed(), v: Gradients::zeroed(),),
                quote!(self.m.clear(); self.v.clear();),
                quote! {
                    /// Learning rate.
                    pub const RATE: Scalar = #r;
                    /// First-moment decay.
                    pub const BETA1: Scalar = #b1;
                    /// Second-moment decay.
                    pub const BETA2: Scalar = #b2;
                    /// Denominator guard.
                    pub const EPSILON: Scalar = #e;
                },
                " Adam with bias correction (Kingma and Ba 2015)",
            )
        }
    };
    // Every parameter array in the plan's order: per layer its weights, then its bias.
    let updates = cx.plan.params.iter().filter_map(|&a| {
        let field = match a {
            ParamArray::Weights(l) => Field::Matrix(ident(&cx.names.layers.get(l)?.weights)),
            ParamArray::Bias(l) => Field::Vector(ident(&cx.names.layers.get(l)?.bias)),
        };
        Some(update(&k, &field))
    });
    let adam_t = if matches!(k, Update::Adam { .. }) {
        quote!(let t = self.steps;)
    } else {
        quote!()
    };
    let batch = usize_lit(cx.model.train.batch as usize);
    let epochs = usize_lit(cx.model.train.epochs as usize);
    let struct_doc = format!(
        " The on-device trainer:{doc}. Holds the parameters, the gradient accumulators and the optimizer state in fixed arrays."
    );
    let struct_doc = super::doc(&struct_doc);
    quote! {
        #struct_doc
        ///
        /// For a large model keep it in a `static` built with the `const fn`
        /// [`Trainer::zeroed`], then [`Params::init_in_place`] its `params` and call
        /// [`Trainer::step`]: nothing large passes through the stack.
        #[derive(Clone, Debug, PartialEq)]
        pub struct Trainer {
            /// The parameters being trained.
            pub params: Params,
            /// The gradient of the last step's batch.
            pub grad: Gradients,
            #state_fields
            /// Updates done so far (saturates at `u32::MAX`).
            pub steps: u32,
        }

        impl Trainer {
            #consts
            /// The spec's batch size (a suggestion: [`Trainer::step`] takes any batch).
            pub const BATCH: usize = #batch;
            /// The spec's number of passes over the training set.
            pub const EPOCHS: usize = #epochs;

            /// A trainer with zeroed parameters and state. A `const fn`, so a `static` can hold it.
            pub const fn zeroed() -> Self {
                Self::new(Params::zeroed())
            }

            /// A trainer for `params` with zeroed gradient and optimizer state.
            pub const fn new(params: Params) -> Self {
                Trainer { params, grad: Gradients::zeroed(), #state_zeroed steps: 0 }
            }

            /// Zeroes the gradient and the optimizer state and the step count, in place; keeps
            /// the parameters.
            pub fn reset(&mut self) {
                self.grad.clear();
                #state_clear
                self.steps = 0;
            }

            /// One optimizer step on a batch: clears the gradient, back-propagates every pair of
            /// `xs` and `ys` (as many as the shorter slice holds), finishes the gradient, then
            /// updates every weight and bias. Returns the cost J of the batch under the
            /// parameters before the update (the value [`Params::cost`] gives). An empty batch
            /// returns ZERO and changes nothing.
            pub fn step(&mut self, xs: &[[Scalar; INPUTS]], ys: &[[Scalar; OUTPUTS]]) -> Scalar {
                let m = xs.len().min(ys.len());
                if m == 0 {
                    return ZERO;
                }
                self.grad.clear();
                let mut sum = ZERO;
                for (x, y) in xs.iter().zip(ys) {
                    sum += self.params.backprop(x, y, &mut self.grad);
                }
                self.grad.finish(&self.params, m);
                let cost = sum / <Scalar as rt::Real>::from_usize(m) + self.params.penalty_cost(m);
                self.steps = self.steps.saturating_add(1);
                #adam_t
                #(#updates)*
                cost
            }
        }
    }
}

/// A parameter array of a layer: its weight matrix or its bias vector.
enum Field {
    Matrix(Ident),
    Vector(Ident),
}

/// `owner.field` as the array the runtime's optimizer steps (`_n`) take: operands of one array
/// type, so their lengths agree by construction.
fn access(owner: TokenStream, field: &Field, mutable: bool) -> TokenStream {
    let f = match field {
        Field::Matrix(f) | Field::Vector(f) => f,
    };
    if mutable {
        quote!(&mut #owner.#f)
    } else {
        quote!(&#owner.#f)
    }
}

/// One optimizer call over one parameter array, in place.
fn update(k: &Update, field: &Field) -> TokenStream {
    let p = access(quote!(self.params), field, true);
    let g = access(quote!(self.grad), field, false);
    match k {
        Update::Sgd { .. } => quote!(rt::optim::sgd_n(#p, #g, Self::RATE);),
        Update::Momentum { .. } => {
            let v = access(quote!(self.velocity), field, true);
            quote!(rt::optim::momentum_n(#p, #g, #v, Self::RATE, Self::MOMENTUM);)
        }
        Update::Adam { .. } => {
            let m = access(quote!(self.m), field, true);
            let v = access(quote!(self.v), field, true);
            quote! {
                rt::optim::adam_n(#p, #g, #m, #v, t, Self::RATE, Self::BETA1, Self::BETA2, Self::EPSILON);
            }
        }
    }
}
