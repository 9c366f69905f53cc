//! Pose hypotheses scored by consensus: how many correspondences a rigid transform explains.
//!
//! Hypotheses come from 3-point RANSAC (classic, seeded) or from one pose per correspondence
//! (the equivariant method). Either way a hypothesis's support is the number of correspondences
//! whose transformed source keypoint lands within the inlier threshold of its target keypoint.
//! The best few *distinct* hypotheses are kept and refined by weighted least squares on their
//! inliers.

use nalgebra::Vector3;
use rayon::prelude::*;

use super::matching::Correspondence;
use super::rigid::{Rigid, rotation_error_deg, umeyama};
use crate::so3::rng::SplitMix64;

/// A rigid transform with the number of correspondences it explains.
#[derive(Debug, Clone, Copy)]
pub struct Hypothesis {
    /// Source local frame to target local frame.
    pub transform: Rigid,
    /// Correspondences within the inlier threshold.
    pub support: usize,
}

/// Correspondence end points as f64 vectors.
pub struct Pairs {
    /// Source keypoint of each correspondence.
    pub src: Vec<Vector3<f64>>,
    /// Target keypoint of each correspondence.
    pub dst: Vec<Vector3<f64>>,
}

impl Pairs {
    /// Gathers the end points of `corr`.
    pub fn new(source: &[[f32; 3]], target: &[[f32; 3]], corr: &[Correspondence]) -> Pairs {
        let v = crate::geometry::vec3;
        Pairs {
            src: corr.iter().map(|c| v(source[c.source as usize])).collect(),
            dst: corr.iter().map(|c| v(target[c.target as usize])).collect(),
        }
    }

    /// Number of pairs.
    pub fn len(&self) -> usize {
        self.src.len()
    }

    /// True when there is no pair.
    pub fn is_empty(&self) -> bool {
        self.src.is_empty()
    }

    /// Number of pairs that `tf` maps within `tau`.
    pub fn support(&self, tf: &Rigid, tau: f64) -> usize {
        let t2 = tau * tau;
        self.src
            .iter()
            .zip(&self.dst)
            .filter(|(s, d)| (tf.apply(s) - *d).norm_squared() <= t2)
            .count()
    }

    /// Indices of the pairs that `tf` maps within `tau`.
    pub fn inliers(&self, tf: &Rigid, tau: f64) -> Vec<usize> {
        let t2 = tau * tau;
        (0..self.len())
            .filter(|&i| (tf.apply(&self.src[i]) - self.dst[i]).norm_squared() <= t2)
            .collect()
    }
}

/// Scores every candidate transform (in parallel, order kept).
pub fn score(pairs: &Pairs, candidates: &[Rigid], tau: f64) -> Vec<Hypothesis> {
    candidates
        .par_iter()
        .map(|tf| Hypothesis {
            transform: *tf,
            support: pairs.support(tf, tau),
        })
        .collect()
}

/// The `keep` best hypotheses by support, skipping any within `angle_deg` and `distance` of a
/// better one already kept. Ties keep the earlier candidate.
pub fn best_distinct(
    mut hyps: Vec<Hypothesis>,
    keep: usize,
    angle_deg: f64,
    distance: f64,
) -> Vec<Hypothesis> {
    // Stable sort: equal support keeps input order, so the result is deterministic.
    hyps.sort_by_key(|h| std::cmp::Reverse(h.support));
    let mut out: Vec<Hypothesis> = Vec::new();
    for h in hyps {
        if out.len() >= keep {
            break;
        }
        if out
            .iter()
            .all(|o| !same_pose(&o.transform, &h.transform, angle_deg, distance))
        {
            out.push(h);
        }
    }
    out
}

/// True when two transforms differ by less than `angle_deg` and `distance`.
pub fn same_pose(a: &Rigid, b: &Rigid, angle_deg: f64, distance: f64) -> bool {
    rotation_error_deg(&a.rotation, &b.rotation) < angle_deg
        && (a.translation - b.translation).norm() < distance
}

/// Re-fits `tf` to its inliers by weighted least squares (Umeyama, weights falling off with the
/// residual) a few times; returns the refined hypothesis.
pub fn refine_on_inliers(pairs: &Pairs, tf: &Rigid, tau: f64, rounds: usize) -> Hypothesis {
    let mut best = Hypothesis {
        transform: *tf,
        support: pairs.support(tf, tau),
    };
    let mut cur = *tf;
    for _ in 0..rounds {
        let inl = pairs.inliers(&cur, tau);
        if inl.len() < 3 {
            break;
        }
        let src: Vec<_> = inl.iter().map(|&i| pairs.src[i]).collect();
        let dst: Vec<_> = inl.iter().map(|&i| pairs.dst[i]).collect();
        let w: Vec<f64> = inl
            .iter()
            .map(|&i| {
                let r = (cur.apply(&pairs.src[i]) - pairs.dst[i]).norm() / tau;
                (1.0 - r * r).max(0.0).powi(2) + 1e-3
            })
            .collect();
        let Some(fit) = umeyama(&src, &dst, Some(&w), false) else {
            break;
        };
        cur = fit.rigid;
        let support = pairs.support(&cur, tau);
        if support >= best.support {
            best = Hypothesis {
                transform: cur,
                support,
            };
        }
    }
    best
}

/// Classic 3-point RANSAC over the correspondences: each iteration draws three distinct pairs
/// (seeded), skips triples whose source and target edge lengths differ by more than 10 % (a
/// rigid map keeps lengths), fits a rigid transform to them, and scores it. Iterations run in
/// blocks with their own seeds, so the result does not depend on the thread count.
pub fn ransac(pairs: &Pairs, tau: f64, iterations: usize, seed: u64) -> Vec<Hypothesis> {
    const PER_BLOCK: usize = 256;
    let n = pairs.len();
    if n < 3 {
        return Vec::new();
    }
    let blocks = iterations.div_ceil(PER_BLOCK);
    let found: Vec<Vec<Hypothesis>> = (0..blocks)
        .into_par_iter()
        .map(|b| {
            let mut rng = SplitMix64::new(seed ^ (b as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15));
            let mut best: Vec<Hypothesis> = Vec::new();
            for _ in 0..PER_BLOCK {
                let i = rng.below(n as u64) as usize;
                let j = rng.below(n as u64) as usize;
                let k = rng.below(n as u64) as usize;
                if i == j || j == k || i == k {
                    continue;
                }
                let ok = [(i, j), (j, k), (i, k)].iter().all(|&(a, b)| {
                    let ls = (pairs.src[a] - pairs.src[b]).norm();
                    let ld = (pairs.dst[a] - pairs.dst[b]).norm();
                    ls > tau && ld > tau && (ls - ld).abs() <= 0.1 * ls.max(ld)
                });
                if !ok {
                    continue;
                }
                let s = [pairs.src[i], pairs.src[j], pairs.src[k]];
                let d = [pairs.dst[i], pairs.dst[j], pairs.dst[k]];
                let Some(fit) = umeyama(&s, &d, None, false) else {
                    continue;
                };
                let support = pairs.support(&fit.rigid, tau);
                best.push(Hypothesis {
                    transform: fit.rigid,
                    support,
                });
            }
            best.sort_by_key(|h| std::cmp::Reverse(h.support));
            best.truncate(16);
            best
        })
        .collect();
    found.into_iter().flatten().collect()
}
