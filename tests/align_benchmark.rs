//! Registration benchmark over machined parts, the bunny and a yard scene (generator in
//! tests/common/shapes.rs): single-view partial scans, overlap 30–90 %, views up to 120° apart,
//! noise 0.05–0.8 % of the diagonal, 5–50 k points, SOURCE in a uniform random pose.
//!
//! Right = rotation error ≤ 2° and translation error ≤ 1 % of the diagonal (at SOURCE's
//! centroid), the criterion of the project's registration issue. A pair is *stacked* when a wrong
//! pose (any pose returned or listed by either method) puts at least as many SOURCE points on
//! TARGET as the true pose does: there the right answer is `ambiguous` with the truth among the
//! candidates, and the tables count those pairs apart.
//!
//! `cargo test --release --test align_benchmark -- --ignored --nocapture` prints the tables
//! (DEVELOPERS.md, Registration); the default test runs a small seeded subset and asserts that
//! no answer is confident and wrong.

mod common;

use std::time::Instant;

use common::shapes::{Pair, bunny_pair, pair, pair_from, shapes, test_shapes};
use common::tune::tuned;
use common::{bunny, errors};
use equiscan::align::{
    AlignParams, Alignment, Method, Motion, PreparedScan, Reason, Rigid, Tuning, Verdict,
    Viewpoints, align_pair, align_pair_traced,
};
use equiscan::spatial::{KdIndex, estimate_spacing};
use nalgebra::Vector3;
use rayon::prelude::*;

/// One method's result on one pair.
struct Run {
    right: bool,
    confident: bool,
    ambiguous: bool,
    truth_listed: bool,
    confidence: f64,
    seconds: f64,
    rot: f64,
    /// Poses the method returned or listed, for the stacked test.
    poses: Vec<Rigid>,
    /// Each candidate as the per-pair lines print it.
    listed: Vec<Listed>,
    /// Weak directions of the final fit.
    weak: usize,
    /// Distinctive evidence of the answer ([`equiscan::align::Candidate::evidence`]) and its
    /// translation error in % of the diagonal.
    evidence: f64,
    trans_pct: f64,
    /// Margin, smallest eigenvalue ratio of the fit's normal matrix, explained matches and
    /// overlap of the answer (the figures behind the verdict).
    margin: f64,
    stiffness: f64,
    inliers: usize,
    overlap: f64,
}

/// One listed candidate as the per-pair lines print it (`rivalry/overlap/matches/right/angle/
/// distance/evidence/off…[/free space]`).
struct Listed {
    rivalry: f64,
    overlap: f64,
    explained: usize,
    right: bool,
    /// Free-space violation share (`None` without sensor positions).
    free_space: Option<f64>,
    /// Angle from the answer, degrees.
    angle_deg: f64,
    /// Distance from the answer, % of the diagonal.
    distance_pct: f64,
    /// Distinctive evidence.
    evidence: f64,
    /// The share of SOURCE's points off its largest plane that it lays near TARGET over the
    /// answer's ([`common::off_plane_sample`]; the harness's own measure, on a sample of every
    /// point, beside the library's on keypoints in src/align/off_plane.rs).
    off_plane: f64,
}

/// The distance within which a SOURCE point counts as laid on TARGET: two TARGET point spacings,
/// or three noise deviations when that is more.
fn gate(p: &Pair) -> f64 {
    let spacing = estimate_spacing(&p.target.positions).unwrap() as f64;
    (2.0 * spacing).max(3.0 * p.noise_frac * p.diagonal)
}

fn is_right(p: &Pair, tf: &Rigid) -> (bool, f64) {
    let (rot, trans) = errors(&p.source, tf, &p.truth);
    (rot <= 2.0 && trans <= 0.01 * p.diagonal, rot)
}

/// The poses an alignment offers: the answer and its listed rivals.
fn offered(a: &Alignment) -> Vec<Rigid> {
    let mut v = vec![a.transform];
    v.extend(a.candidates.iter().map(|c| c.transform));
    v
}

/// One way of running a pair: the method, and whether both sensor positions are passed to
/// `align` (free-space consistency, src/align/visibility.rs).
#[derive(Clone, Copy, PartialEq)]
struct Arm {
    method: Method,
    sensors: bool,
}

impl Arm {
    /// The column name: the method, with "+sensors" when the positions are known.
    fn name(&self) -> String {
        let m = self.method.name();
        if self.sensors {
            format!("{m}+sensors")
        } else {
            m.to_string()
        }
    }
}

/// The sensor positions of `p` as `align` takes them (SOURCE's in SOURCE file coordinates,
/// TARGET's in TARGET file coordinates, as the generator gives them), when `known`.
fn viewpoints(p: &Pair, known: bool) -> Viewpoints {
    let finite = |v: [f64; 3]| v.iter().all(|x| x.is_finite()).then_some(v);
    if known {
        Viewpoints {
            source: finite(p.viewpoints[0]),
            target: finite(p.viewpoints[1]),
        }
    } else {
        Viewpoints::default()
    }
}

fn run(p: &Pair, arm: Arm, seed: u64, version: u32) -> Run {
    let params = AlignParams {
        method: arm.method,
        seed,
        descriptor_version: version,
        viewpoints: viewpoints(p, arm.sensors),
        ..AlignParams::default()
    };
    let params = tuned(params, &p.source, &p.target);
    let t = Instant::now();
    let a = align_pair(&p.source, &p.target, &params).expect("alignment runs");
    let seconds = t.elapsed().as_secs_f64();
    let (right, rot) = is_right(p, &a.transform);
    let poses = offered(&a);
    let gate = gate(p);
    let off = common::off_plane_sample(&p.source, gate);
    let off_index = KdIndex::new(&p.target.positions).unwrap();
    let off_answer = common::share_near(&off, &p.target, &off_index, &a.transform, gate);
    Run {
        right,
        confident: a.verdict == Verdict::Confident,
        ambiguous: matches!(a.verdict, Verdict::Ambiguous(_)),
        truth_listed: poses.iter().any(|tf| is_right(p, tf).0),
        confidence: a.figures.confidence,
        seconds,
        rot,
        listed: a
            .candidates
            .iter()
            .map(|c| Listed {
                rivalry: c.rivalry,
                overlap: c.overlap,
                explained: c.explained,
                right: is_right(p, &c.transform).0,
                free_space: c.free_space_violation,
                angle_deg: c.angle_deg,
                distance_pct: 100.0 * c.distance / p.diagonal,
                evidence: c.evidence,
                off_plane: common::share_near(&off, &p.target, &off_index, &c.transform, gate)
                    / off_answer.max(1e-9),
            })
            .collect(),
        weak: a.constraint.weak.len(),
        evidence: a.candidates.first().map_or(0.0, |c| c.evidence),
        trans_pct: 100.0 * errors(&p.source, &a.transform, &p.truth).1 / p.diagonal,
        margin: a.figures.margin,
        stiffness: a.constraint.ratios[0],
        inliers: a.figures.inliers,
        overlap: a.figures.overlap,
        poses,
    }
}

/// Whether a wrong pose among `poses` fits SOURCE onto TARGET as well as the truth.
fn stacked(p: &Pair, poses: &[Rigid]) -> bool {
    let index = KdIndex::new(&p.target.positions).unwrap();
    let (sample, gate) = (common::sample_points(&p.source), gate(p));
    let fit = |tf: &Rigid| common::share_near(&sample, &p.target, &index, tf, gate);
    let truth = fit(&p.truth);
    poses
        .iter()
        .filter(|tf| !is_right(p, tf).0)
        .any(|tf| fit(tf) >= truth - 0.01)
}

/// The number of the `i`-th pair of the list in the per-pair lines of a run without
/// `EQUISCAN_BENCH_PICK` (the same other keys): with a pick, the picked number, so that a pair
/// rerun alone is printed, and aligned with the seed, as in the full run.
fn pair_number(i: usize) -> usize {
    std::env::var("EQUISCAN_BENCH_PICK")
        .ok()
        .and_then(|v| v.split(',').nth(i).and_then(|x| x.trim().parse().ok()))
        .unwrap_or(i)
}

/// The alignment seed of the `i`-th pair of the list: `1 +` its [`pair_number`].
fn align_seed(i: usize) -> u64 {
    1 + pair_number(i) as u64
}

/// The benchmark pairs: `per_part` seeds for each of the eight parts, `bunny` bunny pairs and
/// `yard` scene pairs, generated in parallel (each from its own seed).
fn pairs(per_part: u64, bunnies: u64, yard: u64) -> Vec<Pair> {
    let all = shapes();
    // `EQUISCAN_BENCH_SHAPES=bracket,shaft` keeps only those shapes ("bunny" for the mesh).
    let only: Option<Vec<String>> = std::env::var("EQUISCAN_BENCH_SHAPES")
        .ok()
        .map(|v| v.split(',').map(|x| x.trim().to_string()).collect());
    let keep = |name: &str| only.as_ref().is_none_or(|o| o.iter().any(|x| x == name));
    // `EQUISCAN_BENCH_FIRST=500` draws the seeds after the first 500 of each shape: pairs that no
    // threshold was set on (the tables use the first 34; keep it below 1000 - 34).
    let first: u64 = std::env::var("EQUISCAN_BENCH_FIRST").map_or(0, |v| {
        v.trim()
            .parse()
            .expect("EQUISCAN_BENCH_FIRST: a seed offset, e.g. 500")
    });
    // `EQUISCAN_BENCH_PICK=46,122` keeps those pairs of the list that the other keys give
    // (numbered as the per-pair lines number them), in the order given.
    let pick: Option<Vec<usize>> = std::env::var("EQUISCAN_BENCH_PICK").ok().map(|v| {
        v.split(',')
            .map(|x| {
                x.trim()
                    .parse()
                    .expect("EQUISCAN_BENCH_PICK: pair numbers, e.g. 46,122")
            })
            .collect()
    });
    let mut jobs: Vec<(usize, u64)> = Vec::new();
    for (k, s) in all.iter().enumerate() {
        let n = if !keep(s.name) {
            0
        } else if s.scene {
            yard
        } else {
            per_part
        };
        jobs.extend((first..first + n).map(|i| (k, 1000 * k as u64 + i)));
    }
    let mesh = bunny();
    let bunnies = if keep("bunny") { bunnies } else { 0 };
    jobs.extend((first..first + bunnies).map(|i| (usize::MAX, 90_000 + i)));
    if let Some(pick) = pick {
        jobs = pick
            .iter()
            .map(|&i| {
                *jobs
                    .get(i)
                    .unwrap_or_else(|| panic!("EQUISCAN_BENCH_PICK: no pair {i}"))
            })
            .collect();
    }
    jobs.par_iter()
        .map(|&(k, seed)| {
            if k == usize::MAX {
                bunny_pair(&mesh, seed)
            } else {
                pair(&all[k], seed)
            }
        })
        .collect()
}

struct Row {
    shape: &'static str,
    overlap: f64,
    noise: f64,
    points: usize,
    stacked: bool,
    runs: Vec<Run>,
}

fn evaluate(ps: &[Pair], methods: &[Arm]) -> Vec<Row> {
    evaluate_version(ps, methods, AlignParams::default().descriptor_version)
}

/// [`evaluate`] with harmonic descriptors of the given version.
fn evaluate_version(ps: &[Pair], methods: &[Arm], version: u32) -> Vec<Row> {
    ps.iter()
        .enumerate()
        .map(|(i, p)| {
            let runs: Vec<Run> = methods.iter().map(|&m| run(p, m, align_seed(i), version)).collect();
            let poses: Vec<Rigid> = runs.iter().flat_map(|r| r.poses.clone()).collect();
            let row = Row {
                shape: p.shape,
                overlap: p.overlap,
                noise: p.noise_frac,
                points: p.source.len().max(p.target.len()),
                stacked: stacked(p, &poses),
                runs,
            };
            println!(
                "pair {} {} overlap {:.2} noise {:.4} points {}+{} sep {:.0} stacked {}: {}",
                pair_number(i),
                p.shape,
                p.overlap,
                p.noise_frac,
                p.source.len(),
                p.target.len(),
                p.separation,
                row.stacked,
                row.runs
                    .iter()
                    .zip(methods)
                    .map(|(r, m)| format!(
                        "{} right {} confident {} ambiguous {} listed {} conf {:.2} rot {:.1} {:.2}s weak {} margin {:.3} stiff {:.4} inliers {} ovl {:.3} evid {:.3} trans {:.2} cands {:?}",
                        m.name(),
                        r.right,
                        r.confident,
                        r.ambiguous,
                        r.truth_listed,
                        r.confidence,
                        r.rot,
                        r.seconds,
                        r.weak,
                        r.margin,
                        r.stiffness,
                        r.inliers,
                        r.overlap,
                        r.evidence,
                        r.trans_pct,
                        r.listed
                            .iter()
                            .map(|c| format!(
                                "{:.2}/{:.2}/{}/{}/{:.1}/{:.2}/{:.3}/off{:.3}{}",
                                c.rivalry,
                                c.overlap,
                                c.explained,
                                u8::from(c.right),
                                c.angle_deg,
                                c.distance_pct,
                                c.evidence,
                                c.off_plane,
                                c.free_space.map_or(String::new(), |f| format!("/{f:.3}"))
                            ))
                            .collect::<Vec<_>>()
                    ))
                    .collect::<Vec<_>>()
                    .join(" | ")
            );
            row
        })
        .collect()
}

fn pct(a: usize, b: usize) -> String {
    if b == 0 {
        "–".into()
    } else {
        format!("{:.0} %", 100.0 * a as f64 / b as f64)
    }
}

/// Prints one table: a row per group, per method the share right (of the pairs not stacked),
/// the confident-and-wrong count, and the truth-listed share of all pairs and of the pairs not
/// stacked (on a stacked pair a wrong pose fits as well as the truth, so the listing there is
/// a separate condition).
fn table(title: &str, rows: &[Row], methods: &[Arm], key: &dyn Fn(&Row) -> String) {
    let mut keys: Vec<String> = rows.iter().map(key).collect();
    keys.sort();
    keys.dedup();
    println!("\n{title}\n");
    let mut head = "| group | pairs (stacked) |".to_string();
    for m in methods {
        let n = m.name();
        head += &format!(
            " {n} right | {n} confident wrong | {n} truth listed | {n} listed, not stacked |"
        );
    }
    println!("{head}");
    println!("|---|---|{}", "---|---|---|---|".repeat(methods.len()));
    for k in keys.iter().chain(std::iter::once(&"all".to_string())) {
        let g: Vec<&Row> = rows.iter().filter(|r| k == "all" || &key(r) == k).collect();
        let plain: Vec<&&Row> = g.iter().filter(|r| !r.stacked).collect();
        let mut line = format!("| {k} | {} ({}) |", g.len(), g.len() - plain.len());
        for mi in 0..methods.len() {
            let right = plain.iter().filter(|r| r.runs[mi].right).count();
            let cw = g
                .iter()
                .filter(|r| r.runs[mi].confident && !r.runs[mi].right)
                .count();
            let listed = g.iter().filter(|r| r.runs[mi].truth_listed).count();
            let listed_plain = plain.iter().filter(|r| r.runs[mi].truth_listed).count();
            line += &format!(
                " {} | {cw} | {} | {} |",
                pct(right, plain.len()),
                pct(listed, g.len()),
                pct(listed_plain, plain.len())
            );
        }
        println!("{line}");
    }
}

fn reliability(rows: &[Row], methods: &[Arm]) {
    println!("\nReliability: confidence bin → pairs, share right (all pairs, stacked included)\n");
    println!(
        "| confidence | {} |",
        methods
            .iter()
            .map(|m| format!("{} pairs | {} right", m.name(), m.name()))
            .collect::<Vec<_>>()
            .join(" | ")
    );
    println!("|---|{}", "---|---|".repeat(methods.len()));
    for b in 0..5 {
        let (lo, hi) = (b as f64 * 0.2, (b + 1) as f64 * 0.2);
        let mut line = format!("| {lo:.1}–{hi:.1} |");
        for mi in 0..methods.len() {
            let g: Vec<&Run> = rows
                .iter()
                .map(|r| &r.runs[mi])
                .filter(|r| {
                    r.confidence >= lo && (r.confidence < hi || (b == 4 && r.confidence <= 1.0))
                })
                .collect();
            line += &format!(
                " {} | {} |",
                g.len(),
                pct(g.iter().filter(|r| r.right).count(), g.len())
            );
        }
        println!("{line}");
    }
    for (mi, m) in methods.iter().enumerate() {
        let conf: Vec<&Run> = rows
            .iter()
            .map(|r| &r.runs[mi])
            .filter(|r| r.confident)
            .collect();
        let mut t: Vec<f64> = rows.iter().map(|r| r.runs[mi].seconds).collect();
        t.sort_by(f64::total_cmp);
        println!(
            "\n{}: confident {} of {}, of which right {}; ambiguous {}; median time {:.2} s",
            m.name(),
            conf.len(),
            rows.len(),
            pct(conf.iter().filter(|r| r.right).count(), conf.len()),
            rows.iter().filter(|r| r.runs[mi].ambiguous).count(),
            t[t.len() / 2]
        );
    }
}

fn band(x: f64, edges: &[f64], fmt: &dyn Fn(f64) -> String) -> String {
    for w in edges.windows(2) {
        if x < w[1] {
            return format!("{}–{}", fmt(w[0]), fmt(w[1]));
        }
    }
    format!("≥ {}", fmt(*edges.last().unwrap()))
}

/// Benchmark size: `EQUISCAN_BENCH_PAIRS=PER_PART,BUNNIES,YARD` (default 34,24,10, the full
/// 306 pairs); a smaller size draws the first seeds of the same pairs. `EQUISCAN_BENCH_SHAPES`
/// (comma-separated shape names, "bunny" for the mesh) keeps only those shapes.
fn bench_size() -> (u64, u64, u64) {
    let Ok(v) = std::env::var("EQUISCAN_BENCH_PAIRS") else {
        return (34, 24, 10);
    };
    let n: Vec<u64> = v
        .split(',')
        .map(|x| {
            x.trim()
                .parse()
                .expect("EQUISCAN_BENCH_PAIRS: three counts, e.g. 8,6,3")
        })
        .collect();
    assert_eq!(n.len(), 3, "EQUISCAN_BENCH_PAIRS: three counts, e.g. 8,6,3");
    (n[0], n[1], n[2])
}

/// Methods to run: `EQUISCAN_BENCH_METHODS=equivariant` or `fpfh` (default both); each with
/// the sensor positions unknown (default, `EQUISCAN_BENCH_VIEWPOINTS=0`), known (`1`: both
/// positions passed to `align`, the bunny's far along its orthographic view directions) or
/// both ways (`both`: each pair run twice per method, columns "METHOD" and "METHOD+sensors").
fn bench_methods() -> Vec<Arm> {
    let methods = match std::env::var("EQUISCAN_BENCH_METHODS").as_deref() {
        Ok("equivariant") => vec![Method::Equivariant],
        Ok("fpfh") => vec![Method::Fpfh],
        _ => vec![Method::Equivariant, Method::Fpfh],
    };
    let sensors: &[bool] = match std::env::var("EQUISCAN_BENCH_VIEWPOINTS").as_deref() {
        Err(_) | Ok("0") => &[false],
        Ok("1") => &[true],
        Ok("both") => &[false, true],
        Ok(other) => panic!("EQUISCAN_BENCH_VIEWPOINTS: 0, 1 or both, not {other}"),
    };
    methods
        .iter()
        .flat_map(|&method| sensors.iter().map(move |&sensors| Arm { method, sensors }))
        .collect()
}

/// One line per arm: confident answers and the share right, confident and wrong, truth
/// among the answer and the listed candidates, and answers right on pairs not stacked and on
/// stacked pairs (the condition "sensor positions known" or "unknown" is part of the arm).
fn by_sensor_positions(rows: &[Row], methods: &[Arm]) {
    println!("\nBy sensor positions (all pairs)\n");
    println!(
        "| method | sensor positions | confident | of which right | confident wrong | truth listed | right, not stacked | right, stacked |"
    );
    println!("|---|---|---|---|---|---|---|---|");
    for (mi, m) in methods.iter().enumerate() {
        let runs = || rows.iter().map(|r| &r.runs[mi]);
        let conf: Vec<&Run> = runs().filter(|r| r.confident).collect();
        let cw = conf.iter().filter(|r| !r.right).count();
        let listed = runs().filter(|r| r.truth_listed).count();
        let plain: Vec<&Row> = rows.iter().filter(|r| !r.stacked).collect();
        let stacked: Vec<&Row> = rows.iter().filter(|r| r.stacked).collect();
        let right = |g: &[&Row]| g.iter().filter(|r| r.runs[mi].right).count();
        println!(
            "| {} | {} | {} | {} | {cw} | {} ({listed}) | {} ({} of {}) | {} ({} of {}) |",
            m.method.name(),
            if m.sensors { "known" } else { "unknown" },
            conf.len(),
            pct(conf.len() - cw, conf.len()),
            pct(listed, rows.len()),
            pct(right(&plain), plain.len()),
            right(&plain),
            plain.len(),
            pct(right(&stacked), stacked.len()),
            right(&stacked),
            stacked.len(),
        );
    }
}

#[test]
#[ignore = "full benchmark, about 300 pairs and both methods: --release --ignored --nocapture"]
fn registration_benchmark_tables() {
    let methods = bench_methods();
    let (per_part, bunnies, yard) = bench_size();
    let ps = pairs(per_part, bunnies, yard);
    println!("{} pairs", ps.len());
    let rows = evaluate(&ps, &methods);
    let pc = |x: f64| format!("{:.0} %", 100.0 * x);
    let pn = |x: f64| format!("{:.2} %", 100.0 * x);
    table("By overlap", &rows, &methods, &|r| {
        band(r.overlap, &[0.0, 0.3, 0.5, 0.7, 0.9], &pc)
    });
    table("By noise (share of the diagonal)", &rows, &methods, &|r| {
        band(r.noise, &[0.0, 0.002, 0.004, 0.008], &pn)
    });
    table("By shape", &rows, &methods, &|r| r.shape.to_string());
    table("By size (larger scan)", &rows, &methods, &|r| {
        band(
            r.points as f64,
            &[0.0, 10_000.0, 25_000.0, 50_001.0],
            &|x| format!("{:.0} k", x / 1000.0),
        )
    });
    reliability(&rows, &methods);
    by_sensor_positions(&rows, &methods);
}

/// Two pairs per part, one bunny pair and one yard pair, default method: nothing confident
/// and wrong.
#[test]
fn benchmark_subset_has_no_confident_wrong_answer() {
    let ps = pairs(2, 1, 1);
    let rows = evaluate(
        &ps,
        &[Arm {
            method: Method::Equivariant,
            sensors: false,
        }],
    );
    for (i, r) in rows.iter().enumerate() {
        let x = &r.runs[0];
        assert!(
            !x.confident || x.right,
            "pair {i} ({}): confident but {:.1}° off",
            r.shape,
            x.rot
        );
    }
}

/// The subset of [`benchmark_subset_has_no_confident_wrong_answer`] with descriptor versions 1
/// and 2, for the choice of the version `align` uses (DEVELOPERS.md, Registration).
#[test]
#[ignore = "comparison run: --release --ignored --nocapture"]
fn benchmark_subset_by_descriptor_version() {
    let ps = pairs(2, 1, 1);
    for version in [1, 2] {
        let arm = Arm {
            method: Method::Equivariant,
            sensors: false,
        };
        let rows = evaluate_version(&ps, &[arm], version);
        let plain: Vec<&Row> = rows.iter().filter(|r| !r.stacked).collect();
        let right = plain.iter().filter(|r| r.runs[0].right).count();
        let cw = rows
            .iter()
            .filter(|r| r.runs[0].confident && !r.runs[0].right)
            .count();
        let conf = rows.iter().filter(|r| r.runs[0].confident).count();
        let listed = rows.iter().filter(|r| r.runs[0].truth_listed).count();
        println!(
            "version {version}: {} pairs ({} stacked), right {right} of {} not stacked, confident {conf}, confident and wrong {cw}, truth listed {listed}",
            rows.len(),
            rows.len() - plain.len(),
            plain.len()
        );
    }
}

/// A plain plate seen from above from two sensors 10° apart: its 180° turn about the normal
/// fits as well as the truth, so the verdict must be `ambiguous`, with a turned pose listed
/// beside the best.
#[test]
fn a_symmetric_part_is_ambiguous_with_the_turned_pose_listed() {
    let [plate, _] = test_shapes();
    let c = plate.centre();
    let up = Vector3::new(0.05, 0.0, 1.0).normalize() * 300.0;
    let other = Vector3::new(-0.12, 0.05, 1.0).normalize() * 300.0;
    let p = pair_from(&plate, [c + up, c + other], 12_000, 0.001, 7);
    let a = align_pair(&p.source, &p.target, &AlignParams::default()).unwrap();
    eprintln!(
        "{:?}; candidates {:?}",
        a.verdict,
        a.candidates
            .iter()
            .map(|c| (c.score, c.angle_deg, c.distance))
            .collect::<Vec<_>>()
    );
    assert!(
        matches!(a.verdict, Verdict::Ambiguous(_)),
        "{:?}",
        a.verdict
    );
    assert!(
        a.candidates
            .iter()
            .any(|c| (c.angle_deg - 180.0).abs() < 5.0 && c.score > 0.5 * a.candidates[0].score),
        "no turned pose among the candidates"
    );
}

/// Two stacked pairs of the full benchmark (pair 189, bossplate seed 19; pair 248, channel
/// seed 10; alignment seeds 190 and 249 as in the tables) whose answer is a half turn of the
/// true pose: it explains 56 and 90 matches, and a listed rival lays 0.86 and 0.81 as much of
/// SOURCE on TARGET with 18 and 31 of them. With `Tuning::rival_overlap_share` at 0.9 both were
/// `confident` and 180° off; at 0.8 such a rival has real support of its own and the verdict
/// is `ambiguous` (DEVELOPERS.md, Registration, "Half turns of stacked pairs"). Right and
/// wrong against the generator's pose (tests/common/shapes.rs).
#[test]
fn a_stacked_half_turn_beside_a_rival_as_large_is_not_confident() {
    let all = shapes();
    for (name, i, index) in [("bossplate", 19u64, 189u64), ("channel", 10, 248)] {
        let k = all.iter().position(|s| s.name == name).unwrap();
        let p = pair(&all[k], 1000 * k as u64 + i);
        let params = AlignParams {
            seed: 1 + index,
            ..AlignParams::default()
        };
        let a = align_pair(&p.source, &p.target, &params).unwrap();
        let (right, rot) = is_right(&p, &a.transform);
        eprintln!("{name} seed {i}: {:?}, {rot:.1}° off", a.verdict);
        assert!(
            right || a.verdict == Verdict::Ambiguous(Reason::AmbiguousSymmetricShape),
            "{name} seed {i}: {:?} and {rot:.1}° off",
            a.verdict
        );
    }
}

/// Two stacked boss-plate pairs of held-out seed sets whose answer was `confident` and 90° or
/// 180° off while a listed rival laid more of SOURCE on TARGET than the answer (1.11 and 1.28
/// times its overlap) with a fifth of its matches: the equivariant method on seed 830 (pair 200
/// of `EQUISCAN_BENCH_FIRST=800`, alignment seed 201) and FPFH on seed 704 (pair 174 of
/// `EQUISCAN_BENCH_FIRST=700`, alignment seed 175). Such a rival has real support whatever its
/// matches ([`Tuning::rival_overlap_lead`]; DEVELOPERS.md, Registration, "A rival that covers
/// more"): the verdict must not be `confident` unless the answer is right, and with the rule
/// off the equivariant run is `confident` and wrong (so the check can fail). The FPFH answer
/// has fewer agreeing pairs than the floor of [`equiscan::align::quality::MIN_CONSENSUS`] (15
/// since "Fewest agreeing pairs" in DEVELOPERS.md), so it is `not_found` even with the rule
/// off; that is checked too. Right and wrong against the generator's pose
/// (tests/common/shapes.rs).
#[test]
fn a_rival_that_covers_more_than_the_answer_is_not_overruled_by_matches() {
    let all = shapes();
    let k = all.iter().position(|s| s.name == "bossplate").unwrap();
    for (method, i, index, guarded) in [
        (Method::Equivariant, 830u64, 200u64, true),
        (Method::Fpfh, 704, 174, false),
    ] {
        let p = pair(&all[k], 1000 * k as u64 + i);
        let params = AlignParams {
            method,
            seed: 1 + index,
            ..AlignParams::default()
        };
        // Off: this rule, and the later one of a rival laying nearly as much
        // (`rival_near_overlap`), which catches the same case.
        let off = AlignParams {
            tuning: Tuning {
                rival_overlap_lead: f64::INFINITY,
                rival_near_overlap: f64::INFINITY,
                ..params.tuning
            },
            ..params
        };
        let before = align_pair(&p.source, &p.target, &off).unwrap();
        let (right_before, rot_before) = is_right(&p, &before.transform);
        eprintln!(
            "{} seed {i} without the rule: {:?}, {rot_before:.1}° off, {} agreeing pairs",
            method.name(),
            before.verdict,
            before.figures.inliers
        );
        if guarded {
            assert!(
                before.verdict == Verdict::Confident && !right_before,
                "{} seed {i} without the rule: the case this test guards",
                method.name()
            );
        } else {
            assert!(
                !right_before && before.verdict != Verdict::Confident,
                "{} seed {i} without the rule: wrong, and below the floor of agreeing pairs",
                method.name()
            );
        }
        let a = align_pair(&p.source, &p.target, &params).unwrap();
        let (right, rot) = is_right(&p, &a.transform);
        eprintln!("{} seed {i}: {:?}, {rot:.1}° off", method.name(), a.verdict);
        assert!(
            right || a.verdict != Verdict::Confident,
            "{} seed {i}: confident and {rot:.1}° off",
            method.name()
        );
    }
}

/// Pair `index` of a benchmark table: the generator's pair of shape `name` with seed `seed`
/// (as in the tables' job list), aligned by `method` with the table's alignment seed
/// (1 + the pair's number).
fn table_case(name: &str, seed: u64, index: u64, method: Method) -> (Pair, AlignParams) {
    let all = shapes();
    let k = all.iter().position(|s| s.name == name).unwrap();
    let params = AlignParams {
        method,
        seed: 1 + index,
        ..AlignParams::default()
    };
    (pair(&all[k], 1000 * k as u64 + seed), params)
}

/// A guarded case of a verdict rule: run with the rule off (`off`), the answer must be
/// `confident` and wrong (the case guarded, so the check can fail); with it on (`on`), not
/// `confident` unless right, and then `expected`. Returns the run with the rule off.
fn guarded_case(
    label: &str,
    p: &Pair,
    (on, off): (&AlignParams, &AlignParams),
    expected: Verdict,
) -> Alignment {
    let before = align_pair(&p.source, &p.target, off).unwrap();
    let (right_before, rot_before) = is_right(p, &before.transform);
    eprintln!(
        "{label} without the rule: {:?}, {rot_before:.1}° off, {} agreeing pairs",
        before.verdict, before.figures.inliers
    );
    assert!(
        before.verdict == Verdict::Confident && !right_before,
        "{label} without the rule: the case this test guards"
    );
    let a = align_pair(&p.source, &p.target, on).unwrap();
    let (right, rot) = is_right(p, &a.transform);
    eprintln!("{label}: {:?}, {rot:.1}° off, {:?}", a.verdict, a.figures);
    assert!(
        right || a.verdict == expected,
        "{label}: {:?} and {rot:.1}° off",
        a.verdict
    );
    before
}

/// Two noisy pipe elbows of held-out seed sets that were `confident` and about 5° off: pair 103
/// of `EQUISCAN_BENCH_FIRST=200` (elbow seed 201, noise 0.76 % of the diagonal, 4.5° off) and
/// pair 119 of `EQUISCAN_BENCH_FIRST=134` (seed 151, 0.58 %, 4.8° off), alignment seeds 104 and
/// 120 as in the tables. Fitted the other way round (TARGET onto SOURCE) their poses turn by 3.1°
/// and 1.4°, while no right `confident` answer of five sets turned by more than 1.23°
/// ([`Tuning::reverse_fit_max_deg`]; DEVELOPERS.md, Registration, "Fitted both ways"). With the
/// test off both must be `confident` and wrong (the case guarded, so the check can fail); with
/// it on, not `confident` unless right. Right and wrong against the generator's pose
/// (tests/common/shapes.rs).
#[test]
fn a_noisy_elbow_whose_fits_part_is_not_confident() {
    for (seed, index) in [(201u64, 103u64), (151, 119)] {
        let (p, params) = table_case("elbow", seed, index, Method::Equivariant);
        let off = AlignParams {
            tuning: Tuning {
                reverse_fit_max_deg: 0.0,
                ..params.tuning
            },
            ..params
        };
        guarded_case(
            &format!("elbow seed {seed}"),
            &p,
            (&params, &off),
            Verdict::Ambiguous(Reason::FitsDisagree),
        );
    }
}

/// Two stacked pairs of the held-out set `EQUISCAN_BENCH_FIRST=234` whose answer was
/// `confident` and wrong with a rival listed that lays nearly as much of SOURCE on TARGET but
/// explains few of its matches: pair 239 (channel seed 235, alignment seed 240; a half turn,
/// the rival 0.82 of the overlap with 3 of 41 matches) and pair 7 (bracket seed 241, alignment
/// seed 8; a plate laid face on face, the rival 0.95 with 5 of 42). Each rival also lays 0.6–0.7
/// as much as the answer of SOURCE's keypoints off its largest plane, so it keeps more than one
/// plane and the surfaces do not decide ([`Tuning::rival_near_overlap`],
/// `src/align/off_plane.rs`; DEVELOPERS.md, Registration, "A rival laying nearly as much, off
/// the largest plane"). With the rule off both must be `confident` and wrong (the case
/// guarded, so the check can fail); with it on, not `confident` unless right. Right and wrong
/// against the generator's pose (tests/common/shapes.rs).
#[test]
fn a_rival_laying_nearly_as_much_off_the_largest_plane_is_not_confident() {
    for (name, seed, index) in [("channel", 235u64, 239u64), ("bracket", 241, 7)] {
        let (p, params) = table_case(name, seed, index, Method::Equivariant);
        let off = AlignParams {
            tuning: Tuning {
                rival_near_overlap: f64::INFINITY,
                ..params.tuning
            },
            ..params
        };
        guarded_case(
            &format!("{name} seed {seed}"),
            &p,
            (&params, &off),
            Verdict::Ambiguous(Reason::AmbiguousSymmetricShape),
        );
    }
}

/// Two noisy pipe elbows of the held-out set `EQUISCAN_BENCH_FIRST=234` that the FPFH
/// baseline answered `confident` about 5° off, with 19 and 22 agreeing pairs and no rival
/// listed: pair 116 (elbow seed 248, alignment seed 117) and pair 117 (seed 249, alignment seed
/// 118). FPFH's floor of agreeing pairs ([`Tuning::fpfh_min_consensus`], 25; DEVELOPERS.md,
/// Registration, "Fewest agreeing pairs of FPFH") must keep them from `confident`: with the
/// floor at the default method's 15 both must be `confident` and wrong (the case guarded, so
/// the check can fail); with it at 25, not `confident` unless right, but `not_found` for too
/// few agreeing pairs, and that because of the floor (fewer agreeing pairs than it). Right and
/// wrong against the generator's pose (tests/common/shapes.rs).
#[test]
fn fpfh_needs_more_agreeing_pairs_to_be_confident() {
    for (seed, index) in [(248u64, 116u64), (249, 117)] {
        let (p, params) = table_case("elbow", seed, index, Method::Fpfh);
        let off = AlignParams {
            tuning: Tuning {
                fpfh_min_consensus: equiscan::align::quality::MIN_CONSENSUS,
                ..params.tuning
            },
            ..params
        };
        let before = guarded_case(
            &format!("FPFH elbow seed {seed}"),
            &p,
            (&params, &off),
            Verdict::NotFound(Reason::TooFewDistinctivePoints),
        );
        assert!(before.figures.inliers < params.tuning.fpfh_min_consensus);
    }
}

/// Two plates meeting along the y axis, no hole: the fit is free to slide along y and must say
/// so (a weak direction along ±y, in TARGET's frame, which is the part's), never `confident`.
#[test]
fn the_slide_on_a_two_plane_part_is_a_weak_direction() {
    let [_, angle] = test_shapes();
    let c = angle.centre();
    let a = Vector3::new(1.0, 0.2, 1.0).normalize() * 300.0;
    let b = Vector3::new(1.0, -0.3, 0.8).normalize() * 300.0;
    let p = pair_from(&angle, [c + a, c + b], 12_000, 0.001, 3);
    let a = align_pair(&p.source, &p.target, &AlignParams::default()).unwrap();
    eprintln!("{:?}; {:?}", a.verdict, a.constraint);
    assert_ne!(a.verdict, Verdict::Confident);
    assert!(
        a.constraint
            .weak
            .iter()
            .any(|w| w.motion == Motion::Slide && w.axis[1].abs() > 0.95),
        "{:?}",
        a.constraint.weak
    );
}

/// The free-space test ([`Visibility::tally`]) of the answer of `a` and of the truth of `p`,
/// in both directions: per pose, SOURCE's sample in TARGET's sensor view and TARGET's in
/// SOURCE's as tested/seen through/unmeasured.
fn free_space(p: &Pair, params: &AlignParams, a: &Alignment) -> String {
    use equiscan::align::visibility::{Counts, Visibility};
    let s = PreparedScan::prepare("source", &p.source, params, a.voxel).unwrap();
    let t = PreparedScan::prepare("target", &p.target, params, a.voxel).unwrap();
    let seen = Visibility::new(&s, &t, &params.viewpoints, &params.tuning);
    let local = |tf: &Rigid| {
        let (so, to) = (Vector3::from(s.origin()), Vector3::from(t.origin()));
        Rigid::new(tf.rotation, tf.rotation * so + tf.translation - to)
    };
    let c = |x: Option<Counts>| {
        x.map_or("-".into(), |c| {
            format!("{}/{}/{}", c.tested, c.seen_through, c.unmeasured)
        })
    };
    let mut out = format!("free space (margin {:.3}):", seen.margin());
    for (name, tf) in [("answer", &a.transform), ("truth", &p.truth)] {
        let x = seen.tally(&local(tf));
        out += &format!(
            " {name} in target {} in source {}",
            c(x.in_target),
            c(x.in_source)
        );
    }
    out
}

/// Principal axes (columns, largest spread first) and centroid of `pts`.
fn principal(pts: &[Vector3<f64>]) -> (nalgebra::Matrix3<f64>, Vector3<f64>) {
    let n = pts.len().max(1) as f64;
    let c = pts.iter().fold(Vector3::zeros(), |a, p| a + p) / n;
    let mut cov = nalgebra::Matrix3::zeros();
    for p in pts {
        cov += (p - c) * (p - c).transpose();
    }
    let e = nalgebra::SymmetricEigen::new(cov / n);
    let mut k = [0usize, 1, 2];
    k.sort_by(|&a, &b| e.eigenvalues[b].total_cmp(&e.eigenvalues[a]));
    let m = nalgebra::Matrix3::from_columns(&[
        e.eigenvectors.column(k[0]).into_owned(),
        e.eigenvectors.column(k[1]).into_owned(),
        e.eigenvectors.column(k[2]).into_owned(),
    ]);
    (m, c)
}

/// Diagnosis of the benchmark pairs (equivariant): for every pair that is wrong or stacked,
/// how the truth relates to the answer (the motion truth ∘ answer⁻¹ in TARGET's frame: angle,
/// axis in the principal axes of TARGET and of the union of TARGET and the truly placed
/// SOURCE, and the shift of SOURCE's centroid) and at which stage a pose near the truth
/// (within 5° and 3 % of the diagonal) still existed. Size as the tables
/// (`EQUISCAN_BENCH_PAIRS`, `EQUISCAN_BENCH_SHAPES`, `EQUISCAN_BENCH_PICK`); with
/// `EQUISCAN_BENCH_VIEWPOINTS=1` both sensor positions are passed and each line also gives
/// the free-space test of the answer and of the truth in both directions (`free_space`).
#[test]
#[ignore = "diagnosis: --release --ignored --nocapture"]
fn benchmark_diagnosis() {
    let (per_part, bunnies, yard) = bench_size();
    let ps = pairs(per_part, bunnies, yard);
    let known = std::env::var("EQUISCAN_BENCH_VIEWPOINTS").is_ok_and(|v| v == "1");
    for (i, p) in ps.iter().enumerate() {
        let params = AlignParams {
            seed: align_seed(i),
            viewpoints: viewpoints(p, known),
            ..AlignParams::default()
        };
        let params = tuned(params, &p.source, &p.target);
        let (a, tr) = align_pair_traced(&p.source, &p.target, &params).unwrap();
        let (right, rot) = is_right(p, &a.transform);
        let st = stacked(p, &offered(&a));
        let confident = a.verdict == Verdict::Confident;
        let listed = offered(&a).iter().any(|tf| is_right(p, tf).0);
        let near = |tf: &Rigid| {
            let (r, t) = errors(&p.source, tf, &p.truth);
            r <= 5.0 && t <= 0.03 * p.diagonal
        };
        let hyp = tr.hypotheses.iter().filter(|t| near(t)).count();
        let ranked = tr.ranked.iter().position(near);
        let refined: Vec<String> = tr
            .refined
            .iter()
            .enumerate()
            .filter(|(_, r)| near(&r.0))
            .map(|(k, r)| {
                let (rot, trans) = errors(&p.source, &r.0, &p.truth);
                format!(
                    "#{k} ovl {:.3} k {} right {} ({rot:.1}°, {:.2} % diag)",
                    r.1,
                    r.2,
                    is_right(p, &r.0).0,
                    100.0 * trans / p.diagonal
                )
            })
            .collect();
        // The refined pose closest to the truth in rotation (index, rotation error, translation
        // error in % of the diagonal), near or not.
        let closest = tr
            .refined
            .iter()
            .enumerate()
            .map(|(k, r)| {
                let (rot, trans) = errors(&p.source, &r.0, &p.truth);
                (k, rot, 100.0 * trans / p.diagonal)
            })
            .min_by(|x, y| x.1.total_cmp(&y.1));
        let lead = tr
            .refined
            .iter()
            .map(|r| (r.1, r.2))
            .max_by(|x, y| (x.0 * x.1 as f64).total_cmp(&(y.0 * y.1 as f64)))
            .unwrap_or((0.0, 0));
        // Strongest refined pose near the truth and strongest far from it (overlap × matches).
        let strongest = |want: bool| {
            tr.refined
                .iter()
                .filter(|r| near(&r.0) == want)
                .map(|r| (r.1, r.2))
                .max_by(|x, y| (x.0 * x.1 as f64).total_cmp(&(y.0 * y.1 as f64)))
        };
        let (t_best, w_best) = (strongest(true), strongest(false));
        println!(
            "split {i} {} stacked {st} right {right} confident {confident} truth {:?} wrong {:?} answer ovl {:.3} k {}",
            p.shape,
            t_best,
            w_best,
            a.candidates.first().map_or(0.0, |c| c.overlap),
            a.candidates.first().map_or(0, |c| c.explained),
        );
        let mut line = format!(
            "pair {} {} ovl {:.2} noise {:.4} stacked {st} {:?} right {right} confident {confident} listed {listed} rot {rot:.1} margin {:.3} | hyps {} near {hyp} | ranked {} near at {ranked:?} | refined {} lead ovl {:.3} k {} closest {closest:.1?} near: {refined:?}",
            pair_number(i),
            p.shape,
            p.overlap,
            p.noise_frac,
            a.verdict,
            a.figures.margin,
            tr.hypotheses.len(),
            tr.ranked.len(),
            tr.refined.len(),
            lead.0,
            lead.1
        );
        if known {
            line += &format!("\n    {}", free_space(p, &params, &a));
        }
        // A right refined pose that is not offered: how far the nearest offered pose lies from
        // it (degrees, τ), and what was offered (overlap, matches, right).
        if !listed && let Some(r) = tr.refined.iter().find(|r| is_right(p, &r.0).0) {
            let c = p.source.centroid();
            let nearest = offered(&a)
                .iter()
                .map(|tf| {
                    let (ang, d) = equiscan::align::candidates::difference(&r.0, tf, &c);
                    (ang, d / a.inlier_threshold)
                })
                .min_by(|x, y| (x.0 + x.1).total_cmp(&(y.0 + y.1)));
            let cands: Vec<String> = a
                .candidates
                .iter()
                .map(|c| format!("{:.3}/{}/{:.2}", c.overlap, c.explained, c.rivalry))
                .collect();
            line += &format!(
                "\n    unlisted right ovl {:.3} k {}; nearest offered {nearest:.1?} (deg, tau); offered {cands:?}",
                r.1, r.2
            );
        }
        if !right || st {
            // Motion carrying the answer's placement of SOURCE onto the true one (TARGET frame).
            let m = p.truth.compose(&a.transform.inverse());
            let angle =
                equiscan::align::rotation_error_deg(&m.rotation, &nalgebra::Matrix3::identity());
            let axis = nalgebra::Rotation3::from_matrix(&m.rotation)
                .axis()
                .map_or(Vector3::zeros(), |u| u.into_inner());
            let tpts: Vec<Vector3<f64>> = (0..p.target.len())
                .step_by(7)
                .map(|k| Vector3::from(p.target.global(k)))
                .collect();
            let spts: Vec<Vector3<f64>> = (0..p.source.len())
                .step_by(7)
                .map(|k| p.truth.apply(&Vector3::from(p.source.global(k))))
                .collect();
            let (at, _) = principal(&tpts);
            let union: Vec<Vector3<f64>> = tpts.iter().chain(spts.iter()).copied().collect();
            let (au, cu) = principal(&union);
            let sc = spts.iter().fold(Vector3::zeros(), |s, x| s + x) / spts.len() as f64;
            // Where the answer puts SOURCE's centroid, and a point of the motion's axis.
            let answer_c = a.transform.apply(&p.truth.inverse().apply(&sc));
            let fix = (m.rotation - nalgebra::Matrix3::identity())
                .pseudo_inverse(1e-9)
                .map_or(Vector3::zeros(), |pi| -(pi * m.translation));
            line += &format!(
                "\n    motion {angle:.1}° axis in target axes {:.2?} in union axes {:.2?}, axis point - union centroid in union axes {:.2?} (diag {:.3}), answer centroid - truth {:.4} (TARGET frame {:.2?})",
                (at.transpose() * axis).map(|x| x.abs()).as_slice(),
                (au.transpose() * axis).map(|x| x.abs()).as_slice(),
                (au.transpose() * (fix - cu)).as_slice(),
                p.diagonal,
                (answer_c - sc).norm(),
                (sc - answer_c).as_slice(),
            );
        }
        println!("{line}");
    }
}

/// The self-maps of a scan of the symmetric plate seen from nearly straight above
/// (`symmetry::self_maps`, off by default and switched on here): among them the half turn
/// about the plate's normal, which lays the scan on itself (the plate's two-fold symmetry
/// is the generator's construction, tests/common/shapes.rs).
#[test]
fn the_half_turn_of_a_symmetric_plate_is_one_of_its_self_maps() {
    use equiscan::align::prepared_scan::{PreparedScan, pair_voxel};
    use equiscan::align::symmetry::self_maps;
    let [plate, _] = test_shapes();
    let c = plate.centre();
    let up = Vector3::new(0.05, 0.0, 1.0).normalize() * 300.0;
    let other = Vector3::new(-0.12, 0.05, 1.0).normalize() * 300.0;
    let p = pair_from(&plate, [c + up, c + other], 12_000, 0.001, 7);
    let mut params = AlignParams::default();
    params.tuning.self_maps = 3;
    let voxel = pair_voxel(&params, ("source", &p.source), ("target", &p.target)).unwrap();
    let scan = PreparedScan::prepare("target", &p.target, &params, voxel).unwrap();
    let maps = self_maps(&scan, &params, params.inlier_voxels * voxel);
    let angles: Vec<f64> = maps.iter().map(|m| m.angle_deg()).collect();
    eprintln!("self-map angles {angles:?}");
    assert!(
        angles.iter().any(|a| (a - 180.0).abs() < 5.0),
        "no half turn among {angles:?}"
    );
}

/// Diagnosis of the matches behind the hypotheses, per pair and method (size as the tables):
/// how many kept matches are true (the truth brings their SOURCE keypoint within τ of their
/// TARGET keypoint), how many SOURCE keypoints could have a true match at all (a TARGET
/// keypoint within τ under the truth), and for the harmonic method how far the rotation of
/// each true match's own pose is from the truth (the best of its one or two poses). Then the
/// hypotheses of the method's own step and of 3-point RANSAC on the same matches: how many lie
/// near the truth (within 5° and 3 % of the diagonal) and the support of the best near one
/// against the best of all. Answers "are the true matches there but their rotations off, or
/// are there fewer true matches" (DEVELOPERS.md, Registration, "Why the harmonic method trails
/// FPFH").
#[test]
#[ignore = "diagnosis: --release --ignored --nocapture"]
fn match_diagnosis() {
    use equiscan::align::consensus::{Pairs, ransac, score};
    use equiscan::align::prepared_scan::{PreparedScan, pair_voxel};
    use equiscan::align::{equivariant, hypotheses};
    let (per_part, bunnies, yard) = bench_size();
    let ps = pairs(per_part, bunnies, yard);
    // The arms' methods (sensor positions play no part in matching).
    let mut methods: Vec<Method> = bench_methods().iter().map(|a| a.method).collect();
    methods.dedup();
    // Sums per method: kept, true, possible, true with rotation within 5° / 15°, pairs with a
    // near hypothesis from the method's own step / from RANSAC on its matches.
    let mut sums = vec![[0usize; 7]; methods.len()];
    for (i, p) in ps.iter().enumerate() {
        for (mi, &method) in methods.iter().enumerate() {
            let params = tuned(
                AlignParams {
                    method,
                    seed: align_seed(i),
                    ..AlignParams::default()
                },
                &p.source,
                &p.target,
            );
            let voxel = pair_voxel(&params, ("source", &p.source), ("target", &p.target)).unwrap();
            let s = PreparedScan::prepare("source", &p.source, &params, voxel).unwrap();
            let t = PreparedScan::prepare("target", &p.target, &params, voxel).unwrap();
            let tau = params.inlier_voxels * s.voxel();
            let neg = |o: [f64; 3]| [-o[0], -o[1], -o[2]];
            // The truth between the two local frames.
            let truth = p.truth.between_origins(neg(s.origin()), neg(t.origin()));
            let to_file = |r: &Rigid| r.between_origins(s.origin(), t.origin());
            let near = |r: &Rigid| {
                let (rot, trans) = errors(&p.source, &to_file(r), &p.truth);
                rot <= 5.0 && trans <= 0.03 * p.diagonal
            };
            let found = hypotheses::matches(&s, &t, &params);
            let pairs_all: &Pairs = &found.pairs;
            let is_true: Vec<bool> = (0..pairs_all.len())
                .map(|k| (truth.apply(&pairs_all.src[k]) - pairs_all.dst[k]).norm() <= tau)
                .collect();
            let n_true = is_true.iter().filter(|&&b| b).count();
            let possible = s
                .keypoints()
                .iter()
                .filter(|k| {
                    let q = truth.apply(&Vector3::new(k[0] as f64, k[1] as f64, k[2] as f64));
                    let (_, d2) = t
                        .keypoint_index()
                        .nearest_one([q.x as f32, q.y as f32, q.z as f32]);
                    (d2 as f64).sqrt() <= tau
                })
                .count();
            // Rotation errors of the true matches' own poses (harmonic method only).
            let mut rot_errs: Vec<f64> = Vec::new();
            if method == Method::Equivariant {
                let tu = &params.tuning;
                let searcher =
                    equivariant::searcher(tu.descriptor_degree, tu.rotation_ambiguity_margin);
                let true_matches: Vec<_> = found
                    .correspondences
                    .iter()
                    .zip(&is_true)
                    .filter(|(_, t)| **t)
                    .map(|(c, _)| *c)
                    .collect();
                let per_match = equivariant::per_match(
                    &true_matches,
                    s.keypoints(),
                    t.keypoints(),
                    s.descriptors(),
                    t.descriptors(),
                    &searcher,
                );
                rot_errs = per_match
                    .iter()
                    .map(|h| {
                        h.iter()
                            .map(|r| {
                                equiscan::align::rotation_error_deg(&r.rotation, &truth.rotation)
                            })
                            .fold(180.0f64, f64::min)
                    })
                    .collect();
            }
            let own: Vec<Rigid> = hypotheses::propose(&s, &t, &found, &params, tau)
                .iter()
                .map(|h| h.transform)
                .collect();
            let drawn = ransac(pairs_all, tau, params.ransac_iterations, params.seed);
            let summary = |hs: &[equiscan::align::consensus::Hypothesis]| {
                let best = hs.iter().map(|h| h.support).max().unwrap_or(0);
                let best_near = hs
                    .iter()
                    .filter(|h| near(&h.transform))
                    .map(|h| h.support)
                    .max();
                let n_near = hs.iter().filter(|h| near(&h.transform)).count();
                (n_near, best_near, best)
            };
            let own_scored = score(pairs_all, &own, tau);
            let (own_near, own_best_near, own_best) = summary(&own_scored);
            let (r_near, r_best_near, r_best) = summary(&drawn);
            rot_errs.sort_by(f64::total_cmp);
            let within = |deg: f64| rot_errs.iter().filter(|&&e| e <= deg).count();
            let median = rot_errs
                .get(rot_errs.len() / 2)
                .copied()
                .unwrap_or(f64::NAN);
            println!(
                "match {i} {} {} ovl {:.2} noise {:.4} | kept {} true {n_true} possible {possible} of {} | true rot ≤5° {} ≤15° {} median {median:.1}° | own hyps {} near {own_near} best near {own_best_near:?} best {own_best} | ransac hyps {} near {r_near} best near {r_best_near:?} best {r_best}",
                p.shape,
                method.name(),
                p.overlap,
                p.noise_frac,
                pairs_all.len(),
                s.keypoints().len(),
                within(5.0),
                within(15.0),
                own_scored.len(),
                drawn.len(),
            );
            let row = &mut sums[mi];
            row[0] += pairs_all.len();
            row[1] += n_true;
            row[2] += possible;
            row[3] += within(5.0);
            row[4] += within(15.0);
            row[5] += usize::from(own_near > 0);
            row[6] += usize::from(r_near > 0);
        }
    }
    for (mi, m) in methods.iter().enumerate() {
        let r = sums[mi];
        println!(
            "total {} pairs {}: kept {} true {} possible {} | true rot ≤5° {} ≤15° {} | pairs with a near hypothesis: own {} ransac on the matches {}",
            m.name(),
            ps.len(),
            r[0],
            r[1],
            r[2],
            r[3],
            r[4],
            r[5],
            r[6]
        );
    }
}

/// The FPFH matches added to the harmonic method's own (`Tuning::baseline_matches`, off by
/// default) on a bracket pair that the harmonic matches alone turn 90° (benchmark bracket seed
/// 15, not stacked; FPFH alone is right there): the kept matches gain true ones (the
/// generator's truth brings both keypoints within τ) and the answer is right (within 2° and 1 %
/// of the diagonal of the generator's truth); the defaults' answer was 89.9° off when this was
/// written (DEVELOPERS.md, Registration, "Why the harmonic method trails FPFH").
#[test]
fn fpfh_matches_right_a_bracket_pair_the_harmonic_matches_turn() {
    use equiscan::align::hypotheses;
    use equiscan::align::prepared_scan::{PreparedScan, pair_voxel};
    let p = pair(&shapes()[0], 15);
    assert_eq!(p.shape, "bracket");
    let true_matches = |params: &AlignParams| {
        let voxel = pair_voxel(params, ("source", &p.source), ("target", &p.target)).unwrap();
        let s = PreparedScan::prepare("source", &p.source, params, voxel).unwrap();
        let t = PreparedScan::prepare("target", &p.target, params, voxel).unwrap();
        let tau = params.inlier_voxels * s.voxel();
        let neg = |o: [f64; 3]| [-o[0], -o[1], -o[2]];
        let truth = p.truth.between_origins(neg(s.origin()), neg(t.origin()));
        let found = hypotheses::matches(&s, &t, params);
        let m = &found.pairs;
        (0..m.len())
            .filter(|&k| (truth.apply(&m.src[k]) - m.dst[k]).norm() <= tau)
            .count()
    };
    let plain = AlignParams::default();
    let mut added = AlignParams::default();
    added.tuning.baseline_matches = true;
    let (before, after) = (true_matches(&plain), true_matches(&added));
    assert!(after > before, "true matches {before} -> {after}");
    let a = align_pair(&p.source, &p.target, &plain).unwrap();
    let b = align_pair(&p.source, &p.target, &added).unwrap();
    assert!(
        !is_right(&p, &a.transform).0,
        "the defaults are now right here"
    );
    assert!(
        is_right(&p, &b.transform).0,
        "rotation error {:.1}°",
        is_right(&p, &b.transform).1
    );
}

/// The first yard pair of the benchmark (seed as in the tables, where it is pair 32 of
/// `EQUISCAN_BENCH_PAIRS=4,3,1`): the matches favour a pose turned 90°, which lays less of
/// SOURCE on TARGET than the true pose (from the generator) does.
/// The verdict is not confident, so the answer is the distinct pose with the most overlap, the
/// true one, with the matches' choice listed second exactly as the rule-off run answers
/// (DEVELOPERS.md, Registration, "The answer of an ambiguous verdict").
#[test]
fn an_ambiguous_answer_is_the_pose_that_overlaps_most() {
    let ps = pairs(0, 0, 1);
    let p = &ps[0];
    let params = AlignParams {
        seed: 33,
        ..AlignParams::default()
    };
    let a = align_pair(&p.source, &p.target, &params).unwrap();
    let off = AlignParams {
        tuning: Tuning {
            answer_overlap_lead: 2.0,
            ..params.tuning
        },
        ..params
    };
    let b = align_pair(&p.source, &p.target, &off).unwrap();
    let show = |a: &Alignment| {
        a.candidates
            .iter()
            .map(|c| {
                (
                    c.overlap,
                    c.fine_overlap,
                    c.explained,
                    is_right(p, &c.transform),
                )
            })
            .collect::<Vec<_>>()
    };
    eprintln!("rule on: {:?} {:?}", a.verdict, show(&a));
    eprintln!("rule off: {:?} {:?}", b.verdict, show(&b));
    assert!(!is_right(p, &b.transform).0, "the matches' choice is wrong");
    assert_ne!(b.verdict, Verdict::Confident);
    assert!(
        is_right(p, &a.transform).0,
        "{:.1}° off",
        is_right(p, &a.transform).1
    );
    assert_eq!(
        a.verdict,
        Verdict::Ambiguous(Reason::MatchesFavourAnotherPose)
    );
    let (answer, replaced) = (&a.candidates[0], &a.candidates[1]);
    assert_eq!(replaced.transform, b.transform);
    assert!(replaced.score > answer.score && replaced.explained > answer.explained);
    let (fine, fine_replaced) = (answer.fine_overlap.unwrap(), replaced.fine_overlap.unwrap());
    assert!(fine > fine_replaced + params.tuning.answer_fine_lead);
    assert!(answer.explained >= params.tuning.answer_min_explained);
}

/// Two pairs of the set `EQUISCAN_BENCH_FIRST=300` whose answer was wrong when the answer of
/// an ambiguous verdict was chosen on the coarse poses' keypoints: pair 20 (bracket seed 320,
/// alignment seed 21: the plate laid face on face, 0.0° but 5 mm off, had replaced the true
/// first answer) and pair 177 (bossplate seed 307, alignment seed 178: a half turn). Fitted
/// finely, the true pose lays the most of SOURCE's fine points on TARGET's surface and is the
/// answer ([`Tuning::answer_fine_pool`]; DEVELOPERS.md, Registration, "The answer chosen on
/// fine fits"). With the pool off the answer must be wrong (the case this test guards, so it
/// can fail); with it on, right and not `confident`, no listed pose that explains a match
/// leading its fine overlap by more than [`Tuning::answer_fine_lead`], and a replaced first
/// answer (`matches_favour_another_pose`) wrong and behind it by more than that. Right and
/// wrong against the generator's pose (tests/common/shapes.rs).
#[test]
fn an_ambiguous_answer_is_chosen_on_fine_fits() {
    for (name, seed, index) in [("bracket", 320u64, 20u64), ("bossplate", 307, 177)] {
        let (p, params) = table_case(name, seed, index, Method::Equivariant);
        let off = AlignParams {
            tuning: Tuning {
                answer_fine_pool: 0,
                ..params.tuning
            },
            ..params
        };
        let before = align_pair(&p.source, &p.target, &off).unwrap();
        let (right_before, rot_before) = is_right(&p, &before.transform);
        eprintln!(
            "{name} seed {seed}, coarse choice: {:?}, {rot_before:.1}° off",
            before.verdict
        );
        assert!(
            !right_before,
            "{name} seed {seed}: the case this test guards"
        );
        let a = align_pair(&p.source, &p.target, &params).unwrap();
        let (right, rot) = is_right(&p, &a.transform);
        let fine: Vec<(Option<f64>, usize)> = a
            .candidates
            .iter()
            .map(|c| (c.fine_overlap, c.explained))
            .collect();
        eprintln!(
            "{name} seed {seed}, fine choice: {:?}, {rot:.1}° off, {fine:?}",
            a.verdict
        );
        assert!(right, "{name} seed {seed}: {rot:.1}° off");
        assert_ne!(a.verdict, Verdict::Confident);
        let lead = params.tuning.answer_fine_lead;
        let answer = a.candidates[0].fine_overlap.unwrap();
        for c in &a.candidates[1..] {
            if c.explained >= params.tuning.answer_min_explained {
                assert!(c.fine_overlap.unwrap() <= answer + lead, "{fine:?}");
            }
        }
        if a.verdict == Verdict::Ambiguous(Reason::MatchesFavourAnotherPose) {
            let replaced = &a.candidates[1];
            assert!(!is_right(&p, &replaced.transform).0);
            assert!(answer > replaced.fine_overlap.unwrap() + lead);
        }
    }
}

/// Diagnosis of near misses: the fine fit ([`equiscan::align::refine::fit_fine`]) started from
/// the truth and from the pipeline's answer, per pair (size as the tables; pick pairs with
/// `EQUISCAN_BENCH_PICK`): where each ends (rotation error, translation error in % of the
/// diagonal) and its tight fine overlap ([`equiscan::align::pinning::fine_fit`]). Tells a near
/// miss whose fit is a basin of its own (the truth stays put) from one where the objective's
/// minimum itself lies off the truth (both end at the same place).
#[test]
#[ignore = "diagnosis: --release --ignored --nocapture"]
fn fine_fit_diagnosis() {
    use equiscan::align::pinning::{fine_fit, reverse_fit};
    use equiscan::align::prepared_scan::{PreparedScan, pair_voxel};
    use equiscan::align::refine::fit_fine;
    let (per_part, bunnies, yard) = bench_size();
    let ps = pairs(per_part, bunnies, yard);
    for (i, p) in ps.iter().enumerate() {
        let params = AlignParams {
            seed: align_seed(i),
            ..AlignParams::default()
        };
        let params = tuned(params, &p.source, &p.target);
        let a = align_pair(&p.source, &p.target, &params).unwrap();
        let voxel = pair_voxel(&params, ("source", &p.source), ("target", &p.target)).unwrap();
        let s = PreparedScan::prepare("source", &p.source, &params, voxel).unwrap();
        let t = PreparedScan::prepare("target", &p.target, &params, voxel).unwrap();
        let tau = params.inlier_voxels * voxel;
        let (so, to) = (Vector3::from(s.origin()), Vector3::from(t.origin()));
        // File transform → local: x_t − o_t = R (x_s − o_s) + (t + R o_s − o_t).
        let local = |f: &Rigid| Rigid::new(f.rotation, f.translation + f.rotation * so - to);
        let report = |name: &str, start: &Rigid| {
            let fit = fit_fine(&local(start), &s, &t, &params, tau);
            let file = fit.local.between_origins(s.origin(), t.origin());
            let (r, d) = errors(&p.source, &file, &p.truth);
            format!(
                "{name}: ends {r:.2}° {:.2} % diag, fine overlap {:.4} (start {:.4})",
                100.0 * d / p.diagonal,
                fine_fit(&s, &t, &fit.local, &params, tau),
                fine_fit(&s, &t, &local(start), &params, tau),
            )
        };
        // The same fit the other way round (TARGET's fine points onto SOURCE's, from the
        // answer's inverse), inverted back: where it ends.
        let reverse = |start: &Rigid| {
            let back = reverse_fit(&local(start), &s, &t, &params, tau);
            let file = back.between_origins(s.origin(), t.origin());
            let (r, d) = errors(&p.source, &file, &p.truth);
            // How far the reverse fit ends from the start, measured as the errors are.
            let (rs, ds) = errors(&p.source, &file, start);
            format!(
                "reverse from answer: ends {r:.2}° {:.2} % diag; {rs:.2}° {:.2} % diag from the answer",
                100.0 * d / p.diagonal,
                100.0 * ds / p.diagonal
            )
        };
        let (right, rot) = is_right(p, &a.transform);
        println!(
            "pair {} {} noise {:.4} verdict {:?} right {right} rot {rot:.2} | {} | {} | {}",
            pair_number(i),
            p.shape,
            p.noise_frac,
            a.verdict,
            report("from truth", &p.truth),
            report("from answer", &a.transform),
            reverse(&a.transform),
        );
    }
}
