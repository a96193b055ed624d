//! Published facts and handbook formulas, checked through the compiler's engine: each test
//! writes a spec, checks it with `sinew::check_source`, and evaluates, differentiates, trains or
//! initialises it with `sinew::engine` (the runtime's own unit tests check some of the same facts
//! on the kernels alone; these go through the spec, the IR and the engine's call order).
//!
//! Each test names its source. "(from memory)" marks values quoted from memory of the published
//! text; each of those also agrees with the formula recomputed here in f64.

use sinew::engine::train::Samples;
use sinew::engine::{batch, Net, Params, Scratch, Trainer};
use sinew::ir::Model;
use sinew::weights::FlatLayer;

fn model(src: &str) -> Model {
    let checked = sinew::check_source(src);
    assert!(
        checked.diagnostics.iter().all(|d| !d.is_error()),
        "{src}\n{:?}",
        checked.diagnostics
    );
    checked.model.expect("the spec checks")
}

/// The finished batch gradient and cost J of `samples` (row-major).
fn gradient(m: &Model, p: &Params<f64>, xs: &[f64], ys: &[f64]) -> (f64, Params<f64>) {
    let net = Net::<f64>::new(m);
    let mut g = Params::zero_gradient(m);
    let cost = batch::gradient_into(&net, p, xs, ys, &mut g)
        .expect("whole samples")
        .expect("a non-empty batch");
    (cost, g)
}

fn identity_matrix(n: usize) -> Vec<f64> {
    (0..n * n)
        .map(|k| if k / n == k % n { 1.0 } else { 0.0 })
        .collect()
}

/// sigmoid'(0) = 1/4, from sigma'(z) = sigma(z) (1 - sigma(z)) and sigma(0) = 1/2 (handbook
/// calculus of the logistic function; common practice). With all parameters zero, z = 0; the
/// squared-error target -1/2 makes the output error a - y = 1, so dJ/db is g'(0) itself: at the
/// output layer, and through a hidden layer (identity output with weight 1).
#[test]
fn sigmoid_derivative_at_zero_is_one_quarter() {
    let m = model(
        "model s\nscalar f64\ninput x 1\noutput y 1 sigmoid\nloss squared_error\npenalty none\n",
    );
    let p = Params::<f64>::zeroed(&m);
    let net = Net::<f64>::new(&m);
    let mut out = [0.0];
    net.predict(&p, &[0.7], &mut Scratch::new(&m), &mut out)
        .expect("operands of the model's widths");
    assert_eq!(out, [0.5], "sigmoid(0) = 1/2");
    let (_, g) = gradient(&m, &p, &[0.7], &[-0.5]);
    assert_eq!(g.layers[0].bias, [0.25]);

    let m = model(
        "model h\nscalar f64\ninput x 1\nlayer h 1 sigmoid\noutput y 1 identity\nloss squared_error\npenalty none\n",
    );
    let mut p = Params::<f64>::zeroed(&m);
    p.layers[1].weights = vec![1.0].into();
    // a_h = 1/2, output 1/2, target -1/2: output error 1, hidden error 1 * 1 * g'(0).
    let (_, g) = gradient(&m, &p, &[0.7], &[-0.5]);
    assert_eq!(g.layers[0].bias, [0.25]);
}

/// tanh'(0) = 1, from tanh'(z) = 1 - tanh(z)^2 and tanh(0) = 0 (handbook calculus; common
/// practice). Zero parameters give z = 0, the target -1 gives output error 1.
#[test]
fn tanh_derivative_at_zero_is_one() {
    let m = model(
        "model t\nscalar f64\ninput x 1\noutput y 1 tanh\nloss squared_error\npenalty none\n",
    );
    let p = Params::<f64>::zeroed(&m);
    let (_, g) = gradient(&m, &p, &[0.3], &[-1.0]);
    assert_eq!(g.layers[0].bias, [1.0]);

    let m = model("model u\nscalar f64\ninput x 1\nlayer h 1 tanh\noutput y 1 identity\nloss squared_error\npenalty none\n");
    let mut p = Params::<f64>::zeroed(&m);
    p.layers[1].weights = vec![1.0].into();
    let (_, g) = gradient(&m, &p, &[0.3], &[-1.0]);
    assert_eq!(g.layers[0].bias, [1.0]);
}

/// The softmax of known vectors, fed through an identity weight matrix so that z = x:
/// softmax(1, 2, 3) = (0.09003057, 0.24472847, 0.66524096) (a common textbook example; values
/// from memory), and softmax(1, 2, 3, 4, 1, 2, 3) = (0.024, 0.064, 0.175, 0.475, 0.024, 0.064,
/// 0.175) to three decimals (the worked example of the Wikipedia article "Softmax function";
/// values from memory). Both also against the definition e^(x_j) / sum_k e^(x_k) with std's
/// `exp`, to 4 ulps.
#[test]
fn softmax_of_known_vectors() {
    let cases: [(&[f64], &[f64], f64); 2] = [
        (
            &[1.0, 2.0, 3.0],
            &[0.09003057, 0.24472847, 0.66524096],
            5e-9,
        ),
        (
            &[1.0, 2.0, 3.0, 4.0, 1.0, 2.0, 3.0],
            &[0.024, 0.064, 0.175, 0.475, 0.024, 0.064, 0.175],
            5e-4,
        ),
    ];
    for (x, published, tolerance) in cases {
        let n = x.len();
        let m = model(&format!(
            "model soft\nscalar f64\ninput x {n}\noutput y {n} softmax\nloss cross_entropy\npenalty none\n"
        ));
        let p = Params::<f64>::from_f64(&[FlatLayer::new(identity_matrix(n), vec![0.0; n])], None);
        let mut out = vec![0.0; n];
        Net::<f64>::new(&m)
            .predict(&p, x, &mut Scratch::new(&m), &mut out)
            .expect("operands of the model's widths");
        let total: f64 = x.iter().map(|v| v.exp()).sum();
        for ((&a, &want), &xj) in out.iter().zip(published).zip(x) {
            assert!(
                (a - want).abs() <= tolerance,
                "softmax {x:?}: {a} vs published {want}"
            );
            let exact = xj.exp() / total;
            assert!(
                (a - exact).abs() <= 4.0 * f64::EPSILON * exact,
                "softmax {x:?}: {a} vs {exact}"
            );
        }
    }
}

/// log-sum-exp(1000, 1000) = 1000 + ln 2 (algebra: ln(2 e^1000) = 1000 + ln 2), although e^1000
/// overflows f64 (common practice: the max-shifted form). Through the engine: a softmax
/// cross-entropy output with logits (1000, 1000) and target (1, 0) has loss lse(z) - z_1, the
/// subtraction being exact (Sterbenz lemma); the probabilities are exactly 1/2 and the gradient
/// a - y finite. A logistic unit with logit 1000 and target 0 costs softplus(1000) = 1000.
#[test]
fn log_sum_exp_of_two_thousands_does_not_overflow() {
    let m = model(
        "model lse\nscalar f64\ninput x 2\noutput y 2 softmax\nloss cross_entropy\npenalty none\n",
    );
    let p = Params::<f64>::from_f64(&[FlatLayer::new(identity_matrix(2), vec![0.0; 2])], None);
    let net = Net::<f64>::new(&m);
    let mut s = Scratch::new(&m);
    let x = [1000.0, 1000.0];
    let loss = net
        .loss(&p, &x, &[1.0, 0.0], &mut s)
        .expect("operands of the model's widths");
    assert!(loss.is_finite());
    assert_eq!(loss + 1000.0, 1000.0 + std::f64::consts::LN_2);
    let mut out = [0.0; 2];
    net.predict(&p, &x, &mut s, &mut out)
        .expect("operands of the model's widths");
    assert_eq!(out, [0.5, 0.5]);
    let (cost, g) = gradient(&m, &p, &x, &[1.0, 0.0]);
    assert_eq!(cost, loss);
    assert_eq!(g.layers[0].bias, [-0.5, 0.5]);

    let m = model(
        "model sp\nscalar f64\ninput x 1\noutput y 1 sigmoid\nloss cross_entropy\npenalty none\n",
    );
    let p = Params::<f64>::from_f64(&[FlatLayer::new(vec![1.0], vec![0.0])], None);
    assert_eq!(
        Net::<f64>::new(&m)
            .loss(&p, &[1000.0], &[0.0], &mut Scratch::new(&m))
            .expect("a sample of the model's width"),
        1000.0
    );
}

/// Sample mean and variance of `v`.
fn moments(v: &[f64]) -> (f64, f64) {
    let n = v.len() as f64;
    let mean = v.iter().sum::<f64>() / n;
    let var = v.iter().map(|x| (x - mean) * (x - mean)).sum::<f64>() / n;
    (mean, var)
}

/// Glorot and Bengio (2010), "Understanding the difficulty of training deep feedforward neural
/// networks": the normalized initialisation W ~ U[-r, r], r = sqrt(6 / (fan_in + fan_out)),
/// whose variance r^2 / 3 is 2 / (fan_in + fan_out). Drawn by `Params::init` for the spec's
/// `init glorot` and checked by sampling statistics: every |w| <= r and the largest close to r;
/// mean 0, variance 2 / (fan_in + fan_out) and half the weights within r/2 (properties of the
/// uniform distribution), each within 5 standard errors (the seed is fixed, so the check is
/// deterministic); biases zero.
#[test]
fn glorot_uniform_limit_and_variance() {
    let m = model("model g\nscalar f64\ninput x 300\nlayer h 200 tanh\noutput y 100 identity\nloss squared_error\ninit glorot seed 5\n");
    let p = Params::<f64>::init(&m, m.seed());
    for (layer, lp) in m.layers().iter().zip(&p.layers) {
        let (fan_in, fan_out) = (layer.fan_in as f64, layer.width as f64);
        let r = (6.0 / (fan_in + fan_out)).sqrt();
        let w = &lp.weights;
        let n = w.len() as f64;
        let max = w.iter().fold(0.0f64, |a, x| a.max(x.abs()));
        assert!(
            max <= r,
            "{}: max |w| {max} above the limit {r}",
            layer.name
        );
        assert!(
            max >= 0.999 * r,
            "{}: max |w| {max} far below the limit {r}",
            layer.name
        );
        let (mean, var) = moments(w);
        let want_var = 2.0 / (fan_in + fan_out);
        // Standard errors: mean sqrt(var / n); variance sqrt((E w^4 - var^2) / n) with
        // E w^4 = r^4 / 5 for the uniform distribution.
        assert!(
            mean.abs() <= 5.0 * (want_var / n).sqrt(),
            "{}: mean {mean}",
            layer.name
        );
        let se_var = ((r.powi(4) / 5.0 - want_var * want_var) / n).sqrt();
        assert!(
            (var - want_var).abs() <= 5.0 * se_var,
            "{}: variance {var} vs {want_var}",
            layer.name
        );
        let inner = w.iter().filter(|x| x.abs() < r / 2.0).count() as f64 / n;
        assert!(
            (inner - 0.5).abs() <= 5.0 * (0.25 / n).sqrt(),
            "{}: {inner} within r/2",
            layer.name
        );
        assert!(lp.bias.iter().all(|&b| b == 0.0));
    }
}

/// He, Zhang, Ren and Sun (2015), "Delving deep into rectifiers": W ~ N(0, 2 / fan_in) for
/// layers followed by rectifiers. Drawn by `Params::init` for the spec's `init he` and checked
/// by sampling statistics against the normal distribution: mean 0, standard deviation
/// sqrt(2 / fan_in), 68.27% of the draws within one standard deviation (the normal
/// distribution's 0.682689; handbook value) and kurtosis 3, each within 5 standard errors.
#[test]
fn he_normal_standard_deviation() {
    let m = model("model he\nscalar f64\ninput x 400\nlayer h 300 relu\noutput y 10 identity\nloss squared_error\ninit he seed 9\n");
    let p = Params::<f64>::init(&m, m.seed());
    for (layer, lp) in m.layers().iter().zip(&p.layers) {
        let sigma = (2.0 / layer.fan_in as f64).sqrt();
        let w = &lp.weights;
        let n = w.len() as f64;
        let (mean, var) = moments(w);
        assert!(
            mean.abs() <= 5.0 * sigma / n.sqrt(),
            "{}: mean {mean}",
            layer.name
        );
        // The sample variance of a normal has standard error var sqrt(2 / n).
        let want_var = sigma * sigma;
        assert!(
            (var - want_var).abs() <= 5.0 * want_var * (2.0 / n).sqrt(),
            "{}: variance {var} vs {want_var}",
            layer.name
        );
        let within = w.iter().filter(|x| x.abs() <= sigma).count() as f64 / n;
        let p1 = 0.682689;
        assert!(
            (within - p1).abs() <= 5.0 * (p1 * (1.0 - p1) / n).sqrt(),
            "{}: {within} within one sigma",
            layer.name
        );
        // Kurtosis E (w - mean)^4 / var^2 = 3 for a normal, standard error sqrt(24 / n).
        let kurtosis = w.iter().map(|x| (x - mean).powi(4)).sum::<f64>() / n / (var * var);
        assert!(
            (kurtosis - 3.0).abs() <= 5.0 * (24.0 / n).sqrt(),
            "{}: kurtosis {kurtosis}",
            layer.name
        );
    }
}

/// A value published with `decimals` decimals, compared to half a unit in its last place.
fn close_to_published(what: &str, got: f64, published: f64, decimals: i32) {
    let tolerance = 0.5 * 10f64.powi(-decimals) + 1e-15;
    assert!(
        (got - published).abs() <= tolerance,
        "{what}: sinew {got}, published {published}"
    );
}

/// The 2-2-2 worked example of M. Mazur (2015), "A Step by Step Backpropagation Example"
/// (values from memory; each agrees with the formulas recomputed in f64 to its last published
/// digit): inputs (0.05, 0.10), targets (0.01, 0.99); w1..w4 = 0.15, 0.20, 0.25, 0.30 into the
/// hidden layer (row-major: h1 takes w1, w2; h2 takes w3, w4), bias 0.35; w5..w8 = 0.40, 0.45,
/// 0.50, 0.55 into the output layer, bias 0.60; sigmoid units, E = sum 1/2 (target - out)^2,
/// learning rate 0.5. Published: out_h1 = 0.593269992, out_h2 = 0.596884378, out_o1 =
/// 0.75136507, out_o2 = 0.772928465, E_total = 0.298371109, dE/dw5 = 0.082167041, dE/dw1 =
/// 0.000438568, and after one step w1..w8 = 0.149780716, 0.19956143, 0.24975114, 0.29950229,
/// 0.35891648, 0.408666186, 0.511301270, 0.561370121.
///
/// The example keeps the biases fixed; sinew's trainer also steps them, but in one simultaneous
/// step the new weights do not depend on the biases' update, so only the weights are compared.
#[test]
fn the_worked_backprop_example_through_the_engine() {
    let m = model(
        "model worked\nscalar f64\ninput i 2\nlayer h 2 sigmoid\noutput o 2 sigmoid\nloss squared_error\npenalty none\n\
         train sgd rate 0.5 batch 1 epochs 1\n",
    );
    let p = Params::<f64>::from_f64(
        &[
            FlatLayer::new(vec![0.15, 0.20, 0.25, 0.30], vec![0.35, 0.35]),
            FlatLayer::new(vec![0.40, 0.45, 0.50, 0.55], vec![0.60, 0.60]),
        ],
        None,
    );
    let (x, y) = ([0.05, 0.10], [0.01, 0.99]);
    let net = Net::<f64>::new(&m);
    let mut s = Scratch::new(&m);
    net.forward(&p, &x, &mut s)
        .expect("operands of the model's widths");
    close_to_published("out_h1", s.activations(0)[0], 0.593269992, 9);
    close_to_published("out_h2", s.activations(0)[1], 0.596884378, 9);
    close_to_published("out_o1", s.activations(1)[0], 0.75136507, 8);
    close_to_published("out_o2", s.activations(1)[1], 0.772928465, 9);

    let (cost, g) = gradient(&m, &p, &x, &y);
    close_to_published("E_total", cost, 0.298371109, 9);
    close_to_published("dE/dw5", g.layers[1].weights[0], 0.082167041, 9);
    close_to_published("dE/dw1", g.layers[0].weights[0], 0.000438568, 9);

    let data = Samples::<f64>::from_rows(&[x.to_vec()], &[y.to_vec()], None);
    let mut trainer = Trainer::new(&m, p);
    let before = trainer.step(&data.xs, &data.ys).expect("whole samples");
    assert_eq!(before, cost, "the step reports J before the update");
    let hidden = [
        (0.149780716, 9),
        (0.19956143, 8),
        (0.24975114, 8),
        (0.29950229, 8),
    ];
    let output = [
        (0.35891648, 8),
        (0.408666186, 9),
        (0.511301270, 9),
        (0.561370121, 9),
    ];
    for (k, (&got, &(want, d))) in trainer.params.layers[0]
        .weights
        .iter()
        .zip(&hidden)
        .enumerate()
    {
        close_to_published(&format!("w{}+", k + 1), got, want, d);
    }
    for (k, (&got, &(want, d))) in trainer.params.layers[1]
        .weights
        .iter()
        .zip(&output)
        .enumerate()
    {
        close_to_published(&format!("w{}+", k + 5), got, want, d);
    }
}
