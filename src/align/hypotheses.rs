//! Stage 1 of registration, hypotheses: descriptor matches between two prepared scans and the
//! pose hypotheses they propose, each scored by the matches it explains.
//!
//! Matching ([`super::matching`]) keeps nearest neighbours in descriptor space that pass the
//! mutual check and the ratio test; with [`super::tuning::Tuning::match_neighbours`] `k` ≥ 2,
//! the pairs of each keypoint with its `k` nearest rows (ratio test against the (k+1)-th) also
//! propose and score hypotheses, so that the true match of a keypoint whose symmetric twin is
//! as near still proposes the true pose; the verdict's figures count the kept matches only
//! (unless [`super::tuning::Tuning::neighbours_explain`]). The harmonic method turns every
//! match into one pose (two for a locally symmetric neighbourhood) from the equivariant
//! coefficients ([`super::equivariant::hypotheses`]); the FPFH baseline draws 3-point RANSAC
//! samples ([`super::consensus::ransac`]), which the harmonic method can add to its own with
//! [`super::tuning::Tuning::equivariant_ransac`]; with [`super::tuning::Tuning::pair_partners`]
//! it also corrects each per-match pose by a second match ([`super::equivariant::paired_poses`]).
//! Poses map SOURCE local into TARGET local
//! coordinates; a match counts for a pose when the pose brings its keypoints within the inlier
//! threshold τ.

use super::consensus::{self, Hypothesis, Pairs};
use super::equivariant;
use super::evidence::Distinctive;
use super::matching::{Correspondence, MatchParams, match_features_with_neighbours};
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
    /// The kept matches followed by the k-nearest pairs
    /// ([`super::matching::Matched::neighbours`]): the pairs that propose and score hypotheses.
    pub proposing: Vec<Correspondence>,
    /// The end points of `proposing`, in the same order.
    pub proposing_pairs: Pairs,
}

/// Matches the descriptor rows of `source` against those of `target` with the matching values
/// of `params.tuning`.
pub fn matches(source: &PreparedScan, target: &PreparedScan, params: &AlignParams) -> Matches {
    let tu = &params.tuning;
    let found = match_features_with_neighbours(
        &source.descriptors.rows,
        &target.descriptors.rows,
        source.descriptors.dim,
        &MatchParams {
            max_ratio: tu.match_max_ratio,
            mutual: tu.match_mutual,
            min_keep: tu.match_min_keep,
            max_keep: tu.match_max_keep,
        },
        tu.match_neighbours,
    );
    let correspondences = found.kept;
    let pairs = Pairs::new(&source.keypoints, &target.keypoints, &correspondences);
    let mut proposing = correspondences.clone();
    proposing.extend(found.neighbours);
    let proposing_pairs = Pairs::new(&source.keypoints, &target.keypoints, &proposing);
    Matches {
        correspondences,
        pairs,
        distinctive: Distinctive::new(&found.nearest, tu.match_max_ratio),
        proposing,
        proposing_pairs,
    }
}

/// Pose hypotheses from the proposing pairs, each with the number of them it explains within
/// `tau`.
pub fn propose(
    source: &PreparedScan,
    target: &PreparedScan,
    matches: &Matches,
    params: &AlignParams,
    tau: f64,
) -> Vec<Hypothesis> {
    match params.method {
        Method::Fpfh => consensus::ransac(
            &matches.proposing_pairs,
            tau,
            params.ransac_iterations,
            params.seed,
        ),
        Method::Equivariant => {
            let tu = &params.tuning;
            let searcher =
                equivariant::searcher(tu.descriptor_degree, tu.rotation_ambiguity_margin);
            let per_match = equivariant::per_match(
                &matches.proposing,
                &source.keypoints,
                &target.keypoints,
                &source.descriptors,
                &target.descriptors,
                &searcher,
            );
            let mut poses: Vec<_> = per_match.iter().flatten().copied().collect();
            if tu.pair_partners > 0 {
                poses.extend(equivariant::paired_poses(
                    &matches.proposing_pairs,
                    &per_match,
                    tau,
                    tu.pair_partners,
                    tu.pair_turn_deg,
                ));
            }
            let mut scored = consensus::score(&matches.proposing_pairs, &poses, tau);
            if tu.equivariant_ransac > 0 {
                scored.extend(consensus::ransac(
                    &matches.proposing_pairs,
                    tau,
                    tu.equivariant_ransac,
                    params.seed,
                ));
            }
            scored
        }
    }
}
