//! Registration with no initial guess: the rigid transform that carries one scan onto another.
//!
//! Conventions: a transform is a [`Rigid`] `p ↦ R p + t` mapping SOURCE coordinates into
//! TARGET's frame. Internally both clouds are handled in their own f32 local frames (about their
//! own f64 origins); [`Alignment::transform`] is re-expressed in the files' own coordinates in
//! f64. Distances (voxel size, radii, RMSE) are in file units, usually metres. Angles in the
//! results are in degrees.
//!
//! Each cloud is first prepared once ([`PreparedScan`], [`prepared_scan`]): voxel-grid keypoints
//! ([`prep`]; voxel size from the measured spacing unless given), PCA normals, the descriptors
//! at the keypoints (the baseline FPFH, [`fpfh`], or rotation-invariant harmonic descriptors
//! with their equivariant coefficients, [`equivariant`]), the fine points for the final fit.
//! Two prepared scans then go through four stages ([`align_prepared`]; [`align_pair`] prepares
//! and registers two clouds), one module each, every tuning value in [`Tuning`]:
//! 1. [`hypotheses`]: nearest neighbours in descriptor space with the mutual check and ratio
//!    test ([`matching`]); pose hypotheses (3-point RANSAC for the baseline; one per
//!    correspondence from the equivariant coefficients), scored by the correspondences they
//!    explain ([`consensus`]);
//! 2. [`rank`]: the best distinct hypotheses refined on their inliers (weighted Umeyama) and
//!    re-ranked by tight overlap (plane distance and normal agreement) on a keypoint subsample;
//! 3. [`refine`]: point-to-plane [`icp`] with a robust loss from the best distinct poses and
//!    from the near-symmetric alternatives of the leader ([`candidates`]: turns about the
//!    principal axes of the overlap, half turns about those of TARGET and of both scans, slides
//!    along weak directions; and the leader composed with the near-self-symmetries of either
//!    scan, [`symmetry`], or turned about TARGET's axis of near-revolution, [`revolution`],
//!    both off by default), ranked by tight
//!    overlap × explained matches; fine ICP from the best pose; [`constraint`]: the 6×6 normal
//!    matrix of the fit, its weak directions, and a refit on a stability-aware sample when a
//!    direction looks weak (Gelfand, Ikemoto, Rusinkiewicz & Levoy 2003);
//!    Where a sensor position is known ([`AlignParams::viewpoints`]), every refined pose is
//!    also tested for free-space consistency ([`visibility`]): points it moves into space a
//!    sensor saw through count against it in the ranking and in the rivalry;
//! 4. [`judge`]: rivals ([`candidates::rivalry`]) and margin, the inlier RMSE on the
//!    full-resolution clouds ([`residual`]), overlap, a confidence figure and the verdict
//!    ([`quality`]: `confident`, `ambiguous` with the candidates listed, or `not_found`).
//!
//! [`multi`] registers more than two scans through a maximum spanning tree of pair confidences,
//! each scan prepared once per voxel size. Messages name each cloud by its display name.
//! Nothing here prints; every stage is deterministic for any number of threads.

pub mod candidates;
pub mod consensus;
pub mod constraint;
pub mod equivariant;
pub mod evidence;
pub mod export;
pub mod fpfh;
pub mod hypotheses;
pub mod icp;
pub mod judge;
pub mod matching;
pub mod multi;
pub mod off_plane;
pub mod pinning;
pub mod pipeline;
pub mod prep;
pub mod prepared_scan;
pub mod quality;
pub mod rank;
pub mod refine;
pub mod report;
pub mod residual;
pub mod revolution;
pub mod sides;
pub mod slides;
pub mod symmetry;
pub mod truth;
pub mod tuning;
pub mod visibility;

/// The rigid-transform type and closed-form fits live in [`crate::geometry`]; this path is
/// kept so that `align::rigid::…` and `align::Rigid` keep working.
pub use crate::geometry::rigid;

pub use candidates::Candidate;
pub use constraint::{Constraint, Motion, WeakDirection};
pub use icp::RobustLoss;
pub use multi::{LoopResidual, MultiAlignment, PairAlignment, align_many, align_many_named};
pub use pipeline::{
    AlignParams, Alignment, Method, StageTime, Trace, align_named, align_pair, align_pair_traced,
    align_prepared,
};
pub use prepared_scan::PreparedScan;
pub use quality::{Figures, Reason, Verdict};
pub use rigid::{Rigid, horn, rotation_error_deg, umeyama};
pub use tuning::Tuning;
pub use visibility::Viewpoints;
