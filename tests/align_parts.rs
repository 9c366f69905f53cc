//! The demo part scans (scans/parts, synthetic; see scans/README.md): one structured-light view
//! of a small machined part (millimetres) registered onto its full reference scan with no
//! initial guess. Skips when scans/ is absent.
//!
//! The check that matters: no part gets a confident wrong pose. A pose is right when it fits
//! the scan onto the reference surface as well as the true pose does (fraction of scan points
//! within 0.5 mm of a reference point), and, for parts with no symmetry, also lies within 2° and
//! 1 % of the part's size of the true pose; for the symmetric parts (nut, flange) any pose that
//! fits the surface is accepted, as the symmetric poses are equivalent. Parts that align today
//! (see DEVELOPERS.md, Registration) must keep aligning; the others may improve, and the check
//! above makes sure that an improvement is right.

use std::path::Path;

use equiscan::align::{AlignParams, Reason, Rigid, Verdict, align_pair, rotation_error_deg};
use equiscan::cloud::Cloud;
use equiscan::io::read_cloud;
use equiscan::spatial::KdIndex;
use nalgebra::Vector3;

/// Fraction of (a stride sample of) SOURCE points that `tf` (file coordinates) puts within
/// `tol` of a TARGET point.
fn surface_fit(source: &Cloud, target: &Cloud, index: &KdIndex, tf: &Rigid, tol: f64) -> f64 {
    let stride = source.len().div_ceil(4000).max(1);
    let o = Vector3::from(target.origin);
    let (mut near, mut n) = (0usize, 0usize);
    for i in (0..source.len()).step_by(stride) {
        let p = tf.apply(&Vector3::from(source.global(i))) - o;
        let (_, d2) = index.nearest_one([p.x as f32, p.y as f32, p.z as f32]);
        n += 1;
        if (d2 as f64).sqrt() <= tol {
            near += 1;
        }
    }
    near as f64 / n.max(1) as f64
}

#[derive(Debug, PartialEq)]
enum Outcome {
    Aligned,
    Ambiguous,
    NotFound,
}

#[test]
fn part_scans_get_no_confident_wrong_pose() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let truth_file = root.join("scans/truth.json");
    if !truth_file.exists() {
        eprintln!("scans/ not present: skipped");
        return;
    }
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(truth_file).unwrap()).unwrap();
    // Parts aligned with the default settings today (DEVELOPERS.md, Registration). None since
    // the rival rule counts rivals with half the overlap ("Rival rule at half the overlap"):
    // the elbow's half-turned rivals explain 10–13 of its 13 matches, and it is `ambiguous`.
    let must_align: [&str; 0] = [];
    for part in v["parts"].as_array().unwrap() {
        let name = part["name"].as_str().unwrap();
        let symmetric = part["symmetry"].as_str().unwrap_or("none") != "none";
        let m: [[f64; 4]; 4] = serde_json::from_value(part["pose"]["matrix"].clone()).unwrap();
        // The pose maps the reference into the scan; SOURCE = scan, TARGET = reference.
        let truth = Rigid::from_rows(&m).unwrap().inverse();
        let (source, _) =
            read_cloud(&root.join(format!("scans/parts/tray/{name}_scan.ply"))).unwrap();
        let (target, _) =
            read_cloud(&root.join(format!("scans/parts/reference/{name}.ply"))).unwrap();
        let index = KdIndex::new(&target.positions).unwrap();
        let (lo, hi) = target.global_bounds().unwrap();
        let size = (Vector3::from(hi) - Vector3::from(lo)).norm();
        let mut c = Vector3::zeros();
        for i in 0..source.len() {
            c += Vector3::from(source.global(i));
        }
        c /= source.len() as f64;

        let a = align_pair(&source, &target, &AlignParams::default()).unwrap();
        let rot = rotation_error_deg(&a.transform.rotation, &truth.rotation);
        let trans = (a.transform.apply(&c) - truth.apply(&c)).norm();
        let fit = surface_fit(&source, &target, &index, &a.transform, 0.5);
        let fit_truth = surface_fit(&source, &target, &index, &truth, 0.5);
        let fits = fit >= 0.95 * fit_truth;
        let right = fits && (symmetric || (rot <= 2.0 && trans <= 0.01 * size));
        let outcome = match a.verdict {
            Verdict::Confident => Outcome::Aligned,
            Verdict::Ambiguous(_) | Verdict::NotFound(Reason::AmbiguousSymmetricShape) => {
                Outcome::Ambiguous
            }
            Verdict::NotFound(_) => Outcome::NotFound,
        };
        eprintln!(
            "{name}: {outcome:?}, rotation error {rot:.2}°, translation error {trans:.2} mm, \
             surface fit {fit:.3} (true pose {fit_truth:.3})"
        );
        assert!(
            a.verdict != Verdict::Confident || right,
            "{name}: confident but wrong (rotation error {rot:.2}°, surface fit {fit:.3})"
        );
        if must_align.contains(&name) {
            assert_eq!(outcome, Outcome::Aligned, "{name}");
        }
    }
}
