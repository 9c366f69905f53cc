//! Point-to-plane ICP with a robust loss, solved by iteratively reweighted least squares.
//!
//! Each iteration pairs every source point (moved by the current transform) with its nearest
//! target point, keeps pairs closer than the correspondence cutoff, weights the point-to-plane
//! residual `r = n·(R p + t − q)` with the Tukey biweight (or Huber) at a scale estimated from
//! the residuals' median absolute deviation, and solves the linearised 6×6 normal equations for
//! a small rotation and translation. Sums are formed in fixed-size chunks and added in order, so
//! the result does not depend on the number of threads.

use nalgebra::{Matrix6, Rotation3, Vector3, Vector6};
use rayon::prelude::*;

use super::rigid::Rigid;
use crate::spatial::{KdIndex, NearestTrack, TrackGrids, TrackQueries};

/// The robust loss applied to point-to-plane residuals.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum RobustLoss {
    /// Huber: quadratic within `1.345 σ`, linear beyond.
    Huber,
    /// Tukey biweight: residuals beyond `4.685 σ` get weight zero.
    Tukey,
}

/// ICP settings. Distances in the clouds' units.
#[derive(Debug, Clone, Copy)]
pub struct IcpParams {
    /// Pairs farther apart than this are ignored.
    pub max_distance: f64,
    /// Lower bound for the robust scale σ (the expected noise level), so that perfect data does
    /// not shrink σ to zero.
    pub min_scale: f64,
    /// The robust loss.
    pub loss: RobustLoss,
    /// Iteration cap.
    pub max_iterations: usize,
    /// Converged when an update rotates less than this (radians) and moves less than
    /// `tolerance × max_distance`.
    pub tolerance: f64,
}

/// What ICP reached.
#[derive(Debug, Clone, Copy)]
pub struct IcpOutcome {
    /// The refined transform (source local frame to target local frame).
    pub transform: Rigid,
    /// Iterations run.
    pub iterations: usize,
    /// True when the last update was below the tolerance.
    pub converged: bool,
}

const CHUNK: usize = 512;

struct Pair {
    residual: f64,
    jac: Vector6<f64>,
    /// Which points were paired: the source index in the high 32 bits, the target's in the low.
    key: u64,
}

/// Longest cycle of pairings that [`icp_point_to_plane`] looks for, in iterations.
pub const MAX_CYCLE: usize = 4;

/// True when two poses differ by less than an update that counts as converged: a turn below
/// `tolerance` (radians; the Frobenius norm of the rotations' difference over √2, which is the
/// angle for small turns) and a shift below `tolerance × max_distance`.
fn within_tolerance(a: &Rigid, b: &Rigid, params: &IcpParams) -> bool {
    (a.rotation - b.rotation).norm() / std::f64::consts::SQRT_2 < params.tolerance
        && (a.translation - b.translation).norm() < params.tolerance * params.max_distance
}

/// Refines `init` (mapping `source` into the target's frame) by point-to-plane ICP against
/// `target` with unit `target_normals`, indexed by `target_index`.
///
/// A run that does not converge often ends in a cycle: the same pairs every second (or third,
/// fourth) iteration, the pose stepping back and forth between two nearly fixed poses (a
/// pairing that flips with each step), the steps never below the tolerance. Once the pairs of
/// an iteration are those of 2 to [`MAX_CYCLE`] iterations before and its pose is within the
/// tolerance of that iteration's, the run has converged to the cycle and stops: it returns the
/// cycle's pose of the same phase as the iteration cap (the pose the capped run would have
/// ended near), with `converged` false and the iterations actually run.
pub fn icp_point_to_plane(
    source: &[[f32; 3]],
    target: &[[f32; 3]],
    target_normals: &[[f32; 3]],
    target_index: &KdIndex,
    init: &Rigid,
    params: &IcpParams,
) -> IcpOutcome {
    icp_run(
        source,
        target,
        target_normals,
        target_index,
        init,
        params,
        MAX_CYCLE,
    )
    .0
}

/// [`icp_point_to_plane`] looking for cycles up to `max_cycle` iterations long (below 2: none);
/// also the period of the cycle that ended the run, if one did.
fn icp_run(
    source: &[[f32; 3]],
    target: &[[f32; 3]],
    target_normals: &[[f32; 3]],
    target_index: &KdIndex,
    init: &Rigid,
    params: &IcpParams,
    max_cycle: usize,
) -> (IcpOutcome, Option<usize>) {
    let mut tf = *init;
    let mut cycle = None;
    let mut converged = false;
    let mut iterations = 0;
    let cutoff2 = params.max_distance * params.max_distance;
    let mut tracks = vec![NearestTrack::default(); source.len()];
    // The tracks' searches go to grids where they can be built (a cutoff not tiny against the
    // target's extent): cheaper than the tree's, the same answers.
    let grids = TrackGrids::new(target, cutoff2);
    // The poses and pairs of the last iterations, oldest first.
    let mut history: std::collections::VecDeque<(Rigid, Vec<u64>)> =
        std::collections::VecDeque::with_capacity(max_cycle);
    for _ in 0..params.max_iterations {
        iterations += 1;
        let pairs = collect_pairs(
            source,
            &PairingTarget {
                points: target,
                normals: target_normals,
                index: target_index,
                grids: grids.as_ref(),
            },
            &tf,
            cutoff2,
            &mut tracks,
        );
        if pairs.len() < 6 {
            break;
        }
        let keys: Vec<u64> = pairs.iter().map(|p| p.key).collect();
        let period = (2..=max_cycle.min(history.len())).find(|&p| {
            let (pose, earlier) = &history[history.len() - p];
            *earlier == keys && within_tolerance(pose, &tf, params)
        });
        if let Some(p) = period {
            // Iteration k repeats k − p; the pose after the cap (iteration N) is near that of
            // iteration k − p + r with r = (N + 1 − k) mod p, which the history holds.
            let r = (params.max_iterations + 1 - iterations) % p;
            tf = history[history.len() - (p - r)].0;
            cycle = Some(p);
            break;
        }
        if max_cycle >= 2 {
            if history.len() == max_cycle {
                history.pop_front();
            }
            history.push_back((tf, keys));
        }
        let scale = robust_scale(&pairs).max(params.min_scale);
        let (a, b) = normal_equations(&pairs, scale, params.loss);
        let Some((next, turn, shift)) = point_to_plane_step(&a, &b, &tf) else {
            break;
        };
        tf = next;
        if turn < params.tolerance && shift < params.tolerance * params.max_distance {
            converged = true;
            break;
        }
    }
    // The pairs' RMSE and count at the end are left to the caller ([`fit_quality`]): no
    // caller of a run needs them, and one more bounded search per point of every run cost
    // about a tenth of a 100 k pair's time (DEVELOPERS.md, Registration, "ICP runs without
    // end-of-run figures").
    let outcome = IcpOutcome {
        transform: tf,
        iterations,
        converged,
    };
    (outcome, cycle)
}

/// RMSE of nearest-neighbour distances below `max_distance` and how many source points have
/// one, for `source` moved by `tf`.
pub fn fit_quality(
    source: &[[f32; 3]],
    target_index: &KdIndex,
    tf: &Rigid,
    max_distance: f64,
) -> (f64, usize) {
    let cutoff2 = max_distance * max_distance;
    let parts: Vec<(f64, usize)> = source
        .par_chunks(CHUNK)
        .map(|chunk| {
            let mut s = 0.0;
            let mut n = 0;
            for p in chunk {
                let q = tf.apply_f32(*p);
                if let Some((_, d2)) =
                    target_index.nearest_within([q.x as f32, q.y as f32, q.z as f32], cutoff2)
                {
                    s += d2 as f64;
                    n += 1;
                }
            }
            (s, n)
        })
        .collect();
    let (s, n) = parts
        .iter()
        .fold((0.0, 0), |acc, &(s, n)| (acc.0 + s, acc.1 + n));
    let rmse = if n > 0 {
        (s / n as f64).sqrt()
    } else {
        f64::NAN
    };
    (rmse, n)
}

/// The tight test of one moved point (the tight overlap's, [`oriented_fit`]): its nearest target
/// point lies within the cutoff, its distance to that point's tangent plane is at most the plane
/// tolerance, and its normal, rotated, makes an angle of at most the largest angle with the target
/// normal's line (sign ignored, as PCA normals of a one-sided scan carry no reliable outward
/// sense).
pub struct TightTest<'a> {
    target: &'a [[f32; 3]],
    target_normals: &'a [[f32; 3]],
    target_index: &'a KdIndex,
    tf: &'a Rigid,
    cutoff2: f64,
    plane_tolerance: f64,
    min_cos: f64,
}

impl<'a> TightTest<'a> {
    /// The test for points moved by `tf` onto the target (positions, normals, tree), paired
    /// within `max_distance`.
    pub fn new(
        (target, target_normals, target_index): (&'a [[f32; 3]], &'a [[f32; 3]], &'a KdIndex),
        tf: &'a Rigid,
        max_distance: f64,
        plane_tolerance: f64,
        max_angle_deg: f64,
    ) -> TightTest<'a> {
        TightTest {
            target,
            target_normals,
            target_index,
            tf,
            cutoff2: max_distance * max_distance,
            plane_tolerance,
            min_cos: max_angle_deg.to_radians().cos(),
        }
    }

    /// For source point `p` with normal `normal`: the index of the target point it is tight on
    /// and the cosine between the rotated normal and that point's normal (signed), or `None`.
    pub fn check(&self, p: [f32; 3], normal: [f32; 3]) -> Option<(usize, f64)> {
        let pm = self.tf.apply_f32(p);
        let (j, _) = self
            .target_index
            .nearest_within([pm.x as f32, pm.y as f32, pm.z as f32], self.cutoff2)?;
        let n = self.target_normals[j];
        let q = self.target[j];
        let d: f64 = (0..3).map(|k| n[k] as f64 * (pm[k] - q[k] as f64)).sum();
        if d.abs() > self.plane_tolerance {
            return None;
        }
        let nr = self.tf.rotation * crate::geometry::vec3(normal);
        let c: f64 = (0..3).map(|k| n[k] as f64 * nr[k]).sum();
        (c.abs() >= self.min_cos).then_some((j, c))
    }
}

/// For `source` moved by `tf`: the number of points that pass the [`TightTest`] (nearest target
/// point within `max_distance`, within `plane_tolerance` of its tangent plane, normal lines within
/// `max_angle_deg`). A wrong pose that lays a flat face of the source on a flat face of the target
/// fits the plane test along that face, but the edges and other faces then cross the target's
/// surface at an angle.
#[allow(clippy::too_many_arguments)]
pub fn oriented_fit(
    source: &[[f32; 3]],
    source_normals: &[[f32; 3]],
    target: &[[f32; 3]],
    target_normals: &[[f32; 3]],
    target_index: &KdIndex,
    tf: &Rigid,
    max_distance: f64,
    plane_tolerance: f64,
    max_angle_deg: f64,
) -> usize {
    let test = TightTest::new(
        (target, target_normals, target_index),
        tf,
        max_distance,
        plane_tolerance,
        max_angle_deg,
    );
    let parts: Vec<usize> = source
        .par_chunks(CHUNK)
        .zip(source_normals.par_chunks(CHUNK))
        .map(|(chunk, normals)| {
            chunk
                .iter()
                .zip(normals)
                .filter(|(p, ns)| test.check(**p, **ns).is_some())
                .count()
        })
        .collect();
    parts.iter().sum()
}

/// What the pairing searches: TARGET's points, unit normals, tree, and the tracks' grids
/// (none when they could not be built).
struct PairingTarget<'a> {
    points: &'a [[f32; 3]],
    normals: &'a [[f32; 3]],
    index: &'a KdIndex,
    grids: Option<&'a TrackGrids>,
}

/// The pairs of `source` moved by `tf`: each point with its nearest target point within the
/// cutoff ([`KdIndex::nearest_within`], through one [`NearestTrack`] per source point, kept
/// from one iteration to the next: the points move little, and most answers need no search).
fn collect_pairs(
    source: &[[f32; 3]],
    target: &PairingTarget,
    tf: &Rigid,
    cutoff2: f64,
    tracks: &mut [NearestTrack],
) -> Vec<Pair> {
    let chunks: Vec<Vec<Pair>> = source
        .par_chunks(CHUNK)
        .zip(tracks.par_chunks_mut(CHUNK))
        .enumerate()
        .map(|(c, (chunk, tracks))| {
            let mut out = Vec::with_capacity(chunk.len());
            let mut query = TrackQueries::default();
            for (k, (p, track)) in chunk.iter().zip(tracks).enumerate() {
                let pm = tf.apply_f32(*p);
                let centre = [pm.x as f32, pm.y as f32, pm.z as f32];
                let grids = target.grids.map(|g| (g, &mut query));
                let Some(j) = track.nearest_within_gridded(
                    target.index,
                    grids,
                    target.points,
                    centre,
                    cutoff2,
                ) else {
                    continue;
                };
                let n = target.normals[j];
                let n = crate::geometry::vec3(n);
                if n.norm_squared() < 0.5 {
                    continue;
                }
                let q = crate::geometry::vec3(target.points[j]);
                let residual = n.dot(&(pm - q));
                let cr = pm.cross(&n);
                out.push(Pair {
                    residual,
                    jac: Vector6::new(cr.x, cr.y, cr.z, n.x, n.y, n.z),
                    key: (((c * CHUNK + k) as u64) << 32) | j as u64,
                });
            }
            out
        })
        .collect();
    chunks.into_iter().flatten().collect()
}

/// 1.4826 × median absolute residual (the residuals' median is close to zero near convergence).
fn robust_scale(pairs: &[Pair]) -> f64 {
    let mut abs: Vec<f64> = pairs.iter().map(|p| p.residual.abs()).collect();
    let mid = abs.len() / 2;
    let (_, m, _) = abs.select_nth_unstable_by(mid, f64::total_cmp);
    1.4826 * *m
}

fn weight(r: f64, scale: f64, loss: RobustLoss) -> f64 {
    match loss {
        RobustLoss::Huber => {
            let k = 1.345 * scale;
            if r.abs() <= k { 1.0 } else { k / r.abs() }
        }
        RobustLoss::Tukey => {
            let c = 4.685 * scale;
            if r.abs() >= c {
                0.0
            } else {
                let u = r / c;
                (1.0 - u * u) * (1.0 - u * u)
            }
        }
    }
}

/// One Gauss–Newton step of point-to-plane ICP from the normal equations `a x = −b` of the
/// linearised motion `x = (ω, δt)` (small rotation vector first, then translation; a tiny
/// ridge, 1e-9 of the trace, keeps a degenerate system solvable): the updated pose
/// `R(ω) · tf + δt` with `|ω|` (radians) and `|δt|` (file units), or `None` when the system
/// cannot be solved.
pub fn point_to_plane_step(
    a: &Matrix6<f64>,
    b: &Vector6<f64>,
    tf: &Rigid,
) -> Option<(Rigid, f64, f64)> {
    let a = a + Matrix6::identity() * (1e-9 * a.trace().max(1e-12));
    let x = a.cholesky()?.solve(&(-b));
    let omega = Vector3::new(x[0], x[1], x[2]);
    let dt = Vector3::new(x[3], x[4], x[5]);
    let step = *Rotation3::new(omega).matrix();
    Some((
        Rigid::new(step * tf.rotation, step * tf.translation + dt),
        omega.norm(),
        dt.norm(),
    ))
}

fn normal_equations(pairs: &[Pair], scale: f64, loss: RobustLoss) -> (Matrix6<f64>, Vector6<f64>) {
    let parts: Vec<(Matrix6<f64>, Vector6<f64>)> = pairs
        .par_chunks(CHUNK)
        .map(|chunk| {
            let mut a = Matrix6::zeros();
            let mut b = Vector6::zeros();
            for p in chunk {
                let w = weight(p.residual, scale, loss);
                if w == 0.0 {
                    continue;
                }
                a += w * p.jac * p.jac.transpose();
                b += w * p.residual * p.jac;
            }
            (a, b)
        })
        .collect();
    parts
        .into_iter()
        .fold((Matrix6::zeros(), Vector6::zeros()), |acc, x| {
            (acc.0 + x.0, acc.1 + x.1)
        })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::spatial::estimate_normals;

    /// A wavy surface z = 0.2 sin(3x) cos(2y) sampled on a grid; ICP from a 4° / 2 cm offset
    /// must return to the identity.
    #[test]
    fn icp_recovers_a_small_offset_on_a_curved_surface() {
        let mut pts = Vec::new();
        for i in 0..60 {
            for j in 0..60 {
                let (x, y) = (i as f32 * 0.02, j as f32 * 0.02);
                pts.push([x, y, 0.2 * (3.0 * x).sin() * (2.0 * y).cos()]);
            }
        }
        let index = KdIndex::new(&pts).unwrap();
        let all: Vec<usize> = (0..pts.len()).collect();
        let normals = estimate_normals(&pts, &index, &all, 10, None);
        let truth = Rigid::new(
            *Rotation3::new(Vector3::new(0.03, -0.05, 0.04)).matrix(),
            Vector3::new(0.02, -0.01, 0.015),
        );
        // Source = target moved by the inverse of `truth`, so `truth` maps it back.
        let inv = truth.inverse();
        let source: Vec<[f32; 3]> = pts
            .iter()
            .map(|p| {
                let q = inv.apply_f32(*p);
                [q.x as f32, q.y as f32, q.z as f32]
            })
            .collect();
        for loss in [RobustLoss::Tukey, RobustLoss::Huber] {
            let params = IcpParams {
                max_distance: 0.1,
                min_scale: 0.002,
                loss,
                max_iterations: 60,
                tolerance: 1e-7,
            };
            let out =
                icp_point_to_plane(&source, &pts, &normals, &index, &Rigid::identity(), &params);
            let err =
                super::super::rigid::rotation_error_deg(&out.transform.rotation, &truth.rotation);
            assert!(err < 0.05, "{loss:?}: rotation error {err}°");
            assert!(
                (out.transform.translation - truth.translation).norm() < 1e-3,
                "{loss:?}"
            );
            let (_, pairs) = fit_quality(&source, &index, &out.transform, params.max_distance);
            let fitness = pairs as f64 / source.len() as f64;
            assert!(fitness > 0.9, "{loss:?}: fitness {fitness}");
        }
    }

    /// Noisy samplings of the wavy surface, overlapping in part: the source and the target are
    /// different noisy draws, so that pairings can flip from one step to the next and runs end
    /// in cycles. A run stopped at a detected cycle must end within a hundred tolerances of where
    /// the run without the detection ends at the iteration cap, with the same pairs and fewer
    /// iterations, and cycles must occur (else the test shows nothing).
    #[test]
    fn a_run_stopped_at_a_cycle_ends_where_the_capped_run_ends() {
        use crate::so3::rng::SplitMix64;
        let mut rng = SplitMix64::new(11);
        let mut draw = |jitter: f32, from: f32| -> Vec<[f32; 3]> {
            let mut v = Vec::new();
            for i in 0..40 {
                for j in 0..40 {
                    let x = from + i as f32 * 0.03 + jitter * (rng.next_f64() as f32 - 0.5);
                    let y = j as f32 * 0.03 + jitter * (rng.next_f64() as f32 - 0.5);
                    let z = 0.2 * (3.0 * x).sin() * (2.0 * y).cos()
                        + 0.02 * (rng.next_f64() as f32 - 0.5);
                    v.push([x, y, z]);
                }
            }
            v
        };
        let target = draw(0.02, 0.0);
        let index = KdIndex::new(&target).unwrap();
        let all: Vec<usize> = (0..target.len()).collect();
        let normals = estimate_normals(&target, &index, &all, 10, None);
        let source = draw(0.02, 0.4);
        let params = IcpParams {
            max_distance: 0.08,
            min_scale: 0.0005,
            loss: RobustLoss::Tukey,
            max_iterations: 40,
            tolerance: 1e-9,
        };
        let mut cycles = 0;
        for k in 0..12 {
            let a = 0.01 * k as f64;
            let start = Rigid::new(
                *Rotation3::new(Vector3::new(a, -0.5 * a, 0.02)).matrix(),
                Vector3::new(0.01, -0.005 * k as f64, 0.01),
            );
            let run = |c| icp_run(&source, &target, &normals, &index, &start, &params, c);
            let (with, period) = run(MAX_CYCLE);
            let (without, none) = run(0);
            assert_eq!(none, None);
            cycles += usize::from(period.is_some());
            // Within a hundred times the tolerance of where the capped run ends.
            let near = IcpParams {
                tolerance: 100.0 * params.tolerance,
                ..params
            };
            assert!(
                within_tolerance(&with.transform, &without.transform, &near),
                "start {k}: period {period:?}\n{:?}\n{:?}",
                with.transform,
                without.transform
            );
            let pairs = |tf: &Rigid| fit_quality(&source, &index, tf, params.max_distance).1;
            assert_eq!(
                pairs(&with.transform),
                pairs(&without.transform),
                "start {k}"
            );
            if period.is_some() {
                assert!(with.iterations < without.iterations, "start {k}");
                assert!(!without.converged, "start {k}");
            } else {
                assert_eq!(with.iterations, without.iterations, "start {k}");
            }
        }
        assert!(cycles > 0, "no run ended in a cycle");
    }
}
