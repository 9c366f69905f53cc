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
            let (_, mut nrm, _) = local_plane(points, &hits);
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

/// Each of `at` moved along the normal of its neighbourhood in `points` (indexed by `index`)
/// onto that neighbourhood's least-squares plane (the plane through the mean of its `k`
/// nearest neighbours among `points`, normal the covariance's eigenvector of smallest
/// eigenvalue): the noise across the surface is averaged away and the point keeps its place
/// along the surface. A projection onto a local fitted plane is the first step of moving least
/// squares surfaces (common practice). On a surface curved with radius `R` the plane lies about
/// `a²/(4R)` inside it for a neighbourhood of radius `a`, the same for two scans of one surface
/// smoothed alike.
///
/// A point stays where it is when it has fewer than 3 neighbours, or when its neighbourhood
/// spreads across its plane more than noise does: its smallest eigenvalue (the mean squared
/// distance from the plane) above `max_spread` times the median of that eigenvalue over `at`.
/// That is an edge or a corner on a scan whose noise is below the edge's rounding; smoothed,
/// its shape would depend on how densely each scan saw each face, and two scans seen from
/// different sides would no longer agree there. `f64::INFINITY` moves every point.
/// Deterministic for any thread count.
pub fn project_to_local_planes(
    at: &[[f32; 3]],
    points: &[[f32; 3]],
    index: &KdIndex,
    k: usize,
    max_spread: f64,
) -> Vec<[f32; 3]> {
    let planes: Vec<Option<([f32; 3], f64)>> = at
        .par_iter()
        .map(|&p| {
            let hits = index.nearest(p, k);
            if hits.len() < 3 {
                return None;
            }
            let (mean, nrm, spread) = local_plane(points, &hits);
            let v = to_v(p);
            let q = v - nrm * nrm.dot(&(v - mean));
            Some(([q.x as f32, q.y as f32, q.z as f32], spread))
        })
        .collect();
    let mut spreads: Vec<f64> = planes.iter().flatten().map(|&(_, s)| s).collect();
    let limit = if spreads.is_empty() || max_spread.is_infinite() {
        f64::INFINITY
    } else {
        let mid = spreads.len() / 2;
        let (_, m, _) = spreads.select_nth_unstable_by(mid, f64::total_cmp);
        max_spread * *m
    };
    planes
        .iter()
        .zip(at)
        .map(|(plane, &p)| match plane {
            Some((q, spread)) if *spread <= limit => *q,
            _ => p,
        })
        .collect()
}

/// The least-squares plane of the points `hits` (indices into `points`, at least 3): their
/// mean, the unit eigenvector of their covariance with the smallest eigenvalue (the normal, of
/// either sense), and that eigenvalue (the mean squared distance from the plane).
fn local_plane(points: &[[f32; 3]], hits: &[(usize, f32)]) -> (Vector3<f64>, Vector3<f64>, f64) {
    let n = hits.len() as f64;
    let mut mean = Vector3::zeros();
    for &(j, _) in hits {
        mean += to_v(points[j]);
    }
    mean /= n;
    let mut cov = Matrix3::zeros();
    for &(j, _) in hits {
        let d = to_v(points[j]) - mean;
        cov += d * d.transpose();
    }
    let eig = SymmetricEigen::new(cov / n);
    let (imin, spread) = eig
        .eigenvalues
        .iter()
        .enumerate()
        .min_by(|a, b| a.1.total_cmp(b.1))
        .expect("three eigenvalues");
    (mean, eig.eigenvectors.column(imin).into_owned(), *spread)
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

    /// A grid on the plane z = 0 with a deterministic offset of ±σ across it (a pattern with
    /// mean zero over any 4 × 4 block): projected onto the planes of 32 neighbours, the points'
    /// RMS offset from the plane falls well below σ, and no point moves along the plane.
    #[test]
    fn projection_averages_the_noise_across_a_plane() {
        let sigma = 0.01f32;
        let pts: Vec<[f32; 3]> = (0..40)
            .flat_map(|i| {
                (0..40).map(move |j| {
                    let sign = if (i * 7 + j * 3) % 4 < 2 { 1.0 } else { -1.0 };
                    [i as f32 * 0.02, j as f32 * 0.02, sign * sigma]
                })
            })
            .collect();
        let idx = KdIndex::new(&pts).unwrap();
        let out = project_to_local_planes(&pts, &pts, &idx, 32, f64::INFINITY);
        let rms = |v: &[[f32; 3]]| {
            (v.iter().map(|p| (p[2] as f64).powi(2)).sum::<f64>() / v.len() as f64).sqrt()
        };
        assert!((rms(&pts) - sigma as f64).abs() < 1e-6);
        // Away from the grid's border, where neighbourhoods are lopsided.
        let inner: Vec<[f32; 3]> = out
            .iter()
            .zip(&pts)
            .filter(|(_, p)| (0.1..0.68).contains(&p[0]) && (0.1..0.68).contains(&p[1]))
            .map(|(q, p)| {
                assert!((q[0] - p[0]).abs() < 1e-3 && (q[1] - p[1]).abs() < 1e-3);
                *q
            })
            .collect();
        assert!(rms(&inner) < 0.3 * sigma as f64, "RMS {}", rms(&inner));
    }

    /// On a sphere of radius R the local plane lies inside the surface by about a²/(4R) for a
    /// neighbourhood of radius a (the mean height of a spherical cap of radius a is a²/(4R));
    /// a point projected from the sphere lands that far inside it, within a fifth.
    #[test]
    fn projection_on_a_sphere_lands_inside_by_the_cap_height() {
        let r = 1.0f64;
        let mut pts = Vec::new();
        // A Fibonacci sphere: near-uniform points.
        let n = 20_000;
        let golden = std::f64::consts::PI * (3.0 - 5f64.sqrt());
        for i in 0..n {
            let z = 1.0 - 2.0 * (i as f64 + 0.5) / n as f64;
            let rho = (1.0 - z * z).sqrt();
            let phi = golden * i as f64;
            pts.push([
                (r * rho * phi.cos()) as f32,
                (r * rho * phi.sin()) as f32,
                (r * z) as f32,
            ]);
        }
        let idx = KdIndex::new(&pts).unwrap();
        let k = 64;
        let out = project_to_local_planes(&pts[..100], &pts, &idx, k, f64::INFINITY);
        // k of n points cover a cap of area 4πR² k / n = π a².
        let a2 = 4.0 * r * r * k as f64 / n as f64;
        let want = a2 / (4.0 * r);
        for q in &out {
            let depth = r - vec3_norm(q);
            assert!(
                (depth - want).abs() < 0.2 * want,
                "depth {depth}, want {want}"
            );
        }
    }

    /// A plane folded by 56° (slope 1.5) along x = 0.4, with a small deterministic offset ±σ
    /// across it:
    /// with the spread limit at twice the median, the points along the fold (whose
    /// neighbourhoods straddle both faces) stay where they are, and the points away from it are
    /// smoothed as before.
    #[test]
    fn projection_leaves_an_edge_alone() {
        let sigma = 0.001f32;
        let pts: Vec<[f32; 3]> = (0..60)
            .flat_map(|i| {
                (0..30).map(move |j| {
                    let x = i as f32 * 0.01;
                    let sign = if (i * 7 + j * 3) % 4 < 2 { 1.0 } else { -1.0 };
                    [x, j as f32 * 0.01, 1.5 * (x - 0.4).max(0.0) + sign * sigma]
                })
            })
            .collect();
        let idx = KdIndex::new(&pts).unwrap();
        let out = project_to_local_planes(&pts, &pts, &idx, 24, 2.0);
        let mut kept = 0;
        let mut far = Vec::new();
        for (q, p) in out.iter().zip(&pts) {
            let x = p[0];
            if (x - 0.4).abs() < 0.011 && (0.05..0.25).contains(&p[1]) {
                assert_eq!(q, p, "a point on the fold moved");
                kept += 1;
            }
            if (0.05..0.25).contains(&x) && (0.05..0.25).contains(&p[1]) {
                far.push(q[2] as f64);
            }
        }
        assert!(kept >= 30, "{kept}");
        let rms = (far.iter().map(|z| z * z).sum::<f64>() / far.len() as f64).sqrt();
        assert!(rms < 0.3 * sigma as f64, "RMS {rms}");
    }

    fn vec3_norm(p: &[f32; 3]) -> f64 {
        to_v(*p).norm()
    }
}
