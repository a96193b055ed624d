//! The firmware of `samples/device` on three emulated microcontroller boards, checked against the
//! workstation.
//!
//! For each target (`thumbv7em-none-eabihf` on QEMU `mps2-an386`, a Cortex-M4F;
//! `thumbv6m-none-eabi` on QEMU `microbit`, a Cortex-M0; `riscv32imc-unknown-none-elf` on QEMU
//! `virt`) and each optimisation level (`opt-level = "z"`, the product profile, and `3`) the test
//! builds the firmware, runs it under QEMU with a timeout and checks:
//!
//! - every printed value (classes, output probabilities, blob checksums, the cost of every
//!   on-device training step, the outputs after training) is bit for bit what the sinew engine
//!   computes on the workstation for the same inputs and weights, and the cost falls;
//! - the linked image has no `core::panicking` symbol and no panic handler (so no bounds check
//!   or other panicking path slipped into the generated code, the runtime or libm), while the
//!   `panic_probe` image, which indexes an array with an unknown number, has them: the check
//!   can see a panic;
//! - the baked weights (`TRAINED`) take exactly the flash bytes `report::Report` says, and the
//!   trainer's state exactly its part of the training RAM.
//!
//! It also measures, per target: flash of the model's code (the generated module, the runtime,
//! libm and the soft-float helpers, from the symbol table), the stack high-water marks of one
//! inference and one training step (painted stack), the stack frames of the same functions from
//! nightly `-Z emit-stack-sizes` (a measurement build only; the product builds on stable), and
//! the instructions of one inference and one training step (QEMU one instruction per translation
//! block, `-d exec`: instructions, not cycles).
//!
//! Without the Rust targets or QEMU the test prints why it skipped and passes; with
//! `SINEW_DEVICE=require` (what `.ci/run` sets after installing them) a missing tool fails it.
//! `SINEW_DEVICE_FIGURES=FILE` writes the Markdown table of figures to FILE
//! (`bash tests/device/run.sh --figures` puts it into the README).

use sinew::engine::{Net, Params, Scratch, Trainer};
use sinew::ir::Model;
use sinew::report::Report;
use sinew_harness::toolchain;
use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

mod demo {
    #![allow(dead_code)]
    include!("../../samples/device/src/demo_data.rs");
}

/// An emulated board and the Rust target for its core.
struct Board {
    target: &'static str,
    core: &'static str,
    qemu: &'static str,
    machine: &'static str,
    extra: &'static [&'static str],
    /// Thumb code: ELF function addresses carry bit 0.
    thumb: bool,
}

const BOARDS: [Board; 3] = [
    Board {
        target: "thumbv7em-none-eabihf",
        core: "Cortex-M4F",
        qemu: "qemu-system-arm",
        machine: "mps2-an386",
        extra: &[],
        thumb: true,
    },
    Board {
        target: "thumbv6m-none-eabi",
        core: "Cortex-M0",
        qemu: "qemu-system-arm",
        machine: "microbit",
        extra: &[],
        thumb: true,
    },
    Board {
        target: "riscv32imc-unknown-none-elf",
        core: "RV32IMC",
        qemu: "qemu-system-riscv32",
        machine: "virt",
        extra: &["-bios", "none"],
        thumb: false,
    },
];

/// Cargo profiles of the device crate and their `opt-level`.
const PROFILES: [(&str, &str); 2] = [("release", "z"), ("speed", "3")];

/// Longest a QEMU run may take.
const RUN_TIMEOUT: Duration = Duration::from_secs(120);

fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("..")
        .canonicalize()
        .expect("the repository root exists")
}

fn device_dir() -> PathBuf {
    repo().join("samples/device")
}

/// Runs a command to completion with a time limit; `Err` says what failed.
fn run(cmd: &mut Command, limit: Duration) -> Result<(Option<i32>, String, String), String> {
    let what = format!("{cmd:?}");
    let mut child = cmd
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .map_err(|e| format!("cannot start {what}: {e}"))?;
    let mut out = child.stdout.take().expect("piped");
    let mut err = child.stderr.take().expect("piped");
    let reader = std::thread::spawn(move || {
        let mut s = Vec::new();
        std::io::Read::read_to_end(&mut out, &mut s).ok();
        s
    });
    let err_reader = std::thread::spawn(move || {
        let mut s = Vec::new();
        std::io::Read::read_to_end(&mut err, &mut s).ok();
        s
    });
    let start = Instant::now();
    let status = loop {
        if let Some(s) = child.try_wait().map_err(|e| format!("{what}: {e}"))? {
            break s;
        }
        if start.elapsed() > limit {
            let _ = child.kill();
            let _ = child.wait();
            return Err(format!("{what} did not finish within {limit:?}"));
        }
        std::thread::sleep(Duration::from_millis(20));
    };
    let stdout = String::from_utf8_lossy(&reader.join().unwrap_or_default()).into_owned();
    let stderr = String::from_utf8_lossy(&err_reader.join().unwrap_or_default()).into_owned();
    Ok((status.code(), stdout, stderr))
}

fn quiet_ok(cmd: &mut Command) -> bool {
    cmd.stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .status()
        .is_ok_and(|s| s.success())
}

/// What is missing for the device checks (empty: everything is there).
fn missing_tools() -> Vec<String> {
    let mut missing = Vec::new();
    for b in &BOARDS {
        if !toolchain::has_target(None, b.target) {
            missing.push(format!(
                "the Rust target {} (`rustup target add {}`)",
                b.target, b.target
            ));
        }
    }
    let qemu: Vec<&str> = ["qemu-system-arm", "qemu-system-riscv32"]
        .into_iter()
        .filter(|q| !quiet_ok(Command::new(q).arg("--version")))
        .collect();
    if !qemu.is_empty() {
        // One hint for both emulators: one Debian command installs them.
        missing.push(format!(
            "{} (Debian: `apt-get install qemu-system-arm qemu-system-misc`)",
            qemu.join(" and ")
        ));
    }
    missing
}

/// What is missing for the stack-frame measurement (nightly with the three targets).
fn missing_nightly() -> Vec<String> {
    let mut missing = Vec::new();
    if !quiet_ok(Command::new("cargo").args(["+nightly", "--version"])) {
        missing.push("a nightly toolchain (`rustup toolchain install nightly`)".to_string());
        return missing;
    }
    for b in &BOARDS {
        if !toolchain::has_target(Some("nightly"), b.target) {
            missing.push(format!(
                "the nightly target {} (`rustup +nightly target add {}`)",
                b.target, b.target
            ));
        }
    }
    missing
}

/// Builds every binary of the device crate for `target` with `profile`.
fn build(
    toolchain: Option<&str>,
    target_dir: &Path,
    target: &str,
    profile: &str,
    rustflags: Option<&str>,
) -> Result<PathBuf, String> {
    let mut c = Command::new("cargo");
    if let Some(t) = toolchain {
        c.arg(format!("+{t}"));
    }
    c.args(["build", "--bins", "--profile", profile, "--target", target])
        .arg("--manifest-path")
        .arg(device_dir().join("Cargo.toml"))
        .env("CARGO_TARGET_DIR", target_dir)
        .env("CARGO_TERM_COLOR", "never");
    // Nothing of the outer build may leak into the firmware build.
    toolchain::isolate(&mut c);
    if let Some(f) = rustflags {
        c.env("RUSTFLAGS", f);
    }
    let (code, _, stderr) = run(&mut c, Duration::from_secs(1800))?;
    if code != Some(0) {
        return Err(format!(
            "building the firmware for {target} ({profile}) failed:\n{}",
            toolchain::tail(&stderr, 40)
        ));
    }
    Ok(target_dir.join(target).join(profile))
}

/// Runs an image under QEMU; returns the exit code and what it printed.
fn emulate(board: &Board, elf: &Path, extra: &[&str]) -> Result<(Option<i32>, String), String> {
    let mut c = Command::new(board.qemu);
    c.args(["-M", board.machine, "-nographic", "-monitor", "none"])
        .args(["-semihosting-config", "enable=on,target=native"])
        .args(board.extra)
        .args(extra)
        .arg("-kernel")
        .arg(elf);
    let (code, out, err) = run(&mut c, RUN_TIMEOUT)?;
    if code.is_none() {
        return Err(format!("{} was killed: {err}", board.qemu));
    }
    // QEMU's own complaints (an option it does not know) are on stderr: keep them with the output.
    let out = if code != Some(0) && !err.trim().is_empty() {
        format!("{out}{err}")
    } else {
        out
    };
    Ok((code, out.replace('\r', "")))
}

// ---------------------------------------------------------------------------------------------
// The workstation's side

/// What the engine computes for the device's inputs, as the lines the firmware prints.
struct Host {
    model: Model,
    report: Report,
    /// The report of the shaped model.
    window_report: Report,
    /// Every line after the header, but the stack line.
    lines: Vec<String>,
}

fn bits(v: f32) -> String {
    format!("{:08x}", v.to_bits())
}

/// The first largest output, as the generated `classify` picks it.
fn classify(out: &[f32]) -> (usize, f32) {
    let mut best = (0, out[0]);
    for (i, &p) in out.iter().enumerate().skip(1) {
        if p > best.1 {
            best = (i, p);
        }
    }
    best
}

fn classified(model: &Model, out: &[f32]) -> String {
    let (c, p) = classify(out);
    let names = model.classes().expect("a classifier");
    let outs: Vec<String> = out.iter().map(|&v| bits(v)).collect();
    format!(
        "class={c}:{} p={} out={}",
        names[c],
        bits(p),
        outs.join(",")
    )
}

fn stored_crc(blob: &[u8]) -> String {
    let n = blob.len();
    format!(
        "{:08x}",
        u32::from_le_bytes([blob[n - 4], blob[n - 3], blob[n - 2], blob[n - 1]])
    )
}

fn host() -> Host {
    let dir = device_dir();
    let spec = std::fs::read_to_string(repo().join("samples/pump_health.sinew")).expect("spec");
    let model = sinew::check_source(&spec).model.expect("the spec checks");
    let weights =
        sinew::weights::Weights::load_checked(&dir.join("pump_health.weights.json"), &model)
            .expect("the committed weights fit the spec");
    let s = weights.standardization.as_ref().expect("standardized");
    let params = Params::<f32>::from_f64(&weights.layers_flat(), Some(s));
    let net = Net::new(&model);
    let mut scratch = Scratch::new(&model);
    let outputs = model.output().width;
    let mut lines = Vec::new();

    for (i, x) in demo::RAW_INPUTS.iter().enumerate() {
        let mut out = vec![0.0f32; outputs];
        net.predict(&params, x, &mut scratch, &mut out)
            .expect("operands of the model's widths");
        lines.push(format!("infer {i} {}", classified(&model, &out)));
    }
    let blob = sinew::pack::encode(&model, &weights).expect("weights fit");
    lines.push(format!(
        "blob written={} crc={} same_as_packed=1",
        blob.len(),
        stored_crc(&blob)
    ));
    lines.push("blob corrupt=checksum other_model=fingerprint short=length unchanged=1".into());
    lines.push("blob load=ok equal=1".into());

    let xs: Vec<f32> = demo::NEW_INPUTS.iter().flatten().copied().collect();
    let ys: Vec<f32> = demo::NEW_LABELS
        .iter()
        .flat_map(|&l| (0..outputs).map(move |k| if k == l { 1.0 } else { 0.0 }))
        .collect();
    let mut trainer = Trainer::new(&model, params.clone());
    for step in 0..demo::TRAIN_STEPS {
        let cost = trainer
            .step(&xs, &ys)
            .expect("operands of the model's widths");
        lines.push(format!("train {step} cost={}", bits(cost)));
    }
    let final_cost = net
        .cost(&trainer.params, &xs, &ys)
        .expect("operands of the model's widths");
    lines.push(format!("train final cost={}", bits(final_cost)));
    for (i, x) in demo::NEW_INPUTS.iter().enumerate() {
        let mut out = vec![0.0f32; outputs];
        net.predict(&trainer.params, x, &mut scratch, &mut out)
            .expect("operands of the model's widths");
        lines.push(format!("after {i} {}", classified(&model, &out)));
    }
    let learned = sinew::weights::Weights::from_params(
        &model,
        trainer.params.layers_f64(),
        trainer.params.scaling_f64(),
        None,
    );
    let saved = sinew::pack::encode(&model, &learned).expect("weights fit");
    lines.push(format!(
        "saved written={} crc={}",
        saved.len(),
        stored_crc(&saved)
    ));
    let (window, window_report) = window_lines(&dir);
    lines.extend(window);
    lines.push("done ok=1".into());
    let report = Report::of(&model);
    Host {
        model,
        report,
        window_report,
        lines,
    }
}

/// What the shaped model prints on the device (`run_window` of `samples/device/src/lib.rs`),
/// recomputed with the engine: inference on the raw windows with the committed weights, the
/// on-device training steps from them, the outputs after training.
fn window_lines(dir: &Path) -> (Vec<String>, Report) {
    let spec = std::fs::read_to_string(repo().join("samples/gearbox_window.sinew")).expect("spec");
    let model = sinew::check_source(&spec).model.expect("the spec checks");
    let weights =
        sinew::weights::Weights::load_checked(&dir.join("gearbox_window.weights.json"), &model)
            .expect("the committed weights fit the spec");
    let s = weights.standardization.as_ref().expect("standardized");
    let params = Params::<f32>::from_f64(&weights.layers_of(&model), Some(s));
    let net = Net::new(&model);
    let mut scratch = Scratch::new(&model);
    let outputs = model.output().width;
    let mut lines = Vec::new();
    for (i, x) in demo::WINDOWS.iter().enumerate() {
        let mut out = vec![0.0f32; outputs];
        net.predict(&params, x, &mut scratch, &mut out)
            .expect("operands of the model's widths");
        lines.push(format!("window {i} {}", classified(&model, &out)));
    }
    let xs: Vec<f32> = demo::WINDOW_NEW.iter().flatten().copied().collect();
    let ys: Vec<f32> = demo::WINDOW_LABELS
        .iter()
        .flat_map(|&l| (0..outputs).map(move |k| if k == l { 1.0 } else { 0.0 }))
        .collect();
    let mut trainer = Trainer::new(&model, params);
    for step in 0..demo::WINDOW_STEPS {
        let cost = trainer
            .step(&xs, &ys)
            .expect("operands of the model's widths");
        lines.push(format!("window_train {step} cost={}", bits(cost)));
    }
    for (i, x) in demo::WINDOW_NEW.iter().enumerate() {
        let mut out = vec![0.0f32; outputs];
        net.predict(&trainer.params, x, &mut scratch, &mut out)
            .expect("operands of the model's widths");
        lines.push(format!("window_after {i} {}", classified(&model, &out)));
    }
    (lines, Report::of(&model))
}

// ---------------------------------------------------------------------------------------------
// The device's output

struct DeviceRun {
    header: String,
    lines: Vec<String>,
    /// Painted stack of one inference and one training step, and the painted span.
    stack: (usize, usize, usize),
    /// The same for the shaped model, and the bytes of its trainer.
    window_stack: (usize, usize, usize, usize),
}

fn field(line: &str, key: &str) -> Option<usize> {
    line.split_whitespace()
        .find_map(|w| w.strip_prefix(key)?.strip_prefix('=')?.parse().ok())
}

fn parse_run(out: &str) -> Result<DeviceRun, String> {
    let mut header = None;
    let mut lines = Vec::new();
    let mut stack = None;
    let mut window_stack = None;
    for l in out.lines() {
        if l.starts_with("sinew-device ") {
            header = Some(l.to_string());
        } else if l.starts_with("window_stack ") {
            let get = |k| field(l, k).ok_or_else(|| format!("no {k} in `{l}`"));
            window_stack = Some((
                get("predict")?,
                get("step")?,
                get("painted")?,
                get("trainer")?,
            ));
        } else if l.starts_with("stack ") {
            let get = |k| field(l, k).ok_or_else(|| format!("no {k} in `{l}`"));
            stack = Some((get("predict")?, get("step")?, get("painted")?));
        } else if header.is_some() && !l.trim().is_empty() {
            lines.push(l.to_string());
        }
    }
    Ok(DeviceRun {
        header: header.ok_or_else(|| format!("no header line in:\n{out}"))?,
        lines,
        stack: stack.ok_or_else(|| format!("no stack line in:\n{out}"))?,
        window_stack: window_stack.ok_or_else(|| format!("no window_stack line in:\n{out}"))?,
    })
}

// ---------------------------------------------------------------------------------------------
// The image

struct Symbol {
    name: String,
    address: u64,
    size: u64,
    function: bool,
}

struct Image {
    symbols: Vec<Symbol>,
    /// Function address -> stack frame bytes, from a `-Z emit-stack-sizes` build.
    stack_sizes: BTreeMap<u64, u64>,
}

fn read_image(path: &Path, thumb: bool) -> Image {
    use object::{Object, ObjectSection, ObjectSymbol, SymbolKind};
    let data = std::fs::read(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let file = object::File::parse(&*data).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let mask = if thumb { !1u64 } else { !0u64 };
    let symbols = file
        .symbols()
        .filter_map(|s| {
            let function = match s.kind() {
                SymbolKind::Text => true,
                SymbolKind::Data => false,
                _ => return None,
            };
            let raw = s.name().ok()?;
            Some(Symbol {
                name: format!("{:#}", rustc_demangle::demangle(raw)),
                address: if function {
                    s.address() & mask
                } else {
                    s.address()
                },
                size: s.size(),
                function,
            })
        })
        .collect();
    let mut stack_sizes = BTreeMap::new();
    if let Some(sec) = file.section_by_name(".stack_sizes") {
        let bytes = sec.data().unwrap_or(&[]);
        let width = if file.is_64() { 8 } else { 4 };
        let mut i = 0;
        while i + width <= bytes.len() {
            let mut addr = 0u64;
            for (k, b) in bytes[i..i + width].iter().enumerate() {
                addr |= u64::from(*b) << (8 * k);
            }
            i += width;
            let (mut size, mut shift) = (0u64, 0);
            while let Some(&b) = bytes.get(i) {
                i += 1;
                size |= u64::from(b & 0x7f) << shift;
                shift += 7;
                if b & 0x80 == 0 {
                    break;
                }
            }
            stack_sizes.insert(addr & mask, size);
        }
    }
    Image {
        symbols,
        stack_sizes,
    }
}

impl Image {
    fn find(&self, pred: impl Fn(&str) -> bool) -> Vec<&Symbol> {
        self.symbols.iter().filter(|s| pred(&s.name)).collect()
    }

    fn function(&self, name: &str) -> Option<&Symbol> {
        self.symbols.iter().find(|s| s.function && s.name == name)
    }

    /// Symbols of a panicking path: the `core::panicking` functions and the panic handler.
    fn panic_symbols(&self) -> Vec<String> {
        self.find(|n| n.contains("core::panicking") || n.contains("rust_begin_unwind"))
            .into_iter()
            .map(|s| s.name.clone())
            .collect()
    }
}

/// Flash of the model's code in an image, by origin (bytes; aliases counted once).
#[derive(Default, Clone, Copy)]
struct Flash {
    generated: u64,
    runtime: u64,
    libm: u64,
    soft_float: u64,
    weights: u64,
}

impl Flash {
    fn code(&self) -> u64 {
        self.generated + self.runtime + self.libm + self.soft_float
    }
}

/// The compiler's soft-float helpers (for cores without an FPU), by their C names.
fn is_soft_float(name: &str) -> bool {
    const PREFIXES: [&str; 4] = [
        "compiler_builtins::float::",
        "__aeabi_f",
        "__aeabi_d",
        "__aeabi_i2f",
    ];
    const NAMES: [&str; 26] = [
        "__addsf3",
        "__subsf3",
        "__mulsf3",
        "__divsf3",
        "__eqsf2",
        "__nesf2",
        "__ltsf2",
        "__lesf2",
        "__gtsf2",
        "__gesf2",
        "__unordsf2",
        "__fixsfsi",
        "__fixunssfsi",
        "__floatsisf",
        "__floatunsisf",
        "__aeabi_ui2f",
        "__adddf3",
        "__subdf3",
        "__muldf3",
        "__divdf3",
        "__extendsfdf2",
        "__truncdfsf2",
        "__fixdfsi",
        "__floatsidf",
        "__cmpsf2",
        "__aeabi_l2f",
    ];
    PREFIXES.iter().any(|p| name.starts_with(p)) || NAMES.contains(&name)
}

fn flash(img: &Image) -> Flash {
    let mut f = Flash::default();
    let mut seen = std::collections::BTreeSet::new();
    for s in img.symbols.iter().filter(|s| s.function && s.size > 0) {
        if !seen.insert(s.address) {
            continue;
        }
        let n = s.name.as_str();
        if n.contains("pump_health::") {
            f.generated += s.size;
        } else if n.starts_with("sinew_runtime::") || n.contains(" as sinew_runtime::") {
            f.runtime += s.size;
        } else if n.starts_with("libm::") {
            f.libm += s.size;
        } else if is_soft_float(n) {
            f.soft_float += s.size;
        }
    }
    f.weights = img
        .symbols
        .iter()
        .filter(|s| !s.function && s.name.ends_with("pump_health::TRAINED"))
        .map(|s| s.size)
        .sum();
    f
}

/// Stack frames from `-Z emit-stack-sizes` along the two measured calls.
#[derive(Clone, Debug, Default)]
struct Frames {
    /// `infer` and the generated inference functions that kept a symbol of their own.
    infer: Vec<(String, u64)>,
    /// `train_step`, `Trainer::step`, and the largest frame of what `step` calls in turn.
    step: Vec<(String, u64)>,
    /// The largest frame of a runtime kernel.
    kernel: (String, u64),
    /// The largest frame of a libm function.
    libm: (String, u64),
}

impl Frames {
    /// The frames of the chain `infer` -> generated code -> deepest kernel -> deepest libm
    /// function, added up: a static estimate of the stack of one inference.
    fn infer_bound(&self) -> u64 {
        self.infer.iter().map(|f| f.1).sum::<u64>() + self.kernel.1 + self.libm.1
    }

    /// The same for one training step.
    fn step_bound(&self) -> u64 {
        self.step.iter().map(|f| f.1).sum::<u64>() + self.kernel.1 + self.libm.1
    }
}

fn frames(img: &Image) -> Frames {
    let mut f = Frames::default();
    let mut step_callee: Option<(String, u64)> = None;
    for s in img.symbols.iter().filter(|s| s.function) {
        let Some(&size) = img.stack_sizes.get(&s.address) else {
            continue;
        };
        // `<a::B>::c` and `a::B::c` alike.
        let key: String = s.name.chars().filter(|c| !matches!(c, '<' | '>')).collect();
        let short = key.rsplit("::").take(2).collect::<Vec<_>>();
        let short = format!("{}::{}", short.get(1).unwrap_or(&""), short[0]);
        let ends = |tail: &str| key.ends_with(tail);
        if ends("sinew_device_sample::infer")
            || ends("pump_health::Params::predict")
            || ends("pump_health::Params::predict_into")
        {
            f.infer.push((short, size));
        } else if ends("sinew_device_sample::train_step") || ends("pump_health::Trainer::step") {
            f.step.push((short, size));
        } else if ends("pump_health::Params::backprop")
            || ends("pump_health::Gradients::finish")
            || ends("pump_health::Gradients::clear")
            || ends("pump_health::Params::penalty_cost")
        {
            if step_callee.as_ref().is_none_or(|c| size > c.1) {
                step_callee = Some((short, size));
            }
        } else if key.starts_with("sinew_runtime::") && size > f.kernel.1 {
            f.kernel = (key.clone(), size);
        } else if key.starts_with("libm::") && size > f.libm.1 {
            f.libm = (key.clone(), size);
        }
    }
    f.step.extend(step_callee);
    f.infer.sort();
    f.step.sort();
    f
}

/// Instructions executed between pairs of marker functions of the `count` image.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
struct Counts {
    infer: u64,
    step: u64,
    /// The shaped model (`gearbox_window`): one inference, one training step.
    window_infer: u64,
    window_step: u64,
}

/// The QEMU options for one guest instruction per translation block: `-accel
/// tcg,one-insn-per-tb=on` from QEMU 8.1 on, `-singlestep` before (Debian 12 ships 7.2).
fn one_insn_per_block(qemu: &str) -> Vec<&'static str> {
    let version = Command::new(qemu)
        .arg("--version")
        .output()
        .map(|o| String::from_utf8_lossy(&o.stdout).into_owned())
        .unwrap_or_default();
    // "QEMU emulator version 7.2.22 (...)"
    let mut numbers = version
        .split("version ")
        .nth(1)
        .unwrap_or("")
        .split(|c: char| !c.is_ascii_digit())
        .map(|n| n.parse::<u32>().unwrap_or(0));
    let (major, minor) = (numbers.next().unwrap_or(0), numbers.next().unwrap_or(0));
    if (major, minor) >= (8, 1) {
        vec!["-accel", "tcg,one-insn-per-tb=on"]
    } else {
        vec!["-singlestep"]
    }
}

fn count_instructions(board: &Board, elf: &Path, img: &Image) -> Result<Counts, String> {
    let mark = |name: &str| -> Result<u64, String> {
        img.function(&format!("count::{name}"))
            .map(|s| s.address)
            .ok_or_else(|| format!("no marker {name} in {}", elf.display()))
    };
    let pairs = [
        (mark("mark_empty_begin")?, mark("mark_empty_end")?),
        (mark("mark_infer_begin")?, mark("mark_infer_end")?),
        (mark("mark_step_begin")?, mark("mark_step_end")?),
        (mark("mark_window_begin")?, mark("mark_window_end")?),
        (
            mark("mark_window_step_begin")?,
            mark("mark_window_step_end")?,
        ),
    ];
    let log = std::env::temp_dir().join(format!(
        "sinew-device-exec-{}-{}.log",
        std::process::id(),
        board.target
    ));
    let log_s = log.to_string_lossy().into_owned();
    let mut args = one_insn_per_block(board.qemu);
    args.extend(["-d", "exec,nochain", "-D", &log_s]);
    let (code, out) = emulate(board, elf, &args)?;
    if code != Some(0) {
        return Err(format!("the count image failed ({code:?}):\n{out}"));
    }
    // Read as a stream: a training step on a core without an FPU is millions of lines.
    let file = std::fs::File::open(&log).map_err(|e| format!("{log_s}: {e}"))?;
    let lines = std::io::BufRead::lines(std::io::BufReader::new(file));
    // Each line is one executed instruction: `Trace 0: HOST [CS_BASE/PC/FLAGS/CFLAGS] SYMBOL`.
    let mut counts = [0u64; 5];
    let mut k = 0;
    let mut open = false;
    for line in lines {
        let Ok(line) = line else { break };
        let Some(pc) = line
            .split_once('[')
            .and_then(|(_, rest)| rest.split('/').nth(1))
            .and_then(|pc| u64::from_str_radix(pc, 16).ok())
        else {
            continue;
        };
        let Some(&(begin, end)) = pairs.get(k) else {
            break;
        };
        if !open && pc == begin {
            open = true;
        } else if open && pc == end {
            open = false;
            k += 1;
            continue;
        }
        if open {
            counts[k] += 1;
        }
    }
    let _ = std::fs::remove_file(&log);
    if k < pairs.len() {
        return Err(format!(
            "the exec log of {} ended before the markers",
            board.target
        ));
    }
    Ok(Counts {
        infer: counts[1] - counts[0],
        step: counts[2] - counts[0],
        window_infer: counts[3] - counts[0],
        window_step: counts[4] - counts[0],
    })
}

// ---------------------------------------------------------------------------------------------
// The test

/// Figures of one target at one optimisation level.
struct Row {
    board: &'static Board,
    opt: &'static str,
    flash: Flash,
    stack: (usize, usize, usize),
    window_stack: (usize, usize, usize, usize),
    frames: Option<Frames>,
    counts: Counts,
    trainer_bytes: usize,
}

fn skip_or_fail(why: &[String]) {
    let text = format!(
        "device checks SKIPPED: missing {}.\n  Install them (see README, \"Device figures\") or run `bash .ci/run`, which does.",
        why.join("; ")
    );
    if std::env::var("SINEW_DEVICE").is_ok_and(|v| v == "require") {
        panic!("SINEW_DEVICE=require, but {text}");
    }
    // Past the harness's capture (a raw stderr handle, not `eprintln!`), so that the skip shows
    // in a plain `cargo test --workspace` run rather than hiding behind "ok".
    use std::io::Write as _;
    let _ = writeln!(std::io::stderr(), "\n!! {text}\n");
}

#[test]
fn firmware_on_emulated_boards_matches_the_workstation() {
    let missing = missing_tools();
    if !missing.is_empty() {
        skip_or_fail(&missing);
        return;
    }
    let host = host();
    let target_dir = repo().join("target/device");
    let mut rows = Vec::new();
    // Every problem found, reported together at the end (after the figures).
    let mut problems: Vec<String> = Vec::new();
    for board in &BOARDS {
        for (profile, opt) in PROFILES {
            let dir = build(None, &target_dir, board.target, profile, None)
                .unwrap_or_else(|e| panic!("{e}"));
            let at = format!("{} ({}) opt-level {opt}", board.target, board.core);
            match check_run(board, &dir, &host) {
                Ok(run) => {
                    eprintln!("{at}: {}", run.header);
                    problems.extend(run.problems.iter().map(|p| format!("{at}: {p}")));
                    rows.push(Row {
                        board,
                        opt,
                        flash: run.flash,
                        stack: run.stack,
                        window_stack: run.window_stack,
                        frames: None,
                        counts: run.counts,
                        trainer_bytes: run.trainer_bytes,
                    });
                }
                Err(e) => problems.push(format!("{at}: {e}")),
            }
        }
    }

    // Stack frames from a nightly measurement build of the product profile (never the product
    // build itself). Required in CI; on a workstation only with `SINEW_DEVICE` set or when the
    // figures are written, since the nightly build of the build script takes minutes.
    let wanted = std::env::var_os("SINEW_DEVICE").is_some()
        || std::env::var_os("SINEW_DEVICE_FIGURES").is_some();
    let nightly = missing_nightly();
    if !wanted {
        eprintln!(
            "note: stack frames (nightly -Z emit-stack-sizes) not measured; set SINEW_DEVICE=1 \
             or run `bash tests/device/run.sh`"
        );
    } else if nightly.is_empty() {
        let dir = repo().join("target/device-nightly");
        let (profile, opt) = PROFILES[0];
        for row in rows.iter_mut().filter(|r| r.opt == opt) {
            match build(
                Some("nightly"),
                &dir,
                row.board.target,
                profile,
                Some("-Z emit-stack-sizes"),
            ) {
                Ok(out) => {
                    let f = frames(&read_image(&out.join("device"), row.board.thumb));
                    if f.infer.is_empty() || f.step.is_empty() || f.kernel.1 == 0 {
                        problems.push(format!(
                            "{} opt-level {opt}: no stack sizes for the model's functions: {f:?}",
                            row.board.target
                        ));
                    }
                    row.frames = Some(f);
                }
                Err(e) => problems.push(e),
            }
        }
    } else {
        skip_or_fail(&nightly);
    }

    let table = figures(&host, &rows);
    eprintln!("{table}");
    if let Ok(path) = std::env::var("SINEW_DEVICE_FIGURES") {
        std::fs::write(&path, &table).unwrap_or_else(|e| panic!("{path}: {e}"));
    }
    assert!(
        problems.is_empty(),
        "{} device check(s) failed:\n- {}",
        problems.len(),
        problems.join("\n- ")
    );
}

/// What one image of one target showed.
struct Checked {
    header: String,
    flash: Flash,
    stack: (usize, usize, usize),
    window_stack: (usize, usize, usize, usize),
    counts: Counts,
    trainer_bytes: usize,
    problems: Vec<String>,
}

/// Runs the device image and the count image built in `dir` and checks them; `Err` when they
/// cannot be run or read at all.
fn check_run(board: &Board, dir: &Path, host: &Host) -> Result<Checked, String> {
    let mut problems = Vec::new();
    let elf = dir.join("device");
    let (code, out) = emulate(board, &elf, &[])?;
    let got = parse_run(&out)?;
    if code != Some(0) {
        problems.push(format!(
            "the firmware exited with {code:?} (a check on the device failed):\n{out}"
        ));
    }
    let want_header = format!(
        "sinew-device 1 target={} model=pump_health fingerprint={:016x} values={} blob_bytes={}",
        board.target,
        host.model.fingerprint(),
        sinew::pack::value_count(&host.model),
        sinew::pack::blob_len(&host.model)
    );
    if !got.header.starts_with(&want_header) {
        problems.push(format!("header `{}`, expected `{want_header}`", got.header));
    }
    // Bit for bit what the engine computed.
    let differing: Vec<String> = got
        .lines
        .iter()
        .zip(&host.lines)
        .filter(|(d, h)| d != h)
        .map(|(d, h)| format!("device `{d}`, engine `{h}`"))
        .collect();
    if !differing.is_empty() || got.lines.len() != host.lines.len() {
        problems.push(format!(
            "the device differs from the engine ({} of {} lines; {} printed):\n  {}",
            differing.len(),
            host.lines.len(),
            got.lines.len(),
            differing.join("\n  ")
        ));
    }

    // No panicking path, and the check can see one.
    let img = read_image(&elf, board.thumb);
    let panics = img.panic_symbols();
    if !panics.is_empty() {
        problems.push(format!(
            "the device image has a panicking path: {panics:?} (find the callers with \
             `llvm-objdump -d -C` on {})",
            elf.display()
        ));
    }
    let probe = read_image(&dir.join("panic_probe"), board.thumb);
    if !probe
        .panic_symbols()
        .iter()
        .any(|n| n.contains("core::panicking"))
    {
        problems.push("the no-panic check does not see the bounds check of panic_probe".into());
    }

    // The baked weights take what the report says, to the byte.
    let flash = flash(&img);
    if flash.weights != host.report.flash_bytes {
        problems.push(format!(
            "TRAINED takes {} bytes of flash, the report says {}",
            flash.weights, host.report.flash_bytes
        ));
    }

    // The trainer's state against the report's training RAM without its per-sample working
    // set: parameters, gradient and Adam's two moments. The trainer also holds the input mean
    // and std in its `params` (which the report's training figure leaves out) and the step count.
    let trainer_bytes = field(&got.header, "trainer_bytes").unwrap_or(0);
    let r = &host.report;
    let m = &host.model;
    let per_sample =
        m.input().width * usize::from(m.input().standardize) + 2 * widths(m) + m.output().width;
    let state = r.buffer_training_bytes as usize - per_sample * r.scalar_bytes as usize;
    if trainer_bytes != state + 4 {
        problems.push(format!(
            "the trainer holds {trainer_bytes} bytes; the report's state is {state} (with {} of \
             input scaling), plus 4 of step count",
            r.scaling_bytes
        ));
    }

    let (predict, step, painted) = got.stack;
    if predict >= painted || step >= painted {
        problems.push(format!("the stack went below the {painted} painted bytes"));
    }
    // The report's RAM figures are upper bounds of what the device uses (report.rs states the
    // margins of its frame allowances).
    if predict as u64 > r.ram_inference_bytes {
        problems.push(format!(
            "one inference used {predict} B of stack, more than the report's {} B \
             (raise report::INFERENCE_FRAMES_F32)",
            r.ram_inference_bytes
        ));
    }
    if (trainer_bytes + step) as u64 > r.ram_training_bytes {
        problems.push(format!(
            "training used {trainer_bytes} B of trainer and {step} B of stack, more than the \
             report's {} B (raise report::TRAINING_FRAMES_F32)",
            r.ram_training_bytes
        ));
    }
    // The same bounds for the shaped model, whose inference holds two halves of working
    // memory rather than every buffer.
    let w = &host.window_report;
    let (predict, step, painted, trainer) = got.window_stack;
    if predict >= painted || step >= painted {
        problems.push(format!(
            "the shaped model's stack went below the {painted} painted bytes"
        ));
    }
    if predict as u64 > w.ram_inference_bytes {
        problems.push(format!(
            "one inference of the shaped model used {predict} B of stack, more than the report's \
             {} B",
            w.ram_inference_bytes
        ));
    }
    if (trainer + step) as u64 > w.ram_training_bytes {
        problems.push(format!(
            "training the shaped model used {trainer} B of trainer and {step} B of stack, more \
             than the report's {} B",
            w.ram_training_bytes
        ));
    }
    let count_elf = dir.join("count");
    let counts = count_instructions(board, &count_elf, &read_image(&count_elf, board.thumb))?;
    Ok(Checked {
        header: got.header,
        flash,
        stack: got.stack,
        window_stack: got.window_stack,
        counts,
        trainer_bytes,
        problems,
    })
}

fn widths(m: &Model) -> usize {
    m.layers().iter().map(|l| l.width).sum()
}

/// The Markdown tables of figures.
fn figures(host: &Host, rows: &[Row]) -> String {
    let r = &host.report;
    let mut t = String::new();
    let _ = writeln!(
        t,
        "Model `pump_health` (6-10-8-3, f32, standardized input, Adam): {} parameters; the report \
         (`sinew check`) gives {} B of flash for the weights, {} B of RAM for inference ({} B of \
         buffers + {} B allowed for call frames) and {} B for training ({} + {} B), {} \
         multiply-adds per inference and {} per training sample. Every measured stack is below \
         the report's figure (the test fails otherwise).\n",
        r.parameters,
        r.flash_bytes,
        r.ram_inference_bytes,
        r.buffer_inference_bytes,
        r.frames_inference_bytes,
        r.ram_training_bytes,
        r.buffer_training_bytes,
        r.frames_training_bytes,
        r.macs_inference,
        r.macs_training
    );
    let _ = writeln!(
        t,
        "| target (QEMU board) | opt-level | flash: model code | generated / runtime / libm / soft-float | flash: weights | instructions per inference | instructions per training step (8 samples) |"
    );
    let _ = writeln!(t, "| --- | --- | ---: | --- | ---: | ---: | ---: |");
    for row in rows {
        let f = &row.flash;
        let _ = writeln!(
            t,
            "| {} `{}` ({}) | {} | {} B | {} / {} / {} / {} | {} B | {} | {} |",
            row.board.core,
            row.board.target,
            row.board.machine,
            row.opt,
            f.code(),
            f.generated,
            f.runtime,
            f.libm,
            f.soft_float,
            f.weights,
            row.counts.infer,
            row.counts.step
        );
    }
    let w = &host.window_report;
    let _ = writeln!(
        t,
        "\nModel `gearbox_window` (48 x 3 window, conv 8 kernel 5 stride 2, depthwise 3, max pool 2, \
         average pool, dense 8, softmax 3; f32, Adam): {} parameters, {} multiply-adds per \
         inference and {} per training sample (report); flash for the weights and the input's \
         mean and std {} B.\n",
        w.parameters, w.macs_inference, w.macs_training, w.flash_bytes
    );
    let _ = writeln!(
        t,
        "| target | opt-level | instructions per inference | instructions per training step (6 windows) | inference: report / painted stack | training: report / trainer + painted stack |"
    );
    let _ = writeln!(t, "| --- | --- | ---: | ---: | ---: | ---: |");
    for row in rows {
        let (predict, step, _, trainer) = row.window_stack;
        let _ = writeln!(
            t,
            "| {} | {} | {} | {} | {} B / {predict} B | {} B / {} B |",
            row.board.core,
            row.opt,
            row.counts.window_infer,
            row.counts.window_step,
            w.ram_inference_bytes,
            w.ram_training_bytes,
            trainer + step
        );
    }
    let _ = writeln!(
        t,
        "\n| target | opt-level | inference: report | inference: painted stack | inference: frames (nightly) | training: report | training: trainer + painted stack | training: frames (nightly) |"
    );
    let _ = writeln!(t, "| --- | --- | ---: | ---: | --- | ---: | ---: | --- |");
    for row in rows {
        let show = |parts: &[(String, u64)], total: u64, f: &Frames| {
            let mut s: Vec<String> = parts.iter().map(|(n, b)| format!("`{n}` {b}")).collect();
            s.push(format!("kernel {}", f.kernel.1));
            s.push(format!("libm {}", f.libm.1));
            format!("{} = {total} B", s.join(" + "))
        };
        let (fi, fs) = match &row.frames {
            Some(f) => (
                show(&f.infer, f.infer_bound(), f),
                show(&f.step, f.step_bound(), f),
            ),
            None => ("-".to_string(), "-".to_string()),
        };
        let _ = writeln!(
            t,
            "| {} | {} | {} B | {} B | {} | {} B | {} + {} = {} B | {} |",
            row.board.core,
            row.opt,
            r.ram_inference_bytes,
            row.stack.0,
            fi,
            r.ram_training_bytes,
            row.trainer_bytes,
            row.stack.1,
            row.trainer_bytes + row.stack.1,
            fs
        );
    }
    t
}

/// Without the tools, the skip is printed past the harness's capture: a plain test run (no
/// `--nocapture`) shows it, with one install hint for both emulators.
#[test]
fn a_skipped_device_check_says_so_in_a_plain_run() {
    if std::env::var_os("SINEW_DEVICE_SKIP_PROBE").is_some() {
        return; // the child below
    }
    let o = Command::new(std::env::current_exe().expect("test binary"))
        .args([
            "firmware_on_emulated_boards_matches_the_workstation",
            "--exact",
        ])
        .env("PATH", "/nonexistent-sinew-path")
        .env("SINEW_DEVICE_SKIP_PROBE", "1")
        .env_remove("SINEW_DEVICE")
        .env_remove("SINEW_DEVICE_FIGURES")
        .output()
        .expect("the test binary runs");
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(o.status.success(), "{err}");
    assert!(err.contains("device checks SKIPPED: missing"), "{err}");
    assert_eq!(err.matches("apt-get install").count(), 1, "{err}");
}
