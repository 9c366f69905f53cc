//! Stage 4 of registration, judge: how sure the answer is, in figures and a verdict, with its
//! closest rivals listed.
//!
//! Rivalry: every distinct coarse pose is compared with the best
//! ([`super::candidates::rivalry`]), and so are the ranked hypotheses that were not polished,
//! on the ranking subsample (a symmetric shape splits its matches among its symmetric poses,
//! which then rank alike); the margin is one minus the strongest rival. The overlap is the
//! share of SOURCE keypoints within τ of a TARGET keypoint under the answer; the RMSE is taken
//! on the full-resolution clouds over pairs closer than [`super::Tuning::rmse_pairing_spacings`]
//! TARGET point spacings (at most one fine voxel). [`super::quality`] turns inliers, overlap and
//! margin into a confidence and the verdict; a fit with a weakly constrained motion is never
//! confident. Where a sensor position is known, every rival's overlap is reduced by the points
//! it puts in space a sensor saw through ([`super::visibility`],
//! [`super::candidates::Scored::consistent_overlap`]), and each candidate carries its
//! free-space violation share; an answer whose share exceeds
//! [`super::Tuning::free_space_max_share`] is `not_found` (`contradicts_free_space`).
//! Candidates are given in file coordinates, the first being the answer: the best pose by
//! score, or, when the verdict is not confident, the distinct pose that, fitted finely, lays
//! clearly more of SOURCE on TARGET ([`judge`]).

use nalgebra::Vector3;
use rayon::prelude::*;

use super::candidates::{Candidate, FREE_SPACE_WEIGHT, Scored, difference, rivalry};
use super::consensus::{self, Pairs};
use super::evidence::Distinctive;
use super::icp::fit_quality;
use super::off_plane::OffPlane;
use super::pinning;
use super::pipeline::AlignParams;
use super::prepared_scan::PreparedScan;
use super::quality::{self, Figures, Verdict};
use super::rank::Ranked;
use super::refine::{FineFit, Refined, fit_fine, scored_overlap};
use super::residual::full_resolution_rmse;
use super::rigid::Rigid;
use super::visibility::Visibility;
use crate::error::Result;

/// The figures, the verdict and the listed candidates of a refined registration.
pub struct Judgement {
    /// Quality figures.
    pub figures: Figures,
    /// The plain outcome.
    pub verdict: Verdict,
    /// The answer and its closest rivals, file coordinates.
    pub candidates: Vec<Candidate>,
    /// The fine fit of the answer (SOURCE local → TARGET local), with its constraint analysis.
    pub fit: FineFit,
}

/// How strongly `other` is listed beside `best`: its `rivalry`, or, when its consistent overlap
/// is at least `share_floor` ([`super::Tuning::list_overlap_share`]) of the best's, that share
/// (at most 1) if larger. On the benchmark the true pose of a stacked pair, when it is refined
/// at all, lays nearly as much of SOURCE on TARGET as the stacked answer but explains only 3–9
/// matches against its 18–42 (DEVELOPERS.md, "Rival poses"), so its rivalry alone is low.
fn listing_weight(other: &Scored, best: &Scored, rivalry: f64, share_floor: f64) -> f64 {
    let share = other.consistent_overlap() / best.consistent_overlap().max(f64::MIN_POSITIVE);
    if share >= share_floor {
        rivalry.max(share.min(1.0))
    } else {
        rivalry
    }
}

/// What the judge looks at: the refined poses, the ranked hypotheses, the kept matches (pairs
/// and their count), the distinctive evidence, both scans, the parameters, the sensors'
/// free-space test and the inlier threshold τ.
pub struct Inputs<'a> {
    /// The coarse poses, their order and the fine fit of the best.
    pub refined: &'a Refined,
    /// The ranked hypotheses (rivals that were not refined).
    pub ranked: &'a Ranked,
    /// The kept matches as point pairs (local frames).
    pub pairs: &'a Pairs,
    /// How many matches were kept.
    pub correspondences: usize,
    /// Distinctive evidence of a pose.
    pub distinctive: &'a Distinctive,
    /// SOURCE.
    pub source: &'a PreparedScan,
    /// TARGET.
    pub target: &'a PreparedScan,
    /// The run's parameters.
    pub params: &'a AlignParams,
    /// The free-space test (no-op without sensor positions).
    pub seen: &'a Visibility,
    /// Inlier threshold τ (local units).
    pub tau: f64,
}

/// Judges the refined answer of `source` onto `target`.
///
/// The answer is first the best coarse pose by score (tight overlap × explained matches),
/// fitted finely. When that verdict is not `confident`, the matches have not separated the
/// poses, and on a pair of views that cannot be laid on top of each other the true pose lays
/// more of SOURCE on TARGET than a wrong one: the first answer and up to
/// [`super::Tuning::answer_fine_pool`] distinct refined poses that explain a match are fitted
/// finely, and the one that lays the most of SOURCE's fine points on TARGET's surface becomes
/// the answer when it leads the first answer by more than [`super::Tuning::answer_fine_lead`]
/// (`fine_overlap_leader`; with the pool at 0, the largest consistent overlap of the coarse
/// poses, [`Scored::consistent_overlap`], by more than [`super::Tuning::answer_overlap_lead`],
/// `overlap_leader`). It is appraised like the first (figures, constraint, rivals and
/// candidates all describe it, with the first answer listed second); its verdict is
/// never `confident`: `not_found` when its figures and the first answer's both say so, else
/// `ambiguous` with [`quality::Reason::MatchesFavourAnotherPose`].
pub fn judge(inputs: &Inputs<'_>) -> Result<Judgement> {
    let Inputs {
        refined, params, ..
    } = *inputs;
    let first = refined.order.first().copied();
    let fits = FitCache::default();
    let judged = appraise(inputs, first, &refined.fit, None, &fits)?;
    if judged.verdict == Verdict::Confident {
        return Ok(judged);
    }
    let Some(first) = first else {
        return Ok(judged);
    };
    let tu = &params.tuning;
    let chosen = if tu.answer_fine_pool > 0 && tu.answer_overlap_lead <= 1.0 {
        fine_overlap_leader(inputs, first, &fits)
    } else {
        let other = overlap_leader(&refined.polished, first, &refined.order, &params.tuning);
        other.map(|i| (i, fits.fit(inputs, i)))
    };
    let Some((other, fit)) = chosen else {
        return Ok(judged);
    };
    let replaced = Replaced {
        index: first,
        fit: &refined.fit,
        verdict: judged.verdict,
    };
    appraise(inputs, Some(other), &fit, Some(replaced), &fits)
}

/// The first answer, when another distinct pose took its place.
#[derive(Clone, Copy)]
struct Replaced<'a> {
    /// Index into `polished`.
    index: usize,
    /// Its fine fit.
    fit: &'a FineFit,
    /// Its verdict.
    verdict: Verdict,
}

/// Among the distinct refined poses `order` (indices into `polished`) other than `answer` that
/// explain at least [`super::Tuning::answer_min_explained`] matches, the one with the largest
/// consistent overlap, when that exceeds the answer's by more than
/// [`super::Tuning::answer_overlap_lead`]; ties go to the earlier in `order`. Every such pose
/// is listable (its overlap share exceeds the listing share, `listing_weight`): the choice is
/// not limited to the [`super::Tuning::candidates`] listed beside the first answer.
fn overlap_leader(
    polished: &[Scored],
    answer: usize,
    order: &[usize],
    tu: &super::Tuning,
) -> Option<usize> {
    let mut best: Option<usize> = None;
    for &i in order.iter().filter(|&&i| i != answer) {
        if polished[i].explained >= tu.answer_min_explained
            && best
                .is_none_or(|b| polished[i].consistent_overlap() > polished[b].consistent_overlap())
        {
            best = Some(i);
        }
    }
    best.filter(|&i| {
        polished[i].consistent_overlap()
            > polished[answer].consistent_overlap() + tu.answer_overlap_lead
    })
}

/// The fine fits of refined poses made while judging (index into `polished`, its fit), so that
/// no pose is fitted twice: the pool of [`fine_overlap_leader`] and the fitted rivals of the
/// listing ([`shown_poses`]) share them. A fit depends on the pose alone, so the result does
/// not depend on which thread made it first.
///
/// It also keeps the fine overlap measured of each pose ([`FitCache::fine_share`]), so that the
/// pool's measure and a listed candidate's `fine_overlap` of the same pose are one pass.
#[derive(Default)]
struct FitCache {
    fits: std::sync::Mutex<Vec<(usize, FineFit)>>,
    shares: std::sync::Mutex<Vec<(Rigid, f64)>>,
}

impl FitCache {
    /// The fine fit of refined pose `i`, made now or taken from an earlier call.
    fn fit(&self, inputs: &Inputs<'_>, i: usize) -> FineFit {
        let known = lock(&self.fits)
            .iter()
            .find(|f| f.0 == i)
            .map(|f| f.1.clone());
        known.unwrap_or_else(|| {
            let pose = &inputs.refined.polished[i].pose;
            let fit = fit_fine(
                pose,
                inputs.source,
                inputs.target,
                inputs.params,
                inputs.tau,
            );
            lock(&self.fits).push((i, fit.clone()));
            fit
        })
    }

    /// [`pinning::fine_fit`] of `pose` (the share of SOURCE's fine points within the plane
    /// tolerance of TARGET's fine surface), measured now or taken from an earlier call on the
    /// same pose (bit for bit).
    fn fine_share(&self, inputs: &Inputs<'_>, pose: &Rigid) -> f64 {
        let known = lock(&self.shares)
            .iter()
            .find(|m| m.0 == *pose)
            .map(|m| m.1);
        known.unwrap_or_else(|| {
            let share = pinning::fine_fit(
                inputs.source,
                inputs.target,
                pose,
                inputs.params,
                inputs.tau,
            );
            lock(&self.shares).push((*pose, share));
            share
        })
    }
}

/// `mutex` locked; a poisoned lock is taken as it is (its list only ever grows by whole entries).
fn lock<T>(mutex: &std::sync::Mutex<T>) -> std::sync::MutexGuard<'_, T> {
    mutex
        .lock()
        .unwrap_or_else(std::sync::PoisonError::into_inner)
}

/// With [`super::Tuning::answer_fine_pool`]: the first answer and up to that many other
/// distinct refined poses (largest consistent overlap first, each explaining at least
/// [`super::Tuning::answer_min_explained`] matches), each fitted finely and measured by its
/// fine overlap ([`fine_consistent`]); the pose whose fine overlap leads the first answer's by
/// more than [`super::Tuning::answer_fine_lead`], with its fine fit. The fits run in parallel;
/// ties go to the pose with the larger consistent overlap, so the result does not depend on the
/// threads.
fn fine_overlap_leader(
    inputs: &Inputs<'_>,
    first: usize,
    fits: &FitCache,
) -> Option<(usize, FineFit)> {
    let (refined, tu) = (inputs.refined, &inputs.params.tuning);
    let polished = &refined.polished;
    let mut pool: Vec<usize> = refined
        .order
        .iter()
        .copied()
        .filter(|&i| i != first && polished[i].explained >= tu.answer_min_explained)
        .collect();
    pool.sort_by(|&a, &b| {
        polished[b]
            .consistent_overlap()
            .total_cmp(&polished[a].consistent_overlap())
            .then(a.cmp(&b))
    });
    pool.truncate(tu.answer_fine_pool);
    let base = fine_consistent(inputs, &refined.fit.local, fits);
    let fitted: Vec<(usize, FineFit, f64)> = pool
        .par_iter()
        .map(|&i| {
            let fit = fits.fit(inputs, i);
            let m = fine_consistent(inputs, &fit.local, fits);
            (i, fit, m)
        })
        .collect();
    let mut best: Option<(usize, FineFit, f64)> = None;
    for (i, fit, m) in fitted {
        if best.as_ref().is_none_or(|b| m > b.2) {
            best = Some((i, fit, m));
        }
    }
    best.filter(|b| b.2 > base + tu.answer_fine_lead)
        .map(|(i, fit, _)| (i, fit))
}

/// The fine overlap of a finely fitted `pose` ([`pinning::fine_fit`]: the share of SOURCE's
/// fine points within the plane tolerance of TARGET's fine surface, normals agreeing) less
/// [`FREE_SPACE_WEIGHT`] × its free-space violation share where a sensor position is known,
/// at least 0 (as [`super::candidates::Scored::consistent_overlap`] on the keypoints).
fn fine_consistent(inputs: &Inputs<'_>, pose: &Rigid, fits: &FitCache) -> f64 {
    let free = FREE_SPACE_WEIGHT * inputs.seen.violation(pose).unwrap_or(0.0);
    (fits.fine_share(inputs, pose) - free).max(0.0)
}

/// Figures, verdict and candidates of `answer` (an index into `polished`; `None` when nothing
/// was refined) with its fine `fit`. `replaced`: the first answer, when `answer` took its place
/// (listed second with its fine fit; the verdict is never `confident`, see [`judge`]).
fn appraise(
    inputs: &Inputs<'_>,
    answer: Option<usize>,
    fit: &FineFit,
    replaced: Option<Replaced<'_>>,
    fits: &FitCache,
) -> Result<Judgement> {
    let Inputs {
        refined,
        ranked,
        pairs,
        correspondences,
        distinctive,
        source,
        target,
        params,
        seen,
        tau,
    } = *inputs;
    let tu = &params.tuning;
    let Refined {
        polished,
        order,
        most,
        coarse,
        ..
    } = refined;
    let most = *most;
    let best = answer.map(|i| polished[i]);
    let replaced_index = replaced.map(|r| r.index);
    let coarse = best.map_or(*coarse, |b| b.pose);
    let local = fit.local;
    // How close each distinct pose comes to the answer (1 for the answer itself). The
    // candidates are the answer and its closest rivals.
    let rivalry_of = |i: usize| best.map_or(0.0, |b| rivalry(&polished[i], &b, most));
    let mut rivals: Vec<(usize, f64)> = answer
        .into_iter()
        .chain(order.iter().copied().filter(|&i| Some(i) != answer))
        .map(|i| (i, rivalry_of(i)))
        .collect();
    if rivals.len() > 1 {
        rivals[1..].sort_by(|x, y| y.1.total_cmp(&x.1).then(x.0.cmp(&y.0)));
    }
    let rival = rivals.get(1).map_or(0.0, |r| r.1);
    // Listed: the answer, the first answer it replaced (if so), then the rivals by listing
    // weight (rivalry, or the overlap share of a pose with real support of its own,
    // [`listing_weight`]) down to `list_rivalry`.
    let weight = |i: usize, r: f64| {
        best.map_or(r, |b| {
            listing_weight(&polished[i], &b, r, tu.list_overlap_share)
        })
    };
    let mut by_weight: Vec<(usize, f64, f64)> = rivals
        .iter()
        .skip(1)
        .filter(|&&(i, _)| Some(i) != replaced_index)
        .map(|&(i, r)| (i, r, weight(i, r)))
        .collect();
    by_weight.sort_by(|x, y| y.2.total_cmp(&x.2).then(x.0.cmp(&y.0)));
    let listed: Vec<(usize, f64)> = rivals
        .iter()
        .take(1)
        .copied()
        .chain(replaced_index.map(|i| (i, rivalry_of(i))))
        .chain(
            by_weight
                .iter()
                .filter(|x| x.2 >= tu.list_rivalry)
                .map(|x| (x.0, x.1)),
        )
        .take(tu.candidates)
        .collect();
    let tight = best.map_or(0.0, |b| b.overlap);
    let support = best.map_or(1, |b| b.explained.max(1)) as f64;
    // The shortlist holds more poses than were polished: compare them on the same subsample.
    // With a sensor position known, a hypothesis's surface points are reduced by the points it
    // puts in seen-through space, as in [`super::candidates::Scored::consistent_overlap`].
    let sample_n = ranked.sample.len() as f64;
    let consistent = |n: usize, pose: &super::rigid::Rigid| {
        let bad = seen.violation(pose).unwrap_or(0.0);
        (n as f64 - FREE_SPACE_WEIGHT * bad * sample_n).max(0.0)
    };
    let sample_tight = consistent(ranked.on_surface(target, &coarse, tau, tu), &coarse);
    let rival = ranked
        .poses
        .iter()
        .filter(|(_, h)| {
            !consensus::same_pose(
                &h.transform,
                &coarse,
                tu.distinct_angle_deg,
                tu.distinct_distance_taus * tau,
            )
        })
        .map(|(n, h)| {
            let o = consistent(*n, &h.transform) / sample_tight.max(1.0);
            o.min(h.support as f64 / support)
        })
        .fold(rival, f64::max);
    let margin = if tight > 0.0 {
        (1.0 - rival).clamp(0.0, 1.0)
    } else {
        0.0
    };

    let n = source.keypoints.len() as f64;
    let overlap = fit_quality(&source.keypoints, target.keypoint_index(), &local, tau).1 as f64 / n;
    let full = target.full()?;
    let pairing = full.spacing.map_or(target.fine_voxel, |s| {
        (tu.rmse_pairing_spacings * s as f64).min(target.fine_voxel)
    });
    let (rmse, _) =
        full_resolution_rmse(&source.points, &target.points, &full.index, &local, pairing);
    // The fine fit moves the answer by a fraction of τ, which can carry a few matched keypoints
    // (each up to about a voxel from its true spot) across the τ gate either way: with
    // [`super::Tuning::consensus_at_coarse`], the matches that agree with the coarse pose
    // count too (the larger of the two counts).
    let at_fine = pairs.support(&local, tau);
    let inliers = match best {
        Some(b) if tu.consensus_at_coarse => at_fine.max(b.explained),
        _ => at_fine,
    };
    let mut figures = Figures {
        rmse,
        overlap,
        correspondences,
        inliers,
        margin,
        confidence: 0.0,
        reverse_fit_turn_deg: None,
    };
    figures.confidence = quality::confidence(inliers, overlap, margin);
    let mut verdict = quality::verdict(&figures);
    if verdict == Verdict::Confident && !fit.constraint.weak.is_empty() {
        verdict = Verdict::Ambiguous(quality::Reason::WeaklyConstrained);
    }
    if verdict == Verdict::Confident
        && replaced.is_none()
        && quality::slid_rival(refined.slide_rivalry)
    {
        verdict = Verdict::Ambiguous(quality::Reason::AmbiguousSymmetricShape);
    }
    // Each listed rival's consistent overlap and explained matches as shares of the answer's.
    let shares: Vec<(usize, f64, f64)> = listed
        .iter()
        .skip(1)
        .filter_map(|&(i, _)| {
            let (p, b) = (&polished[i], best.as_ref()?);
            Some((
                i,
                p.consistent_overlap() / b.consistent_overlap().max(f64::MIN_POSITIVE),
                p.explained as f64 / b.explained.max(1) as f64,
            ))
        })
        .collect();
    if verdict == Verdict::Confident
        && quality::rival_as_large(shares.iter().map(|s| (s.1, s.2)), tu)
    {
        verdict = Verdict::Ambiguous(quality::Reason::AmbiguousSymmetricShape);
    }
    // A rival laying nearly as much whatever its matches, unless all it keeps is the largest
    // plane ([`off_plane`]).
    if verdict == Verdict::Confident
        && let Some(b) = best.as_ref()
        && shares.iter().any(|s| s.1 >= tu.rival_near_overlap)
    {
        let off = OffPlane::new(source, tau, tu.normal_angle_deg);
        let answer_off = off.overlap(source, target, &b.pose, params, tau);
        let off_share = |i: usize| {
            off.overlap(source, target, &polished[i].pose, params, tau)
                / answer_off.max(f64::MIN_POSITIVE)
        };
        if shares
            .iter()
            .any(|s| s.1 >= tu.rival_near_overlap && off_share(s.0) >= tu.rival_off_plane_share)
        {
            verdict = Verdict::Ambiguous(quality::Reason::AmbiguousSymmetricShape);
        }
    }
    // An answer that replaced another is `ambiguous` because the matches favour that other
    // pose; `not_found` only when the replaced answer was not found either.
    if let Some(r) = replaced {
        verdict = match (r.verdict, verdict) {
            (Verdict::NotFound(_), Verdict::NotFound(why)) => Verdict::NotFound(why),
            _ => Verdict::Ambiguous(quality::Reason::MatchesFavourAnotherPose),
        };
    }
    let answer_free_space = seen.violation(&local);
    if answer_free_space.is_some_and(|v| v > tu.free_space_max_share)
        && !matches!(verdict, Verdict::NotFound(_))
    {
        verdict = Verdict::NotFound(quality::Reason::ContradictsFreeSpace);
    }
    // The restart test of the fine fit (only for an answer that would be confident: it costs
    // four ICP runs), a pose it reaches that fits as well listed second.
    let unpinned = match (verdict, best) {
        (Verdict::Confident, Some(_)) => pinning::restart_test(&local, source, target, params, tau)
            .map(|u| Scored {
                pose: u.pose,
                overlap: scored_overlap(source, target, &u.pose, params, tau),
                explained: pairs.support(&u.pose, tau),
                evidence: distinctive.agreement(source, target, &u.pose, tau),
                iterations: u.iterations,
                free_space: seen.violation(&u.pose),
            }),
        _ => None,
    };
    if unpinned.is_some() {
        verdict = Verdict::Ambiguous(quality::Reason::FitNotPinned);
    }
    // The fit made the other way round (one more fine fit, only for an answer still confident).
    if verdict == Verdict::Confident && tu.reverse_fit_max_deg > 0.0 {
        let turn = pinning::reverse_fit_turn(&local, source, target, params, tau);
        figures.reverse_fit_turn_deg = Some(turn);
        if turn > tu.reverse_fit_max_deg {
            verdict = Verdict::Ambiguous(quality::Reason::FitsDisagree);
        }
    }
    // The method's own floor of agreeing pairs, last, so that it only takes `confident` away
    // (FPFH's is higher than the default method's: [`super::Tuning::fpfh_min_consensus`]).
    if verdict == Verdict::Confident && figures.inliers < quality::min_consensus(params.method, tu)
    {
        verdict = Verdict::NotFound(quality::Reason::TooFewDistinctivePoints);
    }
    let centroid = source
        .keypoints
        .iter()
        .fold(Vector3::zeros(), |a, p| a + crate::geometry::vec3(*p))
        / n;
    let fit_rivals = tu.list_fine_fit && verdict != Verdict::Confident;
    let shown = shown_poses(
        inputs,
        &listed,
        &by_weight,
        (local, answer_free_space),
        replaced,
        fit_rivals.then_some(fits),
    );
    let mut candidates = shown
        .iter()
        .map(|s| {
            let p = &polished[s.index];
            let (angle_deg, distance) = difference(&local, &s.pose, &centroid);
            Candidate {
                transform: s.pose.between_origins(source.origin, target.origin),
                score: p.score(most),
                rivalry: s.rivalry,
                overlap: p.overlap,
                fine_overlap: s.fitted.then(|| fits.fine_share(inputs, &s.pose)),
                explained: p.explained,
                evidence: p.evidence,
                angle_deg,
                distance,
                free_space_violation: s.free_space,
            }
        })
        .collect::<Vec<Candidate>>();
    if let (Some(u), Some(b)) = (unpinned, best) {
        let (angle_deg, distance) = difference(&local, &u.pose, &centroid);
        candidates.insert(
            1.min(candidates.len()),
            Candidate {
                transform: u.pose.between_origins(source.origin, target.origin),
                score: u.score(most),
                rivalry: rivalry(&u, &b, most),
                overlap: u.overlap,
                fine_overlap: None,
                explained: u.explained,
                evidence: u.evidence,
                angle_deg,
                distance,
                free_space_violation: u.free_space,
            },
        );
        candidates.truncate(tu.candidates);
    }
    Ok(Judgement {
        figures,
        verdict,
        candidates,
        fit: fit.clone(),
    })
}

/// A listed pose as reported: its index into `polished`, its rivalry, the pose (local frames)
/// and its free-space violation share.
struct Shown {
    index: usize,
    rivalry: f64,
    pose: Rigid,
    free_space: Option<f64>,
    /// Whether `pose` is a fine fit (the answer, the answer it replaced, fitted rivals).
    fitted: bool,
}

/// The poses reported for `listed` (the answer first, then the answer it replaced, then the
/// rivals): the answer (with its free-space share) and the replaced answer as fitted finely.
/// The rivals are the coarse poses, or, with `fit_rivals` ([`super::Tuning::list_fine_fit`] on
/// a verdict that is not `confident`), their fine fits ([`fit_fine`]), taken from `by_weight`
/// (index, rivalry, listing weight; best first, down to [`super::Tuning::list_rivalry`]) until
/// [`super::Tuning::candidates`] are shown: a rival whose fine fit lands within
/// [`super::Tuning::start_angle_deg`] and one τ of a pose already shown is left out. The fits
/// go through `fit_rivals`' cache, so that a pose fitted before is not fitted again. Each
/// batch of fits runs in parallel; the result does not depend on the threads.
fn shown_poses(
    inputs: &Inputs<'_>,
    listed: &[(usize, f64)],
    by_weight: &[(usize, f64, f64)],
    (answer, answer_free_space): (Rigid, Option<f64>),
    replaced: Option<Replaced<'_>>,
    fit_rivals: Option<&FitCache>,
) -> Vec<Shown> {
    let (seen, tu, tau) = (inputs.seen, &inputs.params.tuning, inputs.tau);
    let polished = &inputs.refined.polished;
    let fixed = listed.len().min(1 + usize::from(replaced.is_some()));
    let mut shown: Vec<Shown> = listed[..fixed]
        .iter()
        .enumerate()
        .map(|(k, &(index, rivalry))| {
            let (pose, free_space) = match replaced {
                _ if k == 0 => (answer, answer_free_space),
                Some(r) => (r.fit.local, seen.violation(&r.fit.local)),
                None => (polished[index].pose, polished[index].free_space),
            };
            Shown {
                index,
                rivalry,
                pose,
                free_space,
                fitted: k == 0 || replaced.is_some(),
            }
        })
        .collect();
    let Some(fits) = fit_rivals else {
        shown.extend(listed[fixed..].iter().map(|&(index, rivalry)| Shown {
            index,
            rivalry,
            pose: polished[index].pose,
            free_space: polished[index].free_space,
            fitted: false,
        }));
        return shown;
    };
    let mut pending = by_weight
        .iter()
        .filter(|x| x.2 >= tu.list_rivalry)
        .map(|x| (x.0, x.1));
    loop {
        let need = tu.candidates.saturating_sub(shown.len());
        let batch: Vec<(usize, f64)> = pending.by_ref().take(need).collect();
        if batch.is_empty() {
            break;
        }
        let fitted: Vec<Rigid> = batch
            .par_iter()
            .map(|&(i, _)| fits.fit(inputs, i).local)
            .collect();
        for (&(index, rivalry), pose) in batch.iter().zip(fitted) {
            let apart = shown
                .iter()
                .all(|s| !consensus::same_pose(&s.pose, &pose, tu.start_angle_deg, tau));
            if apart {
                shown.push(Shown {
                    index,
                    rivalry,
                    pose,
                    free_space: seen.violation(&pose),
                    fitted: true,
                });
            }
        }
    }
    shown
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::align::Tuning;
    use crate::geometry::rigid::Rigid;

    fn scored(overlap: f64, explained: usize, free_space: Option<f64>) -> Scored {
        Scored {
            pose: Rigid::identity(),
            overlap,
            explained,
            evidence: 0.0,
            iterations: 0,
            free_space,
        }
    }

    /// The rule of [`overlap_leader`]: the distinct pose with the most consistent overlap, past
    /// the lead, with at least one explained match; free space counts against a rival.
    #[test]
    fn the_overlap_leader_is_the_distinct_pose_with_the_most_consistent_overlap() {
        let tu = Tuning::default();
        let polished = [
            scored(0.40, 30, None),      // 0: the first answer
            scored(0.45, 5, None),       // 1: more overlap, a few matches
            scored(0.50, 0, None),       // 2: still more, no match agrees
            scored(0.60, 8, Some(0.05)), // 3: most tight overlap, 0.50 consistent
            scored(0.405, 12, None),     // 4: within the lead
        ];
        assert_eq!(overlap_leader(&polished, 0, &[0, 1, 2], &tu), Some(1));
        assert_eq!(overlap_leader(&polished, 0, &[1, 0, 3], &tu), Some(3));
        assert_eq!(overlap_leader(&polished, 0, &[0, 2], &tu), None, "no match");
        assert_eq!(
            overlap_leader(&polished, 0, &[0, 4], &tu),
            None,
            "within the lead"
        );
        assert_eq!(overlap_leader(&polished, 0, &[0], &tu), None);
        assert_eq!(overlap_leader(&polished, 0, &[], &tu), None);
        let seen = [
            scored(0.40, 30, None),
            scored(0.45, 5, None),
            scored(0.48, 8, Some(0.02)), // 0.44 consistent
        ];
        assert_eq!(overlap_leader(&seen, 0, &[0, 2, 1], &tu), Some(1));
        let off = Tuning {
            answer_overlap_lead: 2.0,
            ..tu
        };
        assert_eq!(
            overlap_leader(&polished, 0, &[0, 1, 3], &off),
            None,
            "rule off"
        );
    }
}
