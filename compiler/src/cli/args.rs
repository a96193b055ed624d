//! The command line: subcommands, their arguments and their defaults.

use clap::{Parser, Subcommand};
use sinew::engine::train::MethodChoice;
use std::path::PathBuf;

#[derive(Parser)]
#[command(
    name = "sinew",
    version,
    about = "Compile small neural networks to fixed-size no_std Rust"
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Subcommand)]
pub enum Command {
    /// Check spec files: print every diagnostic, then a summary of each model.
    Check {
        /// Spec files.
        #[arg(value_name = "SPEC", required = true)]
        files: Vec<PathBuf>,
        /// Print summaries and diagnostics as JSON on stdout.
        #[arg(long)]
        json: bool,
    },
    /// Generate the Rust module of one spec.
    Emit {
        /// Spec file.
        #[arg(value_name = "SPEC")]
        file: PathBuf,
        /// Write to this file instead of stdout (replaced atomically, only when it changes).
        #[arg(short, long)]
        output: Option<PathBuf>,
        /// Fully unroll layers with fewer than this many weights (0: never).
        #[arg(long, default_value_t = 0)]
        unroll_below: usize,
        /// Bake these trained parameters into the module as `TRAINED`.
        #[arg(long)]
        weights: Option<PathBuf>,
    },
    /// Write the spec's initial parameters (its `init` and `seed`) as a weights file.
    InitialWeights {
        /// Spec file.
        spec: PathBuf,
        /// Weights file to write.
        #[arg(short, long)]
        output: PathBuf,
        /// Seed instead of the spec's.
        #[arg(long)]
        seed: Option<u64>,
    },
    /// Train on a CSV file and write the weights.
    Train(TrainArgs),
    /// Evaluate weights on a CSV file.
    Eval {
        /// Spec file.
        spec: PathBuf,
        /// Weights file.
        #[arg(long)]
        weights: PathBuf,
        /// CSV data file; `-` reads standard input; gzip data is decompressed.
        #[arg(long)]
        data: PathBuf,
        /// Print the figures as JSON.
        #[arg(long)]
        json: bool,
    },
    /// Print the batch cost and the gradient of every parameter over a CSV file.
    Grad {
        /// Spec file.
        spec: PathBuf,
        /// Weights file.
        #[arg(long)]
        weights: PathBuf,
        /// CSV data file; `-` reads standard input; gzip data is decompressed.
        #[arg(long)]
        data: PathBuf,
        /// Print every derivative as JSON (without it: the cost and, per layer, the largest
        /// derivative and the norm).
        #[arg(long)]
        json: bool,
    },
    /// Write trained weights as a device weight blob (see the language reference).
    Pack {
        /// Spec file.
        spec: PathBuf,
        /// Weights file.
        #[arg(long)]
        weights: PathBuf,
        /// Blob file to write (replaced atomically; its folder is created).
        #[arg(short, long)]
        output: PathBuf,
    },
    /// Write a ready no_std firmware crate around a spec: Cargo.toml, build.rs, src/lib.rs and
    /// models/ with a copy of the spec (and of the weights).
    NewFirmware {
        /// Folder of the new crate: created, or empty; its last component names the package.
        #[arg(value_name = "DIR")]
        dir: PathBuf,
        /// Spec file (must check without errors).
        #[arg(long, value_name = "SPEC")]
        spec: PathBuf,
        /// Trained weights to bake in as `TRAINED` (checked against the spec).
        #[arg(long, value_name = "W.json")]
        weights: Option<PathBuf>,
        /// Path dependencies on this sinew checkout (the folder holding compiler/ and runtime/)
        /// instead of the one this binary was built from.
        #[arg(long, value_name = "DIR", conflicts_with = "registry")]
        sinew_path: Option<PathBuf>,
        /// Registry dependencies ("0.1") even when the checkout this binary was built from
        /// exists.
        #[arg(long)]
        registry: bool,
    },
    /// Compare backprop with central finite differences, layer by layer.
    Gradcheck {
        /// Spec file.
        spec: PathBuf,
        /// Weights file (default: the spec's initial parameters).
        #[arg(long)]
        weights: Option<PathBuf>,
        /// CSV data file, `-` for standard input, plain or gzip (default: a few drawn samples).
        #[arg(long)]
        data: Option<PathBuf>,
        /// Relative tolerance.
        #[arg(long, default_value = "1e-6")]
        rtol: f64,
        /// Absolute tolerance (the noise floor of the difference quotient).
        #[arg(long, default_value = "1e-9")]
        atol: f64,
        /// Finite-difference step.
        #[arg(long, default_value = "1e-5")]
        step: f64,
        /// Check at most this many parameters per layer (drawn at random beyond it).
        #[arg(long, default_value_t = 200)]
        max_per_layer: usize,
    },
}

#[derive(clap::Args)]
pub struct TrainArgs {
    /// Spec file.
    pub spec: PathBuf,
    /// CSV data file; `-` reads standard input; gzip data is decompressed.
    #[arg(long)]
    pub data: PathBuf,
    /// Weights file to write.
    #[arg(short, long)]
    pub output: PathBuf,
    /// Fraction held out for validation (stratified for classifiers).
    #[arg(long, default_value_t = 0.2)]
    pub split: f64,
    /// Seed of the split and of the mini-batch order.
    #[arg(long, default_value_t = 0)]
    pub seed: u64,
    /// Epochs instead of the spec's.
    #[arg(long)]
    pub epochs: Option<u32>,
    /// Learning rate instead of the spec's.
    #[arg(long)]
    pub rate: Option<f64>,
    /// Batch size instead of the spec's.
    #[arg(long)]
    pub batch: Option<u32>,
    /// Optimizer instead of the spec's.
    #[arg(long, value_enum)]
    pub optimizer: Option<OptimizerArg>,
    /// Stop after this many epochs without a lower validation cost (keeps the best epoch).
    #[arg(long)]
    pub patience: Option<u32>,
    /// Start from these weights instead of the spec's initialisation.
    #[arg(long)]
    pub weights: Option<PathBuf>,
    /// Plot the cost curves to this .svg or .png file.
    #[arg(long)]
    pub plot: Option<PathBuf>,
    /// No progress bar.
    #[arg(long, short)]
    pub quiet: bool,
}

/// The `--optimizer` values, one per [`MethodChoice`].
#[derive(Clone, Copy, clap::ValueEnum)]
pub enum OptimizerArg {
    /// Full-batch gradient descent.
    Gd,
    /// Mini-batch SGD (with the spec's momentum, if it trains with sgd).
    Sgd,
    /// Mini-batch Adam.
    Adam,
    /// Full-batch L-BFGS.
    Lbfgs,
}

impl From<OptimizerArg> for MethodChoice {
    fn from(o: OptimizerArg) -> Self {
        match o {
            OptimizerArg::Gd => MethodChoice::GradientDescent,
            OptimizerArg::Sgd => MethodChoice::Sgd,
            OptimizerArg::Adam => MethodChoice::Adam,
            OptimizerArg::Lbfgs => MethodChoice::Lbfgs,
        }
    }
}
