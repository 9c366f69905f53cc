//! Stage 1 of registration, hypotheses: descriptor matches between two prepared scans and the
//! pose hypotheses they propose, each scored by the matches it explains.
//!
//! Matching ([`super::matching`]) keeps nearest neighbours in descriptor space that pass the
//! mutual check and the ratio test (for the harmonic method with
//! [`super::tuning::Tuning::baseline_matches`], the FPFH matches of the same keypoints too, each
//! turned into a pose by the harmonic coefficients all the same); with
//! [`super::tuning::Tuning::match_neighbours`] `k` ≥ 2, the pairs of each keypoint with its `k`
//! nearest rows (ratio test against the (k+1)-th) also propose and score hypotheses, so that the
//! true match of a keypoint whose symmetric twin is as near still proposes the true pose; the
//! verdict's figures count the kept matches only (unless
//! [`super::tuning::Tuning::neighbours_explain`]). The harmonic method turns every match into one
//! pose (two for a locally symmetric neighbourhood) from the equivariant coefficients
//! ([`super::equivariant::hypotheses`]); the FPFH baseline draws 3-point RANSAC samples
//! ([`super::consensus::ransac`]), which the harmonic method can add to its own with
//! [`super::tuning::Tuning::equivariant_ransac`]; with [`super::tuning::Tuning::pair_partners`]
//! it also corrects each per-match pose by a second match ([`super::equivariant::paired_poses`]).
//! Poses map SOURCE local into TARGET local coordinates; a match counts for a pose when the pose
//! brings its keypoints within the inlier threshold τ.

use super::consensus::{self, Hypothesis, Pairs};
use super::equivariant;
use super::evidence::Distinctive;
use super::fpfh::{FPFH_LEN, fpfh};
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
    let mut correspondences = found.kept;
    if tu.baseline_matches && params.method == Method::Equivariant {
        correspondences.extend(baseline_matches(source, target, params, &correspondences));
    }
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

/// The FPFH matches of two scans prepared for the harmonic method that are not among `kept`
/// ([`super::tuning::Tuning::baseline_matches`]): FPFH rows at the keypoints (the baseline's
/// support radius, [`Method::radius_in_voxels`], computed here, per pair) matched with the same
/// filters, in their own order.
fn baseline_matches(
    source: &PreparedScan,
    target: &PreparedScan,
    params: &AlignParams,
    kept: &[Correspondence],
) -> Vec<Correspondence> {
    let tu = &params.tuning;
    let radius = (Method::Fpfh.radius_in_voxels() * source.voxel) as f32;
    let rows = |s: &PreparedScan| fpfh(&s.keypoints, &s.normals, s.keypoint_index(), radius);
    let (a, b) = (rows(source), rows(target));
    let found = match_features_with_neighbours(
        &a,
        &b,
        FPFH_LEN,
        &MatchParams {
            max_ratio: tu.match_max_ratio,
            mutual: tu.match_mutual,
            min_keep: tu.match_min_keep,
            max_keep: tu.match_max_keep,
        },
        1,
    );
    let have: std::collections::HashSet<(u32, u32)> =
        kept.iter().map(|c| (c.source, c.target)).collect();
    found
        .kept
        .into_iter()
        .filter(|c| !have.contains(&(c.source, c.target)))
        .collect()
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
