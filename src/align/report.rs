//! What a registration run reports: the JSON structs (serde), the summary text and the
//! picture's content, built from the library's results ([`Alignment`], [`MultiAlignment`]).
//!
//! Conventions: transforms are row-major 4×4 in the files' own coordinates (f64), mapping
//! SOURCE into TARGET's frame; angles in degrees; lengths in file units. The structs only add
//! fields over time (new results of the pipeline become new fields), so a reader written for
//! an older report keeps working.

use std::path::Path;

use serde::Serialize;

use super::multi::{LoopResidual, MultiAlignment};
use super::pipeline::{Alignment, Method};
use super::quality::{Reason, Verdict};
use super::truth::TruthCheck;
use crate::cloud::Cloud;
use crate::error::Result;
use crate::geometry::Rigid;
use crate::report::{FigureText, LAYER_PALETTE, Layer, render_alignment_views};

/// The caution printed with every result.
pub const CAUTION: &str = "Results support, and do not replace, the check of a qualified surveyor and the rules that apply locally.";

/// One input file in a report.
#[derive(Debug, Clone, Serialize)]
pub struct ScanEntry {
    /// The path as given.
    pub file: String,
    /// Points read.
    pub points: usize,
}

/// The report of one pair.
#[derive(Debug, Clone, Serialize)]
pub struct PairReport {
    /// The scan moved.
    pub source: ScanEntry,
    /// The scan whose frame the transform maps into.
    pub target: ScanEntry,
    /// `equivariant` or `fpfh`.
    pub method: String,
    /// `confident` or `not_found`.
    pub verdict: String,
    /// Why nothing confident was found (`too_few_distinctive_points`, `too_little_overlap`,
    /// `ambiguous_symmetric_shape`).
    pub reason: Option<Reason>,
    /// The reason in words.
    pub reason_text: Option<String>,
    /// Row-major 4×4 transform mapping SOURCE file coordinates into TARGET file coordinates.
    pub transform: [[f64; 4]; 4],
    /// Rotation angle, degrees.
    pub rotation_angle_deg: f64,
    /// Unit rotation axis.
    pub rotation_axis: [f64; 3],
    /// Translation part of the transform, file units.
    pub translation: [f64; 3],
    /// Point-to-plane RMSE of the pairs within the inlier threshold, file units.
    pub inlier_rmse: f64,
    /// Fraction of SOURCE keypoints within the inlier threshold of TARGET.
    pub overlap: f64,
    /// Correspondences found in feature space.
    pub correspondences: usize,
    /// Correspondences the transform explains.
    pub inliers: usize,
    /// Lead over the best clearly different pose, 0 to 1.
    pub margin: f64,
    /// Confidence figure, 0 to 1.
    pub confidence: f64,
    /// Voxel size used, file units.
    pub voxel: f64,
    /// Descriptor support radius used, file units.
    pub support_radius: f64,
    /// Inlier threshold used, file units.
    pub inlier_threshold: f64,
    /// Keypoints in SOURCE and TARGET.
    pub keypoints: [usize; 2],
    /// Seconds per stage (reading the files included).
    pub timings: Vec<Timing>,
    /// Errors against the --truth transform, when given.
    pub truth: Option<TruthCheck>,
    /// The caution that goes with every result.
    pub caution: String,
}

/// Seconds spent in one stage.
#[derive(Debug, Clone, Serialize)]
pub struct Timing {
    /// Stage name.
    pub stage: String,
    /// Seconds.
    pub seconds: f64,
}

/// A scan's place in the frame of the first.
#[derive(Debug, Clone, Serialize)]
pub struct PoseEntry {
    /// The scan.
    pub file: String,
    /// Row-major 4×4 into the first scan's frame; `null` when no chain of confident pairs
    /// reaches the scan.
    pub transform: Option<[[f64; 4]; 4]>,
}

/// The report of several scans.
#[derive(Debug, Clone, Serialize)]
pub struct MultiReport {
    /// `equivariant` or `fpfh`.
    pub method: String,
    /// `confident` when every scan is placed, else `not_found`.
    pub verdict: String,
    /// Every pair (the later scan moved onto the earlier).
    pub pairs: Vec<PairReport>,
    /// Tree edges, `[fixed, moving]` scan indices (0-based, in the order given).
    pub tree: Vec<[usize; 2]>,
    /// Every scan into the frame of the first.
    pub poses: Vec<PoseEntry>,
    /// Loops closed by confident pairs outside the tree: rotation (degrees) and displacement
    /// (file units) of the composition around the loop.
    pub loops: Vec<LoopResidual>,
    /// The caution that goes with every result.
    pub caution: String,
}

/// One scan as the report names it: its path as given and the cloud read from it.
#[derive(Debug, Clone, Copy)]
pub struct Input<'a> {
    /// The path as the user gave it.
    pub path: &'a Path,
    /// The cloud read.
    pub cloud: &'a Cloud,
}

impl Input<'_> {
    fn entry(&self) -> ScanEntry {
        ScanEntry {
            file: self.path.display().to_string(),
            points: self.cloud.len(),
        }
    }
}

impl PairReport {
    /// The report of `a`, SOURCE moved onto TARGET with `method`.
    pub fn new(
        source: Input<'_>,
        target: Input<'_>,
        method: Method,
        a: &Alignment,
        truth: Option<TruthCheck>,
    ) -> PairReport {
        let (verdict, reason) = match a.verdict {
            Verdict::Confident => ("confident", None),
            Verdict::NotFound(r) => ("not_found", Some(r)),
        };
        let t = &a.transform;
        PairReport {
            source: source.entry(),
            target: target.entry(),
            method: method.name().to_string(),
            verdict: verdict.to_string(),
            reason,
            reason_text: reason.map(|r| r.explain().to_string()),
            transform: t.to_rows(),
            rotation_angle_deg: t.angle_deg(),
            rotation_axis: t.axis(),
            translation: [t.translation.x, t.translation.y, t.translation.z],
            inlier_rmse: a.figures.rmse,
            overlap: a.figures.overlap,
            correspondences: a.figures.correspondences,
            inliers: a.figures.inliers,
            margin: a.figures.margin,
            confidence: a.figures.confidence,
            voxel: a.voxel,
            support_radius: a.radius,
            inlier_threshold: a.inlier_threshold,
            keypoints: a.keypoints,
            timings: a
                .timings
                .iter()
                .map(|s| Timing {
                    stage: s.stage.clone(),
                    seconds: s.seconds,
                })
                .collect(),
            truth,
            caution: CAUTION.to_string(),
        }
    }

    /// True for a confident result.
    pub fn is_confident(&self) -> bool {
        self.verdict == "confident"
    }

    /// The figures in words, one line each (summary and picture).
    pub fn figure_lines(&self) -> Vec<String> {
        let r = self;
        let mut lines = vec![
            format!(
                "rotation {:.4} deg about ({:.4}, {:.4}, {:.4})",
                r.rotation_angle_deg, r.rotation_axis[0], r.rotation_axis[1], r.rotation_axis[2]
            ),
            format!(
                "translation ({:.4}, {:.4}, {:.4})",
                r.translation[0], r.translation[1], r.translation[2]
            ),
            format!(
                "inlier RMSE {:.4}, overlap {:.0} %, inliers {} of {} correspondences",
                r.inlier_rmse,
                100.0 * r.overlap,
                r.inliers,
                r.correspondences
            ),
            format!(
                "confidence {:.2} (margin {:.2}), voxel {:.4}, support radius {:.4}",
                r.confidence, r.margin, r.voxel, r.support_radius
            ),
        ];
        if let Some(t) = &r.truth {
            lines.push(format!(
                "against the truth: rotation error {:.4} deg, translation error {:.4}",
                t.rotation_error_deg, t.translation_error
            ));
        }
        lines
    }

    /// The summary printed on the terminal.
    pub fn summary(&self) -> String {
        let r = self;
        let mut s = format!("{} onto {} ({})\n", r.source.file, r.target.file, r.method);
        match &r.reason_text {
            None => s.push_str("result: confident alignment\n"),
            Some(why) => s.push_str(&format!("result: no confident alignment: {why}\n")),
        }
        s.push_str("transform (source into target, row-major):\n");
        for row in &r.transform {
            s.push_str(&format!(
                "  {:>16.9} {:>16.9} {:>16.9} {:>16.6}\n",
                row[0], row[1], row[2], row[3]
            ));
        }
        for l in r.figure_lines() {
            s.push_str(&l);
            s.push('\n');
        }
        let total: f64 = r.timings.iter().map(|t| t.seconds).sum();
        s.push_str(&format!("time {total:.2} s: "));
        s.push_str(
            &r.timings
                .iter()
                .map(|t| format!("{} {:.2}", t.stage, t.seconds))
                .collect::<Vec<_>>()
                .join(", "),
        );
        s.push('\n');
        s.push_str(&r.caution);
        s
    }
}

impl MultiReport {
    /// The report of several scans, `inputs` in the order given.
    pub fn new(inputs: &[Input<'_>], method: Method, m: &MultiAlignment) -> MultiReport {
        let pairs = m
            .pairs
            .iter()
            .map(|p| {
                PairReport::new(
                    inputs[p.moving],
                    inputs[p.fixed],
                    method,
                    &p.alignment,
                    None,
                )
            })
            .collect();
        let placed = m.poses.iter().all(|p| p.is_some());
        MultiReport {
            method: method.name().to_string(),
            verdict: if placed { "confident" } else { "not_found" }.to_string(),
            pairs,
            tree: m.tree.iter().map(|&(a, b)| [a, b]).collect(),
            poses: inputs
                .iter()
                .zip(&m.poses)
                .map(|(f, p)| PoseEntry {
                    file: f.path.display().to_string(),
                    transform: p.map(|r| r.to_rows()),
                })
                .collect(),
            loops: m.loops.clone(),
            caution: CAUTION.to_string(),
        }
    }

    /// True when every scan is placed.
    pub fn is_confident(&self) -> bool {
        self.verdict == "confident"
    }

    /// The summary printed on the terminal.
    pub fn summary(&self) -> String {
        let r = self;
        let mut s = String::new();
        for p in &r.pairs {
            s.push_str(&format!(
                "{} onto {}: {}, confidence {:.2}, rotation {:.3} deg, RMSE {:.4}, overlap {:.0} %\n",
                p.source.file,
                p.target.file,
                p.verdict.replace('_', " "),
                p.confidence,
                p.rotation_angle_deg,
                p.inlier_rmse,
                100.0 * p.overlap
            ));
        }
        for (i, p) in r.poses.iter().enumerate() {
            match &p.transform {
                Some(_) if i == 0 => s.push_str(&format!("{}: reference frame\n", p.file)),
                Some(_) => s.push_str(&format!("{}: placed\n", p.file)),
                None => s.push_str(&format!(
                    "{}: not placed (no confident pair reaches it)\n",
                    p.file
                )),
            }
        }
        for l in &r.loops {
            s.push_str(&format!(
                "loop {:?}: {:.4} deg, {:.4}\n",
                l.cycle, l.rotation_deg, l.translation
            ));
        }
        s.push_str(&r.caution);
        s
    }
}

fn file_name(p: &Path) -> String {
    p.file_name()
        .map(|n| n.to_string_lossy().to_string())
        .unwrap_or_default()
}

/// Draws SOURCE and TARGET before and after `tf` (three views each) with the report's figures
/// and writes the PNG to `path`.
pub fn write_pair_picture(
    path: &Path,
    source: Input<'_>,
    target: Input<'_>,
    r: &PairReport,
    tf: &Rigid,
) -> Result<()> {
    // Scans in different frames can lie kilometres apart; the "before" row shows the source
    // shifted so that the centroids coincide (not rotated), the "after" row the found pose.
    let shift = target.cloud.centroid() - source.cloud.centroid();
    let mut moving = Layer::from_cloud(
        format!("source {}", file_name(source.path)),
        LAYER_PALETTE[0],
        source.cloud,
    );
    moving.origin = std::array::from_fn(|k| source.cloud.origin[k] + shift[k]);
    let unshift = Rigid::translation(-shift);
    let layers = [
        moving.moved_after(tf.compose(&unshift)),
        Layer::from_cloud(
            format!("target {}", file_name(target.path)),
            LAYER_PALETTE[1],
            target.cloud,
        ),
    ];
    let verdict = match &r.reason_text {
        None => "confident alignment".to_string(),
        Some(why) => format!("no confident alignment: {why}"),
    };
    let mut lines = r.figure_lines();
    lines.push("before: source shifted so that the centroids coincide, not rotated".into());
    let text = FigureText {
        title: format!(
            "{} onto {} ({}): {verdict}",
            file_name(source.path),
            file_name(target.path),
            r.method
        ),
        lines,
        footer: r.caution.clone(),
        unit: String::new(),
    };
    render_alignment_views(&layers, &text, path)
}
