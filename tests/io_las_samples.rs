//! The LAS/LAZ sample files shipped with the `las` crate (MIT licence; see
//! tests/data/README.md), read by our reader and checked against (a) their own headers and
//! (b) values computed independently by laspy (PyPI), stored in
//! tests/data/las/laspy_reference.json by tools/fixtures/las_fixtures.py.

use std::path::{Path, PathBuf};

use equiscan::io::read_cloud;
use serde_json::Value;

fn data(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/las")
        .join(name)
}

fn reference() -> Value {
    let text = std::fs::read_to_string(data("laspy_reference.json")).unwrap();
    serde_json::from_str(&text).unwrap()
}

fn v3(v: &Value) -> [f64; 3] {
    std::array::from_fn(|k| v[k].as_f64().unwrap())
}

#[test]
fn sample_files_match_laspy() {
    let doc = reference();
    let files = doc["files"].as_object().unwrap();
    assert!(files.len() >= 4, "reference covers the sample files");
    for (name, r) in files {
        let (cloud, info) = read_cloud(&data(name)).unwrap();
        let ctx = format!("{name} (laspy {})", doc["laspy_version"]);
        // Counts: header, laspy and the points actually read agree.
        assert_eq!(
            info.point_count,
            r["header_point_count"].as_u64().unwrap(),
            "{ctx}"
        );
        assert_eq!(cloud.len() as u64, r["count"].as_u64().unwrap(), "{ctx}");
        assert_eq!(info.version, r["version"].as_str().unwrap(), "{ctx}");
        assert_eq!(
            info.point_format.unwrap() as u64,
            r["point_format"].as_u64().unwrap(),
            "{ctx}"
        );
        assert_eq!(info.scale.unwrap(), v3(&r["scale"]), "{ctx}");
        assert_eq!(info.offset.unwrap(), v3(&r["offset"]), "{ctx}");
        let hb = info.header_bounds.unwrap();
        // laspy may print a header bound one f64 step away from the stored bytes (extrabytes.laz
        // stores 406.59000000000003 as min z, laspy gives 406.59): compare to 1e-12 relative.
        for k in 0..3 {
            for (got, want) in [
                (hb.min[k], &r["header_min"][k]),
                (hb.max[k], &r["header_max"][k]),
            ] {
                let want = want.as_f64().unwrap();
                assert!(
                    (got - want).abs() <= 1e-12 * want.abs().max(1.0),
                    "{ctx}: {got} vs {want}"
                );
            }
        }
        assert_eq!(
            info.format,
            if name.ends_with(".laz") { "LAZ" } else { "LAS" }
        );

        // Bounds of the points read: f64 origin + f32 offsets, so each coordinate must be
        // within one f32 step (at the offset's magnitude) of laspy's f64 coordinate.
        let (lo, hi) = cloud.global_bounds().unwrap();
        let (rlo, rhi) = (v3(&r["min"]), v3(&r["max"]));
        let first = cloud.global(0);
        let rfirst = v3(&r["first_point"]);
        let o = cloud.origin;
        let close = |got: f64, want: f64, k: usize| {
            let step = ((want - o[k]).abs() as f32).max(1.0) * f32::EPSILON;
            (got - want).abs() <= step as f64
        };
        for k in 0..3 {
            assert!(close(lo[k], rlo[k], k), "{ctx}: min {lo:?} vs {rlo:?}");
            assert!(close(hi[k], rhi[k], k), "{ctx}: max {hi:?} vs {rhi:?}");
            assert!(
                close(first[k], rfirst[k], k),
                "{ctx}: first {first:?} vs {rfirst:?}"
            );
        }
        // Attributes.
        let it = cloud.intensity.as_ref().unwrap();
        let mean = it.iter().map(|&v| v as f64).sum::<f64>() / it.len() as f64;
        let rmean = r["mean_intensity"].as_f64().unwrap();
        assert!(
            (mean - rmean).abs() <= 1e-9 * rmean.abs().max(1.0),
            "{ctx}: {mean} vs {rmean}"
        );
        if let Some(rred) = r.get("mean_red").and_then(Value::as_f64) {
            let c = cloud.color.as_ref().expect("colour present");
            let mean = c.iter().map(|v| v[0] as f64).sum::<f64>() / c.len() as f64;
            assert!(
                (mean - rred).abs() <= 1e-9 * rred.max(1.0),
                "{ctx}: red {mean} vs {rred}"
            );
        } else {
            assert!(cloud.color.is_none(), "{ctx}");
        }
        if let Some(rg) = r.get("mean_gps_time").and_then(Value::as_f64) {
            let g = cloud.gps_time.as_ref().expect("gps time present");
            let mean = g.iter().sum::<f64>() / g.len() as f64;
            assert!(
                (mean - rg).abs() <= 1e-9 * rg.abs().max(1.0),
                "{ctx}: gps {mean} vs {rg}"
            );
        } else {
            assert!(cloud.gps_time.is_none(), "{ctx}");
        }
        let names: Vec<String> = r["extra_bytes"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_str().unwrap().to_string())
            .collect();
        if !names.is_empty() {
            assert_eq!(info.other_fields, names, "{ctx}");
        }
    }
}

#[test]
fn las_and_laz_of_the_same_data_read_alike() {
    let (a, ia) = read_cloud(&data("autzen.las")).unwrap();
    let (b, ib) = read_cloud(&data("autzen.laz")).unwrap();
    assert_eq!(ia.format, "LAS");
    assert_eq!(ib.format, "LAZ");
    assert_eq!(a.origin, b.origin);
    assert_eq!(a.positions, b.positions);
    assert_eq!(a.intensity, b.intensity);
}

#[test]
fn format_is_recognised_by_content_not_extension() {
    let dir = tempfile::tempdir().unwrap();
    let renamed = dir.path().join("points.dat");
    std::fs::copy(data("autzen.laz"), &renamed).unwrap();
    let (c, info) = read_cloud(&renamed).unwrap();
    assert_eq!(info.format, "LAZ");
    assert_eq!(c.len(), 106);
}

#[test]
fn crs_is_reported_and_copied_by_the_writer() {
    // GeoTIFF keys (key ids from the GeoTIFF specification: 1024 model type, 3072 projected
    // CRS); autzen is in EPSG 2994.
    let (cloud, info) = read_cloud(&data("autzen.las")).unwrap();
    let crs = info.crs.clone().unwrap();
    assert!(crs.starts_with("GeoTIFF keys 1024=1,"), "{crs}");
    assert!(crs.contains("3072=2994"), "{crs}");
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("copy.las");
    equiscan::io::write_las_with(&out, &cloud, &[], &equiscan::io::LasOptions::like(&info))
        .unwrap();
    let (_, info2) = read_cloud(&out).unwrap();
    assert_eq!(info2.crs, info.crs);

    // WKT, as LAS 1.4 stores it (LASF_Projection record 2112), written by the las crate.
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
    let path = dir.path().join("wkt.las");
    std::fs::write(&path, w.into_inner().unwrap().into_inner()).unwrap();
    let (_, info) = read_cloud(&path).unwrap();
    assert_eq!(info.crs.as_deref(), Some(wkt));
}

#[test]
fn bounds_missing_from_the_header_fall_back_to_the_first_point() {
    // Header bounds at bytes 179..227 (LAS 1.4 R15, Table 3) set to NaN, or to zero: the
    // origin then comes from the first point, and offsets keep their precision.
    let mut bytes = std::fs::read(data("autzen.las")).unwrap();
    for k in 0..6 {
        bytes[179 + 8 * k..187 + 8 * k].copy_from_slice(&f64::NAN.to_le_bytes());
    }
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("nobounds.las");
    std::fs::write(&path, &bytes).unwrap();
    let (good, _) = read_cloud(&data("autzen.las")).unwrap();
    let first = good.global(0);
    // Wrong but finite bounds (all zero) are caught too: the first point is not inside them.
    let mut zero = bytes.clone();
    for k in 0..6 {
        zero[179 + 8 * k..187 + 8 * k].copy_from_slice(&0.0f64.to_le_bytes());
    }
    let zero_path = dir.path().join("zerobounds.las");
    std::fs::write(&zero_path, &zero).unwrap();
    for p in [&path, &zero_path] {
        let (cloud, _) = read_cloud(p).unwrap();
        assert_eq!(cloud.origin, first.map(f64::round));
        for i in 0..good.len() {
            let (a, b) = (cloud.global(i), good.global(i));
            for k in 0..3 {
                assert!((a[k] - b[k]).abs() < 1e-3, "point {i}: {a:?} vs {b:?}");
            }
        }
    }
}
