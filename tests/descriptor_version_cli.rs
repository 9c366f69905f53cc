//! `--descriptor-version` on `features` and `align`: version 2 by default, version 1 on request
//! (recorded in the sidecar's recipe), an unknown version refused with exit code 2.

use std::path::Path;
use std::process::{Command, Output};

use equiscan::Cloud;
use equiscan::io::write_ply;

fn equiscan(args: &[&str], dir: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .args(args)
        .current_dir(dir)
        .output()
        .expect("run equiscan")
}

/// A seeded cloud: 400 points on a unit sphere.
fn sphere(dir: &Path) {
    let mut rng = equiscan::so3::rng::SplitMix64::new(3);
    let pts: Vec<[f64; 3]> = (0..400).map(|_| rng.unit_vector()).collect();
    write_ply(&dir.join("s.ply"), &Cloud::from_global(&pts), &[]).unwrap();
}

fn sidecar_version(dir: &Path, name: &str) -> serde_json::Value {
    let side: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join(name)).unwrap()).unwrap();
    side["metadata"]["recipe"]["version"].clone()
}

#[test]
fn features_computes_both_versions_and_records_which() {
    let dir = tempfile::tempdir().unwrap();
    sphere(dir.path());
    let run = |extra: &[&str], out: &str| {
        let mut args = vec!["features", "s.ply", "-o", out, "--radius", "0.5", "--quiet"];
        args.extend_from_slice(extra);
        let o = equiscan(&args, dir.path());
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    };
    run(&[], "v2.npy");
    run(&["--descriptor-version", "1"], "v1.npy");
    run(&["--descriptor-version", "2"], "v2b.npy");
    assert_eq!(sidecar_version(dir.path(), "v2.npy.json"), 2);
    assert_eq!(sidecar_version(dir.path(), "v1.npy.json"), 1);
    let read = |n: &str| std::fs::read(dir.path().join(n)).unwrap();
    assert_eq!(read("v2.npy"), read("v2b.npy"));
    // Same columns, different values (degrees l ≥ 1 fade at the centre in version 2).
    assert_eq!(read("v1.npy").len(), read("v2.npy").len());
    assert_ne!(read("v1.npy"), read("v2.npy"));
}

#[test]
fn an_unknown_version_is_refused_with_exit_code_2() {
    let dir = tempfile::tempdir().unwrap();
    sphere(dir.path());
    for args in [
        &[
            "features",
            "s.ply",
            "-o",
            "f.npy",
            "--radius",
            "0.5",
            "--descriptor-version",
            "3",
        ][..],
        &["align", "s.ply", "s.ply", "--descriptor-version", "0"][..],
    ] {
        let o = equiscan(args, dir.path());
        assert_eq!(o.status.code(), Some(2), "{args:?}");
        let err = String::from_utf8_lossy(&o.stderr);
        assert!(err.contains("version") && err.contains("; "), "{err}");
        assert!(!dir.path().join("f.npy").exists());
    }
}
