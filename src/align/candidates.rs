//! Rival poses: the distinct refined poses that explain the data nearly as well as the best,
//! listed so that a user can choose when the verdict is ambiguous.

use nalgebra::{Matrix3, SymmetricEigen, Vector3};
use serde::{Serialize, Serializer};

use super::consensus::{Pairs, same_pose};
use super::rigid::{Rigid, rotation_error_deg};
use crate::spatial::KdIndex;

/// One distinct refined pose.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Candidate {
    /// Row-major 4×4 matrix mapping SOURCE file coordinates into TARGET file coordinates (the
    /// layout of the top-level transform).
    #[serde(serialize_with = "rows")]
    pub transform: Rigid,
    /// Ranking score (tight overlap × explained correspondences over the most any pose
    /// explains), in [0, 1].
    pub score: f64,
    /// How close this pose comes to the answer (the first candidate), in [0, 1] (1 for the
    /// answer itself; see [`rivalry`]); the verdict is ambiguous when the first rival comes
    /// within [`super::quality::MIN_MARGIN`] of 1. A rival that scores above the answer has rivalry
    /// 1 (the first answer, when a larger overlap replaced it, [`super::judge::judge`]).
    pub rivalry: f64,
    /// Tight overlap: fraction of SOURCE keypoints on TARGET's surface with agreeing normals.
    pub overlap: f64,
    /// Fine overlap: fraction of SOURCE's fine points on TARGET's fine surface with agreeing
    /// normals where this pose lays them after its fine fit; `None` (`null`) for a pose that
    /// was not fitted finely (the rivals of a `confident` answer).
    pub fine_overlap: Option<f64>,
    /// Matched keypoint pairs that this pose brings within the inlier threshold.
    pub explained: usize,
    /// Distinctive evidence, in [0, 1]: the weighted share of the distinctive SOURCE keypoints
    /// in the overlap whose detail agrees where this pose lays them (see [`super::evidence`]);
    /// reported beside the ranking figures, not used by them.
    pub evidence: f64,
    /// Rotation angle between this pose and the answer, degrees.
    pub angle_deg: f64,
    /// Distance between where this pose and the answer put SOURCE's keypoint centroid, file
    /// units.
    pub distance: f64,
    /// Share of the tested keypoints, 0 to 1, that this pose puts in space a sensor saw
    /// through (in front of the surface it measured, [`super::visibility`]); `null` when no
    /// sensor position is known.
    pub free_space_violation: Option<f64>,
}

fn rows<S: Serializer>(tf: &Rigid, s: S) -> Result<S::Ok, S::Error> {
    tf.to_rows().serialize(s)
}

/// A refined pose with the evidence for it (local frames).
#[derive(Debug, Clone, Copy)]
pub struct Scored {
    /// SOURCE local → TARGET local.
    pub pose: Rigid,
    /// Tight overlap fraction (see [`super::icp::oriented_fit`]).
    pub overlap: f64,
    /// Correspondences explained (matched keypoints that the pose brings within the inlier
    /// threshold).
    pub explained: usize,
    /// Distinctive evidence, in [0, 1] ([`super::evidence`]).
    pub evidence: f64,
    /// ICP iterations.
    pub iterations: usize,
    /// Share of the tested keypoints that the pose puts in space a sensor saw through
    /// ([`super::visibility`]); `None` when no sensor position is known.
    pub free_space: Option<f64>,
}

/// Each keypoint a pose puts in seen-through space cancels this many keypoints on the
/// surface (see [`Scored::consistent_overlap`]).
pub const FREE_SPACE_WEIGHT: f64 = 2.0;

/// The most evidence of either kind that any refined pose has: the scale of
/// [`Scored::score`].
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Most {
    /// Most explained matches.
    pub explained: usize,
    /// Most distinctive evidence.
    pub evidence: f64,
}

impl Most {
    /// The largest of each figure over `scored`.
    pub fn of(scored: &[Scored]) -> Most {
        Most {
            explained: scored.iter().map(|p| p.explained).max().unwrap_or(0),
            evidence: scored.iter().map(|p| p.evidence).fold(0.0, f64::max),
        }
    }
}

impl Scored {
    /// The tight overlap less [`FREE_SPACE_WEIGHT`] × the free-space violation share (when a
    /// sensor position is known), at least 0: a point the pose lays on the other surface is
    /// evidence for it, a point it puts where a sensor saw through is evidence against it.
    pub fn consistent_overlap(&self) -> f64 {
        (self.overlap - FREE_SPACE_WEIGHT * self.free_space.unwrap_or(0.0)).max(0.0)
    }

    /// The ranking score `overlap × explained / most explained` (overlap as
    /// [`Scored::consistent_overlap`]): geometry alone prefers a pose that stacks two partial
    /// views of a near-symmetric part; the matched features, and what the sensors saw through,
    /// are what separate it from the true, side-by-side pose. (Weighing in the distinctive
    /// evidence, `overlap × √(k × e)`, was tried and made more stacked poses win on the
    /// benchmark subset; DEVELOPERS.md, Registration.)
    pub fn score(&self, most: Most) -> f64 {
        self.consistent_overlap() * self.explained as f64 / most.explained.max(1) as f64
    }
}

/// Centroid and principal axes (unit columns) of `points`; `None` below 10 points.
fn principal_frame(points: &[Vector3<f64>]) -> Option<(Vector3<f64>, Matrix3<f64>)> {
    if points.len() < 10 {
        return None;
    }
    let n = points.len() as f64;
    let c = points.iter().fold(Vector3::zeros(), |a, p| a + p) / n;
    let mut cov = Matrix3::zeros();
    for p in points {
        cov += (p - c) * (p - c).transpose();
    }
    Some((c, SymmetricEigen::new(cov / n).eigenvectors))
}

/// The translation on which the most matched pairs agree for a given `rotation`: each pair
/// votes `dst − R src`, votes are counted in cells of `tau` (with the 26 cells around), and
/// the mean vote of the best cell's neighbourhood is returned with the pairs the pose then
/// explains; `None` below 3. Ties go to the smallest cell.
fn voted_translation(
    rotation: &Matrix3<f64>,
    pairs: &Pairs,
    tau: f64,
) -> Option<(Vector3<f64>, usize)> {
    let votes: Vec<Vector3<f64>> = pairs
        .src
        .iter()
        .zip(&pairs.dst)
        .map(|(s, d)| d - rotation * s)
        .collect();
    let cell = |v: &Vector3<f64>| {
        [
            (v.x / tau).floor() as i64,
            (v.y / tau).floor() as i64,
            (v.z / tau).floor() as i64,
        ]
    };
    let mut cells: Vec<[i64; 3]> = votes.iter().map(cell).collect();
    cells.sort_unstable();
    let count = |c: &[i64; 3]| {
        let mut n = 0;
        for dx in -1..=1 {
            for dy in -1..=1 {
                for dz in -1..=1 {
                    let k = [c[0] + dx, c[1] + dy, c[2] + dz];
                    let lo = cells.partition_point(|x| x < &k);
                    n += cells[lo..].partition_point(|x| x == &k);
                }
            }
        }
        n
    };
    let mut best: Option<([i64; 3], usize)> = None;
    for c in cells.iter() {
        let n = count(c);
        if best.is_none_or(|b| n > b.1) {
            best = Some((*c, n));
        }
    }
    let (c, _) = best?;
    let near: Vec<&Vector3<f64>> = votes
        .iter()
        .filter(|v| {
            let k = cell(v);
            (0..3).all(|a| (k[a] - c[a]).abs() <= 1)
        })
        .collect();
    let t = near.iter().fold(Vector3::zeros(), |a, v| a + *v) / near.len() as f64;
    let support = pairs.support(&Rigid::new(*rotation, t), tau);
    (support >= 3).then_some((t, support))
}

/// Near-symmetric alternatives of `best` (local frames) that the drawn hypotheses may have
/// missed. Turns are taken about the principal axes of three regions, each through its
/// centroid: the overlap region (the SOURCE keypoints that `best` puts within `tau` of
/// TARGET), by 90°, 180° and 270°; and, by 180° (the flips), the TARGET keypoints and the union
/// of the TARGET keypoints with the SOURCE keypoints placed by `best` (the object's axes when
/// the two views lie side by side; on the benchmark a wrong pose that stacks two views of a
/// near-symmetric part is most often a half turn of the truth, DEVELOPERS.md "Rival poses").
/// Then slides by `±` the overlap's spread along each of `slides` (unit vectors, TARGET local
/// frame). A turn about an axis through the wrong point lies too far from the pose it stands
/// for to reach it by ICP, so each turned rotation is also given with the translation on which
/// the most matched pairs agree (`voted_translation`). Poses that coincide (within 1° and
/// `tau`) are given once.
pub fn alternatives(
    best: &Rigid,
    source: &[[f32; 3]],
    target: &[[f32; 3]],
    target_index: &KdIndex,
    pairs: &Pairs,
    tau: f64,
    slides: &[Vector3<f64>],
) -> Vec<Rigid> {
    let placed: Vec<Vector3<f64>> = source.iter().map(|p| best.apply_f32(*p)).collect();
    let near: Vec<Vector3<f64>> = placed
        .iter()
        .filter(|q| {
            target_index
                .nearest_within([q.x as f32, q.y as f32, q.z as f32], tau * tau)
                .is_some()
        })
        .copied()
        .collect();
    let Some((c, axes)) = principal_frame(&near) else {
        return Vec::new();
    };
    let target: Vec<Vector3<f64>> = target.iter().map(|p| crate::geometry::vec3(*p)).collect();
    let union: Vec<Vector3<f64>> = target.iter().chain(placed.iter()).copied().collect();
    let mut frames = vec![(c, axes, &[90.0f64, 180.0, 270.0][..])];
    for region in [&target, &union] {
        if let Some((c, axes)) = principal_frame(region) {
            frames.push((c, axes, &[180.0][..]));
        }
    }
    let mut out: Vec<Rigid> = Vec::new();
    for (c, axes, turns) in frames {
        for k in 0..3 {
            let axis = axes.column(k).into_owned();
            for &deg in turns {
                let turned = best.turned_about(&axis, &c, deg);
                let rotation = turned.rotation;
                let voted =
                    voted_translation(&rotation, pairs, tau).map(|(t, _)| Rigid::new(rotation, t));
                for pose in std::iter::once(turned).chain(voted) {
                    if out.iter().all(|o| !same_pose(o, &pose, 1.0, tau)) {
                        out.push(pose);
                    }
                }
            }
        }
    }
    let n = near.len() as f64;
    for s in slides {
        let spread = (near.iter().map(|p| (p - c).dot(s).powi(2)).sum::<f64>() / n).sqrt();
        for sign in [-1.0, 1.0] {
            out.push(Rigid::new(
                best.rotation,
                best.translation + s * (sign * spread),
            ));
        }
    }
    out
}

/// Up to `count` distinct poses of `scored` in order of [`Scored::score`] (ties: input order),
/// skipping poses within `angle_deg` and `distance` of one already kept and poses scoring below
/// `floor` × the best. Returns indices into `scored`.
pub fn distinct_best(
    scored: &[Scored],
    count: usize,
    angle_deg: f64,
    distance: f64,
    floor: f64,
) -> Vec<usize> {
    let most = Most::of(scored);
    let mut order: Vec<usize> = (0..scored.len()).collect();
    order.sort_by(|&a, &b| {
        scored[b]
            .score(most)
            .total_cmp(&scored[a].score(most))
            .then(a.cmp(&b))
    });
    let top = order.first().map_or(0.0, |&i| scored[i].score(most));
    let mut kept: Vec<usize> = Vec::new();
    for i in order {
        if kept.len() >= count || scored[i].score(most) < floor * top {
            break;
        }
        if kept
            .iter()
            .all(|&j| !same_pose(&scored[j].pose, &scored[i].pose, angle_deg, distance))
        {
            kept.push(i);
        }
    }
    kept
}

/// How `other` differs from `best` (local frames) at `centroid` (SOURCE local frame): the angle
/// of the relative rotation (degrees) and the distance between the moved centroids.
pub fn difference(best: &Rigid, other: &Rigid, centroid: &Vector3<f64>) -> (f64, f64) {
    (
        rotation_error_deg(&best.rotation, &other.rotation),
        (best.apply(centroid) - other.apply(centroid)).norm(),
    )
}

/// Fewest explained matches for a rival's matches to count as real support (set on the
/// benchmark subset and the demo part scans, DEVELOPERS.md).
pub const MIN_RIVAL_SUPPORT: f64 = 5.0;

/// How close `other` comes to `best`, in [0, 1] (1 when it is as good). It is the larger of:
/// the ratio of their [`Scored::score`]s (a stacked pose with more overlap and fewer matches
/// against a side-by-side pose with fewer overlap and more matches); and the smaller of the
/// overlap ratio and the explained-match ratio (a dominant plane lets a wrong pose keep the
/// overlap but not the matches; a symmetric shape keeps both). When the two explained counts
/// differ by no more than three standard deviations of a count (`3 √(k₁ + k₂)`, Poisson) and the
/// rival has real support (at least [`MIN_RIVAL_SUPPORT`] matches), the matches do not tell
/// the poses apart and the overlap ratio alone is used. Overlaps are
/// [`Scored::consistent_overlap`]s: a pose that puts points where a sensor saw through is a
/// weaker rival.
pub fn rivalry(other: &Scored, best: &Scored, most: Most) -> f64 {
    let o = other.consistent_overlap() / best.consistent_overlap().max(f64::MIN_POSITIVE);
    let (k1, k2) = (best.explained as f64, other.explained as f64);
    let k = k2 / k1.max(1.0);
    let s = other.score(most) / best.score(most).max(f64::MIN_POSITIVE);
    let indistinct = k2 >= MIN_RIVAL_SUPPORT && k1 - k2 <= 3.0 * (k1 + k2).sqrt();
    let r = if indistinct { o } else { o.min(k) };
    r.max(s).clamp(0.0, 1.0)
}

#[cfg(test)]
mod tests {
    use super::*;
    use nalgebra::Rotation3;

    /// 20 pairs that agree on a known pose among 40 that point anywhere: the vote finds the
    /// pose's translation for its rotation, and nothing for a rotation no pair agrees on.
    #[test]
    fn voted_translation_finds_the_translation_most_pairs_agree_on() {
        let r = *Rotation3::from_axis_angle(&Vector3::z_axis(), 2.0).matrix();
        let t = Vector3::new(4.0, -7.0, 1.5);
        let mut pairs = Pairs {
            src: Vec::new(),
            dst: Vec::new(),
        };
        // Deterministic spread of points (a linear congruential walk).
        let mut x = 12345u64;
        let mut next = || {
            x = x
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (x >> 11) as f64 / (1u64 << 53) as f64 * 20.0 - 10.0
        };
        for k in 0..60 {
            let s = Vector3::new(next(), next(), next());
            let d = if k % 3 == 0 {
                r * s + t
            } else {
                Vector3::new(next(), next(), next())
            };
            pairs.src.push(s);
            pairs.dst.push(d);
        }
        let (found, support) = voted_translation(&r, &pairs, 0.1).expect("a vote");
        assert!((found - t).norm() < 1e-9, "{found:?}");
        assert_eq!(support, 20);
        let other = *Rotation3::from_axis_angle(&Vector3::x_axis(), 1.0).matrix();
        assert!(voted_translation(&other, &pairs, 0.1).is_none_or(|(_, n)| n < 5));
    }
}
