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
    // A PLY of a hand-sized object with no unit: a part, so the inspection wording.
    assert_eq!(v["settings"]["job"], "part");
    assert!(
        v["caution"]
            .as_str()
            .unwrap()
            .contains("inspection with calibrated equipment")
    );
    // Traceability: tool version, every setting and why, inputs with size and checksum.
    assert_eq!(v["tool"]["version"], env!("CARGO_PKG_VERSION"));
    assert_eq!(v["settings"]["seed"], 3);
    assert!(
        v["settings"]["voxel_from"]
            .as_str()
            .unwrap()
            .contains("point spacing")
    );
    let bytes = std::fs::metadata(dir.path().join("source.ply"))
        .unwrap()
        .len();
    assert_eq!(v["source"]["bytes"], bytes);
    assert!(
        v["source"]["checksum"]
            .as_str()
            .unwrap()
            .starts_with("fnv1a64:")
    );
    assert!(v["fit"]["coverage"].as_f64().unwrap() > 0.3, "{v}");
    assert_eq!(v["settings"]["units"], "unknown");
    for name in ["moved.ply", "views.png", "report.json"] {
        assert!(stderr.contains(&format!("wrote {name}")), "{stderr}");
    }
    // The moved file records the verdict and the transform in its header.
    let header = std::fs::read(dir.path().join("moved.ply")).unwrap();
    let header = String::from_utf8_lossy(&header[..600]);
    assert!(
        header.contains("comment equiscan registration verdict confident"),
        "{header}"
    );
    assert!(
        header.contains("comment equiscan registration transform"),
        "{header}"
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
    // Not confident: nothing found, or (a random scatter fits many poses alike) ambiguous.
    assert!(
        v["verdict"] == "not_found" || v["verdict"] == "ambiguous",
        "{}",
        v["verdict"]
    );
    assert!(v["reason"].is_string() && v["reason_text"].is_string());

    // --write without a confident result writes nothing unless asked; -q with --json still
    // prints the JSON.
    let out = equiscan(
        &[
            "align",
            "a.ply",
            "b.ply",
            "-q",
            "--json",
            "--write",
            "m.ply",
            "--picture",
            "p.png",
        ],
        dir.path(),
    );
    assert_eq!(out.status.code(), Some(1));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_ne!(v["verdict"], "confident");
    assert!(!dir.path().join("m.ply").exists());
    assert!(String::from_utf8_lossy(&out.stderr).contains("--write-anyway"));
    // The picture of a failed run carries the red "not aligned" band.
    let png = std::fs::File::open(dir.path().join("p.png")).unwrap();
    let mut reader = png::Decoder::new(std::io::BufReader::new(png))
        .read_info()
        .unwrap();
    let mut buf = vec![0; reader.output_buffer_size().unwrap()];
    let info = reader.next_frame(&mut buf).unwrap();
    let red = buf[..info.buffer_size()]
        .chunks(3)
        .filter(|p| p == &[180, 20, 30])
        .count();
    assert!(red > 20_000, "{red} warning pixels");
    let out = equiscan(
        &[
            "align",
            "a.ply",
            "b.ply",
            "-q",
            "--write",
            "m.ply",
            "--write-anyway",
        ],
        dir.path(),
    );
    assert_eq!(out.status.code(), Some(1));
    assert!(out.stdout.is_empty());
    let header = std::fs::read(dir.path().join("m.ply")).unwrap();
    let header = String::from_utf8_lossy(&header[..600]);
    assert!(
        header.contains("comment equiscan registration verdict not_found")
            || header.contains("comment equiscan registration verdict ambiguous"),
        "{header}"
    );
}

/// Writes two identical small bunny scans and returns the folder.
fn pair_folder() -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    let p = problem(&bunny(), 30.0, 3000, 0.003, 11);
    write_ply(&dir.path().join("source.ply"), &p.source, &[]).unwrap();
    write_ply(&dir.path().join("target.ply"), &p.target, &[]).unwrap();
    dir
}

fn fails_with(args: &[&str], dir: &Path, words: &[&str]) {
    let out = equiscan(args, dir);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{args:?}: {err}");
    assert_eq!(err.trim().lines().count(), 1, "{err}");
    for w in words {
        assert!(err.contains(w), "{args:?}: {err} lacks {w}");
    }
    assert!(out.stdout.is_empty());
}

#[test]
fn outputs_that_would_replace_an_input_or_cannot_be_written_are_refused_before_reading() {
    let dir = pair_folder();
    let before = std::fs::read(dir.path().join("source.ply")).unwrap();
    let s = ["align", "source.ply", "target.ply"];
    let with = |extra: &[&'static str]| [&s[..], extra].concat();
    // Same file, another spelling: refused by identity.
    fails_with(
        &with(&["--report", "./source.ply"]),
        dir.path(),
        &["same file as the input"],
    );
    fails_with(
        &with(&["--picture", "target.ply"]),
        dir.path(),
        &["target.ply", "input"],
    );
    std::fs::create_dir(dir.path().join("sub")).unwrap();
    fails_with(
        &with(&["--write", "sub/../source.ply"]),
        dir.path(),
        &["source.ply"],
    );
    assert_eq!(
        std::fs::read(dir.path().join("source.ply")).unwrap(),
        before
    );
    fails_with(
        &with(&["--picture", "x.jpg"]),
        dir.path(),
        &["x.jpg", ".png"],
    );
    fails_with(
        &with(&["--report", "no/such/r.json"]),
        dir.path(),
        &["does not exist"],
    );
    fails_with(
        &with(&["--voxel", "-1"]),
        dir.path(),
        &["--voxel -1", "greater than 0"],
    );
    fails_with(
        &with(&["--voxel=0"]),
        dir.path(),
        &["--voxel 0", "greater than 0"],
    );
    // The truth file and key are checked before any scan is read: a malformed scan is not
    // what the error names.
    std::fs::write(dir.path().join("t.json"), br#"{"a": {"matrix": 1}}"#).unwrap();
    std::fs::write(dir.path().join("broken.ply"), b"ply\nnonsense").unwrap();
    fails_with(
        &[
            "align",
            "broken.ply",
            "target.ply",
            "--truth",
            "t.json",
            "--truth-key",
            "b",
        ],
        dir.path(),
        &["t.json", "`b`"],
    );
    // A runaway voxel size is refused with its cost and the ways on.
    fails_with(
        &with(&["--voxel", "0.0001", "--max-memory", "1M", "-q"]),
        dir.path(),
        &["keypoints", "of memory", "--force", "--max-memory"],
    );
}

#[test]
fn same_run_with_source_date_epoch_gives_the_same_report_bytes() {
    let dir = pair_folder();
    let run = |name: &str| {
        let out = Command::new(env!("CARGO_BIN_EXE_equiscan"))
            .args([
                "align",
                "source.ply",
                "target.ply",
                "--units",
                "mm",
                "--threads",
                "1",
            ])
            .args(["--report", name])
            .env("SOURCE_DATE_EPOCH", "946684800")
            .current_dir(dir.path())
            .output()
            .unwrap();
        assert_ne!(out.status.code(), Some(2));
        let text = String::from_utf8_lossy(&out.stdout).to_string();
        (std::fs::read(dir.path().join(name)).unwrap(), text)
    };
    let (a, summary) = run("a.json");
    let (b, _) = run("b.json");
    assert_eq!(a, b);
    let v: serde_json::Value = serde_json::from_slice(&a).unwrap();
    // 946 684 800 s after the Unix epoch is 2000-01-01 00:00:00 UTC (common knowledge).
    assert_eq!(v["created"], "2000-01-01T00:00:00Z");
    assert_eq!(v["settings"]["units"], "millimetre");
    // Every length in the summary carries the unit.
    assert!(
        summary.contains("surface gap (RMS)") && summary.contains(" mm,"),
        "{summary}"
    );
}

#[test]
fn truth_key_indexes_lists_in_the_shipped_truth_file() {
    // scans/truth.json lists the parts; parts.0 is the bracket, its pose maps the reference
    // (canonical) frame into the tray scan's frame.
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("scans");
    let truth: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(root.join("truth.json")).unwrap()).unwrap();
    assert_eq!(truth["parts"][0]["name"], "bracket");
    let out = equiscan(
        &[
            "align",
            "parts/reference/bracket.ply",
            "parts/tray/bracket_scan.ply",
            "--truth",
            "truth.json",
            "--truth-key",
            "parts.0.pose",
            "--json",
            "-q",
        ],
        &root,
    );
    assert_ne!(
        out.status.code(),
        Some(2),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let err = v["truth"]["rotation_error_deg"].as_f64().unwrap();
    // A confident answer must be the true pose; a not-found one may be anything.
    if v["verdict"] == "confident" {
        assert!(err < 2.0, "{err}");
    }
    assert!(err.is_finite());
}

#[test]
fn las_write_keeps_point_format_crs_and_records_the_verdict() {
    use equiscan::io::{LasOptions, read_cloud, write_las_with};
    let dir = pair_folder();
    // A one-point LAS carrying a WKT CRS in metres (LASF_Projection record 2112, by the las
    // crate) lends its CRS records to the two scans, written in point format 1.
    let wkt = "PROJCS[\"example\",GEOGCS[\"WGS 84\"],UNIT[\"metre\",1]]";
    let mut b = las::Builder::from((1, 4));
    b.point_format = las::point::Format::new(6).unwrap();
    let mut header = b.into_header().unwrap();
    header.set_wkt_crs(wkt.as_bytes().to_vec()).unwrap();
    let mut w = las::Writer::new(std::io::Cursor::new(Vec::new()), header).unwrap();
    w.write_point(las::Point {
        gps_time: Some(0.0),
        ..Default::default()
    })
    .unwrap();
    std::fs::write(
        dir.path().join("crs.las"),
        w.into_inner().unwrap().into_inner(),
    )
    .unwrap();
    let (_, info) = read_cloud(&dir.path().join("crs.las")).unwrap();
    let mut options = LasOptions::like(&info);
    options.point_format = Some(1);
    options.scale = Some([1e-5; 3]);
    options.offset = None;
    for name in ["source", "target"] {
        let (c, _) = read_cloud(&dir.path().join(format!("{name}.ply"))).unwrap();
        write_las_with(&dir.path().join(format!("{name}.las")), &c, &[], &options).unwrap();
    }
    let out = equiscan(
        &[
            "align",
            "source.las",
            "target.las",
            "--json",
            "--write",
            "moved.las",
            "--write-anyway",
        ],
        dir.path(),
    );
    assert_ne!(
        out.status.code(),
        Some(2),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["settings"]["units"], "metre");
    let reader = las::Reader::from_path(dir.path().join("moved.las")).unwrap();
    let h = reader.header();
    assert_eq!(h.point_format().to_u8().unwrap(), 1);
    assert_eq!(h.get_wkt_crs_bytes(), Some(wkt.as_bytes()));
    let record = h
        .all_vlrs()
        .find(|r| r.user_id == "equiscan" && r.record_id == 1001)
        .expect("our registration record");
    let rec: serde_json::Value = serde_json::from_slice(&record.data).unwrap();
    assert_eq!(rec["verdict"], v["verdict"]);
    assert_eq!(rec["transform"], v["transform"]);
    let (moved, _) = read_cloud(&dir.path().join("moved.las")).unwrap();
    assert_eq!(
        moved.len(),
        v["source"]["points"].as_u64().unwrap() as usize
    );
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

#[test]
fn registration_messages_name_the_file() {
    let dir = tempfile::tempdir().unwrap();
    let p = problem(&bunny(), 50.0, 2000, 0.003, 5);
    write_ply(&dir.path().join("good.ply"), &p.target, &[]).unwrap();
    // Twelve copies of one point: read fine, but no spacing can be measured.
    let flat = Cloud::new([10.0, 20.0, 30.0], vec![[0.5, 0.5, 0.5]; 12]);
    write_ply(&dir.path().join("one_spot.ply"), &flat, &[]).unwrap();
    for scans in [
        ["one_spot.ply", "good.ply", ""],
        ["good.ply", "one_spot.ply", ""],
        ["good.ply", "good.ply", "one_spot.ply"],
    ] {
        let args: Vec<&str> = std::iter::once("align")
            .chain(scans.into_iter().filter(|s| !s.is_empty()))
            .collect();
        let out = equiscan(&args, dir.path());
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {err}");
        assert!(
            err.contains("one_spot.ply: fewer than two distinct points"),
            "{args:?}: {err}"
        );
        assert!(
            !err.contains("source:") && !err.contains("target:"),
            "{err}"
        );
    }
}
