//! Surface normals by local principal component analysis.

use nalgebra::{Matrix3, SymmetricEigen, Vector3};
use rayon::prelude::*;

use super::KdIndex;

/// Unit normal at each of `at` (indices into `points`) from the `k` nearest neighbours: the
/// eigenvector of the neighbourhood covariance with the smallest eigenvalue. Normals are turned
/// to face `viewpoint` when given (a scanner position in the same local frame); otherwise the
/// first non-zero component in the order z, y, x is made positive, a fixed rule that needs no
/// viewpoint. A degenerate neighbourhood (fewer
/// than 3 points) gets `[0, 0, 0]`. Deterministic for any thread count.
pub fn estimate_normals(
    points: &[[f32; 3]],
    index: &KdIndex,
    at: &[usize],
    k: usize,
    viewpoint: Option<[f32; 3]>,
) -> Vec<[f32; 3]> {
    at.par_iter()
        .map(|&i| {
            let hits = index.nearest(points[i], k);
            if hits.len() < 3 {
                return [0.0; 3];
            }
            let n = hits.len() as f64;
            let mut mean = Vector3::zeros();
            for &(j, _) in &hits {
                mean += to_v(points[j]);
            }
            mean /= n;
            let mut cov = Matrix3::zeros();
            for &(j, _) in &hits {
                let d = to_v(points[j]) - mean;
                cov += d * d.transpose();
            }
            let eig = SymmetricEigen::new(cov / n);
            let (imin, _) = eig
                .eigenvalues
                .iter()
                .enumerate()
                .min_by(|a, b| a.1.total_cmp(b.1))
                .expect("three eigenvalues");
            let mut nrm: Vector3<f64> = eig.eigenvectors.column(imin).into_owned();
            let flip = match viewpoint {
                Some(v) => nrm.dot(&(to_v(v) - to_v(points[i]))) < 0.0,
                None => {
                    let key = [nrm.z, nrm.y, nrm.x];
                    key.iter()
                        .find(|c| c.abs() > 1e-12)
                        .is_some_and(|c| *c < 0.0)
                }
            };
            if flip {
                nrm = -nrm;
            }
            [nrm.x as f32, nrm.y as f32, nrm.z as f32]
        })
        .collect()
}

fn to_v(p: [f32; 3]) -> Vector3<f64> {
    crate::geometry::vec3(p)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn plane_normal_faces_the_viewpoint() {
        // A tilted plane z = 0.5 x; its unit normal is (-0.5, 0, 1)/|.|.
        let pts: Vec<[f32; 3]> = (0..20)
            .flat_map(|i| (0..20).map(move |j| [i as f32 * 0.1, j as f32 * 0.1, i as f32 * 0.05]))
            .collect();
        let idx = KdIndex::new(&pts).unwrap();
        let n = estimate_normals(&pts, &idx, &[210], 12, Some([0.0, 0.0, 10.0]))[0];
        let want = [-0.5 / 1.25f32.sqrt(), 0.0, 1.0 / 1.25f32.sqrt()];
        for k in 0..3 {
            assert!((n[k] - want[k]).abs() < 1e-4, "{n:?}");
        }
        let down = estimate_normals(&pts, &idx, &[210], 12, Some([0.0, 0.0, -10.0]))[0];
        assert!(down[2] < 0.0);
    }
}
