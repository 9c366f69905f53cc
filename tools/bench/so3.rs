//! Benchmarks of the SO(3) core: harmonics per direction (with a multiply-add floor), Wigner-D
//! sets, rotation search.
//!
//! `cargo bench --bench so3 -- --warm-up-time 1 --measurement-time 3`

use criterion::{BenchmarkId, Criterion, Throughput, criterion_group, criterion_main};
use equiscan::so3::rng::SplitMix64;
use equiscan::so3::rotation::random_rotation;
use equiscan::so3::search::RotationSearcher;
use equiscan::so3::sh::{num_coeffs, real_sh_batch_f32, real_sh_f32};
use equiscan::so3::wigner::WignerD;
use std::hint::black_box;

const DIRS: usize = 4096;

fn directions(seed: u64) -> Vec<[f32; 3]> {
    let mut rng = SplitMix64::new(seed);
    (0..DIRS)
        .map(|_| rng.unit_vector().map(|v| v as f32))
        .collect()
}

/// The floor: one multiply-add per output value over the same output buffer
/// (`out[k] = x·c_k + y` with a table `c`), i.e. the cost of producing `(L+1)²` values per
/// direction from its coordinates with no polynomial work at all.
fn fma_floor(l_max: usize, dirs: &[[f32; 3]], coef: &[f32], out: &mut [f32]) {
    let n = num_coeffs(l_max);
    for (u, o) in dirs.iter().zip(out.chunks_exact_mut(n)) {
        let (a, b) = (u[0], u[1]);
        for (v, c) in o.iter_mut().zip(&coef[..n]) {
            *v = a * c + b;
        }
    }
}

fn bench_sh(c: &mut Criterion) {
    let dirs = directions(1);
    let coef: Vec<f32> = (0..num_coeffs(12)).map(|k| 1.0 + 0.25 * k as f32).collect();
    let mut g = c.benchmark_group("sh_f32");
    g.throughput(Throughput::Elements(DIRS as u64));
    for l_max in [2usize, 4, 8, 12] {
        let mut out = vec![0.0f32; DIRS * num_coeffs(l_max)];
        g.bench_with_input(BenchmarkId::new("batch", l_max), &l_max, |b, &l| {
            b.iter(|| real_sh_batch_f32(l, black_box(&dirs), &mut out))
        });
        g.bench_with_input(BenchmarkId::new("single_calls", l_max), &l_max, |b, &l| {
            b.iter(|| {
                let n = num_coeffs(l);
                for (u, o) in black_box(&dirs).iter().zip(out.chunks_exact_mut(n)) {
                    real_sh_f32(l, *u, o);
                }
            })
        });
        g.bench_with_input(BenchmarkId::new("fma_floor", l_max), &l_max, |b, &l| {
            b.iter(|| fma_floor(l, black_box(&dirs), black_box(&coef), &mut out))
        });
    }
    g.finish();
}

fn bench_wigner(c: &mut Criterion) {
    let mut rng = SplitMix64::new(2);
    let rots: Vec<_> = (0..64).map(|_| random_rotation(&mut rng)).collect();
    let mut g = c.benchmark_group("wigner_d");
    g.throughput(Throughput::Elements(rots.len() as u64));
    for l_max in [4usize, 8] {
        let mut d = WignerD::new(&rots[0], l_max);
        g.bench_with_input(BenchmarkId::new("set", l_max), &l_max, |b, _| {
            b.iter(|| {
                for r in &rots {
                    d.set(black_box(r));
                }
            })
        });
    }
    g.finish();
}

fn bench_search(c: &mut Criterion) {
    let mut rng = SplitMix64::new(3);
    let l_max = 4;
    let shells = 6;
    let nc = num_coeffs(l_max);
    let searcher = RotationSearcher::new(l_max);
    let cases: Vec<(Vec<f64>, Vec<f64>)> = (0..16)
        .map(|_| {
            let a: Vec<f64> = (0..shells * nc).map(|_| rng.normal()).collect();
            let mut b = vec![0.0; a.len()];
            WignerD::new(&random_rotation(&mut rng), l_max).apply_shells(shells, &a, &mut b);
            (a, b)
        })
        .collect();
    let mut g = c.benchmark_group("rotation_search");
    g.throughput(Throughput::Elements(cases.len() as u64));
    g.bench_function("L4_N6", |b| {
        b.iter(|| {
            for (x, y) in &cases {
                black_box(searcher.search(black_box(x), black_box(y)).ok());
            }
        })
    });
    g.bench_function("build_searcher_L4", |b| {
        b.iter(|| RotationSearcher::new(black_box(4)))
    });
    g.finish();
}

criterion_group!(benches, bench_sh, bench_wigner, bench_search);
criterion_main!(benches);
