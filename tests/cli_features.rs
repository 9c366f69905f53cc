//! `equiscan features` end to end: run the built binary on small clouds in a temporary folder
//! and check the files, the sidecar, stdout, stderr and the exit code.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use equiscan::Cloud;
use equiscan::io::{Column, read_cloud, write_ply};

fn equiscan(args: &[&str], dir: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .args(args)
        .current_dir(dir)
        .output()
        .expect("run equiscan")
}

/// A seeded cloud: 600 points on a unit sphere and a plane below it, offset far from zero like
/// survey coordinates, written as PLY.
fn small_cloud(dir: &Path, name: &str, seed: u64) -> PathBuf {
    let mut rng = equiscan::so3::rng::SplitMix64::new(seed);
    let mut next = move || rng.next_f64();
    let mut pts = Vec::new();
    for _ in 0..300 {
        let (u, v) = (2.0 * next() - 1.0, std::f64::consts::TAU * next());
        let r = (1.0 - u * u).sqrt();
        pts.push([
            500_000.0 + r * v.cos(),
            4_000_000.0 + r * v.sin(),
            100.0 + u,
        ]);
        pts.push([
            500_000.0 + 4.0 * next() - 2.0,
            4_000_000.0 + 4.0 * next() - 2.0,
            98.5,
        ]);
    }
    let path = dir.join(name);
    write_ply(&path, &Cloud::from_global(&pts), &[]).unwrap();
    path
}

fn npy_shape(path: &Path) -> (usize, usize) {
    let bytes = std::fs::read(path).unwrap();
    assert_eq!(&bytes[..6], b"\x93NUMPY");
    let len = u16::from_le_bytes([bytes[8], bytes[9]]) as usize;
    let header = std::str::from_utf8(&bytes[10..10 + len]).unwrap();
    let shape = header.split("'shape': (").nth(1).unwrap();
    let shape = &shape[..shape.find(')').unwrap()];
    let v: Vec<usize> = shape
        .split(',')
        .filter_map(|t| t.trim().parse().ok())
        .collect();
    assert_eq!(bytes.len(), 10 + len + 4 * v[0] * v[1]);
    (v[0], v[1])
}

#[test]
fn npy_with_sidecar_and_suggested_radius() {
    let dir = tempfile::tempdir().unwrap();
    let input = small_cloud(dir.path(), "scan.ply", 1);
    let out = equiscan(&["features", "scan.ply", "-o", "f.npy"], dir.path());
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("support radius"), "{stderr}");
    let (rows, cols) = npy_shape(&dir.path().join("f.npy"));
    assert_eq!(rows, 600);
    // x/y/z local, count, flags, 30 norms, 105 power-spectrum values
    assert_eq!(cols, 3 + 2 + 30 + 105);
    let side: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("f.npy.json")).unwrap())
            .unwrap();
    assert_eq!(side["rows"], 600);
    assert_eq!(side["columns"].as_array().unwrap().len(), cols);
    assert!(side["columns"][3].as_str().unwrap().ends_with("_count"));
    let meta = &side["metadata"];
    assert_eq!(meta["recipe"]["version"], 2);
    assert_eq!(meta["recipe"]["degree"], 4);
    assert_eq!(meta["radius_suggested"], true);
    let (cloud, _) = read_cloud(&input).unwrap();
    assert_eq!(meta["origin"][0].as_f64().unwrap(), cloud.origin[0]);
    assert!(meta["counts"][0]["mean"].as_f64().unwrap() > 10.0);
}

#[test]
fn ply_csv_las_outputs_and_json_summary() {
    let dir = tempfile::tempdir().unwrap();
    small_cloud(dir.path(), "scan.ply", 2);
    let out = equiscan(
        &[
            "features", "scan.ply", "-o", "f.ply", "--radius", "0.5,1", "--json", "--degree", "2",
            "--shells", "3",
        ],
        dir.path(),
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let summary: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(summary["points"], 600);
    assert_eq!(summary["centres"], 600);
    assert_eq!(summary["radius_suggested"], false);
    // two scales × (count, flags, 3·3 norms, 6·3 power spectrum)
    assert_eq!(summary["columns"], 2 * (2 + 9 + 18));
    let header = std::fs::read(dir.path().join("f.ply")).unwrap();
    let header = String::from_utf8_lossy(&header[..2000]);
    assert!(
        header.contains("property float r0p5_norm_l0_n0"),
        "{header}"
    );
    assert!(header.contains("property float r1_ps_l2_n1_n2"), "{header}");

    let out = equiscan(
        &[
            "features", "scan.ply", "-o", "f.csv", "-r", "0.5", "--voxel", "0.5", "-q",
        ],
        dir.path(),
    );
    assert!(out.status.success());
    assert!(
        out.stderr.is_empty(),
        "--quiet printed {:?}",
        String::from_utf8_lossy(&out.stderr)
    );
    let csv = std::fs::read_to_string(dir.path().join("f.csv")).unwrap();
    let lines: Vec<&str> = csv.lines().collect();
    assert!(lines[0].starts_with("x_local,y_local,z_local,r0p5_count,r0p5_flags,"));
    assert!(
        lines.len() > 10 && lines.len() < 601,
        "{} voxel centres",
        lines.len() - 1
    );
    let side: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("f.csv.json")).unwrap())
            .unwrap();
    assert_eq!(side["metadata"]["centres"]["kind"], "voxel");
    assert_eq!(
        side["metadata"]["centre_indices"].as_array().unwrap().len(),
        lines.len() - 1
    );

    let out = equiscan(
        &["features", "scan.ply", "-o", "f.laz", "-r", "0.5"],
        dir.path(),
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let (back, info) = read_cloud(&dir.path().join("f.laz")).unwrap();
    assert_eq!(back.len(), 600);
    assert!(
        info.other_fields.iter().any(|f| f == "r0p5_norm_l4_n5"),
        "{:?}",
        info.other_fields
    );
}

#[test]
fn threads_do_not_change_the_bytes_and_folders_take_several_inputs() {
    let dir = tempfile::tempdir().unwrap();
    small_cloud(dir.path(), "a.ply", 3);
    small_cloud(dir.path(), "b.ply", 4);
    for t in ["1", "2"] {
        let out = equiscan(
            &[
                "features",
                "a.ply",
                "b.ply",
                "-o",
                &format!("out{t}"),
                "-r",
                "0.6",
                "--threads",
                t,
                "--invariants",
                "norms,power,bispectrum",
                "--keep-coefficients",
            ],
            dir.path(),
        );
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
    }
    for f in ["a.npy", "b.npy"] {
        let one = std::fs::read(dir.path().join("out1").join(f)).unwrap();
        let two = std::fs::read(dir.path().join("out2").join(f)).unwrap();
        assert!(one == two, "{f} differs between 1 and 2 threads");
    }
}

#[test]
fn keypoints_from_another_file_in_global_coordinates() {
    let dir = tempfile::tempdir().unwrap();
    let input = small_cloud(dir.path(), "scan.ply", 5);
    let (cloud, _) = read_cloud(&input).unwrap();
    // Three of the scan's own points and one 50 m away, in another file with another origin
    // (so their coordinates are rounded differently).
    let pick = [0usize, 7, 100];
    let mut kp: Vec<[f64; 3]> = pick.iter().map(|&i| cloud.global(i)).collect();
    let far = cloud.global(0);
    kp.push([far[0] + 50.0, far[1] - 20.0, far[2]]);
    let kp_path = dir.path().join("kp.ply");
    let kp_cloud = Cloud::from_global(&kp);
    let zeros = vec![0.0f32; kp.len()];
    write_ply(&kp_path, &kp_cloud, &[Column::new("score", &zeros)]).unwrap();
    let out = equiscan(
        &[
            "features",
            "scan.ply",
            "--keypoints",
            "kp.ply",
            "-o",
            "k.npy",
            "-r",
            "0.6",
        ],
        dir.path(),
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert_eq!(npy_shape(&dir.path().join("k.npy")).0, 4);
    let out = equiscan(
        &["features", "scan.ply", "-o", "all.npy", "-r", "0.6"],
        dir.path(),
    );
    assert!(out.status.success());
    // Rows of the keypoints that are scan points equal those rows of the full run; the far
    // one has no neighbour.
    let k = std::fs::read(dir.path().join("k.npy")).unwrap();
    let a = std::fs::read(dir.path().join("all.npy")).unwrap();
    let cols = 3 + 2 + 30 + 105;
    let row = |b: &[u8], i: usize| -> Vec<f32> {
        let data = &b[header_len(b)..];
        data[4 * cols * i..4 * cols * (i + 1)]
            .chunks_exact(4)
            .map(|c| f32::from_le_bytes(c.try_into().unwrap()))
            .collect()
    };
    for (r, &i) in pick.iter().enumerate() {
        assert_eq!(row(&k, r)[5..], row(&a, i)[5..], "keypoint {r} = point {i}");
    }
    assert_eq!(row(&k, 3)[3], 0.0, "far keypoint count");
}

fn header_len(b: &[u8]) -> usize {
    10 + u16::from_le_bytes([b[8], b[9]]) as usize
}

#[test]
fn bad_input_exits_2_with_one_line_and_no_output() {
    let dir = tempfile::tempdir().unwrap();
    small_cloud(dir.path(), "scan.ply", 6);
    let cases: &[(&[&str], &str)] = &[
        (
            &["features", "missing.ply", "-o", "x.npy"],
            "missing.ply: no such file",
        ),
        (
            &["features", "scan.ply", "-o", "x.npy", "--degree", "13"],
            "degree 13",
        ),
        (
            &["features", "scan.ply", "-o", "x.npy", "-r", "-1"],
            "support radius -1",
        ),
        (
            &[
                "features",
                "scan.ply",
                "-o",
                "x.npy",
                "--invariants",
                "shape",
            ],
            "unknown invariant",
        ),
        (&["features", "scan.ply", "-o", "x.txt"], "output format"),
        (
            &["features", "scan.ply", "-o", "x.npy", "--voxel", "0"],
            "--voxel",
        ),
    ];
    for (args, want) in cases {
        let out = equiscan(args, dir.path());
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {stderr}");
        assert!(stderr.contains(want), "{args:?}: {stderr}");
        assert_eq!(stderr.trim_end().lines().count(), 1, "{args:?}: {stderr}");
        assert!(!dir.path().join("x.npy").exists() && !dir.path().join("x.npy.json").exists());
    }
    // clap's own usage errors exit 2 too
    let out = equiscan(&["features", "scan.ply"], dir.path());
    assert_eq!(out.status.code(), Some(2));
}

fn one_line_error(out: &Output, want: &str) {
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains(want), "wanted {want:?} in {stderr}");
    assert_eq!(stderr.trim_end().lines().count(), 1, "{stderr}");
}

#[test]
fn outputs_never_replace_inputs() {
    let dir = tempfile::tempdir().unwrap();
    small_cloud(dir.path(), "a.ply", 11);
    std::fs::create_dir(dir.path().join("sub")).unwrap();
    let before = std::fs::read(dir.path().join("a.ply")).unwrap();
    let mut cases: Vec<Vec<&str>> = vec![
        vec!["features", "a.ply", "-o", "a.ply", "-r", "0.5"],
        vec!["features", "a.ply", "-o", "sub/../a.ply", "-r", "0.5"],
        vec![
            "features", "a.ply", "-o", ".", "--format", "ply", "-r", "0.5",
        ],
    ];
    #[cfg(unix)]
    {
        std::os::unix::fs::symlink(dir.path().join("a.ply"), dir.path().join("link.ply")).unwrap();
        cases.push(vec!["features", "a.ply", "-o", "link.ply", "-r", "0.5"]);
    }
    for args in &cases {
        let out = equiscan(args, dir.path());
        one_line_error(&out, "is the same file as the input");
        assert_eq!(
            std::fs::read(dir.path().join("a.ply")).unwrap(),
            before,
            "{args:?}"
        );
    }
    // Two LAZ tiles written into their own folder (the README's old example did this).
    for n in ["n1", "n2"] {
        let out = equiscan(
            &[
                "features",
                "a.ply",
                "-o",
                &format!("{n}.laz"),
                "-r",
                "0.5",
                "-q",
            ],
            dir.path(),
        );
        assert!(out.status.success());
    }
    let tiles = std::fs::read(dir.path().join("n1.laz")).unwrap();
    let out = equiscan(
        &[
            "features", "n1.laz", "n2.laz", "-o", ".", "--format", "laz", "-r", "0.5",
        ],
        dir.path(),
    );
    one_line_error(&out, "n1.laz: is the same file as the input n1.laz");
    assert_eq!(std::fs::read(dir.path().join("n1.laz")).unwrap(), tiles);
}

#[test]
fn output_folders_and_names_are_checked_before_reading() {
    let dir = tempfile::tempdir().unwrap();
    small_cloud(dir.path(), "a.ply", 12);
    small_cloud(dir.path(), "b.ply", 13);
    // A broken input: if it were read first, its error would be the one printed.
    std::fs::write(dir.path().join("broken.ply"), b"ply\nformat ascii 1.0\n").unwrap();
    let out = equiscan(
        &[
            "features",
            "broken.ply",
            "-o",
            "no/such/dir/x.npy",
            "-r",
            "1",
        ],
        dir.path(),
    );
    one_line_error(
        &out,
        "no/such/dir: the folder does not exist; create the folder first",
    );
    let out = equiscan(
        &["features", "a.ply", "b.ply", "-o", "no/such/dir", "-r", "1"],
        dir.path(),
    );
    one_line_error(&out, "no/such: the folder does not exist");
    let out = equiscan(
        &["features", "a.ply", "b.ply", "-o", "x.npy", "-r", "1"],
        dir.path(),
    );
    one_line_error(
        &out,
        "x.npy: names a file, but 2 inputs need an output folder",
    );
    assert!(!dir.path().join("x.npy").exists());
}

#[test]
fn npy_and_csv_of_one_name_keep_their_own_sidecars() {
    let dir = tempfile::tempdir().unwrap();
    small_cloud(dir.path(), "a.ply", 14);
    for (f, r) in [("x.npy", "0.5"), ("x.csv", "0.7")] {
        let out = equiscan(&["features", "a.ply", "-o", f, "-r", r], dir.path());
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert!(stderr.contains(&format!("wrote {f}\n")), "{stderr}");
        assert!(stderr.contains(&format!("wrote {f}.json\n")), "{stderr}");
    }
    for (f, r) in [("x.npy", 0.5), ("x.csv", 0.7)] {
        let side = dir.path().join(format!("{f}.json"));
        let doc = equiscan::descriptor::output::verify(&side).unwrap();
        assert_eq!(doc.file, f);
        assert_eq!(doc.metadata.recipe.radii(), [r as f32]);
    }
    assert!(!dir.path().join("x.json").exists());
}

#[test]
fn runaway_runs_are_refused_with_their_cost() {
    let dir = tempfile::tempdir().unwrap();
    small_cloud(dir.path(), "a.ply", 15);
    let out = equiscan(
        &[
            "features",
            "a.ply",
            "-o",
            "x.npy",
            "-r",
            "0.5",
            "--max-memory",
            "1K",
        ],
        dir.path(),
    );
    one_line_error(
        &out,
        "this run would need more memory than allowed (1.0 KiB): 600 centres × about",
    );
    assert!(String::from_utf8_lossy(&out.stderr).contains("--force"));
    assert!(!dir.path().join("x.npy").exists());
    // A radius larger than the cloud is a warning, and --force runs past the budget.
    let out = equiscan(
        &[
            "features",
            "a.ply",
            "-o",
            "x.npy",
            "-r",
            "1000",
            "--max-memory",
            "1K",
            "--force",
        ],
        dir.path(),
    );
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "{stderr}");
    assert!(
        stderr.contains("the support radius 1000 is larger than the whole cloud"),
        "{stderr}"
    );
    let out = equiscan(
        &[
            "features",
            "a.ply",
            "-o",
            "x.npy",
            "-r",
            "0.5",
            "--max-memory",
            "lots",
        ],
        dir.path(),
    );
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn too_many_columns_for_las_are_refused_with_advice() {
    let dir = tempfile::tempdir().unwrap();
    small_cloud(dir.path(), "a.ply", 16);
    // L = 8, N = 8: 72 norms + 324 power-spectrum values + count + flags = 398 > 341.
    let out = equiscan(
        &[
            "features", "a.ply", "-o", "x.las", "-r", "0.5", "--degree", "8", "--shells", "8",
        ],
        dir.path(),
    );
    one_line_error(&out, "398 feature columns are more than the 341");
    assert!(String::from_utf8_lossy(&out.stderr).contains("write NPY or CSV"));
    assert!(!dir.path().join("x.las").exists());
}

#[test]
fn messages_count_in_words() {
    let dir = tempfile::tempdir().unwrap();
    let input = small_cloud(dir.path(), "a.ply", 17);
    let (cloud, _) = read_cloud(&input).unwrap();
    let kp = Cloud::from_global(&[cloud.global(3)]);
    write_ply(&dir.path().join("kp.ply"), &kp, &[]).unwrap();
    let out = equiscan(
        &[
            "features",
            "a.ply",
            "--keypoints",
            "kp.ply",
            "-o",
            "k.csv",
            "-r",
            "0.5",
        ],
        dir.path(),
    );
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "{stderr}");
    assert!(
        stderr.contains("a.ply: 1 centre of 600 points, 140 columns"),
        "{stderr}"
    );
    assert!(
        !stderr.contains("NaN") && !stderr.contains("-0.0"),
        "{stderr}"
    );
}

#[test]
fn las_column_limit_matches_laspy() {
    // laspy 2.7.0 writes and reads back at most 341 float32 extra dimensions and refuses 342
    // (tests/data/las/extra_bytes_limit_laspy.json, made by
    // tools/fixtures/las_extra_bytes_limit.py): the Extra Bytes VLR's u16 length holds 341
    // descriptions of 192 bytes (LAS 1.4 R15).
    let fixture: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string("tests/data/las/extra_bytes_limit_laspy.json").unwrap(),
    )
    .unwrap();
    let laspy_max = fixture["largest_float32_extra_dims_round_trip"]
        .as_u64()
        .unwrap() as usize;
    assert_eq!(equiscan::io::MAX_LAS_COLUMNS, laspy_max);
    let dir = tempfile::tempdir().unwrap();
    let cloud = Cloud::from_global(&[[1.0, 2.0, 3.0], [4.0, 5.0, 6.0]]);
    let names: Vec<String> = (0..=laspy_max).map(|i| format!("c{i}")).collect();
    let values = [0.5f32, -1.5];
    let cols: Vec<Column<'_>> = names.iter().map(|n| Column::new(n, &values)).collect();
    let path = dir.path().join("eb.las");
    let err = equiscan::io::write_las(&path, &cloud, &cols)
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("342 feature columns are more than the 341"),
        "{err}"
    );
    equiscan::io::write_las(&path, &cloud, &cols[..laspy_max]).unwrap();
    let (_, info) = read_cloud(&path).unwrap();
    assert_eq!(info.other_fields.len(), laspy_max);
    assert_eq!(info.other_fields[340], "c340");
}
