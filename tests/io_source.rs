//! The point source: header first, then chunks that, joined in order, equal `read_cloud`'s
//! cloud, for every point-cloud file in tests/data and chunk sizes from 1 point up.

use std::path::{Path, PathBuf};

use equiscan::Cloud;
use equiscan::io::{PointSource, read_cloud};

fn data_files() -> Vec<PathBuf> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data");
    let mut out = Vec::new();
    for dir in ["las", "ply", "bunny"] {
        for e in std::fs::read_dir(root.join(dir)).unwrap() {
            let p = e.unwrap().path();
            let ext = p.extension().and_then(|e| e.to_str()).unwrap_or("");
            if ["las", "laz", "ply"].contains(&ext) {
                out.push(p);
            }
        }
    }
    out.sort();
    out
}

/// Appends `b` to `a` (same attributes).
fn append(a: &mut Cloud, b: Cloud) {
    assert_eq!(a.origin, b.origin, "every chunk has the cloud's origin");
    a.positions.extend(b.positions);
    fn cat<T>(x: &mut Option<Vec<T>>, y: Option<Vec<T>>) {
        assert_eq!(x.is_some(), y.is_some());
        if let (Some(x), Some(y)) = (x.as_mut(), y) {
            x.extend(y);
        }
    }
    cat(&mut a.intensity, b.intensity);
    cat(&mut a.color, b.color);
    cat(&mut a.normals, b.normals);
    cat(&mut a.classification, b.classification);
    cat(&mut a.return_number, b.return_number);
    cat(&mut a.gps_time, b.gps_time);
    assert_eq!(a.records.is_some(), b.records.is_some());
    if let (Some(x), Some(y)) = (a.records.as_mut(), b.records) {
        x.bytes.extend(y.bytes);
    }
}

#[test]
fn chunks_joined_equal_read_cloud_for_every_test_file() {
    let files = data_files();
    assert!(files.len() >= 12, "{files:?}");
    for path in &files {
        let (whole, info) = read_cloud(path).unwrap();
        for chunk in [1usize, 7, 1000, 1 << 20] {
            let mut src = PointSource::open(path).unwrap();
            // The header comes first, before any point is read.
            assert_eq!(src.info(), &info, "{}", path.display());
            assert_eq!(src.remaining(), info.point_count);
            let mut joined: Option<Cloud> = None;
            let mut chunks = 0;
            while let Some(c) = src.next_chunk(chunk).unwrap() {
                assert!(!c.is_empty() && c.len() <= chunk);
                c.validate().unwrap();
                chunks += 1;
                match joined.as_mut() {
                    None => joined = Some(c),
                    Some(j) => append(j, c),
                }
            }
            assert_eq!(src.remaining(), 0);
            assert_eq!(chunks, whole.len().div_ceil(chunk), "{}", path.display());
            let joined = joined.unwrap_or_else(|| src.empty_cloud(0));
            assert_eq!(joined, whole, "{} in chunks of {chunk}", path.display());
        }
    }
}

#[test]
fn read_into_appends_to_one_growing_cloud() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/las/autzen.laz");
    let (whole, _) = read_cloud(&path).unwrap();
    let mut src = PointSource::open(&path).unwrap();
    let mut cloud = src.empty_cloud(10);
    let mut sizes = Vec::new();
    loop {
        let n = src.read_into(&mut cloud, 30).unwrap();
        if n == 0 {
            break;
        }
        sizes.push(n);
    }
    assert_eq!(sizes, vec![30, 30, 30, 16]);
    assert_eq!(cloud, whole);
}
