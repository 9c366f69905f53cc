//! Stage 1 of registration, hypotheses: descriptor matches between two prepared scans and the
//! pose hypotheses they propose, each scored by the matches it explains.
//!
//! Matching ([`super::matching`]) keeps nearest neighbours in descriptor space that pass the
//! mutual check and the ratio test. The harmonic method turns every match into one pose (two
//! for a locally symmetric neighbourhood) from the equivariant coefficients
//! ([`super::equivariant::hypotheses`]); the FPFH baseline draws 3-point RANSAC samples
//! ([`super::consensus::ransac`]). Poses map SOURCE local into TARGET local coordinates; a
//! match counts for a pose when the pose brings its keypoints within the inlier threshold τ.

use super::consensus::{self, Hypothesis, Pairs};
use super::equivariant;
use super::evidence::Distinctive;
use super::matching::{Correspondence, MatchParams, match_features_with_nearest};
use super::pipeline::{AlignParams, Method};
use super::prepared_scan::PreparedScan;

/// The matches of two prepared scans, as index pairs and as point pairs.
pub struct Matches {
    /// Keypoint index pairs (SOURCE, TARGET), most distinctive first.
    pub correspondences: Vec<Correspondence>,
    /// The matched keypoint positions, in the same order.
    pub pairs: Pairs,
    /// The distinctive SOURCE keypoints, weighted (see [`super::evidence`]).
    pub distinctive: Distinctive,
}

/// Matches the descriptor rows of `source` against those of `target` with the matching values
/// of `params.tuning`.
pub fn matches(source: &PreparedScan, target: &PreparedScan, params: &AlignParams) -> Matches {
    let tu = &params.tuning;
    let (correspondences, nearest) = match_features_with_nearest(
        &source.descriptors.rows,
        &target.descriptors.rows,
        source.descriptors.dim,
        &MatchParams {
            max_ratio: tu.match_max_ratio,
            mutual: tu.match_mutual,
            min_keep: tu.match_min_keep,
            max_keep: tu.match_max_keep,
        },
    );
    let pairs = Pairs::new(&source.keypoints, &target.keypoints, &correspondences);
    Matches {
        correspondences,
        pairs,
        distinctive: Distinctive::new(&nearest, tu.match_max_ratio),
    }
}

/// Pose hypotheses from the matches, each with the number of matches it explains within `tau`.
pub fn propose(
    source: &PreparedScan,
    target: &PreparedScan,
    matches: &Matches,
    params: &AlignParams,
    tau: f64,
) -> Vec<Hypothesis> {
    match params.method {
        Method::Fpfh => {
            consensus::ransac(&matches.pairs, tau, params.ransac_iterations, params.seed)
        }
        Method::Equivariant => {
            let tu = &params.tuning;
            let searcher =
                equivariant::searcher(tu.descriptor_degree, tu.rotation_ambiguity_margin);
            let poses = equivariant::hypotheses(
                &matches.correspondences,
                &source.keypoints,
                &target.keypoints,
                &source.descriptors,
                &target.descriptors,
                &searcher,
            );
            consensus::score(&matches.pairs, &poses, tau)
        }
    }
}
