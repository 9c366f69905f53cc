//! The inlier RMSE of a finished alignment, measured on the full-resolution clouds.
//!
//! Keypoints and the half-voxel points that ICP works on are too sparse for a residual: their
//! normals average over several decimetres and their nearest target point can sit on another
//! surface. Here a strided sample of SOURCE points (at most [`SAMPLE`]) is moved by the
//! transform, paired with its nearest TARGET point, and measured against the plane fitted to
//! that point's [`PLANE_NEIGHBOURS`] nearest TARGET neighbours (PCA). Pairs farther apart than
//! `max_distance` lie outside the overlap and are left out. Units are file units.

use nalgebra::{Matrix3, SymmetricEigen, Vector3};
use rayon::prelude::*;

use super::rigid::Rigid;
use crate::spatial::KdIndex;

/// Largest number of SOURCE points measured.
pub const SAMPLE: usize = 20_000;
/// Neighbours of the paired TARGET point that define its local plane.
pub const PLANE_NEIGHBOURS: usize = 12;

/// `(rmse, pairs)`: the RMSE of point-to-plane distances over the sampled SOURCE points that
/// lie within `max_distance` of TARGET after `tf`, and how many did. `rmse` is NaN with no pair.
/// Deterministic: partial sums are added in chunk order.
pub fn full_resolution_rmse(
    source: &[[f32; 3]],
    target: &[[f32; 3]],
    target_index: &KdIndex,
    tf: &Rigid,
    max_distance: f64,
) -> (f64, usize) {
    let step = source.len().div_ceil(SAMPLE).max(1);
    let sample: Vec<[f32; 3]> = source.iter().step_by(step).copied().collect();
    let cutoff2 = max_distance * max_distance;
    let parts: Vec<(f64, usize)> = sample
        .par_chunks(512)
        .map(|chunk| {
            let (mut ss, mut n) = (0.0f64, 0usize);
            for p in chunk {
                let pm = tf.apply_f32(*p);
                let q = [pm.x as f32, pm.y as f32, pm.z as f32];
                let (_, d2) = target_index.nearest_one(q);
                if d2 as f64 > cutoff2 {
                    continue;
                }
                if let Some(d) = plane_distance(target, target_index, &pm) {
                    ss += d * d;
                    n += 1;
                }
            }
            (ss, n)
        })
        .collect();
    let (ss, n) = parts.iter().fold((0.0, 0), |a, x| (a.0 + x.0, a.1 + x.1));
    let rmse = if n > 0 {
        (ss / n as f64).sqrt()
    } else {
        f64::NAN
    };
    (rmse, n)
}

/// Distance from `p` to the PCA plane of its nearest TARGET points; `None` with fewer than 3.
fn plane_distance(target: &[[f32; 3]], index: &KdIndex, p: &Vector3<f64>) -> Option<f64> {
    let hits = index.nearest([p.x as f32, p.y as f32, p.z as f32], PLANE_NEIGHBOURS);
    if hits.len() < 3 {
        return None;
    }
    let v = |j: usize| {
        let q = target[j];
        crate::geometry::vec3(q)
    };
    let n = hits.len() as f64;
    let mean = hits.iter().fold(Vector3::zeros(), |a, &(j, _)| a + v(j)) / n;
    let cov = hits.iter().fold(Matrix3::zeros(), |a, &(j, _)| {
        let d = v(j) - mean;
        a + d * d.transpose()
    }) / n;
    let eig = SymmetricEigen::new(cov);
    let (imin, _) = eig
        .eigenvalues
        .iter()
        .enumerate()
        .min_by(|a, b| a.1.total_cmp(b.1))?;
    let normal = eig.eigenvectors.column(imin);
    Some(normal.dot(&(p - mean)))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A plane z = 0 sampled on a 1 cm grid; the source is the same grid lifted by 3 mm.
    #[test]
    fn a_lifted_plane_has_the_lift_as_rmse() {
        let grid: Vec<[f32; 3]> = (0..60)
            .flat_map(|i| (0..60).map(move |j| [i as f32 * 0.01, j as f32 * 0.01, 0.0]))
            .collect();
        let lifted: Vec<[f32; 3]> = grid.iter().map(|p| [p[0], p[1], 0.003]).collect();
        let index = KdIndex::new(&grid).unwrap();
        let (rmse, n) = full_resolution_rmse(&lifted, &grid, &index, &Rigid::identity(), 0.05);
        assert_eq!(n, grid.len());
        assert!((rmse - 0.003).abs() < 1e-6, "{rmse}");
        // Moved 1 m away, nothing is within the pairing distance.
        let mut away = Rigid::identity();
        away.translation.z = 1.0;
        let (rmse, n) = full_resolution_rmse(&lifted, &grid, &index, &away, 0.05);
        assert_eq!(n, 0);
        assert!(rmse.is_nan());
    }
}
