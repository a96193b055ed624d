//! Generated code against the host engine (`sinew::engine`), which calls the same runtime
//! kernels in the same order: predictions, losses, gradients, costs and trainer steps must be
//! bit-identical, for every model in both scalar types (DESIGN.md, numerical conventions; the
//! check is on our own two back ends, the independent references are in `gradient_check.rs`,
//! `dual_numbers.rs` and `worked_example.rs`).

use sinew::engine::{self, Scratch};
use sinew_harness::host::*;
use sinew_harness::{Net, Visit};

/// Models above this size are exercised in `large_model.rs` through the in-place APIs only.
const MAX_PARAMETERS: usize = 20_000;

struct SameAsEngine {
    models: Vec<&'static str>,
}

impl Visit for SameAsEngine {
    fn visit<M: Net>(&mut self) {
        let model = model_of::<M>();
        // The check holds every structure by value, so it runs in its own stack frame, entered
        // only for small models.
        if model.parameters() <= MAX_PARAMETERS {
            same_as_engine::<M>(&model);
            self.models.push(M::NAME);
        }
    }
}

#[inline(never)]
fn same_as_engine<M: Net>(model: &sinew::ir::Model) {
    let mut p = generic_params::<M>(61);
    let ep = engine_params::<M, M::Scalar>(model, &mut p);
    let net = engine::Net::new(model);
    let mut s = Scratch::new(model);
    let (xs, ys) = data::<M>(model, 9, 62);
    let mut g = M::grad_zero();
    let mut eg = engine::Params::zero_gradient(model);
    for (x, y) in xs.iter().zip(&ys) {
        let mut out = vec![<M::Scalar as sinew_runtime::Real>::ZERO; model.output().width];
        net.predict(&ep, x.as_ref(), &mut s, &mut out)
            .expect("operands of the model's widths");
        assert_eq!(
            bits(p.forward(x).as_ref()),
            bits(&out),
            "{}: predict",
            M::NAME
        );
        let l = p.sample_loss(x, y);
        assert_eq!(
            bits(&[l]),
            bits(&[net
                .loss(&ep, x.as_ref(), y.as_ref(), &mut s)
                .expect("operands of the model's widths")])
        );
        let lb = p.sample_backprop(x, y, &mut g);
        let le = net
            .backprop(&ep, x.as_ref(), y.as_ref(), &mut eg, &mut s)
            .expect("operands of the model's widths");
        assert_eq!(bits(&[lb]), bits(&[le]), "{}: backprop loss", M::NAME);
    }
    p.finish(&mut g, xs.len());
    net.finish(&mut eg, &ep, xs.len())
        .expect("operands of the model's widths");
    let mut generated = Vec::new();
    M::grad_arrays(&g, &mut |a| generated.extend_from_slice(a));
    let host: Vec<M::Scalar> = eg
        .layers
        .iter()
        .flat_map(|l| l.weights.iter().chain(&l.bias).copied())
        .collect();
    assert_eq!(bits(&generated), bits(&host), "{}: gradient", M::NAME);
    let flat_x: Vec<M::Scalar> = xs.iter().flat_map(|x| x.as_ref().to_vec()).collect();
    let flat_y: Vec<M::Scalar> = ys.iter().flat_map(|y| y.as_ref().to_vec()).collect();
    assert_eq!(
        bits(&[p.batch_cost(&xs, &ys)]),
        bits(&[net
            .cost(&ep, &flat_x, &flat_y)
            .expect("operands of the model's widths")])
    );

    // Three optimizer steps of each trainer, from the same parameters.
    let mut t = M::trainer(p);
    let mut et = engine::Trainer::new(model, ep);
    for _ in 0..3 {
        let a = M::trainer_step(&mut t, &xs, &ys);
        let b = et
            .step(&flat_x, &flat_y)
            .expect("operands of the model's widths");
        assert_eq!(bits(&[a]), bits(&[b]), "{}: trainer cost", M::NAME);
    }
    let mut after = Vec::new();
    M::trainer_params(&t).arrays(&mut |a| after.extend_from_slice(a));
    let host: Vec<M::Scalar> = et
        .params
        .layers
        .iter()
        .flat_map(|l| l.weights.iter().chain(&l.bias).copied())
        .collect();
    assert_eq!(
        bits(&after),
        bits(&host),
        "{}: parameters after 3 steps",
        M::NAME
    );
}

#[test]
fn generated_code_and_engine_agree_bit_for_bit() {
    let mut v = SameAsEngine { models: Vec::new() };
    sinew_tests::for_each_model(&mut v);
    println!("bit-identical: {:?}", v.models);
    assert!(v.models.len() >= 14, "{:?}", v.models);
}
