//! Prints the benchmark results as markdown: one table per build (ns per call, ns per sample,
//! GFLOP/s, % of the core's peak, ratio to nalgebra), numpy's figures, the goals of the
//! performance issue as met or missed, and the compile-time figures.
//!
//! ```text
//! table [--build LABEL=TARGET_DIR]... [--numpy FILE.json] [--compile]
//! ```
//!
//! Each `--build` names a target folder whose `criterion/` holds a run of `benches/nets.rs`
//! (`bash bench/run.sh` makes them). `--compile` also times emission and the release build of
//! the generated N3 module.

// The hand-written baselines are kept as a user would write them (indexed loops included).
#![allow(
    clippy::needless_range_loop,
    clippy::neg_cmp_op_on_partial_ord,
    clippy::op_ref
)]
use serde_json::Value;
use sinew_bench::cases::{describe, Op, IMPLS};
use sinew_bench::{Shape, BATCH, SHAPES};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// The core clock in GHz, measured: a chain of dependent 64-bit integer multiplications, whose
/// latency is 3 cycles on every x86-64 core of the last decade (common practice: the vendors'
/// optimization manuals). Additions with an immediate are not used: recent cores can fold a
/// chain of them and retire several per cycle.
#[cfg(target_arch = "x86_64")]
fn clock_ghz() -> f64 {
    let mut best = f64::MAX;
    for _ in 0..5 {
        let n: u64 = 20_000_000;
        let t = Instant::now();
        // SAFETY: register-only arithmetic on two scratch registers; no memory, no stack.
        unsafe {
            std::arch::asm!(
                "2:",
                "imul {a}, {a}", "imul {a}, {a}", "imul {a}, {a}", "imul {a}, {a}",
                "imul {a}, {a}", "imul {a}, {a}", "imul {a}, {a}", "imul {a}, {a}",
                "imul {a}, {a}", "imul {a}, {a}",
                "sub {n}, 1",
                "jnz 2b",
                a = inout(reg) 3u64 => _,
                n = inout(reg) n => _,
                options(nomem, nostack),
            );
        }
        best = best.min(t.elapsed().as_secs_f64() / (3.0 * 10.0 * n as f64));
    }
    1e-9 / best
}

#[cfg(not(target_arch = "x86_64"))]
fn clock_ghz() -> f64 {
    f64::NAN
}

fn cpuinfo(key: &str) -> Option<String> {
    let text = std::fs::read_to_string("/proc/cpuinfo").ok()?;
    text.lines()
        .find(|l| l.starts_with(key))
        .and_then(|l| l.split(':').nth(1))
        .map(|v| v.trim().to_string())
}

fn has_flag(flag: &str) -> bool {
    cpuinfo("flags").is_some_and(|f| f.split_whitespace().any(|x| x == flag))
}

/// f32 lanes of the widest vector unit the build may use.
fn lanes(label: &str) -> usize {
    if label == "native" && has_flag("avx512f") {
        16
    } else {
        8
    }
}

/// Criterion's median time per call in ns.
fn median(dir: &Path, net: &str, op: Op, imp: &str) -> Option<f64> {
    let f = dir
        .join("criterion")
        .join(format!("{net}_{}", op.name()))
        .join(imp)
        .join("new/estimates.json");
    let v: Value = serde_json::from_str(&std::fs::read_to_string(f).ok()?).ok()?;
    v["median"]["point_estimate"].as_f64()
}

struct Build {
    label: String,
    times: BTreeMap<(String, &'static str, &'static str), f64>,
}

impl Build {
    fn get(&self, net: &str, op: Op, imp: &str) -> Option<f64> {
        self.times
            .get(&(net.to_string(), op.name(), imp_static(imp)))
            .copied()
    }
}

fn imp_static(imp: &str) -> &'static str {
    IMPLS
        .iter()
        .map(|(i, _)| *i)
        .find(|i| *i == imp)
        .unwrap_or("?")
}

fn load(label: &str, dir: &Path) -> Build {
    let mut times = BTreeMap::new();
    for s in SHAPES {
        for op in Op::ALL {
            for (imp, _) in IMPLS {
                if let Some(t) = median(dir, s.name, op, imp) {
                    times.insert((s.name.to_string(), op.name(), imp), t);
                }
            }
        }
    }
    Build {
        label: label.to_string(),
        times,
    }
}

fn fmt_ns(ns: f64) -> String {
    if ns >= 1e6 {
        format!("{:.2} ms", ns / 1e6)
    } else if ns >= 1e4 {
        format!("{:.1} us", ns / 1e3)
    } else if ns >= 1e3 {
        format!("{:.2} us", ns / 1e3)
    } else {
        format!("{ns:.1} ns")
    }
}

fn print_build(b: &Build, peak: f64, numpy: Option<&Value>) {
    println!(
        "\n### Build `{}` (peak assumed {peak:.0} GFLOP/s)\n",
        b.label
    );
    println!("| net | operation | implementation | per call | per sample | GFLOP/s | % of peak | vs nalgebra (b) |");
    println!("| --- | --- | --- | ---: | ---: | ---: | ---: | ---: |");
    for s in SHAPES {
        for op in Op::ALL {
            let base = b.get(s.name, op, "nalgebra");
            for (imp, _) in IMPLS {
                let Some(t) = b.get(s.name, op, imp) else {
                    continue;
                };
                let desc = describe(s, imp);
                let gflops = 2.0 * op.macs(s) as f64 / t;
                let ratio = base.map_or("".to_string(), |bt| format!("{:.2}x", t / bt));
                println!(
                    "| {} | {} | {desc} | {} | {} | {gflops:.2} | {:.1}% | {ratio} |",
                    s.name,
                    op.name(),
                    fmt_ns(t),
                    fmt_ns(t / op.samples() as f64),
                    100.0 * gflops / peak
                );
            }
            if let Some(np) = numpy {
                numpy_rows(s, op, np, base, peak);
            }
        }
    }
}

/// numpy's figures for (s, op) as extra rows: ns per call of the same operation.
fn numpy_rows(s: Shape, op: Op, np: &Value, base: Option<f64>, peak: f64) {
    let net = &np["nets"][s.name];
    let rows: Vec<(&str, f64, usize)> = match op {
        Op::Inference => vec![
            (
                "numpy, one sample",
                net["inference_single_ns"].as_f64().unwrap_or(f64::NAN),
                1,
            ),
            (
                "numpy, 256 samples batched (per sample)",
                net["inference_batched_ns_per_sample"]
                    .as_f64()
                    .unwrap_or(f64::NAN),
                1,
            ),
        ],
        Op::Backprop => vec![],
        Op::Batch => vec![(
            "numpy, batched gradient",
            net["batch_gradient_ns"].as_f64().unwrap_or(f64::NAN),
            BATCH,
        )],
    };
    for (desc, t, samples) in rows {
        if !t.is_finite() {
            continue;
        }
        let macs = if samples == 1 {
            op.macs(s) / op.samples()
        } else {
            op.macs(s)
        };
        let gflops = 2.0 * macs as f64 / t;
        let ratio = base.map_or("".to_string(), |bt| {
            format!("{:.2}x", t / (bt / (op.samples() / samples) as f64))
        });
        println!(
            "| {} | {} | {desc} | {} | {} | {gflops:.2} | {:.1}% | {ratio} |",
            s.name,
            op.name(),
            fmt_ns(t),
            fmt_ns(t / samples as f64),
            100.0 * gflops / peak
        );
    }
}

/// One goal line: description, measured value, bound, met.
fn goal(desc: String, value: Option<f64>, want: &str, met: impl Fn(f64) -> bool) {
    match value {
        Some(v) => println!(
            "| {desc} | {v:.2} | {want} | {} |",
            if met(v) { "met" } else { "**missed**" }
        ),
        None => println!("| {desc} | n/a | {want} | not measured |"),
    }
}

fn print_goals(b: &Build, numpy: Option<&Value>) {
    println!("\n#### Goals, build `{}`\n", b.label);
    println!("| goal | measured | bound | status |");
    println!("| --- | ---: | ---: | --- |");
    let r = |net: &str, op: Op, a: &str, c: &str| Some(b.get(net, op, a)? / b.get(net, op, c)?);
    for (net, bound) in [("n1", 0.5), ("n2", 0.5), ("n3", 0.4)] {
        goal(
            format!("{net} inference, generated / nalgebra"),
            r(net, Op::Inference, "generated", "nalgebra"),
            &format!("<= {bound}"),
            |v| v <= bound,
        );
    }
    for net in ["n1", "n2"] {
        for imp in ["generated", "engine"] {
            goal(
                format!("{net} batch gradient, nalgebra / {imp} (speed-up per sample)"),
                r(net, Op::Batch, "nalgebra", imp),
                ">= 3",
                |v| v >= 3.0,
            );
        }
    }
    for net in ["n2", "n3"] {
        for imp in ["generated", "engine"] {
            let np = numpy.and_then(|n| n["nets"][net]["batch_gradient_ns"].as_f64());
            goal(
                format!("{net} batch gradient, {imp} / numpy"),
                b.get(net, Op::Batch, imp).zip(np).map(|(a, n)| a / n),
                "< 1",
                |v| v < 1.0,
            );
        }
    }
    for s in SHAPES {
        for op in Op::ALL {
            goal(
                format!("{} {}, engine / generated", s.name, op.name()),
                r(s.name, op, "engine", "generated"),
                "<= 1.2",
                |v| v <= 1.2,
            );
        }
    }
}

/// The conv network's ratios (no goal was set for it): generated against each hand-written form
/// and the engine against the generated code, per operation.
fn print_conv(b: &Build) {
    println!("\n#### Conv network C1, build `{}`\n", b.label);
    println!("| operation | generated / nalgebra | generated / plain | engine / generated | generated / its per-sample loop |");
    println!("| --- | ---: | ---: | ---: | ---: |");
    let r = |op: Op, a: &str, c: &str| {
        b.get("c1", op, a)
            .zip(b.get("c1", op, c))
            .map_or("n/a".to_string(), |(x, y)| format!("{:.2}", x / y))
    };
    for op in Op::ALL {
        println!(
            "| {} | {} | {} | {} | {} |",
            op.name(),
            r(op, "generated", "nalgebra"),
            r(op, "generated", "plain"),
            r(op, "engine", "generated"),
            if op == Op::Batch {
                r(op, "generated", "generated_loop")
            } else {
                "".to_string()
            }
        );
    }
}

/// Emission time and lines of each network, and the release build time of the N3 module.
fn print_compile(workspace: &Path) {
    println!("\n### Compile-time figures\n");
    println!("| net | emit (check + generate), median of 9 | generated lines |");
    println!("| --- | ---: | ---: |");
    let mut n3_source = String::new();
    for (name, spec) in sinew_bench::SPECS {
        let mut times = Vec::new();
        let mut src = String::new();
        for _ in 0..9 {
            let t = Instant::now();
            let model = sinew::check_source(spec).model.expect("spec checks");
            src = sinew::emit::generate(
                &model,
                &sinew::emit::EmitOptions {
                    spec_name: format!("bench_{name}.sinew"),
                    ..Default::default()
                },
            );
            times.push(t.elapsed().as_secs_f64() * 1e3);
        }
        times.sort_by(f64::total_cmp);
        println!(
            "| {name} | {:.1} ms | {} |",
            times[times.len() / 2],
            src.lines().count()
        );
        if name == "n3" {
            n3_source = src;
        }
    }
    match build_n3_module(workspace, &n3_source) {
        Ok(secs) => println!(
            "\n`cargo build --release` of a crate holding only the generated N3 module (its dependency `sinew-runtime` already built): {secs:.2} s."
        ),
        Err(e) => println!("\nN3 module build not timed: {e}"),
    }
}

fn build_n3_module(workspace: &Path, source: &str) -> Result<f64, String> {
    let dir = workspace.join("target/bench-n3-module");
    std::fs::create_dir_all(dir.join("src")).map_err(|e| e.to_string())?;
    let runtime = workspace.join("runtime");
    let manifest = format!(
        "[package]\nname = \"bench-n3-module\"\nversion = \"0.0.0\"\nedition = \"2021\"\npublish = false\n\n[dependencies]\nsinew-runtime = {{ path = {:?} }}\n\n[workspace]\n",
        runtime.display().to_string()
    );
    std::fs::write(dir.join("Cargo.toml"), manifest).map_err(|e| e.to_string())?;
    std::fs::write(dir.join("src/bench_n3.rs"), source).map_err(|e| e.to_string())?;
    std::fs::write(
        dir.join("src/lib.rs"),
        "//! The generated N3 module alone.\n#![no_std]\ninclude!(\"bench_n3.rs\");\n",
    )
    .map_err(|e| e.to_string())?;
    let cargo = |what: &str| {
        std::process::Command::new(std::env::var("CARGO").unwrap_or_else(|_| "cargo".into()))
            .args(["build", "--release", "--quiet"])
            .current_dir(&dir)
            .env("CARGO_TARGET_DIR", dir.join("target"))
            .status()
            .map_err(|e| format!("{what}: {e}"))
            .and_then(|s| {
                if s.success() {
                    Ok(())
                } else {
                    Err(format!("{what}: cargo failed"))
                }
            })
    };
    cargo("first build")?;
    // Touch the module so that only it is rebuilt, then time that.
    std::fs::write(dir.join("src/bench_n3.rs"), format!("{source}\n"))
        .map_err(|e| e.to_string())?;
    let t = Instant::now();
    cargo("timed build")?;
    Ok(t.elapsed().as_secs_f64())
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let mut builds: Vec<(String, PathBuf)> = Vec::new();
    let mut numpy: Option<Value> = None;
    let mut compile = false;
    let mut it = args.iter();
    while let Some(a) = it.next() {
        match a.as_str() {
            "--build" => {
                if let Some((l, d)) = it.next().and_then(|v| v.split_once('=')) {
                    builds.push((l.to_string(), PathBuf::from(d)));
                }
            }
            "--numpy" => {
                numpy = it
                    .next()
                    .and_then(|f| std::fs::read_to_string(f).ok())
                    .and_then(|t| serde_json::from_str(&t).ok());
            }
            "--compile" => compile = true,
            other => {
                eprintln!("unknown argument {other}");
                std::process::exit(2);
            }
        }
    }
    let workspace = Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
    if builds.is_empty() {
        builds.push(("default".into(), workspace.join("target")));
    }
    let ghz = clock_ghz();
    println!("## Benchmark results\n");
    println!(
        "CPU: {} ({} MHz in /proc/cpuinfo; measured core clock {ghz:.2} GHz by a chain of dependent integer multiplications). One core: the engine runs with a one-thread pool{}.",
        cpuinfo("model name").unwrap_or_else(|| "unknown".into()),
        cpuinfo("cpu MHz").unwrap_or_else(|| "?".into()),
        if numpy.is_some() { ", numpy with its BLAS limited to one thread" } else { "" }
    );
    println!(
        "Peak assumed: f32 FMA lanes x 2 flops x 2 FMA ports x measured clock: AVX2 (8 lanes) = {:.0} GFLOP/s for the `default` and `v3` builds, AVX-512 (16 lanes) = {:.0} GFLOP/s for `native` when the CPU has it. sinew does not fuse multiply-adds (bit-identical results on every target): it issues a multiply and an add per multiply-add, which halves its ceiling where both run on the FMA ports (Intel cores) and not where adds have pipes of their own (AMD Zen; from memory).",
        8.0 * 2.0 * 2.0 * ghz,
        16.0 * 2.0 * 2.0 * ghz
    );
    if let Some(np) = &numpy {
        println!(
            "numpy {} ({}).",
            np["numpy"].as_str().unwrap_or("?"),
            np["blas"].as_str().unwrap_or("?")
        );
    }
    let loaded: Vec<Build> = builds.iter().map(|(l, d)| load(l, d)).collect();
    for b in &loaded {
        if b.times.is_empty() {
            println!("\n(build `{}`: no criterion results found)", b.label);
            continue;
        }
        print_build(b, lanes(&b.label) as f64 * 4.0 * ghz, numpy.as_ref());
    }
    for b in &loaded {
        if !b.times.is_empty() {
            print_goals(b, numpy.as_ref());
        }
    }
    for b in &loaded {
        if !b.times.is_empty() {
            print_conv(b);
        }
    }
    if compile {
        print_compile(&workspace);
    }
}
