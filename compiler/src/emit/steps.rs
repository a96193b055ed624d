//! Plan steps as Rust source: one arm per [`Step`], in the per-sample form (fixed arrays, the
//! runtime's `_n` kernels or the unrolled element forms) and in the block form (slices of rows,
//! the runtime's batch kernels).
//!
//! A local buffer is declared by the first step of a pass that writes it; it is `let mut` when a
//! later step of the pass writes it again (or when a runtime call fills it).

use super::{ident, Ctx};
use crate::ir::Activation;
use crate::plan::{Buf, Head, Step, WindowOp};
use proc_macro2::{Ident, TokenStream};
use quote::{format_ident, quote};

/// `rt::act::<name>` of an activation or of its derivative (`grad`: its array form `_grad_n`, or
/// `_grad_batch_n` over rows when `rows`), and the `leaky_relu` slope literal. `None` for the
/// identity, which has no kernel.
fn act_kernel(
    cx: &Ctx,
    act: Activation,
    grad: bool,
    rows: bool,
) -> Option<(TokenStream, Option<TokenStream>)> {
    let (name, alpha) = match act {
        Activation::Identity => return None,
        Activation::Sigmoid => ("sigmoid", None),
        Activation::Tanh => ("tanh", None),
        Activation::Relu => ("relu", None),
        Activation::LeakyRelu(a) => ("leaky_relu", Some(cx.scalar_lit(a))),
        Activation::Softmax => ("softmax", None),
    };
    let f = if grad && rows {
        format_ident!("{}_grad_batch_n", name)
    } else if grad {
        format_ident!("{}_grad_n", name)
    } else {
        format_ident!("{}", name)
    };
    Some((quote!(rt::act::#f), alpha))
}

/// `rt::act::<f>(args.., alpha);` (nothing for the identity).
fn act_call(cx: &Ctx, act: Activation, grad: bool, rows: bool, args: TokenStream) -> TokenStream {
    match act_kernel(cx, act, grad, rows) {
        None => TokenStream::new(),
        Some((f, None)) => quote!(#f(#args);),
        Some((f, Some(alpha))) => quote!(#f(#args, #alpha);),
    }
}

/// `rt::loss::<kernel>_n` of one sample's loss under `head` (the fused softmax form is
/// [`Step::SoftmaxWithLoss`]).
fn loss_kernel(head: Head) -> TokenStream {
    match head {
        Head::SoftmaxCrossEntropy => quote!(rt::loss::softmax_cross_entropy_n),
        Head::Logistic => quote!(rt::loss::logistic_cross_entropy_n),
        Head::SquaredError(_) => quote!(rt::loss::squared_error_n),
    }
}

/// `rt::conv::<name>_n`.
fn conv_kernel(name: &str) -> TokenStream {
    let f = format_ident!("{}_n", name);
    quote!(rt::conv::#f)
}

/// The forward call of a sliding-window layer on one sample (`x`, `o`: the operands).
fn window_call(
    cx: &Ctx,
    layer: usize,
    op: WindowOp,
    x: TokenStream,
    o: TokenStream,
) -> TokenStream {
    let f = conv_kernel(op.kernels().0);
    let g = cx.window_const(layer);
    if op.has_params() {
        let n = &cx.names.layers[layer];
        let (w, b) = (ident(&n.weights), ident(&n.bias));
        quote!(#f(&self.#w, &self.#b, #x, #o, &#g);)
    } else {
        quote!(#f(#x, #o, &#g);)
    }
}

/// The gradient accumulation of a convolution on one sample (nothing for a pooling).
fn window_acc_call(
    cx: &Ctx,
    layer: usize,
    op: WindowOp,
    d: TokenStream,
    x: TokenStream,
) -> TokenStream {
    let Some(name) = op.kernels().1 else {
        return TokenStream::new();
    };
    let f = conv_kernel(name);
    let g = cx.window_const(layer);
    let n = &cx.names.layers[layer];
    let (w, b) = (ident(&n.weights), ident(&n.bias));
    quote!(#f(&mut grad.#w, &mut grad.#b, #d, #x, &#g);)
}

/// The backward call of a sliding-window layer on one sample: its input `x`, errors `d`, and
/// the errors below `o`.
fn window_back_call(
    cx: &Ctx,
    layer: usize,
    op: WindowOp,
    x: TokenStream,
    d: TokenStream,
    o: TokenStream,
) -> TokenStream {
    let f = conv_kernel(op.kernels().2);
    let g = cx.window_const(layer);
    let n = &cx.names.layers[layer];
    let w = ident(&n.weights);
    match op {
        WindowOp::Conv | WindowOp::Depthwise => quote!(#f(&self.#w, #d, #o, &#g);),
        WindowOp::MaxPool => quote!(#f(#x, #d, #o, &#g);),
        WindowOp::AveragePool => quote!(#f(#d, #o, &#g);),
    }
}

/// The per-sample name of a buffer, and whether it is a reference parameter (`x`, `y`, `out`)
/// rather than a local array.
struct Sample<'c, 'a> {
    cx: &'c Ctx<'a>,
    /// Inference writes the outputs to the `out` parameter.
    outputs_param: bool,
    /// Every working buffer is a reference bound by the caller (the two halves of inference).
    refs: bool,
}

impl Sample<'_, '_> {
    fn name(&self, buf: Buf) -> (Ident, bool) {
        let (n, param) = self.own_name(buf);
        (n, param || self.refs)
    }

    fn own_name(&self, buf: Buf) -> (Ident, bool) {
        let layers = &self.cx.names.layers;
        let layer = |l: usize| layers.get(l);
        let output = self.cx.plan.output;
        match buf {
            Buf::Input => (ident("x"), true),
            Buf::Target => (ident("y"), true),
            Buf::Standardized => (ident(super::ident::STANDARDIZED_INPUT), false),
            Buf::Act(l) if self.outputs_param && l == output => (ident("out"), true),
            Buf::Act(l) => (ident(layer(l).map_or("a", |n| &n.activations)), false),
            Buf::Logits => (ident(layer(output).map_or("z", |n| &n.logits)), false),
            Buf::Err(l) => (ident(layer(l).map_or("d", |n| &n.errors)), false),
        }
    }
    /// `&a` or `x`.
    fn r(&self, buf: Buf) -> TokenStream {
        match self.name(buf) {
            (n, true) => quote!(#n),
            (n, false) => quote!(&#n),
        }
    }
    /// `&mut a` or `out`.
    fn m(&self, buf: Buf) -> TokenStream {
        match self.name(buf) {
            (n, true) => quote!(#n),
            (n, false) => quote!(&mut #n),
        }
    }
    /// The array value: `a` or `*x`.
    fn value(&self, buf: Buf) -> TokenStream {
        match self.name(buf) {
            (n, true) => quote!(*#n),
            (n, false) => quote!(#n),
        }
    }
    /// The width constant of a buffer.
    fn width(&self, buf: Buf) -> Ident {
        match buf {
            Buf::Input | Buf::Standardized => ident("INPUTS"),
            Buf::Target | Buf::Logits => self.cx.width_const(self.cx.plan.output),
            Buf::Act(l) | Buf::Err(l) => self.cx.width_const(l),
        }
    }
}

/// `let mut b = [ZERO; W];` the first time a runtime call fills the local `b`; nothing for a
/// parameter or a local already declared.
fn declare(s: &Sample, declared: &mut Vec<Buf>, b: Buf) -> TokenStream {
    let (n, param) = s.name(b);
    if param || declared.contains(&b) {
        return TokenStream::new();
    }
    declared.push(b);
    let w = s.width(b);
    quote!(let mut #n = [ZERO; #w];)
}

/// Where an element-form result goes: a new local (mutable or not) or a parameter.
fn bind(s: &Sample, buf: Buf, mutable: bool, value: TokenStream) -> TokenStream {
    match s.name(buf) {
        (n, true) => quote!(*#n = #value;),
        (n, false) if mutable => quote!(let mut #n = #value;),
        (n, false) => quote!(let #n = #value;),
    }
}

/// The statements of a per-sample pass. With `tail_loss` the last step, a [`Step::Loss`], is
/// returned as the value of the block (no `let`); otherwise every loss is bound to `loss`.
/// `outputs_param`: the output layer's activations are the `out` parameter (inference).
pub(super) fn sample(
    cx: &Ctx,
    steps: &[Step],
    outputs_param: bool,
    tail_loss: bool,
) -> TokenStream {
    sample_with(cx, steps, outputs_param, tail_loss, false)
}

/// [`sample`], with every working buffer a reference bound by the caller when `refs`.
fn sample_with(
    cx: &Ctx,
    steps: &[Step],
    outputs_param: bool,
    tail_loss: bool,
    refs: bool,
) -> TokenStream {
    let s = Sample {
        cx,
        outputs_param,
        refs,
    };
    let mut declared: Vec<Buf> = Vec::new();
    let mut out = TokenStream::new();
    let mut k = 0;
    while let Some(step) = steps.get(k) {
        let rest = steps.get(k + 1..).unwrap_or(&[]);
        // Written again later: a value-form binding must be `let mut`.
        let rewritten = |b: Buf| rest.iter().any(|t| t.writes() == Some(b));
        let code = match *step {
            Step::Standardize { from, to } => {
                let d = declare(&s, &mut declared, to);
                let (mean, sd) = (
                    ident(super::ident::MEAN_FIELD),
                    ident(super::ident::STD_FIELD),
                );
                let (x, t) = (s.r(from), s.m(to));
                quote!(#d rt::standardize_n(#x, &self.#mean, &self.#sd, #t);)
            }
            Step::Affine { layer, input, out } => {
                if cx.unrolled_at(layer) {
                    declared.push(out);
                    bind(
                        &s,
                        out,
                        rewritten(out),
                        affine_unrolled(cx, &s, layer, input),
                    )
                } else {
                    let d = declare(&s, &mut declared, out);
                    let n = &cx.names.layers[layer];
                    let (w, b) = (ident(&n.weights), ident(&n.bias));
                    let (x, o) = (s.r(input), s.m(out));
                    quote!(#d rt::affine_n(&self.#w, &self.#b, #x, #o);)
                }
            }
            Step::Copy { from, to } => {
                declared.push(to);
                bind(&s, to, rewritten(to), s.value(from))
            }
            Step::Activate { act, buf } => act_call(cx, act, false, false, s.m(buf)),
            Step::SoftmaxWithLoss { logits, out } => {
                let d = declare(&s, &mut declared, out);
                let (z, a) = (s.r(logits), s.m(out));
                quote!(#d let loss = rt::loss::softmax_with_cross_entropy_n(#z, y, #a);)
            }
            Step::Loss { head, operand } => {
                let f = loss_kernel(head);
                let v = s.r(operand);
                if tail_loss && rest.is_empty() {
                    quote!(#f(#v, y))
                } else {
                    quote!(let loss = #f(#v, y);)
                }
            }
            Step::OutputError { out: a, err } => {
                let d = declare(&s, &mut declared, err);
                let (a, e) = (s.r(a), s.m(err));
                quote!(#d rt::loss::output_error_n(#a, y, #e);)
            }
            Step::ActivationGrad { act, act_of, err } => {
                let args = {
                    let (a, e) = (s.r(act_of), s.m(err));
                    quote!(#a, #e)
                };
                act_call(cx, act, true, false, args)
            }
            Step::OuterAcc { layer, err, input } => {
                let n = &cx.names.layers[layer];
                let w = ident(&n.weights);
                if cx.unrolled_at(layer) {
                    // The bias accumulation of the same layer joins the element block.
                    if let Some(Step::AddAcc { layer: l, .. }) = rest.first() {
                        if *l == layer {
                            k += 1;
                        }
                    }
                    accumulate_unrolled(cx, &s, layer, err, input)
                } else {
                    let (d, x) = (s.r(err), s.r(input));
                    quote!(rt::outer_acc_n(&mut grad.#w, #d, #x);)
                }
            }
            Step::AddAcc { layer, err } => {
                let b = ident(&cx.names.layers[layer].bias);
                let d = s.r(err);
                quote!(rt::add_acc_n(&mut grad.#b, #d);)
            }
            Step::Window {
                layer,
                op,
                input,
                out,
            } => {
                let d = declare(&s, &mut declared, out);
                let call = window_call(cx, layer, op, s.r(input), s.m(out));
                quote!(#d #call)
            }
            Step::WindowAcc {
                layer,
                op,
                err,
                input,
            } => window_acc_call(cx, layer, op, s.r(err), s.r(input)),
            Step::WindowBack {
                layer,
                op,
                input,
                err,
                out,
            } => {
                let d = declare(&s, &mut declared, out);
                let call = window_back_call(cx, layer, op, s.r(input), s.r(err), s.m(out));
                quote!(#d #call)
            }
            Step::Back { layer, err, out } => {
                if cx.unrolled_at(layer) {
                    declared.push(out);
                    bind(&s, out, rewritten(out), back_unrolled(cx, &s, layer, err))
                } else {
                    let d = declare(&s, &mut declared, out);
                    let w = ident(&cx.names.layers[layer].weights);
                    let (e, o) = (s.r(err), s.m(out));
                    quote!(#d rt::back_n(&self.#w, #e, #o);)
                }
            }
        };
        out.extend(code);
        k += 1;
    }
    out
}

/// The inference pass over two halves of working memory, `even` and `odd`, written in turn. A
/// stage is the steps that write one buffer (its kernel call, then its activation in place);
/// stage `k` reads the buffer of stage `k - 1` from one half and writes its own into the first
/// values of the other, as fixed-size views (`first_chunk`, whose lengths fit by construction:
/// each half is as long as the longest buffer it holds). So inference holds the two halves and
/// no other buffer: what `report` counts (`Plan::inference_halves`). The first stage reads `x`,
/// the last writes the `out` parameter.
pub(super) fn scoped(cx: &Ctx, steps: &[Step]) -> TokenStream {
    let s = Sample {
        cx,
        outputs_param: true,
        refs: false,
    };
    let mut stages: Vec<&[Step]> = Vec::new();
    let mut start = 0;
    for (i, step) in steps.iter().enumerate() {
        if i > start && starts_stage(step) {
            stages.extend(steps.get(start..i));
            start = i;
        }
    }
    stages.extend(steps.get(start..));
    let half = |k: usize| {
        if k.is_multiple_of(2) {
            ident("even")
        } else {
            ident("odd")
        }
    };
    let mut out = TokenStream::new();
    let (even, odd) = cx.plan.inference_halves();
    for (k, n) in [even, odd].into_iter().enumerate() {
        if n > 0 {
            let (h, n) = (half(k), super::usize_lit(n));
            out.extend(quote!(let mut #h = [ZERO; #n];));
        }
    }
    for (k, stage) in stages.iter().enumerate() {
        let body = sample_with(cx, stage, true, false, true);
        let written = stage.first().and_then(Step::writes);
        let read = stage.first().and_then(Step::reads_buffer);
        let mut views = Vec::new();
        if let Some(r) = read.filter(|&r| !s.name(r).1) {
            let (n, w) = (s.name(r).0, s.width(r));
            let h = half(k + 1);
            views.push((quote!(#n), quote!(#h.first_chunk::<#w>())));
        }
        if let Some(wb) = written.filter(|&wb| !s.name(wb).1) {
            let (n, w) = (s.name(wb).0, s.width(wb));
            let h = half(k);
            views.push((quote!(#n), quote!(#h.first_chunk_mut::<#w>())));
        }
        out.extend(match views.as_slice() {
            [] => body,
            [(n, v)] => quote! {
                if let Some(#n) = #v {
                    #body
                }
            },
            _ => {
                let names = views.iter().map(|(n, _)| quote!(Some(#n)));
                let vals = views.iter().map(|(_, v)| v);
                quote! {
                    if let (#(#names),*) = (#(#vals),*) {
                        #body
                    }
                }
            }
        });
    }
    out
}

/// True for a step that writes a buffer anew (the start of a stage of [`scoped`]).
fn starts_stage(step: &Step) -> bool {
    matches!(
        step,
        Step::Standardize { .. } | Step::Affine { .. } | Step::Window { .. } | Step::Copy { .. }
    )
}

/// `z_j = lane_sum(w_j, u) + b_j` of layer `layer`, as an array expression over destructured
/// elements, in the runtime's order (see [`lane_sum`]).
fn affine_unrolled(cx: &Ctx, s: &Sample, layer: usize, input: Buf) -> TokenStream {
    let l = &cx.model.layers[layer];
    let n = &cx.names.layers[layer];
    let (w, b) = (ident(&n.weights), ident(&n.bias));
    let wpat = matrix_pattern("w", l.width, l.fan_in);
    let bs = vector_names("b", l.width);
    let us = vector_names("u", l.fan_in);
    let rows = (0..l.width).map(|j| {
        let products = (0..l.fan_in).map(|k| {
            let wk = format_ident!("w{}_{}", j, k);
            let uk = &us[k];
            quote!(#wk * #uk)
        });
        let sum = lane_sum(products.collect());
        let bj = &bs[j];
        quote!(#sum + #bj)
    });
    let inval = s.value(input);
    quote! {{
        let #wpat = self.#w;
        let [#(#bs),*] = self.#b;
        let [#(#us),*] = #inval;
        [#(#rows),*]
    }}
}

/// `g_ji += d_j * u_i; c_j += d_j` of layer `layer` (the runtime's operations, element by
/// element).
fn accumulate_unrolled(cx: &Ctx, s: &Sample, layer: usize, err: Buf, input: Buf) -> TokenStream {
    let l = &cx.model.layers[layer];
    let n = &cx.names.layers[layer];
    let (w, b) = (ident(&n.weights), ident(&n.bias));
    let es = vector_names("e", l.width);
    let us = vector_names("u", l.fan_in);
    let cs = vector_names("c", l.width);
    let gpat = matrix_pattern("g", l.width, l.fan_in);
    let outer = (0..l.width).flat_map(|j| {
        let ej = es[j].clone();
        let us = us.clone();
        (0..l.fan_in).map(move |k| {
            let g = format_ident!("g{}_{}", j, k);
            let u = &us[k];
            quote!(*#g += #ej * #u;)
        })
    });
    let bias = cs.iter().zip(&es).map(|(c, e)| quote!(*#c += #e;));
    let (d, inval) = (s.value(err), s.value(input));
    quote! {{
        let [#(#es),*] = #d;
        let [#(#us),*] = #inval;
        let #gpat = &mut grad.#w;
        #(#outer)*
        let [#(#cs),*] = &mut grad.#b;
        #(#bias)*
    }}
}

/// `out_k = ((ZERO + w_0k e_0) + w_1k e_1) + ...` of layer `layer` (the runtime's order).
fn back_unrolled(cx: &Ctx, s: &Sample, layer: usize, err: Buf) -> TokenStream {
    let l = &cx.model.layers[layer];
    let w = ident(&cx.names.layers[layer].weights);
    let es = vector_names("e", l.width);
    let wpat = matrix_pattern("w", l.width, l.fan_in);
    let cols = (0..l.fan_in).map(|k| {
        let terms = (0..l.width).map(|j| {
            let wjk = format_ident!("w{}_{}", j, k);
            let ej = &es[j];
            quote!(+ #wjk * #ej)
        });
        quote!(ZERO #(#terms)*)
    });
    let d = s.value(err);
    quote! {{
        let #wpat = self.#w;
        let [#(#es),*] = #d;
        [#(#cols),*]
    }}
}

/// The sum of `products` in the order of `rt::affine`: `sinew_runtime::linalg::LANES` lane sums
/// from `ZERO`, product `i` into lane `i % LANES`, folded by `sinew_runtime::linalg::fold_lanes`, the one definition of the fold order. A
/// lane that receives no product stays `+0` and is left out of the fold: every lane sum starts at
/// `+0` and so is never `-0`, and adding `+0` to anything else but `-0` changes nothing.
fn lane_sum(products: Vec<TokenStream>) -> TokenStream {
    const LANES: usize = sinew_runtime::linalg::LANES;
    let mut lanes: [Option<TokenStream>; LANES] = Default::default();
    for (i, p) in products.into_iter().enumerate() {
        if let Some(lane) = lanes.get_mut(i % LANES) {
            *lane = Some(match lane.take() {
                None => quote!(ZERO + #p),
                Some(acc) => quote!(#acc + #p),
            });
        }
    }
    let fold = |a: Option<TokenStream>, b: Option<TokenStream>| match (a, b) {
        (Some(a), Some(b)) => Some(quote!((#a) + (#b))),
        (a, None) => a,
        (None, b) => b,
    };
    sinew_runtime::linalg::fold_lanes(lanes, fold).unwrap_or_else(|| quote!(ZERO))
}

/// `[[w0_0, w0_1], [w1_0, w1_1]]`.
fn matrix_pattern(prefix: &str, rows: usize, cols: usize) -> TokenStream {
    let rows = (0..rows).map(|j| {
        let cells = (0..cols).map(|k| format_ident!("{}{}_{}", prefix, j, k));
        quote!([#(#cells),*])
    });
    quote!([#(#rows),*])
}

/// `u0, u1, ...`.
fn vector_names(prefix: &str, n: usize) -> Vec<Ident> {
    (0..n).map(|k| format_ident!("{}{}", prefix, k)).collect()
}

/// The block name of a buffer: `xb`, `yb` or the scratch row slice.
pub(super) fn block_name(cx: &Ctx, buf: Buf) -> Ident {
    let s = Sample {
        cx,
        outputs_param: false,
        refs: false,
    };
    match buf {
        Buf::Input => ident("xb"),
        Buf::Target => ident("yb"),
        other => s.name(other).0,
    }
}

/// The statements of one block of the batch gradient: the plan's backprop steps in their batch
/// forms over slices of rows (`&mut [[Scalar; W]]`), the losses added to `sum` in sample order.
pub(super) fn block(cx: &Ctx, steps: &[Step]) -> TokenStream {
    let name = |b: Buf| block_name(cx, b);
    let mut out = TokenStream::new();
    for step in steps {
        let code = match *step {
            Step::Standardize { from, to } => {
                let (mean, sd) = (
                    ident(super::ident::MEAN_FIELD),
                    ident(super::ident::STD_FIELD),
                );
                let (x, t) = (name(from), name(to));
                quote! {
                    for (x, x0_row) in #x.iter().zip(#t.iter_mut()) {
                        rt::standardize_n(x, &self.#mean, &self.#sd, x0_row);
                    }
                }
            }
            Step::Affine { layer, input, out } => {
                let n = &cx.names.layers[layer];
                let (w, b) = (ident(&n.weights), ident(&n.bias));
                let (x, o) = (name(input), name(out));
                quote!(rt::affine_batch_n(&self.#w, &self.#b, #x, #o);)
            }
            Step::Copy { from, to } => {
                let (f, t) = (name(from), name(to));
                quote! {
                    for (a_row, z_row) in #t.iter_mut().zip(#f.iter()) {
                        *a_row = *z_row;
                    }
                }
            }
            Step::Activate { act, buf } => {
                let rows = name(buf);
                if act == Activation::Softmax {
                    quote! {
                        for row in #rows.iter_mut() {
                            rt::act::softmax(row);
                        }
                    }
                } else {
                    act_call(cx, act, false, false, quote!(#rows.as_flattened_mut()))
                }
            }
            Step::SoftmaxWithLoss { logits, out } => {
                let (z, a) = (name(logits), name(out));
                quote!(sum = rt::loss::softmax_cross_entropy_batch_n(#z, yb, #a, sum);)
            }
            Step::Loss { head, operand } => {
                let f = loss_kernel(head);
                let v = name(operand);
                let row = if operand == Buf::Logits {
                    ident("z_row")
                } else {
                    ident("a_row")
                };
                quote! {
                    for (#row, y) in #v.iter().zip(yb) {
                        sum += #f(#row, y);
                    }
                }
            }
            Step::OutputError { out: a, err } => {
                let (a, d) = (name(a), name(err));
                quote! {
                    for ((d_row, a_row), y) in #d.iter_mut().zip(#a.iter()).zip(yb) {
                        rt::loss::output_error_n(a_row, y, d_row);
                    }
                }
            }
            Step::ActivationGrad { act, act_of, err } => {
                let (a, d) = (name(act_of), name(err));
                if act == Activation::Softmax {
                    quote! {
                        for (a_row, d_row) in #a.iter().zip(#d.iter_mut()) {
                            rt::act::softmax_grad_n(a_row, d_row);
                        }
                    }
                } else {
                    act_call(cx, act, true, true, quote!(#a, #d))
                }
            }
            Step::OuterAcc { layer, err, input } => {
                let w = ident(&cx.names.layers[layer].weights);
                let (d, x) = (name(err), name(input));
                quote!(rt::outer_acc_batch_n(&mut grad.#w, #d, #x);)
            }
            Step::AddAcc { layer, err } => {
                let b = ident(&cx.names.layers[layer].bias);
                let d = name(err);
                quote!(rt::add_acc_batch_n(&mut grad.#b, #d);)
            }
            Step::Back { layer, err, out } => {
                let w = ident(&cx.names.layers[layer].weights);
                let (d, o) = (name(err), name(out));
                quote!(rt::back_batch_n(&self.#w, #d, #o);)
            }
            Step::Window {
                layer,
                op,
                input,
                out,
            } => {
                let (x, o) = (name(input), name(out));
                let call = window_call(cx, layer, op, quote!(x_row), quote!(o_row));
                quote! {
                    for (x_row, o_row) in #x.iter().zip(#o.iter_mut()) {
                        #call
                    }
                }
            }
            Step::WindowAcc {
                layer,
                op,
                err,
                input,
            } => {
                let (d, x) = (name(err), name(input));
                let call = window_acc_call(cx, layer, op, quote!(d_row), quote!(x_row));
                quote! {
                    for (d_row, x_row) in #d.iter().zip(#x.iter()) {
                        #call
                    }
                }
            }
            Step::WindowBack {
                layer,
                op,
                input,
                err,
                out,
            } => {
                let (x, d, o) = (name(input), name(err), name(out));
                let call =
                    window_back_call(cx, layer, op, quote!(x_row), quote!(d_row), quote!(o_row));
                // Only max pooling reads the layer's input on the way back.
                if op == WindowOp::MaxPool {
                    quote! {
                        for ((x_row, d_row), o_row) in #x.iter().zip(#d.iter()).zip(#o.iter_mut()) {
                            #call
                        }
                    }
                } else {
                    quote! {
                        for (d_row, o_row) in #d.iter().zip(#o.iter_mut()) {
                            #call
                        }
                    }
                }
            }
        };
        out.extend(code);
    }
    out
}
