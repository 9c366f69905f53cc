//! Precision of the fine fit on noisy scans (DEVELOPERS.md, Registration, "Precision of the fine
//! fit"). Three pairs of the registration benchmark's generator (tests/common/shapes.rs) with
//! noise 0.57–0.73 % of the bounding-box diagonal: two views of the bunny (the scanned figure
//! of tests/data/bunny, an open dataset) and of the pipe elbow. With the fine normals fitted to
//! 12 neighbours and the fine fit pairing points up to one τ apart, the answers were `confident`
//! and 3.1–3.7° off; started from the true pose, the same fit ended there too, so the error was
//! the fit's own bias (normals tilted by the noise, SOURCE points past TARGET's edge paired with
//! the edge). Now the fit is checked to stay within 1° and 0.5 % of the diagonal of the pose the
//! generator recorded, from the pipeline's own start.

mod common;

use common::errors;
use common::shapes::{Pair, bunny_pair, pair, shapes};
use equiscan::align::{AlignParams, align_pair};

fn check(name: &str, p: &Pair, seed: u64) {
    let params = AlignParams {
        seed,
        ..AlignParams::default()
    };
    let a = align_pair(&p.source, &p.target, &params).unwrap();
    let (rot, trans) = errors(&p.source, &a.transform, &p.truth);
    let pct = 100.0 * trans / p.diagonal;
    eprintln!(
        "{name}: noise {:.2} % of the diagonal, {:?}, {rot:.2}°, {pct:.2} % of the diagonal",
        100.0 * p.noise_frac,
        a.verdict
    );
    assert!(p.noise_frac > 0.005, "{name}: not a noisy pair");
    assert!(
        rot < 1.0 && pct < 0.5,
        "{name}: {rot:.2}° and {pct:.2} % of the diagonal off"
    );
}

#[test]
fn noisy_bunny_views_are_fitted_within_a_degree() {
    let mesh = common::bunny();
    // (generator seed, alignment seed): held-out pairs 293 and 303 of
    // `EQUISCAN_BENCH_FIRST=1000`.
    for (seed, align_seed) in [(91_011u64, 294u64), (91_021, 304)] {
        let p = bunny_pair(&mesh, seed);
        check(&format!("bunny {seed}"), &p, align_seed);
    }
}

#[test]
fn a_noisy_elbow_pair_is_fitted_within_a_degree() {
    let all = shapes();
    let k = all.iter().position(|s| s.name == "elbow").unwrap();
    // Held-out pair 103 of `EQUISCAN_BENCH_FIRST=1000`.
    let p = pair(&all[k], 1000 * k as u64 + 1001);
    check("elbow seed 4001", &p, 104);
}
