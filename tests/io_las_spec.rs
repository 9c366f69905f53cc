//! Our LAS writer's bytes checked at the offsets given by the ASPRS LAS 1.4 specification
//! (R15): public header block (Table 3), variable length record header (Table 13), point data
//! record format 6/7 (Tables 14–15) and the Extra Bytes descriptor (Table 24).

use equiscan::Cloud;
use equiscan::io::{Column, write_las};

fn u16_at(b: &[u8], o: usize) -> u16 {
    u16::from_le_bytes([b[o], b[o + 1]])
}
fn u32_at(b: &[u8], o: usize) -> u32 {
    u32::from_le_bytes(b[o..o + 4].try_into().unwrap())
}
fn u64_at(b: &[u8], o: usize) -> u64 {
    u64::from_le_bytes(b[o..o + 8].try_into().unwrap())
}
fn f64_at(b: &[u8], o: usize) -> f64 {
    f64::from_le_bytes(b[o..o + 8].try_into().unwrap())
}
fn f32_at(b: &[u8], o: usize) -> f32 {
    f32::from_le_bytes(b[o..o + 4].try_into().unwrap())
}
fn i32_at(b: &[u8], o: usize) -> i32 {
    i32::from_le_bytes(b[o..o + 4].try_into().unwrap())
}
fn text(b: &[u8]) -> &str {
    let end = b.iter().position(|&c| c == 0).unwrap_or(b.len());
    std::str::from_utf8(&b[..end]).unwrap()
}

#[test]
fn header_vlr_and_records_sit_at_the_spec_offsets() {
    let dir = tempfile::tempdir().unwrap();
    let mut cloud = Cloud::new(
        [500_000.0, 5_000_000.0, 100.0],
        vec![[1.5, -2.25, 0.125], [-3.0, 4.0, 7.5], [0.0, 0.0, 0.0]],
    );
    cloud.intensity = Some(vec![10.0, 20.0, 30.0]);
    let a = [0.5f32, -1.25, 3.0];
    let b = [f32::MAX, 0.0, -7.0];
    let path = dir.path().join("spec.las");
    write_las(
        &path,
        &cloud,
        &[Column::new("curvature", &a), Column::new("p2", &b)],
    )
    .unwrap();
    let f = std::fs::read(&path).unwrap();

    // Public header block, Table 3.
    assert_eq!(&f[0..4], b"LASF", "file signature");
    assert_eq!((f[24], f[25]), (1, 4), "version major, minor");
    assert_eq!(u16_at(&f, 94), 375, "header size of LAS 1.4");
    let offset_to_points = u32_at(&f, 96) as usize;
    assert_eq!(u32_at(&f, 100), 1, "number of VLRs");
    assert_eq!(f[104], 6, "point data record format (no colour)");
    assert_eq!(
        u16_at(&f, 105),
        30 + 8,
        "record length: format 6 + two f32 extra bytes"
    );
    assert_eq!(
        u32_at(&f, 107),
        0,
        "legacy point count is 0 for formats 6-10"
    );
    for k in 0..3 {
        assert_eq!(f64_at(&f, 131 + 8 * k), 0.001, "scale {k}");
        assert_eq!(f64_at(&f, 155 + 8 * k), cloud.origin[k], "offset {k}");
    }
    // Bounds: max x, min x, max y, min y, max z, min z.
    let bounds: Vec<f64> = (0..6).map(|k| f64_at(&f, 179 + 8 * k)).collect();
    assert_eq!(
        bounds,
        vec![
            500_001.5,
            499_997.0,
            5_000_004.0,
            4_999_997.75,
            107.5,
            100.0
        ]
    );
    assert_eq!(u64_at(&f, 247), 3, "LAS 1.4 number of point records");
    assert_eq!(u64_at(&f, 255), 3, "points by return: all first returns");

    // VLR header, Table 13, right after the 375-byte header.
    let v = 375;
    assert_eq!(text(&f[v + 2..v + 18]), "LASF_Spec", "user id");
    assert_eq!(u16_at(&f, v + 18), 4, "record id of Extra Bytes");
    let len = u16_at(&f, v + 20) as usize;
    assert_eq!(len, 2 * 192, "two 192-byte descriptors");
    let data = &f[v + 54..v + 54 + len];
    assert_eq!(v + 54 + len, offset_to_points, "point data follows the VLR");

    // Extra Bytes descriptors, Table 24.
    for (i, (name, col)) in [("curvature", &a), ("p2", &b)].iter().enumerate() {
        let d = &data[i * 192..(i + 1) * 192];
        assert_eq!(&d[0..2], &[0, 0], "reserved");
        assert_eq!(d[2], 9, "data type 9 = float");
        assert_eq!(d[3], 0b110, "options: min and max valid");
        assert_eq!(text(&d[4..36]), *name);
        let lo = col.iter().cloned().fold(f32::INFINITY, f32::min) as f64;
        let hi = col.iter().cloned().fold(f32::NEG_INFINITY, f32::max) as f64;
        assert_eq!(f64_at(d, 64), lo, "min");
        assert_eq!(f64_at(d, 88), hi, "max");
    }

    // Point records, format 6 (Table 14): x y z i32, intensity u16 at 12, return byte at 14,
    // classification at 16, GPS time f64 at 22; extra bytes after the 30 standard bytes.
    for i in 0..3 {
        let r = &f[offset_to_points + i * 38..offset_to_points + (i + 1) * 38];
        for k in 0..3 {
            let stored = i32_at(r, 4 * k) as f64 * 0.001 + cloud.origin[k];
            assert_eq!(stored, cloud.global(i)[k], "point {i} axis {k}");
        }
        assert_eq!(u16_at(r, 12) as f32, cloud.intensity.as_ref().unwrap()[i]);
        assert_eq!(r[14] & 0x0F, 1, "return number");
        assert_eq!(f32_at(r, 30).to_bits(), a[i].to_bits());
        assert_eq!(f32_at(r, 34).to_bits(), b[i].to_bits());
    }
    assert_eq!(f.len(), offset_to_points + 3 * 38);
}

#[test]
fn laz_output_sets_the_compression_bit() {
    let dir = tempfile::tempdir().unwrap();
    let mut cloud = Cloud::new([0.0; 3], vec![[1.0, 2.0, 3.0]]);
    cloud.color = Some(vec![[1, 2, 3]]);
    let path = dir.path().join("c.laz");
    write_las(&path, &cloud, &[]).unwrap();
    let f = std::fs::read(&path).unwrap();
    assert_eq!(f[104] & 0x3F, 7, "format 7 with colour");
    assert_ne!(f[104] & 0x80, 0, "bit 7: LASzip compression");
}

/// The cloud and columns behind tests/data/las/equiscan_extra_bytes.las.
fn golden() -> (Cloud, Vec<f32>, Vec<f32>) {
    let n = 10;
    let mut c = Cloud::new(
        [512_300.0, 6_210_800.0, 40.0],
        (0..n)
            .map(|i| [i as f32 * 0.25, -(i as f32) * 0.5, i as f32 * 0.125])
            .collect(),
    );
    c.intensity = Some((0..n).map(|i| (i * 100) as f32).collect());
    c.color = Some((0..n).map(|i| [i as u16, 1000, 65535]).collect());
    c.classification = Some((0..n).map(|i| (i % 3) as u8).collect());
    c.return_number = Some(vec![1; n]);
    c.gps_time = Some((0..n).map(|i| 1.0e5 + i as f64).collect());
    let a = (0..n).map(|i| (i as f32 - 4.5) / 3.0).collect();
    let b = (0..n).map(|i| 1.0e-3 * (i * i) as f32).collect();
    (c, a, b)
}

/// Our writer's output is byte-for-byte the committed file, and laspy (PyPI) decodes that
/// file's Extra Bytes to exactly our f32 values (tests/data/las/laspy_reference.json, made by
/// tools/fixtures/las_fixtures.py). Set EQUISCAN_BLESS=1 to rewrite the committed file after a
/// deliberate format change, then rerun the fixture script.
#[test]
fn written_file_matches_the_committed_one_and_laspy_reads_its_extra_bytes() {
    let (cloud, a, b) = golden();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("golden.las");
    write_las(
        &path,
        &cloud,
        &[Column::new("curvature", &a), Column::new("linearity", &b)],
    )
    .unwrap();
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/las");
    let committed = root.join("equiscan_extra_bytes.las");
    if std::env::var_os("EQUISCAN_BLESS").is_some() {
        std::fs::copy(&path, &committed).unwrap();
    }
    assert!(
        std::fs::read(&path).unwrap() == std::fs::read(&committed).unwrap(),
        "the LAS writer's bytes changed"
    );
    let doc: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(root.join("laspy_reference.json")).unwrap())
            .unwrap();
    let r = &doc["files"]["equiscan_extra_bytes.las"];
    assert_eq!(
        r["extra_bytes"],
        serde_json::json!(["curvature", "linearity"])
    );
    for (name, col) in [("curvature", &a), ("linearity", &b)] {
        let got: Vec<f32> = r["extra_values"][name]["all"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap() as f32)
            .collect();
        assert_eq!(got.len(), col.len());
        for (g, w) in got.iter().zip(col.iter()) {
            assert_eq!(g.to_bits(), w.to_bits(), "{name}: laspy {g} vs ours {w}");
        }
    }
    assert_eq!(r["point_format"], 7);
    assert_eq!(r["count"], 10);
}
