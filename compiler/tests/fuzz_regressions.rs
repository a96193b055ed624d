//! The fuzz harness on stable, in `cargo test`:
//!
//! - every input of the regression corpus (`tests/fuzz_corpus/<target>/`: each crash that
//!   fuzzing found, minimized, plus inputs that reached new code) is replayed through the same
//!   function the libFuzzer target runs, so a fixed crash stays fixed;
//! - the fuzz seeds (samples, fixtures, the bad-spec corpus, `fuzz/seeds/files`) are replayed
//!   too;
//! - a proptest variant feeds random bytes and random mutations of the seeds to both targets
//!   (bounded cases), for machines without nightly.
//!
//! The harness is `fuzz/src/harness.rs`, compiled here as a module.

#[path = "../../fuzz/src/harness.rs"]
mod harness;

use proptest::prelude::*;
use std::path::{Path, PathBuf};

fn files_in(dir: &Path) -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = match std::fs::read_dir(dir) {
        Ok(rd) => rd
            .filter_map(|e| e.ok().map(|e| e.path()))
            .filter(|p| p.is_file())
            .collect(),
        Err(_) => Vec::new(),
    };
    v.sort();
    v
}

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

fn corpus(target: &str) -> Vec<PathBuf> {
    files_in(
        &Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("tests/fuzz_corpus")
            .join(target),
    )
}

fn spec_seeds() -> Vec<Vec<u8>> {
    let r = root();
    let mut v = Vec::new();
    for dir in ["samples", "tests/bad", "tests/fixtures"] {
        for p in files_in(&r.join(dir)) {
            if p.extension().is_some_and(|e| e == "sinew") {
                v.push(std::fs::read(&p).expect("read seed"));
            }
        }
    }
    v
}

fn file_seeds() -> Vec<Vec<u8>> {
    files_in(&root().join("fuzz/seeds/files"))
        .iter()
        .map(|p| std::fs::read(p).expect("read seed"))
        .collect()
}

#[test]
fn parse_check_corpus_replays_cleanly() {
    let inputs = corpus("parse_check");
    assert!(
        !inputs.is_empty(),
        "the parse_check regression corpus is empty"
    );
    for p in &inputs {
        let bytes = std::fs::read(p).expect("read corpus file");
        harness::parse_check(&bytes);
    }
    let seeds = spec_seeds();
    assert!(seeds.len() >= 60, "{} spec seeds", seeds.len());
    for s in &seeds {
        harness::parse_check(s);
    }
}

#[test]
fn files_corpus_replays_cleanly() {
    let inputs = corpus("files");
    assert!(!inputs.is_empty(), "the files regression corpus is empty");
    for p in &inputs {
        let bytes = std::fs::read(p).expect("read corpus file");
        harness::files(&bytes);
    }
    let seeds = file_seeds();
    assert!(seeds.len() >= 8, "{} file seeds", seeds.len());
    for s in &seeds {
        harness::files(s);
    }
}

/// A seed with a few bytes changed, inserted or removed (the common libFuzzer mutations).
fn mutate(seed: &[u8], edits: &[(usize, u8, u8)]) -> Vec<u8> {
    let mut v = seed.to_vec();
    for &(at, byte, kind) in edits {
        let i = if v.is_empty() { 0 } else { at % (v.len() + 1) };
        match kind % 3 {
            0 => v.insert(i, byte),
            1 if i < v.len() => v[i] = byte,
            _ if i < v.len() => {
                v.remove(i);
            }
            _ => v.push(byte),
        }
    }
    v
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 400, ..ProptestConfig::default() })]

    #[test]
    fn parse_check_never_panics_on_mutated_seeds(
        which in any::<usize>(),
        edits in prop::collection::vec((any::<usize>(), any::<u8>(), any::<u8>()), 1..12),
    ) {
        let seeds = spec_seeds();
        let input = mutate(&seeds[which % seeds.len()], &edits);
        harness::parse_check(&input);
    }

    #[test]
    fn files_never_panic_on_mutated_seeds(
        which in any::<usize>(),
        edits in prop::collection::vec((any::<usize>(), any::<u8>(), any::<u8>()), 1..12),
    ) {
        let seeds = file_seeds();
        let input = mutate(&seeds[which % seeds.len()], &edits);
        harness::files(&input);
    }

    #[test]
    fn files_never_panic_on_random_bytes(bytes in prop::collection::vec(any::<u8>(), 0..400)) {
        harness::files(&bytes);
    }
}
