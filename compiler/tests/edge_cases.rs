//! Numeric edge cases with defined behaviour, through the host engine (which generated code
//! matches bit for bit: `tests/tests/engine_bitwise.rs`, `tests-random/`). Each test states the
//! behaviour it pins; `tests/ROBUSTNESS.md` collects them.
//!
//! External facts used: IEEE 754 binary32/binary64 ranges (largest finite f32 about 3.4e38,
//! smallest subnormals 1.4e-45 and 4.9e-324; NaN compares false and propagates through
//! arithmetic), the handbook logistic loss `-[y ln a + (1 - y) ln(1 - a)]` with
//! `a = 1 / (1 + e^-z)`, and the central-difference gradient check (common practice).

use sinew::engine::{self, gradcheck, Scratch};
use sinew::ir::Model;
use sinew::weights::{FlatLayer, Standardization};
use sinew_runtime::Real;

fn model(src: &str) -> Model {
    let checked = sinew::check_source(src);
    assert!(!checked.has_errors(), "{:?}", checked.diagnostics);
    checked.model.expect("valid spec")
}

/// Parameters with every weight `w` and every bias `b`.
fn constant<T: Real>(m: &Model, w: f64, b: f64) -> engine::Params<T> {
    let layers: Vec<FlatLayer> = m
        .layers()
        .iter()
        .map(|l| FlatLayer {
            weights: vec![w; l.width * l.fan_in],
            bias: vec![b; l.width],
        })
        .collect();
    engine::Params::from_f64(&layers, None)
}

/// Alternating-sign weights `+-w` (so that sums of inputs do not all add up) and zero biases.
fn alternating<T: Real>(m: &Model, w: f64) -> engine::Params<T> {
    let layers: Vec<FlatLayer> = m
        .layers()
        .iter()
        .map(|l| {
            let n = l.width * l.fan_in;
            let weights = (0..n)
                .map(|k| if k % 3 == 1 { -w } else { w * 0.5 })
                .collect();
            FlatLayer {
                weights,
                bias: vec![0.0; l.width],
            }
        })
        .collect();
    engine::Params::from_f64(&layers, None)
}

/// Output, loss and finished gradient (all as f64) of one sample.
fn run<T: Real + Send + Sync>(
    m: &Model,
    p: &engine::Params<T>,
    x: &[f64],
    y: &[f64],
) -> (Vec<f64>, f64, Vec<f64>) {
    let net = engine::Net::<T>::new(m);
    let mut s = Scratch::new(m);
    let x: Vec<T> = x.iter().map(|&v| T::from_f64(v)).collect();
    let y: Vec<T> = y.iter().map(|&v| T::from_f64(v)).collect();
    let mut out = vec![T::ZERO; m.output().width];
    net.predict(p, &x, &mut s, &mut out)
        .expect("operands of the model's widths");
    let mut g = engine::Params::<T>::zero_gradient(m);
    let loss = net
        .backprop(p, &x, &y, &mut g, &mut s)
        .expect("operands of the model's widths");
    net.finish(&mut g, p, 1)
        .expect("operands of the model's widths");
    (
        out.iter().map(|v| v.to_f64()).collect(),
        loss.to_f64(),
        g.flat_f64(),
    )
}

const CLASSIFIER: &str = "model alarm\nSCALAR\ninput x 3\nlayer h 4 ACT\n\
                          output y OUT\nloss cross_entropy\n";

fn classifier(scalar: &str, act: &str, out: &str) -> Model {
    model(
        &CLASSIFIER
            .replace("SCALAR", &format!("scalar {scalar}"))
            .replace("ACT", act)
            .replace("OUT", out),
    )
}

#[test]
fn inputs_of_plus_minus_1e30_keep_classifiers_finite() {
    // Behaviour: with bounded hidden activations (sigmoid, tanh) or relu feeding a sigmoid or
    // softmax output trained by cross-entropy, inputs of +-1e30 give finite outputs in [0, 1],
    // a finite loss (about |z| for a confidently wrong unit) and a finite gradient, in f32
    // (largest finite value about 3.4e38) as in f64.
    for scalar in ["f32", "f64"] {
        for act in ["sigmoid", "tanh", "relu", "leaky_relu 0.1", "identity"] {
            for out in ["1 sigmoid", "3 softmax"] {
                let m = classifier(scalar, act, out);
                let n_out = m.output().width;
                for x in [
                    [1e30, -1e30, 1e30],
                    [-1e30, -1e30, -1e30],
                    [1e30, 0.0, 1e-30],
                ] {
                    let y = vec![1.0 / n_out as f64; n_out];
                    let y = if n_out == 1 { vec![1.0] } else { y };
                    let (o, loss, g) = if scalar == "f32" {
                        run::<f32>(&m, &alternating(&m, 1e-3), &x, &y)
                    } else {
                        run::<f64>(&m, &alternating(&m, 1e-3), &x, &y)
                    };
                    let what = format!("{scalar} {act} {out} x={x:?}");
                    assert!(o.iter().all(|v| (0.0..=1.0).contains(v)), "{what}: {o:?}");
                    assert!(loss.is_finite() && loss >= 0.0, "{what}: loss {loss}");
                    assert!(g.iter().all(|v| v.is_finite()), "{what}: gradient");
                }
            }
        }
    }
}

#[test]
fn inputs_of_1e30_overflow_an_f32_regressor_to_infinity_not_nan() {
    // Behaviour: squared error squares the output. An f32 regressor whose output reaches 1e30
    // overflows to +inf in the loss and in the weight gradients (1e30 * 1e30); the f64 model of
    // the same shape stays finite (1e60). No NaN appears on this path. Standardize the input,
    // or use f64, when features can be this large.
    let src = "model level\nSCALAR\ninput x 1\nlayer h 1 relu\noutput y 1 identity\n\
               loss squared_error\n";
    let m32 = model(&src.replace("SCALAR", "scalar f32"));
    let m64 = model(&src.replace("SCALAR", "scalar f64"));
    let (o, loss, g) = run::<f32>(&m32, &constant(&m32, 1.0, 0.0), &[1e30], &[0.0]);
    assert_eq!(o[0], f64::from(1e30f32));
    assert_eq!(loss, f64::INFINITY);
    // Layout: h weight, h bias, y weight, y bias.
    assert_eq!(g[0], f64::INFINITY);
    assert!(g.iter().all(|v| !v.is_nan()), "{g:?}");
    let (o, loss, g) = run::<f64>(&m64, &constant(&m64, 1.0, 0.0), &[1e30], &[0.0]);
    assert_eq!(o[0], 1e30);
    // The runtime's order: e = a - y, then e * e, then * 1/2 (1e30 is not exact in binary,
    // so its square is not the decimal 1e60).
    assert_eq!(loss, (1e30 * 1e30) * 0.5);
    assert!(g.iter().all(|v| v.is_finite()), "{g:?}");
}

#[test]
fn subnormal_inputs_and_weights_are_computed_not_flushed() {
    // Behaviour: subnormal values are ordinary IEEE 754 numbers on the host (no flush to
    // zero): an identity layer with weight 1 and bias 0 returns the subnormal input exactly,
    // and a whole network stays finite. (A device whose FPU flushes subnormals to zero can
    // differ here; that is the device's arithmetic, not the generated code's.)
    let src = "model tiny\nSCALAR\ninput x 1\noutput y 1 identity\nloss squared_error\n";
    let m64 = model(&src.replace("SCALAR", "scalar f64"));
    let m32 = model(&src.replace("SCALAR", "scalar f32"));
    let smallest64 = f64::from_bits(1); // 4.9e-324
    let smallest32 = f32::from_bits(1); // 1.4e-45
    let (o, loss, g) = run::<f64>(&m64, &constant(&m64, 1.0, 0.0), &[smallest64], &[0.0]);
    assert_eq!(o[0].to_bits(), smallest64.to_bits());
    assert_eq!(loss, 0.0); // 1/2 (4.9e-324)^2 underflows to 0
    assert_eq!(g[0], 0.0); // d = 4.9e-324, times x = 4.9e-324: 0
    assert_eq!(g[1].to_bits(), smallest64.to_bits()); // bias gradient = d
    let (o, _, g) = run::<f32>(
        &m32,
        &constant(&m32, 1.0, 0.0),
        &[f64::from(smallest32)],
        &[0.0],
    );
    assert_eq!((o[0] as f32).to_bits(), smallest32.to_bits());
    assert_eq!((g[1] as f32).to_bits(), smallest32.to_bits());
    // Subnormal weights through every activation: finite, no panic.
    for scalar in ["f32", "f64"] {
        for act in ["sigmoid", "tanh", "relu", "leaky_relu 0.01", "identity"] {
            for out in ["1 sigmoid", "3 softmax"] {
                let m = classifier(scalar, act, out);
                let y = vec![0.0; m.output().width];
                let (o, loss, g) = if scalar == "f32" {
                    run::<f32>(&m, &constant(&m, 1e-40, 1e-40), &[1e-39, -1e-42, 0.0], &y)
                } else {
                    run::<f64>(
                        &m,
                        &constant(&m, 1e-310, 1e-310),
                        &[1e-309, -1e-312, 0.0],
                        &y,
                    )
                };
                assert!(
                    o.iter().chain([&loss]).chain(&g).all(|v| v.is_finite()),
                    "{scalar} {act} {out}"
                );
            }
        }
    }
}

#[test]
fn nan_in_an_input_makes_every_output_nan_and_the_class_the_first() {
    // Behaviour (documented in tests/ROBUSTNESS.md): a NaN in any input feature reaches every
    // unit of the first layer (w * NaN is NaN even for w = 0) and so every output, whatever
    // the activations: relu and leaky_relu pass NaN on, sigmoid, tanh and softmax return NaN.
    // The loss is NaN and so is the output layer's gradient (a - y). Below it, relu's
    // derivative is 1 only where `a > 0`, which is false for NaN, so a relu layer's error is 0
    // and its weight gradient is 0 except in the NaN feature's column (0 * NaN); every other
    // activation passes NaN down, making the whole gradient NaN. `class_of` (and the
    // generated `classify`) then picks the first class, since no comparison with NaN is true.
    // The CSV reader (D07) and the weights reader (F06) refuse NaN, so on the host a NaN can
    // only come from the caller's own input array.
    for scalar in ["f32", "f64"] {
        for act in ["sigmoid", "tanh", "relu", "leaky_relu 0.1", "identity"] {
            for out in ["1 sigmoid", "3 softmax"] {
                let m = classifier(scalar, act, out);
                let y = vec![1.0; m.output().width];
                let x = [0.5, f64::NAN, -0.5];
                let (o, loss, g) = if scalar == "f32" {
                    run::<f32>(&m, &constant(&m, 0.0, 0.25), &x, &y)
                } else {
                    run::<f64>(&m, &constant(&m, 0.0, 0.25), &x, &y)
                };
                let what = format!("{scalar} {act} {out}");
                assert!(o.iter().all(|v| v.is_nan()), "{what}: {o:?}");
                assert!(loss.is_nan(), "{what}");
                // Layout: h weights (4 x 3), h bias (4), y weights, y bias.
                let (hidden, output) = g.split_at(16);
                assert!(output.iter().all(|v| v.is_nan()), "{what}: {output:?}");
                if act == "relu" {
                    for (k, v) in hidden.iter().enumerate() {
                        // Column 1 of the 4 x 3 weights holds the NaN feature.
                        let nan_column = k < 12 && k % 3 == 1;
                        assert_eq!(v.is_nan(), nan_column, "{what}: entry {k}: {v}");
                        if !nan_column {
                            assert_eq!(*v, 0.0, "{what}: entry {k}");
                        }
                    }
                } else {
                    assert!(hidden.iter().all(|v| v.is_nan()), "{what}: {hidden:?}");
                }
                assert_eq!(engine::eval::class_of(&o), 0, "{what}");
            }
        }
    }
    // With `standardize`: (NaN - mean) / std is NaN, the same result.
    let m = model(
        "model s\nscalar f64\ninput x 2 standardize\noutput y 1 sigmoid\nloss cross_entropy\n",
    );
    let layers = vec![FlatLayer {
        weights: vec![1.0, 1.0],
        bias: vec![0.0],
    }];
    let st = Standardization {
        mean: vec![0.0, 0.0],
        std: vec![1.0, 1.0],
    };
    let p = engine::Params::<f64>::from_f64(&layers, Some(&st));
    let (o, loss, _) = run::<f64>(&m, &p, &[f64::NAN, 0.0], &[1.0]);
    assert!(o[0].is_nan() && loss.is_nan());
}

#[test]
fn saturated_sigmoid_and_softmax_keep_cost_and_gradient_finite() {
    // Behaviour: cross-entropy is computed from the logits, so logits of +-1000 (f64) or
    // +-200 (f32, where e^89 already overflows) give a finite loss, exactly |z| for a
    // confidently wrong unit and exactly 0 for a confidently right one (its true value,
    // about e^-|z|, is below the smallest subnormal), and the output error a - y stays in
    // [-1, 1].
    let sig = |s: &str| {
        model(&format!(
            "model sat\nscalar {s}\ninput x 1\noutput y 1 sigmoid\nloss cross_entropy\n"
        ))
    };
    for (scalar, big) in [("f64", 1000.0), ("f32", 200.0)] {
        let m = sig(scalar);
        for (x, y, want) in [
            (1.0, 0.0, big),
            (1.0, 1.0, 0.0),
            (-1.0, 1.0, big),
            (-1.0, 0.0, 0.0),
        ] {
            let (o, loss, g) = if scalar == "f32" {
                run::<f32>(&m, &constant(&m, big, 0.0), &[x], &[y])
            } else {
                run::<f64>(&m, &constant(&m, big, 0.0), &[x], &[y])
            };
            assert!((0.0..=1.0).contains(&o[0]));
            assert_eq!(loss, want, "{scalar} x {x} y {y}");
            assert!(g.iter().all(|v| v.is_finite() && v.abs() <= 1.0), "{g:?}");
        }
    }
    for (scalar, big) in [("f64", 1000.0), ("f32", 200.0)] {
        let m = model(&format!(
            "model sat\nscalar {scalar}\ninput x 3\noutput y 3 softmax\nloss cross_entropy\n"
        ));
        // W = big * I: the logits are big * x.
        let mut w = vec![0.0; 9];
        for k in 0..3 {
            w[4 * k] = big;
        }
        let layers = vec![FlatLayer::new(w, vec![0.0; 3])];
        let x = [1.0, -1.0, 0.0];
        for (y, want) in [([0.0, 1.0, 0.0], 2.0 * big), ([1.0, 0.0, 0.0], 0.0)] {
            let (o, loss, g) = if scalar == "f32" {
                run::<f32>(&m, &engine::Params::from_f64(&layers, None), &x, &y)
            } else {
                run::<f64>(&m, &engine::Params::from_f64(&layers, None), &x, &y)
            };
            assert!(o.iter().all(|v| (0.0..=1.0).contains(v)));
            assert_eq!(loss, want, "{scalar} {y:?}");
            assert!(g.iter().all(|v| v.is_finite() && v.abs() <= 1.0), "{g:?}");
        }
    }
    // Saturated sigmoid hidden units: the gradient below them vanishes (a (1 - a) = 0) but
    // stays finite; the network still computes.
    let m = classifier("f64", "sigmoid", "1 sigmoid");
    let (_, loss, g) = run::<f64>(&m, &constant(&m, 500.0, 0.0), &[1.0, 1.0, 1.0], &[0.0]);
    assert!(loss.is_finite());
    assert!(g.iter().all(|v| v.is_finite()));
    assert!(g[..12].iter().all(|&v| v == 0.0), "{:?}", &g[..12]);
}

#[test]
fn dead_relu_units_get_exactly_zero_gradient_and_stay_put() {
    // Behaviour: a relu unit with z <= 0 on every sample has g'(z) = 0 (the runtime's
    // convention at z = 0 too), so its incoming weights and bias get a gradient of exactly 0,
    // the weights out of it get 0 (its activation is 0), and a plain gradient descent step
    // leaves all of them bit for bit unchanged.
    let m = model(
        "model dead\nscalar f64\ninput x 2\nlayer h 3 relu\noutput y 1 identity\n\
         loss squared_error\ntrain sgd rate 0.5\n",
    );
    // Unit 0 alive (bias +1), units 1 and 2 dead (bias -10; unit 2 exactly at z = 0 for x = 0).
    let layers = vec![
        FlatLayer::new(vec![0.5, 0.5, 0.5, 0.5, 0.0, 0.0], vec![1.0, -10.0, 0.0]),
        FlatLayer::new(vec![1.0, -1.0, 2.0], vec![0.1]),
    ];
    let p = engine::Params::<f64>::from_f64(&layers, None);
    let xs = [0.3, -0.2, 0.0, 0.0, 1.0, 1.0];
    let ys = [1.0, -1.0, 0.5];
    let mut g = engine::Params::<f64>::zero_gradient(&m);
    let cost = engine::batch::gradient_into(&engine::Net::new(&m), &p, &xs, &ys, &mut g)
        .expect("whole samples")
        .expect("a non-empty batch");
    assert!(cost.is_finite());
    let h = &g.layers[0];
    assert_eq!(&h.weights[2..], &[0.0; 4]);
    assert_eq!(&h.bias[1..], &[0.0; 2]);
    assert_ne!(h.weights[0], 0.0);
    let y = &g.layers[1];
    assert_eq!(&y.weights[1..], &[0.0; 2]);
    let mut t = engine::Trainer::new(&m, p.clone());
    t.step(&xs, &ys).expect("whole samples");
    let after = &t.params.layers;
    for k in 2..6 {
        assert_eq!(
            after[0].weights[k].to_bits(),
            p.layers[0].weights[k].to_bits()
        );
    }
    for k in 1..3 {
        assert_eq!(after[0].bias[k].to_bits(), p.layers[0].bias[k].to_bits());
        assert_eq!(
            after[1].weights[k].to_bits(),
            p.layers[1].weights[k].to_bits()
        );
    }
}

#[test]
fn a_zero_penalty_is_exactly_no_penalty() {
    // Behaviour: `penalty l2 0` and `penalty l1 0` are accepted with warning W0104 and give
    // the same cost and gradient, bit for bit, as `penalty none`.
    let base = "model z\nscalar f64\ninput x 3 unscaled\nlayer h 4 tanh\noutput y 2 identity\n\
                loss squared_error\n";
    let none = model(&format!("{base}penalty none\n"));
    let xs = [0.5, -1.0, 2.0, 1.5, 0.25, -0.75];
    let ys = [0.1, -0.2, 0.3, 0.4];
    let p = alternating::<f64>(&none, 0.7);
    let grad = |m: &Model| {
        let mut g = engine::Params::<f64>::zero_gradient(m);
        let c = engine::batch::gradient_into(&engine::Net::new(m), &p, &xs, &ys, &mut g)
            .expect("whole samples")
            .expect("non-empty");
        (
            c.to_bits(),
            g.flat_f64().iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
        )
    };
    let reference = grad(&none);
    for pen in ["l2 0", "l1 0", "l2 0.0", "l1 0e5"] {
        let src = format!("{base}penalty {pen}\n");
        let checked = sinew::check_source(&src);
        let codes: Vec<&str> = checked
            .diagnostics
            .iter()
            .map(|d| d.code.as_str())
            .collect();
        assert_eq!(codes, ["W0104"], "{pen}");
        let m = checked.model.expect("a warning keeps the model");
        assert_eq!(grad(&m), reference, "{pen}");
    }
}

#[test]
fn a_one_unit_cross_entropy_output_is_logistic_regression() {
    // Behaviour: `output y 1 sigmoid` with `loss cross_entropy` is the per-unit logistic loss,
    // equal to the handbook form -[y ln a + (1 - y) ln(1 - a)], a = 1 / (1 + e^-z), wherever
    // that form is itself accurate; its output error is a - y; it passes the f64 gradient
    // check; its two classes are 0 and 1 with threshold 0.5.
    let m = model(
        "model door\nscalar f64\ninput x 2\noutput open 1 sigmoid classes shut, open\n\
         loss cross_entropy\n",
    );
    let net = engine::Net::<f64>::new(&m);
    let mut s = Scratch::new(&m);
    let layers = vec![FlatLayer::new(vec![1.5, -0.75], vec![0.25])];
    let p = engine::Params::<f64>::from_f64(&layers, None);
    for (x, y) in [
        ([0.3, 0.8], 1.0),
        ([-2.0, 1.0], 0.0),
        ([1.0, 1.0], 0.3),
        ([4.0, -4.0], 1.0),
    ] {
        let z: f64 = 1.5 * x[0] - 0.75 * x[1] + 0.25;
        let a = 1.0 / (1.0 + (-z).exp());
        let handbook = -(y * a.ln() + (1.0 - y) * (1.0 - a).ln());
        let loss = net
            .loss(&p, &x, &[y], &mut s)
            .expect("operands of the model's widths");
        assert!(
            (loss - handbook).abs() <= 1e-10 * handbook,
            "{loss} vs {handbook}"
        );
        let mut out = [0.0];
        net.predict(&p, &x, &mut s, &mut out)
            .expect("operands of the model's widths");
        assert_eq!(engine::eval::class_of(&out), usize::from(a > 0.5));
        let mut g = engine::Params::<f64>::zero_gradient(&m);
        net.backprop(&p, &x, &[y], &mut g, &mut s)
            .expect("operands of the model's widths");
        // dJ/db = a - y for one sample.
        assert!((g.layers[0].bias[0] - (a - y)).abs() < 1e-15);
    }
    let xs = [0.3, 0.8, -2.0, 1.0, 1.0, 1.0, 0.5, -0.5];
    let ys = [1.0, 0.0, 0.3, 1.0];
    let opts = gradcheck::CheckOptions {
        step: 1e-5,
        rtol: 1e-6,
        atol: 1e-9,
        max_per_layer: 100,
        seed: 1,
    };
    for l in gradcheck::check(&m, &p, &xs, &ys, &opts).expect("whole samples") {
        assert_eq!(l.failures, 0, "{l:?}");
        assert_eq!(l.checked, 3);
    }
}

#[test]
fn a_confident_correct_logistic_unit_keeps_its_relative_accuracy() {
    // Behaviour: the loss of a confidently correct unit is ln(1 + e^-|z|), about e^-|z|, and
    // the runtime returns it to full relative accuracy in both scalars (computed as
    // `(max(z, 0) - y z) + ln(1 + e^-|z|)`, in which the first term is exactly 0 for such a
    // unit). The form `softplus(z) - y z` cancels: in f32 it returned 0 from |z| of about 15
    // on and lost digits well before. Reference: ln(1 + e^-|z|) with the standard library's `exp`
    // and `ln_1p`, in the same scalar type.
    use sinew_runtime::loss::logistic_cross_entropy_n;
    for k in 1..=60 {
        let z = f64::from(k);
        let truth = (-z).exp().ln_1p();
        for (zz, y) in [(z, 1.0), (-z, 0.0)] {
            let got = logistic_cross_entropy_n(&[zz], &[y]);
            assert!(
                (got - truth).abs() <= 4.0 * f64::EPSILON * truth,
                "f64 z {zz} y {y}: {got:e} vs {truth:e}"
            );
            let got32 = f64::from(logistic_cross_entropy_n(&[zz as f32], &[y as f32]));
            let truth32 = f64::from((-(z as f32)).exp().ln_1p());
            assert!(
                (got32 - truth32).abs() <= 4.0 * f64::from(f32::EPSILON) * truth32,
                "f32 z {zz} y {y}: {got32:e} vs {truth32:e}"
            );
        }
    }
}
