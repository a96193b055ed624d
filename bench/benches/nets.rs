//! Criterion benchmarks of every case in `sinew_bench::cases`, grouped by network and operation
//! (`n1_inference`, `n3_batch`, ...), one function per implementation. Run through
//! `bash bench/run.sh`, or `cargo bench -p sinew-bench --bench nets -- n2_` for a subset.

// The hand-written baselines are kept as a user would write them (indexed loops included).
#![allow(
    clippy::needless_range_loop,
    clippy::neg_cmp_op_on_partial_ord,
    clippy::op_ref
)]
use criterion::{criterion_group, criterion_main, Criterion, SamplingMode};
use sinew_bench::cases;
use std::time::Instant;

fn benches(c: &mut Criterion) {
    cases::single_thread();
    if let Err(e) = sinew_bench::check::agree() {
        panic!("the implementations disagree, so their timings would mean nothing: {e}");
    }
    let mut all = cases::all();
    let mut groups: Vec<String> = Vec::new();
    for case in &all {
        let g = format!("{}_{}", case.net.name, case.op.name());
        if !groups.contains(&g) {
            groups.push(g);
        }
    }
    for g in groups {
        let mut group = c.benchmark_group(&g);
        if g.ends_with("_batch") || g.starts_with("n3_") {
            // Calls of a millisecond or more: ten samples of equal length keep the run short.
            group.sample_size(10).sampling_mode(SamplingMode::Flat);
        }
        for case in all
            .iter_mut()
            .filter(|k| format!("{}_{}", k.net.name, k.op.name()) == g)
        {
            let run = &mut case.run;
            group.bench_function(case.imp, |b| {
                b.iter_custom(|iters| {
                    let t = Instant::now();
                    run(iters);
                    t.elapsed()
                })
            });
        }
        group.finish();
    }
}

criterion_group!(nets, benches);
criterion_main!(nets);
