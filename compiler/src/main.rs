//! The `sinew` command: parses arguments, calls the library, prints, sets the exit code.
//!
//! Exit codes: 0 success, 1 errors in a spec (or data/weights that do not fit it), 2 usage or I/O.

use clap::{Parser, Subcommand};
use sinew::diag::{render, Diagnostic};
use sinew::engine::train::{EpochReport, Method, TrainOptions};
use sinew::ir::{defaults, Model, Optimizer};
use sinew::summary::{table, FileSummary};
use sinew::weights::Weights;
use sinew::workflow::{self, GradcheckOptions, TrainRequest, WorkflowError};
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

#[derive(Parser)]
#[command(
    name = "sinew",
    version,
    about = "Compile small neural networks to fixed-size no_std Rust"
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Check spec files: print every diagnostic, then a summary of each model.
    Check {
        /// Spec files.
        #[arg(required = true)]
        files: Vec<PathBuf>,
        /// Print summaries and diagnostics as JSON on stdout.
        #[arg(long)]
        json: bool,
    },
    /// Generate the Rust module of one spec.
    Emit {
        /// Spec file.
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
    Init {
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
        /// CSV data file.
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
        /// CSV data file.
        #[arg(long)]
        data: PathBuf,
        /// Print JSON (the only form).
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
    /// Compare backprop with central finite differences, layer by layer.
    Gradcheck {
        /// Spec file.
        spec: PathBuf,
        /// Weights file (default: the spec's initial parameters).
        #[arg(long)]
        weights: Option<PathBuf>,
        /// CSV data file (default: a few drawn samples).
        #[arg(long)]
        data: Option<PathBuf>,
        /// Relative tolerance.
        #[arg(long, default_value_t = 1e-6)]
        threshold: f64,
        /// Absolute tolerance (the noise floor of the difference quotient).
        #[arg(long, default_value_t = 1e-9)]
        atol: f64,
        /// Finite-difference step.
        #[arg(long, default_value_t = 1e-5)]
        step: f64,
        /// Check at most this many parameters per layer (drawn at random beyond it).
        #[arg(long, default_value_t = 200)]
        max_per_layer: usize,
    },
}

#[derive(clap::Args)]
struct TrainArgs {
    /// Spec file.
    spec: PathBuf,
    /// CSV data file.
    #[arg(long)]
    data: PathBuf,
    /// Weights file to write.
    #[arg(short, long)]
    output: PathBuf,
    /// Fraction held out for validation (stratified for classifiers).
    #[arg(long, default_value_t = 0.2)]
    split: f64,
    /// Seed of the split and of the mini-batch order.
    #[arg(long, default_value_t = 0)]
    seed: u64,
    /// Epochs instead of the spec's.
    #[arg(long)]
    epochs: Option<u32>,
    /// Learning rate instead of the spec's.
    #[arg(long)]
    rate: Option<f64>,
    /// Batch size instead of the spec's.
    #[arg(long)]
    batch: Option<u32>,
    /// Optimizer instead of the spec's.
    #[arg(long, value_enum)]
    optimizer: Option<OptimizerArg>,
    /// Stop after this many epochs without a lower validation cost (keeps the best epoch).
    #[arg(long)]
    patience: Option<u32>,
    /// Start from these weights instead of the spec's initialisation.
    #[arg(long)]
    weights: Option<PathBuf>,
    /// Plot the cost curves to this .svg or .png file.
    #[arg(long)]
    plot: Option<PathBuf>,
    /// No progress bar.
    #[arg(long, short)]
    quiet: bool,
}

#[derive(Clone, Copy, clap::ValueEnum)]
enum OptimizerArg {
    /// Full-batch gradient descent.
    Gd,
    /// Mini-batch SGD (with the spec's momentum, if it trains with sgd).
    Sgd,
    /// Mini-batch Adam.
    Adam,
    /// Full-batch L-BFGS.
    Lbfgs,
}

/// Exit code for errors in a spec.
const SPEC_ERROR: u8 = 1;
/// Exit code for usage and I/O errors.
const IO_ERROR: u8 = 2;

fn main() -> ExitCode {
    let cli = Cli::parse();
    match cli.command {
        Command::Check { files, json } => check(&files, json),
        Command::Emit {
            file,
            output,
            unroll_below,
            weights,
        } => emit(&file, output.as_deref(), unroll_below, weights.as_deref()),
        Command::Init { spec, output, seed } => init(&spec, &output, seed),
        Command::Train(args) => train(&args),
        Command::Eval {
            spec,
            weights,
            data,
            json,
        } => eval(&spec, &weights, &data, json),
        Command::Grad {
            spec,
            weights,
            data,
            json: _,
        } => grad(&spec, &weights, &data),
        Command::Pack {
            spec,
            weights,
            output,
        } => pack(&spec, &weights, &output),
        Command::Gradcheck {
            spec,
            weights,
            data,
            threshold,
            atol,
            step,
            max_per_layer,
        } => {
            let opts = GradcheckOptions {
                step,
                threshold,
                atol,
                max_per_layer,
                ..Default::default()
            };
            gradcheck(&spec, weights.as_deref(), data.as_deref(), &opts)
        }
    }
}

/// Reads and checks a spec, printing its diagnostics; `Err` carries the exit code.
fn model_of(path: &Path) -> Result<Model, ExitCode> {
    let src = read(path)?;
    let name = path.display().to_string();
    let checked = sinew::check_source(&src);
    print_diagnostics(&name, &src, &checked.diagnostics);
    checked.model.ok_or(ExitCode::from(SPEC_ERROR))
}

fn fail(e: &WorkflowError) -> ExitCode {
    eprintln!("{e}");
    match e {
        WorkflowError::Io(_) => ExitCode::from(IO_ERROR),
        WorkflowError::Weights(w) if w.code == "F01" => ExitCode::from(IO_ERROR),
        WorkflowError::Data(d) if d.code == "D01" => ExitCode::from(IO_ERROR),
        _ => ExitCode::from(SPEC_ERROR),
    }
}

/// Creates the folder an output file goes into, as users expect of a command-line tool.
fn ensure_parent(path: &Path) -> Result<(), ExitCode> {
    match path.parent() {
        Some(dir) if !dir.as_os_str().is_empty() => std::fs::create_dir_all(dir).map_err(|e| {
            eprintln!("error: cannot create {}: {e}", dir.display());
            ExitCode::from(IO_ERROR)
        }),
        _ => Ok(()),
    }
}

fn save(w: &Weights, path: &Path) -> Result<(), ExitCode> {
    ensure_parent(path)?;
    w.save(path).map_err(|e| fail(&WorkflowError::Weights(e)))
}

fn init(spec: &Path, output: &Path, seed: Option<u64>) -> ExitCode {
    let model = match model_of(spec) {
        Ok(m) => m,
        Err(code) => return code,
    };
    match save(&workflow::init(&model, seed), output) {
        Ok(()) => {
            println!(
                "wrote {} ({} parameters)",
                output.display(),
                model.parameters()
            );
            ExitCode::SUCCESS
        }
        Err(code) => code,
    }
}

fn train(a: &TrainArgs) -> ExitCode {
    let model = match model_of(&a.spec) {
        Ok(m) => m,
        Err(code) => return code,
    };
    if !(0.0..1.0).contains(&a.split) {
        eprintln!("error: --split must be in [0, 1), found {}", a.split);
        return ExitCode::from(IO_ERROR);
    }
    let start = match &a.weights {
        Some(p) => match workflow::load_weights(&model, p) {
            Ok(w) => Some(w),
            Err(e) => return fail(&e),
        },
        None => None,
    };
    let method = a.optimizer.map(|o| match (o, model.train.optimizer) {
        (OptimizerArg::Gd, spec) => Method::GradientDescent {
            rate: rate_of(spec),
        },
        (OptimizerArg::Sgd, Optimizer::Sgd { rate, momentum }) => {
            Method::MiniBatch(Optimizer::Sgd { rate, momentum })
        }
        (OptimizerArg::Sgd, spec) => Method::MiniBatch(Optimizer::Sgd {
            rate: rate_of(spec),
            momentum: 0.0,
        }),
        (OptimizerArg::Adam, a @ Optimizer::Adam { .. }) => Method::MiniBatch(a),
        (OptimizerArg::Adam, spec) => Method::MiniBatch(Optimizer::Adam {
            rate: rate_of(spec),
            beta1: defaults::BETA1,
            beta2: defaults::BETA2,
            epsilon: defaults::ADAM_EPSILON,
        }),
        (OptimizerArg::Lbfgs, _) => Method::Lbfgs { memory: 7 },
    });
    let options = TrainOptions {
        method,
        rate: a.rate,
        epochs: a.epochs,
        batch: a.batch,
        seed: a.seed,
        patience: a.patience,
    };
    let req = TrainRequest {
        data: &a.data,
        split: a.split,
        seed: a.seed,
        options,
        start,
    };
    let epochs = a.epochs.unwrap_or(model.train.epochs);
    let bar = if a.quiet {
        indicatif::ProgressBar::hidden()
    } else {
        let bar = indicatif::ProgressBar::new(u64::from(epochs));
        bar.set_style(
            indicatif::ProgressStyle::with_template(
                "{prefix} [{bar:30}] epoch {pos}/{len} {msg} ({elapsed})",
            )
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar())
            .progress_chars("=> "),
        );
        bar.set_prefix(model.name.clone());
        bar
    };
    let mut on_epoch = |r: &EpochReport| {
        bar.set_position(u64::from(r.epoch));
        let mut msg = format!("cost {:.5}", r.train_cost);
        if let Some(v) = r.validation_cost {
            msg.push_str(&format!(" val {v:.5}"));
        }
        if let Some(acc) = r.validation_accuracy {
            msg.push_str(&format!(" acc {:.1}%", acc * 100.0));
        }
        bar.set_message(msg);
    };
    let outcome = workflow::train(&model, &req, &mut on_epoch);
    bar.finish_and_clear();
    let outcome = match outcome {
        Ok(o) => o,
        Err(e) => {
            eprintln!("nothing was written");
            return fail(&e);
        }
    };
    if let Some(plot) = &a.plot {
        if let Err(code) = ensure_parent(plot) {
            return code;
        }
        match sinew::plot::cost_curves(
            &outcome.summary.history,
            &format!("{} training", model.name),
            plot,
        ) {
            Ok(note) => {
                if let Some(n) = note {
                    eprintln!("note: {n}");
                }
            }
            Err(e) => {
                eprintln!("error: {e}");
                return ExitCode::from(IO_ERROR);
            }
        }
    }
    if let Err(code) = save(&outcome.weights, &a.output) {
        return code;
    }
    print!("{}", sinew::summary::training(&model, &outcome));
    println!("wrote {}", a.output.display());
    if let Some(plot) = &a.plot {
        println!("plotted {}", plot.display());
    }
    ExitCode::SUCCESS
}

fn rate_of(o: Optimizer) -> f64 {
    match o {
        Optimizer::Sgd { rate, .. } | Optimizer::Adam { rate, .. } => rate,
    }
}

fn eval(spec: &Path, weights: &Path, data: &Path, json: bool) -> ExitCode {
    let model = match model_of(spec) {
        Ok(m) => m,
        Err(code) => return code,
    };
    let result =
        workflow::load_weights(&model, weights).and_then(|w| workflow::evaluate(&model, &w, data));
    match result {
        Ok(e) if json => match serde_json::to_string_pretty(&e) {
            Ok(t) => {
                println!("{t}");
                ExitCode::SUCCESS
            }
            Err(err) => {
                eprintln!("error: cannot encode JSON: {err}");
                ExitCode::from(IO_ERROR)
            }
        },
        Ok(e) => {
            print!("{}", sinew::summary::evaluation(&model, &e));
            ExitCode::SUCCESS
        }
        Err(e) => fail(&e),
    }
}

fn grad(spec: &Path, weights: &Path, data: &Path) -> ExitCode {
    let model = match model_of(spec) {
        Ok(m) => m,
        Err(code) => return code,
    };
    let result = workflow::load_weights(&model, weights)
        .and_then(|w| workflow::gradient_json(&model, &w, data));
    match result.map(|v| serde_json::to_string_pretty(&v)) {
        Ok(Ok(t)) => {
            println!("{t}");
            ExitCode::SUCCESS
        }
        Ok(Err(err)) => {
            eprintln!("error: cannot encode JSON: {err}");
            ExitCode::from(IO_ERROR)
        }
        Err(e) => fail(&e),
    }
}

fn gradcheck(
    spec: &Path,
    weights: Option<&Path>,
    data: Option<&Path>,
    opts: &GradcheckOptions,
) -> ExitCode {
    let model = match model_of(spec) {
        Ok(m) => m,
        Err(code) => return code,
    };
    let w = match weights
        .map(|p| workflow::load_weights(&model, p))
        .transpose()
    {
        Ok(w) => w,
        Err(e) => return fail(&e),
    };
    let checks = match workflow::gradcheck(&model, w.as_ref(), data, opts) {
        Ok(c) => c,
        Err(e) => return fail(&e),
    };
    let (text, ok) = sinew::summary::gradcheck(&model, &checks, opts.threshold, opts.atol);
    print!("{text}");
    if ok {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(SPEC_ERROR)
    }
}

fn pack(spec: &Path, weights: &Path, output: &Path) -> ExitCode {
    let model = match model_of(spec) {
        Ok(m) => m,
        Err(code) => return code,
    };
    let w = match workflow::load_weights(&model, weights) {
        Ok(w) => w,
        Err(e) => return fail(&e),
    };
    let blob = match sinew::pack::encode(&model, &w) {
        Ok(b) => b,
        Err(e) => {
            eprintln!("{e}");
            return ExitCode::from(SPEC_ERROR);
        }
    };
    if let Err(e) = sinew::pack::write(output, &blob) {
        eprintln!("{e}");
        return ExitCode::from(IO_ERROR);
    }
    println!(
        "wrote {} ({} bytes: {} {} values, fingerprint 0x{:016x}, crc-32 0x{:08x})",
        output.display(),
        blob.len(),
        sinew::pack::value_count(&model),
        model.scalar.rust_name(),
        model.fingerprint(),
        sinew::pack::crc32(blob.get(..blob.len().saturating_sub(4)).unwrap_or(&[]))
    );
    ExitCode::SUCCESS
}

fn read(path: &Path) -> Result<String, ExitCode> {
    sinew::fsutil::read_limited(path, sinew::fsutil::MAX_SPEC_BYTES)
        .map(|bytes| String::from_utf8_lossy(&bytes).into_owned())
        .map_err(|e| {
            eprintln!("error: cannot read {}: {e}", path.display());
            ExitCode::from(IO_ERROR)
        })
}

fn print_diagnostics(name: &str, src: &str, diags: &[Diagnostic]) {
    if !diags.is_empty() {
        eprint!(
            "{}",
            render(name, src, diags, std::io::stderr().is_terminal())
        );
    }
}

fn check(files: &[PathBuf], json: bool) -> ExitCode {
    let mut worst = 0u8;
    let mut summaries = Vec::new();
    let mut sources = Vec::new();
    for path in files {
        match read(path) {
            Ok(src) => sources.push((path.display().to_string(), src)),
            Err(_) => {
                worst = IO_ERROR;
                continue;
            }
        }
    }
    let checked: Vec<_> = sources
        .iter()
        .map(|(_, src)| sinew::check_source(src))
        .collect();
    for ((name, src), c) in sources.iter().zip(&checked) {
        let summary = FileSummary::new(name, c.model.as_ref(), &c.diagnostics);
        if !summary.ok {
            worst = worst.max(SPEC_ERROR);
        }
        if json {
            summaries.push(summary);
        } else {
            print_diagnostics(name, src, &c.diagnostics);
            match &c.model {
                Some(m) => println!("{name}: ok\n{}", table(m)),
                None => {
                    let n = c.diagnostics.iter().filter(|d| d.is_error()).count();
                    eprintln!("{name}: {n} error{}", if n == 1 { "" } else { "s" });
                }
            }
        }
    }
    if json {
        match serde_json::to_string_pretty(&summaries) {
            Ok(text) => println!("{text}"),
            Err(e) => {
                eprintln!("error: cannot encode JSON: {e}");
                return ExitCode::from(IO_ERROR);
            }
        }
    }
    ExitCode::from(worst)
}

fn emit(
    file: &Path,
    output: Option<&Path>,
    unroll_below: usize,
    weights: Option<&Path>,
) -> ExitCode {
    let name = file.display().to_string();
    let src = match read(file) {
        Ok(s) => s,
        Err(code) => return code,
    };
    let checked = sinew::check_source(&src);
    print_diagnostics(&name, &src, &checked.diagnostics);
    let Some(model) = checked.model else {
        return ExitCode::from(SPEC_ERROR);
    };
    let baked = match weights
        .map(|p| workflow::load_weights(&model, p))
        .transpose()
    {
        Ok(w) => w.as_ref().map(workflow::baked),
        Err(e) => return fail(&e),
    };
    let options = sinew::emit::EmitOptions {
        weights: baked,
        spec_name: file
            .file_name()
            .map(|f| f.to_string_lossy().into_owned())
            .unwrap_or_else(|| name.clone()),
        unroll_below,
    };
    let code = sinew::emit::generate(&model, &options);
    match output {
        None => {
            print!("{code}");
            ExitCode::SUCCESS
        }
        Some(out) => match ensure_parent(out)
            .map(|()| sinew::fsutil::write_if_changed(out, code.as_bytes()))
        {
            Err(code) => code,
            Ok(r) => match r {
                Ok(_) => ExitCode::SUCCESS,
                Err(e) => {
                    eprintln!("error: cannot write {}: {e}", out.display());
                    ExitCode::from(IO_ERROR)
                }
            },
        },
    }
}
