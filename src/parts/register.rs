//! Registration of a (partial) scan onto a complete part reference, with no initial guess.
//!
//! The general pair pipeline ([`crate::align::align_pair`]) treats both clouds as partial views
//! and needs distinctive keypoint matches; here the reference covers the whole part, so every
//! scan point must lie on it, and a plain global search works on parts with few distinctive
//! features (plates, turned parts):
//! 1. coarse search: for every rotation of an SO(3) grid ([`HopfGrid`] level 1, 576 rotations,
//!    covering radius 27°) the scan's centroid is put on the reference's, then a few trimmed
//!    point-to-point ICP steps (Horn's closed form) on the coarse samples; each start is scored
//!    by its mean distance to the coarse reference (capped at one coarse voxel);
//! 2. medium stage: the best distinct starts go through point-to-plane ICP of an 800-point
//!    sample with a wide window, scored by [`Residuals::score`]; so do the winner's turns about
//!    the reference's principal axes (every 10°, the best dozen by their fit before ICP, and
//!    every quarter and half turn) and its quarter and half turns of the scan about the scan's
//!    own principal axes (a partial view often fits upside down on a face of the part);
//! 3. the best distinct poses are refined by robust point-to-plane ICP ([`icp_point_to_plane`])
//!    on the fine sample against all reference points with their normals, and the pose verdict
//!    compares the winner with its best distinct rival by the points only one of them
//!    explains ([`super::evidence`]).
//!
//! Transforms map the scan's local frame to the reference's local frame here; callers turn
//! them into file coordinates with [`Rigid::between_origins`]. Everything is deterministic.

use nalgebra::{Matrix3, Rotation3, Unit, Vector3};
use rayon::prelude::*;
use serde::Serialize;

use super::deviation::{Residuals, residuals};
use super::reference::Prepared;
use super::scan::PreparedScan;
use crate::align::icp::{IcpParams, RobustLoss, icp_point_to_plane};
use crate::geometry::{Rigid, horn, rotation_error_deg, vec3};
use crate::so3::rotation::HopfGrid;

/// Registration settings.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct FitParams {
    /// Level of the rotation grid of the coarse search (1: 576 rotations).
    pub grid_level: u32,
    /// Trimmed point-to-point ICP steps per grid rotation.
    pub coarse_steps: usize,
    /// Distinct coarse poses passed on to the medium stage (trimmed ICP on every reference
    /// point).
    pub refine: usize,
    /// Turn step about the principal axes tried around the winner, degrees (0: none); the
    /// turns are screened by their fit and the best dozen refined.
    pub turn_step_deg: f64,
}

impl Default for FitParams {
    fn default() -> Self {
        FitParams {
            grid_level: 1,
            coarse_steps: 8,
            refine: 48,
            turn_step_deg: 10.0,
        }
    }
}

/// The pose's own verdict.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum PoseVerdict {
    /// No clearly different pose explains the scan's points as well.
    Confident,
    /// A clearly different pose explains the scan as well (a symmetric part, or a scan that
    /// shows none of what tells the poses apart); the poses are listed.
    Ambiguous,
}

/// A refined pose and its figures.
#[derive(Debug, Clone)]
pub struct Pose {
    /// Scan local frame → reference local frame.
    pub local: Rigid,
    /// Residuals of the fine sample under this pose.
    pub residuals: Residuals,
}

/// The outcome of registering one scan onto one reference.
#[derive(Debug, Clone)]
pub struct Fit {
    /// The best pose.
    pub best: Pose,
    /// Other distinct refined poses, best first (at most four), with the points each explains
    /// that the best does not, and the reverse.
    pub rivals: Vec<(Pose, usize, usize)>,
    /// Verdict on the pose.
    pub pose_verdict: PoseVerdict,
    /// Inlier distance: three times the scan's noise plus a quarter of the reference spacing.
    pub tau: f64,
}

/// Distance for the coarse score and the ICP cutoffs.
fn coarse_tolerance(r: &Prepared) -> f64 {
    2.0 * r.coarse_voxel
}

/// The inlier distance for a scan on a reference (see [`Fit::tau`]).
pub fn inlier_distance(scan: &PreparedScan, r: &Prepared) -> f64 {
    (3.0 * scan.noise + 0.25 * r.spacing).max(1e-6 * r.diagonal)
}

/// Fewest points that count as evidence: 0.4 % of the fine sample, at least 8.
pub fn min_evidence(n: usize) -> usize {
    ((0.004 * n as f64).ceil() as usize).max(8)
}

/// A few trimmed point-to-point ICP steps of `points` against the coarse reference; returns
/// the pose and its coarse cost (mean distance to the coarse reference, each capped at one
/// coarse voxel; lower is better).
fn coarse_icp(points: &[[f32; 3]], r: &Prepared, start: Rigid, steps: usize) -> (Rigid, f64) {
    let tol = coarse_tolerance(r);
    trimmed_icp(
        points,
        &r.coarse,
        &r.coarse_index,
        start,
        steps,
        r.coarse_voxel,
        tol,
    )
}

/// Trimmed point-to-point ICP (Horn's closed form each step): pairs beyond 2.5 × the median
/// distance (and beyond `keep_within`) are dropped. Returns the pose and the mean distance,
/// each capped at `cap`.
fn trimmed_icp(
    points: &[[f32; 3]],
    target: &[[f32; 3]],
    index: &crate::spatial::KdIndex,
    start: Rigid,
    steps: usize,
    cap: f64,
    keep_within: f64,
) -> (Rigid, f64) {
    let mut tf = start;
    let tol2 = (keep_within as f32).powi(2);
    let mut src = Vec::with_capacity(points.len());
    let mut dst = Vec::with_capacity(points.len());
    let mut pairs: Vec<(Vector3<f64>, Vector3<f64>, f32)> = Vec::with_capacity(points.len());
    let mut sorted: Vec<f32> = Vec::with_capacity(points.len());
    for step in 0..=steps {
        pairs.clear();
        for p in points {
            let m = tf.apply(&vec3(*p));
            let (j, d2) = index.nearest_one([m.x as f32, m.y as f32, m.z as f32]);
            pairs.push((m, vec3(target[j]), d2));
        }
        if step == steps {
            let cost = pairs
                .iter()
                .map(|p| (p.2 as f64).sqrt().min(cap))
                .sum::<f64>()
                / points.len().max(1) as f64;
            return (tf, cost);
        }
        sorted.clear();
        sorted.extend(pairs.iter().map(|p| p.2));
        sorted.sort_by(f32::total_cmp);
        // Trim: keep pairs within 2.5 × the median distance (at least those within two
        // coarse voxels).
        let cut = (sorted[sorted.len() / 2] * 6.25).max(tol2);
        src.clear();
        dst.clear();
        for (m, q, d2) in &pairs {
            if *d2 <= cut {
                src.push(*m);
                dst.push(*q);
            }
        }
        if src.len() < 3 {
            break;
        }
        match horn(&src, &dst, None) {
            Some(step_tf) => tf = step_tf.compose(&tf),
            None => break,
        }
    }
    (tf, f64::INFINITY)
}

/// Refines `start` by point-to-plane ICP of the fine sample against the reference.
fn refine(scan: &PreparedScan, r: &Prepared, start: &Rigid, tau: f64) -> Pose {
    let wide = IcpParams {
        max_distance: coarse_tolerance(r),
        min_scale: (0.5 * r.spacing).max(tau / 3.0),
        loss: RobustLoss::Tukey,
        max_iterations: 20,
        tolerance: 1e-5,
    };
    let out = icp_point_to_plane(
        &scan.fine,
        &r.reference.points,
        &r.reference.normals,
        &r.index,
        start,
        &wide,
    );
    let tight = IcpParams {
        max_distance: (4.0 * tau).max(2.0 * r.spacing),
        max_iterations: 10,
        ..wide
    };
    let out = icp_point_to_plane(
        &scan.fine,
        &r.reference.points,
        &r.reference.normals,
        &r.index,
        &out.transform,
        &tight,
    );
    Pose {
        local: out.transform,
        residuals: residuals(&scan.fine, r, &out.transform, tau),
    }
}

fn distinct(a: &Rigid, b: &Rigid, at: &Vector3<f64>, shift: f64) -> bool {
    rotation_error_deg(&a.rotation, &b.rotation) > 5.0 || (a.apply(at) - b.apply(at)).norm() > shift
}

/// Registers `scan` onto the reference `r` (module docs).
pub fn fit(scan: &PreparedScan, r: &Prepared, params: &FitParams) -> Fit {
    let tau = inlier_distance(scan, r);
    let grid = HopfGrid::new(params.grid_level);
    let starts: Vec<(Rigid, f64)> = grid
        .matrices()
        .par_iter()
        .map(|rot| {
            let t = r.centroid - rot * scan.centroid;
            coarse_icp(&scan.coarse, r, Rigid::new(*rot, t), params.coarse_steps)
        })
        .collect();
    let mut order: Vec<usize> = (0..starts.len()).collect();
    order.sort_by(|&a, &b| starts[a].1.total_cmp(&starts[b].1).then(a.cmp(&b)));
    let mut picked: Vec<Rigid> = Vec::new();
    for i in order {
        if picked.len() >= params.refine {
            break;
        }
        let tf = starts[i].0;
        if picked
            .iter()
            .all(|p| distinct(p, &tf, &scan.centroid, 2.0 * r.coarse_voxel))
        {
            picked.push(tf);
        }
    }
    // Medium stage: point-to-plane ICP of a mid-size sample against every reference point,
    // with a wide window and a robust scale of at least a quarter coarse voxel; then the
    // winner's turns about the principal axes, the same way.
    let step = scan.fine.len().div_ceil(800).max(1);
    let mid: Vec<[f32; 3]> = scan.fine.iter().step_by(step).copied().collect();
    let medium_icp = IcpParams {
        max_distance: coarse_tolerance(r),
        min_scale: (0.25 * r.coarse_voxel).max(tau),
        loss: RobustLoss::Tukey,
        max_iterations: 12,
        tolerance: 1e-5,
    };
    let medium = |start: &Rigid| {
        let out = icp_point_to_plane(
            &mid,
            &r.reference.points,
            &r.reference.normals,
            &r.index,
            start,
            &medium_icp,
        );
        let cost = residuals(&mid, r, &out.transform, tau).score();
        (out.transform, cost)
    };
    let mut mids: Vec<(Rigid, f64)> = picked.par_iter().map(medium).collect();
    mids.sort_by(|a, b| a.1.total_cmp(&b.1));
    if params.turn_step_deg > 0.0 && !mids.is_empty() {
        let best = mids[0].0;
        let n = (360.0 / params.turn_step_deg).round() as usize;
        let turns: Vec<Rigid> = (0..3)
            .flat_map(|axis| (1..n).map(move |k| (axis, k)))
            .map(|(axis, k)| {
                let a = Unit::new_normalize(r.axes.column(axis).into_owned());
                let rot: Matrix3<f64> =
                    *Rotation3::from_axis_angle(&a, (k as f64 * params.turn_step_deg).to_radians())
                        .matrix();
                let turn = Rigid::new(rot, r.centroid - rot * r.centroid);
                turn.compose(&best)
            })
            .collect();
        // Screen the turns by their fit before any ICP step, then refine the best dozen.
        let cap = 4.0 * tau;
        let mut screened: Vec<(f64, Rigid)> = turns
            .par_iter()
            .map(|t| {
                let cost = mid
                    .iter()
                    .map(|p| {
                        let m = t.apply(&vec3(*p));
                        let d2 = r.index.nearest_one([m.x as f32, m.y as f32, m.z as f32]).1;
                        (d2 as f64).sqrt().min(cap)
                    })
                    .sum::<f64>();
                (cost, *t)
            })
            .collect();
        screened.sort_by(|a, b| a.0.total_cmp(&b.0));
        screened.truncate(12);
        // The quarter and half turns always go on (a flip lays faces on their opposites: it
        // fits badly before ICP and well after).
        let quarter = (90.0 / params.turn_step_deg).round() as usize;
        if quarter >= 1 && (90.0 - quarter as f64 * params.turn_step_deg).abs() < 1e-9 {
            for axis in 0..3 {
                for k in [quarter, 2 * quarter, 3 * quarter] {
                    let t = turns[axis * (n - 1) + k - 1];
                    if !screened.iter().any(|s| s.1 == t) {
                        screened.push((0.0, t));
                    }
                }
            }
        }
        // Quarter and half turns of the scan about its own principal axes through its
        // centroid: a partial view often fits upside down on a face of the part.
        let scan_axes = super::reference::principal_axes(&scan.fine, &scan.centroid);
        for axis in 0..3 {
            let a = Unit::new_normalize(scan_axes.column(axis).into_owned());
            for k in 1..4 {
                let rot: Matrix3<f64> =
                    *Rotation3::from_axis_angle(&a, k as f64 * std::f64::consts::FRAC_PI_2)
                        .matrix();
                let flip = Rigid::new(rot, scan.centroid - rot * scan.centroid);
                screened.push((0.0, best.compose(&flip)));
            }
        }
        let turned: Vec<(Rigid, f64)> = screened.par_iter().map(|(_, t)| medium(t)).collect();
        mids.extend(turned);
        mids.sort_by(|a, b| a.1.total_cmp(&b.1));
    }
    let mut finals: Vec<Rigid> = Vec::new();
    for (tf, _) in &mids {
        if finals.len() >= 8 {
            break;
        }
        if finals
            .iter()
            .all(|p| distinct(p, tf, &scan.centroid, 2.0 * tau.max(r.spacing)))
        {
            finals.push(*tf);
        }
    }
    let mut poses: Vec<Pose> = finals.par_iter().map(|s| refine(scan, r, s, tau)).collect();
    sort_poses(&mut poses);
    let best = poses.remove(0);
    let mut rivals: Vec<(Pose, usize, usize)> = Vec::new();
    for p in poses {
        if rivals.len() >= 4 {
            break;
        }
        let clear = distinct(
            &best.local,
            &p.local,
            &scan.centroid,
            2.0 * tau.max(r.spacing),
        ) && rivals.iter().all(|q| {
            distinct(
                &q.0.local,
                &p.local,
                &scan.centroid,
                2.0 * tau.max(r.spacing),
            )
        });
        if clear {
            let (for_best, for_rival) = super::evidence(&best.residuals, &p.residuals, tau);
            rivals.push((p, for_best, for_rival));
        }
    }
    let need = min_evidence(scan.fine.len());
    let pose_verdict = match rivals.first() {
        Some((_, for_best, _)) if *for_best < need => PoseVerdict::Ambiguous,
        _ => PoseVerdict::Confident,
    };
    Fit {
        best,
        rivals,
        pose_verdict,
        tau,
    }
}

/// Best explained first (share within the inlier distance is decided at the caller's tau; here
/// the RMS-trimmed sum of distances orders them), ties by position.
fn sort_poses(poses: &mut [Pose]) {
    poses.sort_by(|a, b| a.residuals.score().total_cmp(&b.residuals.score()));
}

/// Rotation between two poses in degrees.
pub fn angle_between(a: &Rigid, b: &Rigid) -> f64 {
    rotation_error_deg(&a.rotation, &b.rotation)
}
