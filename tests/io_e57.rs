//! E57 input (ASTM E2807) against a file written by an independent library: pye57, the
//! Python bindings of the libE57Format reference implementation, run by
//! tools/fixtures/e57_fixtures.py, which also recorded what pye57 reads back
//! (tests/data/e57/two_scans.json). Then scan selection, the point source, and damaged files.

// Coordinates are indexed by axis, as the formulas write them.
#![allow(clippy::needless_range_loop)]

use std::path::{Path, PathBuf};
use std::process::Command;

use equiscan::io::{PointSource, read_cloud};
use serde_json::Value;

fn data(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/e57")
        .join(name)
}

fn reference() -> Value {
    serde_json::from_str(&std::fs::read_to_string(data("two_scans.json")).unwrap()).unwrap()
}

fn f(v: &Value) -> f64 {
    v.as_f64().unwrap()
}

fn with_sel(sel: &str) -> PathBuf {
    PathBuf::from(format!("{}#{sel}", data("two_scans.e57").display()))
}

/// Every valid point of both scans, in file order, in the file's frame (poses applied; the
/// second scan's spherical coordinates converted), with intensity and colour as pye57 reads
/// them; the two invalid points dropped.
#[test]
fn values_match_the_reference_library() {
    let r = reference();
    let (cloud, info) = read_cloud(&data("two_scans.e57")).unwrap();
    let scans = r["scans"].as_array().unwrap();
    let want: Vec<&Value> = scans
        .iter()
        .flat_map(|s| s["points"].as_array().unwrap())
        .collect();
    assert_eq!(cloud.len(), want.len());
    assert_eq!(cloud.len(), 41 + 29);
    assert_eq!(
        info.point_count,
        42 + 30,
        "declared, invalid points included"
    );
    let mut worst = 0.0f64;
    for (i, p) in want.iter().enumerate() {
        let g = cloud.global(i);
        for k in 0..3 {
            worst = worst.max((g[k] - f(&p[k])).abs());
        }
    }
    // f32 offsets within 20 m of the origin: steps of about 2e-6 m.
    assert!(worst < 1e-5, "largest coordinate difference {worst} m");
    let intensity = cloud.intensity.as_ref().unwrap();
    let want_i: Vec<f64> = scans
        .iter()
        .flat_map(|s| s["intensity"].as_array().unwrap().iter().map(f))
        .collect();
    for (a, b) in intensity.iter().zip(&want_i) {
        assert!((*a as f64 - b).abs() < 1e-6, "{a} vs {b}");
    }
    // 8-bit colour kept as stored; the second scan has none (0).
    let colour = cloud.color.as_ref().unwrap();
    let want_c = scans[0]["color"].as_array().unwrap();
    for (i, c) in want_c.iter().enumerate() {
        let c: Vec<u16> = c
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_u64().unwrap() as u16)
            .collect();
        assert_eq!(colour[i].to_vec(), c, "point {i}");
    }
    assert!(colour[41..].iter().all(|c| *c == [0, 0, 0]));
    assert_eq!(info.format, "E57");
    assert_eq!(info.crs.as_deref(), r["coordinate_metadata"].as_str());
    assert_eq!(info.viewpoint, None, "two scans: no single viewpoint");
}

/// `info` lists every scan with name, points, pose and scanner position, as pye57 reads them.
#[test]
fn scans_are_listed_with_pose_and_position() {
    let r = reference();
    let (_, info) = read_cloud(&data("two_scans.e57")).unwrap();
    assert_eq!(info.scans.len(), 2);
    for (s, want) in info.scans.iter().zip(r["scans"].as_array().unwrap()) {
        assert_eq!(s.name, want["name"].as_str().unwrap());
        assert_eq!(s.points, want["records"].as_u64().unwrap());
        assert!(s.selected && s.has_pose);
        let pos = want["scanner_position"].as_array().unwrap();
        for k in 0..3 {
            assert!((s.scanner_position[k] - f(&pos[k])).abs() < 1e-9);
            assert_eq!(s.pose[k][3], s.scanner_position[k]);
        }
        // The rotation block is the quaternion's matrix (unit quaternion w x y z; the usual
        // formula, from memory).
        let q: Vec<f64> = want["rotation_wxyz"]
            .as_array()
            .unwrap()
            .iter()
            .map(f)
            .collect();
        let (w, x, y, z) = (q[0], q[1], q[2], q[3]);
        let m = [
            [
                1.0 - 2.0 * (y * y + z * z),
                2.0 * (x * y - w * z),
                2.0 * (x * z + w * y),
            ],
            [
                2.0 * (x * y + w * z),
                1.0 - 2.0 * (x * x + z * z),
                2.0 * (y * z - w * x),
            ],
            [
                2.0 * (x * z - w * y),
                2.0 * (y * z + w * x),
                1.0 - 2.0 * (x * x + y * y),
            ],
        ];
        for i in 0..3 {
            for j in 0..3 {
                assert!((s.pose[i][j] - m[i][j]).abs() < 1e-12, "{i} {j}");
            }
        }
    }
    assert_eq!(info.scans[0].coordinates, "cartesian");
    assert_eq!(info.scans[1].coordinates, "spherical");
}

#[test]
fn one_scan_by_name_or_index_with_its_viewpoint() {
    let r = reference();
    let (all, _) = read_cloud(&data("two_scans.e57")).unwrap();
    for sel in ["south station", "1"] {
        let (c, info) = read_cloud(&with_sel(sel)).unwrap();
        assert_eq!(c.len(), 29, "{sel}");
        assert!(info.path.ends_with(&format!("#{sel}")));
        assert_eq!(info.point_count, 30);
        assert!(!info.scans[0].selected && info.scans[1].selected);
        let pos = r["scans"][1]["scanner_position"].as_array().unwrap();
        let v = info.viewpoint.unwrap();
        for k in 0..3 {
            assert_eq!(v[k], f(&pos[k]));
        }
        for i in 0..c.len() {
            let (a, b) = (c.global(i), all.global(41 + i));
            for k in 0..3 {
                assert!((a[k] - b[k]).abs() < 1e-5);
            }
        }
        // No colour in this scan.
        assert!(c.color.is_none());
    }
    let (c, info) = read_cloud(&with_sel("north station")).unwrap();
    assert_eq!((c.len(), info.viewpoint.is_some()), (41, true));
}

#[test]
fn selection_errors_are_one_line() {
    let e = read_cloud(&with_sel("7")).unwrap_err().to_string();
    assert!(
        e.contains("has no scan named or numbered \"7\"")
            && e.contains("0 \"north station\", 1 \"south station\"")
            && e.contains("index from 0 to 1")
            && !e.contains('\n'),
        "{e}"
    );
    let las = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/las/autzen.las");
    let e = read_cloud(&PathBuf::from(format!("{}#0", las.display())))
        .unwrap_err()
        .to_string();
    assert!(e.contains("only E57 files hold several scans"), "{e}");
}

#[test]
fn point_source_chunks_equal_read_cloud() {
    for path in [data("two_scans.e57"), with_sel("0")] {
        let (whole, info) = read_cloud(&path).unwrap();
        for chunk in [1usize, 7, 1000] {
            let mut src = PointSource::open(&path).unwrap();
            assert_eq!(src.info(), &info);
            let mut pos = Vec::new();
            let mut int = Vec::new();
            while let Some(c) = src.next_chunk(chunk).unwrap() {
                assert!(c.len() <= chunk);
                assert_eq!(c.origin, whole.origin);
                pos.extend(c.positions);
                int.extend(c.intensity.unwrap());
            }
            assert_eq!(pos, whole.positions);
            assert_eq!(Some(int), whole.intensity);
        }
    }
}

fn one_line_input_error(bytes: &[u8], what: &str) -> String {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("bad.e57");
    std::fs::write(&p, bytes).unwrap();
    let e = read_cloud(&p).expect_err(what);
    let msg = e.to_string();
    assert!(
        msg.starts_with(&format!("{}: ", p.display())) && !msg.contains('\n'),
        "{what}: {msg}"
    );
    assert_eq!(e.kind(), equiscan::error::Kind::Input, "{what}: {msg}");
    msg
}

/// Truncated files, a damaged page (its CRC no longer matches; pages are 1024 bytes with a
/// 4-byte CRC-32C at the end, ASTM E2807, from memory) and a missing XML section each give a
/// one-line input error naming the file.
#[test]
fn damaged_files_are_refused_in_one_line() {
    let good = std::fs::read(data("two_scans.e57")).unwrap();
    for cut in [10, 47, 48, 1000, 1024, good.len() / 2, good.len() - 1] {
        let m = one_line_input_error(&good[..cut], &format!("cut at {cut}"));
        if cut >= 48 {
            assert!(m.contains("truncated"), "cut {cut}: {m}");
        }
    }
    // A byte flipped inside every page in turn: the page's checksum fails (or, in the last
    // page, the XML no longer parses).
    for page in 0..good.len() / 1024 {
        let mut b = good.clone();
        b[page * 1024 + 500] ^= 0x5A;
        let m = one_line_input_error(&b, &format!("page {page} damaged"));
        assert!(
            m.contains(&format!("page {page} of the file is damaged")),
            "{m}"
        );
    }
    // The XML section moved outside the file.
    let mut b = good.clone();
    b[24..32].copy_from_slice(&(good.len() as u64 * 2).to_le_bytes());
    let m = one_line_input_error(&b, "XML outside");
    assert!(m.contains("XML section"), "{m}");
    // Version 2 is not read.
    let mut b = good.clone();
    b[8] = 2;
    let m = one_line_input_error(&b, "version 2");
    assert!(m.contains("E57 version 2"), "{m}");
}

/// Every single-bit flip at a stride through the file and every cut: no panic, and either a
/// cloud or a one-line error.
#[test]
fn flipped_bits_never_panic() {
    let good = std::fs::read(data("two_scans.e57")).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("x.e57");
    let mut refused = 0;
    for (n, at) in (0..good.len()).step_by(13).enumerate() {
        let mut b = good.clone();
        b[at] ^= 1 << (n % 8);
        std::fs::write(&p, &b).unwrap();
        match read_cloud(&p) {
            Ok((c, _)) => c.validate().unwrap(),
            Err(e) => {
                refused += 1;
                assert!(!e.to_string().contains('\n'), "{e}");
            }
        }
    }
    assert!(refused > 0);
}

#[test]
fn the_command_prints_one_line_and_exits_2() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("cut.e57");
    let good = std::fs::read(data("two_scans.e57")).unwrap();
    std::fs::write(&p, &good[..3000]).unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .args(["info"])
        .arg(&p)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8(out.stderr).unwrap();
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(err.contains("truncated"), "{err}");
    let out = Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .args(["info"])
        .arg(data("two_scans.e57"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(
        text.contains("0 \"north station\": 42 points, cartesian"),
        "{text}"
    );
    assert!(
        text.contains("scanner at 512352.750000 5403198.000000 46.500000"),
        "{text}"
    );
    assert!(
        text.contains("ETRS89 / UTM zone 32N (EPSG 25832)"),
        "{text}"
    );
}
