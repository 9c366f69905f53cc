//! Tiles cut from a cloud on a grid in x and y, for the batch tests (and the example
//! `cut_tiles`, which includes this file).

#![allow(dead_code)]

use std::path::{Path, PathBuf};

use equiscan::Cloud;
use equiscan::io::write_las;

/// The tile (column, row) of each point of `cloud` on a `cols` × `rows` grid whose lines are
/// quantiles of x and of y (so columns, and rows, hold about as many points each).
pub fn cells(cloud: &Cloud, cols: usize, rows: usize) -> Vec<(usize, usize)> {
    let cuts = |k: usize, n: usize| -> Vec<f32> {
        let mut v: Vec<f32> = cloud.positions.iter().map(|p| p[k]).collect();
        v.sort_by(f32::total_cmp);
        (1..n).map(|q| v[q * v.len() / n]).collect()
    };
    let (cx, cy) = (cuts(0, cols), cuts(1, rows));
    let at = |v: f32, cuts: &[f32]| cuts.iter().filter(|&&c| v >= c).count();
    cloud
        .positions
        .iter()
        .map(|p| (at(p[0], &cx), at(p[1], &cy)))
        .collect()
}

/// Every `step`-th point of `cloud` (attributes kept).
pub fn thin(cloud: &Cloud, step: usize) -> Cloud {
    let idx: Vec<usize> = (0..cloud.len()).step_by(step).collect();
    subset(cloud, &idx)
}

/// Reads an NPY float32 matrix written by equiscan: (rows, cols, values).
pub fn read_npy(path: &Path) -> (usize, usize, Vec<f32>) {
    let b = std::fs::read(path).expect("npy");
    let hl = u16::from_le_bytes([b[8], b[9]]) as usize;
    let head = std::str::from_utf8(&b[10..10 + hl]).expect("header");
    let shape = &head[head.find("'shape': (").expect("shape") + 10..];
    let shape = &shape[..shape.find(')').expect("shape end")];
    let dims: Vec<usize> = shape
        .split(',')
        .filter(|s| !s.trim().is_empty())
        .map(|s| s.trim().parse().expect("dim"))
        .collect();
    let vals = b[10 + hl..]
        .chunks_exact(4)
        .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
        .collect();
    (dims[0], dims[1], vals)
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
