//! The demo tray (scans/parts, synthetic; scans/README.md): a catalogue from
//! scans/parts/reference, every tray scan identified as its part with the pose of
//! scans/truth.json (the generator's truth), and the defective flange's undrilled bolt hole
//! found as a cluster at the hole's centre given in scans/README.md ((-46, 0, 14) mm in the
//! part's frame). Skips when scans/ is absent.

use std::path::Path;

use equiscan::align::Rigid;
use equiscan::geometry::rotation_error_deg;
use equiscan::io::read_cloud;
use equiscan::parts::catalogue;
use equiscan::parts::identify::{IdentifyParams, Verdict, identify};
use equiscan::parts::inspect::inspect;
use equiscan::parts::register::{FitParams, PoseVerdict};
use equiscan::parts::scan::PreparedScan;
use nalgebra::Vector3;

fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

fn truth() -> Option<serde_json::Value> {
    let f = root().join("scans/truth.json");
    f.exists()
        .then(|| serde_json::from_str(&std::fs::read_to_string(f).unwrap()).unwrap())
}

#[test]
fn tray_scans_are_named_and_posed() {
    let Some(v) = truth() else {
        eprintln!("scans/ not present: skipped");
        return;
    };
    let cat = catalogue::build(&root().join("scans/parts/reference")).unwrap();
    let names: Vec<&str> = cat.header.parts.iter().map(|e| e.name.as_str()).collect();
    assert_eq!(names, ["bracket", "elbow", "flange", "nut", "shaft"]);
    for part in v["parts"].as_array().unwrap() {
        let name = part["name"].as_str().unwrap();
        let symmetric = part["symmetry"].as_str().unwrap_or("none") != "none";
        let m: [[f64; 4]; 4] = serde_json::from_value(part["pose"]["matrix"].clone()).unwrap();
        let truth = Rigid::from_rows(&m).unwrap().inverse();
        let path = root().join(format!("scans/parts/tray/{name}_scan.ply"));
        let (cloud, _) = read_cloud(&path).unwrap();
        let scan = PreparedScan::new(&cloud, name).unwrap();
        let id = identify(&scan, &cat, &IdentifyParams::default());
        let got = id.part.map(|i| names[i]);
        let centroid = cloud.centroid();
        let (rot, shift) = match id.transform {
            Some(t) => (
                rotation_error_deg(&t.rotation, &truth.rotation),
                (t.apply(&centroid) - truth.apply(&centroid)).norm(),
            ),
            None => (f64::NAN, f64::NAN),
        };
        eprintln!(
            "{name}: {:?} as {got:?}, confidence {:.2}, pose {:?}, rotation error {rot:.2}°, shift {shift:.3} mm; {}",
            id.verdict, id.confidence, id.pose_verdict, id.reason
        );
        {
            let k = names.iter().position(|n| *n == name).unwrap();
            let r = &cat.parts[k];
            let os = Vector3::from(cloud.origin);
            let or = Vector3::from(r.reference.origin);
            let local = Rigid::new(truth.rotation, truth.rotation * os + truth.translation - or);
            let tau = equiscan::parts::register::inlier_distance(&scan, r);
            let res = equiscan::parts::deviation::residuals(&scan.fine, r, &local, tau);
            eprintln!(
                "   at the true pose: share {:.3}, rms {:.3}",
                res.share(),
                res.rms()
            );
        }
        for f in &id.fits {
            eprintln!(
                "   {}: share {:.3}, rms {:.3}, coverage {:.2}, tau {:.3}",
                f.part, f.share, f.rms, f.coverage, f.tau
            );
        }
        // Never a wrong part named with confidence.
        assert!(
            id.verdict != Verdict::Identified || got == Some(name),
            "{name} identified as {got:?}"
        );
        // Every tray part must be named (README: "every part named").
        assert_eq!(id.verdict, Verdict::Identified, "{name}");
        if !symmetric && id.pose_verdict == Some(PoseVerdict::Confident) {
            assert!(rot <= 2.0 && shift <= 1.0, "{name}: {rot}° {shift} mm");
        }
    }
}

#[test]
fn undrilled_bolt_hole_is_a_cluster() {
    if truth().is_none() {
        eprintln!("scans/ not present: skipped");
        return;
    }
    let r = equiscan::parts::reference::Reference::read(&[
        &root().join("scans/parts/reference/flange.ply")
    ])
    .unwrap();
    let r = equiscan::parts::reference::Prepared::new(r).unwrap();
    let (cloud, _) = read_cloud(&root().join("scans/parts/tray/flange_defect_scan.ply")).unwrap();
    // ISO 2768-1 class m for the flange's 120 mm (from memory): ± 0.3 mm.
    let ins = inspect(&cloud, "defect", &r, None, 0.3, &FitParams::default()).unwrap();
    eprintln!("{:?}", ins.stats);
    for c in &ins.clusters {
        eprintln!("{c:?}");
    }
    assert!(!ins.passed());
    // The hole is Ø13 at (-46, 0) on the face z = 14 (scans/README.md). The flange is 6-fold
    // symmetric, so the reported pose may be any of the six: the cluster lies on the bolt
    // circle (radius 46) on that face, 13 mm across plus the cluster's link distance.
    let c = &ins.clusters[0];
    let p = Vector3::from(c.centre_part);
    let radial = (p.x * p.x + p.y * p.y).sqrt();
    assert!((radial - 46.0).abs() < 2.0, "{p:?}");
    assert!((p.z - 14.0).abs() < 1.5, "{p:?}");
    assert!(
        c.size_part[0] <= 16.0 && c.size_part[1] <= 16.0,
        "{:?}",
        c.size_part
    );
    assert_eq!(c.side, "above");
    // The same scan without the defect passes at the same tolerance.
    let (good, _) = read_cloud(&root().join("scans/parts/tray/flange_scan.ply")).unwrap();
    let ok = inspect(&good, "good", &r, None, 0.3, &FitParams::default()).unwrap();
    for c in &ok.clusters {
        eprintln!("good: {c:?}");
    }
    assert!(ok.passed(), "{:?}", ok.clusters.first());
}
