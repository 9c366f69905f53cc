//! Registration timings: two virtual partial scans of the bunny mesh (views 50° apart, 0.3 %
//! noise, the source in a random pose) of 100 000 and 1 000 000 points each, aligned with both
//! methods from the clouds in memory (downsampling, spacing estimate and every stage included;
//! file reading excluded). Before measuring, one run per case prints its stage split.
//!
//! `cargo bench --bench align -- --warm-up-time 1 --measurement-time 10`; `EQUISCAN_BENCH_TUNE`
//! measures other tuning values (tests/common/tune.rs).

#[path = "../../tests/common/mod.rs"]
mod common;

use std::hint::black_box;

use common::tune::tuned;
use common::{bunny, errors, problem};
use criterion::{BenchmarkId, Criterion, Throughput, criterion_group, criterion_main};
use equiscan::align::{AlignParams, Method, align_pair};

fn bench(c: &mut Criterion) {
    let mesh = bunny();
    let mut group = c.benchmark_group("align");
    group.sample_size(10);
    for points in [100_000usize, 1_000_000] {
        let p = problem(&mesh, 50.0, points, 0.003, 17);
        for method in [Method::Equivariant, Method::Fpfh] {
            let params = AlignParams {
                method,
                ..AlignParams::default()
            };
            let params = tuned(params, &p.source, &p.target);
            let a = align_pair(&p.source, &p.target, &params).expect("alignment runs");
            let (rot, trans) = errors(&p.source, &a.transform, &p.truth);
            let total: f64 = a.timings.iter().map(|s| s.seconds).sum();
            eprintln!(
                "{} {}+{} points: {:?}, rotation error {rot:.3}°, translation error {:.4} % of the diagonal, {total:.3} s: {}",
                method.name(),
                p.source.len(),
                p.target.len(),
                a.verdict,
                100.0 * trans / p.diagonal,
                a.timings
                    .iter()
                    .map(|s| format!("{} {:.3}", s.stage, s.seconds))
                    .collect::<Vec<_>>()
                    .join(", ")
            );
            group.throughput(Throughput::Elements(
                (p.source.len() + p.target.len()) as u64,
            ));
            group.bench_with_input(
                BenchmarkId::new(method.name(), points),
                &params,
                |b, params| b.iter(|| black_box(align_pair(&p.source, &p.target, params))),
            );
        }
    }
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
