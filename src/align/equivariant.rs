//! The equivariant method: harmonic descriptors at the keypoints, matched on their invariants,
//! and one pose hypothesis per correspondence from their equivariant coefficients.
//!
//! Each keypoint gets the descriptor of [`crate::descriptor`] (real spherical harmonics up to
//! degree `L` times `N` radial shells) at one or more support radii. Matching uses the power
//! spectrum, which does not change under rotation; a signed square root turns its products of
//! coefficients back into amplitudes, so that small and large shells weigh alike.
//!
//! For a correspondence (source keypoint `p`, target keypoint `q`) the coefficients satisfy
//! `c(q) ≈ D(R) c(p)` for the true rotation `R` (Wigner-D, shell by shell), so the rotation that
//! best carries one expansion onto the other ([`crate::so3::search`]) is a pose hypothesis by
//! itself, with translation `t = q − R p`. When the search reports a second maximum nearly as
//! good (a locally symmetric neighbourhood), both become hypotheses. With a second match the
//! pose can be corrected where that rotation is ill-determined ([`paired_poses`]). Consensus
//! over all correspondences then picks the pose.

use nalgebra::Rotation3;
use rayon::prelude::*;

use super::consensus::Pairs;
use super::matching::Correspondence;
use super::prepared_scan::Descriptors;
use super::rigid::Rigid;
use crate::descriptor::{Centres, Engine, Invariants, Recipe};
use crate::error::Result;
use crate::so3::search::{RotationSearcher, SearchOptions};
use crate::spatial::KdIndex;

/// Settings of the equivariant descriptors.
#[derive(Debug, Clone, PartialEq)]
pub struct EquivariantRecipe {
    /// Support radii (file units), largest first.
    pub radii: Vec<f32>,
    /// Maximum degree `L`.
    pub degree: usize,
    /// Radial shells `N`.
    pub shells: usize,
    /// Descriptor version ([`crate::descriptor::RECIPE_VERSION`] by default).
    pub version: u32,
}

/// Descriptors at every point of `points` (the keypoints), neighbours from the same points.
pub fn describe(
    points: &[[f32; 3]],
    index: &KdIndex,
    recipe: &EquivariantRecipe,
) -> Result<Descriptors> {
    let r = Recipe::builder()
        .version(recipe.version)
        .radii(recipe.radii.iter().copied())
        .degree(recipe.degree)
        .shells(recipe.shells)
        .invariants(Invariants {
            norms: false,
            power_spectrum: true,
            bispectrum: false,
        })
        .keep_coefficients(true)
        .build()?;
    let engine = Engine::new(r);
    let f = engine.compute_with_index(points, index, &Centres::All, None)?;
    let dim = f.columns.len();
    let rows = f
        .values
        .iter()
        .map(|&v| v.signum() * v.abs().sqrt())
        .collect();
    let coeffs = f.coefficients.unwrap_or_default();
    let block = coeffs.len() / points.len().max(1);
    Ok(Descriptors {
        dim,
        rows,
        block,
        coefficients: coeffs,
    })
}

/// A rotation searcher for the recipe's degree: coarse grid level 1 and a few candidates, plus
/// the closed-form rotation that aligns the shells' degree-1 vectors (Kabsch) as a start; a
/// second maximum within `ambiguity_margin` of the best flags the match ambiguous.
pub fn searcher(degree: usize, ambiguity_margin: f64) -> RotationSearcher {
    RotationSearcher::with_options(
        degree,
        SearchOptions {
            grid_level: 1,
            candidates: 4,
            separation_deg: 20.0,
            ambiguity_margin,
            max_iterations: 15,
            // The closed-form Kabsch fit of the degree-1 parts of the shells, as one more start.
            degree_one_start: true,
        },
    )
}

/// One pose per correspondence (two when the neighbourhood's rotation is ambiguous), in
/// correspondence order. Correspondences whose blocks have no rotation-dependent energy give
/// none.
pub fn hypotheses(
    corr: &[Correspondence],
    source_points: &[[f32; 3]],
    target_points: &[[f32; 3]],
    source: &Descriptors,
    target: &Descriptors,
    searcher: &RotationSearcher,
) -> Vec<Rigid> {
    per_match(corr, source_points, target_points, source, target, searcher)
        .into_iter()
        .flatten()
        .collect()
}

/// [`hypotheses`] kept per correspondence: entry `k` holds the poses of `corr[k]` (none, one,
/// or two).
pub fn per_match(
    corr: &[Correspondence],
    source_points: &[[f32; 3]],
    target_points: &[[f32; 3]],
    source: &Descriptors,
    target: &Descriptors,
    searcher: &RotationSearcher,
) -> Vec<Vec<Rigid>> {
    let b = source.block;
    corr.par_iter()
        .map(|c| {
            let (i, j) = (c.source as usize, c.target as usize);
            let a = &source.coefficients[i * b..(i + 1) * b];
            let t = &target.coefficients[j * b..(j + 1) * b];
            let Ok(res) = searcher.search_f32(a, t) else {
                return Vec::new();
            };
            if res.best.normalized_rotational_score.is_nan()
                || res.best.normalized_rotational_score <= 0.0
            {
                return Vec::new();
            }
            let p = v(source_points[i]);
            let q = v(target_points[j]);
            let mut out = vec![Rigid::new(res.best.rotation, q - res.best.rotation * p)];
            if res.ambiguous
                && let Some(s) = res.second
            {
                out.push(Rigid::new(s.rotation, q - s.rotation * p));
            }
            out
        })
        .collect()
}

/// Per-match poses corrected by a second match. Two matches fix a pose up to a turn about the
/// line through them; the per-match rotation supplies that turn. For the pose `R` of match `i`
/// (SOURCE `p_i`, TARGET `q_i`), a partner `j` qualifies when its lever `|p_j − p_i|` is at
/// least 4 `tau`, the two lengths `|p_j − p_i|` and `|q_j − q_i|` differ by at most `tau`, and
/// `R (p_j − p_i)` lies within `max_turn_deg` of `q_j − q_i`; the `partners` qualifying
/// partners with the longest levers (ties: lower index) each give the pose `C R`, `C` the
/// smallest rotation carrying `R (p_j − p_i)` onto `q_j − q_i`, with the translation that maps
/// the midpoint of the two SOURCE points onto that of the two TARGET points. Where a
/// neighbourhood is locally symmetric (a plane, a cylinder) its own rotation is ill-determined
/// about the symmetry axis, and a lever across the surface fixes just that turn (DEVELOPERS.md,
/// Registration, "Why the harmonic method trails FPFH"). `poses[k]` are the poses of pair `k`;
/// the result is in match order, then partner order.
pub fn paired_poses(
    pairs: &Pairs,
    poses: &[Vec<Rigid>],
    tau: f64,
    partners: usize,
    max_turn_deg: f64,
) -> Vec<Rigid> {
    let n = pairs.len();
    let cos_max = max_turn_deg.to_radians().cos();
    let per: Vec<Vec<Rigid>> = (0..n)
        .into_par_iter()
        .map(|i| {
            let (pi, qi) = (pairs.src[i], pairs.dst[i]);
            let mut out = Vec::new();
            for r in &poses[i] {
                // (lever, partner) of every qualifying partner.
                let mut found: Vec<(f64, usize)> = (0..n)
                    .filter_map(|j| {
                        let us = pairs.src[j] - pi;
                        let ut = pairs.dst[j] - qi;
                        let (ls, lt) = (us.norm(), ut.norm());
                        if j == i || ls < 4.0 * tau || (ls - lt).abs() > tau {
                            return None;
                        }
                        let turned = r.rotation * us;
                        (turned.dot(&ut) >= cos_max * ls * lt).then_some((ls, j))
                    })
                    .collect();
                found.sort_by(|a, b| b.0.total_cmp(&a.0).then(a.1.cmp(&b.1)));
                for &(_, j) in found.iter().take(partners) {
                    let turned = r.rotation * (pairs.src[j] - pi);
                    let ut = pairs.dst[j] - qi;
                    let Some(c) = Rotation3::rotation_between(&turned, &ut) else {
                        continue;
                    };
                    let rot = c.matrix() * r.rotation;
                    let ms = (pi + pairs.src[j]) * 0.5;
                    let mt = (qi + pairs.dst[j]) * 0.5;
                    out.push(Rigid::new(rot, mt - rot * ms));
                }
            }
            out
        })
        .collect();
    per.into_iter().flatten().collect()
}

fn v(p: [f32; 3]) -> nalgebra::Vector3<f64> {
    crate::geometry::vec3(p)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::so3::rng::SplitMix64;
    use crate::so3::rotation::random_rotation;

    /// A bumpy surface patch, its copy turned by a random rotation: the descriptors of matching
    /// centres give back that rotation (printed seed).
    #[test]
    fn one_correspondence_gives_the_rotation() {
        let seed = 42;
        let mut rng = SplitMix64::new(seed);
        let mut pts = Vec::new();
        for i in 0..41 {
            for j in 0..41 {
                let (x, y) = (i as f32 * 0.05 - 1.0, j as f32 * 0.05 - 1.0);
                let z = 0.3 * (2.0 * x).sin() * (1.5 * y + 0.3).cos() + 0.2 * x * y;
                pts.push([x, y, z]);
            }
        }
        let r = random_rotation(&mut rng);
        let moved: Vec<[f32; 3]> = pts
            .iter()
            .map(|p| {
                let q = r * v(*p);
                [q.x as f32, q.y as f32, q.z as f32]
            })
            .collect();
        let recipe = EquivariantRecipe {
            radii: vec![0.4],
            degree: 4,
            shells: 4,
            version: crate::descriptor::RECIPE_VERSION,
        };
        let ia = KdIndex::new(&pts).unwrap();
        let ib = KdIndex::new(&moved).unwrap();
        let fa = describe(&pts, &ia, &recipe).unwrap();
        let fb = describe(&moved, &ib, &recipe).unwrap();
        // Invariant rows agree up to f32 rounding.
        let k = 20 * 41 + 20;
        for d in 0..fa.dim {
            let (x, y) = (fa.rows[k * fa.dim + d], fb.rows[k * fb.dim + d]);
            assert!(
                (x - y).abs() < 1e-3 * (1.0 + x.abs()),
                "seed {seed} column {d}"
            );
        }
        let corr = [Correspondence {
            source: k as u32,
            target: k as u32,
            ratio: 0.5,
            mutual: true,
        }];
        let h = hypotheses(&corr, &pts, &moved, &fa, &fb, &searcher(4, 0.1));
        assert!(!h.is_empty());
        let err = super::super::rigid::rotation_error_deg(&h[0].rotation, &r);
        assert!(err < 0.5, "seed {seed}: rotation error {err}°");
        let p = h[0].apply(&v(pts[0]));
        assert!((p - v(moved[0])).norm() < 0.02, "seed {seed}");
    }

    /// Two matches under a known rigid motion, the first match's own rotation off by 12° about
    /// the normal of the plane the levers lie in (the ill-determined turn of a flat
    /// neighbourhood): the second match restores the motion exactly (a constructed rigid motion
    /// is the reference); a partner closer than 4 τ or a turn beyond the limit gives nothing.
    #[test]
    fn a_second_match_fixes_the_turn_about_the_normal() {
        use nalgebra::{Rotation3, Vector3};
        let seed = 7;
        let mut rng = SplitMix64::new(seed);
        let r = random_rotation(&mut rng);
        let truth = Rigid::new(r, Vector3::new(0.3, -1.2, 2.0));
        let src = vec![
            Vector3::new(0.0, 0.0, 0.0),
            Vector3::new(1.0, 0.2, 0.0),
            Vector3::new(0.05, 0.0, 0.0),
        ];
        let dst: Vec<_> = src.iter().map(|p| truth.apply(p)).collect();
        let pairs = Pairs { src, dst };
        // The first match's rotation: the truth after a 12° turn about SOURCE's z axis.
        let off = r * Rotation3::from_axis_angle(&Vector3::z_axis(), 12f64.to_radians()).matrix();
        let poses = vec![
            vec![Rigid::new(off, pairs.dst[0] - off * pairs.src[0])],
            Vec::new(),
            Vec::new(),
        ];
        let tau = 0.1;
        let got = paired_poses(&pairs, &poses, tau, 4, 20.0);
        // Partner 1 qualifies (lever 1.02 ≥ 4 τ, 12° ≤ 20°); partner 2 is too close.
        assert_eq!(got.len(), 1, "seed {seed}");
        let err = super::super::rigid::rotation_error_deg(&got[0].rotation, &r);
        assert!(err < 1e-9, "seed {seed}: rotation error {err}°");
        for p in &pairs.src {
            assert!(
                (got[0].apply(p) - truth.apply(p)).norm() < 1e-9,
                "seed {seed}"
            );
        }
        assert!(
            paired_poses(&pairs, &poses, tau, 4, 10.0).is_empty(),
            "seed {seed}"
        );
    }
}
