//! Stage 2 of registration, rank: the strongest distinct hypotheses, each refined by least
//! squares on its inliers, re-ranked by the geometry they explain.
//!
//! Correspondences can be few; the geometry is always there. Each shortlisted pose is scored
//! by how many of a strided subsample of the SOURCE keypoints it puts close to the TARGET's
//! tangent planes (within twice the plane tolerance) with the surface orientations agreeing: a
//! dominant plane (ground) does not favour a wrong pose under a plane-distance test as it does
//! under a plain distance test, and the orientation test keeps a pose that lays one flat face on
//! another from counting the edges and faces that cross the target. Ties go to the pose that
//! explains more matches.

use rayon::prelude::*;

use super::consensus::{self, Hypothesis, Pairs};
use super::icp::oriented_fit;
use super::prepared_scan::PreparedScan;
use super::rigid::Rigid;
use super::tuning::Tuning;

/// Shortlisted hypotheses, best first, with the subsample they were ranked on.
pub struct Ranked {
    /// (SOURCE subsample points on the TARGET surface, refined hypothesis), best first.
    pub poses: Vec<(usize, Hypothesis)>,
    /// The SOURCE keypoint subsample (local frame).
    pub sample: Vec<[f32; 3]>,
    /// Normals of the subsample.
    pub sample_normals: Vec<[f32; 3]>,
}

impl Ranked {
    /// Subsample points that `pose` puts on the TARGET surface (the ranking figure).
    pub fn on_surface(&self, target: &PreparedScan, pose: &Rigid, tau: f64, tu: &Tuning) -> usize {
        oriented_fit(
            &self.sample,
            &self.sample_normals,
            &target.keypoints,
            &target.normals,
            target.keypoint_index(),
            pose,
            tau,
            2.0 * tu.plane_tolerance_voxels * target.voxel,
            tu.normal_angle_deg,
        )
    }
}

/// The [`Tuning::shortlist`] best distinct hypotheses, refined on their inliers
/// ([`Tuning::inlier_refine_rounds`] rounds) and ranked.
pub fn rank(
    hypotheses: Vec<Hypothesis>,
    pairs: &Pairs,
    source: &PreparedScan,
    target: &PreparedScan,
    tu: &Tuning,
    tau: f64,
) -> Ranked {
    let shortlist = consensus::best_distinct(
        hypotheses,
        tu.shortlist,
        tu.distinct_angle_deg,
        tu.distinct_distance_taus * tau,
    );
    let stride = source.keypoints.len().div_ceil(tu.overlap_sample).max(1);
    let mut ranked = Ranked {
        poses: Vec::new(),
        sample: source.keypoints.iter().step_by(stride).copied().collect(),
        sample_normals: source.normals.iter().step_by(stride).copied().collect(),
    };
    let mut poses: Vec<(usize, Hypothesis)> = shortlist
        .par_iter()
        .map(|h| {
            let h = consensus::refine_on_inliers(pairs, &h.transform, tau, tu.inlier_refine_rounds);
            (ranked.on_surface(target, &h.transform, tau, tu), h)
        })
        .collect();
    poses.sort_by(|x, y| y.0.cmp(&x.0).then(y.1.support.cmp(&x.1.support)));
    ranked.poses = poses;
    ranked
}
