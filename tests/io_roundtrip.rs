//! Writer → reader round trips: values come back bit for bit.

use std::path::Path;

use equiscan::Cloud;
use equiscan::io::{
    Column, LasOptions, npy_header, read_cloud, write_csv, write_las, write_las_with, write_npy,
    write_npy_with_sidecar, write_ply,
};

/// A small deterministic generator (SplitMix64), so failures reproduce.
struct Rng(u64);
impl Rng {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    fn unit(&mut self) -> f64 {
        (self.next() >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// A LAS-like cloud: origin far from zero, millimetre positions, every attribute.
fn sample_cloud(n: usize, seed: u64) -> Cloud {
    let mut rng = Rng(seed);
    let mut c = Cloud::new([638_864.0, 4_853_123.0, 120.0], Vec::new());
    for _ in 0..n {
        // Millimetre steps, as a LAS file with scale 0.001 stores them.
        let p: [f32; 3] =
            std::array::from_fn(|_| ((rng.unit() * 200_000.0).round() - 100_000.0) as f32 / 1000.0);
        c.positions.push(p);
    }
    c.intensity = Some((0..n).map(|_| (rng.next() % 65536) as f32).collect());
    c.color = Some(
        (0..n)
            .map(|_| std::array::from_fn(|_| (rng.next() % 65536) as u16))
            .collect(),
    );
    c.classification = Some((0..n).map(|_| (rng.next() % 12) as u8).collect());
    c.return_number = Some((0..n).map(|_| 1 + (rng.next() % 5) as u8).collect());
    c.gps_time = Some((0..n).map(|_| rng.unit() * 1e6).collect());
    c
}

fn features(n: usize, seed: u64) -> (Vec<f32>, Vec<f32>) {
    let mut rng = Rng(seed);
    let a = (0..n).map(|_| (rng.unit() * 2.0 - 1.0) as f32).collect();
    let b = (0..n)
        .map(|i| {
            if i == 3 {
                f32::NAN
            } else {
                (rng.unit() * 1e-6) as f32
            }
        })
        .collect();
    (a, b)
}

fn same_bits(a: &[f32], b: &[f32]) -> bool {
    a.len() == b.len() && a.iter().zip(b).all(|(x, y)| x.to_bits() == y.to_bits())
}

#[test]
fn ply_round_trip_keeps_every_value() {
    let dir = tempfile::tempdir().unwrap();
    let mut cloud = sample_cloud(1000, 1);
    let mut rng = Rng(9);
    cloud.normals = Some(
        (0..cloud.len())
            .map(|_| std::array::from_fn(|_| rng.unit() as f32))
            .collect(),
    );
    let (a, b) = features(cloud.len(), 2);
    let path = dir.path().join("out.ply");
    write_ply(
        &path,
        &cloud,
        &[Column::new("f_a", &a), Column::new("f_b", &b)],
    )
    .unwrap();
    let (back, info) = read_cloud(&path).unwrap();
    assert_eq!(back, cloud);
    assert_eq!(info.format, "PLY");
    assert_eq!(info.encoding.as_deref(), Some("binary_little_endian"));
    assert_eq!(info.other_fields, vec!["f_a", "f_b"]);
    assert_eq!(info.point_count, 1000);
}

#[test]
fn ply_round_trip_8_bit_colour_and_zero_origin() {
    let dir = tempfile::tempdir().unwrap();
    let mut cloud = Cloud::new([0.0; 3], vec![[0.1, -2.5e-7, 3e4], [1e-30, 0.0, -0.0]]);
    cloud.color = Some(vec![[255, 0, 7], [1, 2, 3]]);
    let path = dir.path().join("small.ply");
    write_ply(&path, &cloud, &[]).unwrap();
    let text = std::fs::read(&path).unwrap();
    assert!(
        text.windows(19).any(|w| w == b"property uchar red\n"),
        "8-bit colour is written as uchar"
    );
    let (back, _) = read_cloud(&path).unwrap();
    assert_eq!(back.positions.len(), 2);
    for (p, q) in back.positions.iter().zip(&cloud.positions) {
        for k in 0..3 {
            assert_eq!(p[k].to_bits(), q[k].to_bits());
        }
    }
    assert_eq!(back.color, cloud.color);
}

fn parse_npy(path: &Path) -> (String, Vec<f32>) {
    let bytes = std::fs::read(path).unwrap();
    assert_eq!(&bytes[..8], b"\x93NUMPY\x01\x00");
    let len = u16::from_le_bytes([bytes[8], bytes[9]]) as usize;
    let dict = String::from_utf8(bytes[10..10 + len].to_vec()).unwrap();
    let data = bytes[10 + len..]
        .chunks_exact(4)
        .map(|c| f32::from_le_bytes(c.try_into().unwrap()))
        .collect();
    (dict, data)
}

#[test]
fn npy_round_trip_and_sidecar() {
    let dir = tempfile::tempdir().unwrap();
    let (a, _) = features(12, 3);
    let path = dir.path().join("m.npy");
    write_npy(&path, 4, 3, &a).unwrap();
    let (dict, data) = parse_npy(&path);
    assert_eq!(
        dict.trim_end(),
        "{'descr': '<f4', 'fortran_order': False, 'shape': (4, 3), }"
    );
    assert!(same_bits(&data, &a));
    assert_eq!((10 + dict.len()) % 64, 0);
    assert_eq!(npy_header(4, 3).len(), 10 + dict.len());

    let path = dir.path().join("feat.npy");
    write_npy_with_sidecar(
        &path,
        6,
        &["p0", "p1"],
        &a,
        serde_json::json!({"support_radius": 0.5}),
    )
    .unwrap();
    let side: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("feat.json")).unwrap())
            .unwrap();
    assert_eq!(side["columns"], serde_json::json!(["p0", "p1"]));
    assert_eq!(side["rows"], 6);
    assert_eq!(side["metadata"]["support_radius"], 0.5);
    assert_eq!(side["file"], "feat.npy");

    // A wrong shape writes nothing.
    let bad = dir.path().join("bad.npy");
    assert!(write_npy(&bad, 5, 3, &a).is_err());
    assert!(!bad.exists());
}

#[test]
fn csv_values_read_back_exactly() {
    let dir = tempfile::tempdir().unwrap();
    let (a, b) = features(50, 4);
    let path = dir.path().join("f.csv");
    write_csv(&path, &[Column::new("a", &a), Column::new("b", &b)]).unwrap();
    let text = std::fs::read_to_string(&path).unwrap();
    let mut lines = text.lines();
    assert_eq!(lines.next(), Some("a,b"));
    let rows: Vec<Vec<f32>> = lines
        .map(|l| l.split(',').map(|t| t.parse::<f32>().unwrap()).collect())
        .collect();
    assert_eq!(rows.len(), 50);
    let ra: Vec<f32> = rows.iter().map(|r| r[0]).collect();
    let rb: Vec<f32> = rows.iter().map(|r| r[1]).collect();
    assert!(same_bits(&ra, &a));
    assert!(rb[3].is_nan());
    assert!(same_bits(&rb[..3], &b[..3]) && same_bits(&rb[4..], &b[4..]));
}

fn las_round_trip(name: &str) {
    let dir = tempfile::tempdir().unwrap();
    let cloud = sample_cloud(3000, 5);
    let (a, b) = features(cloud.len(), 6);
    let path = dir.path().join(name);
    write_las(
        &path,
        &cloud,
        &[Column::new("curv", &a), Column::new("tiny", &b)],
    )
    .unwrap();

    let (back, info) = read_cloud(&path).unwrap();
    assert_eq!(info.point_format, Some(7));
    assert_eq!(info.version, "1.4");
    assert_eq!(info.other_fields, vec!["curv", "tiny"]);
    assert_eq!(back.len(), cloud.len());
    for i in 0..cloud.len() {
        let (g, h) = (back.global(i), cloud.global(i));
        for k in 0..3 {
            assert!((g[k] - h[k]).abs() < 1e-6, "point {i}: {g:?} vs {h:?}");
        }
    }
    assert_eq!(back.intensity, cloud.intensity);
    assert_eq!(back.color, cloud.color);
    assert_eq!(back.classification, cloud.classification);
    assert_eq!(back.return_number, cloud.return_number);
    assert_eq!(back.gps_time, cloud.gps_time);

    // The extra bytes, read through the las crate itself, decode to the same f32s.
    let mut reader = las::Reader::from_path(&path).unwrap();
    assert_eq!(reader.header().point_format().extra_bytes, 8);
    let pts = reader.read_all().unwrap();
    let (mut ra, mut rb) = (Vec::new(), Vec::new());
    for p in pts.points() {
        let p = p.unwrap();
        ra.push(f32::from_le_bytes(p.extra_bytes[0..4].try_into().unwrap()));
        rb.push(f32::from_le_bytes(p.extra_bytes[4..8].try_into().unwrap()));
    }
    assert!(same_bits(&ra, &a));
    assert!(same_bits(&rb, &b));

    // Writing again with the input's layout keeps scale, offset and format.
    let again = dir.path().join(format!("again_{name}"));
    write_las_with(&again, &back, &[], &LasOptions::like(&info)).unwrap();
    let (back2, info2) = read_cloud(&again).unwrap();
    assert_eq!(info2.scale, info.scale);
    assert_eq!(info2.offset, info.offset);
    assert_eq!(info2.point_format, info.point_format);
    assert_eq!(back2.positions, back.positions);
}

#[test]
fn las_round_trip_with_extra_bytes() {
    las_round_trip("out.las");
}

#[test]
fn laz_round_trip_with_extra_bytes() {
    las_round_trip("out.laz");
}
