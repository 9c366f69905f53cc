//! `equiscan align SOURCE TARGET [MORE…]`: registration with no initial guess.
//!
//! Two scans: the rigid transform mapping SOURCE into TARGET's frame. More scans: every scan
//! into the frame of the first, through a maximum spanning tree of pair confidences, with loop
//! residuals. Transforms are row-major 4×4 in the files' own coordinates (f64), angles in
//! degrees, lengths in file units. Exit code 0 on a confident result, 1 when the run found
//! none (the reason is printed and reported), 2 on an error.

use std::io::Write;
use std::path::PathBuf;
use std::time::Instant;

use equiscan::align::export::write_moved;
use equiscan::align::report::{Input, MultiReport, PairReport, Timing, write_pair_picture};
use equiscan::align::truth::{TruthCheck, read_truth};
use equiscan::align::{AlignParams, Method, Verdict, align_many, align_pair};
use equiscan::io::{read_cloud, write_atomic};
use equiscan::{Cloud, Error, Result};
use serde::Serialize;

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
    let inputs: Vec<Input<'_>> = args
        .scans
        .iter()
        .zip(&clouds)
        .map(|(path, cloud)| Input { path, cloud })
        .collect();
    if clouds.len() == 2 {
        run_pair(args, inputs[0], inputs[1], &p, read_seconds)
    } else {
        let multi = align_many(&clouds, &p)?;
        let report = MultiReport::new(&inputs, p.method, &multi);
        finish(args, &report, &report.summary())?;
        Ok(if report.is_confident() { 0 } else { 1 })
    }
}

fn run_pair(
    args: &AlignArgs,
    source: Input<'_>,
    target: Input<'_>,
    p: &AlignParams,
    read_seconds: f64,
) -> Result<u8> {
    let a = align_pair(source.cloud, target.cloud, p)?;
    let truth = match &args.truth {
        Some(path) => {
            let t = read_truth(path, args.truth_key.as_deref())?;
            Some(TruthCheck::new(&a.transform, &t, &source.cloud.centroid()))
        }
        None => None,
    };
    let mut report = PairReport::new(source, target, p.method, &a, truth);
    report.timings.insert(
        0,
        Timing {
            stage: "reading".into(),
            seconds: read_seconds,
        },
    );
    if let Some(out) = &args.write {
        write_moved(out, source.cloud, &a.transform)?;
    }
    if let Some(pic) = &args.picture {
        write_pair_picture(pic, source, target, &report, &a.transform)?;
    }
    finish(args, &report, &report.summary())?;
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
