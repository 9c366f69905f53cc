//! A scan prepared for identification and registration: samples at two densities, the noise
//! level, its size and its whole-shape signature sample.
//!
//! Conventions: file units; local f32 positions about the scan cloud's origin; samples are
//! chosen deterministically (voxel grid, then a fixed stride), so the same scan gives the same
//! samples whatever the thread count.

use nalgebra::{Matrix3, SymmetricEigen, Vector3};

use crate::cloud::Cloud;
use crate::error::{Error, Result};
use crate::geometry::vec3;
use crate::spatial::{KdIndex, estimate_spacing_with, voxel_downsample};

/// Points of the coarse sample (global pose search).
pub const COARSE_POINTS: usize = 300;
/// Points of the fine sample (refinement, fit figures, evidence).
pub const FINE_POINTS: usize = 3000;
/// Most points of the dense sample (absence evidence, [`super::absence`]).
pub const DENSE_POINTS: usize = 30_000;
/// Fewest points a scan must have.
pub const MIN_POINTS: usize = 50;

/// A scan with its samples (module docs).
#[derive(Debug, Clone)]
pub struct PreparedScan {
    /// Global coordinate of the local frame's zero.
    pub origin: [f64; 3],
    /// Coarse sample, local.
    pub coarse: Vec<[f32; 3]>,
    /// Fine sample, local.
    pub fine: Vec<[f32; 3]>,
    /// Dense sample (voxel of diagonal / 1000 or half the spacing, at most [`DENSE_POINTS`]), local: where the scan
    /// saw surface, for absence evidence.
    pub dense: Vec<[f32; 3]>,
    /// Estimated noise σ along the surface normal (median local plane residual), file units.
    pub noise: f64,
    /// Median nearest-neighbour spacing of the scan.
    pub spacing: f64,
    /// Largest distance between two points of the fine sample.
    pub diameter: f64,
    /// Centroid of the fine sample (local).
    pub centroid: Vector3<f64>,
}

fn take_stride(points: &[[f32; 3]], keep: &[usize], most: usize) -> Vec<[f32; 3]> {
    let step = keep.len().div_ceil(most).max(1);
    keep.iter().step_by(step).map(|&i| points[i]).collect()
}

impl PreparedScan {
    /// Prepares `scan`; `name` names it in errors.
    pub fn new(scan: &Cloud, name: &str) -> Result<PreparedScan> {
        if scan.len() < MIN_POINTS {
            return Err(Error::file(
                name,
                format!(
                    "holds {} points, too few to identify or inspect (at least {MIN_POINTS})",
                    scan.len()
                ),
                "give a scan of the part's surface",
            ));
        }
        let index = KdIndex::new(&scan.positions)?;
        let spacing = estimate_spacing_with(&scan.positions, &index).unwrap_or(0.0) as f64;
        let (lo, hi) = super::reference::bounds(&scan.positions);
        let diag = (hi - lo).norm();
        if diag.partial_cmp(&0.0) != Some(std::cmp::Ordering::Greater) {
            return Err(Error::file(
                name,
                "all points coincide",
                "give a scan of the part's surface",
            ));
        }
        let fine_keep = voxel_downsample(&scan.positions, (diag / 150.0).max(spacing) as f32);
        let fine = take_stride(&scan.positions, &fine_keep, FINE_POINTS);
        let dense_keep =
            voxel_downsample(&scan.positions, (diag / 1000.0).max(0.5 * spacing) as f32);
        let dense = take_stride(&scan.positions, &dense_keep, DENSE_POINTS);
        let coarse_keep = voxel_downsample(&scan.positions, (diag / 30.0) as f32);
        let coarse = take_stride(&scan.positions, &coarse_keep, COARSE_POINTS);
        let noise = noise_level(&scan.positions, &index, &fine);
        let diameter = diameter(&fine);
        let centroid = super::reference::centroid(&fine);
        Ok(PreparedScan {
            origin: scan.origin,
            coarse,
            fine,
            dense,
            noise,
            spacing,
            diameter,
            centroid,
        })
    }
}

/// Median over (up to 500 of) `at` of the RMS distance of the 16 nearest scan points to their
/// own least-squares plane: the scan's noise along the normal (curvature adds a little).
fn noise_level(points: &[[f32; 3]], index: &KdIndex, at: &[[f32; 3]]) -> f64 {
    let step = at.len().div_ceil(500).max(1);
    let mut v: Vec<f64> = at
        .iter()
        .step_by(step)
        .filter_map(|p| {
            let hits = index.nearest(*p, 16);
            if hits.len() < 6 {
                return None;
            }
            let n = hits.len() as f64;
            let mean = hits.iter().map(|h| vec3(points[h.0])).sum::<Vector3<f64>>() / n;
            let mut cov = Matrix3::zeros();
            for h in &hits {
                let d = vec3(points[h.0]) - mean;
                cov += d * d.transpose();
            }
            let e = SymmetricEigen::new(cov / n).eigenvalues;
            Some(e.min().max(0.0).sqrt())
        })
        .collect();
    if v.is_empty() {
        return 0.0;
    }
    v.sort_by(f64::total_cmp);
    // Of n points with independent noise σ, the residual about the fitted plane has variance
    // σ² (n − 3)/n; corrected for n = 16.
    v[v.len() / 2] * (16.0f64 / 13.0).sqrt()
}

/// Largest pairwise distance (exact over the sample).
pub fn diameter(points: &[[f32; 3]]) -> f64 {
    let mut best = 0.0f64;
    for (i, a) in points.iter().enumerate() {
        let a = vec3(*a);
        for b in &points[i + 1..] {
            best = best.max((vec3(*b) - a).norm_squared());
        }
    }
    best.sqrt()
}
