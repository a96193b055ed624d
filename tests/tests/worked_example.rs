//! Published worked examples run through generated code.

use sinew_tests::{relay_pair, tank_level};

/// True when `value` shows `published` to every digit printed there (within half a unit of the
/// last published decimal place).
fn matches_published(value: f64, published: &str) -> bool {
    let decimals = published.split('.').nth(1).map_or(0, str::len) as i32;
    let p: f64 = published.parse().expect("a number");
    (value - p).abs() <= 0.5 * 10f64.powi(-decimals) * (1.0 + 1e-9)
}

/// "A Step by Step Backpropagation Example", M. Mazur (2015): a 2-2-2 sigmoid network with
/// squared error and learning rate 0.5, inputs (0.05, 0.10), targets (0.01, 0.99), weights
/// w1..w8 = 0.15, 0.20, 0.25, 0.30, 0.40, 0.45, 0.50, 0.55 and biases 0.35 (hidden) and 0.60
/// (output). Published: total error 0.298371109 before the update, and the updated weights
/// below (values from memory).
///
/// The example does not update the biases. Here the trainer does, but in one step every gradient
/// is computed before any parameter moves (the example, too, back-propagates through the original
/// output weights), so the updated weights do not depend on the bias updates; the biases are
/// checked to have moved by exactly `-rate * dJ/db`.
#[test]
fn mazur_step_by_step_example() {
    let mut p = relay_pair::Params::zeroed();
    // Row j holds the weights into unit j: h1 = w1 i1 + w2 i2 + b1, h2 = w3 i1 + w4 i2 + b1,
    // o1 = w5 h1 + w6 h2 + b2, o2 = w7 h1 + w8 h2 + b2.
    p.hidden_weights = [[0.15, 0.20], [0.25, 0.30]];
    p.hidden_bias = [0.35, 0.35];
    p.coils_weights = [[0.40, 0.45], [0.50, 0.55]];
    p.coils_bias = [0.60, 0.60];
    let xs = [[0.05, 0.10]];
    let ys = [[0.01, 0.99]];
    assert_eq!(relay_pair::Trainer::RATE, 0.5);

    // The forward pass of the example: out_o1 = 0.75136507, out_o2 = 0.772928465.
    let out = p.predict(&xs[0]);
    assert!(matches_published(out[0], "0.75136507"), "{}", out[0]);
    assert!(matches_published(out[1], "0.772928465"), "{}", out[1]);

    let mut t = relay_pair::Trainer::new(p.clone());
    let error = t.step(&xs, &ys);
    assert!(
        matches_published(error, "0.298371109"),
        "total error {error}"
    );
    assert_eq!(error, p.cost(&xs, &ys));

    let [[w5, w6], [w7, w8]] = t.params.coils_weights;
    let [[w1, w2], [w3, w4]] = t.params.hidden_weights;
    for (value, published, name) in [
        (w5, "0.35891648", "w5"),
        (w6, "0.408666186", "w6"),
        (w7, "0.511301270", "w7"),
        (w8, "0.561370121", "w8"),
        (w1, "0.149780716", "w1"),
        (w2, "0.19956143", "w2"),
        (w3, "0.24975114", "w3"),
        (w4, "0.29950229", "w4"),
    ] {
        assert!(
            matches_published(value, published),
            "{name}: {value} vs published {published}"
        );
    }
    // Biases: plain SGD, b <- b - 0.5 dJ/db, with the gradient of the same step.
    for (after, (before, g)) in t
        .params
        .hidden_bias
        .iter()
        .zip(p.hidden_bias.iter().zip(&t.grad.hidden_bias))
    {
        assert_eq!(*after, before - 0.5 * g);
    }
}

/// One and two Adam steps computed by hand from Algorithm 1 of Kingma and Ba (2015), "Adam: A
/// Method for Stochastic Optimization", with its default hyper-parameters beta1 = 0.9,
/// beta2 = 0.999, epsilon = 1e-8, on the one-weight model `z = w x + b` with squared error and
/// one sample, whose gradient is `(z - y) (x, 1)`.
#[test]
fn adam_steps_by_hand() {
    assert_eq!(
        (
            tank_level::Trainer::BETA1,
            tank_level::Trainer::BETA2,
            tank_level::Trainer::EPSILON
        ),
        (0.9, 0.999, 1e-8)
    );
    let rate = tank_level::Trainer::RATE;
    assert_eq!(rate, 0.001);
    let mut p = tank_level::Params::zeroed();
    p.level_weights = [[0.5]];
    p.level_bias = [0.1];
    let (x, y) = (2.0, 3.0);
    let mut t = tank_level::Trainer::new(p);

    // Step 1: z = 0.5 * 2 + 0.1 = 1.1, error -1.9, g = (-3.8, -1.9), J = 1.9^2 / 2 = 1.805.
    // m = 0.1 g, v = 0.001 g^2, so mhat = g, vhat = g^2 and each parameter moves by
    // rate * g / (|g| + 1e-8).
    let j = t.step(&[[x]], &[[y]]);
    assert!((j - 1.805).abs() < 1e-15, "{j}");
    let w1 = 0.5 + 0.001 * 3.8 / (3.8 + 1e-8);
    let b1 = 0.1 + 0.001 * 1.9 / (1.9 + 1e-8);
    assert!(
        (t.params.level_weights[0][0] - w1).abs() < 1e-16,
        "{:?}",
        t.params.level_weights
    );
    assert!((t.params.level_bias[0] - b1).abs() < 1e-16);
    assert!((w1 - 0.500_999_999_997_368_4).abs() < 1e-15);
    assert!((t.m.level_weights[0][0] - 0.1 * -3.8).abs() < 1e-15);
    assert!((t.v.level_weights[0][0] - 0.001 * 3.8 * 3.8).abs() < 1e-15);
    assert_eq!(t.steps, 1);

    // Step 2, by hand: g2 = (z2 - y) (x, 1) at the new parameters.
    let e2 = w1 * x + b1 - y;
    let (gw, gb) = (e2 * x, e2);
    let second = |g1: f64, g2: f64, p1: f64| {
        let m = 0.9 * (0.1 * g1) + 0.1 * g2;
        let v = 0.999 * (0.001 * g1 * g1) + 0.001 * g2 * g2;
        let mhat = m / (1.0 - 0.9f64.powi(2));
        let vhat = v / (1.0 - 0.999f64.powi(2));
        p1 - 0.001 * mhat / (vhat.sqrt() + 1e-8)
    };
    let j2 = t.step(&[[x]], &[[y]]);
    assert!((j2 - 0.5 * e2 * e2).abs() < 1e-15);
    assert!((t.params.level_weights[0][0] - second(-3.8, gw, w1)).abs() < 1e-15);
    assert!((t.params.level_bias[0] - second(-1.9, gb, b1)).abs() < 1e-15);
    assert_eq!(t.steps, 2);
}
