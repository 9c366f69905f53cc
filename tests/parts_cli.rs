//! `catalogue`, `identify` and `inspect` end to end: the demo tray (scans/parts, synthetic),
//! the JSON fields the issue fixes, exit codes, and bad input (one-line errors, exit 2,
//! nothing written).

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_equiscan"))
}

fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

fn run(args: &[&str]) -> Output {
    bin().args(args).output().unwrap()
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

fn one_line_error(o: &Output, want: &str) {
    assert_eq!(o.status.code(), Some(2), "{}", stderr(o));
    let e = stderr(o);
    assert_eq!(e.trim_end().lines().count(), 1, "{e}");
    assert!(e.contains(want), "{e}");
    assert!(e.contains("; "), "no fix in: {e}");
}

fn files_in(dir: &Path) -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .collect();
    v.sort();
    v
}

fn demo_catalogue(dir: &Path) -> Option<PathBuf> {
    let refs = root().join("scans/parts/reference");
    if !refs.exists() {
        eprintln!("scans/ not present: skipped");
        return None;
    }
    let cat = dir.join("parts.eqcat");
    let o = run(&[
        "catalogue",
        "build",
        refs.to_str().unwrap(),
        "-o",
        cat.to_str().unwrap(),
        "-q",
    ]);
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    Some(cat)
}

#[test]
fn demo_tray_end_to_end() {
    let dir = tempfile::tempdir().unwrap();
    let Some(cat) = demo_catalogue(dir.path()) else {
        return;
    };
    let show = run(&["catalogue", "show", cat.to_str().unwrap(), "--json"]);
    assert_eq!(show.status.code(), Some(0));
    let h: serde_json::Value = serde_json::from_slice(&show.stdout).unwrap();
    assert_eq!(h["version"], 1);
    assert_eq!(h["parts"].as_array().unwrap().len(), 5);

    let tray = root().join("scans/parts/tray");
    let scans = ["flange_defect_scan.ply", "elbow_scan.ply"];
    let mut args: Vec<String> = vec!["identify".into()];
    args.extend(scans.iter().map(|s| tray.join(s).display().to_string()));
    args.extend([
        "--catalogue".into(),
        cat.display().to_string(),
        "--json".into(),
    ]);
    let o = bin().args(&args).output().unwrap();
    let lines: Vec<serde_json::Value> = String::from_utf8_lossy(&o.stdout)
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    assert_eq!(lines.len(), 2);
    for (l, want) in lines.iter().zip(["flange", "elbow"]) {
        for key in [
            "scan",
            "part",
            "verdict",
            "confidence",
            "transform",
            "ranking",
            "pose_verdict",
        ] {
            assert!(l.get(key).is_some(), "{key} missing in {l}");
        }
        assert_eq!(l["part"], want);
        assert_eq!(l["verdict"], "identified");
        assert_eq!(l["ranking"][0]["part"], want);
        let t: [[f64; 4]; 4] = serde_json::from_value(l["transform"].clone()).unwrap();
        assert_eq!(t[3], [0.0, 0.0, 0.0, 1.0]);
    }
    // The flange is 6-fold symmetric: identified, its pose ambiguous.
    assert_eq!(lines[0]["pose_verdict"], "ambiguous");
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));

    // Inspect the defective flange against its catalogue part: exit 1, the cluster, the
    // caution in the report and on stdout.
    let out = dir.path().join("defect.ply");
    let png = dir.path().join("defect.png");
    let rep = dir.path().join("defect.json");
    let o = run(&[
        "inspect",
        tray.join("flange_defect_scan.ply").to_str().unwrap(),
        "--part",
        "flange",
        "--catalogue",
        cat.to_str().unwrap(),
        "--tolerance-class",
        "m",
        "-o",
        out.to_str().unwrap(),
        "--picture",
        png.to_str().unwrap(),
        "--report",
        rep.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
    assert!(String::from_utf8_lossy(&o.stdout).contains("calibrated equipment"));
    let r: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&rep).unwrap()).unwrap();
    assert_eq!(r["outcome"], "outside_tolerance");
    assert!(
        r["caution"]
            .as_str()
            .unwrap()
            .contains("calibrated equipment")
    );
    assert!(!r["clusters"].as_array().unwrap().is_empty());
    // The output keeps the scan's points in input order and own coordinates.
    let (a, _) = equiscan::io::read_cloud(&tray.join("flange_defect_scan.ply")).unwrap();
    let (b, _) = equiscan::io::read_cloud(&out).unwrap();
    assert_eq!(a.len(), b.len());
    for i in [0, a.len() / 2, a.len() - 1] {
        let (p, q) = (a.global(i), b.global(i));
        assert!((0..3).all(|k| (p[k] - q[k]).abs() < 1e-9));
    }
    assert!(std::fs::read(&png).unwrap().starts_with(b"\x89PNG"));
}

#[test]
fn bad_input_is_one_line_exit_2_nothing_written() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let cat = d.join("c.eqcat");
    // Empty catalogue folder.
    let empty = d.join("empty");
    std::fs::create_dir(&empty).unwrap();
    let o = run(&[
        "catalogue",
        "build",
        empty.to_str().unwrap(),
        "-o",
        cat.to_str().unwrap(),
    ]);
    one_line_error(&o, "holds no part");
    assert!(!cat.exists());
    // A folder with a file that is no point cloud or mesh.
    let parts = d.join("parts");
    std::fs::create_dir_all(parts.join("plate")).unwrap();
    std::fs::write(parts.join("plate/notes.txt"), "not a scan\n").unwrap();
    let o = run(&[
        "catalogue",
        "build",
        parts.to_str().unwrap(),
        "-o",
        cat.to_str().unwrap(),
    ]);
    one_line_error(&o, "notes.txt: is not a point cloud or mesh");
    assert!(!cat.exists());
    assert_eq!(files_in(d).len(), 2, "{:?}", files_in(d));
    // A catalogue of another version.
    let tri = root().join("tests/data/parts/annulus.ply");
    std::fs::remove_file(parts.join("plate/notes.txt")).unwrap();
    std::fs::copy(&tri, parts.join("plate/ring.ply")).unwrap();
    let o = run(&[
        "catalogue",
        "build",
        parts.to_str().unwrap(),
        "-o",
        cat.to_str().unwrap(),
        "-q",
    ]);
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    let mut bytes = std::fs::read(&cat).unwrap();
    bytes[8..12].copy_from_slice(&7u32.to_le_bytes());
    let old = d.join("old.eqcat");
    std::fs::write(&old, &bytes).unwrap();
    let o = run(&["catalogue", "show", old.to_str().unwrap()]);
    one_line_error(&o, "format version 7");
    // A torn catalogue.
    let torn = d.join("torn.eqcat");
    std::fs::write(&torn, &std::fs::read(&cat).unwrap()[..200]).unwrap();
    let o = run(&["catalogue", "show", torn.to_str().unwrap()]);
    one_line_error(&o, "damaged");
    // A scan with no overlap: a scattered cloud against the ring; nothing written.
    let scatter = d.join("scatter.ply");
    let pts: Vec<[f64; 3]> = (0..400)
        .map(|i| {
            let t = i as f64;
            [
                (t * 7.31).sin() * 300.0,
                (t * 3.17).cos() * 250.0,
                (t * 1.93).sin() * 200.0,
            ]
        })
        .collect();
    equiscan::io::write_ply(&scatter, &equiscan::Cloud::from_global(&pts), &[]).unwrap();
    let out = d.join("dev.ply");
    let png = d.join("dev.png");
    let o = run(&[
        "inspect",
        scatter.to_str().unwrap(),
        "--reference",
        tri.to_str().unwrap(),
        "--tolerance",
        "0.1",
        "-o",
        out.to_str().unwrap(),
        "--picture",
        png.to_str().unwrap(),
    ]);
    one_line_error(&o, "does not fit the reference");
    assert!(!out.exists() && !png.exists());
}
