//! Benchmarks of the descriptor engine on a seeded scan-like scene (tools/bench/scene.rs: floor,
//! walls, pipes, balls at spacing 1, radius 5 spacings, about 70 neighbours), defaults L = 4,
//! N = 6, norms + power spectrum:
//! - `descriptor/engine`: every point a centre, end to end without file I/O (tree prebuilt);
//! - `descriptor/search`: the bare `for_each_within` loop over the same centres and radius;
//! - `descriptor/gather`: that loop collecting indices, without and with the per-centre sort
//!   that makes the sums independent of the tree's visiting order (the sort's price).
//!
//! `cargo bench --bench descriptor -- --warm-up-time 1 --measurement-time 5`

use std::hint::black_box;

use criterion::{BenchmarkId, Criterion, Throughput, criterion_group, criterion_main};
use equiscan::descriptor::{Centres, Engine, Recipe};
use equiscan::spatial::KdIndex;
use rayon::prelude::*;

#[path = "scene.rs"]
mod scene;

const SIZES: [usize; 3] = [10_000, 100_000, 1_000_000];
const RADIUS: f32 = 5.0;

fn bench(c: &mut Criterion) {
    let mut g = c.benchmark_group("descriptor");
    g.sample_size(10);
    for n in SIZES {
        let pts = scene::scene(n, 1.0, 42);
        let index = KdIndex::new(&pts).unwrap();
        let engine = Engine::new(Recipe::builder().radius(RADIUS).build().unwrap());
        g.throughput(Throughput::Elements(n as u64));
        g.bench_with_input(BenchmarkId::new("engine", n), &n, |b, _| {
            b.iter(|| {
                engine
                    .compute_with_index(&pts, &index, &Centres::All, None)
                    .unwrap()
            })
        });
        g.bench_with_input(BenchmarkId::new("search", n), &n, |b, _| {
            b.iter(|| {
                pts.par_chunks(256)
                    .map(|c| {
                        let mut k = 0u64;
                        for p in c {
                            index.for_each_within(*p, RADIUS, |i, _| k += i as u64);
                        }
                        k
                    })
                    .sum::<u64>()
            })
        });
        for sort in [false, true] {
            let name = if sort { "gather_sorted" } else { "gather" };
            g.bench_with_input(BenchmarkId::new(name, n), &n, |b, _| {
                b.iter(|| {
                    pts.par_chunks(256)
                        .map_init(Vec::<u32>::new, |ids, c| {
                            let mut k = 0u64;
                            for p in c {
                                ids.clear();
                                index.for_each_within(*p, RADIUS, |i, _| ids.push(i as u32));
                                if sort {
                                    ids.sort_unstable();
                                }
                                k += black_box(ids.first().copied().unwrap_or(0)) as u64;
                            }
                            k
                        })
                        .sum::<u64>()
                })
            });
        }
    }
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
