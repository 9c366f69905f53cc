//! Quality figures of an alignment, the confidence figure and the verdict.
//!
//! - *consensus*: correspondences explained by the final transform (within the inlier threshold);
//! - *overlap*: fraction of source keypoints with a target keypoint within the inlier threshold;
//! - *margin*: `1 − ρ`, where `ρ` is the largest [`super::candidates::rivalry`] of the clearly
//!   different refined poses (another rotation by more than 10° or a shift by more than 5
//!   inlier thresholds) and of the hypotheses of the shortlist: built from the tight overlap `o`
//!   (source keypoints within the inlier threshold of a target keypoint, within a quarter voxel
//!   of its tangent plane, and with normals within 30° of each other, sign ignored) and the
//!   correspondences explained `k`. Near 0 for symmetric shapes, where a rival keeps both; a
//!   dominant plane lets a rival keep overlap but not the matched features.
//!
//! confidence = `(1 − e^(−consensus/10)) · min(1, overlap/0.25) · min(1, margin/0.25)`, in [0, 1].
//! The verdict is confident when consensus ≥ [`MIN_CONSENSUS`]
//! ([`super::Tuning::fpfh_min_consensus`] for the FPFH baseline), overlap ≥ [`MIN_OVERLAP`],
//! margin ≥ [`MIN_MARGIN`] and the fit has no weak direction (set by the pipeline), and then
//! only when restarts of the fit a little off return to it and the fit made the other way round
//! ends within [`super::Tuning::reverse_fit_max_deg`] of it ([`super::pinning`], in the judge);
//! a low margin, a weak direction, a fit that is not pinned or fits that part make it
//! ambiguous, the rest not found.

use serde::{Deserialize, Serialize};

/// Fewest correspondences the final pose must explain (its agreeing pairs). 15, up from 10: on
/// new seeds of the registration benchmark, `confident` answers with 10–14 agreeing pairs were
/// wrong more often than right (noisy elbows fitted 2–6° off; DEVELOPERS.md, Registration,
/// "Fewest agreeing pairs"), while from 15 on nearly all were right. A confidence figure of at
/// least `1 − e^(−1.5)` ≈ 0.78 from the matches alone.
pub const MIN_CONSENSUS: usize = 15;

/// The fewest agreeing pairs of a `confident` answer by `method`: [`MIN_CONSENSUS`] for the
/// default method, [`super::Tuning::fpfh_min_consensus`] (25) for the FPFH baseline.
pub fn min_consensus(method: super::Method, tu: &super::Tuning) -> usize {
    match method {
        super::Method::Equivariant => MIN_CONSENSUS,
        super::Method::Fpfh => tu.fpfh_min_consensus,
    }
}

/// Smallest overlap fraction accepted.
pub const MIN_OVERLAP: f64 = 0.08;
/// Smallest margin over a clearly different pose (a rival within 0.8 of the best makes the
/// verdict ambiguous; set from the benchmark subset, DEVELOPERS.md).
pub const MIN_MARGIN: f64 = 0.2;

/// Smallest margin over a rival that differs from the best by a slide only (the same rotation,
/// another offset: a parallel-face slide of [`super::slides`], e.g. a plate's two faces laid on
/// each other): a rival within 0.5 of the best makes the verdict ambiguous. Lower than
/// [`MIN_MARGIN`] because such a rival shares the best pose's rotation and most of its surface
/// fit, so the overlap that ranks them says least about which is right (set on the
/// L-bracket benchmark pairs, DEVELOPERS.md, Registration, "Weak directions").
pub const MIN_SLIDE_MARGIN: f64 = 0.5;

/// True when a rival that differs from the best by a slide only comes close enough
/// (`slide_rivalry`, see [`super::candidates::rivalry`]) to make a confident verdict
/// ambiguous ([`MIN_SLIDE_MARGIN`]).
pub fn slid_rival(slide_rivalry: f64) -> bool {
    1.0 - slide_rivalry < MIN_SLIDE_MARGIN
}

/// True when a listed rival has real support of its own: one of `shares` (each rival's
/// consistent overlap and explained matches, as shares of the answer's) reaches
/// [`super::Tuning::rival_overlap_share`] in overlap and [`super::Tuning::rival_match_share`]
/// in matches, or exceeds [`super::Tuning::rival_overlap_lead`] in overlap whatever its
/// matches. On the registration benchmark a stacked wrong answer was often confident while
/// a rival laying as much of SOURCE on TARGET (often the true, side-by-side pose) explained
/// fewer matches: the matches, not the surface, had decided.
pub fn rival_as_large(shares: impl IntoIterator<Item = (f64, f64)>, tu: &super::Tuning) -> bool {
    shares.into_iter().any(|(o, k)| {
        (o >= tu.rival_overlap_share && k >= tu.rival_match_share) || o > tu.rival_overlap_lead
    })
}

/// Why no confident alignment was found.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Reason {
    /// Too few keypoints matched distinctively, or too few of the matches agree on one pose.
    TooFewDistinctivePoints,
    /// The best pose leaves too little of the source on the target.
    TooLittleOverlap,
    /// A clearly different pose fits almost as well (symmetric or repetitive shape).
    AmbiguousSymmetricShape,
    /// The fit is free along a direction: no surface opposes a slide or a turn (see
    /// [`super::constraint`]).
    WeaklyConstrained,
    /// The best pose puts part of one scan where the other scan's sensor saw through (see
    /// [`super::visibility`]).
    ContradictsFreeSpace,
    /// The matched features favour another listed pose, but not clearly; the answer is the
    /// listed pose that lays more of SOURCE on TARGET (see [`super::judge::judge`]), and the
    /// matches' choice is the second candidate.
    MatchesFavourAnotherPose,
    /// The fit is not pinned down: restarted a few degrees or a few inlier thresholds away
    /// along its weakest motions, it ends at another pose that fits the fine points as well
    /// (a shallow basin of a nearly symmetric shape, see [`super::pinning`]); that pose is the
    /// second candidate.
    FitNotPinned,
    /// Fitted the other way round (TARGET onto SOURCE), the pose turns by more than
    /// [`super::Tuning::reverse_fit_max_deg`] (see [`super::pinning::reverse_fit_turn`]).
    FitsDisagree,
}

impl Reason {
    /// A sentence for people.
    pub fn explain(&self) -> &'static str {
        match self {
            Reason::TooFewDistinctivePoints => {
                "too few distinctive points agree on one pose (15 matched pairs, 25 with --method fpfh); give scans with more overlap or a larger support radius, or use the default method"
            }
            Reason::TooLittleOverlap => {
                "too little overlap between the scans after the best pose; check that they show the same place"
            }
            Reason::AmbiguousSymmetricShape => {
                "the shape is symmetric or repetitive: a clearly different pose fits almost as well; see the candidates"
            }
            Reason::ContradictsFreeSpace => {
                "the best pose puts part of one scan where the other scan's sensor saw through (see free_space_violation of the candidates); check the sensor positions given, or whether the scans show the same objects in the same state"
            }
            Reason::MatchesFavourAnotherPose => {
                "the matched features did not single out one pose: this pose lays more of one scan on the other, while the matches favour candidate 2; see the candidates"
            }
            Reason::FitNotPinned => {
                "the fit is not pinned down: started a few degrees or a few points' spacing away, it settles at another pose that fits as well (candidate 2); check which of the two is right, or give scans that show more of the distinctive detail"
            }
            Reason::FitsDisagree => {
                "fitted the other way round (the target's points onto the source's) the pose turns by more than a degree (see fit.reverse_fit_turn_deg): what pins it is too slight for the noise; check the pose, or give scans with less noise or more of the distinctive detail"
            }
            Reason::WeaklyConstrained => {
                "the fit is free along a direction (see weak directions): nothing in the overlap stops a slide or turn; give scans that share an edge, hole or corner across it"
            }
        }
    }
}

/// The plain outcome.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case", tag = "outcome", content = "reason")]
pub enum Verdict {
    /// The transform is supported by the figures.
    Confident,
    /// More than one pose explains the data (rival poses listed, or the fit is free along a
    /// direction); why.
    Ambiguous(Reason),
    /// No confident alignment; why.
    NotFound(Reason),
}

/// Figures behind the verdict.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Figures {
    /// RMSE of the point-to-plane distances of full-resolution SOURCE points (a sample) to the
    /// TARGET's local planes, over the pairs closer than three TARGET point spacings (at most
    /// half the voxel size), i.e. inside the overlap (see [`super::residual`]).
    pub rmse: f64,
    /// Fraction of source keypoints within the inlier threshold of the target.
    pub overlap: f64,
    /// Correspondences found in feature space.
    pub correspondences: usize,
    /// Correspondences explained by the final transform.
    pub inliers: usize,
    /// How much better the pose is than a clearly different one (module docs), in [0, 1].
    pub margin: f64,
    /// Confidence figure in [0, 1].
    pub confidence: f64,
    /// Turn between the answer and its fit made the other way round, degrees
    /// ([`super::pinning::reverse_fit_turn`]); measured only for an answer that passed every
    /// other test of a `confident` verdict.
    pub reverse_fit_turn_deg: Option<f64>,
}

/// Confidence from consensus, overlap and margin (formula in the module docs).
pub fn confidence(inliers: usize, overlap: f64, margin: f64) -> f64 {
    let s = 1.0 - (-(inliers as f64) / 10.0).exp();
    s * (overlap / 0.25).clamp(0.0, 1.0) * (margin / 0.25).clamp(0.0, 1.0)
}

/// The verdict for a set of figures (the default method's floor of agreeing pairs; the FPFH
/// baseline's higher floor, [`min_consensus`], is applied by the judge after every other test,
/// so that it only takes `confident` away).
pub fn verdict(f: &Figures) -> Verdict {
    if f.inliers < MIN_CONSENSUS {
        Verdict::NotFound(Reason::TooFewDistinctivePoints)
    } else if f.overlap.is_nan() || f.overlap < MIN_OVERLAP {
        Verdict::NotFound(Reason::TooLittleOverlap)
    } else if f.margin.is_nan() || f.margin < MIN_MARGIN {
        Verdict::Ambiguous(Reason::AmbiguousSymmetricShape)
    } else {
        Verdict::Confident
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn verdict_names_the_first_failed_condition() {
        let mut f = Figures {
            rmse: 0.01,
            overlap: 0.5,
            correspondences: 200,
            inliers: 40,
            margin: 0.6,
            confidence: 0.0,
            reverse_fit_turn_deg: None,
        };
        assert_eq!(verdict(&f), Verdict::Confident);
        f.margin = 0.05;
        assert_eq!(
            verdict(&f),
            Verdict::Ambiguous(Reason::AmbiguousSymmetricShape)
        );
        f.overlap = 0.01;
        assert_eq!(verdict(&f), Verdict::NotFound(Reason::TooLittleOverlap));
        f.inliers = 3;
        assert_eq!(
            verdict(&f),
            Verdict::NotFound(Reason::TooFewDistinctivePoints)
        );
        let tu = crate::align::Tuning::default();
        assert_eq!(min_consensus(crate::align::Method::Equivariant, &tu), 15);
        assert_eq!(min_consensus(crate::align::Method::Fpfh, &tu), 25);
        // At the default shares (half the overlap, a quarter of the matches).
        assert!(rival_as_large([(0.4, 1.0), (0.55, 0.3)], &tu));
        assert!(!rival_as_large([(0.4, 1.0), (0.45, 0.3)], &tu));
        assert!(!rival_as_large([(0.6, 0.2)], &tu));
        assert!(!rival_as_large([(1.0, 0.1)], &tu), "dominant plane");
        assert!(
            !rival_as_large([(0.98, 0.12)], &tu),
            "the depot's ground-plane rivals"
        );
        assert!(
            rival_as_large([(1.1, 0.0)], &tu),
            "more overlap, no matches"
        );
        assert!(!rival_as_large([], &tu));
        assert!(confidence(40, 0.5, 0.6) > 0.98);
        assert!(confidence(40, 0.5, 0.0) == 0.0);
    }
}
