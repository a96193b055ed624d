//! No panicking path in any generated function or runtime kernel, on the three device targets, at
//! opt-level 2, 3, `s` and `z`.
//!
//! The test writes one `no_std` library crate (`sinew_proof`) that holds, as a user's crate
//! would (`pub mod m { include!("m.rs"); }`):
//!
//! - every spec of `samples/` and `tests/fixtures/`, generated three ways: rolled
//!   (`sinew_proof::rolled::<model>`), unrolled below 64 weights (`unrolled::<model>`) and with
//!   baked weights (`baked::<model>`);
//! - the first [`RANDOM`] random networks of `tests-random` (f32 and f64, one to four hidden
//!   layers, every activation, classifiers and regressors; one in five unrolled), as
//!   `random::<model>`;
//! - every public function of `sinew-runtime`, monomorphised for `f32` and `f64` (the array forms
//!   for three shapes), exported by name (`tests/panic_free/kernels.rs`).
//!
//! It builds the crate for `thumbv7em-none-eabihf`, `thumbv6m-none-eabi` and
//! `riscv32imc-unknown-none-elf` at each optimisation level with `cargo rustc -- --emit=obj`
//! (codegen units 1, `panic = "abort"`), and `sinew-runtime` and `libm` the same way. From the
//! object files it builds the call graph (each function's section and its relocations, calls
//! between the three crates resolved by symbol) and walks it from every public generated
//! function and every exported kernel. Reaching an undefined symbol of `core` that panics
//! (`core::panicking::*`, `rust_begin_unwind`, the `*_fail` helpers of slices, `Option` and
//! `Result`) fails the test, naming the function and the chain of calls. Functions of `core`
//! that the objects call out of line are judged by their name only (`core` ships compiled).
//!
//! It looks at everything: one exported function of the crate takes the address of every public
//! generated function (so each has code in the object, even one the compiler would otherwise
//! only inline into other crates, or merged with an identical one), and a second test fails
//! when a `pub fn` of `runtime/src` is not called by `kernels.rs`.
//!
//! Without the Rust targets the test prints why it skipped and passes; with
//! `SINEW_DEVICE=require` (what `.ci/run` sets after installing them) it fails instead.

use object::{Object, ObjectSection, ObjectSymbol, RelocationTarget, SectionIndex, SymbolKind};

use quote::ToTokens as _;
use sinew::emit::EmitOptions;
use sinew::ir::Model;
use sinew::weights::{FlatLayer, Standardization, Weights};
use sinew_harness::files::specs_in;
use sinew_harness::toolchain;
use sinew_tests::{BAKED, UNROLLED, UNROLL_BELOW};
use std::collections::{BTreeMap, BTreeSet, HashMap};
use std::fmt::Write as _;
use std::io::Write as _;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

/// The device targets.
const TARGETS: [&str; 3] = [
    "thumbv7em-none-eabihf",
    "thumbv6m-none-eabi",
    "riscv32imc-unknown-none-elf",
];
/// Cargo profiles of the proof crate and their `opt-level`.
const LEVELS: [(&str, &str); 4] = [("o2", "2"), ("o3", "3"), ("os", "\"s\""), ("oz", "\"z\"")];
/// How many of the random networks go into the crate (the first ones, in order).
const RANDOM: usize = 40;
/// The name of the proof crate (no word of it may look like a panic symbol).
const CRATE: &str = "sinew_proof";
/// The exported function of the proof crate that takes the address of every public generated
/// function.
const ADDRESSES: &str = "sinew_function_addresses";

fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("..")
        .canonicalize()
        .expect("the repository root exists")
}

// ---------------------------------------------------------------------------------------------
// The crate

/// One generated module: where it goes and its source.
struct Module {
    group: &'static str,
    name: String,
    source: String,
}

/// The spec files of `dir` (`sinew_harness::files::specs_in`); panics naming the folder.
fn spec_files(dir: &Path) -> Vec<PathBuf> {
    specs_in(dir).unwrap_or_else(|e| panic!("{}: {e}", dir.display()))
}

fn checked(text: &str, what: &str) -> Model {
    sinew::check_source(text)
        .model
        .unwrap_or_else(|| panic!("{what} does not check"))
}

/// Deterministic, unremarkable trained values for a model (the values do not matter here, only
/// that the generated `TRAINED` static is there).
fn baked(model: &Model) -> Weights {
    let value = |k: usize| ((k % 17) as f64 - 8.0) / 16.0;
    let layers = model
        .layers()
        .iter()
        .map(|l| FlatLayer {
            weights: (0..l.width * l.fan_in).map(value).collect(),
            bias: (0..l.width).map(value).collect(),
        })
        .collect();
    let width = model.input().width;
    let standardization = model.input().standardize.then(|| Standardization {
        mean: vec![0.5; width],
        std: vec![2.0; width],
    });
    Weights::from_params(model, layers, standardization, None)
}

fn generate(model: &Model, spec_name: &str, unroll_below: usize, weights: bool) -> String {
    let options = EmitOptions {
        spec_name: spec_name.to_string(),
        unroll_below,
    };
    if weights {
        let trained = baked(model).fit(model).expect("the values fit the model");
        sinew::emit::generate_trained(&trained, &options)
    } else {
        sinew::emit::generate(model, &options)
    }
}

/// The spec texts of the random networks, in order, and whether each is unrolled.
fn random_specs() -> Vec<(String, bool)> {
    struct Collect(Vec<(String, bool)>);
    impl sinew_harness::Visit for Collect {
        fn visit<M: sinew_harness::Net>(&mut self) {
            self.0.push((M::SPEC.to_string(), M::UNROLLED));
        }
    }
    let mut c = Collect(Vec::new());
    sinew_tests_random::for_each_net(&mut c);
    c.0
}

fn modules() -> Vec<Module> {
    let root = repo();
    let mut specs = spec_files(&root.join("samples"));
    specs.extend(spec_files(&root.join("tests/fixtures")));
    let mut out = Vec::new();
    for path in &specs {
        let text = std::fs::read_to_string(path).expect("a spec file");
        let file = path.file_name().expect("a file").to_string_lossy();
        let model = checked(&text, &file);
        for (group, unroll, weights) in [
            ("rolled", 0, false),
            ("unrolled", UNROLL_BELOW, false),
            ("baked", 0, true),
        ] {
            if (group == "unrolled" && !UNROLLED.contains(&model.name()))
                || (group == "baked" && !BAKED.contains(&model.name()))
            {
                continue;
            }
            out.push(Module {
                group,
                name: model.name().to_string(),
                source: generate(&model, &file, unroll, weights),
            });
        }
    }
    let random = random_specs();
    assert!(
        random.len() >= RANDOM,
        "only {} random networks",
        random.len()
    );
    for (text, unrolled) in random.iter().take(RANDOM) {
        let model = checked(text, "a random network");
        // The unrolling threshold of tests-random/build.rs.
        let unroll = if *unrolled { 48 } else { 0 };
        out.push(Module {
            group: "random",
            name: model.name().to_string(),
            source: generate(&model, &format!("{}.sinew", model.name()), unroll, false),
        });
    }
    out
}

/// Writes the crate; returns its folder.
fn write_crate(modules: &[Module]) -> PathBuf {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("panic_free");
    let src = dir.join("src");
    std::fs::create_dir_all(src.join("gen")).expect("create the crate folder");
    let current: BTreeSet<String> = modules
        .iter()
        .map(|m| format!("{}_{}.rs", m.group, m.name))
        .collect();
    for e in std::fs::read_dir(src.join("gen"))
        .expect("the gen folder")
        .flatten()
    {
        if !current.contains(&*e.file_name().to_string_lossy()) {
            let _ = std::fs::remove_file(e.path());
        }
    }
    let runtime = repo().join("runtime");
    let mut manifest = format!(
        r#"# Written by tests/tests/panic_free.rs.
[package]
name = "{}"
version = "0.0.0"
edition = "2021"
publish = false

[lib]
path = "src/lib.rs"

[dependencies]
sinew-runtime = {{ path = {:?} }}

[workspace]

[profile.release]
panic = "abort"
debug = false
incremental = false
"#,
        CRATE.replace('_', "-"),
        runtime.display().to_string()
    );
    for (profile, level) in LEVELS {
        let _ = write!(
            manifest,
            "\n[profile.{profile}]\ninherits = \"release\"\nopt-level = {level}\n"
        );
    }
    let mut lib = String::from(
        "//! Written by tests/tests/panic_free.rs: generated modules and runtime kernels.\n\
         #![no_std]\n#![allow(dead_code, unused_imports)]\n\n\
         /// Every runtime kernel, exported.\npub mod kernels;\n",
    );
    let mut groups: BTreeMap<&str, Vec<&Module>> = BTreeMap::new();
    for m in modules {
        groups.entry(m.group).or_default().push(m);
    }
    for (group, ms) in &groups {
        let _ = writeln!(lib, "/// The `{group}` modules.\npub mod {group} {{");
        for m in ms {
            let file = format!("gen/{group}_{}.rs", m.name);
            write_if_changed(&src.join(&file), &m.source);
            // The generated file is `pub mod <model> { .. }` itself.
            let _ = writeln!(lib, "    include!({file:?});");
        }
        lib.push_str("}\n");
    }
    // The address of every public generated function. Without it, the compiler leaves out of the
    // library the functions it may inline into other crates (`const fn`s, and small functions
    // that call nothing, such as an unrolled `predict_into`): taken here, each has code of its
    // own in the object, where the proof can see it.
    lib.push_str(
        "\n/// The address of every public generated function (forces the code of each).\n\
         #[no_mangle]\npub fn sinew_function_addresses(out: &mut [usize]) {\n    let all = [\n",
    );
    for m in modules {
        for f in public_functions(&m.source) {
            let _ = writeln!(lib, "        {}::{f} as usize,", m.group);
        }
    }
    lib.push_str(
        "    ];\n    for (o, a) in out.iter_mut().zip(all) {\n        *o = a;\n    }\n}\n",
    );
    write_if_changed(&dir.join("Cargo.toml"), &manifest);
    write_if_changed(&src.join("lib.rs"), &lib);
    let kernels =
        std::fs::read_to_string(repo().join("tests/panic_free/kernels.rs")).expect("kernels.rs");
    write_if_changed(&src.join("kernels.rs"), &kernels);
    // The workspace's lock file: the same libm as every other build, and no registry lookup.
    let lock = std::fs::read_to_string(repo().join("Cargo.lock")).expect("Cargo.lock");
    if !dir.join("Cargo.lock").exists() {
        write_if_changed(&dir.join("Cargo.lock"), &lock);
    }
    dir
}

/// Writes `text` to `path` unless it holds it already (keeps Cargo's fingerprints).
fn write_if_changed(path: &Path, text: &str) {
    if std::fs::read_to_string(path).is_ok_and(|old| old == text) {
        return;
    }
    std::fs::write(path, text).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
}

// ---------------------------------------------------------------------------------------------
// Building

/// `cargo rustc -p PACKAGE --lib --profile P --target T -- --emit=obj`; returns the object file.
fn object_of(dir: &Path, package: &str, target: &str, profile: &str) -> Result<PathBuf, String> {
    let mut c = Command::new("cargo");
    c.args(["rustc", "--lib", "--offline", "-p", package])
        .args(["--profile", profile, "--target", target])
        .arg("--manifest-path")
        .arg(dir.join("Cargo.toml"))
        .args(["--", "--emit=obj"])
        .env("CARGO_TARGET_DIR", dir.join("target").join(target))
        .env("CARGO_TERM_COLOR", "never")
        .stdin(Stdio::null());
    // Nothing of the outer build may leak into this one.
    toolchain::isolate(&mut c);
    let out = c.output().map_err(|e| format!("cannot run cargo: {e}"))?;
    if !out.status.success() {
        return Err(format!(
            "building {package} for {target} ({profile}) failed:\n{}",
            toolchain::tail(&String::from_utf8_lossy(&out.stderr), 40)
        ));
    }
    // The newest object of the package in deps/ (its file name carries a hash).
    let deps = dir
        .join("target")
        .join(target)
        .join(target)
        .join(profile)
        .join("deps");
    let stem = format!("{}-", package.replace('-', "_"));
    std::fs::read_dir(&deps)
        .map_err(|e| format!("{}: {e}", deps.display()))?
        .filter_map(Result::ok)
        .map(|e| e.path())
        .filter(|p| {
            p.extension().is_some_and(|e| e == "o")
                && p.file_name()
                    .is_some_and(|n| n.to_string_lossy().starts_with(&stem))
        })
        .max_by_key(|p| p.metadata().and_then(|m| m.modified()).ok())
        .ok_or_else(|| format!("no object file of {package} in {}", deps.display()))
}

// ---------------------------------------------------------------------------------------------
// The call graph

/// Functions (by raw symbol name) and what each one references.
#[derive(Default)]
struct Graph {
    /// Defined function -> referenced symbols (raw names).
    calls: HashMap<String, BTreeSet<String>>,
    /// Function symbols defined in the proof crate's object (raw names).
    roots: BTreeSet<String>,
}

fn demangled(raw: &str) -> String {
    format!("{:#}", rustc_demangle::demangle(raw))
}

/// A symbol of `core` (or the panic entry) that panics, by its demangled name.
fn is_panic(name: &str) -> bool {
    name.starts_with("core::panicking::")
        || name == "rust_begin_unwind"
        || name.starts_with("core::panic::")
        || name.contains("unwrap_failed")
        || name.contains("expect_failed")
        || (name.starts_with("core::") && name.ends_with("_fail"))
        || name.starts_with("core::slice::index::slice_")
        || name.starts_with("core::str::slice_error_fail")
}

/// Adds the functions of one object file to `graph`; `roots` marks the proof crate's object.
fn read_object(path: &Path, graph: &mut Graph, roots: bool) {
    let data = std::fs::read(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let file = object::File::parse(&*data).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    // The functions each section defines (function sections: usually one).
    let mut in_section: HashMap<SectionIndex, Vec<String>> = HashMap::new();
    for sym in file.symbols() {
        if sym.kind() != SymbolKind::Text || sym.is_undefined() {
            continue;
        }
        let (Ok(name), Some(section)) = (sym.name(), sym.section_index()) else {
            continue;
        };
        in_section
            .entry(section)
            .or_default()
            .push(name.to_string());
        if roots {
            graph.roots.insert(name.to_string());
        }
    }
    for section in file.sections() {
        let Some(functions) = in_section.get(&section.index()) else {
            continue;
        };
        let mut targets = BTreeSet::new();
        for (_, reloc) in section.relocations() {
            let RelocationTarget::Symbol(index) = reloc.target() else {
                continue;
            };
            let Ok(sym) = file.symbol_by_index(index) else {
                continue;
            };
            if sym.kind() == SymbolKind::Section {
                // A reference through a section symbol: the functions of that section.
                if let Some(fs) = sym.section_index().and_then(|s| in_section.get(&s)) {
                    targets.extend(fs.iter().cloned());
                }
            } else if let Ok(name) = sym.name() {
                if !name.is_empty() {
                    targets.insert(name.to_string());
                }
            }
        }
        for f in functions {
            let entry = graph.calls.entry(f.clone()).or_default();
            entry.extend(targets.iter().filter(|t| *t != f).cloned());
        }
    }
}

/// A chain of calls from `root` to a panicking symbol, if there is one (breadth first: the
/// shortest chain).
fn panic_path(graph: &Graph, root: &str) -> Option<Vec<String>> {
    let mut parent: HashMap<&str, &str> = HashMap::new();
    let mut queue = std::collections::VecDeque::from([root]);
    let mut seen = BTreeSet::from([root]);
    while let Some(f) = queue.pop_front() {
        if !graph.calls.contains_key(f) && is_panic(&demangled(f)) {
            let mut path = vec![demangled(f)];
            let mut at = f;
            while let Some(p) = parent.get(at) {
                path.push(demangled(p));
                at = p;
            }
            path.reverse();
            return Some(path);
        }
        for callee in graph.calls.get(f).into_iter().flatten() {
            if seen.insert(callee.as_str()) {
                parent.insert(callee.as_str(), f);
                queue.push_back(callee.as_str());
            }
        }
    }
    None
}

/// The public functions of a generated file, as paths (`pump_health::Params::predict`).
fn public_functions(source: &str) -> Vec<String> {
    fn walk(prefix: &str, items: &[syn::Item], out: &mut Vec<String>) {
        for item in items {
            match item {
                syn::Item::Fn(f) if matches!(f.vis, syn::Visibility::Public(_)) => {
                    out.push(format!("{prefix}{}", f.sig.ident));
                }
                syn::Item::Impl(i) if i.trait_.is_none() => {
                    let owner = type_name(&i.self_ty);
                    for it in &i.items {
                        if let syn::ImplItem::Fn(f) = it {
                            if matches!(f.vis, syn::Visibility::Public(_)) {
                                out.push(format!("{prefix}{owner}::{}", f.sig.ident));
                            }
                        }
                    }
                }
                syn::Item::Mod(m) if matches!(m.vis, syn::Visibility::Public(_)) => {
                    if let Some((_, inner)) = &m.content {
                        walk(&format!("{prefix}{}::", m.ident), inner, out);
                    }
                }
                _ => {}
            }
        }
    }
    let file = syn::parse_file(source).expect("generated code parses");
    let mut out = Vec::new();
    walk("", &file.items, &mut out);
    out
}

fn type_name(ty: &syn::Type) -> String {
    match ty {
        syn::Type::Path(p) => p
            .path
            .segments
            .last()
            .map(|s| s.ident.to_string())
            .unwrap_or_default(),
        _ => String::new(),
    }
}

// ---------------------------------------------------------------------------------------------
// The runtime's public functions

/// Every `pub fn` of the runtime's sources outside test modules, as `owner::name` (module or
/// type).
fn runtime_functions() -> Vec<(PathBuf, String)> {
    fn walk(dir: &Path, out: &mut Vec<PathBuf>) {
        for e in std::fs::read_dir(dir).expect("runtime/src") {
            let p = e.expect("entry").path();
            if p.is_dir() {
                walk(&p, out);
            } else if p.extension().is_some_and(|e| e == "rs") {
                out.push(p);
            }
        }
    }
    fn is_test(attrs: &[syn::Attribute]) -> bool {
        attrs.iter().any(|a| {
            a.path().is_ident("cfg") && a.meta.to_token_stream().to_string().contains("test")
        })
    }
    fn items(path: &Path, module: &str, list: &[syn::Item], out: &mut Vec<(PathBuf, String)>) {
        for item in list {
            match item {
                syn::Item::Fn(f) if matches!(f.vis, syn::Visibility::Public(_)) => {
                    out.push((path.to_path_buf(), format!("{module}::{}", f.sig.ident)));
                }
                syn::Item::Impl(i) if i.trait_.is_none() && !is_test(&i.attrs) => {
                    let owner = type_name(&i.self_ty);
                    for it in &i.items {
                        if let syn::ImplItem::Fn(f) = it {
                            if matches!(f.vis, syn::Visibility::Public(_)) {
                                out.push((path.to_path_buf(), format!("{owner}::{}", f.sig.ident)));
                            }
                        }
                    }
                }
                syn::Item::Mod(m) if !is_test(&m.attrs) => {
                    if let Some((_, inner)) = &m.content {
                        items(path, &m.ident.to_string(), inner, out);
                    }
                }
                _ => {}
            }
        }
    }
    let mut files = Vec::new();
    walk(&repo().join("runtime/src"), &mut files);
    files.sort();
    let mut out = Vec::new();
    for f in files {
        let text = std::fs::read_to_string(&f).expect("a runtime source");
        let file = syn::parse_file(&text).unwrap_or_else(|e| panic!("{}: {e}", f.display()));
        let module = f
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_default();
        items(&f, &module, &file.items, &mut out);
    }
    out
}

#[test]
fn every_public_runtime_function_has_an_exported_kernel() {
    let kernels =
        std::fs::read_to_string(repo().join("tests/panic_free/kernels.rs")).expect("kernels.rs");
    let functions = runtime_functions();
    assert!(
        functions.len() > 50,
        "found only {} functions",
        functions.len()
    );
    let missing: Vec<String> = functions
        .iter()
        .filter(|(_, f)| {
            !kernels.contains(&format!("{f}(")) && !kernels.contains(&format!("{f}::<"))
        })
        .map(|(p, f)| format!("{f} ({})", p.display()))
        .collect();
    assert!(
        missing.is_empty(),
        "tests/panic_free/kernels.rs does not call these public runtime functions:\n  {}",
        missing.join("\n  ")
    );
}

/// What one build found.
struct Finding {
    line: String,
    problems: Vec<String>,
}

/// Builds the crate for one target and level and walks the call graph from every root.
fn prove(dir: &Path, target: &str, profile: &str, level: &str) -> Finding {
    let at = format!("{target} opt-level {level}");
    let mut graph = Graph::default();
    let mut problems = Vec::new();
    for (k, package) in ["sinew-proof", "sinew-runtime", "libm"]
        .into_iter()
        .enumerate()
    {
        match object_of(dir, package, target, profile) {
            Ok(o) => read_object(&o, &mut graph, k == 0),
            Err(e) => {
                return Finding {
                    line: format!("{at}: build failed"),
                    problems: vec![format!("{at}: {e}")],
                }
            }
        }
    }
    let roots: BTreeMap<String, &String> = graph
        .roots
        .iter()
        .map(|r| (demangled(r), r))
        .filter(|(d, _)| {
            d.starts_with(&format!("{CRATE}::")) || d.starts_with("sinew_k_") || d == ADDRESSES
        })
        .collect();
    // `sinew_function_addresses` refers to every public generated function, so every one of
    // them is reachable from a root even when the compiler merged identical functions into one
    // symbol (a function whose address is taken always has code).
    if !roots.contains_key(ADDRESSES) {
        problems.push(format!("{at}: `{ADDRESSES}` is not in the object"));
    }
    // Grouped by the function that references the panic, with the first generated function and
    // the first kernel that reach it.
    let mut found = 0;
    let mut by_site: BTreeMap<String, (usize, Option<String>, Option<String>)> = BTreeMap::new();
    for (name, raw) in &roots {
        if let Some(path) = panic_path(&graph, raw) {
            found += 1;
            let site = path[path.len().saturating_sub(2)..].join(" -> ");
            let e = by_site.entry(site).or_default();
            e.0 += 1;
            let example = if name.starts_with("sinew_k_") {
                &mut e.2
            } else {
                &mut e.1
            };
            example.get_or_insert_with(|| format!("{name} can panic: {}", path.join(" -> ")));
        }
    }
    for (site, (n, generated, kernel)) in &by_site {
        problems.push(format!("{at}: {n} functions reach {site}"));
        for example in [generated, kernel].into_iter().flatten() {
            problems.push(format!("    e.g. {example}"));
        }
    }
    let kernels = roots.keys().filter(|k| k.starts_with("sinew_k_")).count();
    Finding {
        line: format!(
            "{target:<28} opt-level {level:<2} {:>5} functions of generated code, {:>4} kernels: \
             {found} panic references",
            roots.len() - kernels,
            kernels
        ),
        problems,
    }
}

#[test]
fn no_generated_function_or_runtime_kernel_can_panic_on_a_device() {
    let missing: Vec<&str> = TARGETS
        .into_iter()
        .filter(|t| !toolchain::has_target(None, t))
        .collect();
    if !missing.is_empty() {
        let text = format!(
            "panic-freedom proof SKIPPED: missing the Rust targets {} (`rustup target add {}`, or \
             run `bash tests/device/run.sh --install`)",
            missing.join(", "),
            missing.join(" ")
        );
        if std::env::var("SINEW_DEVICE").is_ok_and(|v| v == "require") {
            panic!("SINEW_DEVICE=require, but {text}");
        }
        // Past the harness's capture, so that the skip shows in a plain `cargo test` run.
        let _ = writeln!(std::io::stderr(), "\n!! {text}\n");
        return;
    }
    let modules = modules();
    let dir = write_crate(&modules);
    let functions: usize = modules
        .iter()
        .map(|m| public_functions(&m.source).len())
        .sum();
    // Every (target, level); `SINEW_PROOF_ONLY=TARGET:LEVEL` narrows it while working on a fix.
    let only = std::env::var("SINEW_PROOF_ONLY").ok();
    let jobs: Vec<(&str, &str, &str)> = TARGETS
        .iter()
        .flat_map(|t| {
            LEVELS
                .iter()
                .map(move |(p, l)| (*t, *p, l.trim_matches('"')))
        })
        .filter(|(t, _, l)| only.as_ref().is_none_or(|o| *o == format!("{t}:{l}")))
        .collect();
    // Two builds at a time (one per target folder at most, so that Cargo's lock never waits).
    let next = std::sync::Mutex::new(jobs.iter());
    let results = std::sync::Mutex::new(Vec::new());
    std::thread::scope(|s| {
        for _ in 0..2 {
            s.spawn(|| loop {
                let Some(&(target, profile, level)) = next.lock().expect("queue").next() else {
                    break;
                };
                let f = prove(&dir, target, profile, level);
                eprintln!("{}", f.line);
                results.lock().expect("results").push(((target, level), f));
            });
        }
    });
    let mut results = results.into_inner().expect("results");
    results.sort_by_key(|(k, _)| *k);
    let table: Vec<&str> = results.iter().map(|(_, f)| f.line.as_str()).collect();
    let problems: Vec<&String> = results.iter().flat_map(|(_, f)| &f.problems).collect();
    // Straight to stderr, past the test harness's capture: the table is the test's result, so it
    // shows in a plain `cargo test --workspace` too.
    let _ = writeln!(
        std::io::stderr(),
        "\npanic-freedom proof: {} generated modules ({} random networks), {} public generated \
         functions:\n{}\n",
        modules.len(),
        RANDOM,
        functions,
        table.join("\n")
    );
    assert!(
        problems.is_empty(),
        "{}",
        problems
            .iter()
            .map(|p| p.as_str())
            .collect::<Vec<_>>()
            .join("\n")
    );
}
