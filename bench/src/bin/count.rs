//! Instruction counts per call of every benchmark case under `valgrind --tool=callgrind`, for
//! regression tracking: counts, unlike times, do not move when the machine is busy.
//!
//! `count` re-runs itself under valgrind once per case (`count --run ID ITERS`), collecting only
//! inside [`measured`] (`--toggle-collect`), and prints a markdown table of instructions per call
//! and per sample. `count --list` lists the case ids; `count FILTER` counts the cases whose id
//! contains FILTER.

// The hand-written baselines are kept as a user would write them (indexed loops included).
#![allow(
    clippy::needless_range_loop,
    clippy::neg_cmp_op_on_partial_ord,
    clippy::op_ref
)]
use sinew_bench::cases::{self, Case};
use std::process::Command;

/// The measured region: `iters` calls of the case.
#[inline(never)]
fn measured(case: &mut Case, iters: u64) {
    (case.run)(iters);
}

/// Calls per count: enough to dwarf the per-call setup, few enough to stay quick under valgrind.
fn iters(case: &Case) -> u64 {
    let macs = case.op.macs(case.net) as u64;
    (4_000_000 / macs.max(1)).clamp(2, 2_000)
}

fn main() {
    cases::single_thread();
    let args: Vec<String> = std::env::args().skip(1).collect();
    let mut all = cases::all();
    match args.first().map(String::as_str) {
        Some("--list") => {
            for c in &all {
                println!("{}", c.id());
            }
        }
        Some("--run") => {
            let (Some(id), Some(n)) = (args.get(1), args.get(2).and_then(|n| n.parse().ok()))
            else {
                eprintln!("usage: count --run ID ITERS");
                std::process::exit(2);
            };
            let Some(case) = all.iter_mut().find(|c| &c.id() == id) else {
                eprintln!("no case {id}");
                std::process::exit(2);
            };
            measured(case, n);
        }
        filter => {
            let exe = std::env::current_exe().expect("own path");
            println!("| case | instructions per call | per sample |");
            println!("| --- | ---: | ---: |");
            for case in all
                .iter()
                .filter(|c| filter.is_none_or(|f| c.id().contains(f)))
            {
                let n = iters(case);
                let out = Command::new("valgrind")
                    .args([
                        "--tool=callgrind",
                        "--callgrind-out-file=/dev/null",
                        "--toggle-collect=*count*measured*",
                    ])
                    .arg(&exe)
                    .args(["--run", &case.id(), &n.to_string()])
                    .output();
                let out = match out {
                    Ok(o) => o,
                    Err(e) => {
                        eprintln!(
                            "cannot run valgrind ({e}); install it: apt-get install -y valgrind"
                        );
                        std::process::exit(1);
                    }
                };
                let text = String::from_utf8_lossy(&out.stderr);
                let collected = text
                    .lines()
                    .find_map(|l| l.split("Collected :").nth(1))
                    .and_then(|v| v.trim().parse::<u64>().ok());
                match collected {
                    Some(ir) => {
                        let per_call = ir / n;
                        println!(
                            "| {} | {} | {} |",
                            case.id(),
                            per_call,
                            per_call / case.op.samples() as u64
                        );
                    }
                    None => println!("| {} | (valgrind failed: {}) | |", case.id(), text.trim()),
                }
            }
        }
    }
}
