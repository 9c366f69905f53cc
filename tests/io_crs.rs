//! The input's coordinate reference system carried into every output that can hold it: the
//! NPY/CSV sidecar (text and units), LAS/LAZ outputs (a LAS input's records; an E57 input's
//! WKT as a LAS WKT record, read back by the `las` crate), and the registration context
//! (TARGET's CRS, a warning when the inputs' CRSs differ). Sources: autzen.las of the `las`
//! crate's test data (GeoTIFF keys, EPSG 2994 in international feet, unit code 9002; EPSG unit
//! codes from memory) and the pye57-written E57 (a WKT in metres).

// Coordinates are indexed by axis, as the formulas write them.
#![allow(clippy::needless_range_loop)]

use std::path::{Path, PathBuf};
use std::process::Command;

use equiscan::align::report::{RunContext, Units};
use equiscan::io::read_cloud;

fn data(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data")
        .join(rel)
}

fn features(args: &[&str]) {
    let out = Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .arg("features")
        .args(args)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{out:?}");
}

#[test]
fn sidecars_carry_the_crs_and_its_units() {
    let dir = tempfile::tempdir().unwrap();
    let (_, info) = read_cloud(&data("las/autzen.las")).unwrap();
    let crs = info.crs.clone().unwrap();
    for ext in ["npy", "csv"] {
        let out = dir.path().join(format!("f.{ext}"));
        features(&[
            data("las/autzen.las").to_str().unwrap(),
            "-r",
            "200",
            "-o",
            out.to_str().unwrap(),
            "-q",
        ]);
        let side = equiscan::descriptor::output::verify(&dir.path().join(format!("f.{ext}.json")))
            .unwrap();
        assert_eq!(side.metadata.crs.as_deref(), Some(crs.as_str()), "{ext}");
        assert_eq!(side.metadata.units.as_deref(), Some("ft"), "{ext}");
    }
    // No CRS: both fields left out of the JSON.
    let (_, e57) = read_cloud(&data("e57/two_scans.e57")).unwrap();
    assert!(e57.crs.is_some());
    let ply = dir.path().join("plain.ply");
    let (c, _) = read_cloud(&data("e57/two_scans.e57")).unwrap();
    equiscan::io::write_ply(&ply, &c, &[]).unwrap();
    let out = dir.path().join("plain.npy");
    features(&[
        ply.to_str().unwrap(),
        "-r",
        "1",
        "-o",
        out.to_str().unwrap(),
        "-q",
    ]);
    let text = std::fs::read_to_string(dir.path().join("plain.npy.json")).unwrap();
    assert!(
        !text.contains("\"crs\"") && !text.contains("\"units\""),
        "{text}"
    );
}

#[test]
fn an_e57_wkt_becomes_the_las_wkt_record() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("f.las");
    let input = format!("{}#0", data("e57/two_scans.e57").display());
    features(&[&input, "-r", "1", "-o", out.to_str().unwrap(), "-q"]);
    let r = las::Reader::from_path(&out).unwrap();
    let h = r.header();
    let (_, info) = read_cloud(Path::new(&input)).unwrap();
    let wkt = h.get_wkt_crs_bytes().expect("a WKT record");
    let end = wkt.iter().position(|&b| b == 0).unwrap_or(wkt.len());
    assert_eq!(std::str::from_utf8(&wkt[..end]).unwrap(), info.crs.unwrap());
    assert!(
        h.has_wkt_crs(),
        "global encoding WKT bit (LAS 1.4 R15, Table 4)"
    );
    // Read back by our reader: the same CRS text.
    let (_, back) = read_cloud(&out).unwrap();
    assert!(back.crs.unwrap().contains("ETRS89 / UTM zone 32N"));
}

#[test]
fn registration_takes_targets_crs_and_warns_on_mixed_systems() {
    let (a, ia) = read_cloud(&data("las/autzen.las")).unwrap();
    let (b, ib) = read_cloud(&data("e57/two_scans.e57")).unwrap();
    let (pa, pb) = (data("las/autzen.las"), data("e57/two_scans.e57"));
    let ctx = RunContext::new(1, false, false, None, &[(&pa, &a, &ia), (&pb, &b, &ib)]);
    assert_eq!(ctx.crs, ib.crs, "TARGET's CRS");
    let w = ctx.crs_warning.expect("different systems");
    assert!(
        w.contains("autzen.las: NAD83(HARN) / Oregon Lambert (ft) (EPSG 2994, GeoTIFF keys)")
            || w.contains("EPSG 2994"),
        "{w}"
    );
    assert!(w.contains("ETRS89 / UTM zone 32N (EPSG 25832)"), "{w}");
    // Units from the first CRS naming one: SOURCE's feet.
    assert_eq!(ctx.units, Units::Foot);
    // The same system twice: no warning.
    let ctx = RunContext::new(1, false, false, None, &[(&pa, &a, &ia), (&pa, &a, &ia)]);
    assert!(ctx.crs_warning.is_none());
    assert_eq!(Units::from_crs(ib.crs.as_deref().unwrap()), Units::Metre);
}
