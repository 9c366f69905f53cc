//! `equiscan apply`: files moved by a transform and back land within the LAS scale of the
//! original, point for point, in every point format 0–10, with every other byte of every record
//! (every field, the Extra Bytes) and the CRS kept; several scans each by their own pose;
//! refusals in one line with exit 2. Files are written by the `las` crate's own writer (an
//! independent encoder) and read back with it.

// Coordinates are indexed by axis, as the formulas write them.
#![allow(clippy::needless_range_loop)]

use std::io::Cursor;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use las::point::Format;
use las::{Builder, Point, Transform, Vector, Vlr, Writer};

#[path = "support/las_all_fields.rs"]
#[allow(dead_code)]
mod las_all_fields;
use las_all_fields::{extra_bytes_vlr, write_format};

fn equiscan(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .args(args)
        .output()
        .unwrap()
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// Raw records and header of a LAS/LAZ file, read by the `las` crate.
fn records(path: &Path) -> (las::Header, Vec<Vec<u8>>, Vec<[f64; 3]>) {
    let mut r = las::Reader::from_path(path).unwrap();
    let header = r.header().clone();
    let pd = r.read_all().unwrap();
    let len = header.point_format().len() as usize;
    let raw: Vec<Vec<u8>> = pd
        .raw_bytes()
        .chunks_exact(len)
        .map(|c| c.to_vec())
        .collect();
    let xyz = pd
        .x()
        .zip(pd.y())
        .zip(pd.z())
        .map(|((x, y), z)| [x, y, z])
        .collect();
    (header, raw, xyz)
}

/// A turn of 33° about a tilted axis and a shift of kilometres, row by row.
fn matrix() -> (String, nalgebra::Matrix3<f64>) {
    let axis = nalgebra::Unit::new_normalize(nalgebra::Vector3::new(0.3, -0.5, 0.8));
    let r = nalgebra::Rotation3::from_axis_angle(&axis, 33f64.to_radians());
    let m = r.matrix();
    let t = [1234.5678, -2345.25, 17.125];
    let mut text = String::new();
    for i in 0..3 {
        text += &format!("{} {} {} {}  ", m[(i, 0)], m[(i, 1)], m[(i, 2)], t[i]);
    }
    text += "0 0 0 1";
    (text, *m)
}

/// Every point format 0–10: moved by a rigid transform and back, each coordinate is within one
/// scale step of the original (each leg rounds by at most half a step); every other byte of
/// every record is the same (every field and the Extra Bytes), the waveform direction turned
/// and back; the WKT CRS and the Extra Bytes description are kept; the moved file holds the
/// transform's image of each point within half a step.
#[test]
fn moved_and_back_within_the_scale_in_every_point_format() {
    let dir = tempfile::tempdir().unwrap();
    let (m, rot) = matrix();
    for f in 0..=10u8 {
        let src = dir.path().join(format!("f{f}.las"));
        write_format(&src, f, 400);
        let ext = if f % 2 == 0 { "laz" } else { "las" };
        let moved = dir.path().join(format!("f{f}_moved.{ext}"));
        let back = dir.path().join(format!("f{f}_back.las"));
        let out = equiscan(&["apply", s(&src), "-t", &m, "-o", s(&moved)]);
        assert_eq!(out.status.code(), Some(0), "{f}: {:?}", out);
        let out = equiscan(&["apply", s(&moved), "-t", &m, "--inverse", "-o", s(&back)]);
        assert_eq!(out.status.code(), Some(0), "{f}: {:?}", out);

        let (h0, raw0, xyz0) = records(&src);
        let (hm, _, xyzm) = records(&moved);
        let (h1, raw1, xyz1) = records(&back);
        assert_eq!(raw0.len(), raw1.len());
        assert_eq!(h1.point_format(), h0.point_format(), "format {f}");
        for h in [&hm, &h1] {
            assert_eq!(
                h.get_wkt_crs_bytes().map(|b| b.to_vec()),
                h0.get_wkt_crs_bytes().map(|b| b.to_vec())
            );
            assert!(h.has_wkt_crs());
            let eb: Vec<&Vlr> = h
                .all_vlrs()
                .filter(|v| v.user_id == "LASF_Spec" && v.record_id == 4)
                .collect();
            assert_eq!(eb.len(), 1);
            assert_eq!(eb[0].data, extra_bytes_vlr().data);
            assert!(
                h.all_vlrs()
                    .any(|v| v.user_id == "equiscan" && v.record_id == 1002)
            );
        }
        let scale = 0.001;
        let t = [1234.5678, -2345.25, 17.125];
        let mut worst_back = 0.0f64;
        for i in 0..raw0.len() {
            let p = nalgebra::Vector3::from(xyz0[i]);
            let q = rot * p + nalgebra::Vector3::from(t);
            for k in 0..3 {
                assert!(
                    (xyzm[i][k] - q[k]).abs() <= 0.5 * scale + 1e-9,
                    "{f} moved {i}"
                );
                let d = (xyz1[i][k] - xyz0[i][k]).abs();
                worst_back = worst_back.max(d);
                assert!(d <= scale + 1e-9, "format {f} point {i} axis {k}: {d}");
            }
            let wave = match f {
                4 => Some(45),
                5 => Some(51),
                9 => Some(47),
                10 => Some(55),
                _ => None,
            };
            let (a, b) = (&raw0[i][12..], &raw1[i][12..]);
            match wave {
                None => assert_eq!(a, b, "format {f} point {i}: a field changed"),
                Some(o) => {
                    // Bytes before and after the direction are the same; the direction
                    // comes back within f32 rounding.
                    // `a` and `b` start at byte 12 of the record.
                    let d = o - 12;
                    assert_eq!(&a[..d], &b[..d], "format {f} point {i}");
                    assert_eq!(&a[d + 12..], &b[d + 12..], "format {f} point {i}");
                    for k in 0..3 {
                        let v = |r: &[u8]| {
                            f32::from_le_bytes(r[d + 4 * k..d + 4 * k + 4].try_into().unwrap())
                        };
                        assert!((v(a) - v(b)).abs() < 1e-6, "format {f} point {i} waveform");
                    }
                }
            }
        }
        assert!(worst_back <= scale + 1e-9, "format {f}: {worst_back}");
    }
}

/// An E57 scan into LAS: its WKT CRS becomes the LAS WKT record; a PLY with normals turns them.
#[test]
fn e57_into_las_keeps_the_crs_and_ply_normals_turn() {
    let dir = tempfile::tempdir().unwrap();
    let e57 = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/e57/two_scans.e57");
    let input = format!("{}#north station", e57.display());
    let out = dir.path().join("north.las");
    let o = equiscan(&[
        "apply",
        &input,
        "-t",
        "1 0 0 -512000  0 1 0 -5403000  0 0 1 0  0 0 0 1",
        "-o",
        s(&out),
    ]);
    assert_eq!(o.status.code(), Some(0), "{o:?}");
    let (h, _, xyz) = records(&out);
    let wkt = String::from_utf8_lossy(h.get_wkt_crs_bytes().unwrap()).to_string();
    assert!(wkt.contains("ETRS89 / UTM zone 32N"), "{wkt}");
    let (cloud, _) = equiscan::io::read_cloud(Path::new(&input)).unwrap();
    assert_eq!(xyz.len(), cloud.len());
    for (i, p) in xyz.iter().enumerate() {
        let g = cloud.global(i);
        assert!((p[0] - (g[0] - 512_000.0)).abs() <= 0.0005 + 1e-6);
        assert!((p[1] - (g[1] - 5_403_000.0)).abs() <= 0.0005 + 1e-6);
    }

    // A PLY with normals, a quarter turn about z: normals turn with it.
    let mut c = equiscan::Cloud::new([10.0, 0.0, 0.0], vec![[1.0, 0.0, 0.0], [0.0, 2.0, 0.0]]);
    c.normals = Some(vec![[1.0, 0.0, 0.0], [0.0, 1.0, 0.0]]);
    let ply = dir.path().join("n.ply");
    equiscan::io::write_ply(&ply, &c, &[]).unwrap();
    let moved = dir.path().join("n_moved.ply");
    let o = equiscan(&[
        "apply",
        s(&ply),
        "-t",
        "0 -1 0 0  1 0 0 0  0 0 1 0  0 0 0 1",
        "-o",
        s(&moved),
    ]);
    assert_eq!(o.status.code(), Some(0), "{o:?}");
    let (m, _) = equiscan::io::read_cloud(&moved).unwrap();
    let n = m.normals.clone().unwrap();
    assert!(
        (n[0][1] - 1.0).abs() < 1e-6 && n[0][0].abs() < 1e-6,
        "{n:?}"
    );
    assert!((n[1][0] + 1.0).abs() < 1e-6, "{n:?}");
    let g = m.global(0);
    assert!(
        (g[0] - 0.0).abs() < 1e-5 && (g[1] - 11.0).abs() < 1e-5,
        "{g:?}"
    );
}

/// A report of several scans places each file by its own pose, found by file name; a pair
/// report whose verdict is not confident is refused unless --anyway.
#[test]
fn reports_place_each_scan_and_unconfident_verdicts_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let a = dir.path().join("a.las");
    let b = dir.path().join("b.las");
    write_format(&a, 1, 50);
    write_format(&b, 6, 50);
    let report = dir.path().join("multi.json");
    std::fs::write(
        &report,
        r#"{"verdict":"confident","poses":[
            {"file":"elsewhere/a.las","transform":[[1,0,0,0],[0,1,0,0],[0,0,1,0],[0,0,0,1]]},
            {"file":"elsewhere/b.las","transform":[[1,0,0,5],[0,1,0,-7],[0,0,1,2],[0,0,0,1]]}]}"#,
    )
    .unwrap();
    let outdir = dir.path().join("out");
    std::fs::create_dir(&outdir).unwrap();
    let o = equiscan(&[
        "apply",
        s(&a),
        s(&b),
        "-t",
        s(&report),
        "-o",
        s(&outdir),
        "--json",
    ]);
    assert_eq!(o.status.code(), Some(0), "{o:?}");
    let (_, _, xa) = records(&a);
    let (_, _, xb) = records(&b);
    let (_, _, ma) = records(&outdir.join("a.las"));
    let (_, _, mb) = records(&outdir.join("b.las"));
    for i in 0..xa.len() {
        for k in 0..3 {
            assert!((ma[i][k] - xa[i][k]).abs() < 1e-9);
            let shift = [5.0, -7.0, 2.0][k];
            assert!((mb[i][k] - (xb[i][k] + shift)).abs() < 1e-6);
        }
    }
    let stdout = String::from_utf8(o.stdout).unwrap();
    assert_eq!(stdout.lines().count(), 2, "{stdout}");

    let pair = dir.path().join("pair.json");
    std::fs::write(
        &pair,
        r#"{"verdict":"not_found","transform":[[1,0,0,1],[0,1,0,0],[0,0,1,0],[0,0,0,1]]}"#,
    )
    .unwrap();
    let out = dir.path().join("p.las");
    let o = equiscan(&["apply", s(&a), "-t", s(&pair), "-o", s(&out)]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8(o.stderr).unwrap();
    assert!(
        err.contains("verdict is not_found") && err.contains("--anyway"),
        "{err}"
    );
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(!out.exists());
    let o = equiscan(&[
        "apply",
        s(&a),
        "-t",
        s(&pair),
        "-o",
        s(&out),
        "--anyway",
        "-q",
    ]);
    assert_eq!(o.status.code(), Some(0), "{o:?}");
    assert!(out.exists());
}

/// Wrong arguments and a span the scale cannot hold: one line, exit 2, nothing written.
#[test]
fn refusals_are_one_line() {
    let dir = tempfile::tempdir().unwrap();
    let a = dir.path().join("a.las");
    write_format(&a, 0, 20);
    let out = dir.path().join("o.las");
    let cases: Vec<(Vec<String>, &str)> = vec![
        (vec!["1 0 0".into()], "has 3 numbers, a 4×4 needs 16"),
        (
            vec!["no_such_report.json".into()],
            "neither a report file nor 16 numbers",
        ),
        (
            vec!["2 0 0 0 0 1 0 0 0 0 1 0 0 0 0 1".into()],
            "not a rigid transform",
        ),
        (
            vec![
                "1 0 0 0 0 1 0 0 0 0 1 0 0 0 0 1".into(),
                "-o".into(),
                s(&a).into(),
            ],
            "is the same file as the input",
        ),
    ];
    for (extra, want) in cases {
        let mut args: Vec<String> = vec!["apply".into(), s(&a).into(), "-t".into()];
        args.extend(extra.iter().cloned());
        if !extra.iter().any(|e| e == "-o") {
            args.extend(["-o".to_string(), s(&out).to_string()]);
        }
        let refs: Vec<&str> = args.iter().map(String::as_str).collect();
        let o = equiscan(&refs);
        let err = String::from_utf8(o.stderr).unwrap();
        assert_eq!(o.status.code(), Some(2), "{want}: {err}");
        assert!(
            err.contains(want) && err.lines().count() == 1,
            "{want}: {err}"
        );
        assert!(!out.exists());
    }

    // 4 000 km along x and y at scale 0.001 fits (±2 147 km about the centre); turned by 45°
    // about z the x span becomes 5 657 km, which does not.
    let wide = dir.path().join("wide.las");
    let mut b = Builder::from((1, 4));
    b.point_format = Format::new(0).unwrap();
    b.transforms = Vector {
        x: Transform {
            scale: 0.001,
            offset: 0.0,
        },
        y: Transform {
            scale: 0.001,
            offset: 0.0,
        },
        z: Transform {
            scale: 0.001,
            offset: 0.0,
        },
    };
    let mut w = Writer::new(Cursor::new(Vec::new()), b.into_header().unwrap()).unwrap();
    for (x, y) in [(-2.0e6, -2.0e6), (2.0e6, 2.0e6), (0.0, 0.0)] {
        w.write_point(Point {
            x,
            y,
            z: 0.0,
            ..Default::default()
        })
        .unwrap();
    }
    std::fs::write(&wide, w.into_inner().unwrap().into_inner()).unwrap();
    let c = std::f64::consts::FRAC_1_SQRT_2;
    let m = format!("{c} {} 0 0  {c} {c} 0 0  0 0 1 0  0 0 0 1", -c);
    let o = equiscan(&["apply", s(&wide), "-t", &m, "-o", s(&out)]);
    let err = String::from_utf8(o.stderr).unwrap();
    assert_eq!(o.status.code(), Some(2), "{err}");
    assert!(
        err.contains("more than 32-bit integers hold at the input's scale 0.001")
            && err.lines().count() == 1,
        "{err}"
    );
    assert!(!out.exists());
    let leftovers: Vec<PathBuf> = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.to_string_lossy().contains("equiscan-tmp"))
        .collect();
    assert!(leftovers.is_empty(), "{leftovers:?}");
}
