//! Bad inputs: each gives one line `FILE: what is wrong; what to do`, no panic, and (for the
//! command) exit code 2 with nothing on stdout. Files are made in the test, mostly by cutting
//! or patching the las crate's sample files at the header offsets of the LAS 1.4 R15
//! specification (ASPRS), Table 3.

use std::path::{Path, PathBuf};
use std::process::Command;

use equiscan::Cloud;
use equiscan::io::{Column, read_cloud, write_las, write_npy, write_ply};

fn sample(name: &str) -> Vec<u8> {
    std::fs::read(
        Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("tests/data/las")
            .join(name),
    )
    .unwrap()
}

/// The library's message for `path`, checked for the one-line `PATH: what; fix` form.
fn message(path: &Path) -> String {
    let err = read_cloud(path).expect_err("bad input must be refused");
    let msg = err.to_string();
    assert!(!msg.contains('\n'), "one line: {msg}");
    assert!(
        msg.starts_with(&format!("{}: ", path.display())),
        "starts with the path: {msg}"
    );
    assert!(msg.contains("; "), "says what to do: {msg}");
    msg
}

/// Runs `equiscan info` on `files`; returns (exit code, stdout, stderr).
fn info(files: &[&Path]) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .arg("info")
        .args(files)
        .env("NO_COLOR", "1")
        .output()
        .unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8(out.stdout).unwrap(),
        String::from_utf8(out.stderr).unwrap(),
    )
}

/// Library and command agree: the message contains `needle`, the command prints exactly it.
fn check(path: &Path, needle: &str) {
    let msg = message(path);
    assert!(msg.contains(needle), "{msg:?} should mention {needle:?}");
    let (code, out, err) = info(&[path]);
    assert_eq!(code, 2, "{err}");
    assert!(out.is_empty(), "{out}");
    assert_eq!(err, format!("{msg}\n"));
}

struct Dir(tempfile::TempDir);
impl Dir {
    fn new() -> Self {
        Dir(tempfile::tempdir().unwrap())
    }
    fn file(&self, name: &str, bytes: &[u8]) -> PathBuf {
        let p = self.0.path().join(name);
        std::fs::write(&p, bytes).unwrap();
        p
    }
}

#[test]
fn missing_file_folder_and_empty_file() {
    let d = Dir::new();
    check(&d.0.path().join("absent.las"), "no such file");
    check(d.0.path(), "is a folder");
    check(&d.file("empty.ply", b""), "the file is empty");
}

#[test]
fn wrong_magic() {
    let d = Dir::new();
    check(
        &d.file("photo.las", b"\x89PNG\r\n\x1a\n...."),
        "not a LAS, LAZ, PLY or E57 file",
    );
    check(
        &d.file("x.ply", b"plyx\n"),
        "not a LAS, LAZ, PLY or E57 file",
    );
    check(
        &d.file("short.las", b"LA"),
        "not a LAS, LAZ, PLY or E57 file",
    );
}

#[test]
fn truncated_headers() {
    let d = Dir::new();
    let las = sample("autzen.las");
    check(&d.file("cut.las", &las[..100]), "LAS header is truncated");
    check(
        &d.file(
            "cut.ply",
            b"ply\nformat ascii 1.0\nelement vertex 3\nproperty float x\n",
        ),
        "truncated header",
    );
}

#[test]
fn truncated_point_data_and_counts_larger_than_the_data() {
    let d = Dir::new();
    let las = sample("autzen.las");
    check(
        &d.file("short.las", &las[..las.len() - 50]),
        "the data holds only 104",
    );
    // Legacy point count at byte 107 (u32), patched to a billion: nothing is allocated for it.
    let mut big = las.clone();
    big[107..111].copy_from_slice(&1_000_000_000u32.to_le_bytes());
    check(
        &d.file("big.las", &big),
        "declares 1000000000 points but the data holds only 106",
    );

    let laz = sample("autzen.laz");
    let msg = message(&d.file("short.laz", &laz[..laz.len() * 2 / 3]));
    assert!(!msg.is_empty());
    let (code, out, err) = info(&[&d.0.path().join("short.laz")]);
    assert_eq!((code, out.as_str()), (2, ""));
    assert_eq!(err.lines().count(), 1, "{err}");

    // The same count patch on a LAZ file is caught by its chunk table.
    let mut big = laz.clone();
    big[107..111].copy_from_slice(&1_000_000_000u32.to_le_bytes());
    check(
        &d.file("big.laz", &big),
        "declares 1000000000 points but the compressed data holds at most",
    );

    // A damaged chunk table (stored at the end of this file) must not drive an allocation.
    let mut table = sample("32-1-472-150-76.laz");
    let n = table.len();
    table[n - 6] ^= 0x5A;
    check(&d.file("table.laz", &table), "chunk table lists");

    let ply = b"ply\nformat binary_little_endian 1.0\nelement vertex 4000000000\nproperty float x\nproperty float y\nproperty float z\nend_header\n";
    let mut body = ply.to_vec();
    body.extend_from_slice(&[0u8; 12 * 3 + 5]);
    check(
        &d.file("huge.ply", &body),
        "declares 4000000000 vertex records, which need at least 48000000000 bytes, but the data holds 41",
    );
    let ascii = b"ply\nformat ascii 1.0\nelement vertex 3\nproperty float x\nproperty float y\nproperty float z\nend_header\n1 2 3\n4 5\n";
    check(
        &d.file("short_ascii.ply", ascii),
        "declares 3 vertex records, which need at least 18 bytes, but the data holds 10",
    );
}

#[test]
fn ply_unknown_type_missing_xyz_and_bad_numbers() {
    let d = Dir::new();
    check(
        &d.file(
            "type.ply",
            b"ply\nformat ascii 1.0\nelement vertex 1\nproperty float128 x\nend_header\n1\n",
        ),
        "unknown property type \"float128\"",
    );
    check(
        &d.file(
            "noz.ply",
            b"ply\nformat ascii 1.0\nelement vertex 1\nproperty float x\nproperty float y\nend_header\n1 2\n",
        ),
        "no x, y and z properties",
    );
    check(
        &d.file(
            "word.ply",
            b"ply\nformat ascii 1.0\nelement vertex 1\nproperty float x\nproperty float y\nproperty float z\nend_header\n1 two 3\n",
        ),
        "\"two\" is not a valid",
    );
    check(
        &d.file("noformat.ply", b"ply\nelement vertex 0\nend_header\n"),
        "no format line",
    );
}

#[test]
fn non_finite_coordinates_name_the_vertex_and_value() {
    let d = Dir::new();
    check(
        &d.file(
            "nan.ply",
            b"ply\nformat ascii 1.0\nelement vertex 3\nproperty float x\nproperty float y\nproperty float z\nend_header\n0 0 0\n1 1 1\n2 NaN 2\n",
        ),
        "vertex 2 has a non-finite coordinate (y = NaN)",
    );
    let mut bin = b"ply\nformat binary_big_endian 1.0\nelement vertex 2\nproperty double x\nproperty double y\nproperty double z\nend_header\n".to_vec();
    for v in [1.0f64, 2.0, 3.0, f64::NEG_INFINITY, 0.0, 0.0] {
        bin.extend_from_slice(&v.to_be_bytes());
    }
    check(
        &d.file("inf.ply", &bin),
        "vertex 1 has a non-finite coordinate (x = -inf)",
    );
}

#[test]
fn las_version_not_read() {
    let d = Dir::new();
    // Version major/minor at bytes 24-25 (LAS 1.4 R15, Table 3), patched to 2.0.
    let mut las = sample("autzen.las");
    las[24] = 2;
    las[25] = 0;
    check(&d.file("v2.las", &las), "LAS version 2.0 is not read here");
}

#[test]
fn several_files_go_on_after_a_failure_and_remember_it() {
    let d = Dir::new();
    let good = d.file("good.las", &sample("autzen.las"));
    let bad = d.file("bad.las", b"nonsense");
    let (code, out, err) = info(&[&bad, &good]);
    assert_eq!(code, 2);
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(err.starts_with(&bad.display().to_string()));
    assert!(out.contains("points          106"), "{out}");
    let (code, out, err) = info(&[&good]);
    assert_eq!((code, err.as_str()), (0, ""));
    assert!(out.contains("LAS 1.2, point format 1"), "{out}");
}

#[test]
fn command_usage_errors_exit_2() {
    let out = Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .args(["info", "--no-such-flag", "x.las"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let out = Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .arg("info")
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn json_gives_one_object_per_line() {
    let d = Dir::new();
    let a = d.file("a.las", &sample("autzen.las"));
    let b = d.file("b.laz", &sample("autzen.laz"));
    let out = Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .args(["info", "--json"])
        .args([&a, &b])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    let text = String::from_utf8(out.stdout).unwrap();
    let docs: Vec<serde_json::Value> = text
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    assert_eq!(docs.len(), 2);
    assert_eq!(docs[0]["format"], "LAS");
    assert_eq!(docs[1]["format"], "LAZ");
    assert_eq!(docs[0]["point_count"], 106);
    let sp = docs[0]["point_spacing"].as_f64().unwrap();
    let r = docs[0]["suggested_support_radius"].as_f64().unwrap();
    // 5 × the spacing, rounded to two significant digits (the one radius rule of every command).
    let want = equiscan::descriptor::suggested_radius(sp as f32) as f64;
    assert!(sp > 0.0 && (r - want).abs() < 1e-6 * r, "{sp} {r}");
    assert!((r - 5.0 * sp).abs() <= 0.05 * r, "{sp} {r}");
}

#[test]
fn writers_refuse_bad_input_and_leave_no_file() {
    let d = Dir::new();
    let mut cloud = Cloud::new([0.0; 3], vec![[0.0; 3], [1.0, 2.0, 3.0]]);
    let short = [1.0f32];
    let p = d.0.path().join("f.ply");
    assert!(write_ply(&p, &cloud, &[Column::new("a", &short)]).is_err());
    assert!(!p.exists());
    let ok = [1.0f32, 2.0];
    assert!(
        write_ply(&p, &cloud, &[Column::new("x", &ok)]).is_err(),
        "name clash"
    );
    assert!(
        write_ply(&p, &cloud, &[Column::new("a b", &ok)]).is_err(),
        "plain names"
    );
    assert!(!p.exists());
    // A coordinate that does not fit LAS's 32-bit integers at 1 mm.
    cloud.positions[1][0] = 1e7;
    let l = d.0.path().join("f.las");
    let err = write_las(&l, &cloud, &[]).unwrap_err().to_string();
    assert!(err.contains("does not fit"), "{err}");
    assert!(!l.exists());
    cloud.positions[1][0] = f32::NAN;
    assert!(write_las(&l, &cloud, &[]).is_err());
    assert!(write_ply(&p, &cloud, &[]).is_err());
    assert!(!l.exists() && !p.exists());
    let n = d.0.path().join("m.npy");
    assert!(write_npy(&n, 2, 2, &ok).is_err());
    assert!(!n.exists());
    // Nothing else, not even temporary files, is left in the folder.
    assert_eq!(std::fs::read_dir(d.0.path()).unwrap().count(), 0);
}

#[test]
fn non_finite_float_coordinates_in_binary_little_endian() {
    let d = Dir::new();
    let mut bin = b"ply\nformat binary_little_endian 1.0\nelement vertex 3\nproperty float x\nproperty float y\nproperty float z\nproperty uchar red\nproperty uchar green\nproperty uchar blue\nend_header\n".to_vec();
    for (i, v) in [[0.0f32, 0.0, 0.0], [1.0, 1.0, 1.0], [2.0, 2.0, f32::NAN]]
        .iter()
        .enumerate()
    {
        for x in v {
            bin.extend_from_slice(&x.to_le_bytes());
        }
        bin.extend_from_slice(&[i as u8; 3]);
    }
    check(
        &d.file("nanf.ply", &bin),
        "vertex 2 has a non-finite coordinate (z = NaN)",
    );
}

/// Every prefix of the sample files, and single corrupted bytes in their headers, give an
/// error or a cloud: never a panic, and errors stay on one line.
#[test]
fn truncation_at_any_length_and_header_corruption_never_panic() {
    let d = Dir::new();
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data");
    let files = [
        "ply/cube_colour_edges_binary_big_endian.ply",
        "ply/cube_ascii.ply",
        "ply/cube_binary_little_endian.ply",
        "las/autzen.las",
        "las/autzen.laz",
    ];
    for name in files {
        let bytes = std::fs::read(root.join(name)).unwrap();
        let path = d.0.path().join(Path::new(name).file_name().unwrap());
        let step = (bytes.len() / 120).max(1);
        for cut in (0..bytes.len()).step_by(step) {
            std::fs::write(&path, &bytes[..cut]).unwrap();
            if let Err(e) = read_cloud(&path) {
                assert!(!e.to_string().contains('\n'), "{name} cut at {cut}: {e}");
            }
        }
        let header_end = bytes.len().min(400);
        for at in (0..header_end).step_by(if name.ends_with(".laz") { 3 } else { 1 }) {
            let mut b = bytes.clone();
            b[at] ^= 0xA5;
            std::fs::write(&path, &b).unwrap();
            if let Err(e) = read_cloud(&path) {
                assert!(!e.to_string().contains('\n'), "{name} byte {at}: {e}");
            }
        }
    }
}
