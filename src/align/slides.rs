//! Parallel-face slides of the leading coarse pose: the poses that the same rotation reaches
//! by a short slide along one of the overlap's face normals, where the surfaces fit again.
//!
//! Why: a thin part (a 6 mm plate of a bracket) shows one face to one sensor and the opposite
//! face to the other. A pose slid by the plate's thickness along the face normal lays one face
//! on the other and fits more points than the true pose (which lays the two views side by
//! side); the fine ICP cannot cross from one to the other (its pairing distance is one inlier
//! threshold), and its constraint analysis rightly calls the slide pinned, by the wrong faces.
//! Such a pose differs from the truth by a pure translation of a few voxels, which neither the
//! drawn hypotheses nor the turns of [`super::candidates::alternatives`] need contain.
//!
//! Method: the slide directions are the principal face orientations among the TARGET normals
//! that the leader pairs with its SOURCE keypoints (up to three modes of the normals' directions;
//! an eigenvector of `Σ n nᵀ` mixes two faces whose populations are alike, and a slide along a
//! mixed direction lifts one face off). Along
//! each, the tight overlap ([`super::refine::tight_overlap`]) is sampled every half voxel over
//! ± [`super::Tuning::slide_range_taus`] inlier thresholds; on each side, the highest local
//! maximum (of the mean of three neighbouring offsets) beyond two voxels from the leader that
//! keeps at least [`super::Tuning::slide_min_share`] of the leader's tight overlap is refined by
//! ICP on the keypoints with the fine stage's pairing distance (one τ, so that it stays in its
//! own basin) and scored like the other refined poses; the ranking and the judge then treat
//! them as any other rival ([`super::refine::fine`] drops one that ICP carried back to the
//! leader).

use nalgebra::Vector3;
use rayon::prelude::*;

use super::candidates::{Scored, distinct_best};
use super::consensus::Pairs;
use super::constraint::paired;
use super::evidence::Distinctive;
use super::icp::IcpParams;
use super::pipeline::AlignParams;
use super::prepared_scan::PreparedScan;
use super::refine::{coarse_icp, polish, tight_overlap};
use super::rigid::Rigid;

/// Normals within this angle of a face orientation belong to the face.
const FACE_ANGLE_DEG: f64 = 10.0;

/// Up to three principal face orientations among unit `normals` (sign ignored), most populated
/// first: repeatedly, among a strided sample of at most 200 unassigned normals, the one with the most
/// unassigned normals within [`FACE_ANGLE_DEG`]; its members' mean (signs aligned) is the
/// orientation, and every normal within twice that angle is assigned to it. An orientation
/// needs at least 5 % of the normals.
fn face_normals(normals: &[Vector3<f64>]) -> Vec<Vector3<f64>> {
    let near = FACE_ANGLE_DEG.to_radians().cos();
    let taken_cos = (2.0 * FACE_ANGLE_DEG).to_radians().cos();
    let mut free = vec![true; normals.len()];
    let mut out = Vec::new();
    while out.len() < 3 {
        let count = |m: &Vector3<f64>| {
            normals
                .iter()
                .zip(&free)
                .filter(|(n, f)| **f && n.dot(m).abs() >= near)
                .count()
        };
        let open: Vec<&Vector3<f64>> = normals
            .iter()
            .zip(&free)
            .filter(|(_, f)| **f)
            .map(|(n, _)| n)
            .collect();
        let stride = open.len().div_ceil(200).max(1);
        let Some((seed, members)) = open
            .iter()
            .step_by(stride)
            .map(|&m| (m, count(m)))
            .max_by(|a, b| a.1.cmp(&b.1))
        else {
            break;
        };
        if members * 20 < normals.len() {
            break;
        }
        let mean = normals
            .iter()
            .zip(&free)
            .filter(|(n, f)| **f && n.dot(seed).abs() >= near)
            .fold(Vector3::zeros(), |a, (n, _)| a + n * n.dot(seed).signum());
        let axis = mean.normalize();
        for (n, f) in normals.iter().zip(free.iter_mut()) {
            if n.dot(&axis).abs() >= taken_cos {
                *f = false;
            }
        }
        out.push(axis);
    }
    out
}

/// The refined parallel-face slides of the best distinct pose of `polished` (see the module
/// documentation), scored; empty when there is no pose or no slide qualifies. Local frames;
/// deterministic (directions in eigenvalue order, offsets ascending).
pub fn parallel_slides(
    polished: &[Scored],
    pairs: &Pairs,
    distinctive: &Distinctive,
    source: &PreparedScan,
    target: &PreparedScan,
    params: &AlignParams,
    tau: f64,
) -> Vec<Scored> {
    let tu = &params.tuning;
    let Some(&lead) = distinct_best(
        polished,
        1,
        tu.distinct_angle_deg,
        tu.distinct_distance_taus * tau,
        0.0,
    )
    .first() else {
        return Vec::new();
    };
    let leader = polished[lead].pose;
    let (_, normals, _) = paired(
        &source.keypoints,
        &target.normals,
        target.keypoint_index(),
        &leader,
        tau,
    );
    if normals.len() < 10 {
        return Vec::new();
    }
    let axes = face_normals(&normals);
    let step = 0.5 * source.voxel;
    let reach = (tu.slide_range_taus * tau / step).ceil() as i64;
    let near = (2.0 * source.voxel / step).ceil() as i64;
    let shifted = |u: &Vector3<f64>, j: i64| {
        Rigid::new(leader.rotation, leader.translation + u * (j as f64 * step))
    };
    let mut starts: Vec<Rigid> = Vec::new();
    for u in &axes {
        let offsets: Vec<i64> = (-reach..=reach).collect();
        let profile: Vec<f64> = offsets
            .par_iter()
            .map(|&j| tight_overlap(source, target, &shifted(u, j), params, tau))
            .collect();
        // Three-tap mean: the tight overlap of a noisy scan wobbles from one offset to the next.
        let at = |j: i64| {
            let i = (j + reach) as usize;
            let lo = i.saturating_sub(1);
            let hi = (i + 1).min(profile.len() - 1);
            profile[lo..=hi].iter().sum::<f64>() / (hi - lo + 1) as f64
        };
        let top = profile[reach as usize];
        for side in [-1i64, 1] {
            let best = (near..reach)
                .map(|d| (side * d, at(side * d)))
                .filter(|&(j, v)| {
                    v >= at(j - side) && v >= at(j + side) && v >= tu.slide_min_share * top
                })
                .max_by(|a, b| a.1.total_cmp(&b.1).then(b.0.abs().cmp(&a.0.abs())));
            if let Some((j, _)) = best {
                starts.push(shifted(u, j));
            }
        }
    }
    let icp = IcpParams {
        max_distance: tu.fine_max_distance_taus * tau,
        ..coarse_icp(params, tau, source.voxel)
    };
    starts
        .par_iter()
        .map(|start| {
            polish(
                &source.keypoints,
                start,
                &icp,
                pairs,
                distinctive,
                source,
                target,
                params,
                tau,
            )
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The normals of an L-bracket's two plates (±x and ±z, both signs, 2° of scatter) and a
    /// few hole-wall normals: two face orientations, x and z, the hole walls too few for a third.
    #[test]
    fn face_normals_are_the_plates_orientations() {
        let mut n = Vec::new();
        for k in 0..400 {
            let a = (k as f64 * 0.37).sin() * 2f64.to_radians();
            let s = if k % 2 == 0 { 1.0 } else { -1.0 };
            n.push(Vector3::new(s * a.cos(), a.sin(), 0.0));
            if k < 300 {
                n.push(Vector3::new(a.sin(), 0.0, s * a.cos()));
            }
        }
        for k in 0..30 {
            let a = k as f64 * std::f64::consts::TAU / 30.0;
            n.push(Vector3::new(a.cos(), a.sin(), 0.0).normalize());
        }
        let axes = face_normals(&n);
        assert_eq!(axes.len(), 2, "{axes:?}");
        assert!(axes[0].x.abs() > 0.999, "{:?}", axes[0]);
        assert!(axes[1].z.abs() > 0.999, "{:?}", axes[1]);
    }
}
