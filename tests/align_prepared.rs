//! Prepared scans ([`equiscan::align::PreparedScan`]): registering two prepared scans gives the
//! very result of `align_pair` on their clouds (every figure, bit for bit, timings aside), also
//! after a round trip of both scans through serde_json; `align_many`, which prepares each
//! cloud once per voxel size, gives the pairwise `align_pair` results; scans prepared with
//! different settings, and damaged stored scans, are refused with messages that name the files.
//! Data: virtual scans of the Stanford bunny (tests/data/bunny, see tests/common).

mod common;

use common::{bunny, problem, view_ring};
use equiscan::Cloud;
use equiscan::align::prepared_scan::pair_voxel;
use equiscan::align::{
    AlignParams, Alignment, Method, PreparedScan, align_many, align_named, align_pair,
    align_prepared,
};

/// Everything of an alignment but its wall times, printed with shortest round-trip floats.
fn fingerprint(a: &Alignment) -> String {
    let mut a = a.clone();
    a.timings.clear();
    format!("{a:?}")
}

fn round_trip(scan: &PreparedScan) -> PreparedScan {
    let json = serde_json::to_string(scan).unwrap();
    serde_json::from_str(&json).unwrap()
}

#[test]
fn prepared_scans_give_the_pair_result_also_after_a_json_round_trip() {
    let mesh = bunny();
    let p = problem(&mesh, 50.0, 6000, 0.003, 7);
    for method in [Method::Equivariant, Method::Fpfh] {
        let params = AlignParams {
            method,
            ransac_iterations: 4000,
            ..AlignParams::default()
        };
        let direct = align_pair(&p.source, &p.target, &params).unwrap();
        let voxel = pair_voxel(&params, ("s.ply", &p.source), ("t.ply", &p.target)).unwrap();
        assert_eq!(voxel, direct.voxel);
        let s = PreparedScan::prepare("s.ply", &p.source, &params, voxel).unwrap();
        let t = PreparedScan::prepare("t.ply", &p.target, &params, voxel).unwrap();
        assert_eq!(s.name(), "s.ply");
        let prepared = align_prepared(&s, &t, &params).unwrap();
        assert_eq!(fingerprint(&prepared), fingerprint(&direct), "{method:?}");
        let (s2, t2) = (round_trip(&s), round_trip(&t));
        assert_eq!(s2.keypoints(), s.keypoints());
        assert_eq!(s2.descriptors(), s.descriptors());
        let again = align_prepared(&s2, &t2, &params).unwrap();
        assert_eq!(
            fingerprint(&again),
            fingerprint(&direct),
            "{method:?} after JSON"
        );
        // The timings start at matching: nothing was prepared here.
        assert_eq!(again.timings[0].stage, "matching");
    }
}

#[test]
fn align_many_gives_the_pairwise_results() {
    let mesh = bunny();
    let scans: Vec<Cloud> = view_ring(&mesh, 3, 35.0, 4000, 0.003, 21)
        .into_iter()
        .map(|(c, _)| c)
        .collect();
    let params = AlignParams::default();
    let multi = align_many(&scans, &params).unwrap();
    assert_eq!(multi.pairs.len(), 3);
    for pair in &multi.pairs {
        let direct = align_pair(&scans[pair.moving], &scans[pair.fixed], &params).unwrap();
        assert_eq!(
            fingerprint(&pair.alignment),
            fingerprint(&direct),
            "pair {} onto {}",
            pair.moving,
            pair.fixed
        );
    }
}

#[test]
fn scans_prepared_differently_are_refused_naming_both_files() {
    let mesh = bunny();
    let p = problem(&mesh, 50.0, 3000, 0.003, 3);
    let params = AlignParams::default();
    let voxel = pair_voxel(&params, ("a.ply", &p.source), ("b.ply", &p.target)).unwrap();
    let a = PreparedScan::prepare("a.ply", &p.source, &params, voxel).unwrap();
    let b = PreparedScan::prepare("b.ply", &p.target, &params, 1.5 * voxel).unwrap();
    let e = align_prepared(&a, &b, &params).unwrap_err().to_string();
    assert!(
        e.contains("a.ply") && e.contains("b.ply") && e.contains("voxel size"),
        "{e}"
    );
    let fpfh = AlignParams {
        method: Method::Fpfh,
        ..params
    };
    let c = PreparedScan::prepare("c.ply", &p.target, &fpfh, voxel).unwrap();
    let e = align_prepared(&a, &c, &params).unwrap_err().to_string();
    assert!(
        e.contains("a.ply") && e.contains("c.ply") && e.contains("fpfh"),
        "{e}"
    );
    // The run asks for another descriptor version than the scans were prepared with.
    let b = PreparedScan::prepare("b.ply", &p.target, &params, voxel).unwrap();
    let v2 = AlignParams {
        descriptor_version: 2,
        ..params
    };
    let e = align_prepared(&a, &b, &v2).unwrap_err().to_string();
    assert!(e.contains("version 1") && e.contains("version 2"), "{e}");
    // A third, innermost support radius (`Tuning::third_radius_share`) is part of the recipe.
    let mut three = params;
    three.tuning.third_radius_share = 0.25;
    let e = align_prepared(&a, &b, &three).unwrap_err().to_string();
    assert!(
        e.contains("2 support radii") && e.contains("3 support radii"),
        "{e}"
    );
    let c = PreparedScan::prepare("c.ply", &p.target, &three, voxel).unwrap();
    let radii = &c.settings().recipe.as_ref().unwrap().radii;
    assert_eq!(radii.len(), 3);
    assert!((radii[2] / radii[0] - 0.25).abs() < 1e-6, "{radii:?}");
    assert!(align_prepared(&a, &b, &params).is_ok());
}

/// A change made to a stored scan.
type Edit = fn(&mut serde_json::Value);

#[test]
fn damaged_stored_scans_are_refused_naming_the_scan() {
    let mesh = bunny();
    let p = problem(&mesh, 50.0, 3000, 0.003, 3);
    let params = AlignParams::default();
    let voxel = pair_voxel(&params, ("a.ply", &p.source), ("b.ply", &p.target)).unwrap();
    let a = PreparedScan::prepare("part_a.ply", &p.source, &params, voxel).unwrap();
    let good: serde_json::Value = serde_json::to_value(&a).unwrap();
    let edits: [(&str, Edit); 4] = [
        ("version", |v| v["format_version"] = 99.into()),
        ("short rows", |v| {
            v["descriptors"]["rows"].as_array_mut().unwrap().pop();
        }),
        ("normals missing", |v| {
            v["normals"].as_array_mut().unwrap().truncate(3);
        }),
        ("negative voxel", |v| v["voxel"] = (-1.0).into()),
    ];
    for (what, edit) in edits {
        let mut v = good.clone();
        edit(&mut v);
        let e = serde_json::from_value::<PreparedScan>(v)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("part_a.ply: stored prepared scan"),
            "{what}: {e}"
        );
    }
    assert!(serde_json::from_value::<PreparedScan>(good).is_ok());
}

#[test]
fn messages_name_the_file() {
    let mesh = bunny();
    let p = problem(&mesh, 50.0, 3000, 0.003, 3);
    let two = Cloud::new([0.0; 3], vec![[0.0, 0.0, 0.0], [0.0, 0.0, 0.0]]);
    let e = align_named(
        ("station_b.laz", &two),
        ("ref.ply", &p.target),
        &AlignParams::default(),
    )
    .unwrap_err()
    .to_string();
    assert!(
        e.starts_with("station_b.laz: fewer than two distinct points"),
        "{e}"
    );
    let params = AlignParams {
        voxel: Some(0.5 * p.diagonal),
        ..AlignParams::default()
    };
    let e = PreparedScan::prepare("coarse.ply", &p.target, &params, 0.5 * p.diagonal)
        .unwrap_err()
        .to_string();
    assert!(e.starts_with("coarse.ply: only"), "{e}");
}
