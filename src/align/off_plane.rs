//! Overlap off the largest plane: how much of a pose's fit does not come from one plane.
//!
//! A plane laid on a plane fits under any turn about its normal and any slide along it, so a rival
//! pose that keeps a scene's ground (or a part's largest face) on the other scan's keeps most of
//! the overlap while it lays nothing else right: the depot demo's rivals lay 0.93–0.98 of the
//! answer's overlap and almost none of the points off the ground (0–1 %). A stacked view of a
//! near-symmetric part laid turned on the other keeps its other faces on each other too. The
//! largest plane of SOURCE's keypoints is found by RANSAC (Fischler & Bolles 1981, "Random sample
//! consensus", CACM 24(6)): planes through three keypoints drawn with a fixed seed, inliers within
//! the inlier threshold τ of the plane with normals within [`super::Tuning::normal_angle_deg`] of
//! its normal (sign ignored); the most inliers wins, the first drawn on a tie. The keypoints that
//! are not inliers are the *off-plane* keypoints, and a pose's off-plane overlap is their tight
//! overlap (as [`super::refine::tight_overlap`] over all keypoints).

use nalgebra::Vector3;

use super::AlignParams;
use super::prepared_scan::PreparedScan;
use super::rigid::Rigid;
use crate::so3::rng::SplitMix64;

/// Planes drawn in the RANSAC search.
const DRAWS: usize = 300;
/// Keypoints tested per drawn plane (evenly strided); the winner is then applied to all.
const TESTED: usize = 2000;
/// Seed of the draws (fixed: the split does not depend on the pair's seed).
const SEED: u64 = 0x6f66_665f_706c_616e;

/// SOURCE's keypoints (positions, normals; local frame) that lie off its largest plane.
pub struct OffPlane {
    points: Vec<[f32; 3]>,
    normals: Vec<[f32; 3]>,
}

impl OffPlane {
    /// Splits `source`'s keypoints at its largest plane (module docs); `tau` is the inlier
    /// threshold (file units), `normal_angle_deg` the largest angle between normals.
    pub fn new(source: &PreparedScan, tau: f64, normal_angle_deg: f64) -> OffPlane {
        let (pts, nrm) = (&source.keypoints, &source.normals);
        let n = pts.len();
        let v = |p: &[f32; 3]| Vector3::new(p[0] as f64, p[1] as f64, p[2] as f64);
        let cos = normal_angle_deg.to_radians().cos();
        let on = |normal: &Vector3<f64>, d: f64, i: usize| {
            (normal.dot(&v(&pts[i])) - d).abs() <= tau && normal.dot(&v(&nrm[i])).abs() >= cos
        };
        let mut best: Option<(usize, Vector3<f64>, f64)> = None;
        if n >= 3 {
            let stride = n.div_ceil(TESTED).max(1);
            let mut rng = SplitMix64::new(SEED);
            for _ in 0..DRAWS {
                let [a, b, c] = [(); 3].map(|_| v(&pts[rng.below(n as u64) as usize]));
                let Some(normal) = (b - a).cross(&(c - a)).try_normalize(1e-12) else {
                    continue;
                };
                let d = normal.dot(&a);
                let count = (0..n)
                    .step_by(stride)
                    .filter(|&i| on(&normal, d, i))
                    .count();
                if best.is_none_or(|x| count > x.0) {
                    best = Some((count, normal, d));
                }
            }
        }
        let keep: Vec<usize> = match best {
            Some((_, normal, d)) => (0..n).filter(|&i| !on(&normal, d, i)).collect(),
            None => (0..n).collect(),
        };
        OffPlane {
            points: keep.iter().map(|&i| pts[i]).collect(),
            normals: keep.iter().map(|&i| nrm[i]).collect(),
        }
    }

    /// Number of off-plane keypoints.
    pub fn len(&self) -> usize {
        self.points.len()
    }

    /// True when every keypoint lies on the largest plane.
    pub fn is_empty(&self) -> bool {
        self.points.is_empty()
    }

    /// The tight overlap of `pose` (SOURCE local → TARGET local) over the off-plane keypoints:
    /// their share laid on TARGET's surface with agreeing normals, in [0, 1] (0 when there are
    /// none).
    pub fn overlap(
        &self,
        source: &PreparedScan,
        target: &PreparedScan,
        pose: &Rigid,
        params: &AlignParams,
        tau: f64,
    ) -> f64 {
        if self.points.is_empty() {
            return 0.0;
        }
        super::refine::tight_share(
            (&self.points, &self.normals),
            (&target.keypoints, &target.normals, target.keypoint_index()),
            source.voxel,
            pose,
            params,
            tau,
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::Cloud;
    use nalgebra::Rotation3;

    /// A 4 × 4 ground sampled every 2 cm with an upright 0.6 × 0.3 × 0.5 box on it off its
    /// centre (walls and top only): the off-plane keypoints are the box's, the answer lays all
    /// of them, and a turn of the scene about the vertical through the ground's centre (a
    /// ground-plane rival) lays almost none.
    #[test]
    fn a_turn_about_the_ground_normal_keeps_nothing_off_the_ground() {
        let h = 0.02;
        let mut pts = Vec::new();
        for i in 0..=200 {
            for j in 0..=200 {
                pts.push([i as f64 * h - 2.0, j as f64 * h - 2.0, 0.0]);
            }
        }
        let (x0, y0, sx, sy, sz) = (0.8, 0.5, 0.6, 0.3, 0.5);
        let steps = |len: f64| (len / h).round() as usize;
        for a in 0..=steps(sx) {
            for c in 1..=steps(sz) {
                let (x, z) = (x0 + a as f64 * h, c as f64 * h);
                pts.push([x, y0, z]);
                pts.push([x, y0 + sy, z]);
            }
        }
        for b in 0..=steps(sy) {
            for c in 1..=steps(sz) {
                let (y, z) = (y0 + b as f64 * h, c as f64 * h);
                pts.push([x0, y, z]);
                pts.push([x0 + sx, y, z]);
            }
        }
        for a in 0..=steps(sx) {
            for b in 0..=steps(sy) {
                pts.push([x0 + a as f64 * h, y0 + b as f64 * h, sz]);
            }
        }
        let cloud = Cloud::from_global(&pts);
        let params = AlignParams::default();
        let voxel = 0.05;
        let scan = PreparedScan::prepare("scene", &cloud, &params, voxel).unwrap();
        let tau = params.inlier_voxels * voxel;
        let off = OffPlane::new(&scan, tau, params.tuning.normal_angle_deg);
        let n = scan.keypoints.len();
        // The box's walls and top, about 0.45 m² of the 16.45 m² of surface.
        assert!(
            !off.is_empty() && off.len() * 10 < n,
            "{} off-plane keypoints of {n}",
            off.len()
        );
        let same = Rigid::identity();
        let answer = off.overlap(&scan, &scan, &same, &params, tau);
        assert!(answer > 0.95, "answer lays {answer}");
        // Local frame: the origin is where `from_global` put it; turn about the vertical line
        // through the ground's centre.
        let centre = Vector3::new(-cloud.origin[0], -cloud.origin[1], -cloud.origin[2]);
        let r = Rotation3::from_axis_angle(&Vector3::z_axis(), 120f64.to_radians());
        let turned = Rigid::new(*r.matrix(), centre - r * centre);
        let rival = off.overlap(&scan, &scan, &turned, &params, tau);
        eprintln!(
            "{} off-plane keypoints of {n}; answer {answer:.3}, rival {rival:.3}",
            off.len()
        );
        assert!(rival < 0.1 * answer, "rival lays {rival} against {answer}");
    }
}
