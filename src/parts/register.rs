//! Registration of a (partial) scan onto a complete part reference, with no initial guess.
//!
//! The general pair pipeline ([`crate::align::align_pair`]) treats both clouds as partial views
//! and needs distinctive keypoint matches; here the reference covers the whole part, so every
//! scan point must lie on it, and a plain global search works on parts with few distinctive
//! features (plates, turned parts):
//! 1. coarse search: for every rotation of an SO(3) grid ([`HopfGrid`] level 1, 576 rotations,
//!    covering radius 27°) the scan's centroid is put on the reference's centroid and on six
//!    places around it (± half the reference's half extent along each principal axis: a
//!    partial view's centroid lies off the part's); each start gets two trimmed point-to-point
//!    ICP steps (Horn's closed form) on 150 coarse scan points, scored by the mean distance to
//!    the paired reference points (capped at one coarse voxel); the best 96 distinct go on for
//!    six more steps. Every pairing in the search goes through the reference's closest-point
//!    lookup grid ([`super::lookup::ClosestGrid`], constant time) instead of a k-d tree;
//! 2. medium stage: the best 48 distinct poses go through point-to-plane ICP (Tukey, through
//!    the lookup grid) of an 800-point sample with a wide window, scored by
//!    [`Residuals::score`] on exact nearest points; so do the winner's turns about the
//!    reference's principal axes (every 10°, the best dozen by their fit before ICP, and every
//!    quarter and half turn) and its quarter and half turns of the scan about the scan's own
//!    principal axes (a partial view often fits upside down on a face of the part); then the
//!    best 8 distinct poses are moved on a 7 × 7 × 7 lattice of coarse-voxel shifts along the
//!    principal axes and the best shift of each, when it fits better, goes through the medium
//!    stage too (a view of a plate-like part settles one plate thickness off);
//! 3. the best 6 distinct poses are refined on the fine sample (point-to-plane through the
//!    grid, then robust point-to-plane ICP against the exact nearest reference points with
//!    their normals, [`icp_point_to_plane`]), and the pose verdict compares the winner with
//!    its best distinct rival by the points only one of them explains ([`super::evidence`]).
//!
//! Transforms map the scan's local frame to the reference's local frame here; callers turn
//! them into file coordinates with [`Rigid::between_origins`]. Everything is deterministic.

use nalgebra::{Matrix3, Matrix6, Rotation3, Unit, Vector3, Vector6};
use rayon::prelude::*;
use serde::Serialize;

use super::deviation::{Residuals, residuals, residuals_seq};
use super::reference::Prepared;
use super::scan::PreparedScan;
use crate::align::icp::{IcpParams, RobustLoss, icp_point_to_plane, point_to_plane_step};
use crate::geometry::{Rigid, horn, rotation_error_deg, vec3};
use crate::so3::rotation::HopfGrid;

/// Registration settings.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct FitParams {
    /// Level of the rotation grid of the coarse search (1: 576 rotations, 2: 4 608).
    pub grid_level: u32,
    /// Offsets of the coarse starts' translation, as a share of the reference's half extent
    /// along each principal axis (0: the centroid only; see `start_places`).
    pub offset_share: f64,
    /// Trimmed point-to-point ICP steps from every grid rotation before the screening.
    pub screen_steps: usize,
    /// Most scan points used in the screening steps (a stride of the coarse sample).
    pub screen_points: usize,
    /// Distinct screened starts kept for the rest of the coarse steps.
    pub screen_keep: usize,
    /// Further trimmed point-to-point ICP steps of the kept starts.
    pub coarse_steps: usize,
    /// Distinct coarse poses passed on to the medium stage (point-to-plane ICP).
    pub refine: usize,
    /// Turn step about the principal axes tried around the winner, degrees (0: none); the
    /// turns are screened by their fit and the best dozen refined.
    pub turn_step_deg: f64,
    /// Distinct medium poses whose translation is searched on a lattice (`best_shift`).
    pub shift_tops: usize,
    /// Distinct medium poses refined on the fine sample.
    pub finals: usize,
}

impl Default for FitParams {
    fn default() -> Self {
        FitParams {
            grid_level: 1,
            offset_share: 0.5,
            screen_steps: 2,
            screen_points: 150,
            screen_keep: 96,
            coarse_steps: 6,
            refine: 48,
            turn_step_deg: 10.0,
            shift_tops: 8,
            finals: 6,
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

/// A few trimmed point-to-point ICP steps (Horn's closed form each step) of `points` against
/// the reference, pairing through the closest-point lookup grid ([`Prepared::lookup`]): pairs
/// beyond 2.5 × the median distance (and beyond two coarse voxels) are dropped. Returns the
/// pose and its coarse cost: the mean distance to the paired reference points, each capped at
/// one coarse voxel (lower is better).
fn coarse_icp(points: &[[f32; 3]], r: &Prepared, start: Rigid, steps: usize) -> (Rigid, f64) {
    let look = r.lookup();
    let target = &r.reference.points;
    let cap = r.coarse_voxel;
    let tol2 = (coarse_tolerance(r) as f32).powi(2);
    let mut tf = start;
    let mut src = Vec::with_capacity(points.len());
    let mut dst = Vec::with_capacity(points.len());
    let mut pairs: Vec<(Vector3<f64>, Vector3<f64>, f32)> = Vec::with_capacity(points.len());
    let mut sorted: Vec<f32> = Vec::with_capacity(points.len());
    for step in 0..=steps {
        pairs.clear();
        for p in points {
            let m = tf.apply(&vec3(*p));
            let mf = [m.x as f32, m.y as f32, m.z as f32];
            let q = target[look.lookup(mf)];
            let d2 = (0..3).map(|k| (mf[k] - q[k]).powi(2)).sum::<f32>();
            pairs.push((m, vec3(q), d2));
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

/// Settings of [`plane_icp`].
#[derive(Debug, Clone, Copy)]
struct PlaneIcp {
    /// Pairs farther apart than this are ignored.
    max_distance: f64,
    /// Lower bound of the robust scale.
    min_scale: f64,
    /// Iteration cap.
    iterations: usize,
}

/// Point-to-plane ICP (Chen & Medioni 1992) with the Tukey biweight, solved by iteratively
/// reweighted least squares on the linearised rotation (as [`icp_point_to_plane`]), but
/// pairing through the closest-point lookup grid and sequential: it runs inside the parallel
/// loop over starts. The scale is 1.4826 × the median absolute residual, at least
/// `min_scale`.
fn plane_icp(points: &[[f32; 3]], r: &Prepared, start: &Rigid, p: &PlaneIcp) -> Rigid {
    let look = r.lookup();
    let (target, normals) = (&r.reference.points, &r.reference.normals);
    let cutoff2 = p.max_distance * p.max_distance;
    let mut tf = *start;
    let mut pairs: Vec<(f64, Vector6<f64>)> = Vec::with_capacity(points.len());
    let mut abs: Vec<f64> = Vec::with_capacity(points.len());
    for _ in 0..p.iterations {
        pairs.clear();
        for s in points {
            let m = tf.apply(&vec3(*s));
            let j = look.lookup([m.x as f32, m.y as f32, m.z as f32]);
            let q = vec3(target[j]);
            if (m - q).norm_squared() > cutoff2 {
                continue;
            }
            let n = vec3(normals[j]);
            if n.norm_squared() < 0.5 {
                continue;
            }
            let c = m.cross(&n);
            pairs.push((n.dot(&(m - q)), Vector6::new(c.x, c.y, c.z, n.x, n.y, n.z)));
        }
        if pairs.len() < 6 {
            break;
        }
        abs.clear();
        abs.extend(pairs.iter().map(|p| p.0.abs()));
        let mid = abs.len() / 2;
        let scale = (1.4826 * *abs.select_nth_unstable_by(mid, f64::total_cmp).1).max(p.min_scale);
        let c = 4.685 * scale;
        let mut a = Matrix6::zeros();
        let mut b = Vector6::zeros();
        for (res, jac) in &pairs {
            if res.abs() >= c {
                continue;
            }
            let u = res / c;
            let w = (1.0 - u * u) * (1.0 - u * u);
            a += w * jac * jac.transpose();
            b += w * res * jac;
        }
        let Some((next, turn, shift)) = point_to_plane_step(&a, &b, &tf) else {
            break;
        };
        tf = next;
        if turn < 1e-5 && shift < 1e-5 * p.max_distance {
            break;
        }
    }
    tf
}

/// Where the scan's centroid is put for the coarse starts (reference local frame): the
/// reference's centroid, and (when `share > 0`) that centroid moved by ± `share` of the
/// reference's half extent along each of its principal axes. A partial view's centroid lies
/// off the part's (towards the side that was seen, a fifth of the diagonal on the demo tray's
/// bracket and nut), farther than a few trimmed ICP steps drag it on a part with parallel
/// faces.
fn start_places(r: &Prepared, share: f64) -> Vec<Vector3<f64>> {
    let mut out = vec![r.centroid];
    if share <= 0.0 {
        return out;
    }
    for k in 0..3 {
        let a = r.axes.column(k).into_owned();
        let (lo, hi) = r
            .coarse
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), p| {
                let x = a.dot(&(vec3(*p) - r.centroid));
                (lo.min(x), hi.max(x))
            });
        let half = 0.5 * (hi - lo);
        if half > 0.0 {
            out.push(r.centroid + a * (share * half));
            out.push(r.centroid - a * (share * half));
        }
    }
    out
}

/// Fit cost of `points` under `tf` through the lookup grid: the mean of
/// `max(|n·(p − q)|, |p − q| − cell)` capped at `cap` (the residual of
/// [`super::deviation`] with the grid's paired point).
fn grid_cost(points: &[[f32; 3]], r: &Prepared, tf: &Rigid, cap: f64) -> f64 {
    let look = r.lookup();
    let cell = look.cell();
    points
        .iter()
        .map(|p| {
            let m = tf.apply(&vec3(*p));
            let j = look.lookup([m.x as f32, m.y as f32, m.z as f32]);
            let q = vec3(r.reference.points[j]);
            let n = vec3(r.reference.normals[j]);
            n.dot(&(m - q)).abs().max((m - q).norm() - cell).min(cap)
        })
        .sum::<f64>()
        / points.len().max(1) as f64
}

/// The best of `tf` moved by `(a, b, c)` coarse voxels along the reference's principal axes,
/// `a, b, c` in −3..=3 (not all zero), by [`grid_cost`]; `None` when none beats `tf` itself.
fn best_shift(points: &[[f32; 3]], r: &Prepared, tf: &Rigid) -> Option<Rigid> {
    let cap = r.coarse_voxel;
    let mut best = (grid_cost(points, r, tf, cap), None);
    for a in -3i32..=3 {
        for b in -3i32..=3 {
            for c in -3i32..=3 {
                if a == 0 && b == 0 && c == 0 {
                    continue;
                }
                let d = r.axes * Vector3::new(a as f64, b as f64, c as f64) * r.coarse_voxel;
                let moved = Rigid::new(tf.rotation, tf.translation + d);
                let cost = grid_cost(points, r, &moved, cap);
                if cost < best.0 {
                    best = (cost, Some(moved));
                }
            }
        }
    }
    best.1
}

/// The best `most` entries of `scored` (lowest cost first, ties by position) that are
/// pairwise distinct by `apart`.
fn best_distinct(
    scored: &[(Rigid, f64)],
    most: usize,
    apart: impl Fn(&Rigid, &Rigid) -> bool,
) -> Vec<Rigid> {
    let mut order: Vec<usize> = (0..scored.len()).collect();
    order.sort_by(|&a, &b| scored[a].1.total_cmp(&scored[b].1).then(a.cmp(&b)));
    let mut picked: Vec<Rigid> = Vec::new();
    for i in order {
        if picked.len() >= most {
            break;
        }
        let tf = scored[i].0;
        if picked.iter().all(|p| apart(p, &tf)) {
            picked.push(tf);
        }
    }
    picked
}

/// Refines `start` by point-to-plane ICP of the fine sample against the reference: first with
/// a wide window through the lookup grid, then with a tight window against the exact nearest
/// points (k-d tree).
fn refine(scan: &PreparedScan, r: &Prepared, start: &Rigid, tau: f64) -> Pose {
    let min_scale = (0.5 * r.spacing).max(tau / 3.0);
    let wide = PlaneIcp {
        max_distance: coarse_tolerance(r),
        min_scale,
        iterations: 20,
    };
    let first = plane_icp(&scan.fine, r, start, &wide);
    let tight = IcpParams {
        max_distance: (4.0 * tau).max(2.0 * r.spacing),
        min_scale,
        loss: RobustLoss::Tukey,
        max_iterations: 10,
        tolerance: 1e-5,
    };
    // Every second point is plenty for the last few steps; the figures use them all.
    let half: Vec<[f32; 3]> = scan.fine.iter().step_by(2).copied().collect();
    let out = icp_point_to_plane(
        &half,
        &r.reference.points,
        &r.reference.normals,
        &r.index,
        &first,
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
    let coarse_apart = |a: &Rigid, b: &Rigid| distinct(a, b, &scan.centroid, 2.0 * r.coarse_voxel);
    // Coarse stage: a couple of trimmed ICP steps from every grid rotation (centroid on
    // centroid), the best distinct few continued.
    let places = start_places(r, params.offset_share);
    let stride = scan
        .coarse
        .len()
        .div_ceil(params.screen_points.max(1))
        .max(1);
    let few: Vec<[f32; 3]> = scan.coarse.iter().step_by(stride).copied().collect();
    let screened: Vec<(Rigid, f64)> = grid
        .matrices()
        .par_iter()
        .flat_map_iter(|rot| {
            let few = &few;
            places.iter().map(move |c| {
                let t = c - rot * scan.centroid;
                coarse_icp(few, r, Rigid::new(*rot, t), params.screen_steps)
            })
        })
        .collect();
    let kept = best_distinct(&screened, params.screen_keep, coarse_apart);
    let starts: Vec<(Rigid, f64)> = kept
        .par_iter()
        .map(|tf| coarse_icp(&scan.coarse, r, *tf, params.coarse_steps))
        .collect();
    let picked = best_distinct(&starts, params.refine, coarse_apart);
    // Medium stage: point-to-plane ICP of a mid-size sample with a wide window and a robust
    // scale of at least a quarter coarse voxel, scored by the exact residuals; then the
    // winner's turns about the principal axes, the same way.
    let step = scan.fine.len().div_ceil(800).max(1);
    let mid: Vec<[f32; 3]> = scan.fine.iter().step_by(step).copied().collect();
    let medium_icp = PlaneIcp {
        max_distance: coarse_tolerance(r),
        min_scale: (0.25 * r.coarse_voxel).max(tau),
        iterations: 12,
    };
    let medium = |start: &Rigid| {
        let tf = plane_icp(&mid, r, start, &medium_icp);
        let cost = residuals_seq(&mid, r, &tf, tau).score();
        (tf, cost)
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
        let look = r.lookup();
        let cap = 4.0 * tau;
        let mut screened: Vec<(f64, Rigid)> = turns
            .par_iter()
            .map(|t| {
                let cost = mid
                    .iter()
                    .map(|p| {
                        let m = t.apply(&vec3(*p));
                        let q = vec3(
                            r.reference.points[look.lookup([m.x as f32, m.y as f32, m.z as f32])],
                        );
                        (m - q).norm().min(cap)
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
    // Shifts: the best distinct medium poses moved on a small lattice along the reference's
    // principal axes; a better-fitting shift goes through the medium stage too. A view of a
    // plate-like part settles with one face on the plate's other face (a thickness off) and
    // ICP does not cross the plate.
    if params.shift_tops > 0 && !mids.is_empty() {
        let tops = best_distinct(&mids, params.shift_tops, |a, b| {
            distinct(a, b, &scan.centroid, 2.0 * tau.max(r.spacing))
        });
        let shifted: Vec<(Rigid, f64)> = tops
            .par_iter()
            .filter_map(|tf| best_shift(&mid, r, tf).map(|t| medium(&t)))
            .collect();
        mids.extend(shifted);
        mids.sort_by(|a, b| a.1.total_cmp(&b.1));
    }
    let mut finals: Vec<Rigid> = Vec::new();
    for (tf, _) in &mids {
        if finals.len() >= params.finals {
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
