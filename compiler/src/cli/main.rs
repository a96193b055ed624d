//! The `sinew` command: parses arguments, calls the library, prints, sets the exit code.
//!
//! Exit codes ([`sinew::code::ExitStatus`]): 0 success, 1 errors in a spec (or data/weights that
//! do not fit it, or a failed gradient check), 2 usage or I/O.

mod args;

use args::{Cli, Command, TrainArgs};
use clap::Parser;
use sinew::code::ExitStatus;
use sinew::commands::{self, CommandError, SpecFile};
use sinew::diag::render;
use sinew::engine::gradcheck::Verdict;
use sinew::engine::train::{EpochReport, Method, TrainOptions};
use sinew::new_firmware::{self as firmware, Dependencies, Firmware, Shape};
use sinew::summary::{table, FileSummary};
use sinew::weights::Weights;
use sinew::workflow::{self, GradcheckOptions, TrainRequest};
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// What a command ends with when it printed everything itself: success, or a status without a
/// further message (a spec with errors in `check`, a failed gradient check).
type Done = Result<Option<ExitStatus>, CommandError>;

fn main() -> ExitCode {
    let result = match Cli::parse().command {
        Command::Check { files, json } => check(&files, json),
        Command::Emit {
            file,
            output,
            unroll_below,
            weights,
        } => emit(&file, output.as_deref(), unroll_below, weights.as_deref()),
        Command::InitialWeights { spec, output, seed } => init(&spec, &output, seed),
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
            json,
        } => grad(&spec, &weights, &data, json),
        Command::Pack {
            spec,
            weights,
            output,
        } => pack(&spec, &weights, &output),
        Command::NewFirmware {
            dir,
            spec,
            weights,
            sinew_path,
            registry,
        } => new_firmware(
            &dir,
            &spec,
            weights.as_deref(),
            sinew_path.as_deref(),
            registry,
        ),
        Command::Gradcheck {
            spec,
            weights,
            data,
            rtol,
            atol,
            step,
            max_per_layer,
        } => {
            let opts = GradcheckOptions {
                step,
                threshold: rtol,
                atol,
                max_per_layer,
                ..Default::default()
            };
            gradcheck(&spec, weights.as_deref(), data.as_deref(), &opts)
        }
    };
    match result {
        Ok(None) => ExitCode::SUCCESS,
        Ok(Some(status)) => ExitCode::from(status.code()),
        Err(e) => {
            print_error(&e);
            ExitCode::from(e.exit_status().code())
        }
    }
}

fn print_error(e: &CommandError) {
    let text = e.to_string();
    if !text.is_empty() {
        eprintln!("{text}");
    }
}

fn print_diagnostics(spec: &SpecFile) {
    let diags = &spec.checked.diagnostics;
    if !diags.is_empty() {
        let color = std::io::stderr().is_terminal();
        eprint!("{}", render(&spec.name, &spec.src, diags, color));
    }
}

/// Reads and checks a spec, printing its diagnostics.
fn spec_of(path: &Path) -> Result<SpecFile, CommandError> {
    let spec = SpecFile::read(path)?;
    print_diagnostics(&spec);
    spec.model()?;
    Ok(spec)
}

fn check(files: &[PathBuf], json: bool) -> Done {
    let mut worst: Option<ExitStatus> = None;
    let mut worsen = |s: ExitStatus| {
        if worst.is_none_or(|w| w.code() < s.code()) {
            worst = Some(s);
        }
    };
    let mut specs = Vec::new();
    for path in files {
        match SpecFile::read(path) {
            Ok(spec) => specs.push(spec),
            Err(e) => {
                print_error(&e);
                worsen(e.exit_status());
            }
        }
    }
    let mut summaries = Vec::new();
    for spec in &specs {
        let (name, diags) = (spec.name.as_str(), &spec.checked.diagnostics);
        let summary = FileSummary::new(name, &spec.src, spec.checked.model.as_ref(), diags);
        if !summary.ok {
            worsen(ExitStatus::Spec);
        }
        if json {
            summaries.push(summary);
            continue;
        }
        print_diagnostics(spec);
        match &spec.checked.model {
            Some(m) => println!("{name}: ok\n{}", table(m)),
            None => {
                let n = diags.iter().filter(|d| d.is_error()).count();
                eprintln!("{name}: {n} error{}", if n == 1 { "" } else { "s" });
            }
        }
    }
    if json {
        println!("{}", commands::json(&summaries)?);
    }
    Ok(worst)
}

fn emit(file: &Path, output: Option<&Path>, unroll_below: usize, weights: Option<&Path>) -> Done {
    let spec = spec_of(file)?;
    let code = commands::emit(spec.model()?, file, weights, unroll_below)?;
    match output {
        None => print!("{code}"),
        Some(out) => commands::write_output(out, code.as_bytes())?,
    }
    Ok(None)
}

fn init(spec: &Path, output: &Path, seed: Option<u64>) -> Done {
    let spec = spec_of(spec)?;
    let model = spec.model()?;
    commands::save_weights(&workflow::init(model, seed), output)?;
    println!(
        "wrote {} ({} parameters)",
        output.display(),
        model.parameters()
    );
    Ok(None)
}

fn progress_bar(a: &TrainArgs, name: &str, epochs: u32) -> indicatif::ProgressBar {
    if a.quiet {
        return indicatif::ProgressBar::hidden();
    }
    let bar = indicatif::ProgressBar::new(u64::from(epochs));
    bar.set_style(
        indicatif::ProgressStyle::with_template(
            "{prefix} [{bar:30}] epoch {pos}/{len} {msg} ({elapsed})",
        )
        .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar())
        .progress_chars("=> "),
    );
    bar.set_prefix(name.to_string());
    bar
}

fn train(a: &TrainArgs) -> Done {
    let spec = spec_of(&a.spec)?;
    let model = spec.model()?;
    commands::check_split(a.split)?;
    let options = TrainOptions {
        method: a
            .optimizer
            .map(|o| Method::chosen(o.into(), model.train().optimizer)),
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
        start: commands::load_weights(model, a.weights.as_deref())?,
    };
    // The bar appears with the first epoch, so after the data has been read and checked.
    let epochs = a.epochs.unwrap_or(model.train().epochs);
    let mut bar: Option<indicatif::ProgressBar> = None;
    let mut on_epoch = |r: &EpochReport| {
        let bar = bar.get_or_insert_with(|| progress_bar(a, model.name(), epochs));
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
    let outcome = workflow::train(model, &req, &mut on_epoch);
    if let Some(bar) = bar {
        bar.finish_and_clear();
    }
    let outcome = match outcome {
        Ok(o) => o,
        Err(e) => {
            // The cause first, then what it means for the output file.
            let e = CommandError::from(e);
            print_error(&e);
            eprintln!("nothing was written");
            return Ok(Some(e.exit_status()));
        }
    };
    if let Some(plot) = &a.plot {
        commands::create_parent(plot)?;
        let title = format!("{} training", model.name());
        let note = sinew::plot::cost_curves(&outcome.summary.history, &title, plot)
            .map_err(CommandError::Usage)?;
        if let Some(n) = note {
            eprintln!("note: {n}");
        }
    }
    commands::save_weights(&outcome.weights, &a.output)?;
    print!("{}", sinew::summary::training(model, &outcome));
    for finding in &outcome.advice {
        eprintln!(
            "{}: warning[{}]: {finding}\n  = help: {}",
            a.data.display(),
            finding.code(),
            finding.help()
        );
    }
    println!("wrote {}", a.output.display());
    if let Some(plot) = &a.plot {
        println!("plotted {}", plot.display());
    }
    Ok(None)
}

fn eval(spec: &Path, weights: &Path, data: &Path, json: bool) -> Done {
    let spec = spec_of(spec)?;
    let model = spec.model()?;
    let w = Weights::load_checked(weights, model)?;
    let e = workflow::evaluate(model, &w, data)?;
    if json {
        println!("{}", commands::json(&e)?);
    } else {
        print!("{}", sinew::summary::evaluation(model, &e));
    }
    Ok(None)
}

fn grad(spec: &Path, weights: &Path, data: &Path, json: bool) -> Done {
    let spec = spec_of(spec)?;
    let model = spec.model()?;
    let w = Weights::load_checked(weights, model)?;
    let g = workflow::gradient(model, &w, data)?;
    if json {
        println!("{}", commands::json(&g.to_json())?);
    } else {
        print!("{}", sinew::summary::gradient(model, &g));
    }
    Ok(None)
}

fn gradcheck(
    spec: &Path,
    weights: Option<&Path>,
    data: Option<&Path>,
    opts: &GradcheckOptions,
) -> Done {
    let spec = spec_of(spec)?;
    let model = spec.model()?;
    let w = commands::load_weights(model, weights)?;
    let outcome = workflow::gradcheck(model, w.as_ref(), data, opts)?;
    print!(
        "{}",
        sinew::summary::gradcheck(model, &outcome, opts.threshold, opts.atol)
    );
    Ok((outcome.verdict == Verdict::Failed).then_some(ExitStatus::Spec))
}

fn pack(spec: &Path, weights: &Path, output: &Path) -> Done {
    let spec = spec_of(spec)?;
    let model = spec.model()?;
    let p = commands::pack(model, weights, output)?;
    println!(
        "wrote {} ({} bytes: {} {} values, fingerprint 0x{:016x}, crc-32 0x{:08x})",
        output.display(),
        p.bytes,
        p.values,
        model.scalar().rust_name(),
        model.fingerprint(),
        p.crc32
    );
    Ok(None)
}

fn new_firmware(
    dir: &Path,
    spec_path: &Path,
    weights: Option<&Path>,
    sinew_path: Option<&Path>,
    registry: bool,
) -> Done {
    // Everything is checked and rendered before anything is written.
    firmware::check_target(dir)?;
    let package = firmware::package_name(dir)?;
    let deps = match (sinew_path, registry) {
        (Some(root), _) => Dependencies::checkout(root)?,
        (None, true) => Dependencies::Registry,
        (None, false) => Dependencies::of_this_build(),
    };
    let spec = SpecFile::read(spec_path)?;
    print_diagnostics(&spec);
    let Some(model) = &spec.checked.model else {
        let n = spec
            .checked
            .diagnostics
            .iter()
            .filter(|d| d.is_error())
            .count();
        let s = if n == 1 { "" } else { "s" };
        eprintln!("error: {} has {n} error{s}; nothing was written", spec.name);
        return Ok(Some(ExitStatus::Spec));
    };
    let weights = match weights {
        None => None,
        Some(w) => {
            Weights::load_checked(w, model)?;
            let bytes = sinew::fsutil::read_limited(w, sinew::fsutil::MAX_WEIGHTS_BYTES).map_err(
                |source| CommandError::Read {
                    path: w.to_path_buf(),
                    source,
                },
            )?;
            Some(bytes)
        }
    };
    let fw = Firmware::new(&package, model, &spec.src, weights.as_deref(), &deps);
    fw.write(dir)?;
    let exposes = match fw.shape {
        Shape::Classes => "decide",
        Shape::Outputs => "predict",
    };
    println!(
        "wrote {} (package {}, model {}: `{exposes}` and `learn`; sinew from {})",
        dir.display(),
        fw.package,
        model.name(),
        deps.describe()
    );
    println!("build it with: cd {} && cargo build", dir.display());
    Ok(None)
}
