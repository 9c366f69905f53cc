//! What a registration run reports: the JSON structs (serde), the summary text and the
//! picture's content, built from the library's results ([`Alignment`], [`MultiAlignment`]).
//!
//! Conventions: transforms are row-major 4×4 in the files' own coordinates (f64), mapping
//! SOURCE into TARGET's frame; angles in degrees; lengths in file units. The structs only add
//! fields over time (new results of the pipeline become new fields), so a reader written for
//! an older report keeps working.

use std::path::Path;

use serde::Serialize;

use super::export::MoveRecord;
use super::multi::{LoopResidual, MultiAlignment};
use super::pipeline::{Alignment, Method};
use super::quality::{Reason, Verdict};
use super::truth::TruthCheck;
use crate::cloud::Cloud;
use crate::error::{Error, Result};
use crate::geometry::Rigid;
use crate::geometry::{to_f32, vec3};
use crate::io::FileInfo;
use crate::report::{
    ColourMap, FigureText, Layer, SOURCE_COLOUR, ScalarField, TARGET_COLOUR, ViewRow,
    draw_alignment_rows, render_alignment_views,
};
use crate::spatial::KdIndex;
use nalgebra::Vector3;

/// Caution for a registration of scenes (surveying).
pub const SCENE_CAUTION: &str = "Results support, and do not replace, the check of a qualified surveyor and the rules that apply locally; check the registration against control before it is used for design or setting out.";

/// Caution for a registration of parts (inspection).
pub const PART_CAUTION: &str = "Results support, and do not replace, inspection with calibrated equipment under the shop's procedure.";

/// The unit of the files' coordinates.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Units {
    /// Metres.
    Metre,
    /// Millimetres.
    Millimetre,
    /// International feet (0.3048 m).
    Foot,
    /// US survey feet (1200/3937 m).
    UsSurveyFoot,
    /// Not known: figures are printed in "units".
    Unknown,
}

impl Units {
    /// The short label printed after a figure.
    pub fn label(self) -> &'static str {
        match self {
            Units::Metre => "m",
            Units::Millimetre => "mm",
            Units::Foot => "ft",
            Units::UsSurveyFoot => "US survey ft",
            Units::Unknown => "units",
        }
    }

    /// Metres per unit; `None` when not known.
    pub fn metres(self) -> Option<f64> {
        match self {
            Units::Metre => Some(1.0),
            Units::Millimetre => Some(0.001),
            Units::Foot => Some(0.3048),
            Units::UsSurveyFoot => Some(1200.0 / 3937.0),
            Units::Unknown => None,
        }
    }

    /// The linear unit named in a CRS description (WKT or GeoTIFF keys as `io` prints them);
    /// `Unknown` when none is recognised. US survey foot is tested before the foot; GeoTIFF
    /// keys by their unit code.
    pub fn from_crs(crs: &str) -> Units {
        // One reading of a CRS's unit for every output: `io::crs::units_label`.
        match crate::io::crs::units_label(crs).as_deref() {
            Some("m") => Units::Metre,
            Some("mm") => Units::Millimetre,
            Some("ft") => Units::Foot,
            Some("US survey ft") => Units::UsSurveyFoot,
            _ => Units::Unknown,
        }
    }
}

/// What was registered, which decides the caution's wording.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Job {
    /// Surveyed scenes (sites, buildings, terrain).
    Scene,
    /// Parts (inspection).
    Part,
}

impl Job {
    /// Scene or part, from the units and the size of TARGET (bounding-box diagonal, file
    /// units) and whether an input is LAS/LAZ: in metres or feet, 3 m or more is a scene;
    /// in millimetres, a part; in unknown units, a scene when an input is LAS/LAZ (the survey
    /// formats), else a part.
    pub fn decide(units: Units, diagonal: f64, any_las: bool) -> Job {
        match units.metres() {
            Some(m) if units != Units::Millimetre => {
                if diagonal * m >= 3.0 {
                    Job::Scene
                } else {
                    Job::Part
                }
            }
            Some(_) => Job::Part,
            None if any_las => Job::Scene,
            None => Job::Part,
        }
    }

    /// The caution that goes with a result of this job.
    pub fn caution(self) -> &'static str {
        match self {
            Job::Scene => SCENE_CAUTION,
            Job::Part => PART_CAUTION,
        }
    }
}

/// One input file in a report: enough to find it again and to tell whether it changed.
#[derive(Debug, Clone, Serialize)]
pub struct ScanEntry {
    /// The path as given.
    pub file: String,
    /// Points read.
    pub points: usize,
    /// File size, bytes.
    pub bytes: u64,
    /// FNV-1a 64-bit hash of the file's bytes, `fnv1a64:` and 16 hex digits.
    pub checksum: String,
}

/// The program that wrote the report.
#[derive(Debug, Clone, Serialize)]
pub struct Tool {
    /// Program name.
    pub name: String,
    /// Program version.
    pub version: String,
}

/// Every setting of the run, with where the chosen values came from.
#[derive(Debug, Clone, Serialize)]
pub struct Settings {
    /// `equivariant` or `fpfh`.
    pub method: String,
    /// Seed of every random choice.
    pub seed: u64,
    /// Voxel size of the keypoints, file units.
    pub voxel: f64,
    /// Why this voxel size.
    pub voxel_from: String,
    /// Descriptor support radius, file units.
    pub support_radius: f64,
    /// Why this radius.
    pub support_radius_from: String,
    /// Distance under which a SOURCE keypoint counts as lying on TARGET, file units.
    pub agreement_distance: f64,
    /// Unit of the coordinates.
    pub units: Units,
    /// Why these units (`--units`, the CRS of a file, or not known).
    pub units_from: String,
    /// `scene` or `part`: decides the caution's wording.
    pub job: Job,
    /// Every tuning value of the pipeline (lengths in voxel sizes or inlier thresholds).
    pub tuning: super::tuning::Tuning,
}

/// The sensor positions the free-space test used ([`super::visibility`]), each in its own
/// file's coordinates, with where they came from.
#[derive(Debug, Clone, Serialize)]
pub struct SensorPositions {
    /// SOURCE's sensor position; `null` when not known.
    pub source: Option<[f64; 3]>,
    /// Where it came from (`given (--source-viewpoint)`, the scan's pose in an E57 file, or
    /// not known).
    pub source_from: String,
    /// TARGET's sensor position; `null` when not known.
    pub target: Option<[f64; 3]>,
    /// Where it came from.
    pub target_from: String,
}

/// How well the found pose fits, in our own words (file units where a length).
#[derive(Debug, Clone, Serialize)]
pub struct FitFigures {
    /// Root mean square distance of full-resolution SOURCE points (a sample) to TARGET's local
    /// tangent planes, over the points that have TARGET surface within three point spacings.
    pub surface_gap_rms: f64,
    /// Share of SOURCE keypoints, 0 to 1, that the pose lays on TARGET's surface (closer than
    /// the agreement distance).
    pub coverage: f64,
    /// Keypoint pairs matched in descriptor space.
    pub matched_pairs: usize,
    /// Matched pairs that the pose carries onto each other.
    pub agreeing_pairs: usize,
    /// How far the pose leads the best clearly different pose, 0 to 1.
    pub lead: f64,
    /// Confidence figure, 0 to 1.
    pub confidence: f64,
    /// Turn, degrees, between the pose and the fit made the other way round (TARGET's points
    /// fitted onto SOURCE's); measured for a pose that passed every other test of
    /// `confident`, absent otherwise.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub reverse_fit_turn_deg: Option<f64>,
}

/// The report of one pair.
///
/// New results of the pipeline become new fields (with `#[serde(skip_serializing_if)]` when
/// optional); [`PairReport::new`] is the one place that fills them.
#[derive(Debug, Clone, Serialize)]
pub struct PairReport {
    /// The program and its version.
    pub tool: Tool,
    /// When the report was made, RFC 3339 UTC (`SOURCE_DATE_EPOCH` when set).
    pub created: String,
    /// The scan moved.
    pub source: ScanEntry,
    /// The scan whose frame the transform maps into.
    pub target: ScanEntry,
    /// `confident`, `ambiguous` or `not_found`.
    pub verdict: String,
    /// Why nothing confident was found (`too_few_distinctive_points`, `too_little_overlap`,
    /// `ambiguous_symmetric_shape`, `weakly_constrained`, `matches_favour_another_pose`,
    /// `fit_not_pinned`, `fits_disagree`, `contradicts_free_space`).
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
    /// Distinct refined poses, best first (the first is the answer).
    pub candidates: Vec<super::candidates::Candidate>,
    /// Constraint analysis of the final fit (condition figure, weakly constrained directions).
    pub constraint: super::constraint::Constraint,
    /// The fit figures.
    pub fit: FitFigures,
    /// Every setting of the run.
    pub settings: Settings,
    /// The sensor positions of the free-space test (`null` positions: not tested).
    pub sensors: SensorPositions,
    /// Keypoints in SOURCE and TARGET.
    pub keypoints: [usize; 2],
    /// Seconds per stage (reading the files included); left out when `SOURCE_DATE_EPOCH` is
    /// set, so that the same run gives the same bytes.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub timings: Vec<Timing>,
    /// Errors against the --truth transform, when given.
    pub truth: Option<TruthCheck>,
    /// The coordinate reference system of the frame the transform maps into (TARGET's, as
    /// `io::FileInfo::crs` reads it); left out when TARGET has none.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub target_crs: Option<String>,
    /// Warnings about the inputs (e.g. different coordinate reference systems).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub warnings: Vec<String>,
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
    /// The program and its version.
    pub tool: Tool,
    /// When the report was made, RFC 3339 UTC.
    pub created: String,
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
    /// The coordinate reference system of the first scan, the frame every pose maps into;
    /// left out when it has none.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub crs: Option<String>,
    /// Warnings about the inputs (e.g. different coordinate reference systems).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub warnings: Vec<String>,
    /// The caution that goes with every result.
    pub caution: String,
}

/// One scan as the report names it: its path as given, the cloud read from it and the
/// file's size and checksum ([`fingerprint`]).
#[derive(Debug, Clone, Copy)]
pub struct Input<'a> {
    /// The path as the user gave it.
    pub path: &'a Path,
    /// The cloud read.
    pub cloud: &'a Cloud,
    /// File size, bytes.
    pub bytes: u64,
    /// FNV-1a 64-bit hash of the file's bytes.
    pub checksum: u64,
}

impl Input<'_> {
    fn entry(&self) -> ScanEntry {
        ScanEntry {
            file: self.path.display().to_string(),
            points: self.cloud.len(),
            bytes: self.bytes,
            checksum: format!("fnv1a64:{:016x}", self.checksum),
        }
    }
}

/// Size and FNV-1a 64-bit hash of a file's bytes (read in 1 MiB blocks).
pub fn fingerprint(path: &Path) -> Result<(u64, u64)> {
    use std::io::Read;
    let mut f = std::fs::File::open(path).map_err(|e| crate::Error::io(path, &e))?;
    let mut buf = vec![0u8; 1 << 20];
    let (mut n, mut h) = (0u64, 0xcbf2_9ce4_8422_2325u64);
    loop {
        let k = f.read(&mut buf).map_err(|e| crate::Error::io(path, &e))?;
        if k == 0 {
            return Ok((n, h));
        }
        n += k as u64;
        for &b in &buf[..k] {
            h = (h ^ b as u64).wrapping_mul(0x0000_0100_0000_01b3);
        }
    }
}

/// What the run knew besides the alignment: settings given, units, job, time.
#[derive(Debug, Clone)]
pub struct RunContext {
    /// Program version.
    pub version: String,
    /// Seconds since 1970-01-01 UTC of the report.
    pub created: u64,
    /// True when the timestamp came from `SOURCE_DATE_EPOCH` (timings are then left out).
    pub reproducible: bool,
    /// Seed of every random choice.
    pub seed: u64,
    /// True when the voxel size was given.
    pub voxel_given: bool,
    /// True when the support radius was given.
    pub radius_given: bool,
    /// Unit of the coordinates.
    pub units: Units,
    /// Where the units came from.
    pub units_from: String,
    /// Scene or part.
    pub job: Job,
    /// CRS of the frame the transforms map into: TARGET's for two scans, the first scan's for
    /// more (`io::FileInfo::crs`).
    pub crs: Option<String>,
    /// The warning of `io::crs::mixed_crs_warning` when the inputs' CRSs differ.
    pub crs_warning: Option<String>,
    /// Where the sensor positions of SOURCE and TARGET came from, when known (see
    /// [`SensorPositions`]); set by the caller that supplies them.
    pub viewpoints_from: [Option<String>; 2],
}

impl RunContext {
    /// The context of a run over `scans` (path, cloud, file information; TARGET second):
    /// units from `units` when given, else from the first CRS that names a linear unit; the
    /// job from [`Job::decide`] on TARGET's bounding-box diagonal; the clock from
    /// [`RunContext::clock`]; this crate's version.
    pub fn new(
        seed: u64,
        voxel_given: bool,
        radius_given: bool,
        units: Option<Units>,
        scans: &[(&Path, &Cloud, &FileInfo)],
    ) -> RunContext {
        let (units, units_from) = match units {
            Some(u) => (u, "given (--units)".to_string()),
            None => scans
                .iter()
                .find_map(|(path, _, info)| {
                    let u = Units::from_crs(info.crs.as_deref()?);
                    (u != Units::Unknown).then(|| (u, format!("the CRS of {}", path.display())))
                })
                .unwrap_or((Units::Unknown, "not known (no --units, no CRS)".to_string())),
        };
        let diagonal = scans
            .get(1)
            .or(scans.first())
            .and_then(|(_, c, _)| c.global_bounds())
            .map(|(lo, hi)| (0..3).map(|k| (hi[k] - lo[k]).powi(2)).sum::<f64>().sqrt())
            .unwrap_or(0.0);
        let any_las = scans.iter().any(|(_, _, i)| {
            let f = i.format.to_ascii_uppercase();
            f.starts_with("LA") || f == "E57"
        });
        let frame = if scans.len() == 2 {
            scans.get(1)
        } else {
            scans.first()
        };
        let named: Vec<(String, Option<&str>)> = scans
            .iter()
            .map(|(p, _, i)| (p.display().to_string(), i.crs.as_deref()))
            .collect();
        let named: Vec<(&str, Option<&str>)> =
            named.iter().map(|(p, c)| (p.as_str(), *c)).collect();
        let (created, reproducible) = RunContext::clock();
        RunContext {
            version: env!("CARGO_PKG_VERSION").to_string(),
            created,
            reproducible,
            seed,
            voxel_given,
            radius_given,
            units,
            units_from,
            job: Job::decide(units, diagonal, any_las),
            crs: frame.and_then(|(_, _, i)| i.crs.clone()),
            crs_warning: crate::io::crs::mixed_crs_warning(&named),
            viewpoints_from: [None, None],
        }
    }

    /// The report time: `SOURCE_DATE_EPOCH` when set to a whole number, else now.
    pub fn clock() -> (u64, bool) {
        if let Some(t) = std::env::var("SOURCE_DATE_EPOCH")
            .ok()
            .and_then(|v| v.trim().parse::<u64>().ok())
        {
            return (t, true);
        }
        let now = std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map(|d| d.as_secs())
            .unwrap_or(0);
        (now, false)
    }

    fn tool(&self) -> Tool {
        Tool {
            name: "equiscan".into(),
            version: self.version.clone(),
        }
    }
}

/// Seconds since 1970-01-01 UTC as RFC 3339 (`2026-12-02T05:00:00Z`), by the proleptic
/// Gregorian calendar (days-to-date conversion after H. Hinnant's `civil_from_days`).
pub fn rfc3339(secs: u64) -> String {
    let days = (secs / 86_400) as i64;
    let rem = secs % 86_400;
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    format!(
        "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z",
        rem / 3600,
        rem / 60 % 60,
        rem % 60
    )
}

impl PairReport {
    /// The report of `a`, SOURCE moved onto TARGET with `method`.
    pub fn new(
        source: Input<'_>,
        target: Input<'_>,
        method: Method,
        a: &Alignment,
        truth: Option<TruthCheck>,
        ctx: &RunContext,
    ) -> PairReport {
        let (verdict, reason) = match a.verdict {
            Verdict::Confident => ("confident", None),
            Verdict::Ambiguous(r) => ("ambiguous", Some(r)),
            Verdict::NotFound(r) => ("not_found", Some(r)),
        };
        let t = &a.transform;
        let radius_from = if ctx.radius_given {
            "given (--radius)".to_string()
        } else {
            format!(
                "{} voxel sizes, the {} default",
                method.radius_in_voxels(),
                method.name()
            )
        };
        PairReport {
            tool: ctx.tool(),
            created: rfc3339(ctx.created),
            source: source.entry(),
            target: target.entry(),
            verdict: verdict.to_string(),
            reason,
            reason_text: reason.map(|r| r.explain().to_string()),
            transform: t.to_rows(),
            rotation_angle_deg: t.angle_deg(),
            rotation_axis: t.axis(),
            translation: [t.translation.x, t.translation.y, t.translation.z],
            candidates: a.candidates.clone(),
            constraint: a.constraint.clone(),
            fit: FitFigures {
                surface_gap_rms: a.figures.rmse,
                coverage: a.figures.overlap,
                matched_pairs: a.figures.correspondences,
                agreeing_pairs: a.figures.inliers,
                lead: a.figures.margin,
                confidence: a.figures.confidence,
                reverse_fit_turn_deg: a.figures.reverse_fit_turn_deg,
            },
            settings: Settings {
                method: method.name().to_string(),
                seed: ctx.seed,
                voxel: a.voxel,
                voxel_from: if ctx.voxel_given {
                    "given (--voxel)".into()
                } else {
                    "chosen from the measured point spacing for about 5 000 keypoints".into()
                },
                support_radius: a.radius,
                support_radius_from: radius_from,
                agreement_distance: a.inlier_threshold,
                units: ctx.units,
                units_from: ctx.units_from.clone(),
                job: ctx.job,
                tuning: a.tuning,
            },
            sensors: {
                let from =
                    |k: usize, known: bool, option: &str| match (&ctx.viewpoints_from[k], known) {
                        (_, false) => format!(
                            "not known (give {option} X,Y,Z in file coordinates to test free space)"
                        ),
                        (Some(f), true) => f.clone(),
                        (None, true) => "given".to_string(),
                    };
                let vp = &a.viewpoints;
                SensorPositions {
                    source: vp.source,
                    source_from: from(0, vp.source.is_some(), "--source-viewpoint"),
                    target: vp.target,
                    target_from: from(1, vp.target.is_some(), "--target-viewpoint"),
                }
            },
            keypoints: a.keypoints,
            timings: if ctx.reproducible {
                Vec::new()
            } else {
                a.timings
                    .iter()
                    .map(|s| Timing {
                        stage: s.stage.clone(),
                        seconds: s.seconds,
                    })
                    .collect()
            },
            truth,
            target_crs: ctx.crs.clone(),
            warnings: ctx.crs_warning.iter().cloned().collect(),
            caution: ctx.job.caution().to_string(),
        }
    }

    /// Puts the time spent reading the scans first in the timings, unless the run is
    /// reproducible (`SOURCE_DATE_EPOCH`: no wall times then).
    pub fn add_reading_time(&mut self, seconds: f64, ctx: &RunContext) {
        if !ctx.reproducible {
            let stage = "reading".to_string();
            self.timings.insert(0, Timing { stage, seconds });
        }
    }

    /// What a file moved by this result records: the program version, the verdict and the
    /// transform.
    pub fn move_record(&self, ctx: &RunContext) -> MoveRecord {
        MoveRecord {
            version: ctx.version.clone(),
            verdict: self.verdict.clone(),
            transform: self.transform,
        }
    }

    /// True for a confident result.
    pub fn is_confident(&self) -> bool {
        self.verdict == "confident"
    }

    /// The figures in words, one line each (summary and picture), lengths with their unit.
    pub fn figure_lines(&self) -> Vec<String> {
        let r = self;
        let u = r.settings.units.label();
        let f = &r.fit;
        let mut lines = vec![
            format!(
                "rotation {:.4} deg about ({:.4}, {:.4}, {:.4})",
                r.rotation_angle_deg, r.rotation_axis[0], r.rotation_axis[1], r.rotation_axis[2]
            ),
            format!(
                "translation ({:.4}, {:.4}, {:.4}) {u}",
                r.translation[0], r.translation[1], r.translation[2]
            ),
            format!(
                "surface gap (RMS) {}, coverage {:.0} %, {} of {} matched pairs agree",
                if f.surface_gap_rms.is_finite() {
                    format!("{:.4} {u}", f.surface_gap_rms)
                } else {
                    "not measured (no SOURCE point near TARGET)".to_string()
                },
                100.0 * f.coverage,
                f.agreeing_pairs,
                f.matched_pairs
            ),
            format!(
                "confidence {:.2} (lead {:.2}), voxel {:.4} {u}, support radius {:.4} {u}",
                f.confidence, f.lead, r.settings.voxel, r.settings.support_radius
            ),
        ];
        for w in &r.constraint.weak {
            lines.push(format!(
                "weak direction (TARGET frame, {u}): {}",
                w.describe()
            ));
        }
        if let Some(v) = r.candidates.first().and_then(|c| c.free_space_violation) {
            let known = |p: &Option<[f64; 3]>| if p.is_some() { "known" } else { "not known" };
            lines.push(format!(
                "free space: {:.1} % of the tested points lie where a sensor saw through (source sensor {}, target sensor {})",
                100.0 * v,
                known(&r.sensors.source),
                known(&r.sensors.target)
            ));
        }
        if let Some(t) = &r.truth {
            lines.push(format!(
                "against the truth: rotation error {:.4} deg, translation error {:.4} {u}",
                t.rotation_error_deg, t.translation_error
            ));
        }
        lines
    }

    /// The verdict in words: `confident alignment`, `ambiguous: WHY` or `not found: WHY`.
    pub fn verdict_line(&self) -> String {
        match (self.verdict.as_str(), &self.reason_text) {
            ("confident", _) => "confident alignment".to_string(),
            ("ambiguous", Some(why)) => format!("ambiguous, no confident alignment: {why}"),
            (_, Some(why)) => format!("not found, no confident alignment: {why}"),
            (v, None) => v.replace('_', " "),
        }
    }

    /// One line per candidate of an ambiguous result, the first two (empty otherwise):
    /// `candidate 1 (the transform below): score …` and `candidate 2: turned … deg, moved …
    /// from candidate 1: score …`.
    pub fn candidate_lines(&self) -> Vec<String> {
        if self.verdict != "ambiguous" {
            return Vec::new();
        }
        let u = self.settings.units.label();
        self.candidates
            .iter()
            .take(2)
            .enumerate()
            .map(|(k, c)| {
                let head = if k == 0 {
                    "candidate 1 (the transform below)".to_string()
                } else {
                    format!(
                        "candidate {}: turned {:.1} deg, moved {:.4} {u} from candidate 1",
                        k + 1,
                        c.angle_deg,
                        c.distance
                    )
                };
                let free = c.free_space_violation.map_or(String::new(), |v| {
                    format!(", free space {:.1} %", 100.0 * v)
                });
                let fine = c
                    .fine_overlap
                    .map_or(String::new(), |v| format!(" (fine {:.0} %)", 100.0 * v));
                format!(
                    "{head}: score {:.2}, coverage {:.0} %{fine}, {} agreeing pairs{free}",
                    c.score,
                    100.0 * c.overlap,
                    c.explained
                )
            })
            .collect()
    }

    /// The summary printed on the terminal.
    pub fn summary(&self) -> String {
        let r = self;
        let mut s = format!(
            "{} onto {} ({})\n",
            r.source.file, r.target.file, r.settings.method
        );
        s.push_str(&format!("result: {}\n", r.verdict_line()));
        for l in r.candidate_lines() {
            s.push_str(&format!("  {l}\n"));
        }
        s.push_str("transform (source into target, row-major):\n");
        if let Some(c) = &r.target_crs {
            s.push_str(&format!(
                "frame: {} (TARGET's CRS)\n",
                crate::io::crs::crs_label(c)
            ));
        }
        for w in &r.warnings {
            s.push_str(&format!("warning: {w}\n"));
        }
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
    pub fn new(
        inputs: &[Input<'_>],
        method: Method,
        m: &MultiAlignment,
        ctx: &RunContext,
    ) -> MultiReport {
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
                    ctx,
                )
            })
            .collect();
        let placed = m.poses.iter().all(|p| p.is_some());
        MultiReport {
            tool: ctx.tool(),
            created: rfc3339(ctx.created),
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
            crs: ctx.crs.clone(),
            warnings: ctx.crs_warning.iter().cloned().collect(),
            caution: ctx.job.caution().to_string(),
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
                "{} onto {}: {}, confidence {:.2}, rotation {:.3} deg, surface gap {:.4} {}, coverage {:.0} %\n",
                p.source.file,
                p.target.file,
                p.verdict.replace('_', " "),
                p.fit.confidence,
                p.rotation_angle_deg,
                p.fit.surface_gap_rms,
                p.settings.units.label(),
                100.0 * p.fit.coverage
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
        let unit = r
            .pairs
            .first()
            .map_or("units", |p| p.settings.units.label());
        for l in &r.loops {
            s.push_str(&format!(
                "loop {:?}: {:.4} deg, {:.4} {unit}\n",
                l.cycle, l.rotation_deg, l.translation
            ));
        }
        for w in &r.warnings {
            s.push_str(&format!("warning: {w}\n"));
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

/// Distance from every point of `a` (moved by `a_tf`) to the nearest point of `b` (moved by
/// `b_tf`), file units; NaN when `b` is empty.
fn distances_to(a: &Cloud, a_tf: &Rigid, b: &Cloud, b_tf: &Rigid) -> Vec<f32> {
    use rayon::prelude::*;
    let Ok(index) = KdIndex::new(&b.positions) else {
        return vec![f32::NAN; a.len()];
    };
    if b.is_empty() {
        return vec![f32::NAN; a.len()];
    }
    let back = b_tf.inverse();
    let ob = Vector3::from(b.origin);
    let oa = Vector3::from(a.origin);
    a.positions
        .par_iter()
        .map(|p| {
            let g = a_tf.apply(&(oa + vec3(*p)));
            let q = back.apply(&g) - ob;
            index.nearest_one(to_f32(&q)).1.sqrt()
        })
        .collect()
}

/// Writes `report` (a [`PairReport`] or [`MultiReport`]) to `path` as pretty-printed JSON with
/// a final newline, replacing the file as a whole ([`crate::io::write_atomic`]).
pub fn write_report<T: Serialize>(path: &Path, report: &T) -> Result<()> {
    let json = serde_json::to_string_pretty(report)
        .map_err(|e| Error::internal(format!("report: {e}"), "report this as a bug"))?;
    crate::io::write_atomic(path, |w| {
        use std::io::Write;
        w.write_all(json.as_bytes())
            .and_then(|_| w.write_all(b"\n"))
            .map_err(|e| Error::io(path, &e))
    })
}

/// Draws SOURCE and TARGET before and after `tf` (three views each) with the report's figures
/// and writes the PNG to `path`.
///
/// SOURCE is plum and TARGET leaf green ([`SOURCE_COLOUR`], [`TARGET_COLOUR`]); the smaller
/// cloud is drawn in front of the other, and in the "after" row it is coloured by its
/// distance to the other cloud (0 to 4 × the surface gap RMS, in the file unit) so that a
/// fit of a few millimetres can be judged. A result that is not confident gets a red
/// "NOT ALIGNED" band and red frames around the "after" panels.
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
    let unit = r.settings.units.label();
    let source_smaller = source.cloud.len() <= target.cloud.len();
    let identity = Rigid::identity();
    let (near, other_name) = if source_smaller {
        (
            distances_to(source.cloud, tf, target.cloud, &identity),
            "target",
        )
    } else {
        (
            distances_to(target.cloud, &identity, source.cloud, tf),
            "source",
        )
    };
    // Points farther than the top of the bar (outside the overlap, or where the other
    // cloud is sparse) are drawn grey, so the bar's colours show only the fit.
    let top = 4.0 * r.fit.surface_gap_rms;
    let near: Vec<f32> = if top.is_finite() && top > 0.0 {
        near.into_iter()
            .map(|d| if d as f64 > top { f32::NAN } else { d })
            .collect()
    } else {
        near
    };
    let field = ScalarField {
        values: &near,
        name: format!("distance to {other_name} ({unit})"),
        range: (top.is_finite() && top > 0.0).then_some([0.0, top as f32]),
        map: ColourMap::Sequential,
    };
    let mut moving = Layer::from_cloud(
        format!("source {}", file_name(source.path)),
        SOURCE_COLOUR,
        source.cloud,
    );
    moving.origin = std::array::from_fn(|k| source.cloud.origin[k] + shift[k]);
    let unshift = Rigid::translation(-shift);
    let mut moving = moving.moved_after(tf.compose(&unshift));
    let mut fixed = Layer::from_cloud(
        format!("target {}", file_name(target.path)),
        TARGET_COLOUR,
        target.cloud,
    );
    if source_smaller {
        moving.on_top = true;
        moving.after_values = Some(field);
    } else {
        fixed.on_top = true;
        fixed.after_values = Some(field);
    }
    if r.verdict == "ambiguous" && r.candidates.len() >= 2 {
        let names = [file_name(source.path), file_name(target.path)];
        return write_candidates_picture(path, [moving, fixed], names, r, &unshift);
    }
    let layers = [moving, fixed];
    let mut lines = r.figure_lines();
    lines.push("before: source shifted so that the centroids coincide, not rotated".into());
    let warning = match &r.reason_text {
        None => String::new(),
        Some(why) => format!("the after row shows the best pose found, not confirmed: {why}"),
    };
    let verdict = if warning.is_empty() {
        "confident alignment"
    } else {
        "no confident alignment"
    };
    let text = FigureText {
        title: format!(
            "{} onto {} ({}): {verdict}",
            file_name(source.path),
            file_name(target.path),
            r.settings.method
        ),
        lines,
        footer: r.caution.clone(),
        unit: unit.to_string(),
        warning,
    };
    render_alignment_views(&layers, &text, path)
}

/// The red band's text on the picture of an ambiguous result: the verdict's reason (`why`) and
/// what to do with the two rows of candidates drawn under it.
pub fn ambiguous_warning(why: &str) -> String {
    format!("{why}; choose between the rows with what you know about the scans")
}

/// The picture of an ambiguous result: the first two candidates in two rows (three views
/// each), their scores and how they differ in the heading. `layers` are SOURCE (shifted by
/// `unshift`'s inverse, as in the before row of the usual picture) and TARGET, `names` their
/// file names.
fn write_candidates_picture(
    path: &Path,
    layers: [Layer<'_>; 2],
    names: [String; 2],
    r: &PairReport,
    unshift: &Rigid,
) -> Result<()> {
    let [mut moving, mut fixed] = layers;
    moving.after = None;
    moving.after_values = None;
    fixed.after_values = None;
    let rows: Vec<ViewRow> = r
        .candidates
        .iter()
        .take(2)
        .enumerate()
        .map(|(k, c)| ViewRow {
            label: format!("candidate {}", k + 1),
            transforms: vec![Some(c.transform.compose(unshift)), None],
            values: false,
            flag: String::new(),
        })
        .collect();
    // The candidates and the fit figures; the answer's rotation and translation are in the
    // report (six lines fit one column).
    let mut lines = r.candidate_lines();
    lines.extend(
        r.figure_lines()
            .into_iter()
            .filter(|l| !l.starts_with("rotation ") && !l.starts_with("translation ")),
    );
    let why = r.reason_text.clone().unwrap_or_default();
    let text = FigureText {
        title: format!(
            "{} onto {} ({}): ambiguous, first two candidates",
            names[0], names[1], r.settings.method
        ),
        lines,
        footer: r.caution.clone(),
        unit: r.settings.units.label().to_string(),
        warning: ambiguous_warning(&why),
    };
    draw_alignment_rows(&[moving, fixed], &rows, &text)?.save_png(path)
}
