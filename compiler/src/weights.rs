//! Weights files (host side): a documented JSON form with an exact round trip of every value.
//!
//! # The form
//!
//! ```json
//! {
//!   "format": "sinew-weights",
//!   "version": 1,
//!   "model": "valve_gate",
//!   "fingerprint": "00112233445566ff",
//!   "scalar": "f64",
//!   "layers": [
//!     {
//!       "name": "hidden",
//!       "weights": [
//!         [0.5, -1.25],
//!         [2.0, 0.125],
//!         [-0.75, 1.0]
//!       ],
//!       "bias": [0.0, 0.1, -0.2]
//!     },
//!     {
//!       "name": "open",
//!       "weights": [
//!         [1.5, -2.0, 0.25]
//!       ],
//!       "bias": [0.3]
//!     }
//!   ],
//!   "standardization": null,
//!   "provenance": null
//! }
//! ```
//!
//! - `format` is always `"sinew-weights"`; `version` is `1`.
//! - `model` is the spec's model name. It is informational: names are not part of the shape, so
//!   [`Weights::check_against`] does not compare it.
//! - `fingerprint` is [`Model::fingerprint`] as 16 lowercase hex digits: the FNV-1a 64 hash of the
//!   shape signature (scalar type, input width and scaling, every layer's width and activation).
//! - `scalar` is `"f32"` or `"f64"`. An `f32` file stores every value as the exact `f64`
//!   widening of its `f32` value; on loading, each value of an `f32` file is rounded to the nearest
//!   `f32` (a no-op for files sinew wrote, and the documented meaning of a hand-typed `0.1`).
//! - `layers` lists the hidden layers in spec order, then the output layer. `weights` has one row
//!   per unit of that layer and one column per unit feeding it (the input width for the first
//!   layer, else the previous layer's width): row `j` holds the weights into unit `j`, the
//!   row-major `W` of `z = W a + b`. `bias` has one value per unit.
//! - `standardization` is `null`, or `{"mean": [...], "std": [...]}` with one value per input
//!   feature; the model computes `(x - mean) / std` before the first layer. Every `std` is > 0.
//!   It is required exactly when the spec's input is declared `standardize`.
//! - `provenance` is `null`, or records how the values were made: `optimizer` (a description such
//!   as `"adam"`), `epochs` (epochs actually run), `train_cost`, `validation_cost` (`null` without
//!   a validation split), `data_file_hash` ([`data_hash`] of the training file's bytes) and
//!   `data_file` (its name as given).
//!
//! Numbers are written in the shortest form that reads back to the same `f64` bit pattern and are
//! read with correct rounding, so every value, including `-0.0` and subnormals, round-trips
//! bitwise. JSON has no NaN or infinity: non-finite values are refused when saving and loading.
//! Files are written atomically (a temporary file in the same directory, flushed to disk, then
//! renamed over the target), so a failed save never leaves a partial file.
//!
//! # Error codes
//!
//! | code | meaning |
//! | --- | --- |
//! | `F01` | the file cannot be read or written |
//! | `F02` | the file is not valid JSON |
//! | `F03` | the file ends early (truncated) |
//! | `F04` | the JSON does not have the layout of a weights file |
//! | `F05` | not a sinew weights file, an unsupported version, or a malformed fingerprint |
//! | `F06` | a value is not finite (or outside the `f32` range in an `f32` file) |
//! | `F07` | the fingerprint does not match the spec |
//! | `F08` | the number of layers differs from the spec |
//! | `F09` | a layer's name differs from the spec |
//! | `F10` | a layer's shape differs from the spec (rows, columns or biases) |
//! | `F11` | the scalar type differs from the spec |
//! | `F12` | standardization statistics are missing, unexpected, of the wrong length, or invalid |

use crate::code::Code;
use crate::fsutil;
use crate::ir::{fnv1a64, Model, Scalar};
use serde::Deserialize;
use std::fmt;
use std::path::Path;

/// The `format` tag of every weights file.
pub const FORMAT: &str = "sinew-weights";

/// The version of the form described in the [module documentation](self).
pub const VERSION: u64 = 1;

/// The parameters of one dense layer.
#[derive(Debug, Clone, PartialEq)]
pub struct LayerWeights {
    /// The layer's name in the spec.
    pub name: String,
    /// One row per unit of this layer, one column per unit feeding it.
    pub weights: Vec<Vec<f64>>,
    /// One bias per unit.
    pub bias: Vec<f64>,
}

/// One dense layer's parameters in the flat form the engine and the emitter take: `weights` is
/// `W` row-major (`width * fan_in` values, row `j` holding the weights into unit `j`), `bias`
/// has `width` values.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct FlatLayer {
    /// `W` row-major.
    pub weights: Vec<f64>,
    /// `b`.
    pub bias: Vec<f64>,
}

impl FlatLayer {
    /// The layer with `W` row-major `weights` and `bias`.
    pub fn new(weights: Vec<f64>, bias: Vec<f64>) -> FlatLayer {
        FlatLayer { weights, bias }
    }
}

/// Per-feature input scaling: the model computes `(x - mean) / std`.
#[derive(Debug, Clone, PartialEq)]
pub struct Standardization {
    /// Mean of each input feature over the training split.
    pub mean: Vec<f64>,
    /// Population standard deviation of each feature (1.0 for a constant feature); all > 0.
    pub std: Vec<f64>,
}

/// How a set of weights was made.
#[derive(Debug, Clone, PartialEq)]
pub struct Provenance {
    /// The optimizer, e.g. `"adam"` or `"sgd momentum 0.9"`.
    pub optimizer: String,
    /// Epochs actually run.
    pub epochs: u64,
    /// Final cost on the training split.
    pub train_cost: f64,
    /// Final cost on the validation split, if there was one.
    pub validation_cost: Option<f64>,
    /// [`data_hash`] of the training data file's bytes.
    pub data_file_hash: String,
    /// The training data file's name as given.
    pub data_file: String,
}

/// A model's parameters with the facts needed to check them against a spec.
///
/// # Examples
/// ```
/// use sinew::weights::{FlatLayer, Weights};
///
/// let spec = "model tiny\nscalar f64\ninput x 2\noutput y 1 identity\nloss squared_error\n";
/// let model = sinew::check_source(spec).model.expect("a valid spec");
/// let layer = FlatLayer { weights: vec![0.1, -0.0], bias: vec![1e-300] };
/// let w = Weights::from_params(&model, vec![layer], None, None);
/// let back = Weights::from_json("w.json", &w.to_json()).unwrap();
/// back.check_against(&model).unwrap();
/// assert_eq!(back.layers[0].weights[0][1].to_bits(), (-0.0f64).to_bits());
/// assert_eq!(back, w);
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct Weights {
    /// The spec's model name (informational).
    pub model: String,
    /// [`Model::fingerprint`] of the model the values were made for.
    pub fingerprint: u64,
    /// The scalar type of the values.
    pub scalar: Scalar,
    /// Hidden layers in order, then the output layer.
    pub layers: Vec<LayerWeights>,
    /// Input scaling, for a model whose input is declared `standardize`.
    pub standardization: Option<Standardization>,
    /// How the values were made, if known.
    pub provenance: Option<Provenance>,
}

/// A weights file that cannot be read, written or used with a spec.
///
/// `Display` gives `FILE[:LINE:COLUMN]: error[Fnn]: message` (without the `FILE: ` part when
/// `file` is empty), then a `help:` line when there is a fix to suggest.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct WeightsError {
    /// Stable code (`F01`...; see the [module documentation](self)).
    pub code: Code,
    /// The file's name as given.
    pub file: String,
    /// Line and column (1-based) in the file, when the problem has a place.
    pub location: Option<(usize, usize)>,
    /// Lowercase statement of fact.
    pub message: String,
    /// How to fix it.
    pub help: Option<String>,
}

impl WeightsError {
    /// The same error, naming `path` as its file.
    fn in_file(self, path: &Path) -> WeightsError {
        WeightsError {
            file: path.display().to_string(),
            ..self
        }
    }

    fn new(code: Code, file: &str, message: impl Into<String>) -> Self {
        WeightsError {
            code,
            file: file.to_string(),
            location: None,
            message: message.into(),
            help: None,
        }
    }

    fn help(mut self, help: impl Into<String>) -> Self {
        self.help = Some(help.into());
        self
    }
}

impl fmt::Display for WeightsError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if !self.file.is_empty() {
            write!(f, "{}", self.file)?;
            if let Some((line, column)) = self.location {
                write!(f, ":{line}:{column}")?;
            }
            write!(f, ": ")?;
        }
        write!(f, "error[{}]: {}", self.code, self.message)?;
        if let Some(help) = &self.help {
            write!(f, "\n  help: {help}")?;
        }
        Ok(())
    }
}

impl std::error::Error for WeightsError {}

/// The FNV-1a 64 hash of a data file's bytes ([`fnv1a64`]) as 16 lowercase hex digits, recorded
/// in [`Provenance::data_file_hash`].
///
/// # Examples
/// ```
/// // FNV-1a 64 of "a" is 0xaf63dc4c8601ec8c (FNV reference test vector, from memory).
/// assert_eq!(sinew::weights::data_hash(b"a"), "af63dc4c8601ec8c");
/// ```
pub fn data_hash(bytes: &[u8]) -> String {
    format!("{:016x}", fnv1a64(bytes))
}

impl Weights {
    /// Builds the weights of `model` from per-layer [`FlatLayer`]s in layer order.
    ///
    /// For an `f32` model every value is rounded to `f32` (a no-op for values computed in `f32`).
    /// Shapes are taken as given (a short last row keeps its length), so a mismatch is reported
    /// by [`Weights::check_against`] rather than hidden here; non-finite values are refused by
    /// [`Weights::save`].
    pub fn from_params(
        model: &Model,
        layers: Vec<FlatLayer>,
        standardization: Option<Standardization>,
        provenance: Option<Provenance>,
    ) -> Weights {
        let round = |v: Vec<f64>| -> Vec<f64> {
            match model.scalar {
                Scalar::F64 => v,
                Scalar::F32 => v.into_iter().map(|x| f64::from(x as f32)).collect(),
            }
        };
        // A pooling has no parameters and no entry in the file.
        let layers = layers
            .into_iter()
            .enumerate()
            .filter(|(i, _)| model.layers.get(*i).is_none_or(|l| l.parameters() > 0))
            .map(
                |(
                    i,
                    FlatLayer {
                        weights: w,
                        bias: b,
                    },
                )| {
                    let (name, fan_in) = match model.layers.get(i) {
                        Some(l) => (l.name.clone(), l.fan_in),
                        None => (format!("layer{}", i + 1), w.len()),
                    };
                    let weights = round(w)
                        .chunks(fan_in.max(1))
                        .map(<[f64]>::to_vec)
                        .collect();
                    LayerWeights {
                        name,
                        weights,
                        bias: round(b),
                    }
                },
            )
            .collect();
        Weights {
            model: model.name.clone(),
            fingerprint: model.fingerprint(),
            scalar: model.scalar,
            layers,
            standardization: standardization.map(|s| Standardization {
                mean: round(s.mean),
                std: round(s.std),
            }),
            provenance,
        }
    }

    /// One [`FlatLayer`] per layer of `model`, in its order: the file's layers, with an empty
    /// entry for each pooling (which has no parameters and no entry in the file). The layout the
    /// engine's `Params::from_f64`, [`crate::emit::Trained`] and [`Weights::from_params`] take.
    pub fn layers_of(&self, model: &Model) -> Vec<FlatLayer> {
        let mut file = self.layers_flat().into_iter();
        model
            .layers
            .iter()
            .map(|l| match l.parameters() {
                0 => FlatLayer::default(),
                _ => file.next().unwrap_or_default(),
            })
            .collect()
    }

    /// The file's layers as [`FlatLayer`]s (a pooling has none), in the order of the device
    /// blob.
    pub fn layers_flat(&self) -> Vec<FlatLayer> {
        self.layers
            .iter()
            .map(|l| FlatLayer {
                weights: l.weights.concat(),
                bias: l.bias.clone(),
            })
            .collect()
    }

    /// The pretty JSON form described in the [module documentation](self): one line per weight
    /// row, numbers in their shortest exact form.
    ///
    /// JSON has no NaN or infinity: a non-finite value is written as `null`, which loading
    /// refuses. [`Weights::save`] refuses such values before writing anything.
    pub fn to_json(&self) -> String {
        let mut s = String::new();
        s.push_str("{\n");
        s.push_str(&format!("  \"format\": {},\n", json_str(FORMAT)));
        s.push_str(&format!("  \"version\": {VERSION},\n"));
        s.push_str(&format!("  \"model\": {},\n", json_str(&self.model)));
        s.push_str(&format!(
            "  \"fingerprint\": \"{:016x}\",\n",
            self.fingerprint
        ));
        s.push_str(&format!("  \"scalar\": \"{}\",\n", self.scalar.rust_name()));
        if self.layers.is_empty() {
            s.push_str("  \"layers\": [],\n");
        } else {
            s.push_str("  \"layers\": [\n");
            for (i, l) in self.layers.iter().enumerate() {
                s.push_str("    {\n");
                s.push_str(&format!("      \"name\": {},\n", json_str(&l.name)));
                if l.weights.is_empty() {
                    s.push_str("      \"weights\": [],\n");
                } else {
                    s.push_str("      \"weights\": [\n");
                    for (j, row) in l.weights.iter().enumerate() {
                        let comma = if j + 1 < l.weights.len() { "," } else { "" };
                        s.push_str(&format!("        {}{comma}\n", json_numbers(row)));
                    }
                    s.push_str("      ],\n");
                }
                s.push_str(&format!("      \"bias\": {}\n", json_numbers(&l.bias)));
                let comma = if i + 1 < self.layers.len() { "," } else { "" };
                s.push_str(&format!("    }}{comma}\n"));
            }
            s.push_str("  ],\n");
        }
        match &self.standardization {
            None => s.push_str("  \"standardization\": null,\n"),
            Some(st) => {
                s.push_str("  \"standardization\": {\n");
                s.push_str(&format!("    \"mean\": {},\n", json_numbers(&st.mean)));
                s.push_str(&format!("    \"std\": {}\n", json_numbers(&st.std)));
                s.push_str("  },\n");
            }
        }
        match &self.provenance {
            None => s.push_str("  \"provenance\": null\n"),
            Some(p) => {
                s.push_str("  \"provenance\": {\n");
                s.push_str(&format!("    \"optimizer\": {},\n", json_str(&p.optimizer)));
                s.push_str(&format!("    \"epochs\": {},\n", p.epochs));
                s.push_str(&format!(
                    "    \"train_cost\": {},\n",
                    json_number(p.train_cost)
                ));
                let v = p
                    .validation_cost
                    .map_or_else(|| "null".to_string(), json_number);
                s.push_str(&format!("    \"validation_cost\": {v},\n"));
                s.push_str(&format!(
                    "    \"data_file_hash\": {},\n",
                    json_str(&p.data_file_hash)
                ));
                s.push_str(&format!("    \"data_file\": {}\n", json_str(&p.data_file)));
                s.push_str("  }\n");
            }
        }
        s.push_str("}\n");
        s
    }

    /// Reads the JSON form. `name` names the text in errors (usually the file name).
    ///
    /// Checks everything that does not need the spec: the format tag and version, the
    /// fingerprint's form, that every value is finite (and within the `f32` range in an `f32`
    /// file, where values are rounded to `f32`), and that every standard deviation is > 0. Use
    /// [`Weights::check_against`] to compare with a spec.
    pub fn from_json(name: &str, text: &str) -> Result<Weights, WeightsError> {
        // First pass: only the tag and version, so a JSON file of another kind is named as such
        // instead of being reported as a missing field.
        let start = text.trim_start();
        if !start.is_empty() && !start.starts_with('{') {
            return Err(WeightsError::new(
                Code::F05,
                name,
                "not a sinew weights file: it does not start with `{`",
            ));
        }
        let head: Head = serde_json::from_str(text).map_err(|e| json_error(name, &e))?;
        match head.format {
            Some(serde_json::Value::String(f)) if f == FORMAT => {}
            Some(other) => {
                return Err(WeightsError::new(
                    Code::F05,
                    name,
                    format!("not a sinew weights file: `format` is {other}, expected \"{FORMAT}\""),
                ))
            }
            None => {
                return Err(WeightsError::new(
                    Code::F05,
                    name,
                    "not a sinew weights file: it has no `format` field",
                )
                .help(format!(
                    "a weights file starts with `\"format\": \"{FORMAT}\"`"
                )))
            }
        }
        match head.version {
            Some(serde_json::Value::Number(n)) if n.as_u64() == Some(VERSION) => {}
            Some(other) => {
                let message =
                    format!("unsupported version {other}, this sinew reads version {VERSION}");
                return Err(WeightsError::new(Code::F05, name, message));
            }
            None => {
                return Err(WeightsError::new(
                    Code::F05,
                    name,
                    "the weights file has no `version` field",
                ))
            }
        }
        let file: FileForm = serde_json::from_str(text).map_err(|e| json_error(name, &e))?;
        let fingerprint = parse_fingerprint(&file.fingerprint).ok_or_else(|| {
            WeightsError::new(
                Code::F05,
                name,
                format!("fingerprint `{}` is not 16 hex digits", file.fingerprint),
            )
        })?;
        let scalar = match file.scalar {
            ScalarForm::F32 => Scalar::F32,
            ScalarForm::F64 => Scalar::F64,
        };
        let mut w = Weights {
            model: file.model,
            fingerprint,
            scalar,
            layers: file
                .layers
                .into_iter()
                .map(|l| LayerWeights {
                    name: l.name,
                    weights: l.weights,
                    bias: l.bias,
                })
                .collect(),
            standardization: file.standardization.map(|s| Standardization {
                mean: s.mean,
                std: s.std,
            }),
            provenance: file.provenance.map(|p| Provenance {
                optimizer: p.optimizer,
                epochs: p.epochs,
                train_cost: p.train_cost,
                validation_cost: p.validation_cost,
                data_file_hash: p.data_file_hash,
                data_file: p.data_file,
            }),
        };
        if scalar == Scalar::F32 {
            w.round_to_f32(name)?;
        }
        w.check_values(name)?;
        Ok(w)
    }

    /// Reads a weights file ([`Weights::from_json`] on its text).
    pub fn load(path: &Path) -> Result<Weights, WeightsError> {
        let name = path.display().to_string();
        let bytes =
            crate::fsutil::read_limited(path, crate::fsutil::MAX_WEIGHTS_BYTES).map_err(|e| {
                WeightsError::new(
                    Code::F01,
                    &name,
                    if e.kind() == std::io::ErrorKind::InvalidData {
                        format!("cannot read the weights file: {e} (1 GiB), the limit")
                    } else {
                        format!("cannot read the weights file: {e}")
                    },
                )
            })?;
        let text = String::from_utf8(bytes).map_err(|e| {
            WeightsError::new(
                Code::F02,
                &name,
                format!(
                    "not valid JSON: the file is not UTF-8 text (invalid byte at offset {})",
                    e.utf8_error().valid_up_to()
                ),
            )
        })?;
        Weights::from_json(&name, &text)
    }

    /// [`Weights::load`], then [`Weights::check_against`] `model`, with errors naming the file.
    pub fn load_checked(path: &Path, model: &Model) -> Result<Weights, WeightsError> {
        let w = Weights::load(path)?;
        w.check_against(model).map_err(|e| e.in_file(path))?;
        Ok(w)
    }

    /// [`Weights::load`], then [`Weights::fit`] `model`, with errors naming the file.
    pub fn load_fitted<'m>(
        path: &Path,
        model: &'m Model,
    ) -> Result<crate::emit::Trained<'m>, WeightsError> {
        Weights::load(path)?.fit(model).map_err(|e| e.in_file(path))
    }

    /// The values checked against `model` ([`Weights::check_against`]) and tied to it, ready to
    /// bake into the generated `TRAINED` ([`crate::emit::generate_trained`]). This is the only way
    /// to make a [`crate::emit::Trained`], so the emitter never checks shapes again.
    pub fn fit<'m>(&self, model: &'m Model) -> Result<crate::emit::Trained<'m>, WeightsError> {
        self.check_against(model)?;
        Ok(crate::emit::Trained {
            model,
            layers: self.layers_of(model),
            standardization: self.standardization.clone(),
        })
    }

    /// Writes [`Weights::to_json`] to `path` atomically ([`fsutil::write_atomic`]): the text goes
    /// to a temporary file in the same directory, which is flushed to disk and then renamed over
    /// `path`. On any failure the temporary file is removed and an existing file at `path` is
    /// left as it was.
    ///
    /// Refuses (`F06`) non-finite values and standard deviations that are not > 0 before writing
    /// anything.
    pub fn save(&self, path: &Path) -> Result<(), WeightsError> {
        let name = path.display().to_string();
        self.check_values(&name)?;
        fsutil::write_atomic(path, self.to_json().as_bytes()).map_err(|e| {
            WeightsError::new(
                Code::F01,
                &name,
                format!("cannot write the weights file: {e}"),
            )
        })
    }

    /// Refuses weights that do not fit `model`, naming the layer and the dimension that differs.
    ///
    /// Checks, in order: the scalar type (`F11`), the number of layers (`F08`), each layer's name
    /// (`F09`) and shape (`F10`: rows = units, columns = units feeding it, one bias per unit),
    /// the standardization statistics (`F12`), and finally the fingerprint (`F07`), which then
    /// catches what shapes cannot show, such as a changed activation. The model name is not
    /// compared. The error's `file` is empty (this value does not know where it came from);
    /// [`Weights::load_checked`] fills it in.
    pub fn check_against(&self, model: &Model) -> Result<(), WeightsError> {
        let err = |code, message: String| WeightsError::new(code, "", message);
        if self.model != model.name && self.fingerprint != model.fingerprint() {
            // Another model's file: say so before any detail of how the shapes differ.
            return Err(err(
                Code::F07,
                format!(
                    "the file holds the weights of model `{}` (fingerprint {:016x}), not of `{}` \
                     (fingerprint {:016x})",
                    self.model,
                    self.fingerprint,
                    model.name,
                    model.fingerprint()
                ),
            )
            .help("give the weights file trained for this spec, or train one for it"));
        }
        if self.scalar != model.scalar {
            return Err(err(
                Code::F11,
                format!(
                    "the file holds {} values, the spec declares `scalar {}`",
                    self.scalar.rust_name(),
                    model.scalar.rust_name()
                ),
            ));
        }
        // Layers with parameters: a pooling has no entry.
        let layers: Vec<&crate::ir::Layer> =
            model.layers.iter().filter(|l| l.parameters() > 0).collect();
        if self.layers.len() != layers.len() {
            let names: Vec<&str> = layers.iter().map(|l| l.name.as_str()).collect();
            return Err(err(
                Code::F08,
                format!(
                    "the file has {} layers, the spec declares {}{} ({})",
                    self.layers.len(),
                    layers.len(),
                    if layers.len() < model.layers.len() {
                        " with parameters (a pooling has no entry)"
                    } else {
                        ""
                    },
                    names.join(", ")
                ),
            ));
        }
        for (i, (fl, ml)) in self.layers.iter().zip(layers.iter().copied()).enumerate() {
            if fl.name != ml.name {
                return Err(err(
                    Code::F09,
                    format!(
                        "layer {} is named `{}` in the file, the spec names it `{}`",
                        i + 1,
                        fl.name,
                        ml.name
                    ),
                ));
            }
            if fl.weights.len() != ml.width {
                return Err(err(
                    Code::F10,
                    format!(
                        "layer `{}` has {} rows (units) in the file, the spec declares {}",
                        ml.name,
                        fl.weights.len(),
                        ml.width
                    ),
                ));
            }
            for (j, row) in fl.weights.iter().enumerate() {
                if row.len() != ml.fan_in {
                    return Err(err(
                        Code::F10,
                        format!(
                            "layer `{}` row {} has {} columns (units feeding it) in the file, the spec declares {}",
                            ml.name,
                            j + 1,
                            row.len(),
                            ml.fan_in
                        ),
                    ));
                }
            }
            if fl.bias.len() != ml.width {
                return Err(err(
                    Code::F10,
                    format!(
                        "layer `{}` has {} biases in the file, the spec declares {} (one per unit)",
                        ml.name,
                        fl.bias.len(),
                        ml.width
                    ),
                ));
            }
        }
        match (&self.standardization, model.input.standardize) {
            (None, true) => {
                return Err(err(
                    Code::F12,
                    format!(
                        "the file has no standardization statistics, but input `{}` is declared `standardize`",
                        model.input.name
                    ),
                )
                .help("train the model to compute the mean and std from the data, or write `\"standardization\": {\"mean\": [...], \"std\": [...]}`"))
            }
            (Some(_), false) => {
                return Err(err(
                    Code::F12,
                    format!(
                        "the file has standardization statistics, but input `{}` is not declared `standardize`",
                        model.input.name
                    ),
                ))
            }
            (Some(st), true) => {
                for (what, v) in [("mean", &st.mean), ("std", &st.std)] {
                    if v.len() != model.input.width {
                        return Err(err(
                            Code::F12,
                            format!(
                                "standardization `{what}` has {} values in the file, input `{}` has {} features",
                                v.len(),
                                model.input.name,
                                model.input.width
                            ),
                        ));
                    }
                }
            }
            (None, false) => {}
        }
        let expected = model.fingerprint();
        if self.fingerprint != expected {
            return Err(err(
                Code::F07,
                format!(
                    "fingerprint {:016x} in the file does not match the spec's {expected:016x}",
                    self.fingerprint
                ),
            )
            .help("the layer sizes agree, so an activation (or its parameter) differs from the spec the weights were made for: retrain, or use that spec"));
        }
        Ok(())
    }

    /// Rounds every value to the nearest `f32`, refusing values outside its range.
    fn round_to_f32(&mut self, name: &str) -> Result<(), WeightsError> {
        let mut bad = None;
        self.for_each_value(|place, v| {
            let r = *v as f32;
            if v.is_finite() && !r.is_finite() && bad.is_none() {
                bad = Some(format!(
                    "{place} = {} is outside the f32 range of an f32 file",
                    json_number(*v)
                ));
            }
            *v = f64::from(r);
        });
        match bad {
            Some(message) => Err(WeightsError::new(Code::F06, name, message)),
            None => Ok(()),
        }
    }

    /// Refuses non-finite values and standard deviations that are not > 0.
    fn check_values(&self, name: &str) -> Result<(), WeightsError> {
        let finite = |place: String, v: f64| -> Result<(), WeightsError> {
            if v.is_finite() {
                Ok(())
            } else {
                Err(WeightsError::new(Code::F06, name, format!("{place} is {v}, not a finite number"))
                    .help("JSON has no NaN or infinity; a diverged training run produces such values: retrain with a smaller rate"))
            }
        };
        for l in &self.layers {
            for (j, row) in l.weights.iter().enumerate() {
                for (k, &v) in row.iter().enumerate() {
                    finite(
                        format!("layer `{}` weight row {} column {}", l.name, j + 1, k + 1),
                        v,
                    )?;
                }
            }
            for (j, &v) in l.bias.iter().enumerate() {
                finite(format!("layer `{}` bias {}", l.name, j + 1), v)?;
            }
        }
        if let Some(st) = &self.standardization {
            for (j, &v) in st.mean.iter().enumerate() {
                finite(format!("standardization mean {}", j + 1), v)?;
            }
            for (j, &v) in st.std.iter().enumerate() {
                finite(format!("standardization std {}", j + 1), v)?;
                if v <= 0.0 {
                    return Err(WeightsError::new(
                        Code::F12,
                        name,
                        format!(
                            "standardization std {} is {}, it must be > 0",
                            j + 1,
                            json_number(v)
                        ),
                    ));
                }
            }
        }
        if let Some(p) = &self.provenance {
            finite("provenance `train_cost`".to_string(), p.train_cost)?;
            if let Some(v) = p.validation_cost {
                finite("provenance `validation_cost`".to_string(), v)?;
            }
        }
        Ok(())
    }

    /// Calls `f` on every stored value with a description of its place.
    fn for_each_value(&mut self, mut f: impl FnMut(&dyn fmt::Display, &mut f64)) {
        for l in &mut self.layers {
            for (j, row) in l.weights.iter_mut().enumerate() {
                for (k, v) in row.iter_mut().enumerate() {
                    f(
                        &format_args!("layer `{}` weight row {} column {}", l.name, j + 1, k + 1),
                        v,
                    );
                }
            }
            for (j, v) in l.bias.iter_mut().enumerate() {
                f(&format_args!("layer `{}` bias {}", l.name, j + 1), v);
            }
        }
        if let Some(st) = &mut self.standardization {
            for (j, v) in st.mean.iter_mut().enumerate() {
                f(&format_args!("standardization mean {}", j + 1), v);
            }
            for (j, v) in st.std.iter_mut().enumerate() {
                f(&format_args!("standardization std {}", j + 1), v);
            }
        }
    }
}

/// The fields read in the first pass of [`Weights::from_json`]; everything else is skipped.
#[derive(Deserialize)]
#[serde(expecting = "a JSON object")]
struct Head {
    format: Option<serde_json::Value>,
    version: Option<serde_json::Value>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a weights object")]
struct FileForm {
    #[allow(dead_code)]
    format: String,
    #[allow(dead_code)]
    version: u64,
    model: String,
    fingerprint: String,
    scalar: ScalarForm,
    layers: Vec<LayerForm>,
    standardization: Option<StandardizationForm>,
    provenance: Option<ProvenanceForm>,
}

#[derive(Deserialize)]
#[serde(rename_all = "lowercase")]
enum ScalarForm {
    F32,
    F64,
}

#[derive(Deserialize)]
#[serde(
    deny_unknown_fields,
    expecting = "a layer object with `name`, `weights` and `bias`"
)]
struct LayerForm {
    name: String,
    weights: Vec<Vec<f64>>,
    bias: Vec<f64>,
}

#[derive(Deserialize)]
#[serde(
    deny_unknown_fields,
    expecting = "null or an object with `mean` and `std`"
)]
struct StandardizationForm {
    mean: Vec<f64>,
    std: Vec<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "null or a provenance object")]
struct ProvenanceForm {
    optimizer: String,
    epochs: u64,
    train_cost: f64,
    validation_cost: Option<f64>,
    data_file_hash: String,
    data_file: String,
}

fn parse_fingerprint(s: &str) -> Option<u64> {
    if s.len() == 16 && s.bytes().all(|b| b.is_ascii_hexdigit()) {
        u64::from_str_radix(s, 16).ok()
    } else {
        None
    }
}

/// Maps a serde_json error to `F02` (syntax), `F03` (end of file) or `F04` (layout), with its
/// place in the file.
fn json_error(name: &str, e: &serde_json::Error) -> WeightsError {
    let full = e.to_string();
    let suffix = format!(" at line {} column {}", e.line(), e.column());
    let what = full.strip_suffix(&suffix).unwrap_or(&full).to_string();
    let (code, message, help) = match e.classify() {
        serde_json::error::Category::Eof => (
            Code::F03,
            format!("the file ends early ({what}): it is truncated"),
            Some(
                "the file was cut short, perhaps by an interrupted copy; write it again"
                    .to_string(),
            ),
        ),
        serde_json::error::Category::Syntax if what == "number out of range" => (
            Code::F06,
            "a number is too large for an f64 (it would be infinite)".to_string(),
            None,
        ),
        serde_json::error::Category::Syntax => (Code::F02, format!("not valid JSON: {what}"), None),
        serde_json::error::Category::Io => (
            Code::F01,
            format!("cannot read the weights file: {what}"),
            None,
        ),
        serde_json::error::Category::Data => {
            let help = what.starts_with("invalid type: null").then(|| {
                "JSON has no NaN or infinity: a `null` where a number belongs stands for a non-finite value".to_string()
            });
            (
                Code::F04,
                format!("not a weights file of version {VERSION}: {what}"),
                help,
            )
        }
    };
    WeightsError {
        code,
        file: name.to_string(),
        // serde_json counts columns from 1, but reports 0 at the very start of a line.
        location: (e.line() > 0).then(|| (e.line(), e.column().max(1))),
        message,
        help,
    }
}

fn json_str(s: &str) -> String {
    // Serializing a string cannot fail.
    serde_json::to_string(s).unwrap_or_default()
}

fn json_number(v: f64) -> String {
    // serde_json writes the shortest text that reads back to the same bits (`null` if not
    // finite); serializing an f64 cannot fail.
    serde_json::to_string(&v).unwrap_or_else(|_| "null".to_string())
}

fn json_numbers(v: &[f64]) -> String {
    let items: Vec<String> = v.iter().map(|&x| json_number(x)).collect();
    format!("[{}]", items.join(", "))
}
