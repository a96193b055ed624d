//! The `sinew` command: parses arguments, calls the library, prints, sets the exit code.
//!
//! Exit codes: 0 success, 1 errors in a spec (or data/weights that do not fit it), 2 usage or I/O.

use clap::{Parser, Subcommand};
use sinew::diag::{render, Diagnostic};
use sinew::summary::{table, FileSummary};
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

#[derive(Parser)]
#[command(name = "sinew", version, about = "Compile small neural networks to fixed-size no_std Rust")]
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
    },
}

/// Exit code for errors in a spec.
const SPEC_ERROR: u8 = 1;
/// Exit code for usage and I/O errors.
const IO_ERROR: u8 = 2;

fn main() -> ExitCode {
    let cli = Cli::parse();
    match cli.command {
        Command::Check { files, json } => check(&files, json),
        Command::Emit { file, output, unroll_below } => emit(&file, output.as_deref(), unroll_below),
    }
}

fn read(path: &Path) -> Result<String, ExitCode> {
    std::fs::read(path)
        .map(|bytes| String::from_utf8_lossy(&bytes).into_owned())
        .map_err(|e| {
            eprintln!("error: cannot read {}: {e}", path.display());
            ExitCode::from(IO_ERROR)
        })
}

fn print_diagnostics(name: &str, src: &str, diags: &[Diagnostic]) {
    if !diags.is_empty() {
        eprint!("{}", render(name, src, diags, std::io::stderr().is_terminal()));
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
    let checked: Vec<_> = sources.iter().map(|(_, src)| sinew::check_source(src)).collect();
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

fn emit(file: &Path, output: Option<&Path>, unroll_below: usize) -> ExitCode {
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
    let options = sinew::emit::EmitOptions {
        spec_name: file
            .file_name()
            .map(|f| f.to_string_lossy().into_owned())
            .unwrap_or_else(|| name.clone()),
        unroll_below,
        ..Default::default()
    };
    let code = sinew::emit::generate(&model, &options);
    match output {
        None => {
            print!("{code}");
            ExitCode::SUCCESS
        }
        Some(out) => match sinew::fsutil::write_if_changed(out, code.as_bytes()) {
            Ok(_) => ExitCode::SUCCESS,
            Err(e) => {
                eprintln!("error: cannot write {}: {e}", out.display());
                ExitCode::from(IO_ERROR)
            }
        },
    }
}
