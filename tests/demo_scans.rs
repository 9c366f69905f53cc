//! The committed demo data in `scans/` read back with the library's own readers: point counts
//! as `truth.json` says, and the true transforms really map one file onto the other.

use std::path::{Path, PathBuf};

use equiscan::Cloud;
use equiscan::io::read_cloud;
use equiscan::spatial::{KdIndex, estimate_normals};
use serde_json::Value;

fn scans() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("scans")
}

fn truth() -> Value {
    let text = std::fs::read_to_string(scans().join("truth.json")).expect("scans/truth.json");
    serde_json::from_str(&text).expect("truth.json is JSON")
}

fn matrix(v: &Value) -> [[f64; 4]; 4] {
    let mut m = [[0.0; 4]; 4];
    for (r, row) in m.iter_mut().enumerate() {
        for (c, cell) in row.iter_mut().enumerate() {
            *cell = v[r][c].as_f64().expect("matrix entry");
        }
    }
    m
}

fn apply(m: &[[f64; 4]; 4], p: [f64; 3]) -> [f64; 3] {
    std::array::from_fn(|r| m[r][0] * p[0] + m[r][1] * p[1] + m[r][2] * p[2] + m[r][3])
}

fn read(rel: &str) -> Cloud {
    read_cloud(&scans().join(rel)).expect(rel).0
}

fn local(c: &Cloud, g: [f64; 3]) -> [f32; 3] {
    std::array::from_fn(|k| (g[k] - c.origin[k]) as f32)
}

fn quantile(mut v: Vec<f64>, q: f64) -> f64 {
    v.sort_by(f64::total_cmp);
    v[((v.len() - 1) as f64 * q) as usize]
}

#[test]
fn station_two_lands_on_station_one() {
    let t = truth();
    let d = &t["depot"];
    let s1 = read(d["station1"]["file"].as_str().unwrap());
    let s2 = read(d["station2"]["file"].as_str().unwrap());
    assert_eq!(s1.len() as u64, d["station1"]["points"].as_u64().unwrap());
    assert_eq!(s2.len() as u64, d["station2"]["points"].as_u64().unwrap());
    let m = matrix(&d["station2_to_station1"]["matrix"]);
    let centre1: Vec<f64> = d["station1"]["instrument_in_file"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_f64().unwrap())
        .collect();
    let index = KdIndex::new(&s1.positions).unwrap();
    // Station-2 points within 12 m of station 1, where both scans are dense: distance to the
    // plane through the nearest station-1 point (normal from its 12 nearest neighbours).
    let mut nearest = Vec::new();
    let mut queries = Vec::new();
    for i in (0..s2.len()).step_by(7) {
        let g = apply(&m, s2.global(i));
        let r = ((g[0] - centre1[0]).powi(2) + (g[1] - centre1[1]).powi(2)).sqrt();
        if r > 2.0 && r < 12.0 {
            let q = local(&s1, g);
            nearest.push(index.nearest_one(q).0);
            queries.push(q);
        }
    }
    let normals = estimate_normals(&s1.positions, &index, &nearest, 12, None);
    let dists: Vec<f64> = queries
        .iter()
        .zip(&nearest)
        .zip(&normals)
        .map(|((q, &j), n)| {
            let p = s1.positions[j];
            (0..3)
                .map(|k| (q[k] - p[k]) as f64 * n[k] as f64)
                .sum::<f64>()
                .abs()
        })
        .collect();
    assert!(dists.len() > 5000, "{} overlapping points", dists.len());
    let median = quantile(dists.clone(), 0.5);
    let q90 = quantile(dists, 0.9);
    assert!(median < 0.006, "median {median} m");
    assert!(q90 < 0.02, "90th percentile {q90} m");
}

/// For each scan point: the distance to the nearest reference point and to the tangent plane
/// there, the reference moved by `pose`; and the scan point itself.
fn scan_to_reference(
    reference: &Cloud,
    scan: &Cloud,
    pose: &[[f64; 4]; 4],
) -> Vec<(f64, f64, [f64; 3])> {
    let moved: Vec<[f64; 3]> = (0..reference.len())
        .map(|i| apply(pose, reference.global(i)))
        .collect();
    let moved32: Vec<[f32; 3]> = moved.iter().map(|p| p.map(|v| v as f32)).collect();
    let normals = reference.normals.as_ref().expect("reference normals");
    let index = KdIndex::new(&moved32).unwrap();
    (0..scan.len())
        .map(|i| {
            let g = scan.global(i);
            let (j, d2) = index.nearest_one(g.map(|v| v as f32));
            let n = normals[j];
            let rn: [f64; 3] =
                std::array::from_fn(|r| (0..3).map(|c| pose[r][c] * n[c] as f64).sum());
            let plane = (0..3)
                .map(|k| (g[k] - moved[j][k]) * rn[k])
                .sum::<f64>()
                .abs();
            ((d2 as f64).sqrt(), plane, g)
        })
        .collect()
}

#[test]
fn part_scans_lie_on_their_posed_references() {
    let t = truth();
    for part in t["parts"].as_array().unwrap() {
        let name = part["name"].as_str().unwrap();
        let reference = read(part["reference_file"].as_str().unwrap());
        let scan = read(part["scan_file"].as_str().unwrap());
        assert_eq!(
            reference.len() as u64,
            part["reference_points"].as_u64().unwrap()
        );
        assert_eq!(scan.len() as u64, part["scan_points"].as_u64().unwrap());
        let normals = reference.normals.as_ref().expect("reference normals");
        assert!(normals.iter().all(|n| {
            let l = (n[0] * n[0] + n[1] * n[1] + n[2] * n[2]).sqrt();
            (l - 1.0).abs() < 1e-4
        }));
        let pose = matrix(&part["pose"]["matrix"]);
        let d: Vec<f64> = scan_to_reference(&reference, &scan, &pose)
            .into_iter()
            .map(|(_, plane, _)| plane)
            .collect();
        // Noise is 0.03 mm along the viewing ray; edges and the spacing of the reference add a
        // little.
        let median = quantile(d.clone(), 0.5);
        let q95 = quantile(d, 0.95);
        assert!(median < 0.05, "{name}: median {median} mm");
        assert!(q95 < 0.2, "{name}: 95th percentile {q95} mm");
    }
}

#[test]
fn defective_flange_differs_only_at_the_defect() {
    let t = truth();
    let defect = &t["defect"];
    let part = t["parts"]
        .as_array()
        .unwrap()
        .iter()
        .find(|p| p["name"] == defect["part"])
        .unwrap();
    let reference = read(part["reference_file"].as_str().unwrap());
    let pose = matrix(&defect["pose"]["matrix"]);
    let at: Vec<f64> = defect["location_in_scan"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_f64().unwrap())
        .collect();
    let far = |rel: &str| -> Vec<[f64; 3]> {
        scan_to_reference(&reference, &read(rel), &pose)
            .into_iter()
            .filter(|(d, _, _)| *d > 1.5)
            .map(|(_, _, g)| g)
            .collect()
    };
    assert!(far(part["scan_file"].as_str().unwrap()).is_empty());
    let bad = far(defect["file"].as_str().unwrap());
    assert!(
        bad.len() > 100,
        "{} points off the intact surface",
        bad.len()
    );
    for g in bad {
        let r = ((g[0] - at[0]).powi(2) + (g[1] - at[1]).powi(2) + (g[2] - at[2]).powi(2)).sqrt();
        assert!(r < 7.0, "a point {r} mm from the defect is off the surface");
    }
}
