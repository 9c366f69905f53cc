//! Fast Point Feature Histograms (Rusu, Blodow & Beetz, ICRA 2009), the baseline descriptor.
//!
//! For a point `p` with normal `n_p` and each neighbour `q` within the feature radius, a Darboux
//! frame gives three angles (α, φ, θ) of the pair; the simplified histogram (SPFH) bins each of
//! them into 11 bins. The FPFH of `p` is its SPFH plus the distance-weighted mean of its
//! neighbours' SPFHs, `SPFH(p) + (1/k) Σ SPFH(q)/|p − q|`, with each of the three sub-histograms
//! normalised to sum to 100. 33 values per point. The normals' signs matter; callers orient
//! them by one rule in both clouds.

use rayon::prelude::*;

use crate::spatial::KdIndex;

/// Bins per angle.
pub const FPFH_BINS: usize = 11;
/// Values per FPFH row.
pub const FPFH_LEN: usize = 3 * FPFH_BINS;

/// FPFH rows (row-major, [`FPFH_LEN`] per point) for every point of `points`, with neighbours
/// within `radius` taken from the same points. Deterministic for any thread count.
pub fn fpfh(points: &[[f32; 3]], normals: &[[f32; 3]], index: &KdIndex, radius: f32) -> Vec<f32> {
    let neighbours: Vec<Vec<(u32, f32)>> = points
        .par_iter()
        .map(|p| {
            let mut out = Vec::new();
            index.within_sorted(*p, radius, &mut out);
            out
        })
        .collect();
    let spfh: Vec<[f32; FPFH_LEN]> = (0..points.len())
        .into_par_iter()
        .map(|i| spfh_one(points, normals, i, &neighbours[i]))
        .collect();
    let mut out = vec![0.0f32; points.len() * FPFH_LEN];
    out.par_chunks_mut(FPFH_LEN)
        .enumerate()
        .for_each(|(i, row)| {
            let mut acc = [0.0f64; FPFH_LEN];
            let mut k = 0usize;
            for &(j, d2) in &neighbours[i] {
                let j = j as usize;
                if j == i || d2 <= 0.0 {
                    continue;
                }
                let w = 1.0 / (d2 as f64).sqrt();
                for b in 0..FPFH_LEN {
                    acc[b] += w * spfh[j][b] as f64;
                }
                k += 1;
            }
            let inv_k = if k > 0 { 1.0 / k as f64 } else { 0.0 };
            for b in 0..FPFH_LEN {
                acc[b] = spfh[i][b] as f64 + inv_k * acc[b];
            }
            for part in acc.chunks_mut(FPFH_BINS) {
                let s: f64 = part.iter().sum();
                if s > 0.0 {
                    part.iter_mut().for_each(|v| *v *= 100.0 / s);
                }
            }
            for b in 0..FPFH_LEN {
                row[b] = acc[b] as f32;
            }
        });
    out
}

fn spfh_one(
    points: &[[f32; 3]],
    normals: &[[f32; 3]],
    i: usize,
    neighbours: &[(u32, f32)],
) -> [f32; FPFH_LEN] {
    let mut h = [0.0f32; FPFH_LEN];
    let p = v(points[i]);
    let np = v(normals[i]);
    if dot(np, np) < 0.5 {
        return h;
    }
    let mut count = 0usize;
    for &(j, d2) in neighbours {
        let j = j as usize;
        if j == i || d2 <= 0.0 {
            continue;
        }
        let nq = v(normals[j]);
        if dot(nq, nq) < 0.5 {
            continue;
        }
        let Some((f1, f2, f3)) = pair_features(p, np, v(points[j]), nq) else {
            continue;
        };
        let bin = |x: f64, lo: f64, hi: f64| {
            (((x - lo) / (hi - lo) * FPFH_BINS as f64).floor() as isize)
                .clamp(0, FPFH_BINS as isize - 1) as usize
        };
        h[bin(f1, -std::f64::consts::PI, std::f64::consts::PI)] += 1.0;
        h[FPFH_BINS + bin(f2, -1.0, 1.0)] += 1.0;
        h[2 * FPFH_BINS + bin(f3, -1.0, 1.0)] += 1.0;
        count += 1;
    }
    if count > 0 {
        let s = 100.0 / count as f32;
        h.iter_mut().for_each(|x| *x *= s);
    }
    h
}

/// The pair angles of Rusu et al.: the frame sits on the point whose normal makes the smaller
/// angle with the connecting line; returns (α as atan2 angle, φ-style cosine, θ-style cosine).
fn pair_features(
    p1: [f64; 3],
    n1: [f64; 3],
    p2: [f64; 3],
    n2: [f64; 3],
) -> Option<(f64, f64, f64)> {
    let mut d = sub(p2, p1);
    let len = dot(d, d).sqrt();
    if len <= 0.0 {
        return None;
    }
    let a1 = dot(n1, d) / len;
    let a2 = dot(n2, d) / len;
    let (s, t, f3) = if a1.abs().acos() > a2.abs().acos() {
        d = [-d[0], -d[1], -d[2]];
        (n2, n1, -a2)
    } else {
        (n1, n2, a1)
    };
    let vv = cross(d, s);
    let vn = dot(vv, vv).sqrt();
    if vn <= 0.0 {
        return Some((0.0, 0.0, f3));
    }
    let vv = [vv[0] / vn, vv[1] / vn, vv[2] / vn];
    let w = cross(s, vv);
    let f2 = dot(vv, t);
    let f1 = dot(w, t).atan2(dot(s, t));
    Some((f1, f2, f3))
}

fn v(p: [f32; 3]) -> [f64; 3] {
    [p[0] as f64, p[1] as f64, p[2] as f64]
}
fn sub(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [a[0] - b[0], a[1] - b[1], a[2] - b[2]]
}
fn dot(a: [f64; 3], b: [f64; 3]) -> f64 {
    a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
}
fn cross(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [
        a[1] * b[2] - a[2] * b[1],
        a[2] * b[0] - a[0] * b[2],
        a[0] * b[1] - a[1] * b[0],
    ]
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The pair angles are defined in a frame built from the pair itself, so FPFH rows do not
    /// change when the points and normals are rotated together.
    #[test]
    fn fpfh_is_rotation_invariant() {
        let mut pts = Vec::new();
        let mut nrm = Vec::new();
        for i in 0..30 {
            for j in 0..30 {
                let (x, y) = (i as f32 * 0.05 - 0.75, j as f32 * 0.05 - 0.75);
                let z = 0.3 * x * x - 0.2 * y * y;
                pts.push([x, y, z]);
                let n = [-0.6 * x, 0.4 * y, 1.0];
                let l = (n[0] * n[0] + n[1] * n[1] + n[2] * n[2]).sqrt();
                nrm.push([n[0] / l, n[1] / l, n[2] / l]);
            }
        }
        let rot = nalgebra::Rotation3::new(nalgebra::Vector3::new(0.7f32, -1.1, 0.4));
        let r = |p: [f32; 3]| {
            let q = rot * nalgebra::Vector3::from(p);
            [q.x, q.y, q.z]
        };
        let pts2: Vec<_> = pts.iter().map(|p| r(*p)).collect();
        let nrm2: Vec<_> = nrm.iter().map(|p| r(*p)).collect();
        let a = fpfh(&pts, &nrm, &KdIndex::new(&pts).unwrap(), 0.2);
        let b = fpfh(&pts2, &nrm2, &KdIndex::new(&pts2).unwrap(), 0.2);
        // Away from bin edges the rows agree; compare the total absolute difference.
        let diff: f32 = a.iter().zip(&b).map(|(x, y)| (x - y).abs()).sum();
        let total: f32 = a.iter().sum();
        assert!(diff / total < 0.01, "relative difference {}", diff / total);
        // Each sub-histogram sums to 100 at an interior point.
        let row = &a[465 * FPFH_LEN..466 * FPFH_LEN];
        for part in row.chunks(FPFH_BINS) {
            assert!((part.iter().sum::<f32>() - 100.0).abs() < 1e-3);
        }
    }
}
