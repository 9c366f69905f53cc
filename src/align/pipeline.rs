//! The pair pipeline: keypoints → features → correspondences → hypotheses → refinement → verdict.

use std::time::Instant;

use nalgebra::Vector3;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::candidates::{Candidate, Scored, alternatives, difference, distinct_best, rivalry};
use super::consensus::{self, Hypothesis, Pairs};
use super::constraint::{Constraint, Motion, analyse, paired, stable_sample};
use super::equivariant::{self, EquivariantRecipe};
use super::fpfh::{FPFH_LEN, fpfh};
use super::icp::{IcpParams, RobustLoss, fit_quality, icp_point_to_plane, oriented_fit};
use super::matching::{MatchParams, match_features};
use super::prep::{choose_voxel, figure, prepare, spacing_of};
use super::quality::{self, Figures, Verdict};
use super::residual::full_resolution_rmse;
use super::rigid::Rigid;
use super::tuning::Tuning;
use crate::cloud::Cloud;
use crate::error::{Error, Result};
use crate::spatial::{KdIndex, estimate_spacing_with, voxel_downsample};

/// How correspondences are described and turned into pose hypotheses.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Method {
    /// Harmonic descriptors: invariants to match, equivariant coefficients for one pose per
    /// correspondence.
    Equivariant,
    /// Baseline: FPFH features and 3-point RANSAC.
    Fpfh,
}

impl Method {
    /// The method's name as used in reports and on the command line.
    pub fn name(&self) -> &'static str {
        match self {
            Method::Equivariant => "equivariant",
            Method::Fpfh => "fpfh",
        }
    }

    /// Default feature support radius in voxel sizes: 10 for the harmonic descriptors (their
    /// rotation estimate needs a wide neighbourhood), 5 for FPFH (its usual setting).
    pub fn radius_in_voxels(&self) -> f64 {
        match self {
            Method::Equivariant => 10.0,
            Method::Fpfh => 5.0,
        }
    }
}

/// Registration settings. Lengths in file units.
#[derive(Debug, Clone, Copy)]
pub struct AlignParams {
    /// Feature and hypothesis method.
    pub method: Method,
    /// Voxel size for keypoints; `None` chooses it from the clouds' size and spacing.
    pub voxel: Option<f64>,
    /// Support radius of the features; `None` uses [`Method::radius_in_voxels`] voxel sizes.
    pub radius: Option<f64>,
    /// Inlier threshold in voxel sizes.
    pub inlier_voxels: f64,
    /// RANSAC iterations (baseline method).
    pub ransac_iterations: usize,
    /// Best distinct hypotheses refined by ICP.
    pub refine_best: usize,
    /// Robust loss of the ICP stage.
    pub loss: RobustLoss,
    /// Seed of every random choice (the run is deterministic for a given seed).
    pub seed: u64,
    /// Version of the harmonic descriptors (design, "the descriptor, exactly"). Default 1:
    /// with version 2 the elbow of the demo part scans no longer aligns (tests/align_parts.rs),
    /// so registration stays on version 1 until it is tuned for version 2.
    pub descriptor_version: u32,
    /// Every other tuning value of the pipeline.
    pub tuning: Tuning,
}

impl Default for AlignParams {
    fn default() -> Self {
        AlignParams {
            method: Method::Equivariant,
            voxel: None,
            radius: None,
            inlier_voxels: 2.5,
            ransac_iterations: 20_000,
            refine_best: 12,
            loss: RobustLoss::Tukey,
            seed: 1,
            descriptor_version: 1,
            tuning: Tuning::default(),
        }
    }
}

/// Wall time of one stage.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StageTime {
    /// Stage name.
    pub stage: String,
    /// Seconds.
    pub seconds: f64,
}

/// The result of aligning SOURCE onto TARGET.
#[derive(Debug, Clone)]
pub struct Alignment {
    /// Maps SOURCE file coordinates into TARGET file coordinates.
    pub transform: Rigid,
    /// The same transform between the clouds' local frames.
    pub local: Rigid,
    /// Quality figures.
    pub figures: Figures,
    /// The plain outcome.
    pub verdict: Verdict,
    /// Voxel size used.
    pub voxel: f64,
    /// Feature support radius used.
    pub radius: f64,
    /// Inlier threshold used.
    pub inlier_threshold: f64,
    /// Keypoints in SOURCE and TARGET.
    pub keypoints: [usize; 2],
    /// ICP iterations of the winning pose.
    pub icp_iterations: usize,
    /// Time per stage, in pipeline order.
    pub timings: Vec<StageTime>,
    /// Distinct refined poses, best first (the first is the answer), at most five.
    pub candidates: Vec<Candidate>,
    /// Constraint analysis of the final fit: condition figure and weakly constrained directions.
    pub constraint: Constraint,
    /// The tuning values used.
    pub tuning: Tuning,
}

struct Clock {
    last: Instant,
    stages: Vec<StageTime>,
}

impl Clock {
    fn new() -> Self {
        Clock {
            last: Instant::now(),
            stages: Vec::new(),
        }
    }
    fn lap(&mut self, stage: &str) {
        let now = Instant::now();
        self.stages.push(StageTime {
            stage: stage.to_string(),
            seconds: (now - self.last).as_secs_f64(),
        });
        self.last = now;
    }
}

/// Features at the keypoints of both clouds, as rows of equal length.
struct FeatureRows {
    dim: usize,
    source: Vec<f32>,
    target: Vec<f32>,
}

/// Aligns `source` onto `target` with no initial guess.
pub fn align_pair(source: &Cloud, target: &Cloud, params: &AlignParams) -> Result<Alignment> {
    let mut clock = Clock::new();
    let tu = &params.tuning;
    let voxel = match params.voxel {
        Some(v) if v > 0.0 && v.is_finite() => v,
        Some(v) => {
            return Err(Error::invalid(
                format!("voxel size {} is not a positive number", figure(v)),
                "give a voxel size in file units, e.g. 0.05",
            ));
        }
        None => {
            let (ss, st) = rayon::join(
                || spacing_of("source", &source.positions),
                || spacing_of("target", &target.positions),
            );
            let (ss, st) = (ss?, st?);
            let (vs, vt) = rayon::join(
                || choose_voxel(&source.positions, ss),
                || choose_voxel(&target.positions, st),
            );
            vs.max(vt)
        }
    };
    let radius = params
        .radius
        .unwrap_or(params.method.radius_in_voxels() * voxel);
    if radius.is_nan() || radius <= voxel {
        return Err(Error::invalid(
            format!(
                "support radius {} is not larger than the voxel size {}",
                figure(radius),
                figure(voxel)
            ),
            "give a support radius of several voxel sizes",
        ));
    }
    let tau = params.inlier_voxels * voxel;
    // One pass over the full clouds: points at half the voxel size for the final ICP, and the
    // keypoints taken from those.
    let fine_voxel = tu.fine_voxels * voxel;
    let thin = |pts: &[[f32; 3]]| -> Vec<[f32; 3]> {
        voxel_downsample(pts, fine_voxel as f32)
            .into_iter()
            .map(|i| pts[i])
            .collect()
    };
    let (fine_s, fine_t) = rayon::join(|| thin(&source.positions), || thin(&target.positions));
    let (ps, pt) = rayon::join(
        || prepare("source", &fine_s, voxel),
        || prepare("target", &fine_t, voxel),
    );
    let (ps, pt) = (ps?, pt?);
    clock.lap("keypoints and normals");

    let mut equi = None;
    let rows = match params.method {
        Method::Equivariant => {
            let recipe = EquivariantRecipe {
                radii: vec![radius as f32, (tu.inner_radius_share * radius) as f32],
                degree: tu.descriptor_degree,
                shells: tu.descriptor_shells,
                version: params.descriptor_version,
            };
            let (a, b) = rayon::join(
                || equivariant::describe(&ps.points, &ps.index, &recipe),
                || equivariant::describe(&pt.points, &pt.index, &recipe),
            );
            let (a, b) = (a?, b?);
            let rows = FeatureRows {
                dim: a.dim,
                source: a.rows.clone(),
                target: b.rows.clone(),
            };
            equi = Some((a, b, recipe.degree));
            rows
        }
        Method::Fpfh => {
            let (a, b) = rayon::join(
                || fpfh(&ps.points, &ps.normals, &ps.index, radius as f32),
                || fpfh(&pt.points, &pt.normals, &pt.index, radius as f32),
            );
            FeatureRows {
                dim: FPFH_LEN,
                source: a,
                target: b,
            }
        }
    };
    clock.lap("features");

    let corr = match_features(
        &rows.source,
        &rows.target,
        rows.dim,
        &MatchParams {
            max_ratio: tu.match_max_ratio,
            mutual: tu.match_mutual,
            min_keep: tu.match_min_keep,
            max_keep: tu.match_max_keep,
        },
    );
    let pairs = Pairs::new(&ps.points, &pt.points, &corr);
    clock.lap("matching");

    let hyps: Vec<Hypothesis> = match params.method {
        Method::Fpfh => consensus::ransac(&pairs, tau, params.ransac_iterations, params.seed),
        Method::Equivariant => {
            let (a, b, degree) = equi.as_ref().expect("equivariant features were computed");
            let searcher = equivariant::searcher(*degree);
            let poses = equivariant::hypotheses(&corr, &ps.points, &pt.points, a, b, &searcher);
            consensus::score(&pairs, &poses, tau)
        }
    };
    // Re-rank the strongest distinct hypotheses, each first refined on its inliers, by how many
    // of a subsample of the source keypoints they put close to the target's tangent planes with
    // the surface orientations agreeing: correspondences can be few, the geometry is always
    // there, and a dominant plane (ground) does not favour a wrong pose under a plane-distance
    // test as it does under a plain distance test; the orientation test keeps a pose that lays
    // one flat face on another from counting the edges and faces that cross the target.
    let shortlist = consensus::best_distinct(
        hyps,
        tu.shortlist,
        tu.distinct_angle_deg,
        tu.distinct_distance_taus * tau,
    );
    let stride = ps.points.len().div_ceil(tu.overlap_sample).max(1);
    let sample: Vec<[f32; 3]> = ps.points.iter().step_by(stride).copied().collect();
    let sample_normals: Vec<[f32; 3]> = ps.normals.iter().step_by(stride).copied().collect();
    let mut ranked: Vec<(usize, Hypothesis)> = shortlist
        .par_iter()
        .map(|h| {
            let h =
                consensus::refine_on_inliers(&pairs, &h.transform, tau, tu.inlier_refine_rounds);
            let n = oriented_fit(
                &sample,
                &sample_normals,
                &pt.points,
                &pt.normals,
                &pt.index,
                &h.transform,
                tau,
                2.0 * tu.plane_tolerance_voxels * voxel,
                tu.normal_angle_deg,
            );
            (n, h)
        })
        .collect();
    ranked.sort_by(|x, y| y.0.cmp(&x.0).then(y.1.support.cmp(&x.1.support)));
    clock.lap("hypotheses");

    let icp = IcpParams {
        max_distance: tu.icp_max_distance_taus * tau,
        min_scale: tu.icp_min_scale_voxels * voxel,
        loss: params.loss,
        max_iterations: tu.icp_max_iterations,
        tolerance: tu.icp_tolerance,
    };
    // Least squares on the inliers first (cheap); poses that then coincide are polished once.
    let mut starts: Vec<Rigid> = Vec::new();
    for (_, h) in ranked.iter().take(tu.shortlist) {
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
    let tight_of = |tf: &Rigid| {
        oriented_fit(
            &ps.points,
            &ps.normals,
            &pt.points,
            &pt.normals,
            &pt.index,
            tf,
            tau,
            tu.plane_tolerance_voxels * voxel,
            tu.normal_angle_deg,
        ) as f64
            / ps.points.len() as f64
    };
    let polish = |start: &Rigid| {
        let out = icp_point_to_plane(&ps.points, &pt.points, &pt.normals, &pt.index, start, &icp);
        Scored {
            pose: out.transform,
            overlap: tight_of(&out.transform),
            explained: pairs.support(&out.transform, tau),
            iterations: out.iterations,
        }
    };
    let mut polished: Vec<Scored> = starts.iter().map(polish).collect();
    // The near-symmetric alternatives of the best pose so far (turns about the principal axes
    // of the overlap, flips, slides along weakly constrained directions), refined too: the
    // drawn hypotheses need not contain them.
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
        let (pts, nrm, _) = paired(&ps.points, &pt.normals, &pt.index, &leader, tau);
        let slides: Vec<Vector3<f64>> = analyse(&pts, &nrm, [0.0; 3])
            .weak
            .iter()
            .filter(|w| w.motion == Motion::Slide)
            .map(|w| Vector3::from(w.axis))
            .collect();
        let alts = alternatives(&leader, &ps.points, &pt.index, tau, &slides);
        polished.extend(alts.iter().map(polish));
    }
    clock.lap("refinement");

    let order = distinct_best(
        &polished,
        polished.len(),
        tu.distinct_angle_deg,
        tu.distinct_distance_taus * tau,
        0.0,
    );
    let most = polished.iter().map(|p| p.explained).max().unwrap_or(0);
    let best = order.first().map(|&i| polished[i]);
    let coarse = best.map_or(Rigid::identity(), |b| b.pose);
    // How close each distinct pose comes to the best (1 for the best itself): see
    // [`candidates::rivalry`]. The candidates are the best and its closest rivals.
    let mut rivals: Vec<(usize, f64)> = order
        .iter()
        .map(|&i| {
            let r = best.map_or(0.0, |b| rivalry(&polished[i], &b, most));
            (i, r)
        })
        .collect();
    if rivals.len() > 1 {
        rivals[1..].sort_by(|x, y| y.1.total_cmp(&x.1).then(x.0.cmp(&y.0)));
    }
    let rival = rivals.get(1).map_or(0.0, |r| r.1);
    let listed: Vec<(usize, f64)> = rivals
        .iter()
        .take(tu.candidates)
        .enumerate()
        .filter(|(k, r)| *k == 0 || r.1 >= tu.list_rivalry)
        .map(|(_, r)| *r)
        .collect();
    let tight = best.map_or(0.0, |b| b.overlap);
    let support = best.map_or(1, |b| b.explained.max(1)) as f64;
    // The shortlist holds more poses than were polished: a symmetric shape splits its matches
    // among its symmetric poses, which then rank alike. Compare them on the same subsample.
    let sample_tight = oriented_fit(
        &sample,
        &sample_normals,
        &pt.points,
        &pt.normals,
        &pt.index,
        &coarse,
        tau,
        2.0 * tu.plane_tolerance_voxels * voxel,
        tu.normal_angle_deg,
    );
    let rival = ranked
        .iter()
        .filter(|(_, h)| {
            !consensus::same_pose(
                &h.transform,
                &coarse,
                tu.distinct_angle_deg,
                tu.distinct_distance_taus * tau,
            )
        })
        .map(|(n, h)| {
            let o = *n as f64 / sample_tight.max(1) as f64;
            o.min(h.support as f64 / support)
        })
        .fold(rival, f64::max);
    let margin = if tight > 0.0 {
        (1.0 - rival).clamp(0.0, 1.0)
    } else {
        0.0
    };

    // Final ICP on denser points (half the voxel size), from the winning pose.
    let (fs, ft) = rayon::join(
        || prepare("source", &fine_s, fine_voxel),
        || prepare("target", &fine_t, fine_voxel),
    );
    let (fs, ft) = (fs?, ft?);
    let fine = icp_point_to_plane(
        &fs.points,
        &ft.points,
        &ft.normals,
        &ft.index,
        &coarse,
        &IcpParams {
            max_distance: tu.fine_max_distance_taus * tau,
            min_scale: tu.fine_min_scale_voxels * voxel,
            ..icp
        },
    );
    let mut local = fine.transform;
    let mut icp_iterations = fine.iterations;
    // Constraint analysis of the fit (Gelfand et al. 2003). Where a motion looks weak with
    // every point, the fit is redone on a stability-aware sample (same paper), in which the
    // few points on holes and edges weigh as much as the planes, and judged on that sample.
    let (pts, nrm, idx) = paired(&fs.points, &ft.normals, &ft.index, &local, tau);
    let mut constraint = analyse(&pts, &nrm, target.origin);
    if !constraint.weak.is_empty() && pts.len() > tu.stable_sample {
        let keep = stable_sample(
            &pts,
            &nrm,
            tu.stable_sample.max(pts.len() / tu.stable_one_in),
        );
        let chosen: Vec<[f32; 3]> = keep.iter().map(|&k| fs.points[idx[k]]).collect();
        let again = icp_point_to_plane(
            &chosen,
            &ft.points,
            &ft.normals,
            &ft.index,
            &local,
            &IcpParams {
                max_distance: tu.fine_max_distance_taus * tau,
                min_scale: tu.fine_min_scale_voxels * voxel,
                ..icp
            },
        );
        local = again.transform;
        icp_iterations += again.iterations;
        // Judged on every point again: on the sample, the few most tilted normals of a noisy
        // plane would pass for a constraint.
        let (p2, n2, _) = paired(&fs.points, &ft.normals, &ft.index, &local, tau);
        constraint = analyse(&p2, &n2, target.origin);
    }
    clock.lap("fine ICP");

    let overlap = fit_quality(&ps.points, &pt.index, &local, tau).1 as f64 / ps.points.len() as f64;
    // Inlier RMSE on the full-resolution clouds: pairs closer than three TARGET point spacings
    // (at most one fine voxel) are inside the overlap.
    let target_full = KdIndex::new(&target.positions)?;
    let pairing = estimate_spacing_with(&target.positions, &target_full).map_or(fine_voxel, |s| {
        (tu.rmse_pairing_spacings * s as f64).min(fine_voxel)
    });
    let (rmse, _) = full_resolution_rmse(
        &source.positions,
        &target.positions,
        &target_full,
        &local,
        pairing,
    );
    let inliers = pairs.support(&local, tau);
    let mut figures = Figures {
        rmse,
        overlap,
        correspondences: corr.len(),
        inliers,
        margin,
        confidence: 0.0,
    };
    figures.confidence = quality::confidence(inliers, overlap, margin);
    let mut verdict = quality::verdict(&figures);
    if verdict == Verdict::Confident && !constraint.weak.is_empty() {
        verdict = Verdict::Ambiguous(quality::Reason::WeaklyConstrained);
    }
    // The listed poses, in file coordinates; the first is the answer after the fine fit.
    let centroid = ps
        .points
        .iter()
        .fold(Vector3::zeros(), |a, p| a + crate::geometry::vec3(*p))
        / ps.points.len() as f64;
    let candidates: Vec<Candidate> = listed
        .iter()
        .enumerate()
        .map(|(k, &(i, rivalry))| {
            let p = &polished[i];
            let pose = if k == 0 { local } else { p.pose };
            let (angle_deg, distance) = difference(&local, &pose, &centroid);
            Candidate {
                transform: pose.between_origins(source.origin, target.origin),
                score: p.score(most),
                rivalry,
                overlap: p.overlap,
                explained: p.explained,
                angle_deg,
                distance,
            }
        })
        .collect();
    clock.lap("verdict");
    Ok(Alignment {
        transform: local.between_origins(source.origin, target.origin),
        local,
        figures,
        verdict,
        voxel,
        radius,
        inlier_threshold: tau,
        keypoints: [ps.points.len(), pt.points.len()],
        icp_iterations,
        timings: clock.stages,
        candidates,
        constraint,
        tuning: *tu,
    })
}
