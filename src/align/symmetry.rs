//! Near-self-symmetries of a scan: rigid motions other than the identity that lay a good share
//! of a scan on itself (a half turn of a bracket, a turn about a shaft's axis or a bolt circle,
//! a slide along a channel). They generate the rivals of a leading pose `T` (SOURCE → TARGET)
//! that the drawn hypotheses may have missed: for a self-map `S` of TARGET the pose `S ∘ T`, for
//! a self-map `S'` of SOURCE the pose `T ∘ S'` (DEVELOPERS.md, Registration, "Near-symmetries
//! of the scans").
//!
//! A scan is matched against itself: a strided sample of its keypoints (at most
//! [`super::Tuning::self_map_queries`]) each takes its [`SELF_NEIGHBOURS`] nearest keypoints in
//! descriptor space among those farther than [`SELF_EXCLUDE_TAUS`] τ from it (the nearest
//! otherwise being its own neighbours on the same patch). Each self-match becomes a self-map by
//! the method's own hypothesis step on the scan paired with itself: the rotation search of the
//! harmonic coefficients ([`super::equivariant::hypotheses`]), or 3-point RANSAC on the
//! self-matches for FPFH ([`super::consensus::ransac`]). The best distinct self-maps by the
//! self-matches they explain are refined by point-to-plane ICP of the scan's keypoints onto
//! themselves, and kept when they still differ from the identity and lay at least
//! [`super::Tuning::self_map_overlap`] of the keypoints on the scan's own surface (tight
//! overlap, normals agreeing).

use rayon::prelude::*;

use super::consensus::{self, Pairs, same_pose};
use super::equivariant;
use super::icp::{icp_point_to_plane, oriented_fit};
use super::matching::Correspondence;
use super::pipeline::{AlignParams, Method};
use super::prepared_scan::PreparedScan;
use super::refine::coarse_icp;
use super::rigid::Rigid;

/// Descriptor-space neighbours taken per query keypoint.
pub const SELF_NEIGHBOURS: usize = 3;

/// Keypoints closer than this many τ to the query are not matched to it.
pub const SELF_EXCLUDE_TAUS: f64 = 4.0;

/// Distinct self-maps (by explained self-matches) refined by ICP before the overlap test, per
/// self-map kept.
const REFINED_PER_KEPT: usize = 3;

/// A self-map within this angle (degrees) and one τ of the identity is no symmetry.
const IDENTITY_DEG: f64 = 2.0;

/// The self-matches of `scan`: query keypoints (an even stride, at most `queries`) with their
/// [`SELF_NEIGHBOURS`] nearest rows in descriptor space among the keypoints farther than
/// [`SELF_EXCLUDE_TAUS`] τ. Order: by query, then by distance (ties: lower index).
fn self_matches(scan: &PreparedScan, queries: usize, tau: f64) -> Vec<Correspondence> {
    let (rows, dim) = (&scan.descriptors.rows, scan.descriptors.dim);
    let n = scan.keypoints.len();
    if dim == 0 || n < 2 || queries == 0 {
        return Vec::new();
    }
    let stride = n.div_ceil(queries).max(1);
    let exclude2 = (SELF_EXCLUDE_TAUS * tau).powi(2);
    let queries: Vec<usize> = (0..n).step_by(stride).collect();
    let per: Vec<Vec<Correspondence>> = queries
        .par_iter()
        .map(|&i| {
            let a = &rows[i * dim..(i + 1) * dim];
            let p = crate::geometry::vec3(scan.keypoints[i]);
            let mut best: Vec<(f32, u32)> = Vec::with_capacity(SELF_NEIGHBOURS + 1);
            for j in 0..n {
                if (crate::geometry::vec3(scan.keypoints[j]) - p).norm_squared() <= exclude2 {
                    continue;
                }
                let b = &rows[j * dim..(j + 1) * dim];
                let d: f32 = a.iter().zip(b).map(|(x, y)| (x - y) * (x - y)).sum();
                if best.len() < SELF_NEIGHBOURS || d < best[best.len() - 1].0 {
                    let at = best.partition_point(|x| x.0 <= d);
                    best.insert(at, (d, j as u32));
                    best.truncate(SELF_NEIGHBOURS);
                }
            }
            let second = best.get(1).map_or(f32::INFINITY, |x| x.0);
            best.iter()
                .map(|&(d, j)| Correspondence {
                    source: i as u32,
                    target: j,
                    ratio: if second > 0.0 {
                        (d / second).sqrt()
                    } else {
                        1.0
                    },
                    mutual: false,
                })
                .collect()
        })
        .collect();
    per.into_iter().flatten().collect()
}

/// The near-self-symmetries of `scan` (module docs), in its local frame, best first (by tight
/// self-overlap, ties in order found); empty when [`super::Tuning::self_maps`] is 0.
pub fn self_maps(scan: &PreparedScan, params: &AlignParams, tau: f64) -> Vec<Rigid> {
    let tu = &params.tuning;
    if tu.self_maps == 0 {
        return Vec::new();
    }
    let corr = self_matches(scan, tu.self_map_queries, tau);
    if corr.is_empty() {
        return Vec::new();
    }
    let pairs = Pairs::new(&scan.keypoints, &scan.keypoints, &corr);
    let scored = match params.method {
        Method::Equivariant => {
            let searcher =
                equivariant::searcher(tu.descriptor_degree, tu.rotation_ambiguity_margin);
            let poses = equivariant::hypotheses(
                &corr,
                &scan.keypoints,
                &scan.keypoints,
                &scan.descriptors,
                &scan.descriptors,
                &searcher,
            );
            consensus::score(&pairs, &poses, tau)
        }
        Method::Fpfh => consensus::ransac(&pairs, tau, params.ransac_iterations / 4, params.seed),
    };
    let identity = Rigid::identity();
    let not_identity = |r: &Rigid| !same_pose(r, &identity, IDENTITY_DEG, tau);
    let scored: Vec<_> = scored
        .into_iter()
        .filter(|h| h.support >= 3 && not_identity(&h.transform))
        .collect();
    let starts = consensus::best_distinct(
        scored,
        REFINED_PER_KEPT * tu.self_maps,
        tu.distinct_angle_deg,
        tu.distinct_distance_taus * tau,
    );
    let icp = coarse_icp(params, tau, scan.voxel);
    let stride = scan.keypoints.len().div_ceil(tu.icp_sample.max(1)).max(1);
    let sample: Vec<[f32; 3]> = scan.keypoints.iter().step_by(stride).copied().collect();
    let n = scan.keypoints.len().max(1) as f64;
    let refined: Vec<(Rigid, f64)> = starts
        .par_iter()
        .map(|h| {
            let out = icp_point_to_plane(
                &sample,
                &scan.keypoints,
                &scan.normals,
                scan.keypoint_index(),
                &h.transform,
                &icp,
            );
            let on = oriented_fit(
                &scan.keypoints,
                &scan.normals,
                &scan.keypoints,
                &scan.normals,
                scan.keypoint_index(),
                &out.transform,
                tau,
                tu.plane_tolerance_voxels * scan.voxel,
                tu.normal_angle_deg,
            );
            (out.transform, on as f64 / n)
        })
        .collect();
    let mut order: Vec<usize> = (0..refined.len())
        .filter(|&k| refined[k].1 >= tu.self_map_overlap && not_identity(&refined[k].0))
        .collect();
    order.sort_by(|&a, &b| refined[b].1.total_cmp(&refined[a].1).then(a.cmp(&b)));
    let mut kept: Vec<Rigid> = Vec::new();
    for k in order {
        let s = refined[k].0;
        if kept.len() < tu.self_maps
            && kept
                .iter()
                .all(|o| !same_pose(o, &s, tu.distinct_angle_deg, tau))
        {
            kept.push(s);
        }
    }
    kept
}

/// The rivals of `leader` (SOURCE local → TARGET local) that the self-maps generate:
/// `S ∘ leader` for each self-map `S` of TARGET, then `leader ∘ S'` for each self-map `S'` of
/// SOURCE.
pub fn rivals(leader: &Rigid, target_maps: &[Rigid], source_maps: &[Rigid]) -> Vec<Rigid> {
    target_maps
        .iter()
        .map(|s| s.compose(leader))
        .chain(source_maps.iter().map(|s| leader.compose(s)))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use nalgebra::{Rotation3, Vector3};

    /// A half turn of TARGET composed after the leader maps SOURCE points where the leader
    /// puts them, then turned; a self-map of SOURCE acts first.
    #[test]
    fn rivals_compose_in_the_stated_order() {
        let leader = Rigid::new(
            *Rotation3::from_axis_angle(&Vector3::z_axis(), 0.3).matrix(),
            Vector3::new(1.0, 2.0, 3.0),
        );
        let s = Rigid::new(
            *Rotation3::from_axis_angle(&Vector3::x_axis(), std::f64::consts::PI).matrix(),
            Vector3::new(0.0, 4.0, 0.0),
        );
        let p = Vector3::new(0.5, -1.0, 2.0);
        let r = rivals(&leader, &[s], &[s]);
        assert_eq!(r.len(), 2);
        assert!((r[0].apply(&p) - s.apply(&leader.apply(&p))).norm() < 1e-12);
        assert!((r[1].apply(&p) - leader.apply(&s.apply(&p))).norm() < 1e-12);
    }
}
