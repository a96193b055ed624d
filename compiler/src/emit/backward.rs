//! Backprop for one sample: `Params::backprop`, from the plan's backprop pass.

use super::{steps, Ctx};
use crate::plan::Head;
use proc_macro2::TokenStream;
use quote::quote;

/// `Params::backprop`: the plan's backprop pass, per sample.
pub(super) fn backprop(cx: &Ctx) -> TokenStream {
    let body = steps::sample(cx, &cx.plan.backprop, false, false);
    let error_doc = match cx.plan.head {
        Head::SquaredError(_) => "`delta = (a - y) .* g'(z)` at the output, for squared error",
        _ => "`delta = a - y` at the output, for cross-entropy",
    };
    let doc = format!(
        "Forward and backward pass of one sample: adds its terms `delta(l+1) a(l)^T` and `delta(l+1)` to `grad` and returns its loss, the same value as [`Params::loss`]. The error is {error_doc}, and `delta(l) = (W(l)^T delta(l+1)) .* g'(z(l))` below it; the input has none.\n\nCall [`Gradients::finish`] after the last sample of a batch."
    );
    let doc = super::doc(&doc);
    quote! {
        #doc
        pub fn backprop(&self, x: &[Scalar; INPUTS], y: &[Scalar; OUTPUTS], grad: &mut Gradients) -> Scalar {
            #body
            loss
        }
    }
}
