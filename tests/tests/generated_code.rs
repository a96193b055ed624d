//! The generated source itself: reviewed insta snapshots of every sample, regeneration that is
//! byte-identical to what `build.rs` wrote, a builder that leaves unchanged files alone, unrolled
//! kernels that give the same bits as the runtime's, and baked weights with exact bit patterns.

use sinew::emit::{generate, EmitOptions};
use sinew_harness::{host, Net, VisitPair};
use std::path::{Path, PathBuf};

fn generate_file(path: &Path, unroll_below: usize) -> String {
    let src = std::fs::read_to_string(path).expect("spec readable");
    let model = sinew::check_source(&src).model.expect("spec checks");
    let spec_name = path
        .file_name()
        .expect("file name")
        .to_string_lossy()
        .into_owned();
    generate(
        &model,
        &EmitOptions {
            spec_name,
            unroll_below,
        },
    )
}

fn samples() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../samples")
}

#[test]
fn snapshots_of_the_generated_code_of_each_sample() {
    let mut settings = insta::Settings::clone_current();
    settings.set_snapshot_path("../snapshots");
    settings.set_prepend_module_to_snapshot(false);
    settings.bind(|| {
        insta::glob!("../../samples", "*.sinew", |path| {
            insta::assert_snapshot!("generated", generate_file(path, 0));
        });
    });
}

#[test]
fn regenerating_is_byte_identical_to_what_build_rs_wrote() {
    let out = Path::new(env!("OUT_DIR"));
    let mut n = 0;
    for dir in [
        samples(),
        Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures"),
    ] {
        for entry in std::fs::read_dir(dir).expect("folder") {
            let path = entry.expect("entry").path();
            if path.extension().is_none_or(|e| e != "sinew") {
                continue;
            }
            let fresh = generate_file(&path, 0);
            assert_eq!(
                fresh,
                generate_file(&path, 0),
                "{} is not deterministic",
                path.display()
            );
            let name = path
                .file_stem()
                .expect("stem")
                .to_string_lossy()
                .into_owned();
            let built =
                std::fs::read_to_string(out.join(format!("{name}.rs"))).expect("built file");
            assert!(
                fresh == built,
                "{name}: regenerated code differs from the build script's"
            );
            n += 1;
        }
    }
    assert!(n >= 15, "{n}");
}

#[test]
fn the_builder_does_not_rewrite_an_unchanged_file() {
    let dir = std::env::temp_dir().join(format!("sinew-tests-builder-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    let spec = samples().join("valve_gate.sinew");
    let mut b = sinew::Builder::new();
    b.spec(&spec).out_dir(&dir).cargo_metadata(false);
    let files = b.compile().expect("compiles");
    assert_eq!(files, [dir.join("valve_gate.rs")]);
    let mtime = |p: &Path| {
        std::fs::metadata(p)
            .and_then(|m| m.modified())
            .expect("mtime")
    };
    let first = mtime(&files[0]);
    std::thread::sleep(std::time::Duration::from_millis(50));
    assert_eq!(b.compile().expect("compiles again"), files);
    assert_eq!(mtime(&files[0]), first, "an unchanged file was rewritten");

    // A changed spec does rewrite it.
    let edited = dir.join("valve_gate.sinew");
    let text = std::fs::read_to_string(&spec)
        .expect("spec")
        .replace("seed 3", "seed 4");
    std::fs::write(&edited, text).expect("write spec");
    let mut b = sinew::Builder::new();
    b.spec(&edited).out_dir(&dir).cargo_metadata(false);
    b.compile().expect("compiles");
    assert!(std::fs::read_to_string(&files[0])
        .expect("output")
        .contains("SplitMix64::new(seed)"));
    assert!(std::fs::read_to_string(&files[0])
        .expect("output")
        .contains("seed 4"));
    let _ = std::fs::remove_dir_all(&dir);
}

/// Unrolled kernels perform the runtime's operations in the runtime's order: every output,
/// loss, gradient and cost is bit-identical to the rolled model's.
struct SameBits {
    pairs: usize,
}

impl VisitPair for SameBits {
    fn visit<A: Net, B: Net<Scalar = A::Scalar, X = A::X, Y = A::Y>>(&mut self) {
        assert_eq!(A::NAME, B::NAME);
        let model = host::model_of::<A>();
        let a = host::generic_params::<A>(5);
        let mut b = B::zero();
        host::set_flat(&mut b, &host::flat(&a));
        let (xs, ys) = host::data::<A>(&model, 7, 9);
        let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        for (x, y) in xs.iter().zip(&ys) {
            let (pa, pb) = (a.forward(x), b.forward(x));
            assert!(pa.as_ref() == pb.as_ref(), "{}: predict differs", A::NAME);
            assert!(a.sample_loss(x, y) == b.sample_loss(x, y));
        }
        assert!(a.batch_cost(&xs, &ys) == b.batch_cost(&xs, &ys));
        let ga = host::backprop_gradient::<A>(&a, &xs, &ys);
        let gb = host::backprop_gradient::<B>(&b, &xs, &ys);
        assert_eq!(bits(&ga), bits(&gb), "{}: gradients differ", A::NAME);
        self.pairs += 1;
    }
}

#[test]
fn unrolled_kernels_give_the_same_bits() {
    let mut v = SameBits { pairs: 0 };
    sinew_tests::for_each_unrolled_pair(&mut v);
    assert_eq!(v.pairs, 5);
    let unrolled =
        std::fs::read_to_string(Path::new(env!("OUT_DIR")).join("unrolled/valve_gate.rs"))
            .expect("file");
    assert!(
        !unrolled.contains("rt::affine_n(")
            // The lane order of `rt::affine`: one lane per input, folded pairwise.
            && unrolled.contains("(ZERO + w0_0 * u0) + (ZERO + w0_1 * u1) + b0")
    );
}

#[test]
fn baked_weights_hold_exact_bits() {
    use sinew_tests::{baked, baked_mean, baked_std, baked_value};
    // f32 -> f64 is exact and one-to-one (signed zeros and subnormals included), so equal f64
    // bits mean equal bits in the model's scalar.
    fn check<M: Net>(p: &M) -> usize {
        let mut n = 0;
        let mut array = 0;
        p.arrays(&mut |a| {
            for (k, v) in a.iter().enumerate() {
                let want = <M::Scalar as sinew_runtime::Real>::from_f64(baked_value(array, k));
                let (got, want): (f64, f64) = ((*v).into(), want.into());
                assert_eq!(
                    got.to_bits(),
                    want.to_bits(),
                    "{}: array {array} value {k}",
                    M::NAME
                );
                n += 1;
            }
            array += 1;
        });
        n
    }
    assert_eq!(
        check(&baked::valve_gate::TRAINED),
        baked::valve_gate::PARAMETERS
    );
    assert_eq!(
        check(&baked::light_level::TRAINED),
        baked::light_level::PARAMETERS
    );
    let t = &baked::light_level::TRAINED;
    for k in 0..2 {
        assert_eq!(t.input_mean[k].to_bits(), (baked_mean(k) as f32).to_bits());
        assert_eq!(t.input_std[k].to_bits(), (baked_std(k) as f32).to_bits());
    }
    // The awkward values kept their bits: negative zero, and 2e-40, subnormal in f32.
    assert_eq!(t.hidden_weights[0][0].to_bits(), 0x8000_0000);
    let sub = t.hidden_weights[1][0];
    assert!(sub.is_subnormal());
    assert_eq!(sub.to_bits(), (2e-40f64 as f32).to_bits());
    // The baked model runs.
    let (_, p) = t.classify(&[0.3, 0.9]);
    assert!(p.is_finite());
}

#[test]
fn generated_files_use_no_heap_std_unsafe_or_panics_and_never_loop_over_layers() {
    let out = Path::new(env!("OUT_DIR"));
    let mut files = Vec::new();
    for dir in [out.to_path_buf(), out.join("unrolled"), out.join("baked")] {
        for entry in std::fs::read_dir(dir).expect("folder") {
            let p = entry.expect("entry").path();
            if p.extension().is_some_and(|e| e == "rs")
                && p.file_name().is_some_and(|n| n != "index.rs")
            {
                files.push(p);
            }
        }
    }
    assert!(files.len() >= 15 + 5 + 2, "{}", files.len());
    for f in &files {
        let text = std::fs::read_to_string(f).expect("generated file");
        assert!(
            text.starts_with("// Generated by sinew "),
            "{}",
            f.display()
        );
        for bad in [
            "Vec",
            "Box",
            "unsafe",
            "std::",
            "panic!",
            "unwrap",
            "expect(",
            "todo!",
            "unreachable!",
        ] {
            assert!(!text.contains(bad), "{}: contains `{bad}`", f.display());
        }
        // Every loop runs over samples (`xs`, the batch's `sample_blocks`, a block `xb`), the
        // classes, or the buffer of
        // one layer (`a_*`, `z_*`, `d_*`, the standardized input `x0`): never over layers.
        for l in text
            .lines()
            .map(str::trim)
            .filter(|l| l.starts_with("for "))
        {
            let iterated = l.split_once(" in ").map_or("", |(_, it)| it);
            let head: String = iterated
                .chars()
                .take_while(|c| c.is_alphanumeric() || *c == '_')
                .collect();
            let ok = matches!(
                head.as_str(),
                "xs" | "sample_blocks" | "xb" | "x0" | "Class"
            ) || ["a_", "z_", "d_"].iter().any(|p| head.starts_with(p));
            assert!(ok, "{}: loop `{l}`", f.display());
        }
        assert!(!text.contains("while ") && !text.contains("loop {"));
    }
}
