//! `equiscan align SOURCE TARGET [MORE…]`: registration with no initial guess.
//!
//! Two scans: the rigid transform mapping SOURCE into TARGET's frame. More scans: every scan
//! into the frame of the first, through a maximum spanning tree of pair confidences, with loop
//! residuals. The library builds the report ([`equiscan::align::report`]); this file parses
//! arguments, checks outputs before reading, prints and sets the exit code: 0 on a confident
//! result, 1 when the run found none, 2 on an error.

use std::path::{Path, PathBuf};
use std::time::Instant;

use super::align_checks::{
    busy, check_cost, context, occupied_voxels, positive, viewpoint, viewpoints,
};
use super::common::{CommonArgs, Size, default_memory_budget, print_stdout};
use equiscan::align::export::write_moved;
use equiscan::align::report::{
    Input, MultiReport, PairReport, fingerprint, write_pair_picture, write_report,
};
use equiscan::align::truth::{TruthCheck, read_truth};
use equiscan::align::{AlignParams, Method, align_many_named, align_named};
use equiscan::io::guard::{check_extension, check_outputs};
use equiscan::io::{FileInfo, read_cloud};
use equiscan::{Cloud, Error, Result};
use serde::Serialize;

/// Arguments of `equiscan align`.
#[derive(Debug, clap::Args)]
pub struct AlignArgs {
    /// SOURCE and TARGET scans (LAS, LAZ, PLY or E57; one scan of an E57 file as
    /// FILE.e57#NAME or FILE.e57#INDEX from 0); with more than two, every scan is registered
    /// into the frame of the first.
    #[arg(required = true, num_args = 2.., value_name = "SCAN")]
    pub scans: Vec<PathBuf>,
    /// How keypoints are described and poses proposed: harmonic descriptors with one pose per
    /// correspondence, or the FPFH + RANSAC baseline.
    #[arg(long, value_enum, default_value = "equivariant")]
    pub method: MethodArg,
    /// Voxel size for keypoints, file units (default: chosen from the point spacing).
    #[arg(long, value_name = "SIZE", allow_negative_numbers = true)]
    pub voxel: Option<f64>,
    /// Support radius of the descriptors, file units (default: 10 voxels, 5 for fpfh).
    #[arg(long, short = 'r', value_name = "R", allow_negative_numbers = true)]
    pub radius: Option<f64>,
    /// Unit of the coordinates (default: from the LAS CRS; otherwise figures say "units").
    #[arg(long, value_enum)]
    pub units: Option<UnitsArg>,
    /// Write the JSON report to this file.
    #[arg(long, value_name = "FILE")]
    pub report: Option<PathBuf>,
    /// Write SOURCE moved into TARGET's frame (.las, .laz or .ply) when the result is
    /// confident; two scans only.
    #[arg(long, value_name = "FILE")]
    pub write: Option<PathBuf>,
    /// Write --write's file even without a confident result (the verdict is recorded in it).
    #[arg(long, requires = "write")]
    pub write_anyway: bool,
    /// Draw SOURCE and TARGET before and after, three views each, as a PNG; two scans only.
    #[arg(long, value_name = "FILE")]
    pub picture: Option<PathBuf>,
    /// Seed of every random choice; the same seed gives the same result.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// A JSON file with the true SOURCE→TARGET transform (4 rows of 4 numbers, or an object
    /// with a `matrix` field); the report then adds the errors against it. Two scans only.
    #[arg(long, value_name = "FILE")]
    pub truth: Option<PathBuf>,
    /// Dotted path to the truth inside the --truth file; numbers index lists, e.g.
    /// `depot.station2_to_station1` or `parts.0.pose`.
    #[arg(long, value_name = "PATH", requires = "truth")]
    pub truth_key: Option<String>,
    /// Memory the registration may use, e.g. 2G or 500M, checked by an estimate before the
    /// heavy work when --voxel is given (default: half of the machine's memory).
    #[arg(long, value_name = "SIZE")]
    pub max_memory: Option<Size>,
    /// Run even when the estimate exceeds --max-memory.
    #[arg(long)]
    pub force: bool,
    /// Position of SOURCE's sensor, X,Y,Z in SOURCE's file coordinates (default: the scan's
    /// pose in an E57 file; LAS and PLY record none): poses that put TARGET where this sensor
    /// saw through count against it. Two scans only.
    #[arg(long, value_name = "X,Y,Z", value_parser = viewpoint, allow_hyphen_values = true)]
    pub source_viewpoint: Option<[f64; 3]>,
    /// Position of TARGET's sensor, X,Y,Z in TARGET's file coordinates (default as for
    /// --source-viewpoint).
    #[arg(long, value_name = "X,Y,Z", value_parser = viewpoint, allow_hyphen_values = true)]
    pub target_viewpoint: Option<[f64; 3]>,
    /// Version of the harmonic descriptors (1: the original definition, the default here;
    /// 2: degrees l ≥ 1 fade out at the centre).
    #[arg(long, value_name = "V", default_value_t = AlignParams::default().descriptor_version)]
    pub descriptor_version: u32,
    /// `-q`, `--json` (the report on one line, printed also with -q), `--threads`.
    #[command(flatten)]
    pub common: CommonArgs,
}

/// `--method` values.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum MethodArg {
    /// Harmonic descriptors; one pose per correspondence from the equivariant coefficients.
    Equivariant,
    /// FPFH features and 3-point RANSAC.
    Fpfh,
}

/// `--units` values.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum UnitsArg {
    /// Metres.
    M,
    /// Millimetres.
    Mm,
    /// International feet.
    Ft,
    /// US survey feet.
    UsFt,
}

/// Runs `align`; returns the exit code.
pub fn run(args: &AlignArgs) -> Result<u8> {
    positive(args.voxel, "--voxel", "0.05")?;
    positive(args.radius, "--radius", "0.5")?;
    let two_only = args.write.is_some() || args.picture.is_some() || args.truth.is_some();
    let sensors = args.source_viewpoint.is_some() || args.target_viewpoint.is_some();
    if args.scans.len() > 2 && (two_only || sensors) {
        return Err(Error::invalid(
            "--write, --picture, --truth and the viewpoints work with two scans",
            "give SOURCE and TARGET only, or drop those options",
        ));
    }
    let mut inputs: Vec<&Path> = args.scans.iter().map(PathBuf::as_path).collect();
    inputs.extend(args.truth.as_deref());
    let outputs: Vec<&Path> = [&args.report, &args.write, &args.picture]
        .into_iter()
        .filter_map(|o| o.as_deref())
        .collect();
    check_outputs(&inputs, &outputs)?;
    if let Some(w) = &args.write {
        check_extension(w, &["las", "laz", "ply"], "a LAS, LAZ or PLY point cloud")?;
    }
    if let Some(pic) = &args.picture {
        check_extension(pic, &["png"], "a PNG picture")?;
    }
    let pool = args.common.pool()?;
    pool.install(|| registered(args))
}

/// The work after the checks: read, estimate, register, write, print.
fn registered(args: &AlignArgs) -> Result<u8> {
    let c = &args.common;
    let truth = match &args.truth {
        Some(path) => Some(read_truth(path, args.truth_key.as_deref())?),
        None => None,
    };
    let t = Instant::now();
    let read: Vec<(Cloud, FileInfo)> = busy(c.quiet, "reading the scans", || {
        args.scans
            .iter()
            .map(|p| read_cloud(p))
            .collect::<Result<_>>()
    })?;
    let prints: Vec<(u64, u64)> = args
        .scans
        .iter()
        .map(|p| fingerprint(p))
        .collect::<Result<_>>()?;
    let read_seconds = t.elapsed().as_secs_f64();
    let p = AlignParams {
        method: match args.method {
            MethodArg::Equivariant => Method::Equivariant,
            MethodArg::Fpfh => Method::Fpfh,
        },
        voxel: args.voxel,
        radius: args.radius,
        seed: args.seed,
        descriptor_version: args.descriptor_version,
        ..AlignParams::default()
    };
    let (sensors, sensors_from) = viewpoints(args, &read);
    let p = AlignParams {
        viewpoints: sensors,
        ..p
    };
    if let (Some(v), false) = (args.voxel, args.force) {
        let keypoints = read.iter().map(|(cl, _)| occupied_voxels(cl, v)).sum();
        let budget = args.max_memory.map_or_else(default_memory_budget, |s| s.0);
        check_cost(keypoints, v, budget)?;
    }
    let mut ctx = context(args, &read);
    ctx.viewpoints_from = sensors_from;
    let inputs: Vec<Input<'_>> = args
        .scans
        .iter()
        .zip(&read)
        .zip(&prints)
        .map(|((path, (cloud, _)), &(bytes, checksum))| Input {
            path,
            cloud,
            bytes,
            checksum,
        })
        .collect();
    let stages = "registering (keypoints, descriptors, matching, poses, refinement)";
    let names: Vec<String> = args.scans.iter().map(|p| p.display().to_string()).collect();
    if read.len() > 2 {
        let scans: Vec<(&str, &Cloud)> = names
            .iter()
            .map(String::as_str)
            .zip(read.iter().map(|(c, _)| c))
            .collect();
        let multi = busy(c.quiet, stages, || align_many_named(&scans, &p))?;
        let report = MultiReport::new(&inputs, p.method, &multi, &ctx);
        finish(args, &report, &report.summary())?;
        return Ok(if report.is_confident() { 0 } else { 1 });
    }
    let (source, target) = (inputs[0], inputs[1]);
    let a = busy(c.quiet, stages, || {
        align_named((&names[0], source.cloud), (&names[1], target.cloud), &p)
    })?;
    let check = truth.map(|t| TruthCheck::new(&a.transform, &t, &source.cloud.centroid()));
    let mut report = PairReport::new(source, target, p.method, &a, check, &ctx);
    report.add_reading_time(read_seconds, &ctx);
    if let Some(out) = &args.write {
        if report.is_confident() || args.write_anyway {
            let record = report.move_record(&ctx);
            let source = (source.cloud, &read[0].1);
            write_moved(out, source, &read[1].1, &a.transform, &record)?;
            c.wrote(out);
        } else {
            eprintln!(
                "{}: not written: no confident alignment; add --write-anyway to write SOURCE moved by the best pose found (the verdict is recorded in the file)",
                out.display()
            );
        }
    }
    if let Some(pic) = &args.picture {
        write_pair_picture(pic, source, target, &report, &a.transform)?;
        c.wrote(pic);
    }
    finish(args, &report, &report.summary())?;
    Ok(if report.is_confident() { 0 } else { 1 })
}

fn finish<T: Serialize>(args: &AlignArgs, report: &T, summary: &str) -> Result<()> {
    let c = &args.common;
    if let Some(path) = &args.report {
        write_report(path, report)?;
        c.wrote(path);
    }
    if c.json {
        c.print_json(report)?;
    } else if c.chatty() {
        print_stdout(&format!("{summary}\n"));
    }
    Ok(())
}
