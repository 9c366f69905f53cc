//! Registration benchmark on virtual partial scans of the Stanford bunny (see tests/common).
//!
//! Success = rotation error ≤ 2° and translation error ≤ 1 % of the bounding-box diagonal after
//! refinement. The default tests run a few seeded trials and assert a success floor; the full
//! tables (≥ 50 trials per method, overlap sweep) are `#[ignore]`d:
//! `cargo test --release --test align_bunny -- --ignored --nocapture`.

mod common;

use std::time::Instant;

use common::{Mesh, bunny, errors, problem};
use equiscan::align::{AlignParams, Method, Verdict, align_pair};

const POINTS: usize = 10_000;
const NOISE: f64 = 0.003;

struct Trial {
    ok: bool,
    confident: bool,
    rot: f64,
    trans: f64,
    overlap: f64,
    seconds: f64,
}

fn trial(mesh: &Mesh, method: Method, separation: f64, seed: u64) -> Trial {
    let p = problem(mesh, separation, POINTS, NOISE, seed);
    let params = AlignParams {
        method,
        seed,
        ..AlignParams::default()
    };
    let t = Instant::now();
    let a = align_pair(&p.source, &p.target, &params).expect("alignment runs");
    let seconds = t.elapsed().as_secs_f64();
    let (rot, trans) = errors(&p.source, &a.transform, &p.truth);
    Trial {
        ok: rot <= 2.0 && trans <= 0.01 * p.diagonal,
        confident: a.verdict == Verdict::Confident,
        rot,
        trans: trans / p.diagonal,
        overlap: p.overlap,
        seconds,
    }
}

fn run(mesh: &Mesh, method: Method, separations: &[f64], seed0: u64) -> Vec<Trial> {
    separations
        .iter()
        .enumerate()
        .map(|(i, &s)| trial(mesh, method, s, seed0 + i as u64))
        .collect()
}

fn rate(t: &[Trial]) -> f64 {
    t.iter().filter(|x| x.ok).count() as f64 / t.len() as f64
}

fn median(mut v: Vec<f64>) -> f64 {
    if v.is_empty() {
        return f64::NAN;
    }
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

fn quick(method: Method) -> f64 {
    let mesh = bunny();
    let seps = [40.0, 60.0, 80.0];
    let t = run(&mesh, method, &seps, 100);
    for (i, x) in t.iter().enumerate() {
        eprintln!(
            "{} seed {} sep {}°: ok {} rot {:.3}° trans {:.4} overlap {:.2} {:.2}s",
            method.name(),
            100 + i,
            seps[i],
            x.ok,
            x.rot,
            x.trans,
            x.overlap,
            x.seconds
        );
    }
    rate(&t)
}

#[test]
fn bunny_virtual_scans_register_fpfh_quick() {
    let r = quick(Method::Fpfh);
    assert!(r >= 0.6, "fpfh success {r:.2}");
}

#[test]
fn bunny_virtual_scans_register_equivariant_quick() {
    let r = quick(Method::Equivariant);
    assert!(r >= 0.99, "equivariant success {r:.2}");
}

fn table(mesh: &Mesh, methods: &[Method]) {
    // 50 trials: separations spread evenly over 30–90°.
    let seps: Vec<f64> = (0..50).map(|i| 30.0 + 60.0 * i as f64 / 49.0).collect();
    println!(
        "| method | trials | success | confident | confident but wrong | median rot err (°) | median trans err (% diag) | median time (s) |"
    );
    println!("|---|---|---|---|---|---|---|---|");
    for &m in methods {
        let t = run(mesh, m, &seps, 1000);
        let ok: Vec<&Trial> = t.iter().filter(|x| x.ok).collect();
        println!(
            "| {} | {} | {:.0} % | {:.0} % | {} | {:.3} | {:.3} | {:.3} |",
            m.name(),
            t.len(),
            100.0 * rate(&t),
            100.0 * t.iter().filter(|x| x.confident).count() as f64 / t.len() as f64,
            t.iter().filter(|x| x.confident && !x.ok).count(),
            median(ok.iter().map(|x| x.rot).collect()),
            100.0 * median(ok.iter().map(|x| x.trans).collect()),
            median(t.iter().map(|x| x.seconds).collect()),
        );
    }
}

fn sweep(mesh: &Mesh, methods: &[Method]) {
    println!(
        "| separation (°) | measured overlap | {} |",
        methods
            .iter()
            .map(|m| m.name())
            .collect::<Vec<_>>()
            .join(" success | ")
            + " success"
    );
    println!("|---|---|{}", "---|".repeat(methods.len()));
    for sep in [20.0, 40.0, 60.0, 80.0, 100.0, 120.0, 140.0] {
        let seps = vec![sep; 10];
        let mut cells = Vec::new();
        let mut overlap = 0.0;
        for &m in methods {
            let t = run(mesh, m, &seps, 5000 + sep as u64 * 100);
            overlap = t.iter().map(|x| x.overlap).sum::<f64>() / t.len() as f64;
            cells.push(format!("{:.0} %", 100.0 * rate(&t)));
        }
        println!(
            "| {sep:.0} | {:.0} % | {} |",
            100.0 * overlap,
            cells.join(" | ")
        );
    }
}

#[test]
#[ignore = "full benchmark: 50 trials per method; run with --release --ignored --nocapture"]
fn bunny_benchmark_table() {
    let mesh = bunny();
    table(&mesh, &[Method::Equivariant, Method::Fpfh]);
}

#[test]
#[ignore = "overlap sweep: 10 trials per separation and method; run with --release --ignored --nocapture"]
fn bunny_overlap_sweep() {
    let mesh = bunny();
    sweep(&mesh, &[Method::Equivariant, Method::Fpfh]);
}

#[test]
fn results_do_not_depend_on_the_thread_count() {
    let mesh = bunny();
    let p = problem(&mesh, 50.0, 4000, NOISE, 77);
    for method in [Method::Equivariant, Method::Fpfh] {
        let params = AlignParams {
            method,
            ..AlignParams::default()
        };
        let run = |threads: usize| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap()
                .install(|| align_pair(&p.source, &p.target, &params).unwrap())
        };
        let (one, three) = (run(1), run(3));
        assert_eq!(one.transform, three.transform, "{}", method.name());
        assert_eq!(one.figures, three.figures, "{}", method.name());
    }
}
