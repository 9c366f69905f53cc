//! `equiscan align` end to end: files in a temporary folder, the binary run, its exit code,
//! standard output, report, moved scan and picture checked.

mod common;

use std::path::Path;
use std::process::{Command, Output};

use common::{bunny, errors, problem};
use equiscan::Cloud;
use equiscan::io::{read_cloud, write_ply};

fn equiscan(args: &[&str], dir: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .args(args)
        .current_dir(dir)
        .output()
        .expect("the binary runs")
}

#[test]
fn two_scans_report_moved_scan_and_picture() {
    let dir = tempfile::tempdir().unwrap();
    let mesh = bunny();
    let p = problem(&mesh, 50.0, 6000, 0.003, 7);
    write_ply(&dir.path().join("source.ply"), &p.source, &[]).unwrap();
    write_ply(&dir.path().join("target.ply"), &p.target, &[]).unwrap();
    let out = equiscan(
        &[
            "align",
            "source.ply",
            "target.ply",
            "--json",
            "--report",
            "report.json",
            "--write",
            "moved.ply",
            "--picture",
            "views.png",
            "--seed",
            "3",
        ],
        dir.path(),
    );
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "stderr: {stderr}");
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["verdict"], "confident");
    assert!(
        v["caution"]
            .as_str()
            .unwrap()
            .contains("qualified surveyor")
    );
    let rows: [[f64; 4]; 4] = serde_json::from_value(v["transform"].clone()).unwrap();
    let found = equiscan::align::Rigid::from_rows(&rows).unwrap();
    let (rot, trans) = errors(&p.source, &found, &p.truth);
    assert!(rot <= 2.0 && trans <= 0.01 * p.diagonal, "{rot}° {trans}");
    // The report file holds the same JSON; the moved scan lies on the target.
    let file: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("report.json")).unwrap())
            .unwrap();
    assert_eq!(file["transform"], v["transform"]);
    let (moved, _) = read_cloud(&dir.path().join("moved.ply")).unwrap();
    assert_eq!(moved.len(), p.source.len());
    let identity = equiscan::align::Rigid::identity();
    let overlap = common::measured_overlap(&moved, &p.target, &identity);
    assert!(overlap > 0.5, "moved scan overlap {overlap}");
    let png = std::fs::read(dir.path().join("views.png")).unwrap();
    assert_eq!(&png[1..4], b"PNG");
    // Same seed, same result: the report's transform is reproduced bit for bit.
    let again = equiscan(
        &["align", "source.ply", "target.ply", "--json", "--seed", "3"],
        dir.path(),
    );
    let w: serde_json::Value = serde_json::from_slice(&again.stdout).unwrap();
    assert_eq!(w["transform"], v["transform"]);
}

#[test]
fn unrelated_scatter_has_no_confident_alignment() {
    // Two independent random scatters in a cube: no pose explains the matches.
    let dir = tempfile::tempdir().unwrap();
    let scatter = |seed: u64| -> Cloud {
        let mut rng = equiscan::so3::rng::SplitMix64::new(seed);
        let pts: Vec<[f64; 3]> = (0..4000)
            .map(|_| [rng.next_f64(), rng.next_f64(), rng.next_f64()])
            .collect();
        Cloud::from_global(&pts)
    };
    write_ply(&dir.path().join("a.ply"), &scatter(1), &[]).unwrap();
    write_ply(&dir.path().join("b.ply"), &scatter(2), &[]).unwrap();
    let out = equiscan(&["align", "a.ply", "b.ply", "--json"], dir.path());
    assert_eq!(
        out.status.code(),
        Some(1),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["verdict"], "not_found");
    assert!(v["reason"].is_string() && v["reason_text"].is_string());
}

#[test]
fn a_missing_file_is_an_error_with_exit_code_2() {
    let dir = tempfile::tempdir().unwrap();
    let out = equiscan(&["align", "nowhere.ply", "nothing.las"], dir.path());
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("nowhere.ply"), "{err}");
    assert!(out.stdout.is_empty());
}

#[test]
fn three_scans_share_the_first_frame_and_close_their_loop() {
    let dir = tempfile::tempdir().unwrap();
    let mesh = bunny();
    let scans = common::view_ring(&mesh, 3, 35.0, 5000, 0.003, 21);
    let names = ["s0.ply", "s1.ply", "s2.ply"];
    for ((cloud, _), name) in scans.iter().zip(names) {
        write_ply(&dir.path().join(name), cloud, &[]).unwrap();
    }
    let out = equiscan(
        &["align", names[0], names[1], names[2], "--json"],
        dir.path(),
    );
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "stderr: {stderr}");
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["pairs"].as_array().unwrap().len(), 3);
    let d = mesh.diagonal();
    for (k, (cloud, truth)) in scans.iter().enumerate() {
        let rows: [[f64; 4]; 4] =
            serde_json::from_value(v["poses"][k]["transform"].clone()).unwrap();
        let found = equiscan::align::Rigid::from_rows(&rows).unwrap();
        let (rot, trans) = errors(cloud, &found, truth);
        assert!(rot <= 2.0 && trans <= 0.01 * d, "scan {k}: {rot}° {trans}");
    }
    // Scans 0 and 2 are 70° apart: if that pair is confident too, it closes one loop.
    for l in v["loops"].as_array().unwrap() {
        assert!(l["rotation_deg"].as_f64().unwrap() < 1.0, "{l}");
        assert!(l["translation"].as_f64().unwrap() < 0.01 * d, "{l}");
    }
}
