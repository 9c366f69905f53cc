//! The axis of near-revolution of a scan, and turns of a pose about it.
//!
//! A shaft, a flange, a pipe or a boss is (nearly) a surface of revolution: a turn about its
//! axis lays the surface on itself, and only small detail (a keyway, a flat, a bolt hole) tells
//! the turned poses apart. Two partial views of such a part are easily laid on each other turned
//! by tens of degrees; the drawn hypotheses and the quarter and half turns of
//! [`super::candidates::alternatives`] do not start near the truth then. This module finds the
//! axis, lays SOURCE's axis on TARGET's under the leading pose ([`laid_on_axis`]) and turns that
//! pose about TARGET's axis in even steps and by the angle most matched pairs agree on
//! ([`leader_turns`]), so that the coarse ICP may reach the turned truth from one of them (off
//! by default: measured in DEVELOPERS.md, Registration, "Turns about an axis of revolution").
//!
//! Method: every normal line of a surface of revolution meets its axis, so the turn about the
//! axis moves each point along its tangent plane (line-geometric characterisation of rotational
//! surfaces, Pottmann & Randrup 1998, from memory). In terms of the point-to-plane normal matrix
//! of the scan with its own normals (Gelfand, Ikemoto, Rusinkiewicz & Levoy 2003; the rows of
//! [`super::constraint`]: `v = (m, n)` with `m = (p − c)/L × n`, points about their centroid
//! `c`, scaled by their mean distance `L`), the turn sought is the motion `(u, t)` with unit
//! rotational part `u` that changes the point-to-plane residuals least, any translation allowed
//! (a screw along the axis changes nothing on a cylinder either): with `A = Σ m mᵀ`,
//! `B = Σ m nᵀ`, `D = Σ n nᵀ`, the best translation for `u` is `t = −D⁺ Bᵀ u` and the cost is
//! `uᵀ S u` with the Schur complement `S = A − B D⁺ Bᵀ`. The axis direction is the eigenvector
//! of `S` with the smallest eigenvalue, its position the point `c + ω × t / |ω|²` with
//! `ω = u / L` (the Plücker moment of the motion, as in [`super::constraint`]). The axis is real
//! when that eigenvalue is a small share of the next one (a unique free turn; a ball turns
//! freely about every axis and has none).

use nalgebra::{Matrix3, Rotation3, SymmetricEigen, Vector3};
use rayon::prelude::*;

use super::consensus::Pairs;
use super::icp::{IcpParams, fit_quality, icp_point_to_plane};
use super::pipeline::AlignParams;
use super::prepared_scan::PreparedScan;
use super::refine::{fit_onto_fine, tight_overlap};
use super::rigid::Rigid;
use super::tuning::Tuning;

/// An axis of near-revolution, in the frame of the points it was found from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Axis {
    /// Unit direction (sign arbitrary).
    pub direction: Vector3<f64>,
    /// The point of the axis closest to the points' centroid.
    pub through: Vector3<f64>,
    /// The turn's residual cost over that of the next firmest turn: 0 for an exact surface of
    /// revolution, 1 when a second axis is as free (no unique axis).
    pub ratio: f64,
}

/// Robust reweighting rounds of [`axis_of_revolution`] (Tukey biweight of the turn's residuals
/// at 4.685 times their scaled median absolute deviation).
pub const AXIS_ROUNDS: usize = 3;

/// The axis about which `points` with unit `normals` (same order, any sign) turn most freely
/// (module doc); `None` below 10 points or when no turn is freer than another. Detail that is
/// not of revolution (a flat, a keyway, a bolt hole) would pull the least-squares axis towards
/// itself, so the fit is repeated [`AXIS_ROUNDS`] times with the points weighted by their
/// residual under the last axis (iteratively reweighted least squares, Tukey biweight); the
/// ratio is that of the last round.
pub fn axis_of_revolution(points: &[Vector3<f64>], normals: &[Vector3<f64>]) -> Option<Axis> {
    if points.len() < 10 || normals.len() != points.len() {
        return None;
    }
    let n = points.len() as f64;
    let c = points.iter().fold(Vector3::zeros(), |a, p| a + p) / n;
    let l = points.iter().map(|p| (p - c).norm()).sum::<f64>() / n;
    if l <= 0.0 {
        return None;
    }
    let rows: Vec<(Vector3<f64>, Vector3<f64>)> = points
        .iter()
        .zip(normals)
        .map(|(p, nn)| (((p - c) / l).cross(nn), *nn))
        .collect();
    let mut weights = vec![1.0; rows.len()];
    let mut found = None;
    for round in 0..=AXIS_ROUNDS {
        let Some((u, t, ratio)) = weighted_turn(&rows, &weights) else {
            break;
        };
        let omega = u / l;
        found = Some(Axis {
            direction: u.normalize(),
            through: c + omega.cross(&t) / omega.norm_squared(),
            ratio,
        });
        if round == AXIS_ROUNDS {
            break;
        }
        let r: Vec<f64> = rows
            .iter()
            .map(|(m, nn)| (m.dot(&u) + nn.dot(&t)).abs())
            .collect();
        let mut sorted = r.clone();
        sorted.sort_by(f64::total_cmp);
        let scale = 4.685 * 1.4826 * sorted[sorted.len() / 2];
        if scale <= 1e-12 {
            break;
        }
        for (w, x) in weights.iter_mut().zip(&r) {
            let q = x / scale;
            *w = if q < 1.0 { (1.0 - q * q).powi(2) } else { 0.0 };
        }
    }
    found
}

/// The freest turn of weighted constraint rows `(m, n)`: unit `u`, its best translation `t`
/// and the ratio of its cost to the next freest turn's (module doc).
fn weighted_turn(
    rows: &[(Vector3<f64>, Vector3<f64>)],
    weights: &[f64],
) -> Option<(Vector3<f64>, Vector3<f64>, f64)> {
    let (mut a, mut b, mut d) = (Matrix3::zeros(), Matrix3::zeros(), Matrix3::zeros());
    for ((m, nn), w) in rows.iter().zip(weights) {
        a += m * m.transpose() * *w;
        b += m * nn.transpose() * *w;
        d += nn * nn.transpose() * *w;
    }
    let d_plus = pseudo_inverse(&d);
    let s = a - b * d_plus * b.transpose();
    let s = (s + s.transpose()) / 2.0;
    let e = SymmetricEigen::new(s);
    let mut order = [0usize, 1, 2];
    order.sort_by(|&i, &j| e.eigenvalues[i].total_cmp(&e.eigenvalues[j]));
    let (low, next) = (
        e.eigenvalues[order[0]].max(0.0),
        e.eigenvalues[order[1]].max(0.0),
    );
    if next <= 0.0 {
        return None;
    }
    let u: Vector3<f64> = e.eigenvectors.column(order[0]).into_owned();
    let t = -(d_plus * b.transpose() * u);
    Some((u, t, low / next))
}

/// Pseudo-inverse of a symmetric positive semi-definite 3×3 matrix: eigenvalues below 1e-9 of
/// the largest count as zero (a plane's normals leave two directions unconstrained).
fn pseudo_inverse(m: &Matrix3<f64>) -> Matrix3<f64> {
    let e = SymmetricEigen::new(*m);
    let top = e.eigenvalues.iter().copied().fold(0.0, f64::max);
    let mut out = Matrix3::zeros();
    for k in 0..3 {
        let v = e.eigenvalues[k];
        if v > 1e-9 * top {
            let x = e.eigenvectors.column(k);
            out += x * x.transpose() / v;
        }
    }
    out
}

/// `pose` (SOURCE → the axis's frame) followed by the turn about `axis` by `deg` degrees.
pub fn turned(pose: &Rigid, axis: &Axis, deg: f64) -> Rigid {
    pose.turned_about(&axis.direction, &axis.through, deg)
}

/// `pose` turned about `axis` ([`turned`]) by every multiple of `step_deg` short of a full
/// turn (none when `step_deg` is not in (0°, 180°]).
pub fn turns(pose: &Rigid, axis: &Axis, step_deg: f64) -> Vec<Rigid> {
    if !(step_deg > 0.0 && step_deg <= 180.0) {
        return Vec::new();
    }
    let count = (360.0 / step_deg).round() as usize;
    (1..count)
        .map(|k| turned(pose, axis, k as f64 * step_deg))
        .collect()
}

/// The axis of near-revolution of a prepared scan's keypoints (its local frame).
fn scan_axis(scan: &PreparedScan) -> Option<Axis> {
    let points: Vec<Vector3<f64>> = scan
        .keypoints
        .iter()
        .map(|p| crate::geometry::vec3(*p))
        .collect();
    let normals: Vec<Vector3<f64>> = scan
        .normals
        .iter()
        .map(|n| crate::geometry::vec3(*n))
        .collect();
    axis_of_revolution(&points, &normals)
}

/// `pose` corrected so that it lays `from` (an axis in the pose's source frame) on `onto` (in
/// its target frame): the smallest turn that makes the placed direction parallel to `onto`'s
/// (either sense), about the placed axis point, which then moves to its foot on `onto`.
pub fn laid_on_axis(pose: &Rigid, from: &Axis, onto: &Axis) -> Rigid {
    let d = pose.rotation * from.direction;
    let want = if d.dot(&onto.direction) >= 0.0 {
        onto.direction
    } else {
        -onto.direction
    };
    let r = Rotation3::rotation_between(&d, &want).map_or(Matrix3::identity(), |r| *r.matrix());
    let q = pose.apply(&from.through);
    let foot = onto.through + onto.direction * (q - onto.through).dot(&onto.direction);
    Rigid::new(r * pose.rotation, r * (pose.translation - q) + foot)
}

/// The turns of `leader` (SOURCE local → TARGET local) about the axis of near-revolution of
/// TARGET's keypoints ([`axis_of_revolution`]), when that axis is real (ratio at most
/// [`Tuning::revolution_max_ratio`]); none otherwise, or when [`Tuning::revolution_step_deg`]
/// is 0. When SOURCE has such an axis too, the leader is first laid on TARGET's
/// ([`laid_on_axis`]) and that pose is the first given; then its turns every
/// [`Tuning::revolution_step_deg`] ([`turns`]) and the turn the matched pairs agree on
/// ([`matched_turn`], at least [`Tuning::distinct_angle_deg`] from it).
pub fn leader_turns(
    leader: &Rigid,
    source: &PreparedScan,
    target: &PreparedScan,
    pairs: &Pairs,
    tau: f64,
    tu: &Tuning,
) -> Vec<Rigid> {
    if tu.revolution_step_deg <= 0.0 {
        return Vec::new();
    }
    let Some(at) = scan_axis(target).filter(|a| a.ratio <= tu.revolution_max_ratio) else {
        return Vec::new();
    };
    let from = scan_axis(source).filter(|a| a.ratio <= tu.revolution_max_ratio);
    let start = from.map_or(*leader, |a| laid_on_axis(leader, &a, &at));
    let mut out = if from.is_some() {
        vec![start]
    } else {
        Vec::new()
    };
    out.extend(turns(&start, &at, tu.revolution_step_deg));
    out.extend(matched_turn(&start, &at, pairs, tau, tu.distinct_angle_deg));
    out
}

/// The turn of `pose` about `axis`, in whole degrees at least `exclude_deg` from no turn, that
/// brings the most matched pairs within `tau` (ties: the smallest angle); `None` when it
/// brings fewer than 3. Where the surface of revolution lets every turn fit, the matches on
/// the small detail are what single out one.
pub fn matched_turn(
    pose: &Rigid,
    axis: &Axis,
    pairs: &Pairs,
    tau: f64,
    exclude_deg: f64,
) -> Option<Rigid> {
    let first = (exclude_deg.ceil().max(1.0) as usize).min(180);
    let mut best: Option<(Rigid, usize)> = None;
    for deg in first..=(360 - first) {
        let t = turned(pose, axis, deg as f64);
        let n = pairs.support(&t, tau);
        if best.is_none_or(|b| n > b.1) {
            best = Some((t, n));
        }
    }
    best.filter(|b| b.1 >= 3).map(|b| b.0)
}

/// The turn (degrees, right-handed about `direction`, in (−180°, 180°]) that rotation `r`
/// makes about `direction`: the twist of its swing–twist decomposition (the quaternion's
/// vector part projected on the unit direction).
pub fn twist_deg(r: &Matrix3<f64>, direction: &Vector3<f64>) -> f64 {
    let q = nalgebra::UnitQuaternion::from_matrix(r);
    let along = q.imag().dot(direction);
    let deg = 2.0 * along.atan2(q.w).to_degrees();
    if deg > 180.0 {
        deg - 360.0
    } else if deg <= -180.0 {
        deg + 360.0
    } else {
        deg
    }
}

/// Point-to-plane ICP of `points` (SOURCE local) onto TARGET's keypoints from `start`, with
/// the turn about `axis` (TARGET local) held: after every iteration the turn that iteration
/// made about the axis is undone, so that on a near-surface of revolution the fit adapts the
/// other five motions but cannot slide round to the stacked overlap. At most `icp`'s
/// iteration count; stops when an iteration moves the pose less than its tolerance.
pub fn fit_holding_turn(
    points: &[[f32; 3]],
    target: &PreparedScan,
    start: &Rigid,
    axis: &Axis,
    icp: &IcpParams,
) -> Rigid {
    let one = IcpParams {
        max_iterations: 1,
        ..*icp
    };
    let mut pose = *start;
    for _ in 0..icp.max_iterations {
        let out = icp_point_to_plane(
            points,
            &target.keypoints,
            &target.normals,
            target.keypoint_index(),
            &pose,
            &one,
        );
        let turn = twist_deg(
            &(out.transform.rotation * pose.rotation.transpose()),
            &axis.direction,
        );
        let next = turned(&out.transform, axis, -turn);
        let moved = (next.translation - pose.translation).norm();
        let angle = super::rigid::rotation_error_deg(&next.rotation, &pose.rotation);
        pose = next;
        if moved < icp.tolerance * icp.max_distance && angle.to_radians() < icp.tolerance {
            break;
        }
    }
    pose
}

/// The leading pose turned about TARGET's axis of near-revolution to the best local maxima of
/// its tight overlap, each fitted with the turn held ([`fit_holding_turn`]); none when
/// [`Tuning::held_turns`] is 0 or TARGET has no axis (ratio above
/// [`Tuning::revolution_max_ratio`]). When SOURCE has an axis too, the leader is first laid on
/// TARGET's ([`laid_on_axis`]). The tight overlap is sampled every
/// [`Tuning::held_turn_step_deg`] over the full turn (three-sample circular mean); maxima within
/// [`Tuning::distinct_angle_deg`] of no turn, or below [`Tuning::slide_min_share`] of the
/// leader's tight overlap, do not count; the [`Tuning::held_turns`] highest are fitted, and so
/// is the turn the matched pairs agree on ([`matched_turn`]); each held fit is then released
/// onto the fine points. Deterministic (angles ascending, ties to the smaller angle).
pub fn held_turns(
    leader: &Rigid,
    source: &PreparedScan,
    target: &PreparedScan,
    pairs: &Pairs,
    params: &AlignParams,
    tau: f64,
    icp: &IcpParams,
) -> Vec<Rigid> {
    let tu = &params.tuning;
    if tu.held_turns == 0 || !(tu.held_turn_step_deg > 0.0 && tu.held_turn_step_deg <= 90.0) {
        return Vec::new();
    }
    let Some(at) = scan_axis(target).filter(|a| a.ratio <= tu.revolution_max_ratio) else {
        return Vec::new();
    };
    let from = scan_axis(source).filter(|a| a.ratio <= tu.revolution_max_ratio);
    let start = from.map_or(*leader, |a| laid_on_axis(leader, &a, &at));
    let count = (360.0 / tu.held_turn_step_deg).round() as usize;
    let angle = |k: usize| k as f64 * 360.0 / count as f64;
    // Per angle: the tight overlap, and the value the maxima are sought on (the tight overlap,
    // or with `held_turn_fit_share` its share of the keypoints within τ).
    let profile: Vec<(f64, f64)> = (0..count)
        .into_par_iter()
        .map(|k| {
            let pose = turned(&start, &at, angle(k));
            let tight = tight_overlap(source, target, &pose, params, tau);
            if tu.held_turn_fit_share {
                let near = fit_quality(&source.keypoints, target.keypoint_index(), &pose, tau).1;
                (
                    tight,
                    tight * source.keypoints.len() as f64 / near.max(1) as f64,
                )
            } else {
                (tight, tight)
            }
        })
        .collect();
    let mean = |k: usize| {
        (profile[(k + count - 1) % count].1 + profile[k].1 + profile[(k + 1) % count].1) / 3.0
    };
    let floor = tu.slide_min_share * profile[0].0;
    let mut peaks: Vec<(usize, f64)> = (1..count)
        .filter(|&k| {
            let a = angle(k);
            a >= tu.distinct_angle_deg && a <= 360.0 - tu.distinct_angle_deg
        })
        .map(|k| (k, mean(k)))
        .filter(|&(k, v)| {
            profile[k].0 >= floor
                && v >= mean((k + count - 1) % count)
                && v >= mean((k + 1) % count)
        })
        .collect();
    peaks.sort_by(|a, b| b.1.total_cmp(&a.1).then(a.0.cmp(&b.0)));
    let mut starts: Vec<Rigid> = peaks
        .iter()
        .take(tu.held_turns)
        .map(|&(k, _)| turned(&start, &at, angle(k)))
        .collect();
    starts.extend(matched_turn(&start, &at, pairs, tau, tu.distinct_angle_deg));
    // Released: the held fit is refitted onto the fine points with every motion free (the
    // fine fit's two stages, [`super::refine::fit_onto_fine`]). A turned pose that is no
    // minimum of its own (a pipe bend turned about its axis) slides back to the leader and is
    // then no distinct rival; one held by its detail stays.
    starts
        .par_iter()
        .map(|s| {
            let held = fit_holding_turn(&source.keypoints, target, s, &at, icp);
            fit_onto_fine(&source.keypoints, target, &held, params, tau).transform
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::rigid::rotation_error_deg;

    /// A deterministic unit-ish jitter (a linear congruential walk) in [-1, 1].
    fn walk(seed: u64) -> impl FnMut() -> f64 {
        let mut x = seed;
        move || {
            x = x
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (x >> 11) as f64 / (1u64 << 52) as f64 - 1.0
        }
    }

    /// Points and normals of a stepped shaft about the axis `dir` through `at` (a cylinder of
    /// radius 1, a shoulder, a cylinder of radius 0.6), seen over `arc` radians only (a partial
    /// view), with the exact normals of the surface.
    fn stepped_shaft(
        dir: Vector3<f64>,
        at: Vector3<f64>,
        arc: f64,
    ) -> (Vec<Vector3<f64>>, Vec<Vector3<f64>>) {
        let d = dir.normalize();
        let e1 = d.cross(&Vector3::new(0.3, -0.8, 0.5)).normalize();
        let e2 = d.cross(&e1);
        let (mut p, mut n) = (Vec::new(), Vec::new());
        for k in 0..60 {
            let a = arc * k as f64 / 59.0;
            let radial = e1 * a.cos() + e2 * a.sin();
            for h in 0..20 {
                let z = 0.1 * h as f64;
                let r = if h < 10 { 1.0 } else { 0.6 };
                p.push(at + d * z + radial * r);
                n.push(radial);
            }
            // The shoulder at z = 1: a ring of the plane normal to the axis.
            for r in [0.7, 0.8, 0.9] {
                p.push(at + d * 0.95 + radial * r);
                n.push(d);
            }
        }
        (p, n)
    }

    /// The axis of a partial view of a stepped shaft, in an arbitrary pose, is found in
    /// direction and position (the generator's truth), with a ratio near 0.
    #[test]
    fn finds_the_axis_of_a_partial_stepped_shaft() {
        let dir = Vector3::new(0.2, 0.9, -0.4).normalize();
        let at = Vector3::new(3.0, -2.0, 5.0);
        let (p, n) = stepped_shaft(dir, at, 2.0);
        let axis = axis_of_revolution(&p, &n).expect("an axis");
        assert!(axis.direction.dot(&dir).abs() > 1.0 - 1e-9, "{axis:?}");
        let off = (axis.through - at) - dir * (axis.through - at).dot(&dir);
        assert!(off.norm() < 1e-9, "axis passes {off:?} from the truth");
        assert!(axis.ratio < 1e-9, "{axis:?}");
    }

    /// Noisy normals still give the axis within a degree; a box (three face pairs) has no free
    /// turn: its ratio is far from 0.
    #[test]
    fn noise_keeps_the_axis_and_a_box_has_none() {
        let dir = Vector3::new(0.0, 0.0, 1.0);
        let at = Vector3::new(0.5, 0.2, 0.0);
        let (p, n) = stepped_shaft(dir, at, 3.5);
        let mut j = walk(7);
        let noisy: Vec<Vector3<f64>> = n
            .iter()
            .map(|v| (v + Vector3::new(j(), j(), j()) * 0.02).normalize())
            .collect();
        let axis = axis_of_revolution(&p, &noisy).expect("an axis");
        assert!(axis.direction.dot(&dir).abs() > 1f64.to_radians().cos());
        assert!(axis.ratio < 0.05, "{axis:?}");

        let (mut bp, mut bn) = (Vec::new(), Vec::new());
        for i in 0..15 {
            for k in 0..15 {
                let (x, y) = (i as f64 / 14.0 - 0.5, k as f64 / 14.0 - 0.5);
                for (sign, (q, nn)) in [
                    (1.0, (Vector3::new(x, y, 0.5), Vector3::z())),
                    (1.0, (Vector3::new(x, 0.5, y), Vector3::y())),
                    (1.0, (Vector3::new(0.5, x, y), Vector3::x())),
                    (-1.0, (Vector3::new(x, y, -0.5), Vector3::z())),
                    (-1.0, (Vector3::new(x, -0.5, y), Vector3::y())),
                    (-1.0, (Vector3::new(-0.5, x, y), Vector3::x())),
                ] {
                    bp.push(Vector3::new(q.x * 1.0, q.y * 1.6, q.z * 2.3));
                    bn.push(nn * sign);
                }
            }
        }
        let boxed = axis_of_revolution(&bp, &bn).expect("a least free turn");
        assert!(boxed.ratio > 0.2, "{boxed:?}");
    }

    /// A pose that lays SOURCE's axis 3° and 0.5 off TARGET's is corrected onto it; the turn
    /// that 20 matched pairs agree on (the construction's 75°) is the one found.
    #[test]
    fn lays_the_axis_on_and_finds_the_matched_turn() {
        let onto = Axis {
            direction: Vector3::z(),
            through: Vector3::new(1.0, 2.0, 0.0),
            ratio: 0.0,
        };
        let from = Axis {
            direction: Vector3::new(0.0, 1.0, 0.0),
            through: Vector3::new(0.0, 0.0, 4.0),
            ratio: 0.0,
        };
        // Carries SOURCE's y axis onto z, 3° off, through a point 0.5 from TARGET's axis.
        let tilt =
            *Rotation3::from_axis_angle(&Vector3::x_axis(), (90.0f64 + 3.0).to_radians()).matrix();
        let pose = Rigid::new(tilt, Vector3::new(1.5, 2.0, 0.0) - tilt * from.through);
        let laid = laid_on_axis(&pose, &from, &onto);
        let d = laid.rotation * from.direction;
        assert!(d.cross(&onto.direction).norm() < 1e-12, "{d:?}");
        let q = laid.apply(&from.through) - onto.through;
        assert!((q - onto.direction * q.dot(&onto.direction)).norm() < 1e-12);

        let truth = turned(&laid, &onto, 75.0);
        let mut j = walk(3);
        let mut pairs = Pairs {
            src: Vec::new(),
            dst: Vec::new(),
        };
        for k in 0..60 {
            let s = Vector3::new(3.0 * j(), 3.0 * j(), 3.0 * j());
            pairs.src.push(s);
            pairs.dst.push(if k % 3 == 0 {
                truth.apply(&s)
            } else {
                Vector3::new(5.0 * j(), 5.0 * j(), 5.0 * j())
            });
        }
        let found = matched_turn(&laid, &onto, &pairs, 0.01, 10.0).expect("a turn");
        assert!(rotation_error_deg(&found.rotation, &truth.rotation) < 1e-9);
        assert!((found.translation - truth.translation).norm() < 1e-9);
    }

    /// Swing–twist: for `R = swing · twist` with the swing about a direction perpendicular to
    /// `a`, the twist about `a` is recovered exactly (quaternion algebra: the swing adds no
    /// component along `a`), and its sign follows the turn's sense.
    #[test]
    fn twist_is_the_turn_about_the_direction() {
        let a = Vector3::new(0.3, -0.2, 0.9).normalize();
        let twist =
            Rotation3::from_axis_angle(&nalgebra::Unit::new_normalize(a), 37f64.to_radians());
        let perp = a.cross(&Vector3::x()).normalize();
        let swing =
            Rotation3::from_axis_angle(&nalgebra::Unit::new_normalize(perp), 12f64.to_radians());
        let r = swing * twist;
        assert!((twist_deg(r.matrix(), &a) - 37.0).abs() < 1e-9);
        assert!((twist_deg(twist.inverse().matrix(), &a) + 37.0).abs() < 1e-9);
        assert!(twist_deg(swing.matrix(), &a).abs() < 1e-9);
    }

    /// Turns keep the pose's action on the axis's points and rotate the rest about the axis by
    /// the stated steps.
    #[test]
    fn turns_rotate_about_the_axis_by_the_step() {
        let axis = Axis {
            direction: Vector3::z(),
            through: Vector3::new(1.0, 0.0, 0.0),
            ratio: 0.0,
        };
        let pose = Rigid::new(
            *Rotation3::from_axis_angle(&Vector3::x_axis(), 0.4).matrix(),
            Vector3::new(0.0, 2.0, 0.0),
        );
        let out = turns(&pose, &axis, 90.0);
        assert_eq!(out.len(), 3);
        // A SOURCE point that the pose puts on the axis stays there.
        let on_axis = pose.inverse().apply(&Vector3::new(1.0, 0.0, 3.0));
        for t in &out {
            assert!((t.apply(&on_axis) - Vector3::new(1.0, 0.0, 3.0)).norm() < 1e-12);
        }
        // One placed at (2, 0, 0) goes to (1, 1, 0) after a quarter turn.
        let q = pose.inverse().apply(&Vector3::new(2.0, 0.0, 0.0));
        assert!((out[0].apply(&q) - Vector3::new(1.0, 1.0, 0.0)).norm() < 1e-12);
        assert_eq!(turns(&pose, &axis, 0.0).len(), 0);
        assert_eq!(turns(&pose, &axis, 30.0).len(), 11);
    }
}
