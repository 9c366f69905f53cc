//! `equiscan align SOURCE TARGET [MORE…]`: registration with no initial guess.
//!
//! Two scans: the rigid transform mapping SOURCE into TARGET's frame. More scans: every scan
//! into the frame of the first, through a maximum spanning tree of pair confidences, with loop
//! residuals. Transforms are row-major 4×4 in the files' own coordinates (f64), angles in
//! degrees, lengths in file units. Exit code 0 on a confident result, 1 when the run found
//! none (the reason is printed and reported), 2 on an error.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::time::Instant;

use equiscan::align::{
    AlignParams, Alignment, Method, MultiAlignment, Reason, Rigid, Verdict, align_many, align_pair,
    rotation_error_deg,
};
use equiscan::io::{read_cloud, write_atomic, write_las, write_ply};
use equiscan::report::{FigureText, LAYER_PALETTE, Layer, render_alignment_views};
use equiscan::{Cloud, Error, Result};
use nalgebra::Vector3;
use serde::Serialize;

/// The caution printed with every result.
pub const CAUTION: &str = "Results support, and do not replace, the check of a qualified surveyor and the rules that apply locally.";

/// Arguments of `equiscan align`.
#[derive(Debug, clap::Args)]
pub struct AlignArgs {
    /// SOURCE and TARGET scans (LAS, LAZ or PLY); with more than two, every scan is registered
    /// into the frame of the first.
    #[arg(required = true, num_args = 2.., value_name = "SCAN")]
    pub scans: Vec<PathBuf>,
    /// How keypoints are described and poses proposed: harmonic descriptors with one pose per
    /// correspondence, or the FPFH + RANSAC baseline.
    #[arg(long, value_enum, default_value = "equivariant")]
    pub method: MethodArg,
    /// Voxel size for keypoints, file units (default: chosen from the point spacing).
    #[arg(long, value_name = "SIZE")]
    pub voxel: Option<f64>,
    /// Support radius of the descriptors, file units (default: 10 voxels, 5 for fpfh).
    #[arg(long, value_name = "R")]
    pub radius: Option<f64>,
    /// Write the JSON report to this file.
    #[arg(long, value_name = "FILE")]
    pub report: Option<PathBuf>,
    /// Write SOURCE moved into TARGET's frame (.las, .laz or .ply); two scans only.
    #[arg(long, value_name = "FILE")]
    pub write: Option<PathBuf>,
    /// Draw SOURCE and TARGET before and after, three views each, as a PNG; two scans only.
    #[arg(long, value_name = "FILE")]
    pub picture: Option<PathBuf>,
    /// Print the JSON report on standard output instead of the summary.
    #[arg(long)]
    pub json: bool,
    /// Print nothing on success (errors still go to standard error).
    #[arg(long)]
    pub quiet: bool,
    /// Seed of every random choice; the same seed gives the same result.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// A JSON file with the true SOURCE→TARGET transform (4 rows of 4 numbers, or an object
    /// with a `matrix` field); the report then adds the errors against it. Two scans only.
    #[arg(long, value_name = "FILE")]
    pub truth: Option<PathBuf>,
    /// Dotted path to the truth object inside the --truth file, e.g. `depot.station2_to_station1`.
    #[arg(long, value_name = "PATH", requires = "truth")]
    pub truth_key: Option<String>,
}

/// `--method` values.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum MethodArg {
    /// Harmonic descriptors; one pose per correspondence from the equivariant coefficients.
    Equivariant,
    /// FPFH features and 3-point RANSAC.
    Fpfh,
}

/// One input file in a report.
#[derive(Debug, Serialize)]
pub struct ScanEntry {
    /// The path as given.
    pub file: String,
    /// Points read.
    pub points: usize,
}

/// Errors against a known transform.
#[derive(Debug, Serialize)]
pub struct TruthCheck {
    /// Geodesic angle between the found and the true rotation, degrees.
    pub rotation_error_deg: f64,
    /// Distance between where the found and the true transform put SOURCE's centroid.
    pub translation_error: f64,
}

/// The report of one pair.
#[derive(Debug, Serialize)]
pub struct PairReport {
    /// The scan moved.
    pub source: ScanEntry,
    /// The scan whose frame the transform maps into.
    pub target: ScanEntry,
    /// `equivariant` or `fpfh`.
    pub method: String,
    /// `confident`, `ambiguous` or `not_found`.
    pub verdict: String,
    /// Why nothing confident was found (`too_few_distinctive_points`, `too_little_overlap`,
    /// `ambiguous_symmetric_shape`, `weakly_constrained`).
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
    /// Distinct refined poses, best first (the first is the answer).
    pub candidates: Vec<equiscan::align::Candidate>,
    /// Constraint analysis of the final fit (condition figure, weakly constrained directions).
    pub constraint: equiscan::align::Constraint,
    /// Seconds per stage (reading the files included).
    pub timings: Vec<Timing>,
    /// Errors against the --truth transform, when given.
    pub truth: Option<TruthCheck>,
    /// The caution that goes with every result.
    pub caution: String,
}

/// Seconds spent in one stage.
#[derive(Debug, Serialize)]
pub struct Timing {
    /// Stage name.
    pub stage: String,
    /// Seconds.
    pub seconds: f64,
}

/// A scan's place in the frame of the first.
#[derive(Debug, Serialize)]
pub struct PoseEntry {
    /// The scan.
    pub file: String,
    /// Row-major 4×4 into the first scan's frame; `null` when no chain of confident pairs
    /// reaches the scan.
    pub transform: Option<[[f64; 4]; 4]>,
}

/// The report of several scans.
#[derive(Debug, Serialize)]
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
    pub loops: Vec<equiscan::align::LoopResidual>,
    /// The caution that goes with every result.
    pub caution: String,
}

fn params(args: &AlignArgs) -> AlignParams {
    AlignParams {
        method: match args.method {
            MethodArg::Equivariant => Method::Equivariant,
            MethodArg::Fpfh => Method::Fpfh,
        },
        voxel: args.voxel,
        radius: args.radius,
        seed: args.seed,
        ..AlignParams::default()
    }
}

/// Runs `align`; returns the exit code.
pub fn run(args: &AlignArgs) -> Result<u8> {
    if args.scans.len() > 2
        && (args.write.is_some() || args.picture.is_some() || args.truth.is_some())
    {
        return Err(Error::invalid(
            "--write, --picture and --truth work with two scans",
            "give SOURCE and TARGET only, or drop those options",
        ));
    }
    let t = Instant::now();
    let clouds: Vec<Cloud> = args
        .scans
        .iter()
        .map(|p| read_cloud(p).map(|(c, _)| c))
        .collect::<Result<_>>()?;
    let read_seconds = t.elapsed().as_secs_f64();
    let p = params(args);
    if clouds.len() == 2 {
        run_pair(args, &clouds[0], &clouds[1], &p, read_seconds)
    } else {
        let multi = align_many(&clouds, &p)?;
        let report = multi_report(args, &clouds, &multi);
        finish(args, &report, &multi_summary(&report))?;
        Ok(if report.verdict == "confident" { 0 } else { 1 })
    }
}

fn run_pair(
    args: &AlignArgs,
    source: &Cloud,
    target: &Cloud,
    p: &AlignParams,
    read_seconds: f64,
) -> Result<u8> {
    let a = align_pair(source, target, p)?;
    let truth = match &args.truth {
        Some(path) => {
            let t = read_truth(path, args.truth_key.as_deref())?;
            let c = centroid(source);
            Some(TruthCheck {
                rotation_error_deg: rotation_error_deg(&a.transform.rotation, &t.rotation),
                translation_error: (a.transform.apply(&c) - t.apply(&c)).norm(),
            })
        }
        None => None,
    };
    let mut report = pair_report(
        &args.scans[0],
        &args.scans[1],
        source,
        target,
        p.method,
        &a,
        truth,
    );
    report.timings.insert(
        0,
        Timing {
            stage: "reading".into(),
            seconds: read_seconds,
        },
    );
    if let Some(out) = &args.write {
        write_moved(out, source, &a.transform)?;
    }
    if let Some(pic) = &args.picture {
        draw(pic, &args.scans, source, target, &report, &a.transform)?;
    }
    finish(args, &report, &pair_summary(&report))?;
    Ok(if a.verdict == Verdict::Confident {
        0
    } else {
        1
    })
}

fn finish<T: Serialize>(args: &AlignArgs, report: &T, summary: &str) -> Result<()> {
    let json = serde_json::to_string_pretty(report)
        .map_err(|e| Error::invalid(format!("report: {e}"), "report this as a bug"))?;
    if let Some(path) = &args.report {
        write_atomic(path, |w| {
            w.write_all(json.as_bytes())
                .and_then(|_| w.write_all(b"\n"))
                .map_err(|e| Error::io(path, &e))
        })?;
    }
    if args.quiet {
        return Ok(());
    }
    let mut out = std::io::stdout().lock();
    let text = if args.json { json } else { summary.to_string() };
    let _ = writeln!(out, "{text}");
    Ok(())
}

fn pair_report(
    source_path: &Path,
    target_path: &Path,
    source: &Cloud,
    target: &Cloud,
    method: Method,
    a: &Alignment,
    truth: Option<TruthCheck>,
) -> PairReport {
    let (verdict, reason) = match a.verdict {
        Verdict::Confident => ("confident", None),
        Verdict::Ambiguous(r) => ("ambiguous", Some(r)),
        Verdict::NotFound(r) => ("not_found", Some(r)),
    };
    let t = &a.transform;
    PairReport {
        source: ScanEntry {
            file: source_path.display().to_string(),
            points: source.len(),
        },
        target: ScanEntry {
            file: target_path.display().to_string(),
            points: target.len(),
        },
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
        candidates: a.candidates.clone(),
        constraint: a.constraint.clone(),
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

fn multi_report(args: &AlignArgs, clouds: &[Cloud], m: &MultiAlignment) -> MultiReport {
    let method = params(args).method;
    let pairs = m
        .pairs
        .iter()
        .map(|p| {
            pair_report(
                &args.scans[p.moving],
                &args.scans[p.fixed],
                &clouds[p.moving],
                &clouds[p.fixed],
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
        poses: args
            .scans
            .iter()
            .zip(&m.poses)
            .map(|(f, p)| PoseEntry {
                file: f.display().to_string(),
                transform: p.map(|r| r.to_rows()),
            })
            .collect(),
        loops: m.loops.clone(),
        caution: CAUTION.to_string(),
    }
}

fn figure_lines(r: &PairReport) -> Vec<String> {
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

fn pair_summary(r: &PairReport) -> String {
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
    for l in figure_lines(r) {
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
    s.push_str(CAUTION);
    s
}

fn multi_summary(r: &MultiReport) -> String {
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
    s.push_str(CAUTION);
    s
}

fn centroid(c: &Cloud) -> Vector3<f64> {
    let mut s = Vector3::zeros();
    for p in &c.positions {
        s += Vector3::new(p[0] as f64, p[1] as f64, p[2] as f64);
    }
    s / c.len().max(1) as f64 + Vector3::from(c.origin)
}

/// SOURCE moved by `tf` (file coordinates), attributes kept, normals turned.
fn moved(source: &Cloud, tf: &Rigid) -> Cloud {
    let o = Vector3::from(source.origin);
    let new_o = tf.apply(&o).map(|v| v.round());
    let shift = tf.apply(&o) - new_o;
    let r = tf.rotation;
    let turn = |p: &[f32; 3]| r * Vector3::new(p[0] as f64, p[1] as f64, p[2] as f64);
    let mut out = source.clone();
    out.origin = [new_o.x, new_o.y, new_o.z];
    out.positions = source
        .positions
        .iter()
        .map(|p| {
            let q = turn(p) + shift;
            [q.x as f32, q.y as f32, q.z as f32]
        })
        .collect();
    if let Some(n) = &source.normals {
        out.normals = Some(
            n.iter()
                .map(|p| {
                    let q = turn(p);
                    [q.x as f32, q.y as f32, q.z as f32]
                })
                .collect(),
        );
    }
    out
}

fn write_moved(path: &Path, source: &Cloud, tf: &Rigid) -> Result<()> {
    let ext = path
        .extension()
        .and_then(|e| e.to_str())
        .map(|e| e.to_ascii_lowercase())
        .unwrap_or_default();
    let cloud = moved(source, tf);
    match ext.as_str() {
        "las" | "laz" => write_las(path, &cloud, &[]),
        "ply" => write_ply(path, &cloud, &[]),
        _ => Err(Error::file(
            path,
            "has no .las, .laz or .ply extension",
            "name the output file with one of those extensions",
        )),
    }
}

fn draw(
    path: &Path,
    scans: &[PathBuf],
    source: &Cloud,
    target: &Cloud,
    r: &PairReport,
    tf: &Rigid,
) -> Result<()> {
    let name = |p: &Path| {
        p.file_name()
            .map(|n| n.to_string_lossy().to_string())
            .unwrap_or_default()
    };
    // Scans in different frames can lie kilometres apart; the "before" row shows the source
    // shifted so that the centroids coincide (not rotated), the "after" row the found pose.
    let shift = centroid(target) - centroid(source);
    let mut moving = Layer::from_cloud(
        format!("source {}", name(&scans[0])),
        LAYER_PALETTE[0],
        source,
    );
    moving.origin = std::array::from_fn(|k| source.origin[k] + shift[k]);
    let unshift = Rigid::new(nalgebra::Matrix3::identity(), -shift);
    let layers = [
        moving.moved_after(tf.compose(&unshift).to_rows()),
        Layer::from_cloud(
            format!("target {}", name(&scans[1])),
            LAYER_PALETTE[1],
            target,
        ),
    ];
    let verdict = match &r.reason_text {
        None => "confident alignment".to_string(),
        Some(why) => format!("no confident alignment: {why}"),
    };
    let mut lines = figure_lines(r);
    lines.push("before: source shifted so that the centroids coincide, not rotated".into());
    let text = FigureText {
        title: format!(
            "{} onto {} ({}): {verdict}",
            name(&scans[0]),
            name(&scans[1]),
            r.method
        ),
        lines,
        footer: CAUTION.to_string(),
        unit: String::new(),
    };
    render_alignment_views(&layers, &text, path)
}

/// Reads a true transform: a JSON array of 4 rows of 4 numbers, or an object holding one in a
/// `matrix` field, optionally under a dotted `key` path.
fn read_truth(path: &Path, key: Option<&str>) -> Result<Rigid> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, &e))?;
    let mut v: serde_json::Value = serde_json::from_str(&text).map_err(|e| {
        Error::file(
            path,
            format!("is not valid JSON ({e})"),
            "check the --truth file",
        )
    })?;
    if let Some(key) = key {
        for part in key.split('.') {
            v = v.get(part).cloned().ok_or_else(|| {
                Error::file(
                    path,
                    format!("has no `{part}` along --truth-key {key}"),
                    "give the dotted path to the object holding the matrix",
                )
            })?;
        }
    }
    if let Some(m) = v.get("matrix") {
        v = m.clone();
    }
    let rows: [[f64; 4]; 4] = serde_json::from_value(v).map_err(|_| {
        Error::file(
            path,
            "holds no 4×4 matrix there",
            "give 4 rows of 4 numbers, or an object with a `matrix` field (see --truth-key)",
        )
    })?;
    Rigid::from_rows(&rows).ok_or_else(|| {
        Error::file(
            path,
            "the matrix is not a rigid transform",
            "give a rotation with a translation and a last row of 0 0 0 1",
        )
    })
}
