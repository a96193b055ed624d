//! Inference and the cost: `predict`, `predict_into`, `loss`, `penalty_cost`, `cost`, from the
//! plan's inference and loss passes.

use super::{ident, steps, Ctx};
use crate::plan::Head;
use proc_macro2::TokenStream;
use quote::quote;

/// `predict`, `predict_into`, `loss`, `penalty_cost`, `cost`.
pub(super) fn methods(cx: &Ctx) -> TokenStream {
    let predict = steps::scoped(cx, &cx.plan.inference);
    let loss = steps::sample(cx, &cx.plan.loss, false, true);
    let loss_doc = match cx.plan.head {
        Head::SquaredError(_) => " The loss of one sample (no penalty): `1/2 sum_j (a_j - y_j)^2`.",
        _ => " The loss of one sample (no penalty), computed from the output logits.",
    };
    let loss_doc = super::doc(loss_doc);
    let penalty_sums = cx.param_layers().map(|(_, _, n)| {
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
            #predict
        }

        #loss_doc
        pub fn loss(&self, x: &[Scalar; INPUTS], y: &[Scalar; OUTPUTS]) -> Scalar {
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
