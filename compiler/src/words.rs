//! The one formatter of a model's penalty and optimizer for people, in two forms:
//!
//! - *spec words*, as a spec line writes them (`l2 0.01`, `adam rate 0.001 beta1 0.9 beta2
//!   0.999`), used by `sinew check`'s table and the training summary and provenance;
//! - *prose*, a sentence part with the formula (`L2, lambda 0.01, ...`), used in the doc comment
//!   of generated modules.
//!
//! Spec words print numbers with Rust's `Display` (shortest round-trip form); prose prints them
//! with [`number`] so that very small or large values read in exponent form.

use crate::ir::{Optimizer, Penalty};

/// `v` in its shortest round-trip form, in exponent form (`1e-5`) when `|v|` is non-zero and
/// below `1e-4` or at least `1e16`.
///
/// # Examples
/// ```
/// assert_eq!(sinew::words::number(0.001), "0.001");
/// assert_eq!(sinew::words::number(0.00001), "1e-5");
/// ```
pub fn number(v: f64) -> String {
    let a = v.abs();
    if a != 0.0 && a.is_finite() && !(1e-4..1e16).contains(&a) {
        format!("{v:e}")
    } else {
        format!("{v}")
    }
}

/// The penalty as spec words: `none`, `l2 LAMBDA` or `l1 LAMBDA`.
///
/// # Examples
/// ```
/// use sinew::ir::Penalty;
/// assert_eq!(sinew::words::penalty_spec(Penalty::L2(0.01)), "l2 0.01");
/// ```
pub fn penalty_spec(p: Penalty) -> String {
    match p {
        Penalty::None => "none".to_string(),
        Penalty::L2(l) => format!("l2 {l}"),
        Penalty::L1(l) => format!("l1 {l}"),
    }
}

/// The penalty in prose with its term of the cost (biases are never penalised).
pub fn penalty_prose(p: Penalty) -> String {
    match p {
        Penalty::None => "none".to_string(),
        Penalty::L2(l) => format!(
            "L2, lambda {}, `(lambda / 2m) sum W^2` (weights only)",
            number(l)
        ),
        Penalty::L1(l) => format!(
            "L1, lambda {}, `(lambda / m) sum |W|` (weights only)",
            number(l)
        ),
    }
}

/// The optimizer as spec words: `sgd rate R`, `sgd rate R momentum M` (momentum not 0) or
/// `adam rate R beta1 B1 beta2 B2` (epsilon is not a spec word).
///
/// # Examples
/// ```
/// use sinew::ir::Optimizer;
/// let o = Optimizer::Sgd { rate: 0.1, momentum: 0.9 };
/// assert_eq!(sinew::words::optimizer_spec(o), "sgd rate 0.1 momentum 0.9");
/// ```
pub fn optimizer_spec(o: Optimizer) -> String {
    match o {
        Optimizer::Sgd {
            rate,
            momentum: 0.0,
        } => format!("sgd rate {rate}"),
        Optimizer::Sgd { rate, momentum } => format!("sgd rate {rate} momentum {momentum}"),
        Optimizer::Adam {
            rate, beta1, beta2, ..
        } => format!("adam rate {rate} beta1 {beta1} beta2 {beta2}"),
    }
}

/// The optimizer in prose, with every constant (Adam's epsilon too).
pub fn optimizer_prose(o: Optimizer) -> String {
    match o {
        Optimizer::Sgd {
            rate,
            momentum: 0.0,
        } => format!("SGD, rate {}", number(rate)),
        Optimizer::Sgd { rate, momentum } => {
            format!("SGD, rate {}, momentum {}", number(rate), number(momentum))
        }
        Optimizer::Adam {
            rate,
            beta1,
            beta2,
            epsilon,
        } => format!(
            "Adam, rate {}, beta1 {}, beta2 {}, epsilon {}",
            number(rate),
            number(beta1),
            number(beta2),
            number(epsilon)
        ),
    }
}
