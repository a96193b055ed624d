//! Findings after training that do not stop it (`W02xx`): the data's scales when the model does
//! not standardize its input (`W0201`), and a class the trained model never predicts (`W0202`).
//!
//! - **Scales.** With `mean_i` and `s_i` the mean and the population standard deviation of
//!   input column `i` over the training split, `W0201` is raised when the spreads differ by more
//!   than [`SCALE_RATIO`] (`max s_i / min s_i` over the columns with `s_i > 0`), or when a column
//!   has `|mean_i| > ` [`LARGE_SCALE`] or `s_i > ` [`LARGE_SCALE`]. Both are rules of thumb
//!   (common practice: gradient descent converges slowly when the curvature along one feature is
//!   far larger than along another, and sigmoid or tanh units saturate on large inputs).
//! - **Classes.** `W0202` names each class that has samples in the evaluated split but is never
//!   the predicted class there (a zero column of the confusion matrix).

use crate::code::Code;
use crate::data::Dataset;
use crate::engine::eval::Evaluation;
use serde::Serialize;
use std::fmt;

/// Spreads that differ by more than this factor draw `W0201`.
pub const SCALE_RATIO: f64 = 100.0;

/// A column whose mean magnitude or spread is above this draws `W0201`.
pub const LARGE_SCALE: f64 = 100.0;

/// The mean and spread of one input column.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Column {
    /// The column's header name.
    pub name: String,
    /// Its mean over the training split.
    pub mean: f64,
    /// Its population standard deviation over the training split.
    pub std: f64,
}

/// A finding after training.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Advice {
    /// `W0201`: the input columns are on very different or large scales and the model does not
    /// standardize them. `widest` and `narrowest` are the columns of largest and smallest
    /// non-zero spread; `largest` the column of largest mean magnitude.
    Scales {
        /// The column of largest spread.
        widest: Column,
        /// The column of smallest non-zero spread.
        narrowest: Column,
        /// The column of largest mean magnitude.
        largest: Column,
    },
    /// `W0202`: a class with samples in the split that the model never predicts there.
    NeverPredicted {
        /// The class name (or index).
        class: String,
        /// Its samples in the split.
        samples: usize,
        /// `"validation"` or `"training"`: the split the figures come from.
        split: &'static str,
    },
}

impl Advice {
    /// The finding's code.
    pub fn code(&self) -> Code {
        match self {
            Advice::Scales { .. } => Code::W0201,
            Advice::NeverPredicted { .. } => Code::W0202,
        }
    }

    /// What to do about it.
    pub fn help(&self) -> String {
        match self {
            Advice::Scales { .. } => "end the input line with `standardize` (in place of \
                `unscaled`, if written): the model then scales each feature by the training \
                split's mean and standard deviation, and bakes both into the generated code"
                .to_string(),
            Advice::NeverPredicted { .. } => "a model that never predicts a class has often \
                settled on the majority class: standardize the inputs, try another rate or more \
                epochs, or give the rare class more samples"
                .to_string(),
        }
    }
}

/// `v` with three significant digits, trailing zeros dropped: `561.6093` -> `562`,
/// `0.0026` -> `0.0026`, `12.1761` -> `12.2`.
fn g(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let magnitude = v.abs().log10().floor() as i32;
    let decimals = usize::try_from(2 - magnitude).unwrap_or(0);
    let s = format!("{v:.decimals$}");
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

impl fmt::Display for Advice {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Advice::Scales {
                widest,
                narrowest,
                largest,
                ..
            } => {
                let ratio = widest.std / narrowest.std;
                if ratio > SCALE_RATIO {
                    write!(
                        f,
                        "the spreads of the input columns differ by a factor of {}: `{}` spreads \
                         {} around {}, `{}` spreads {} around {}",
                        g(ratio),
                        widest.name,
                        g(widest.std),
                        g(widest.mean),
                        narrowest.name,
                        g(narrowest.std),
                        g(narrowest.mean)
                    )
                } else if widest.std >= largest.mean.abs() {
                    write!(
                        f,
                        "input column `{}` spreads {} around {}, far from unit scale",
                        widest.name,
                        g(widest.std),
                        g(widest.mean)
                    )
                } else {
                    write!(
                        f,
                        "input column `{}` lies around {} (spread {}), far from unit scale",
                        largest.name,
                        g(largest.mean),
                        g(largest.std)
                    )
                }
            }
            Advice::NeverPredicted {
                class,
                samples,
                split,
            } => write!(
                f,
                "class `{class}` is never predicted on the {split} split, which has {samples} \
                 sample{} of it",
                if *samples == 1 { "" } else { "s" }
            ),
        }
    }
}

/// `W0201` for the training split `ds` of a model that does not standardize, or `None` when
/// the scales are comparable (see the module documentation for the rule).
pub fn scales(ds: &Dataset) -> Option<Advice> {
    let (mean, std) = crate::data::mean_spread(ds);
    let columns: Vec<Column> = ds
        .input_names
        .iter()
        .zip(mean.iter().zip(&std))
        .map(|(name, (&mean, &std))| Column {
            name: name.clone(),
            mean,
            std,
        })
        .collect();
    let spread = |c: &&Column| c.std;
    let varying: Vec<&Column> = columns.iter().filter(|c| c.std > 0.0).collect();
    let widest = varying
        .iter()
        .copied()
        .max_by(|a, b| spread(a).total_cmp(&spread(b)))?;
    let narrowest = varying
        .iter()
        .copied()
        .min_by(|a, b| spread(a).total_cmp(&spread(b)))?;
    let largest = columns
        .iter()
        .max_by(|a, b| a.mean.abs().total_cmp(&b.mean.abs()))?;
    let uneven = widest.std > SCALE_RATIO * narrowest.std;
    let large = widest.std > LARGE_SCALE || largest.mean.abs() > LARGE_SCALE;
    (uneven || large).then(|| Advice::Scales {
        widest: widest.clone(),
        narrowest: narrowest.clone(),
        largest: largest.clone(),
    })
}

/// `W0202` for every class with samples in the evaluated split that is never predicted there.
pub fn never_predicted(e: &Evaluation, split: &'static str) -> Vec<Advice> {
    let (Some(confusion), Some(classes)) = (&e.confusion, &e.classes) else {
        return Vec::new();
    };
    classes
        .iter()
        .enumerate()
        .filter_map(|(c, name)| {
            let samples: usize = confusion.get(c).map_or(0, |row| row.iter().sum());
            let predicted: usize = confusion.iter().filter_map(|row| row.get(c)).sum();
            (samples > 0 && predicted == 0).then(|| Advice::NeverPredicted {
                class: name.clone(),
                samples,
                split,
            })
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ds(rows: &[[f64; 2]]) -> Dataset {
        Dataset {
            inputs: rows.iter().map(|r| r.to_vec()).collect(),
            targets: rows.iter().map(|_| vec![0.0]).collect(),
            labels: None,
            input_names: vec!["pressure".into(), "vibration".into()],
        }
    }

    #[test]
    fn comparable_scales_pass_and_uneven_ones_warn() {
        // Spreads 1 and 1: nothing to say.
        assert_eq!(scales(&ds(&[[0.0, 1.0], [2.0, 3.0]])), None);
        // Population std of {0, 2} is 1; of {0, 0.02} is 0.01: a ratio of 100 is not above it.
        assert_eq!(scales(&ds(&[[0.0, 0.0], [2.0, 0.02]])), None);
        // Of {0, 0.0198} is 0.0099: above 100.
        let a = scales(&ds(&[[0.0, 0.0], [2.0, 0.0198]])).expect("uneven");
        assert_eq!(a.code(), Code::W0201);
        let Advice::Scales {
            widest, narrowest, ..
        } = &a
        else {
            panic!("{a:?}")
        };
        assert_eq!(
            (widest.name.as_str(), narrowest.name.as_str()),
            ("pressure", "vibration")
        );
        // A large mean alone: a pressure in hPa around 1013 with the same spread as the other.
        let a = scales(&ds(&[[1012.0, 0.0], [1014.0, 2.0]])).expect("large");
        assert_eq!(
            a.to_string(),
            "input column `pressure` lies around 1013 (spread 1), far from unit scale"
        );
        // Constant columns say nothing about scale.
        assert_eq!(scales(&ds(&[[5.0, 0.0], [5.0, 1.0]])), None);
    }

    #[test]
    fn three_significant_digits() {
        assert_eq!(g(561.6093), "562");
        assert_eq!(g(0.0026), "0.0026");
        assert_eq!(g(12.1761), "12.2");
        assert_eq!(g(-0.5), "-0.5");
        assert_eq!(g(0.0), "0");
    }

    #[test]
    fn a_zero_column_of_the_confusion_matrix_names_the_class() {
        let e = Evaluation {
            samples: 10,
            cost: 0.5,
            accuracy: Some(0.7),
            // rows: true class; columns: predicted. `worn` (3 samples) is never predicted;
            // `idle` has no samples and is never predicted: nothing to say about it.
            confusion: Some(vec![vec![7, 0, 0], vec![3, 0, 0], vec![0, 0, 0]]),
            classes: Some(vec!["normal".into(), "worn".into(), "idle".into()]),
            mae: None,
            rmse: None,
        };
        let found = never_predicted(&e, "validation");
        assert_eq!(
            found,
            [Advice::NeverPredicted {
                class: "worn".into(),
                samples: 3,
                split: "validation"
            }]
        );
        assert_eq!(
            found[0].to_string(),
            "class `worn` is never predicted on the validation split, which has 3 samples of it"
        );
    }
}
