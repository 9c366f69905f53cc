//! The pair pipeline: two clouds prepared once each ([`PreparedScan`]), then four stages —
//! [`hypotheses`] → [`rank`] → [`refine`] → [`judge`].

use std::time::Instant;

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::candidates::Candidate;
use super::constraint::Constraint;
use super::icp::RobustLoss;
use super::prepared_scan::{Geometry, PreparedScan, pair_voxel, support_radius};
use super::quality::{Figures, Verdict};
use super::rigid::Rigid;
use super::tuning::Tuning;
use super::visibility::{Viewpoints, Visibility};
use super::{hypotheses, judge, rank, refine, slides};
use crate::cloud::Cloud;
use crate::error::{Error, Result};

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
    /// Version of the harmonic descriptors (design, "the descriptor, exactly"). Default 1, the
    /// version the registration benchmark and the verdict rules were measured with: version 2,
    /// tried there, gave the same benchmark subset and depot stations but cost the demo elbow
    /// its confident verdict (tests/align_parts.rs; DEVELOPERS.md, Registration).
    pub descriptor_version: u32,
    /// Every other tuning value of the pipeline.
    pub tuning: Tuning,
    /// Sensor positions of SOURCE and TARGET where known (each in its own file's coordinates):
    /// refined poses are then tested for free-space consistency ([`super::visibility`]). Used
    /// by the pair functions; [`super::align_many`] ignores them (one pair of positions does not
    /// describe many scans).
    pub viewpoints: Viewpoints,
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
            viewpoints: Viewpoints::default(),
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
    /// The sensor positions used by the free-space test (file coordinates).
    pub viewpoints: Viewpoints,
}

/// Wall time per stage, lap by lap.
pub(crate) struct Clock {
    last: Instant,
    stages: Vec<StageTime>,
}

impl Clock {
    pub(crate) fn new() -> Self {
        Clock {
            last: Instant::now(),
            stages: Vec::new(),
        }
    }
    pub(crate) fn lap(&mut self, stage: &str) {
        let now = Instant::now();
        self.stages.push(StageTime {
            stage: stage.to_string(),
            seconds: (now - self.last).as_secs_f64(),
        });
        self.last = now;
    }
}

/// Aligns `source` onto `target` with no initial guess. Messages call the clouds "source" and
/// "target"; [`align_named`] names them.
pub fn align_pair(source: &Cloud, target: &Cloud, params: &AlignParams) -> Result<Alignment> {
    align_named(("source", source), ("target", target), params)
}

/// Aligns `source` onto `target` with no initial guess; each cloud comes with its display name
/// (the file name), used in messages. Both are prepared at [`pair_voxel`] and registered by
/// [`align_prepared`]; the timings include the preparation.
pub fn align_named(
    source: (&str, &Cloud),
    target: (&str, &Cloud),
    params: &AlignParams,
) -> Result<Alignment> {
    let mut clock = Clock::new();
    let voxel = pair_voxel(params, source, target)?;
    support_radius(params, voxel)?;
    let mut both = prepare_timed(&[source, target], params, voxel, &mut clock)?.into_iter();
    match (both.next(), both.next()) {
        (Some(ps), Some(pt)) => register(&ps, &pt, params, clock),
        _ => Err(Error::internal(
            "two clouds did not give two prepared scans",
            "report this as a bug",
        )),
    }
}

/// Prepares `clouds` (name, cloud) at `voxel`, all at once, in order; the keypoint step and
/// the descriptor step are laps of `clock`. The first failing cloud's error is returned.
pub(crate) fn prepare_timed(
    clouds: &[(&str, &Cloud)],
    params: &AlignParams,
    voxel: f64,
    clock: &mut Clock,
) -> Result<Vec<PreparedScan>> {
    let geometry: Vec<Result<Geometry<'_>>> = clouds
        .par_iter()
        .map(|&(name, cloud)| Geometry::of(name, cloud, params, voxel))
        .collect();
    let geometry: Vec<Geometry<'_>> = geometry.into_iter().collect::<Result<_>>()?;
    clock.lap("keypoints and normals");
    let scans: Vec<Result<PreparedScan>> = geometry
        .into_par_iter()
        .map(|g| g.describe(params))
        .collect();
    let scans = scans.into_iter().collect::<Result<_>>()?;
    clock.lap("features");
    Ok(scans)
}

/// Aligns two prepared scans: `source` onto `target`. Both must have been prepared with the
/// method, voxel size, support radius and descriptor recipe that `params` asks for
/// ([`PreparedScan::check_comparable`]); the other settings of `params` (seed, loss, tuning of
/// the stages) apply here. Gives the same result as [`align_pair`] on the clouds the scans were
/// prepared from, at the same voxel size; the timings start at matching.
pub fn align_prepared(
    source: &PreparedScan,
    target: &PreparedScan,
    params: &AlignParams,
) -> Result<Alignment> {
    source.check_comparable(target, params)?;
    register(source, target, params, Clock::new())
}

/// What the stages produced on the way to an [`Alignment`], for diagnosis (which stage lost a
/// pose): every transform maps SOURCE file coordinates into TARGET file coordinates.
#[derive(Debug, Clone, Default)]
pub struct Trace {
    /// Every pose hypothesis, in the order proposed.
    pub hypotheses: Vec<Rigid>,
    /// The shortlist after ranking, best first.
    pub ranked: Vec<Rigid>,
    /// Every coarse-refined pose (ranked starts first, then the leader's alternatives) with its
    /// tight overlap and explained matches.
    pub refined: Vec<(Rigid, f64, usize)>,
}

/// [`align_pair`] that also returns the [`Trace`] of its stages.
pub fn align_pair_traced(
    source: &Cloud,
    target: &Cloud,
    params: &AlignParams,
) -> Result<(Alignment, Trace)> {
    let mut clock = Clock::new();
    let (s, t) = (("source", source), ("target", target));
    let voxel = pair_voxel(params, s, t)?;
    support_radius(params, voxel)?;
    let both = prepare_timed(&[s, t], params, voxel, &mut clock)?;
    let mut trace = Trace::default();
    let a = register_traced(&both[0], &both[1], params, clock, Some(&mut trace))?;
    Ok((a, trace))
}

/// The four stages on two prepared scans: hypotheses → rank → refine → judge.
pub(crate) fn register(
    source: &PreparedScan,
    target: &PreparedScan,
    params: &AlignParams,
    clock: Clock,
) -> Result<Alignment> {
    register_traced(source, target, params, clock, None)
}

/// [`register`], filling `trace` when given.
fn register_traced(
    source: &PreparedScan,
    target: &PreparedScan,
    params: &AlignParams,
    mut clock: Clock,
    trace: Option<&mut Trace>,
) -> Result<Alignment> {
    let tau = params.inlier_voxels * source.voxel;
    let found = hypotheses::matches(source, target, params);
    clock.lap("matching");
    let proposed = hypotheses::propose(source, target, &found, params, tau);
    let file = |r: &Rigid| r.between_origins(source.origin, target.origin);
    let traced_hypotheses: Vec<Rigid> = match trace {
        Some(_) => proposed.iter().map(|h| file(&h.transform)).collect(),
        None => Vec::new(),
    };
    // The pairs whose explanation the refined poses and the verdict count.
    let explaining = match params.tuning.neighbours_explain {
        true => (&found.proposing_pairs, found.proposing.len()),
        false => (&found.pairs, found.correspondences.len()),
    };
    let ranked = rank::rank(
        proposed,
        &found.proposing_pairs,
        source,
        target,
        &params.tuning,
        tau,
    );
    clock.lap("hypotheses");
    let mut polished = refine::coarse(
        &ranked,
        explaining.0,
        &found.distinctive,
        source,
        target,
        params,
        tau,
    );
    let coarse_count = polished.len();
    let slid = slides::parallel_slides(
        &polished,
        explaining.0,
        &found.distinctive,
        source,
        target,
        params,
        tau,
    );
    polished.extend(slid);
    let seen = Visibility::new(source, target, &params.viewpoints, &params.tuning);
    seen.assess(&mut polished);
    if let Some(t) = trace {
        t.hypotheses = traced_hypotheses;
        t.ranked = ranked
            .poses
            .iter()
            .map(|(_, h)| file(&h.transform))
            .collect();
        t.refined = polished
            .iter()
            .map(|p| (file(&p.pose), p.overlap, p.explained))
            .collect();
    }
    clock.lap("refinement");
    let refined = refine::fine(polished, coarse_count, source, target, params, tau);
    clock.lap("fine ICP");
    let judged = judge::judge(&judge::Inputs {
        refined: &refined,
        ranked: &ranked,
        pairs: explaining.0,
        correspondences: explaining.1,
        distinctive: &found.distinctive,
        source,
        target,
        params,
        seen: &seen,
        tau,
    })?;
    clock.lap("verdict");
    Ok(Alignment {
        transform: judged
            .fit
            .local
            .between_origins(source.origin, target.origin),
        local: judged.fit.local,
        figures: judged.figures,
        verdict: judged.verdict,
        voxel: source.voxel,
        radius: source.settings.radius,
        inlier_threshold: tau,
        keypoints: [source.keypoints.len(), target.keypoints.len()],
        icp_iterations: judged.fit.icp_iterations,
        timings: clock.stages,
        candidates: judged.candidates,
        constraint: judged.fit.constraint,
        tuning: params.tuning,
        viewpoints: params.viewpoints,
    })
}
