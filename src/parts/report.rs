//! The JSON records of `identify` (one per scan) and `inspect` (one per run), as serde
//! structs, and their one-line text summaries.
//!
//! Transforms are row-major 4 × 4, f64, carrying the scan's file coordinates into the part's
//! frame. Lengths are file units.

use serde::Serialize;

use super::CAUTION;
use super::identify::{Identification, PartFit, Ranked, Verdict};
use super::inspect::{Cluster, Inspection, Stats, pose_word};
use super::register::PoseVerdict;
use crate::geometry::Rigid;

/// Another pose of the named part.
#[derive(Debug, Clone, Serialize)]
pub struct PoseCandidate {
    /// Scan → part, row-major 4 × 4.
    pub transform: [[f64; 4]; 4],
    /// Rotation from the reported pose, degrees.
    pub angle_deg: f64,
    /// Sample points the reported pose explains and this one does not.
    pub points_for_reported: usize,
    /// Sample points this pose explains and the reported one does not.
    pub points_for_this: usize,
}

/// Evidence against another part that also fits.
#[derive(Debug, Clone, Serialize)]
pub struct Evidence {
    /// The other part.
    pub part: String,
    /// Sample points the named part explains and the other does not.
    pub points_for_named: usize,
    /// Sample points the other explains and the named part does not.
    pub points_for_other: usize,
    /// Of `points_for_named`: absence evidence (the other part's surface inside a face the
    /// scan saw, with no scan point, where the named part has none), in sample points.
    pub gap_points_for_named: usize,
    /// Of `points_for_other`: the same the other way round.
    pub gap_points_for_other: usize,
}

/// One line of `identify --json`.
#[derive(Debug, Clone, Serialize)]
pub struct IdentifyRecord {
    /// The scan's path as given.
    pub scan: String,
    /// The part's name; null when unknown.
    pub part: Option<String>,
    /// `identified`, `ambiguous` or `unknown`.
    pub verdict: Verdict,
    /// Confidence in `[0, 1]` (0 unless identified).
    pub confidence: f64,
    /// Scan file coordinates → part frame (row-major 4 × 4); null when unknown.
    pub transform: Option<[[f64; 4]; 4]>,
    /// The pose's own verdict (`confident` or `ambiguous`, e.g. for a symmetric part); null
    /// when unknown.
    pub pose_verdict: Option<PoseVerdict>,
    /// Other poses that explain the scan about as well (listed when the pose is ambiguous).
    pub pose_candidates: Vec<PoseCandidate>,
    /// Parts the scan cannot be told from (when ambiguous).
    pub ambiguous_with: Vec<String>,
    /// Every part, best first.
    pub ranking: Vec<Ranked>,
    /// Registration figures of the shortlisted parts, best first.
    pub fits: Vec<PartFit>,
    /// Evidence against the other parts that also fit.
    pub evidence: Vec<Evidence>,
    /// Estimated scan noise σ, file units.
    pub noise: f64,
    /// Why, in one sentence.
    pub reason: String,
}

impl IdentifyRecord {
    /// The record of `id` for the scan named `scan`, with part names from `names`.
    pub fn new(scan: &str, id: &Identification, names: &[String]) -> Self {
        let best = id.transform;
        IdentifyRecord {
            scan: scan.to_string(),
            part: id.part.map(|i| names[i].clone()),
            verdict: id.verdict,
            confidence: id.confidence,
            transform: id.transform.map(|t| t.to_rows()),
            pose_verdict: id.pose_verdict,
            pose_candidates: match id.pose_verdict {
                Some(PoseVerdict::Ambiguous) => id
                    .pose_rivals
                    .iter()
                    .map(|(t, a, b)| PoseCandidate {
                        transform: t.to_rows(),
                        angle_deg: best.map_or(0.0, |b| angle(&b, t)),
                        points_for_reported: *a,
                        points_for_this: *b,
                    })
                    .collect(),
                _ => Vec::new(),
            },
            ambiguous_with: id.confused_with.clone(),
            ranking: id.ranking.clone(),
            fits: id.fits.clone(),
            evidence: id
                .evidence
                .iter()
                .zip(&id.gaps)
                .map(|((p, a, b), (_, ga, gb))| Evidence {
                    part: p.clone(),
                    points_for_named: *a,
                    points_for_other: *b,
                    gap_points_for_named: *ga,
                    gap_points_for_other: *gb,
                })
                .collect(),
            noise: id.noise,
            reason: id.reason.clone(),
        }
    }

    /// One line for people: `scan: part (verdict, confidence), pose …`.
    pub fn summary(&self) -> String {
        let verdict = match self.verdict {
            Verdict::Identified => "identified",
            Verdict::Ambiguous => "ambiguous",
            Verdict::Unknown => "unknown",
        };
        match &self.part {
            None => format!("{}: unknown part; {}", self.scan, self.reason),
            Some(p) => {
                let mut s = format!("{}: {p} ({verdict}", self.scan);
                if self.verdict == Verdict::Identified {
                    s += &format!(", confidence {:.2}", self.confidence);
                } else {
                    s += &format!(" with {}", self.ambiguous_with.join(", "));
                }
                s += ")";
                if let (Some(t), Some(v)) = (self.transform, self.pose_verdict) {
                    let r = Rigid::from_rows(&t).unwrap_or_default();
                    let a = r.axis();
                    s += &format!(
                        "; pose {}: rotation {:.2}° about ({:.3}, {:.3}, {:.3}), translation ({:.3}, {:.3}, {:.3})",
                        pose_word(v),
                        r.angle_deg(),
                        a[0],
                        a[1],
                        a[2],
                        r.translation.x,
                        r.translation.y,
                        r.translation.z
                    );
                    if v == PoseVerdict::Ambiguous {
                        s += &format!(" ({} other poses fit as well)", self.pose_candidates.len());
                    }
                }
                s
            }
        }
    }
}

fn angle(a: &Rigid, b: &Rigid) -> f64 {
    crate::geometry::rotation_error_deg(&a.rotation, &b.rotation)
}

/// Registration figures in the inspection report.
#[derive(Debug, Clone, Serialize)]
pub struct Registration {
    /// Share of the scan sample within the inlier distance.
    pub share_within_inlier_distance: f64,
    /// RMS of those distances, file units.
    pub inlier_rms: f64,
    /// The inlier distance (3 × noise + a quarter of the reference spacing), file units.
    pub inlier_distance: f64,
    /// `confident` or `ambiguous` (a symmetric part: the listed poses are equivalent).
    pub pose_verdict: PoseVerdict,
    /// Other poses that explain the scan about as well.
    pub pose_candidates: Vec<PoseCandidate>,
}

/// How the tolerance was set.
#[derive(Debug, Clone, Serialize)]
pub struct ToleranceSource {
    /// ± band, file units.
    pub value: f64,
    /// `given` or `ISO 2768-1 class X`.
    pub from: String,
    /// For a class: the size looked up and its range, mm.
    pub class_size_mm: Option<f64>,
    /// For a class: the range of the table, mm.
    pub class_range_mm: Option<[f64; 2]>,
}

/// The inspection report (`--report`, `--json`).
#[derive(Debug, Clone, Serialize)]
pub struct InspectReport {
    /// The caution that goes with every result.
    pub caution: &'static str,
    /// The scan as given.
    pub scan: String,
    /// The reference file or catalogue part.
    pub reference: String,
    /// `within_tolerance` or `outside_tolerance`.
    pub outcome: &'static str,
    /// Scan file coordinates → part frame (row-major 4 × 4).
    pub transform: [[f64; 4]; 4],
    /// Registration figures.
    pub registration: Registration,
    /// The tolerance.
    pub tolerance: ToleranceSource,
    /// Deviation statistics, file units.
    pub deviation: Stats,
    /// Share of points outside the tolerance.
    pub outside_share: f64,
    /// Clusters of out-of-tolerance points, largest first.
    pub clusters: Vec<Cluster>,
    /// How deviations are measured.
    pub method: &'static str,
    /// Notes (estimated normals, ambiguous pose).
    pub notes: Vec<String>,
}

impl InspectReport {
    /// The report of `ins`.
    pub fn new(
        scan: &str,
        reference: &str,
        ins: &Inspection,
        tolerance: ToleranceSource,
        mesh: bool,
        notes: Vec<String>,
    ) -> Self {
        let f = &ins.fit;
        InspectReport {
            caution: CAUTION,
            scan: scan.to_string(),
            reference: reference.to_string(),
            outcome: if ins.passed() {
                "within_tolerance"
            } else {
                "outside_tolerance"
            },
            transform: ins.transform.to_rows(),
            registration: Registration {
                share_within_inlier_distance: f.best.residuals.share(),
                inlier_rms: f.best.residuals.rms(),
                inlier_distance: f.tau,
                pose_verdict: f.pose_verdict,
                pose_candidates: f
                    .rivals
                    .iter()
                    .filter(|_| f.pose_verdict == PoseVerdict::Ambiguous)
                    .map(|(p, a, b)| PoseCandidate {
                        transform: p
                            .local
                            .between_origins(ins.origins[0], ins.origins[1])
                            .to_rows(),
                        angle_deg: angle(&f.best.local, &p.local),
                        points_for_reported: *a,
                        points_for_this: *b,
                    })
                    .collect(),
            },
            tolerance,
            deviation: ins.stats.clone(),
            outside_share: ins.outside_share,
            clusters: ins.clusters.clone(),
            method: if mesh {
                "signed distance to the nearest triangle of the reference mesh, positive outside the material"
            } else {
                "signed distance to the local plane of the reference points (mean of the four nearest, their mean outward normal), positive outside the material"
            },
            notes,
        }
    }
}

/// Writes the scan's points (input order, own coordinates, every attribute) with a
/// `deviation` column to `path`: PLY, LAS/LAZ or CSV (`x,y,z,deviation`, f64 coordinates) by
/// extension, atomically.
pub fn write_deviations(
    path: &std::path::Path,
    scan: &crate::Cloud,
    deviations: &[f32],
) -> crate::Result<()> {
    use crate::io::{Column, write_atomic, write_las, write_ply};
    use std::io::Write;
    let ext = path
        .extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase)
        .unwrap_or_default();
    let col = [Column::new("deviation", deviations)];
    match ext.as_str() {
        "ply" => write_ply(path, scan, &col),
        "las" | "laz" => write_las(path, scan, &col),
        "csv" => write_atomic(path, |w| {
            let io = |e: std::io::Error| crate::Error::io(path, &e);
            writeln!(w, "x,y,z,deviation").map_err(io)?;
            for (i, d) in deviations.iter().enumerate() {
                let p = scan.global(i);
                writeln!(w, "{},{},{},{}", p[0], p[1], p[2], d).map_err(io)?;
            }
            Ok(())
        }),
        _ => Err(crate::Error::file(
            path,
            "has an extension equiscan does not write points to",
            "name the output .ply, .las, .laz or .csv",
        )),
    }
}
