//! Stage 3 of registration, refine: point-to-plane ICP with a robust loss from the best ranked
//! poses and from the near-symmetric alternatives of the leader, then a fine fit of the best.
//!
//! Coarse: up to [`super::AlignParams::refine_best`] ranked poses that differ by more than
//! [`super::Tuning::start_angle_deg`] (or one τ) start an ICP on the keypoints (at most
//! [`super::Tuning::icp_sample`], evenly strided; the runs in parallel); the leader's
//! alternatives ([`super::candidates::alternatives`]: turns about the principal axes of the
//! overlap, half turns about those of TARGET and of both scans, each turned rotation also at the
//! translation the matches vote for, slides along weakly constrained directions) are refined
//! too, since the drawn hypotheses need not contain them, and so is the leader composed with
//! each near-self-symmetry of TARGET and of SOURCE ([`super::symmetry`]; off by default,
//! [`super::Tuning::self_maps`]), and so are the leader's turns about TARGET's axis of
//! near-revolution ([`super::revolution`]; off by default,
//! [`super::Tuning::revolution_step_deg`]), free or held during ICP and then released
//! ([`super::revolution::held_turns`]; off by default, [`super::Tuning::held_turns`]). Each
//! result is scored by its tight overlap (the share of SOURCE keypoints on the TARGET surface
//! within the plane tolerance, normals agreeing) and the matches it explains. Fine: ICP on the fine points from the best distinct
//! pose; the 6×6 normal matrix of the fit ([`super::constraint`], Gelfand, Ikemoto,
//! Rusinkiewicz & Levoy 2003) names weakly constrained motions, and where one looks weak the
//! fit is redone on a stability-aware sample and judged on every point again. Before the fine
//! fit, the leader's parallel-face slides ([`super::slides`]) join the coarse poses as poses of
//! their own.

use nalgebra::Vector3;
use rayon::prelude::*;

use super::candidates::{Most, Scored, alternatives, distinct_best, rivalry};
use super::consensus::{self, Pairs};
use super::constraint::{Constraint, Motion, analyse, paired, stable_sample};
use super::evidence::Distinctive;
use super::icp::{IcpOutcome, IcpParams, icp_point_to_plane, oriented_fit};
use super::pipeline::AlignParams;
use super::prepared_scan::{PreparedScan, SmoothedFine};
use super::rank::Ranked;
use super::revolution;
use super::rigid::{Rigid, rotation_error_deg};
use super::symmetry;
use crate::spatial::KdIndex;

/// The coarse ICP settings of `params` for inlier threshold `tau` and voxel size `voxel`.
pub(super) fn coarse_icp(params: &AlignParams, tau: f64, voxel: f64) -> IcpParams {
    let tu = &params.tuning;
    IcpParams {
        max_distance: tu.icp_max_distance_taus * tau,
        min_scale: tu.icp_min_scale_voxels * voxel,
        loss: params.loss,
        max_iterations: tu.icp_max_iterations,
        tolerance: tu.icp_tolerance,
    }
}

/// The tight overlap of `pose`: the share of SOURCE keypoints within the plane tolerance of the
/// TARGET surface, normals agreeing.
pub fn tight_overlap(
    source: &PreparedScan,
    target: &PreparedScan,
    pose: &Rigid,
    params: &AlignParams,
    tau: f64,
) -> f64 {
    tight_share(
        (&source.keypoints, &source.normals),
        (&target.keypoints, &target.normals, target.keypoint_index()),
        source.voxel,
        pose,
        params,
        tau,
    )
}

/// The tight overlap that scores a refined pose: [`tight_overlap`] less
/// [`super::Tuning::side_weight`] × the share of SOURCE keypoints laid on the opposite side of
/// the surface ([`super::sides`]), at least 0. The searches that sample the tight overlap along
/// a slide or a turn use [`tight_overlap`]: they look for where surfaces fit, and the score then
/// weighs the side.
pub fn scored_overlap(
    source: &PreparedScan,
    target: &PreparedScan,
    pose: &Rigid,
    params: &AlignParams,
    tau: f64,
) -> f64 {
    let w = params.tuning.side_weight;
    if w <= 0.0 {
        return tight_overlap(source, target, pose, params, tau);
    }
    // One pass gives both: the tight keypoints are the consistent and the opposed ones.
    let a = super::sides::side_agreement(source, target, pose, params, tau);
    let n = source.keypoints.len().max(1) as f64;
    ((a.consistent as f64 + (1.0 - w) * a.opposed as f64) / n).max(0.0)
}

/// The share of `source` points (positions, normals) that `pose` lays within the plane
/// tolerance ([`super::Tuning::plane_tolerance_voxels`] × `voxel`) of the `target` surface
/// (positions, normals, tree; paired within τ), normal lines within
/// [`super::Tuning::normal_angle_deg`]: the tight overlap of the keypoints or of the fine points.
pub(super) fn tight_share(
    source: (&[[f32; 3]], &[[f32; 3]]),
    target: (&[[f32; 3]], &[[f32; 3]], &KdIndex),
    voxel: f64,
    pose: &Rigid,
    params: &AlignParams,
    tau: f64,
) -> f64 {
    let tu = &params.tuning;
    oriented_fit(
        source.0,
        source.1,
        target.0,
        target.1,
        target.2,
        pose,
        tau,
        tu.plane_tolerance_voxels * voxel,
        tu.normal_angle_deg,
    ) as f64
        / source.0.len().max(1) as f64
}

/// Point-to-plane ICP of `points` (SOURCE keypoints, or a sample of them) onto TARGET's
/// keypoints from `start`, scored like every refined pose: tight overlap, explained matches,
/// distinctive evidence.
#[allow(clippy::too_many_arguments)]
pub(super) fn polish(
    points: &[[f32; 3]],
    start: &Rigid,
    icp: &IcpParams,
    pairs: &Pairs,
    distinctive: &Distinctive,
    source: &PreparedScan,
    target: &PreparedScan,
    params: &AlignParams,
    tau: f64,
) -> Scored {
    let out = icp_point_to_plane(
        points,
        &target.keypoints,
        &target.normals,
        target.keypoint_index(),
        start,
        icp,
    );
    scored(
        &out.transform,
        out.iterations,
        pairs,
        distinctive,
        (source, target),
        params,
        tau,
    )
}

/// `pose` scored: its tight overlap, the matches it explains and its distinctive evidence
/// (`iterations`: the ICP iterations that reached it; no free-space test yet).
fn scored(
    pose: &Rigid,
    iterations: usize,
    pairs: &Pairs,
    distinctive: &Distinctive,
    (source, target): (&PreparedScan, &PreparedScan),
    params: &AlignParams,
    tau: f64,
) -> Scored {
    Scored {
        pose: *pose,
        overlap: scored_overlap(source, target, pose, params, tau),
        explained: pairs.support(pose, tau),
        evidence: distinctive.agreement(source, target, pose, tau),
        iterations,
        free_space: None,
    }
}

/// Coarse ICP from the distinct ranked poses and from the leader's alternatives, scored.
pub fn coarse(
    ranked: &Ranked,
    pairs: &Pairs,
    distinctive: &Distinctive,
    source: &PreparedScan,
    target: &PreparedScan,
    params: &AlignParams,
    tau: f64,
) -> Vec<Scored> {
    let tu = &params.tuning;
    let icp = IcpParams {
        tolerance: tu.icp_coarse_tolerance,
        ..coarse_icp(params, tau, source.voxel)
    };
    let stride = source.keypoints.len().div_ceil(tu.icp_sample.max(1)).max(1);
    let sample: Vec<[f32; 3]> = source.keypoints.iter().step_by(stride).copied().collect();
    // Least squares on the inliers came first (cheap); poses that then coincide are polished
    // once.
    let mut starts: Vec<Rigid> = Vec::new();
    for (_, h) in ranked.poses.iter().take(tu.shortlist) {
        if starts.len() >= params.refine_best {
            break;
        }
        if starts
            .iter()
            .all(|s| !consensus::same_pose(s, &h.transform, tu.start_angle_deg, tau))
        {
            starts.push(h.transform);
        }
    }
    let with = |icp: &IcpParams, start: &Rigid| {
        polish(
            &sample,
            start,
            icp,
            pairs,
            distinctive,
            source,
            target,
            params,
            tau,
        )
    };
    let from = |start: &Rigid| with(&icp, start);
    let alternative = IcpParams {
        max_iterations: tu.alternative_icp_iterations.min(icp.max_iterations),
        ..icp
    };
    let from_alternative = |start: &Rigid| with(&alternative, start);
    let mut polished: Vec<Scored> = starts.par_iter().map(from).collect();
    let leader = distinct_best(
        &polished,
        1,
        tu.distinct_angle_deg,
        tu.distinct_distance_taus * tau,
        0.0,
    )
    .first()
    .map(|&i| polished[i].pose);
    if let Some(leader) = leader {
        let (pts, nrm, _) = paired(
            &source.keypoints,
            &target.normals,
            target.keypoint_index(),
            &leader,
            tau,
        );
        let slides: Vec<Vector3<f64>> = analyse(&pts, &nrm, [0.0; 3])
            .weak
            .iter()
            .filter(|w| w.motion == Motion::Slide)
            .map(|w| Vector3::from(w.axis))
            .collect();
        let alts = alternatives(
            &leader,
            &source.keypoints,
            &target.keypoints,
            target.keypoint_index(),
            pairs,
            tau,
            &slides,
        );
        polished.extend(alts.par_iter().map(from_alternative).collect::<Vec<_>>());
        let revolved = revolution::leader_turns(&leader, source, target, pairs, tau, tu);
        let held = IcpParams {
            max_distance: tu.revolution_icp_distance_taus * tau,
            ..icp
        };
        polished.extend(
            revolved
                .par_iter()
                .map(|s| with(&held, s))
                .collect::<Vec<_>>(),
        );
        let fine_held = IcpParams {
            max_distance: tu.fine_max_distance_taus * tau,
            ..icp
        };
        let held_turns =
            revolution::held_turns(&leader, source, target, pairs, params, tau, &fine_held);
        polished.extend(
            held_turns
                .par_iter()
                .map(|pose| scored(pose, 0, pairs, distinctive, (source, target), params, tau))
                .collect::<Vec<_>>(),
        );
        let (target_maps, source_maps) = rayon::join(
            || symmetry::self_maps(target, params, tau),
            || symmetry::self_maps(source, params, tau),
        );
        let turned = symmetry::rivals(&leader, &target_maps, &source_maps);
        polished.extend(turned.par_iter().map(from_alternative).collect::<Vec<_>>());
    }
    polished
}

/// A parallel-face slide is a pose of its own when it lies this many voxel sizes from every
/// other pose (half the smallest slide sought by [`super::slides`], two voxels, so that a slide
/// that ICP carried back to the leader's basin is dropped).
pub const SLIDE_DISTINCT_VOXELS: f64 = 1.0;

/// The coarse poses in ranking order and the fine fit of the best.
pub struct Refined {
    /// Every refined pose: the coarse poses in the order [`coarse`] produced them, then the
    /// leader's parallel-face slides ([`super::slides`]).
    pub polished: Vec<Scored>,
    /// Indices into `polished` of the distinct poses, best first.
    pub order: Vec<usize>,
    /// Most evidence of any coarse pose.
    pub most: Most,
    /// The best pose before the fine fit (the identity when there was none).
    pub coarse: Rigid,
    /// The fine fit of the best coarse pose ([`fit_fine`]); the judge may answer with another
    /// listed pose ([`super::judge`]).
    pub fit: FineFit,
    /// The strongest [`rivalry`] of a distinct pose that differs from the best by a slide only
    /// (rotations within [`super::Tuning::start_angle_deg`]), 0 when there is none; see
    /// [`super::quality::slid_rival`].
    pub slide_rivalry: f64,
}

/// Orders the coarse poses and fits the best one on the fine points. The first `coarse_count`
/// of `polished` are the coarse poses, ordered by [`distinct_best`]; the rest are the leader's
/// parallel-face slides ([`super::slides`]), which differ from it by a few voxels only (less
/// than the distinct distance of the coarse poses). Each such slide, and each coarse pose that
/// `distinct_best` merged into the leader though it has the leader's rotation (within
/// [`super::Tuning::start_angle_deg`]), that lies more than
/// [`SLIDE_DISTINCT_VOXELS`] from every pose kept (rotations within
/// [`super::Tuning::start_angle_deg`]) joins the order as a pose of its own, by score.
pub fn fine(
    polished: Vec<Scored>,
    coarse_count: usize,
    source: &PreparedScan,
    target: &PreparedScan,
    params: &AlignParams,
    tau: f64,
) -> Refined {
    let tu = &params.tuning;
    let mut order = distinct_best(
        &polished[..coarse_count],
        coarse_count,
        tu.distinct_angle_deg,
        tu.distinct_distance_taus * tau,
        0.0,
    );
    let most = Most::of(&polished);
    // Coarse poses that `distinct_best` merged into the leader although they lie a slide away
    // (the leader's rotation, another offset) are rivals of their own, like the parallel-face
    // slides: on a benchmark channel the truth and a pose slid by about two voxels along the
    // channel were refined with 46 and 47 explained matches, and the slid one won unnoticed
    // (DEVELOPERS.md, Registration, "Near-symmetries of the scans").
    let leader = order.first().map(|&i| polished[i].pose);
    let mut merged_slides: Vec<usize> = (0..coarse_count)
        .filter(|i| {
            !order.contains(i)
                && leader.is_some_and(|l| {
                    rotation_error_deg(&polished[*i].pose.rotation, &l.rotation)
                        < tu.start_angle_deg
                })
        })
        .collect();
    // Best first, so that of two merged poses within a voxel the stronger stands for both.
    merged_slides.sort_by(|&a, &b| {
        polished[b]
            .score(most)
            .total_cmp(&polished[a].score(most))
            .then(a.cmp(&b))
    });
    let candidates = merged_slides
        .into_iter()
        .chain(coarse_count..polished.len());
    for i in candidates {
        let apart = order.iter().all(|&j| {
            !consensus::same_pose(
                &polished[i].pose,
                &polished[j].pose,
                tu.start_angle_deg,
                SLIDE_DISTINCT_VOXELS * source.voxel,
            )
        });
        if apart {
            order.push(i);
        }
    }
    order.sort_by(|&a, &b| {
        polished[b]
            .score(most)
            .total_cmp(&polished[a].score(most))
            .then(a.cmp(&b))
    });
    let best = order.first().map(|&i| polished[i]);
    let slide_rivalry = best.map_or(0.0, |b| {
        order[1..]
            .iter()
            .map(|&i| &polished[i])
            .filter(|p| rotation_error_deg(&p.pose.rotation, &b.pose.rotation) < tu.start_angle_deg)
            .map(|p| rivalry(p, &b, most))
            .fold(0.0, f64::max)
    });
    let coarse = best.map_or(Rigid::identity(), |b| b.pose);
    let fit = fit_fine(&coarse, source, target, params, tau);
    Refined {
        polished,
        order,
        most,
        coarse,
        fit,
        slide_rivalry,
    }
}

/// The fine ICP settings of `params` for inlier threshold `tau` and voxel size `voxel`: the
/// coarse ones with the pairing distance [`super::Tuning::fine_max_distance_taus`] and the
/// loss scale floor [`super::Tuning::fine_min_scale_voxels`].
pub(super) fn fine_icp(params: &AlignParams, tau: f64, voxel: f64) -> IcpParams {
    let tu = &params.tuning;
    IcpParams {
        max_distance: tu.fine_max_distance_taus * tau,
        min_scale: tu.fine_min_scale_voxels * voxel,
        ..coarse_icp(params, tau, voxel)
    }
}

/// The settings of the last stage of the fine fit: the fine ones with the pairing distance
/// [`super::Tuning::fine_final_distance_taus`], or `None` when that stage is off (0, or not
/// below [`super::Tuning::fine_max_distance_taus`]). Pairs up to one τ apart include SOURCE
/// points past the edge of TARGET's scan paired with TARGET's edge; on a curved, noisy surface
/// they pull the fit along the overlap (a few degrees on the benchmark's noisiest pairs,
/// DEVELOPERS.md, Registration, "Precision of the fine fit"). Rejecting pairs far apart, as
/// pairs on a mesh boundary are rejected in G. Turk & M. Levoy, "Zippered polygon meshes from
/// range images", SIGGRAPH 1994, is the common practice this follows.
pub fn final_icp(params: &AlignParams, tau: f64, voxel: f64) -> Option<IcpParams> {
    let tu = &params.tuning;
    let d = tu.fine_final_distance_taus;
    (d > 0.0 && d < tu.fine_max_distance_taus).then(|| IcpParams {
        max_distance: d * tau,
        ..fine_icp(params, tau, voxel)
    })
}

/// Point-to-plane ICP of `points` (SOURCE's fine points or keypoints, local frame) onto
/// TARGET's fine points from `start`: at the fine pairing distance, then, when it is on, the last
/// stage ([`final_icp`]) from where that ended; the iterations of both are added. The fine fit
/// and the restart test ([`super::pinning`]) both end this way.
pub(super) fn fit_onto_fine(
    points: &[[f32; 3]],
    target: &PreparedScan,
    start: &Rigid,
    params: &AlignParams,
    tau: f64,
) -> IcpOutcome {
    let (target_points, target_index) = fit_cloud(target, params);
    let run = |from: &Rigid, icp: &IcpParams| {
        icp_point_to_plane(
            points,
            target_points,
            &target.fine_normals,
            target_index,
            from,
            icp,
        )
    };
    let first = run(start, &fine_icp(params, tau, target.voxel));
    match final_icp(params, tau, target.voxel) {
        Some(tight) => {
            let again = run(&first.transform, &tight);
            IcpOutcome {
                iterations: first.iterations + again.iterations,
                ..again
            }
        }
        None => first,
    }
}

/// A scan's fine points and their tree as the fine fit pairs them: smoothed
/// ([`PreparedScan::smoothed_fine`]) when [`super::Tuning::fine_smoothing`] is on.
pub(super) fn fit_cloud<'a>(
    scan: &'a PreparedScan,
    params: &AlignParams,
) -> (&'a [[f32; 3]], &'a KdIndex) {
    match params
        .tuning
        .fine_smoothing
        .then(|| scan.smoothed_fine(&params.tuning))
        .flatten()
    {
        Some(s) => (&s.points, &s.index),
        None => (&scan.fine_points, scan.fine_index()),
    }
}

/// SOURCE's smoothed points for the fine fit and its restart test: `Some` when
/// [`super::Tuning::fine_smoothing`] and [`super::Tuning::fine_smoothing_source`] are both on.
pub(super) fn smoothed_source<'a>(
    scan: &'a PreparedScan,
    params: &AlignParams,
) -> Option<&'a SmoothedFine> {
    let tu = &params.tuning;
    (tu.fine_smoothing && tu.fine_smoothing_source)
        .then(|| scan.smoothed_fine(tu))
        .flatten()
}

/// The fine fit of a pose: where it ends, how many ICP iterations it took, and how firmly the
/// fit holds it.
#[derive(Debug, Clone)]
pub struct FineFit {
    /// SOURCE local → TARGET local after the fine fit.
    pub local: Rigid,
    /// ICP iterations of the fine fit (and of the refit on the stable sample).
    pub icp_iterations: usize,
    /// Constraint analysis of the fit.
    pub constraint: Constraint,
}

/// Point-to-plane ICP of the fine points from `start` (pairing distance
/// [`super::Tuning::fine_max_distance_taus`]), then the constraint analysis of the fit
/// (Gelfand, Ikemoto, Rusinkiewicz & Levoy 2003); where a motion looks weak the fit is redone
/// on a stability-aware sample and judged on every point again.
pub fn fit_fine(
    start: &Rigid,
    source: &PreparedScan,
    target: &PreparedScan,
    params: &AlignParams,
    tau: f64,
) -> FineFit {
    let tu = &params.tuning;
    let fine_icp = fine_icp(params, tau, source.voxel);
    let (fs, ft) = (source, target);
    let source_points = match smoothed_source(fs, params) {
        Some(smoothed) => &smoothed.points[..],
        None => &fs.fine_points[..],
    };
    let (target_points, target_index) = fit_cloud(ft, params);
    let fit = fit_onto_fine(source_points, ft, start, params, tau);
    let last = final_icp(params, tau, source.voxel);
    let last = last.unwrap_or(fine_icp);
    let mut local = fit.transform;
    let mut icp_iterations = fit.iterations;
    let (pts, nrm, idx) = paired(source_points, &ft.fine_normals, target_index, &local, tau);
    let mut constraint = analyse(&pts, &nrm, target.origin);
    if !constraint.weak.is_empty() && pts.len() > tu.stable_sample {
        let keep = stable_sample(
            &pts,
            &nrm,
            tu.stable_sample.max(pts.len() / tu.stable_one_in),
        );
        let chosen: Vec<[f32; 3]> = keep.iter().map(|&k| source_points[idx[k]]).collect();
        let again = icp_point_to_plane(
            &chosen,
            target_points,
            &ft.fine_normals,
            target_index,
            &local,
            &last,
        );
        local = again.transform;
        icp_iterations += again.iterations;
        // Judged on every point again: on the sample, the few most tilted normals of a noisy
        // plane would pass for a constraint.
        let (p2, n2, _) = paired(source_points, &ft.fine_normals, target_index, &local, tau);
        constraint = analyse(&p2, &n2, target.origin);
    }
    FineFit {
        local,
        icp_iterations,
        constraint,
    }
}
