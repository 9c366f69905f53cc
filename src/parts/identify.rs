//! Identification: which catalogued part a scan shows, or none.
//!
//! 1. Shortlist: parts whose size admits the scan (its diameter at most the part's, plus
//!    noise, and at least [`IdentifyParams::min_size_share`] of it) ranked by the χ² distance
//!    between the scan's D2 histogram and the part's ([`super::signature`]); the best
//!    [`IdentifyParams::shortlist`] go on, except those farther than
//!    [`IdentifyParams::signature_gap`] times the best part's distance.
//! 2. Registration of the scan onto each shortlisted part ([`super::register::fit`]). A part
//!    *explains* the scan when at least [`IdentifyParams::min_share`] of the scan's sample lies
//!    within the inlier distance of its surface and the scan covers at least
//!    [`IdentifyParams::min_coverage`] of it.
//! 3. Verdict: `unknown` when no part explains the scan; otherwise the best-fitting part must
//!    beat every other explaining part by [`super::evidence`]: points it explains and the
//!    other does not (a hole the other lacks, a longer step), at least
//!    [`super::register::min_evidence`] of them and twice the reverse count. Absence evidence
//!    counts too ([`super::absence`]): surface of the other part inside a face the scan saw,
//!    with no scan point, where the best part has none (a hole seen straight on). If the scan shows
//!    none of the difference, the verdict is `ambiguous` between them, not a guess.

use rayon::prelude::*;
use serde::Serialize;

use super::absence::{self, Missing};
use super::catalogue::Catalogue;
use super::register::{Fit, FitParams, PoseVerdict, fit, min_evidence};
use super::scan::PreparedScan;
use super::signature::{chi_square, histogram, pair_distances, size_fits};
use crate::geometry::Rigid;
use crate::spatial::KdIndex;

/// Identification settings.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct IdentifyParams {
    /// Parts registered after the signature shortlist.
    pub shortlist: usize,
    /// Signature gap: a part whose χ² distance exceeds this many times the best part's is not
    /// registered (the gap is clear; see DEVELOPERS.md "Parts" for the measured distances).
    pub signature_gap: f64,
    /// Smallest share of scan points within the inlier distance for a part to explain it.
    pub min_share: f64,
    /// Smallest share of the reference the scan must cover.
    pub min_coverage: f64,
    /// Smallest scan diameter as a share of the part's.
    pub min_size_share: f64,
    /// Registration settings.
    pub fit: FitParams,
}

impl Default for IdentifyParams {
    fn default() -> Self {
        IdentifyParams {
            shortlist: 4,
            signature_gap: 3.0,
            min_share: 0.9,
            min_coverage: 0.15,
            min_size_share: 0.5,
            fit: FitParams::default(),
        }
    }
}

/// The verdict on a scan.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    /// One part explains the scan and the scan shows what tells it from every other.
    Identified,
    /// More than one part explains the scan and it shows nothing that tells them apart.
    Ambiguous,
    /// No catalogued part explains the scan.
    Unknown,
}

/// One line of the ranking.
#[derive(Debug, Clone, Serialize)]
pub struct Ranked {
    /// Part name.
    pub part: String,
    /// Share of scan points within the inlier distance after registration (0 for parts not
    /// registered).
    pub score: f64,
    /// `registered`, `signature` (not shortlisted) or `size` (the scan cannot be a view of it).
    pub stage: &'static str,
    /// χ² distance of the D2 histograms.
    pub signature_distance: f64,
}

/// Figures of the registration of the scan onto one part.
#[derive(Debug, Clone, Serialize)]
pub struct PartFit {
    /// Part name.
    pub part: String,
    /// Share of scan points within the inlier distance.
    pub share: f64,
    /// RMS of the inlier distances, file units.
    pub rms: f64,
    /// Share of the reference covered by the scan.
    pub coverage: f64,
    /// Inlier distance, file units.
    pub tau: f64,
    /// Pose verdict.
    pub pose_verdict: PoseVerdict,
    /// Whether it explains the scan.
    pub explains: bool,
}

/// The outcome for one scan.
#[derive(Debug, Clone)]
pub struct Identification {
    /// Index of the named part in the catalogue (identified or best of the ambiguous).
    pub part: Option<usize>,
    /// Verdict.
    pub verdict: Verdict,
    /// Confidence in `[0, 1]`.
    pub confidence: f64,
    /// Scan file coordinates → part frame, for the named part.
    pub transform: Option<Rigid>,
    /// The pose's own verdict, for the named part.
    pub pose_verdict: Option<PoseVerdict>,
    /// Other poses of the named part and how many points tell each from the best.
    pub pose_rivals: Vec<(Rigid, usize, usize)>,
    /// Parts the scan cannot be told from (ambiguous), by name.
    pub confused_with: Vec<String>,
    /// Ranking, best first.
    pub ranking: Vec<Ranked>,
    /// Registration figures of every registered part, best first.
    pub fits: Vec<PartFit>,
    /// Evidence counts `(part, for the named part, for the other)` against the other
    /// explaining parts: sample points one explains and the other does not, plus absence
    /// evidence in sample-point equivalents (`gaps`).
    pub evidence: Vec<(String, usize, usize)>,
    /// The absence part of `evidence` (`(part, for the named part, for the other)`):
    /// reference surface of one part inside a face the scan saw, with no scan point, where
    /// the other part has no surface ([`super::absence`]).
    pub gaps: Vec<(String, usize, usize)>,
    /// Estimated scan noise σ, file units.
    pub noise: f64,
    /// Why, in one sentence.
    pub reason: String,
}

/// Share of the reference's coarse points within one coarse voxel of the moved scan sample.
fn coverage(scan: &PreparedScan, r: &super::reference::Prepared, f: &Fit) -> f64 {
    let moved: Vec<[f32; 3]> = scan
        .fine
        .iter()
        .map(|p| {
            let m = f.best.local.apply(&crate::geometry::vec3(*p));
            [m.x as f32, m.y as f32, m.z as f32]
        })
        .collect();
    let Ok(index) = KdIndex::new(&moved) else {
        return 0.0;
    };
    let reach = (r.coarse_voxel * r.coarse_voxel) as f32;
    let near = r
        .coarse
        .iter()
        .filter(|p| index.nearest_one(**p).1 <= reach)
        .count();
    near as f64 / r.coarse.len().max(1) as f64
}

/// Identifies `scan` against `cat` (module docs).
pub fn identify(scan: &PreparedScan, cat: &Catalogue, params: &IdentifyParams) -> Identification {
    let pairs = pair_distances(&scan.fine);
    let mut ranking: Vec<Ranked> = cat
        .header
        .parts
        .iter()
        .map(|e| {
            let d = e.signature.diameter;
            let chi = chi_square(&histogram(&pairs, d), &e.signature.d2);
            let fits = size_fits(
                scan.diameter,
                d,
                6.0 * scan.noise + 2.0 * e.spacing,
                params.min_size_share,
            );
            Ranked {
                part: e.name.clone(),
                score: 0.0,
                stage: if fits { "signature" } else { "size" },
                signature_distance: chi,
            }
        })
        .collect();
    let mut order: Vec<usize> = (0..ranking.len()).collect();
    order.sort_by(|&a, &b| {
        let key = |i: usize| {
            (
                ranking[i].stage != "signature",
                ranking[i].signature_distance,
            )
        };
        key(a)
            .partial_cmp(&key(b))
            .unwrap_or(std::cmp::Ordering::Equal)
            .then(a.cmp(&b))
    });
    let best_chi = order
        .first()
        .filter(|&&i| ranking[i].stage == "signature")
        .map_or(0.0, |&i| ranking[i].signature_distance);
    let shortlisted: Vec<usize> = order
        .iter()
        .copied()
        .filter(|&i| ranking[i].stage == "signature")
        .take(params.shortlist)
        .filter(|&i| ranking[i].signature_distance <= params.signature_gap * best_chi + 1e-3)
        .collect();
    let mut fitted: Vec<(usize, Fit, PartFit)> = shortlisted
        .par_iter()
        .map(|&i| {
            let r = &cat.parts[i];
            let f = fit(scan, r, &params.fit);
            let share = f.best.residuals.share();
            let cov = coverage(scan, r, &f);
            let pf = PartFit {
                part: cat.header.parts[i].name.clone(),
                share,
                rms: f.best.residuals.rms(),
                coverage: cov,
                tau: f.tau,
                pose_verdict: f.pose_verdict,
                explains: share >= params.min_share && cov >= params.min_coverage,
            };
            (i, f, pf)
        })
        .collect();
    fitted.sort_by(|a, b| b.2.share.total_cmp(&a.2.share).then(a.0.cmp(&b.0)));
    for (i, _, pf) in &fitted {
        ranking[*i].score = pf.share;
        ranking[*i].stage = "registered";
    }
    let mut ranked_order: Vec<usize> = fitted.iter().map(|f| f.0).collect();
    let rest: Vec<usize> = order
        .iter()
        .copied()
        .filter(|i| !ranked_order.contains(i))
        .collect();
    ranked_order.extend(rest);
    let ranking: Vec<Ranked> = ranked_order.iter().map(|&i| ranking[i].clone()).collect();
    let fits: Vec<PartFit> = fitted.iter().map(|f| f.2.clone()).collect();

    let explaining: Vec<&(usize, Fit, PartFit)> = fitted.iter().filter(|f| f.2.explains).collect();
    let need = min_evidence(scan.fine.len());
    let base = |verdict, reason: String| Identification {
        part: None,
        verdict,
        confidence: 0.0,
        transform: None,
        pose_verdict: None,
        pose_rivals: Vec::new(),
        confused_with: Vec::new(),
        ranking: ranking.clone(),
        fits: fits.clone(),
        evidence: Vec::new(),
        gaps: Vec::new(),
        noise: scan.noise,
        reason,
    };
    let Some(best) = explaining.first() else {
        let why = match fitted.first() {
            None => "no catalogued part is the scan's size".to_string(),
            Some((_, _, pf)) => format!(
                "no catalogued part explains the scan: the best, {}, holds {:.1} % of its points within {:.3} of its surface and {:.0} % of its surface is covered (needed {:.0} % and {:.0} %)",
                pf.part,
                100.0 * pf.share,
                pf.tau,
                100.0 * pf.coverage,
                100.0 * params.min_share,
                100.0 * params.min_coverage
            ),
        };
        return base(Verdict::Unknown, why);
    };
    let mut out = base(Verdict::Identified, String::new());
    let (bi, bf, bpf) = (best.0, &best.1, &best.2);
    let mut weakest = f64::INFINITY;
    let missing: Vec<Missing> = if explaining.len() > 1 {
        explaining
            .iter()
            .map(|(i, f, _)| absence::missing(scan, &cat.parts[*i], &f.best.local, f.tau))
            .collect()
    } else {
        Vec::new()
    };
    let fine_area = if explaining.len() > 1 {
        absence::fine_area(scan, &cat.parts[bi], bpf.coverage)
    } else {
        0.0
    };
    for (k, other) in explaining.iter().enumerate().skip(1) {
        let tau = bf.tau.max(other.1.tau);
        let (seen_best, seen_other) =
            super::evidence(&bf.best.residuals, &other.1.best.residuals, tau);
        let (pb, po) = (&bf.best.local, &other.1.best.local);
        let gap_best = absence::against(&missing[k], po, &cat.parts[bi], pb, fine_area);
        let gap_other = absence::against(&missing[0], pb, &cat.parts[other.0], po, fine_area);
        let (for_best, for_other) = (seen_best + gap_best, seen_other + gap_other);
        out.evidence
            .push((other.2.part.clone(), for_best, for_other));
        out.gaps.push((other.2.part.clone(), gap_best, gap_other));
        if for_best < need || for_best < 2 * for_other {
            out.confused_with.push(other.2.part.clone());
        }
        weakest = weakest.min(for_best as f64 - for_other as f64);
    }
    let origin_s = scan.origin;
    let origin_r = cat.parts[bi].reference.origin;
    out.part = Some(bi);
    out.transform = Some(bf.best.local.between_origins(origin_s, origin_r));
    out.pose_verdict = Some(bf.pose_verdict);
    out.pose_rivals = bf
        .rivals
        .iter()
        .map(|(p, a, b)| (p.local.between_origins(origin_s, origin_r), *a, *b))
        .collect();
    let fit_conf = ((bpf.share - 0.8) / 0.15).clamp(0.0, 1.0);
    if out.confused_with.is_empty() {
        let sep = if weakest.is_finite() {
            1.0 - (-(weakest.max(0.0)) / need as f64).exp()
        } else {
            1.0
        };
        out.confidence = fit_conf * sep;
        out.reason = if weakest.is_finite() {
            format!(
                "{} explains {:.1} % of the scan's points, and the scan shows what tells it from the other parts that fit",
                bpf.part,
                100.0 * bpf.share
            )
        } else {
            format!(
                "{} explains {:.1} % of the scan's points; no other shortlisted part explains it",
                bpf.part,
                100.0 * bpf.share
            )
        };
    } else {
        out.verdict = Verdict::Ambiguous;
        out.confidence = 0.0;
        out.reason = format!(
            "{} and {} both explain the scan, which shows none of what tells them apart (fewer than {need} points favour one); scan the part from another side",
            bpf.part,
            out.confused_with.join(", ")
        );
    }
    out
}
