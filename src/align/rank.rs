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
///
/// With [`Tuning::shortlist_pool`] above the shortlist, that many distinct hypotheses are
/// refined first and the shortlist is cut from the refined poses (best support first, distinct
/// again): per-match poses scatter around a pose by more than the distinctness rule, so
/// near-copies of a well-supported pose take the places of a weaker distinct one before
/// refinement, and merge after it. With [`Tuning::rank_interleave`] the order alternates
/// between the best on the surface and the best by support (each pose once), so that a pose
/// that explains many matches but lays less of SOURCE on the surface than a stacked one is
/// among the first ones refined.
pub fn rank(
    hypotheses: Vec<Hypothesis>,
    pairs: &Pairs,
    source: &PreparedScan,
    target: &PreparedScan,
    tu: &Tuning,
    tau: f64,
) -> Ranked {
    let (angle, distance) = (tu.distinct_angle_deg, tu.distinct_distance_taus * tau);
    let refine = |h: &Hypothesis| {
        consensus::refine_on_inliers(pairs, &h.transform, tau, tu.inlier_refine_rounds)
    };
    let shortlist: Vec<Hypothesis> = if tu.shortlist_pool > tu.shortlist {
        let pool = consensus::best_distinct(hypotheses, tu.shortlist_pool, angle, distance);
        let refined: Vec<Hypothesis> = pool.par_iter().map(refine).collect();
        consensus::best_distinct(refined, tu.shortlist, angle, distance)
    } else {
        consensus::best_distinct(hypotheses, tu.shortlist, angle, distance)
            .par_iter()
            .map(refine)
            .collect()
    };
    let stride = source.keypoints.len().div_ceil(tu.overlap_sample).max(1);
    let mut ranked = Ranked {
        poses: Vec::new(),
        sample: source.keypoints.iter().step_by(stride).copied().collect(),
        sample_normals: source.normals.iter().step_by(stride).copied().collect(),
    };
    let mut poses: Vec<(usize, Hypothesis)> = shortlist
        .par_iter()
        .map(|h| (ranked.on_surface(target, &h.transform, tau, tu), *h))
        .collect();
    poses.sort_by(|x, y| y.0.cmp(&x.0).then(y.1.support.cmp(&x.1.support)));
    if tu.rank_interleave {
        poses = interleave(poses);
    }
    ranked.poses = poses;
    ranked
}

/// `by_surface` (best on the surface first) reordered to alternate with the order by support
/// (ties in support keep the surface order): first the best on the surface, then the best by
/// support not yet taken, and so on.
fn interleave(by_surface: Vec<(usize, Hypothesis)>) -> Vec<(usize, Hypothesis)> {
    let mut by_support: Vec<usize> = (0..by_surface.len()).collect();
    by_support.sort_by_key(|&i| std::cmp::Reverse(by_surface[i].1.support));
    let mut taken = vec![false; by_surface.len()];
    let mut order = Vec::with_capacity(by_surface.len());
    let (mut a, mut b) = (0, 0);
    while order.len() < by_surface.len() {
        for (list, at) in [(None, &mut a), (Some(&by_support), &mut b)] {
            while *at < by_surface.len() {
                let i = list.map_or(*at, |l: &Vec<usize>| l[*at]);
                *at += 1;
                if !taken[i] {
                    taken[i] = true;
                    order.push(i);
                    break;
                }
            }
        }
    }
    order.into_iter().map(|i| by_surface[i]).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn interleave_alternates_surface_and_support_orders() {
        let h = |support| Hypothesis {
            transform: Rigid::identity(),
            support,
        };
        // Surface order 0..4; supports 1, 9, 5, 7: support order 1, 3, 2, 0.
        let by_surface = vec![(40, h(1)), (30, h(9)), (20, h(5)), (10, h(7))];
        let got: Vec<usize> = interleave(by_surface).iter().map(|p| p.0).collect();
        assert_eq!(got, vec![40, 30, 20, 10]);
        let by_surface = vec![(40, h(1)), (30, h(5)), (20, h(3)), (10, h(9))];
        let got: Vec<usize> = interleave(by_surface).iter().map(|p| p.0).collect();
        assert_eq!(got, vec![40, 10, 30, 20]);
    }
}
