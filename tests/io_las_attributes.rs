//! Every LAS attribute kept: a file of each point format 0–10 with every field varied and
//! described Extra Bytes (written by the `las` crate's own writer), read by our reader and
//! written by our LAS/LAZ writer with two feature columns added, then decoded by the `las`
//! crate: every field of every point is the same, the input's Extra Bytes come first and ours
//! after them (described in that order), the CRS is kept. Waveform formats (4, 5, 9, 10) are
//! written as the same format without the waveform packet (its data is not copied).

// Coordinates are indexed by axis, as the formulas write them.
#![allow(clippy::needless_range_loop)]

use std::path::Path;

use equiscan::io::{Column, LasOptions, read_cloud, write_las_with};

#[path = "support/las_all_fields.rs"]
#[allow(dead_code)]
mod las_all_fields;
use las_all_fields::{WKT, extra_bytes_vlr, write_format};

fn points(path: &Path) -> (las::Header, Vec<las::Point>) {
    let mut r = las::Reader::from_path(path).unwrap();
    let h = r.header().clone();
    let pd = r.read_all().unwrap();
    (h, pd.points().map(|p| p.unwrap()).collect())
}

#[test]
fn every_field_and_the_extra_bytes_survive_in_every_point_format() {
    let dir = tempfile::tempdir().unwrap();
    for f in 0..=10u8 {
        let src = dir.path().join(format!("f{f}.las"));
        write_format(&src, f, 300);
        let (cloud, info) = read_cloud(&src).unwrap();
        let a: Vec<f32> = (0..cloud.len()).map(|i| i as f32 * 0.5).collect();
        let b: Vec<f32> = (0..cloud.len()).map(|i| -(i as f32)).collect();
        let cols = [Column::new("feat_a", &a), Column::new("feat_b", &b)];
        for ext in ["las", "laz"] {
            let out = dir.path().join(format!("f{f}_out.{ext}"));
            write_las_with(&out, &cloud, &cols, &LasOptions::like(&info)).unwrap();
            let (h0, p0) = points(&src);
            let (h1, p1) = points(&out);
            let ctx = format!("format {f} {ext}");
            let want_format = match f {
                4 => 1,
                5 => 3,
                9 => 6,
                10 => 8,
                f => f,
            };
            assert_eq!(h1.point_format().to_u8().unwrap(), want_format, "{ctx}");
            assert_eq!(h1.point_format().extra_bytes, 10 + 8, "{ctx}");
            assert_eq!(p0.len(), p1.len(), "{ctx}");
            for (i, (x, y)) in p0.iter().zip(&p1).enumerate() {
                let mut want = x.clone();
                want.waveform = None;
                want.extra_bytes.extend_from_slice(&a[i].to_le_bytes());
                want.extra_bytes.extend_from_slice(&b[i].to_le_bytes());
                assert_eq!(&want, y, "{ctx} point {i}");
            }
            // Extra Bytes descriptions: the input's two, then ours.
            let eb: Vec<&las::Vlr> = h1
                .all_vlrs()
                .filter(|v| v.user_id == "LASF_Spec" && v.record_id == 4)
                .collect();
            assert_eq!(eb.len(), 1, "{ctx}");
            assert_eq!(eb[0].data.len(), 4 * 192, "{ctx}");
            assert_eq!(&eb[0].data[..2 * 192], &extra_bytes_vlr().data[..], "{ctx}");
            assert_eq!(&eb[0].data[2 * 192 + 4..2 * 192 + 10], b"feat_a", "{ctx}");
            assert_eq!(&eb[0].data[3 * 192 + 4..3 * 192 + 10], b"feat_b", "{ctx}");
            let wkt = h1.get_wkt_crs_bytes().unwrap();
            assert!(wkt.starts_with(WKT.as_bytes()), "{ctx}");
            assert_eq!(h0.get_wkt_crs_bytes(), h1.get_wkt_crs_bytes(), "{ctx}");
            // Our reader reads its own output back: the input's fields and ours.
            let (_, back) = read_cloud(&out).unwrap();
            assert_eq!(
                back.other_fields,
                ["tree_id", "height_above", "feat_a", "feat_b"],
                "{ctx}"
            );
        }
    }
}

/// A subsample (`Cloud::select`) keeps each point's record; Extra Bytes that the input does not
/// describe are described as undocumented bytes so that our columns stay where their
/// descriptors say.
#[test]
fn subsets_keep_their_records_and_undescribed_bytes_are_padded() {
    let dir = tempfile::tempdir().unwrap();
    let src = dir.path().join("f3.las");
    write_format(&src, 3, 100);
    let (cloud, info) = read_cloud(&src).unwrap();
    let picked: Vec<usize> = (0..cloud.len()).rev().step_by(7).collect();
    let sub = cloud.select(&picked);
    let out = dir.path().join("sub.las");
    write_las_with(&out, &sub, &[], &LasOptions::like(&info)).unwrap();
    let (_, p0) = points(&src);
    let (_, p1) = points(&out);
    for (k, &i) in picked.iter().enumerate() {
        assert_eq!(p0[i], p1[k], "point {i}");
    }

    // The same records with their description removed: 10 undescribed bytes.
    let mut bare = cloud.clone();
    bare.records.as_mut().unwrap().extra_descriptors.clear();
    let vals: Vec<f32> = (0..bare.len()).map(|i| i as f32).collect();
    let out = dir.path().join("bare.las");
    write_las_with(
        &out,
        &bare,
        &[Column::new("v", &vals)],
        &LasOptions::like(&info),
    )
    .unwrap();
    let (h, p) = points(&out);
    let eb = h
        .all_vlrs()
        .find(|v| v.user_id == "LASF_Spec" && v.record_id == 4)
        .unwrap();
    assert_eq!(eb.data.len(), 2 * 192);
    assert_eq!(
        (eb.data[2], eb.data[3]),
        (0, 10),
        "type 0 (undocumented), 10 bytes"
    );
    assert_eq!(&eb.data[192 + 4..192 + 5], b"v");
    for (i, q) in p.iter().enumerate() {
        assert_eq!(&q.extra_bytes[..10], &p0[i].extra_bytes[..], "{i}");
        assert_eq!(&q.extra_bytes[10..], &vals[i].to_le_bytes(), "{i}");
    }
    let (_, back) = read_cloud(&out).unwrap();
    assert!(back.other_fields.contains(&"v".to_string()));
}

/// Into another point format family (3 → 7, 6 → 1): every field both formats hold is kept
/// (the scan angle within one step of the coarser encoding: whole degrees in formats 0–5,
/// 0.006° in 6–10; classes above 31, which formats 0–5 cannot hold, are not compared), the
/// Extra Bytes first as before.
#[test]
fn another_point_format_keeps_the_shared_fields() {
    let dir = tempfile::tempdir().unwrap();
    for (from, to) in [(3u8, 7u8), (6, 1)] {
        let src = dir.path().join(format!("f{from}.las"));
        write_format(&src, from, 200);
        let (cloud, info) = read_cloud(&src).unwrap();
        let mut options = LasOptions::like(&info);
        options.point_format = Some(to);
        let out = dir.path().join(format!("f{from}_to_{to}.las"));
        write_las_with(&out, &cloud, &[], &options).unwrap();
        let (_, p0) = points(&src);
        let (h, p1) = points(&out);
        assert_eq!(h.point_format().to_u8().unwrap(), to);
        for (i, (a, b)) in p0.iter().zip(&p1).enumerate() {
            let ctx = format!("{from} → {to} point {i}");
            assert_eq!((a.x, a.y, a.z), (b.x, b.y, b.z), "{ctx}");
            assert_eq!(a.intensity, b.intensity, "{ctx}");
            // Formats 0–5 hold classes 0–31 and mark overlap with class 12.
            let code = u8::from(a.classification);
            if to == 7 || (code <= 31 && !a.is_overlap) {
                assert_eq!(a.classification, b.classification, "{ctx}");
            }
            // The `las` crate reads the 5-bit class of formats 0–5 through 4 bits when it looks
            // for overlap (class 12), so it also calls class 28 overlap; ours keeps 28.
            let overlap = |p: &las::Point, legacy: bool| {
                p.is_overlap && !(legacy && u8::from(p.classification) == 28)
            };
            assert_eq!(overlap(a, from < 6), overlap(b, to < 6), "{ctx}");
            assert_eq!(
                (a.is_synthetic, a.is_key_point, a.is_withheld),
                (b.is_synthetic, b.is_key_point, b.is_withheld),
                "{ctx}"
            );
            assert_eq!(
                (a.scan_direction, a.is_edge_of_flight_line),
                (b.scan_direction, b.is_edge_of_flight_line),
                "{ctx}"
            );
            assert_eq!(
                (a.user_data, a.point_source_id),
                (b.user_data, b.point_source_id),
                "{ctx}"
            );
            assert_eq!(a.gps_time, b.gps_time, "{ctx}");
            assert_eq!(a.extra_bytes, b.extra_bytes, "{ctx}");
            if to == 7 {
                assert_eq!(a.color, b.color, "{ctx}");
                assert_eq!(
                    (a.return_number, a.number_of_returns),
                    (b.return_number, b.number_of_returns),
                    "{ctx}"
                );
            }
            assert!(
                (a.scan_angle - b.scan_angle).abs() <= 1.0,
                "{ctx}: {} vs {}",
                a.scan_angle,
                b.scan_angle
            );
        }
    }
}
