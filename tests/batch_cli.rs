//! `equiscan batch` end to end: resume from the journal, refusal of another recipe, kill -9,
//! isolation of a bad tile, empty tiles, a tile in another CRS, non-point files in a folder,
//! an OUTDIR that is a file, a write error, and shards running at once into one OUTDIR.

mod batch_tiles;

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use batch_tiles::{cut, thin};
use equiscan::io::read_cloud;

fn equiscan(args: &[&str], dir: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .args(args)
        .current_dir(dir)
        .output()
        .expect("equiscan runs")
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

fn summary(o: &Output) -> serde_json::Value {
    serde_json::from_str(text(&o.stdout).trim())
        .unwrap_or_else(|e| panic!("{e}: stdout {} stderr {}", text(&o.stdout), text(&o.stderr)))
}

/// 3 × 3 LAS tiles of every `step`-th point of station 1 in `dir/tiles`.
fn tiles(step: usize) -> tempfile::TempDir {
    let (station, _) = read_cloud("scans/depot_station1.laz".as_ref()).expect("demo station");
    let dir = tempfile::tempdir().unwrap();
    std::fs::create_dir(dir.path().join("tiles")).unwrap();
    cut(
        &thin(&station, step),
        3,
        3,
        &dir.path().join("tiles"),
        "las",
    );
    dir
}

/// The files of a folder (not the journal), sorted, with their bytes.
fn contents(dir: &Path) -> Vec<(String, Vec<u8>)> {
    let mut v: Vec<(String, Vec<u8>)> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.is_file())
        .map(|p| {
            (
                p.file_name().unwrap().to_string_lossy().into_owned(),
                std::fs::read(&p).unwrap(),
            )
        })
        .collect();
    v.sort();
    v
}

fn temp_files(dir: &Path) -> Vec<PathBuf> {
    walk(dir)
        .into_iter()
        .filter(|p| p.to_string_lossy().ends_with(equiscan::io::TEMP_SUFFIX))
        .collect()
}

fn walk(dir: &Path) -> Vec<PathBuf> {
    let mut v = Vec::new();
    for e in std::fs::read_dir(dir).unwrap() {
        let p = e.unwrap().path();
        if p.is_dir() {
            v.extend(walk(&p));
        } else {
            v.push(p);
        }
    }
    v
}

const R: &str = "0.12";
/// Radius of the denser tiles of the kill test (about 0.5 s per tile).
const R_KILL: &str = "0.05";

#[test]
fn rerun_skips_checked_outputs_redoes_damaged_ones_and_refuses_another_recipe() {
    let d = tiles(8);
    let p = d.path();
    let o = equiscan(&["batch", "tiles", "-o", "out", "-r", R, "--json"], p);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o.stderr));
    let s = summary(&o);
    assert_eq!(
        (s["tiles"].as_u64(), s["done"].as_u64()),
        (Some(9), Some(9))
    );
    assert_eq!(s["points"].as_u64(), Some(89_543));
    assert!(s["points_per_second"].as_f64().unwrap() > 0.0);
    let first = contents(&p.join("out"));
    assert_eq!(first.len(), 18); // 9 NPY + 9 sidecars
    assert_eq!(
        std::fs::read_dir(p.join("out/equiscan-journal"))
            .unwrap()
            .count(),
        10
    );

    // Same arguments: everything checked and skipped.
    let o = equiscan(&["batch", "tiles", "-o", "out", "-r", R, "--json"], p);
    assert_eq!(o.status.code(), Some(0));
    assert_eq!(summary(&o)["skipped"].as_u64(), Some(9));

    // A damaged output is noticed by its checksum and redone, to the same bytes.
    let victim = p.join("out/tile_2_1.npy");
    let mut b = std::fs::read(&victim).unwrap();
    let n = b.len();
    b[n - 1] ^= 0x55;
    std::fs::write(&victim, b).unwrap();
    let o = equiscan(&["batch", "tiles", "-o", "out", "-r", R, "--json"], p);
    let s = summary(&o);
    assert_eq!(
        (s["done"].as_u64(), s["skipped"].as_u64()),
        (Some(1), Some(8))
    );
    assert!(
        text(&o.stderr).contains("tile_2_1.npy differs from its record"),
        "{}",
        text(&o.stderr)
    );
    assert_eq!(contents(&p.join("out")), first);

    // Another recipe: refused (exit 2, nothing touched) unless --restart.
    let o = equiscan(&["batch", "tiles", "-o", "out", "-r", "0.1"], p);
    assert_eq!(o.status.code(), Some(2));
    let e = text(&o.stderr);
    assert!(
        e.contains("other settings") && e.contains("--restart"),
        "{e}"
    );
    assert_eq!(e.lines().count(), 1, "{e}");
    assert_eq!(contents(&p.join("out")), first);
    let o = equiscan(
        &[
            "batch",
            "tiles",
            "-o",
            "out",
            "-r",
            "0.1",
            "--restart",
            "--json",
        ],
        p,
    );
    assert_eq!(o.status.code(), Some(0));
    assert_eq!(summary(&o)["done"].as_u64(), Some(9));
}

#[test]
fn kill_9_loses_only_tiles_in_flight() {
    let d = tiles(2);
    let p = d.path();
    // A clean run for the expected bytes.
    let o = equiscan(&["batch", "tiles", "-o", "clean", "-r", R_KILL, "-q"], p);
    assert_eq!(o.status.code(), Some(0));
    for wait_ms in [300u64, 1200] {
        let out = format!("killed{wait_ms}");
        let mut child = Command::new(env!("CARGO_BIN_EXE_equiscan"))
            .args(["batch", "tiles", "-o", &out, "-r", R_KILL, "-q"])
            .current_dir(p)
            .spawn()
            .unwrap();
        std::thread::sleep(std::time::Duration::from_millis(wait_ms));
        child.kill().unwrap(); // SIGKILL on Unix
        child.wait().unwrap();
        let o = equiscan(&["batch", "tiles", "-o", &out, "-r", R_KILL, "--json"], p);
        assert_eq!(o.status.code(), Some(0), "{}", text(&o.stderr));
        let s = summary(&o);
        assert_eq!(
            s["done"].as_u64().unwrap() + s["skipped"].as_u64().unwrap(),
            9
        );
        assert_eq!(contents(&p.join(&out)), contents(&p.join("clean")));
        assert!(
            temp_files(&p.join(&out)).is_empty(),
            "{:?}",
            temp_files(&p.join(&out))
        );
    }
}

#[test]
fn a_bad_tile_is_reported_and_the_others_are_done() {
    let d = tiles(8);
    let p = d.path();
    // A truncated tile, an empty file, and a LAS without points.
    let t = p.join("tiles/tile_1_1.las");
    let b = std::fs::read(&t).unwrap();
    std::fs::write(&t, &b[..b.len() / 2]).unwrap();
    std::fs::write(p.join("tiles/zero.las"), b"").unwrap();
    let empty = equiscan::Cloud::new([0.0; 3], Vec::new());
    equiscan::io::write_las(&p.join("tiles/nothing.las"), &empty, &[]).unwrap();
    let o = equiscan(&["batch", "tiles", "-o", "out", "-r", R, "--json"], p);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o.stderr));
    let s = summary(&o);
    assert_eq!(
        (s["done"].as_u64(), s["failed"].as_u64()),
        (Some(9), Some(2))
    );
    let e = text(&o.stderr);
    let errors: Vec<&str> = s["failures"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f["error"].as_str().unwrap())
        .collect();
    assert_eq!(errors.len(), 2);
    assert!(
        errors[0].starts_with("tiles/tile_1_1.las: ") && errors[0].contains("(truncated); "),
        "{errors:?}"
    );
    assert_eq!(
        errors[1],
        "tiles/zero.las: the file is empty; copy or export the file again"
    );
    // The empty LAS gives an output without rows; the failed ones none, and their records say why.
    let (rows, _, _) = batch_tiles::read_npy(&p.join("out/nothing.npy"));
    assert_eq!(rows, 0);
    assert!(!p.join("out/tile_1_1.npy").exists());
    let rec: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(p.join("out/equiscan-journal/tile_1_1.npy.json")).unwrap(),
    )
    .unwrap();
    assert_eq!(rec["status"], "failed");
    assert!(rec["error"].as_str().unwrap().contains("tile_1_1.las"));
    // Its neighbours cannot be known from an unreadable header: said once, up front.
    assert!(
        e.contains("its neighbours get no halo points from it"),
        "{e}"
    );
    assert!(temp_files(&p.join("out")).is_empty());
}

#[test]
fn folders_skip_other_files_with_a_note_and_outdir_must_be_a_folder() {
    let d = tiles(8);
    let p = d.path();
    std::fs::write(p.join("tiles/readme.txt"), "survey notes").unwrap();
    std::fs::write(p.join("tiles/index.csv"), "a,b").unwrap();
    std::fs::write(p.join("afile"), "x").unwrap();
    let o = equiscan(&["batch", "tiles", "-o", "afile", "-r", R], p);
    assert_eq!(o.status.code(), Some(2));
    assert_eq!(
        text(&o.stderr).trim(),
        "afile: is a file, not a folder; give a folder for -o (it is made when missing)"
    );
    let o = equiscan(&["batch", "tiles", "-o", "missing/out", "-r", R], p);
    assert_eq!(o.status.code(), Some(2));
    assert!(text(&o.stderr).contains("missing"));
    let o = equiscan(&["batch", "tiles", "-o", "out", "-r", R], p);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o.stderr));
    assert!(
        text(&o.stderr).contains(
            "tiles: skipped 2 files that are not .las, .laz or .ply (index.csv, readme.txt)"
        ),
        "{}",
        text(&o.stderr)
    );
    // A quoted pattern is expanded by equiscan (as under a job scheduler).
    let o = equiscan(
        &[
            "batch",
            "tiles/tile_0_*.las",
            "-o",
            "glob",
            "-r",
            R,
            "--json",
        ],
        p,
    );
    assert_eq!(summary(&o)["done"].as_u64(), Some(3));
    // Outputs may never be inputs: LAS outputs into the tiles' own folder are refused.
    let o = equiscan(
        &["batch", "tiles", "-o", "tiles", "-r", R, "--format", "las"],
        p,
    );
    assert_eq!(o.status.code(), Some(2), "{}", text(&o.stderr));
}

#[test]
fn a_tile_in_another_crs_is_warned_about_and_kept_out_of_halos() {
    use equiscan::io::{LasOptions, write_las_with};
    let d = tiles(8);
    let p = d.path();
    // A one-point LAS carrying a WKT CRS (LASF_Projection record 2112, by the las crate)
    // lends its CRS records to one tile.
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
    std::fs::write(p.join("crs.las"), w.into_inner().unwrap().into_inner()).unwrap();
    let (_, info) = read_cloud(&p.join("crs.las")).unwrap();
    let t = p.join("tiles/tile_0_0.las");
    let (c, tinfo) = read_cloud(&t).unwrap();
    let mut opts = LasOptions::like(&info);
    opts.scale = tinfo.scale;
    opts.offset = tinfo.offset;
    opts.point_format = Some(1);
    write_las_with(&t, &c, &[], &opts).unwrap();
    let o = equiscan(&["batch", "tiles", "-o", "out", "-r", R, "--json"], p);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o.stderr));
    let e = text(&o.stderr);
    assert!(
        e.contains("tile_0_0.las: its coordinate reference system (PROJCS[\"example\""),
        "{e}"
    );
    let rec: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(p.join("out/equiscan-journal/tile_0_0.npy.json")).unwrap(),
    )
    .unwrap();
    assert_eq!(rec["halo_points"].as_u64(), Some(0));
    assert_eq!(rec["halo_stamps"].as_array().map(Vec::len), Some(0));
}

#[test]
fn a_write_error_fails_the_tile_and_keeps_the_journal() {
    let d = tiles(8);
    let p = d.path();
    // A small tile far from the others, whose output fits under the limit.
    let (c, _) = read_cloud(&p.join("tiles/tile_0_0.las")).unwrap();
    let mut small = batch_tiles::subset(&c, &(0..50).collect::<Vec<_>>());
    small.origin[0] += 1000.0;
    equiscan::io::write_las(&p.join("tiles/small.las"), &small, &[]).unwrap();
    // A file-size limit stands in for a full disk: writes past 64 KiB fail (SIGXFSZ ignored,
    // so the write returns an error instead of killing the process).
    let bin = env!("CARGO_BIN_EXE_equiscan");
    let o = Command::new("sh")
        .arg("-c")
        .arg(format!(
            "trap '' XFSZ; ulimit -f 128; exec '{bin}' batch tiles -o out -r {R} --json"
        ))
        .current_dir(p)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(1), "{}", text(&o.stderr));
    let s = summary(&o);
    let (done, failed) = (s["done"].as_u64().unwrap(), s["failed"].as_u64().unwrap());
    assert!(done > 0 && failed > 0 && done + failed == 10, "{s}");
    assert!(
        text(&o.stderr).contains("too large") || text(&o.stderr).contains("space"),
        "{}",
        text(&o.stderr)
    );
    assert!(temp_files(&p.join("out")).is_empty());
    // Every record is whole JSON; a rerun with room redoes the failed tiles only.
    for f in walk(&p.join("out/equiscan-journal")) {
        let _: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&f).unwrap())
            .unwrap_or_else(|e| panic!("{}: {e}", f.display()));
    }
    let o = equiscan(&["batch", "tiles", "-o", "out", "-r", R, "--json"], p);
    let s2 = summary(&o);
    assert_eq!(s2["done"].as_u64(), Some(failed));
    assert_eq!(s2["skipped"].as_u64(), Some(done));
}

#[test]
fn shards_at_once_in_one_outdir_give_the_bytes_of_one_run() {
    let d = tiles(8);
    let p = d.path();
    let o = equiscan(&["batch", "tiles", "-o", "whole", "-r", R, "-q"], p);
    assert_eq!(o.status.code(), Some(0));
    let bin = env!("CARGO_BIN_EXE_equiscan");
    let kids: Vec<_> = ["1/3", "2/3", "3/3"]
        .iter()
        .map(|s| {
            Command::new(bin)
                .args([
                    "batch", "tiles", "-o", "shared", "-r", R, "--shard", s, "--json",
                ])
                .current_dir(p)
                .stdout(std::process::Stdio::piped())
                .stderr(std::process::Stdio::piped())
                .spawn()
                .unwrap()
        })
        .collect();
    let mut total = 0;
    for k in kids {
        let o = k.wait_with_output().unwrap();
        assert_eq!(o.status.code(), Some(0), "{}", text(&o.stderr));
        let s = summary(&o);
        assert_eq!(s["tiles"].as_u64(), Some(3));
        total += s["done"].as_u64().unwrap();
    }
    assert_eq!(total, 9);
    assert_eq!(contents(&p.join("shared")), contents(&p.join("whole")));
    let o = equiscan(&["batch", "tiles", "-o", "shared", "-r", R, "--json"], p);
    assert_eq!(summary(&o)["skipped"].as_u64(), Some(9));
    let o = equiscan(&["batch", "tiles", "-o", "x", "-r", R, "--shard", "4/3"], p);
    assert_eq!(o.status.code(), Some(2));
}

#[test]
fn tile_grid_off_writes_the_bytes_of_features() {
    let d = tiles(8);
    let p = d.path();
    let o = equiscan(
        &[
            "batch",
            "tiles",
            "-o",
            "out",
            "-r",
            R,
            "--tile-grid",
            "off",
            "-q",
        ],
        p,
    );
    assert_eq!(o.status.code(), Some(0));
    let o = equiscan(
        &[
            "features",
            "tiles/tile_1_1.las",
            "-o",
            "one.npy",
            "-r",
            R,
            "-q",
        ],
        p,
    );
    assert_eq!(o.status.code(), Some(0), "{}", text(&o.stderr));
    assert_eq!(
        std::fs::read(p.join("out/tile_1_1.npy")).unwrap(),
        std::fs::read(p.join("one.npy")).unwrap()
    );
}

#[test]
fn a_memory_budget_cuts_tiles_in_blocks_with_the_same_rows() {
    let dir = tiles(16);
    let d = dir.path();
    // A chunk folder left by a killed run of this host is removed at the next plan; one of
    // another host sharing the folder is kept.
    let journal = d.join("cut").join(equiscan::batch::JOURNAL_DIR);
    std::fs::create_dir_all(&journal).unwrap();
    let host = equiscan::io::host_label();
    let dead = journal.join(format!("chunks.{host}.{}.0", u32::MAX - 1));
    let other = journal.join(format!("chunks.{host}-b.{}.0", u32::MAX - 1));
    for f in [&dead, &other] {
        std::fs::create_dir(f).unwrap();
        std::fs::write(f.join("block0.bin"), b"left").unwrap();
    }
    let bad = equiscan(
        &[
            "batch",
            "tiles",
            "-o",
            "cut",
            "-r",
            "0.12",
            "--memory-budget",
            "lots",
        ],
        d,
    );
    assert_eq!(bad.status.code(), Some(2), "{}", text(&bad.stderr));
    assert!(
        text(&bad.stderr).contains("memory size"),
        "{}",
        text(&bad.stderr)
    );
    // 48 MiB is the fixed reserve: every tile goes in blocks of the smallest size.
    let cut = equiscan(
        &[
            "batch",
            "tiles",
            "-o",
            "cut",
            "-r",
            "0.12",
            "--memory-budget",
            "48M",
        ],
        d,
    );
    assert!(cut.status.success(), "{}", text(&cut.stderr));
    assert!(
        text(&cut.stderr).contains("blocks (memory budget)"),
        "{}",
        text(&cut.stderr)
    );
    assert!(!dead.exists() && other.exists());
    let whole = equiscan(&["batch", "tiles", "-o", "whole", "-r", "0.12"], d);
    assert!(whole.status.success(), "{}", text(&whole.stderr));
    assert!(!text(&whole.stderr).contains("blocks (memory budget)"));
    let (a, b) = (contents(&d.join("cut")), contents(&d.join("whole")));
    assert_eq!(a.len(), b.len());
    for ((na, ba), (nb, bb)) in a.iter().zip(&b) {
        assert_eq!(na, nb);
        if na.ends_with(".npy") {
            // Same shape and header; positions, counts and flags equal, values to rounding.
            assert_eq!(ba.len(), bb.len(), "{na}");
            let (ra, ca, va) = batch_tiles::read_npy(&d.join("cut").join(na));
            let (_, _, vb) = batch_tiles::read_npy(&d.join("whole").join(na));
            let colmax: Vec<f32> = (0..ca)
                .map(|c| (0..ra).map(|r| vb[r * ca + c].abs()).fold(0.0, f32::max))
                .collect();
            for r in 0..ra {
                for c in 0..ca {
                    let (x, y) = (va[r * ca + c], vb[r * ca + c]);
                    if c < 5 {
                        assert_eq!(x, y, "{na} row {r} column {c}");
                    } else {
                        assert!((x - y).abs() <= 1e-5 * colmax[c], "{na} row {r} column {c}");
                    }
                }
            }
        }
    }
}
