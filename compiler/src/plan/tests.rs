use super::*;
use crate::ir::Activation::{Identity, Relu, Sigmoid, Softmax, Tanh};

fn model(body: &str) -> Model {
    let spec = if body.starts_with("input") {
        format!("model m\n{body}")
    } else {
        format!("model m\ninput x 3\n{body}")
    };
    match crate::check_source(&spec).model {
        Some(m) => m,
        None => panic!("spec does not check:\n{spec}"),
    }
}

/// The buffers a step reads (operands included).
fn reads(step: &Step) -> Vec<Buf> {
    match *step {
        Step::Standardize { from, .. } | Step::Copy { from, .. } => vec![from],
        Step::Affine { input, .. } => vec![input],
        Step::Activate { buf, .. } => vec![buf],
        Step::SoftmaxWithLoss { logits, .. } => vec![logits, Buf::Target],
        Step::Loss { operand, .. } => vec![operand, Buf::Target],
        Step::OutputError { out, .. } => vec![out, Buf::Target],
        Step::ActivationGrad { act_of, err, .. } => vec![act_of, err],
        Step::OuterAcc { err, input, .. } => vec![err, input],
        Step::AddAcc { err, .. } | Step::Back { err, .. } => vec![err],
        Step::Window { input, .. } => vec![input],
        Step::WindowAcc { err, input, .. } | Step::WindowBack { err, input, .. } => {
            vec![err, input]
        }
    }
}

/// Every step reads only the operands and buffers written before it in its pass, and writes
/// only buffers the plan lists.
fn assert_well_formed(plan: &Plan, steps: &[Step]) {
    let mut written = vec![Buf::Input, Buf::Target];
    for step in steps {
        for r in reads(step) {
            assert!(
                written.contains(&r),
                "{step:?} reads {r:?} before it is written"
            );
        }
        if let Some(w) = step.writes() {
            assert!(
                plan.width(w).is_some(),
                "{step:?} writes an unlisted buffer"
            );
            written.push(w);
        }
    }
}

#[test]
fn the_head_is_resolved_once_from_loss_and_output_activation() {
    let head =
        |out: &str, loss: &str| Plan::new(&model(&format!("output y {out}\nloss {loss}\n"))).head;
    assert_eq!(
        head("3 softmax", "cross_entropy"),
        Head::SoftmaxCrossEntropy
    );
    assert_eq!(head("1 sigmoid", "cross_entropy"), Head::Logistic);
    assert_eq!(head("2 tanh", "squared_error"), Head::SquaredError(Tanh));
    assert_eq!(
        head("2 identity", "squared_error"),
        Head::SquaredError(Identity)
    );
    assert_eq!(
        head("3 softmax", "squared_error"),
        Head::SquaredError(Softmax)
    );
}

#[test]
fn backprop_of_two_sigmoid_layers_is_the_textbook_order() {
    // Forward layer by layer, loss, output error, then from the output down: accumulate
    // `delta(l+1) a(l)^T`, propagate `W^T delta` and scale by `a (1 - a)`; the input layer gets
    // no error term (common practice: the standard backpropagation algorithm).
    let p = Plan::new(&model(
        "layer h 4 sigmoid\noutput y 1 sigmoid\nloss cross_entropy\n",
    ));
    let (x, h, y) = (Buf::Input, Buf::Act(0), Buf::Act(1));
    assert_eq!(
        p.backprop,
        vec![
            Step::Affine {
                layer: 0,
                input: x,
                out: h
            },
            Step::Activate {
                act: Sigmoid,
                buf: h
            },
            Step::Affine {
                layer: 1,
                input: h,
                out: Buf::Logits
            },
            Step::Copy {
                from: Buf::Logits,
                to: y
            },
            Step::Activate {
                act: Sigmoid,
                buf: y
            },
            Step::Loss {
                head: Head::Logistic,
                operand: Buf::Logits
            },
            Step::OutputError {
                out: y,
                err: Buf::Err(1)
            },
            Step::OuterAcc {
                layer: 1,
                err: Buf::Err(1),
                input: h
            },
            Step::AddAcc {
                layer: 1,
                err: Buf::Err(1)
            },
            Step::Back {
                layer: 1,
                err: Buf::Err(1),
                out: Buf::Err(0)
            },
            Step::ActivationGrad {
                act: Sigmoid,
                act_of: h,
                err: Buf::Err(0)
            },
            Step::OuterAcc {
                layer: 0,
                err: Buf::Err(0),
                input: x
            },
            Step::AddAcc {
                layer: 0,
                err: Buf::Err(0)
            },
        ]
    );
    assert_eq!(
        p.params,
        vec![
            ParamArray::Weights(0),
            ParamArray::Bias(0),
            ParamArray::Weights(1),
            ParamArray::Bias(1)
        ]
    );
}

#[test]
fn softmax_with_cross_entropy_fuses_outputs_and_loss_in_backprop_only() {
    let p = Plan::new(&model("output y 3 softmax\nloss cross_entropy\n"));
    assert!(p.backprop.contains(&Step::SoftmaxWithLoss {
        logits: Buf::Logits,
        out: Buf::Act(0)
    }));
    assert!(!p.backprop.iter().any(|s| matches!(s, Step::Loss { .. })));
    // The loss pass reads the logits and never computes the outputs.
    assert_eq!(
        p.loss.last(),
        Some(&Step::Loss {
            head: Head::SoftmaxCrossEntropy,
            operand: Buf::Logits
        })
    );
    assert!(!p.loss.iter().any(|s| s.writes() == Some(Buf::Act(0))));
}

#[test]
fn squared_error_scales_the_output_error_by_the_derivative() {
    let p = Plan::new(&model(
        "layer h 2 relu\noutput y 2 tanh\nloss squared_error\n",
    ));
    let k = p
        .backprop
        .iter()
        .position(|s| matches!(s, Step::OutputError { .. }))
        .expect("an output error");
    assert_eq!(
        p.backprop.get(k + 1),
        Some(&Step::ActivationGrad {
            act: Tanh,
            act_of: Buf::Act(1),
            err: Buf::Err(1)
        })
    );
    assert!(p.backprop.contains(&Step::ActivationGrad {
        act: Relu,
        act_of: Buf::Act(0),
        err: Buf::Err(0)
    }));
}

#[test]
fn identity_steps_are_left_out_and_standardize_comes_first() {
    let p = Plan::new(&model(
        "input x 3 standardize\nlayer h 2 identity\noutput y 1 identity\nloss squared_error\n",
    ));
    assert_eq!(
        p.inference.first(),
        Some(&Step::Standardize {
            from: Buf::Input,
            to: Buf::Standardized
        })
    );
    let identity = |s: &Step| {
        matches!(
            s,
            Step::Activate { act: Identity, .. } | Step::ActivationGrad { act: Identity, .. }
        )
    };
    for pass in [&p.inference, &p.loss, &p.backprop] {
        assert!(!pass.iter().any(identity));
    }
    assert_eq!(
        p.buffers.first().map(|b| (b.buf, b.width)),
        Some((Buf::Standardized, 3))
    );
}

#[test]
fn every_pass_of_every_sample_reads_only_what_it_wrote() {
    let root = concat!(env!("CARGO_MANIFEST_DIR"), "/..");
    let mut seen = 0;
    let dirs = ["samples", "tests/fixtures"].map(|d| std::path::Path::new(root).join(d));
    for entry in dirs
        .iter()
        .flat_map(|d| std::fs::read_dir(d).expect("spec folder"))
    {
        let path = entry.expect("entry").path();
        if path.extension().is_none_or(|e| e != "sinew") {
            continue;
        }
        let text = std::fs::read_to_string(&path).expect("readable spec");
        let Some(m) = crate::check_source(&text).model else {
            continue;
        };
        let p = Plan::new(&m);
        for pass in [&p.inference, &p.loss, &p.backprop] {
            assert_well_formed(&p, pass);
        }
        seen += 1;
    }
    assert!(seen >= 10, "only {seen} specs found");
}

#[test]
fn sliding_window_layers_lower_to_window_steps_and_poolings_have_no_parameters() {
    let m = model(
        "input w 12 x 2 unscaled\nlayer c conv 3 kernel 3 relu\nlayer p pool max 2\n\
         layer d depthwise kernel 2 tanh\noutput y 2 softmax\nloss cross_entropy\n",
    );
    let plan = Plan::new(&m);
    for pass in [&plan.inference, &plan.loss, &plan.backprop] {
        assert_well_formed(&plan, pass);
    }
    // Buffers hold the maps: 10 x 3, 5 x 3, 4 x 3.
    assert_eq!(plan.width(Buf::Act(0)), Some(30));
    assert_eq!(plan.width(Buf::Act(1)), Some(15));
    assert_eq!(plan.width(Buf::Err(2)), Some(12));
    assert_eq!(
        plan.inference[..3],
        [
            Step::Window {
                layer: 0,
                op: WindowOp::Conv,
                input: Buf::Input,
                out: Buf::Act(0)
            },
            Step::Activate {
                act: Relu,
                buf: Buf::Act(0)
            },
            Step::Window {
                layer: 1,
                op: WindowOp::MaxPool,
                input: Buf::Act(0),
                out: Buf::Act(1)
            },
        ]
    );
    // From the top: the pooling sends its errors down (reading its input for the maxima) and
    // has nothing to accumulate; the first layer sends nothing below it.
    let tail: Vec<Step> = plan
        .backprop
        .iter()
        .copied()
        .skip_while(|s| !matches!(s, Step::WindowBack { layer: 1, .. }))
        .collect();
    assert_eq!(
        tail,
        [
            Step::WindowBack {
                layer: 1,
                op: WindowOp::MaxPool,
                input: Buf::Act(0),
                err: Buf::Err(1),
                out: Buf::Err(0)
            },
            Step::ActivationGrad {
                act: Relu,
                act_of: Buf::Act(0),
                err: Buf::Err(0)
            },
            Step::WindowAcc {
                layer: 0,
                op: WindowOp::Conv,
                err: Buf::Err(0),
                input: Buf::Input
            },
        ]
    );
    assert_eq!(
        plan.params,
        [
            ParamArray::Weights(0),
            ParamArray::Bias(0),
            ParamArray::Weights(2),
            ParamArray::Bias(2),
            ParamArray::Weights(3),
            ParamArray::Bias(3),
        ]
    );
}
