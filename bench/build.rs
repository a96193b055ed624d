//! Compiles the benchmark networks (dense N1, N2, N3 and the conv network C1) through the public
//! build API, as a user's crate would: once with the defaults into `OUT_DIR`, and N1 and N2 again
//! with every matrix kernel unrolled into `OUT_DIR/unrolled` (the measurement behind the default
//! of `unroll_below`).

use std::error::Error;
use std::path::PathBuf;

fn main() -> Result<(), Box<dyn Error>> {
    let manifest = PathBuf::from(std::env::var("CARGO_MANIFEST_DIR")?);
    let out_dir = PathBuf::from(std::env::var("OUT_DIR")?);
    let spec = |name: &str| manifest.join("specs").join(format!("{name}.sinew"));
    sinew::Builder::new()
        .specs(["bench_n1", "bench_n2", "bench_n3", "bench_c1"].map(spec))
        .compile()?;
    sinew::Builder::new()
        .specs(["bench_n1", "bench_n2"].map(spec))
        .out_dir(out_dir.join("unrolled"))
        .unroll_below(usize::MAX)
        .compile()?;
    Ok(())
}
