//! The tuning values of the pair pipeline, in one place, written into every report.
//!
//! Lengths are given as multiples of the keypoint voxel size (`…_voxels`) or of the inlier
//! threshold τ (`…_taus`), so that one set of values serves scans of any scale; angles are in
//! degrees. [`Tuning::default`] holds the values the demo scans, the part scans and the
//! registration benchmark were checked with (tests/align_*.rs); changing one changes results.

use serde::{Deserialize, Serialize};

/// Every tuning value of [`super::align_pair`] besides the ones on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Tuning {
    /// Edge of the fine grid (final ICP points, and the points the keypoints are taken from),
    /// in voxel sizes.
    pub fine_voxels: f64,
    /// Highest spherical-harmonic degree of the harmonic descriptors.
    pub descriptor_degree: usize,
    /// Radial shells of the harmonic descriptors.
    pub descriptor_shells: usize,
    /// Second, inner support radius of the harmonic descriptors, as a share of the first.
    pub inner_radius_share: f64,
    /// Third, innermost support radius of the harmonic descriptors, as a share of the first
    /// (0: two radii only; a quarter listed the true pose less often on the mid-size
    /// benchmark, DEVELOPERS.md, Registration, "Scale-aware defaults").
    pub third_radius_share: f64,
    /// The rotation search of a correspondence also proposes its second-best rotation when
    /// that one's rotation-dependent score comes within this share of the best's (a locally
    /// symmetric neighbourhood; 0.3 gave the same results as 0.1 on the mid-size benchmark).
    pub rotation_ambiguity_margin: f64,
    /// Harmonic method only: this many 3-point RANSAC draws ([`super::consensus::ransac`]) on
    /// the proposing pairs add their poses to the one-per-match poses (0: none). A sample of
    /// three matches fixes the pose from positions alone, where the rotation search of a
    /// locally symmetric neighbourhood (a plane, a cylinder) cannot (DEVELOPERS.md,
    /// Registration, "Why the harmonic method trails FPFH").
    pub equivariant_ransac: usize,
    /// Harmonic method only: each per-match pose is also corrected by up to this many second
    /// matches (the longest levers that qualify; [`super::equivariant::paired_poses`]); 0: off.
    pub pair_partners: usize,
    /// A second match qualifies for [`Tuning::pair_partners`] when the per-match rotation
    /// turns its lever within this many degrees of the TARGET lever.
    pub pair_turn_deg: f64,
    /// Harmonic method only: the FPFH matches of the same keypoints join the kept matches
    /// (computed per pair; each proposes its pose from the harmonic coefficients and counts
    /// in the consensus, the ranking and the verdict like the others). On the pairs where the
    /// baseline is right and the harmonic method is not, the baseline keeps about 1.7 times as
    /// many true matches (DEVELOPERS.md, Registration, "Why the harmonic method trails FPFH").
    pub baseline_matches: bool,
    /// Largest ratio of best to second-best feature distance kept as a match.
    pub match_max_ratio: f32,
    /// Keep only matches that are each other's nearest neighbours.
    pub match_mutual: bool,
    /// When the filters leave fewer matches than this, the most distinctive remaining ones are
    /// added.
    pub match_min_keep: usize,
    /// Most matches kept (most distinctive first).
    pub match_max_keep: usize,
    /// Besides the kept matches, the pairs of each SOURCE keypoint with its this many nearest
    /// TARGET rows propose and score hypotheses (ratio test against the next row; at most
    /// [`Tuning::match_max_keep`] more; 1: none, [`super::matching::Matched::neighbours`]).
    pub match_neighbours: usize,
    /// The matches a refined pose explains (ranking of the refined poses, rivalry, verdict)
    /// are counted among the kept matches and the k-nearest pairs of
    /// [`Tuning::match_neighbours`] instead of the kept matches alone.
    pub neighbours_explain: bool,
    /// Distinct hypotheses re-ranked by overlap.
    pub shortlist: usize,
    /// When above [`Tuning::shortlist`], this many distinct hypotheses are refined on their
    /// inliers before the shortlist is cut from them ([`super::rank::rank`]).
    pub shortlist_pool: usize,
    /// The ranked order alternates between the best on the surface and the best by support
    /// ([`super::rank::rank`]).
    pub rank_interleave: bool,
    /// Two poses are the same when their rotations differ by less than this, degrees, and …
    pub distinct_angle_deg: f64,
    /// … their translations by less than this, in inlier thresholds τ.
    pub distinct_distance_taus: f64,
    /// Least-squares rounds on the inliers of each shortlisted hypothesis.
    pub inlier_refine_rounds: usize,
    /// Source keypoints (a strided subsample) used to re-rank hypotheses by overlap.
    pub overlap_sample: usize,
    /// Tolerance of the tight overlap (distance to the target's tangent plane), in voxel sizes;
    /// the re-ranking on the subsample uses twice this.
    pub plane_tolerance_voxels: f64,
    /// Largest angle between the source and target normal lines for a point to count in the
    /// tight overlap, degrees.
    pub normal_angle_deg: f64,
    /// Start poses of the ICP stage coincide when their rotations differ by less than this,
    /// degrees, and their translations by less than one τ.
    pub start_angle_deg: f64,
    /// Largest pairing distance of the coarse ICP, in τ.
    pub icp_max_distance_taus: f64,
    /// Smallest scale of the robust loss of the coarse ICP, in voxel sizes.
    pub icp_min_scale_voxels: f64,
    /// Most iterations of each ICP run.
    pub icp_max_iterations: usize,
    /// ICP has converged when an update rotates less than this (radians) and moves less than
    /// this times its largest pairing distance.
    pub icp_tolerance: f64,
    /// Most SOURCE keypoints paired in each coarse ICP run (an even stride through them);
    /// the refined poses are then scored on every keypoint. The default keeps every keypoint:
    /// 1 500 with a coarse tolerance of 1e-4 cut the benchmark subset's CPU time by about 40 %,
    /// and 2 000 cuts the 100 k-point bench by about 45 %, but 1 500 to 3 000 all turn a borderline stacked
    /// shaft pair of the subset confident and wrong (DEVELOPERS.md, Registration, "Speed of the
    /// refine stage" and "Scale-aware defaults").
    pub icp_sample: usize,
    /// Convergence tolerance of the coarse ICP runs (as [`Tuning::icp_tolerance`]).
    pub icp_coarse_tolerance: f64,
    /// Most iterations of the coarse ICP runs from the leader's near-symmetric alternatives
    /// ([`super::candidates::alternatives`] and the self-map rivals of [`super::symmetry`]),
    /// at most [`Tuning::icp_max_iterations`]. 20 takes about a fifth (0.25 s) off the
    /// 100 k-point bench pair, but lists 4–6 fewer truths per benchmark set, so the default is
    /// the full cap (DEVELOPERS.md, Registration, "The near-symmetric alternatives hold the
    /// refinement's time").
    pub alternative_icp_iterations: usize,
    /// Largest pairing distance of the fine ICP, in τ.
    pub fine_max_distance_taus: f64,
    /// Smallest scale of the robust loss of the fine ICP, in voxel sizes.
    pub fine_min_scale_voxels: f64,
    /// Smallest stability-aware sample for the constraint check of the final fit.
    pub stable_sample: usize,
    /// The stability-aware sample keeps at least one in this many of the paired points.
    pub stable_one_in: usize,
    /// Parallel-face slides of the leading pose ([`super::slides`]) are sought this far along
    /// each face normal of the overlap, in τ.
    pub slide_range_taus: f64,
    /// A slide is refined when its tight overlap reaches this share of the leader's.
    pub slide_min_share: f64,
    /// Each SOURCE keypoint that a pose lays on the opposite side of a surface from the one
    /// TARGET saw ([`super::sides`]) takes this many keypoints off the tight overlap that scores
    /// it ([`super::refine::scored_overlap`]; 0: off).
    pub side_weight: f64,
    /// Distinct refined poses listed as candidates.
    pub candidates: usize,
    /// Rivals listed as candidates come at least this close to the best (see
    /// [`super::candidates::rivalry`]).
    pub list_rivalry: f64,
    /// A distinct pose whose consistent overlap is at least this share of the answer's has
    /// real support of its own and is listed whatever its matches say (weight: that share);
    /// see `judge::listing_weight`.
    pub list_overlap_share: f64,
    /// A listed rival whose consistent overlap (tight overlap less the free-space penalty) is at
    /// least this share of the answer's, and which explains at least
    /// [`Tuning::rival_match_share`] of the answer's matches, has real support of its own: the
    /// verdict is then `ambiguous` (a stacked pose against a side-by-side one; set from the full
    /// benchmark, DEVELOPERS.md, Registration, "Rivals with as much overlap": 0.9 there, 0.8
    /// since "Half turns of stacked pairs", which makes two confident half turns `ambiguous`; 0.5
    /// since "Rival rule at half the overlap": on new seeds the stacked answer lays far more of
    /// SOURCE on TARGET than the true pose, and at 0.8 10 of 59 confident answers were wrong on
    /// one such run, at 0.5 1 of 40 on another). Above 1 the rule is off.
    pub rival_overlap_share: f64,
    /// See [`Tuning::rival_overlap_share`]: a rival that keeps the surface but explains fewer
    /// than this share of the answer's matches is the dominant-plane case (the depot demo's
    /// rivals keep the yard's ground: 71–77 % coverage against 78 %, 9–12 matches against 80
    /// with the harmonic descriptors, up to 16 against 73 with FPFH) and does not count.
    pub rival_match_share: f64,
    /// A listed rival whose consistent overlap exceeds this multiple of the answer's has real
    /// support whatever its matches: the surface prefers it and only the matches chose the
    /// answer, the mark of a nearly symmetric part (a quarter-turned boss plate on new seeds,
    /// DEVELOPERS.md, Registration, "A rival that covers more"). The depot demo's ground-plane
    /// rivals stay below it (up to 0.978 of the answer's coverage). Above it by any amount, the
    /// verdict is `ambiguous`; a very large value turns the rule off.
    pub rival_overlap_lead: f64,
    /// A listed rival whose consistent overlap is at least this share of the answer's makes the
    /// verdict `ambiguous` whatever its matches, when it also lays at least
    /// [`Tuning::rival_off_plane_share`] as much as the answer of SOURCE's keypoints off its
    /// largest plane ([`super::off_plane`]): the surfaces alone do not decide between two such
    /// poses, and on stacked pairs the matches follow the overlap (DEVELOPERS.md, Registration,
    /// "A rival laying nearly as much, off the largest plane"). Above 1 the rule is off.
    pub rival_near_overlap: f64,
    /// See [`Tuning::rival_near_overlap`]: a rival that keeps only the largest plane (the depot
    /// demo's ground-plane rivals lay 0–1 % as much as the answer off the ground) does not count.
    pub rival_off_plane_share: f64,
    /// When the verdict is not `confident`, the distinct refined pose with the largest
    /// consistent overlap becomes the answer when it exceeds the first answer's by more than
    /// this ([`super::judge::judge`]; set from the benchmark, DEVELOPERS.md, Registration, "The
    /// answer of an ambiguous verdict"), on the keypoints
    /// ([`super::candidates::Scored::consistent_overlap`]) when [`Tuning::answer_fine_pool`] is
    /// 0. Above 1 the rule is off, whichever way it is measured.
    pub answer_overlap_lead: f64,
    /// … and when it explains at least this many matches (a pose that no matched pair agrees
    /// with is not taken for the answer).
    pub answer_min_explained: usize,
    /// When the verdict is not `confident` and this is above 0: the first answer and up to
    /// this many other distinct refined poses (largest consistent overlap first, each
    /// explaining at least [`Tuning::answer_min_explained`] matches) are fitted finely, and
    /// the answer is the one whose fine points lie most on TARGET's (share of SOURCE's fine
    /// points within the plane tolerance, free space as in the consistent overlap), when it
    /// leads the first answer by more than [`Tuning::answer_fine_lead`]. 0: the choice is
    /// made on the coarse poses' keypoints (the rule before; DEVELOPERS.md, Registration, "The
    /// answer chosen on fine fits").
    pub answer_fine_pool: usize,
    /// The lead of fine overlap (share of SOURCE's fine points) by which a pose of the
    /// [`Tuning::answer_fine_pool`] takes the first answer's place: on three full benchmark
    /// sets leads of 0 to 0.01 gave the same count of right answers within ±2 of 918 pairs;
    /// 0.005 is about 1.4 standard errors of a share near one half over 20 000 fine points,
    /// and keeps a scene-scale pair whose true pose leads by 0.007 (DEVELOPERS.md,
    /// Registration, "The answer chosen on fine fits").
    pub answer_fine_lead: f64,
    /// Full-resolution pairs count in the RMSE when closer than this many TARGET point
    /// spacings (and at most one fine voxel).
    pub rmse_pairing_spacings: f64,
    /// Free-space test ([`super::visibility`]): a point counts as seen through when it lies in
    /// front of the nearest measured surface in its direction by more than this, in voxel
    /// sizes.
    pub free_space_margin_voxels: f64,
    /// … or this many times the two scans' noise estimates added in quadrature, whichever is
    /// larger.
    pub free_space_noise_sigmas: f64,
    /// Direction cells of the free-space test span this many fine voxels at the median range
    /// of the scan's fine points.
    pub free_space_cell_voxels: f64,
    /// Most keypoints of each scan tested for free space per pose (a strided sample).
    pub free_space_sample: usize,
    /// An answer that puts more than this share of the tested points in seen-through space is
    /// not a result (`contradicts_free_space`): the true poses of the depot stations and of
    /// 32 benchmark pairs put at most 0.1 % there (DEVELOPERS.md, Registration, free space;
    /// set on those pairs).
    pub free_space_max_share: f64,
    /// Near-self-symmetries kept per scan ([`super::symmetry`]); each gives the leading pose
    /// one more rival to refine. 0 turns the search off: the default, since with 3 it changed
    /// no verdict on the stacked benchmark shapes and cost about 14 % more time per pair
    /// (DEVELOPERS.md, Registration, "Near-symmetries of the scans").
    pub self_maps: usize,
    /// Most query keypoints per scan in the search for near-self-symmetries (an even stride).
    pub self_map_queries: usize,
    /// A self-map is a near-symmetry when it lays at least this share of the scan's keypoints on
    /// the scan's own surface (tight overlap, normals agreeing).
    pub self_map_overlap: f64,
    /// The leading pose is also turned about TARGET's axis of near-revolution
    /// ([`super::revolution`]) every this many degrees, each turn refined by the coarse ICP
    /// within [`Tuning::revolution_icp_distance_taus`] (0: off, the default: no truth newly
    /// listed on the mid-size benchmark, DEVELOPERS.md, Registration, "Turns about an axis of
    /// revolution").
    pub revolution_step_deg: f64,
    /// … when that axis is real: the free turn's residual cost is at most this share of the
    /// next firmest turn's ([`super::revolution::Axis::ratio`]).
    pub revolution_max_ratio: f64,
    /// Largest pairing distance of the coarse ICP of those turns, in τ: the turn about the axis
    /// is nearly free, and with the coarse [`Tuning::icp_max_distance_taus`] the fit drifts
    /// from a start near the truth to the stacked overlap (DEVELOPERS.md, Registration, "Turns
    /// about an axis of revolution").
    pub revolution_icp_distance_taus: f64,
    /// Turns of the leading pose about TARGET's axis of near-revolution with the turn held
    /// ([`super::revolution::held_turns`]): this many of the best local maxima of the tight
    /// overlap over the turn angle (sampled every [`Tuning::held_turn_step_deg`]) are fitted by
    /// ICP with their turn about the axis held fixed, so that the fit cannot drift back to the
    /// stacked pose (0: off).
    pub held_turns: usize,
    /// Angle step of the tight-overlap profile of [`Tuning::held_turns`], degrees.
    pub held_turn_step_deg: f64,
    /// The profile of [`Tuning::held_turns`] is the tight overlap over the share of SOURCE
    /// keypoints within τ (how well the overlapping part fits, whatever its extent) instead of
    /// the tight overlap itself.
    pub held_turn_fit_share: bool,
    /// Restart test of a `confident` answer ([`super::pinning`]): ICP of SOURCE's keypoints
    /// onto TARGET's fine points is restarted from the answer moved along this many of the
    /// weakest motions of its normal matrix, in both senses (0: off).
    pub pin_directions: usize,
    /// A restart along a rotational motion turns the answer this many degrees.
    pub pin_turn_deg: f64,
    /// A restart along a translational motion slides the answer this many τ.
    pub pin_slide_taus: f64,
    /// A restart ends away from the answer when its rotation differs by more than this many
    /// degrees …
    pub pin_angle_deg: f64,
    /// … or it moves SOURCE's fine centroid by more than this many τ.
    pub pin_distance_taus: f64,
    /// A restart's end fits as well as the answer when its tight fine overlap is at least
    /// 1 − this share of the answer's.
    pub pin_fit_margin: f64,
    /// A `confident` answer is also fitted the other way round (TARGET's fine points onto
    /// SOURCE's, from the answer's inverse; [`super::pinning::reverse_fit_turn`]); when that fit
    /// ends turned more than this many degrees from the answer, the verdict is `ambiguous`
    /// (0: off). 1°, half the 2° of a right answer on the registration benchmark; set from the
    /// confident answers of five benchmark sets (DEVELOPERS.md, Registration, "Fitted both
    /// ways").
    pub reverse_fit_max_deg: f64,
    /// Fewest agreeing pairs of a `confident` answer of the FPFH baseline
    /// ([`super::quality::min_consensus`]; the default method's floor is
    /// [`super::quality::MIN_CONSENSUS`], 15). 25: FPFH's histograms tell fewer surface points
    /// apart, so on a near-symmetric part more of its matches agree on a wrong pose by chance.
    /// On three full benchmark sets its `confident` answers with 15–24 agreeing pairs were right
    /// 7 times in 9 (the two wrong ones noisy pipe bends fitted about 5° off), those with 25 or
    /// more 116 times in 117 (DEVELOPERS.md, Registration, "Fewest agreeing pairs of FPFH").
    pub fpfh_min_consensus: usize,
    /// When the verdict is not `confident`, the listed rivals are fitted finely like the answer
    /// (ICP on the fine points, [`super::refine::fit_fine`]) before they are reported; a rival
    /// whose fine fit lands on a pose already listed (within [`Tuning::start_angle_deg`] and one
    /// τ) gives its place to the next by listing weight. The verdict is taken on the coarse
    /// poses before this.
    pub list_fine_fit: bool,
    /// The fine fit ends with a second ICP whose pairing distance is this many τ
    /// ([`super::refine::final_icp`]; 0: off); the restart test's fits end the same way.
    pub fine_final_distance_taus: f64,
    /// The fine fit pairs both scans' fine points smoothed: each moved onto the least-squares
    /// plane of its normal neighbourhood ([`crate::spatial::project_to_local_planes`]), so that
    /// the noise of the two scans does not pull the fit on curved surfaces. Off: measured on
    /// new seeds it mends the noisy curved near misses but not enough else to be adopted
    /// (DEVELOPERS.md, Registration, "Smoothed fine fit").
    pub fine_smoothing: bool,
    /// A fine point is smoothed only where its neighbourhood spreads across its plane no more
    /// than this many times the median spread (the neighbourhood covariance's smallest
    /// eigenvalue) of the scan's fine points: noise, not an edge
    /// ([`crate::spatial::project_to_local_planes`]).
    pub fine_smoothing_spread: f64,
    /// Neighbours of the smoothing's planes (0: as many as the fine normals take).
    pub fine_smoothing_neighbours: usize,
    /// The smoothing moves SOURCE's points too (else only TARGET's).
    pub fine_smoothing_source: bool,
    /// The agreeing matches of the answer (the verdict's consensus, at least
    /// [`super::quality::MIN_CONSENSUS`] for `confident`) are the larger of the counts at its
    /// fine fit and at its coarse pose: a fit that moves the pose by a fraction of τ can carry a
    /// few matched keypoints across the τ gate (the demo elbow: 13 at the coarse pose, 10 at
    /// the old fine fit 0.8° off, 8 at the precise fit; DEVELOPERS.md, Registration,
    /// "Precision of the fine fit").
    pub consensus_at_coarse: bool,
}

impl Default for Tuning {
    fn default() -> Self {
        Tuning {
            fine_voxels: 0.5,
            descriptor_degree: 4,
            descriptor_shells: 6,
            inner_radius_share: 0.5,
            third_radius_share: 0.0,
            rotation_ambiguity_margin: 0.1,
            equivariant_ransac: 0,
            pair_partners: 0,
            pair_turn_deg: 20.0,
            baseline_matches: false,
            match_max_ratio: 0.9,
            match_mutual: true,
            match_min_keep: 300,
            match_max_keep: 3000,
            match_neighbours: 1,
            neighbours_explain: false,
            shortlist: 40,
            shortlist_pool: 40,
            rank_interleave: false,
            distinct_angle_deg: 10.0,
            distinct_distance_taus: 5.0,
            inlier_refine_rounds: 4,
            overlap_sample: 400,
            plane_tolerance_voxels: 0.25,
            normal_angle_deg: 30.0,
            start_angle_deg: 2.0,
            icp_max_distance_taus: 2.0,
            icp_min_scale_voxels: 0.05,
            icp_max_iterations: 40,
            icp_tolerance: 1e-6,
            icp_sample: 1_000_000,
            icp_coarse_tolerance: 1e-6,
            alternative_icp_iterations: 40,
            fine_max_distance_taus: 1.0,
            fine_min_scale_voxels: 0.02,
            stable_sample: 2000,
            stable_one_in: 4,
            slide_range_taus: 4.0,
            slide_min_share: 0.3,
            side_weight: 0.0,
            candidates: 5,
            list_rivalry: 0.3,
            list_overlap_share: 0.8,
            rival_overlap_share: 0.5,
            rival_match_share: 0.25,
            rival_overlap_lead: 1.0,
            rival_near_overlap: 0.8,
            rival_off_plane_share: 0.1,
            answer_overlap_lead: 0.01,
            answer_min_explained: 1,
            answer_fine_pool: 4,
            answer_fine_lead: 0.005,
            rmse_pairing_spacings: 3.0,
            free_space_margin_voxels: 1.5,
            free_space_noise_sigmas: 3.0,
            free_space_cell_voxels: 2.0,
            free_space_sample: 2000,
            free_space_max_share: 0.02,
            self_maps: 0,
            self_map_queries: 200,
            self_map_overlap: 0.3,
            revolution_step_deg: 0.0,
            revolution_max_ratio: 0.2,
            revolution_icp_distance_taus: 0.5,
            held_turns: 0,
            held_turn_step_deg: 2.0,
            held_turn_fit_share: false,
            pin_directions: 2,
            pin_turn_deg: 3.0,
            pin_slide_taus: 1.0,
            pin_angle_deg: 1.0,
            pin_distance_taus: 1.0,
            pin_fit_margin: 0.03,
            reverse_fit_max_deg: 1.0,
            fpfh_min_consensus: 25,
            list_fine_fit: true,
            fine_final_distance_taus: 0.3,
            fine_smoothing: false,
            fine_smoothing_spread: 1.0,
            fine_smoothing_neighbours: 0,
            fine_smoothing_source: true,
            consensus_at_coarse: true,
        }
    }
}
