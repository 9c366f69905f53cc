//! Tiles cut from a cloud on a grid in x and y, for the batch tests (and the example
//! `cut_tiles`, which includes this file).

#![allow(dead_code)]

use std::path::{Path, PathBuf};

use equiscan::Cloud;
use equiscan::io::write_las;

/// The tile (column, row) of each point of `cloud` on a `cols` × `rows` grid over its x/y
/// bounds (the last column and row take the upper edge).
pub fn cells(cloud: &Cloud, cols: usize, rows: usize) -> Vec<(usize, usize)> {
    let (lo, hi) = cloud.local_bounds().expect("a cloud with points");
    let at = |v: f32, k: usize, n: usize| -> usize {
        let t = ((v - lo[k]) / (hi[k] - lo[k]).max(f32::MIN_POSITIVE)) * n as f32;
        (t.max(0.0) as usize).min(n - 1)
    };
    cloud
        .positions
        .iter()
        .map(|p| (at(p[0], 0, cols), at(p[1], 1, rows)))
        .collect()
}

/// The points of `cloud` at `idx`, attributes kept.
pub fn subset(cloud: &Cloud, idx: &[usize]) -> Cloud {
    let mut c = Cloud::new(
        cloud.origin,
        idx.iter().map(|&i| cloud.positions[i]).collect(),
    );
    c.intensity = cloud
        .intensity
        .as_ref()
        .map(|v| idx.iter().map(|&i| v[i]).collect());
    c.color = cloud
        .color
        .as_ref()
        .map(|v| idx.iter().map(|&i| v[i]).collect());
    c.normals = cloud
        .normals
        .as_ref()
        .map(|v| idx.iter().map(|&i| v[i]).collect());
    c.classification = cloud
        .classification
        .as_ref()
        .map(|v| idx.iter().map(|&i| v[i]).collect());
    c.return_number = cloud
        .return_number
        .as_ref()
        .map(|v| idx.iter().map(|&i| v[i]).collect());
    c.gps_time = cloud
        .gps_time
        .as_ref()
        .map(|v| idx.iter().map(|&i| v[i]).collect());
    c
}

/// Writes `cloud` cut on a `cols` × `rows` grid as `dir/tile_C_R.EXT` (LAS, or LAZ for
/// `ext = "laz"`), points in input order within each tile; empty cells are not written.
/// Returns the files and, for each, the input indices of its points.
pub fn cut(
    cloud: &Cloud,
    cols: usize,
    rows: usize,
    dir: &Path,
    ext: &str,
) -> Vec<(PathBuf, Vec<usize>)> {
    let cell = cells(cloud, cols, rows);
    let mut out = Vec::new();
    for r in 0..rows {
        for c in 0..cols {
            let idx: Vec<usize> = (0..cloud.len()).filter(|&i| cell[i] == (c, r)).collect();
            if idx.is_empty() {
                continue;
            }
            let path = dir.join(format!("tile_{c}_{r}.{ext}"));
            write_las(&path, &subset(cloud, &idx), &[]).expect("tile written");
            out.push((path, idx));
        }
    }
    out
}
