//! `equiscan features INPUT... -o OUT`: rotation-invariant descriptors per point, written as
//! NPY or CSV (each with its own `<file>.json` sidecar), PLY or LAS/LAZ. The file layout and
//! the writing belong to [`equiscan::descriptor::output`]; this file parses, checks the
//! outputs before any work, calls the library and prints.

use std::path::{Path, PathBuf};
use std::time::Instant;

use equiscan::descriptor::output::{
    CentreList, CentresInfo, FeatureWriter, FileSpec, Format, Job, estimate, place_keypoints, plan,
    write_features,
};
use equiscan::descriptor::{Engine, Invariants, Recipe, suggested_radius};
use equiscan::io::read_cloud;
use equiscan::spatial::{KdIndex, estimate_spacing_with, voxel_downsample};
use equiscan::{Cloud, Error, Result};
use serde::Serialize;

use super::common::{CommonArgs, Size, group, plural, seconds_text};

/// Longest estimated run (wall clock) started without `--force`, seconds.
const TIME_BUDGET: f64 = 3600.0;

/// Arguments of `equiscan features`.
#[derive(Debug, clap::Args)]
pub struct FeaturesArgs {
    /// LAS, LAZ, PLY or E57 files (one scan of an E57 file as FILE.e57#NAME or
    /// FILE.e57#INDEX from 0; without it every scan, each placed by its pose).
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<PathBuf>,
    /// Output file (format from its extension: .npy, .ply, .csv, .las, .laz), or an existing
    /// folder, or with several inputs a folder (one `<input name>.<format>` per input).
    #[arg(short, long, value_name = "OUT")]
    pub output: PathBuf,
    /// Output format, overriding the extension (needed for a folder; default there: npy):
    /// npy (float32 matrix) or csv, each with its JSON sidecar `<file>.json`; ply (the centres
    /// with the columns as properties); las or laz (LAS 1.4 with Extra Bytes, at most 341
    /// columns).
    #[arg(long, value_name = "FORMAT", value_parser = str::parse::<Format>)]
    pub format: Option<Format>,
    /// Support radius in file units; repeat or give a comma list for several scales. Left out:
    /// 5 × the measured point spacing, rounded to two significant digits, printed.
    #[arg(
        short,
        long,
        value_delimiter = ',',
        value_name = "R",
        allow_negative_numbers = true
    )]
    pub radius: Vec<f32>,
    /// Maximum degree L of the spherical harmonics (0 to 12).
    #[arg(long, default_value_t = equiscan::descriptor::DEFAULT_DEGREE, value_name = "L")]
    pub degree: usize,
    /// Number of radial shells N.
    #[arg(long, default_value_t = equiscan::descriptor::DEFAULT_SHELLS, value_name = "N")]
    pub shells: usize,
    /// Descriptor version (1: the original definition; 2: degrees l ≥ 1 fade out at the
    /// centre). The output's recipe records it.
    #[arg(long, value_name = "V", default_value_t = equiscan::descriptor::RECIPE_VERSION)]
    pub descriptor_version: u32,
    /// Keep only the K nearest neighbours within the support radius (default: all).
    #[arg(long, value_name = "K")]
    pub max_neighbours: Option<usize>,
    /// Invariants to output, comma separated: norms, power, bispectrum.
    #[arg(long, default_value = "norms,power", value_name = "LIST")]
    pub invariants: String,
    /// Also output the equivariant coefficients c_nlm.
    #[arg(long)]
    pub keep_coefficients: bool,
    /// Descriptors at one point per voxel of this size (file units) instead of every point.
    #[arg(
        long,
        value_name = "SIZE",
        conflicts_with = "keypoints",
        allow_negative_numbers = true
    )]
    pub voxel: Option<f32>,
    /// Descriptors at the points of this cloud file (any readable format), placed by their
    /// global coordinates; a keypoint within 1e-4 × the support radius of an input point is
    /// taken to be that point, others are used where they are.
    #[arg(long, value_name = "FILE")]
    pub keypoints: Option<PathBuf>,
    /// Run even when the estimate says it would take more than an hour or more memory than
    /// --max-memory.
    #[arg(long)]
    pub force: bool,
    /// Memory the run may use besides the cloud and its index, e.g. 2G or 500M (default: half
    /// of the machine's memory).
    #[arg(long, value_name = "SIZE")]
    pub max_memory: Option<Size>,
    /// `-q`, `--json` (a summary per input), `--threads`.
    #[command(flatten)]
    pub common: CommonArgs,
}

/// The JSON summary of one input.
#[derive(Debug, Serialize)]
pub struct Summary {
    /// Input file.
    pub input: String,
    /// Files written, the data file first.
    pub outputs: Vec<String>,
    /// Points in the input.
    pub points: usize,
    /// Centres computed (rows).
    pub centres: usize,
    /// Wall-clock seconds from the index to the last row written (reading excluded).
    pub seconds: f64,
    /// Centres per second over `seconds`.
    pub centres_per_second: f64,
    /// Columns written (coordinates, counts, flags, invariants, coefficients).
    pub columns: usize,
    /// Support radii used, file units.
    pub radii: Vec<f32>,
    /// True when the radius was suggested from the point spacing.
    pub radius_suggested: bool,
    /// Centres without any neighbour at the first scale.
    pub centres_without_neighbours: usize,
}

/// Runs `features`; a failing input prints its one-line error and the others go on. Exit
/// code 0 when every input was written, 2 otherwise.
pub fn run(args: &FeaturesArgs) -> Result<u8> {
    let c = &args.common;
    // The recipe is checked before any file is read (a placeholder radius when none is given).
    let check = recipe(
        args,
        if args.radius.is_empty() {
            vec![1.0]
        } else {
            args.radius.clone()
        },
    )?;
    if let Some(v) = args.voxel
        && !(v.is_finite() && v > 0.0)
    {
        return Err(Error::invalid(
            format!("--voxel {v} is not a size greater than 0"),
            "give a voxel size such as 0.05 (file units)",
        ));
    }
    let jobs = plan(
        &args.inputs,
        &args.output,
        args.format,
        args.keypoints.as_deref(),
    )?;
    let pool = c.pool()?;
    let keypoints = match &args.keypoints {
        Some(p) => Some(read_cloud(p)?.0),
        None => None,
    };
    let mut code = 0;
    for Job {
        input,
        output,
        format,
    } in jobs
    {
        match pool.install(|| one(args, &check, keypoints.as_ref(), &input, &output, format)) {
            Ok(s) => {
                if c.json && !c.print_json(&s)? {
                    return Ok(code);
                }
                if !c.json {
                    print_summary(c, &s);
                }
            }
            Err(e) => {
                eprintln!("{e}");
                code = 2;
            }
        }
    }
    Ok(code)
}

fn print_summary(c: &CommonArgs, s: &Summary) {
    c.note(&format!(
        "{}: {} of {}, {}, {} ({} centres per second)",
        s.input,
        plural(s.centres, "centre", "centres"),
        plural(s.points, "point", "points"),
        plural(s.columns, "column", "columns"),
        seconds_text(s.seconds),
        group(s.centres_per_second.round() as usize),
    ));
    if s.centres_without_neighbours > 0 {
        c.note(&format!(
            "{}: {} ({:.1} %) found no neighbour within the support radius and are all zeros (flag 1); give a larger --radius if they matter",
            s.input,
            plural(s.centres_without_neighbours, "centre", "centres"),
            100.0 * s.centres_without_neighbours as f64 / s.centres.max(1) as f64
        ));
    }
    for f in &s.outputs {
        c.wrote(Path::new(f));
    }
}

fn recipe(args: &FeaturesArgs, radii: Vec<f32>) -> Result<Recipe> {
    Recipe::builder()
        .radii(radii)
        .version(args.descriptor_version)
        .degree(args.degree)
        .shells(args.shells)
        .max_neighbours(args.max_neighbours)
        .invariants(Invariants::parse(&args.invariants)?)
        .keep_coefficients(args.keep_coefficients)
        .build()
}

/// Reads one input, estimates the cost, computes and writes in chunks.
fn one(
    args: &FeaturesArgs,
    check: &Recipe,
    keypoints: Option<&Cloud>,
    input: &Path,
    output: &Path,
    format: Format,
) -> Result<Summary> {
    let c = &args.common;
    let (cloud, info) = read_cloud(input)?;
    let t0 = Instant::now();
    let index = KdIndex::new(&cloud.positions)
        .map_err(|_| Error::file(input, "the cloud has no point", "give a cloud with points"))?;
    let suggested = args.radius.is_empty();
    let radii = if suggested {
        let spacing = estimate_spacing_with(&cloud.positions, &index).ok_or_else(|| {
            Error::file(
                input,
                "the point spacing cannot be measured (fewer than two distinct points)",
                "give --radius",
            )
        })?;
        let r = suggested_radius(spacing);
        c.note(&format!(
            "{}: support radius {r} (5 × point spacing {spacing:.3}, rounded); give --radius to choose",
            input.display()
        ));
        vec![r]
    } else {
        check.radii().to_vec()
    };
    let recipe = recipe(args, radii.clone())?;
    let (centres, kind) = match (keypoints, args.voxel) {
        (Some(kp), _) => {
            let smallest = radii.iter().copied().fold(f32::INFINITY, f32::min);
            let (at, matched) = place_keypoints(&cloud, &index, kp, smallest);
            let file = args.keypoints.as_ref().map(|p| p.display().to_string());
            (
                CentreList::Positions(at),
                CentresInfo::Keypoints {
                    file,
                    matched_to_points: matched,
                },
            )
        }
        (None, Some(v)) => (
            CentreList::Points(voxel_downsample(&cloud.positions, v)),
            CentresInfo::Voxel { voxel: v },
        ),
        (None, None) => (CentreList::All(cloud.len()), CentresInfo::All),
    };
    check_cost(args, input, &cloud, &index, &centres, &recipe)?;
    let engine = Engine::new(recipe.clone());
    let spec = FileSpec {
        path: output.to_path_buf(),
        format,
        recipe,
        input: info,
        centres: kind,
        radius_suggested: suggested,
    };
    let mut writer = FeatureWriter::create(&cloud, spec, &centres)?;
    let progress = c.progress(&input.display().to_string(), centres.len(), "centres");
    let cb = |n: usize| progress.inc(n);
    let res = write_features(
        &engine,
        &cloud.positions,
        &index,
        &centres,
        &mut writer,
        Some(&cb),
    );
    progress.finish();
    res?;
    let written = writer.finish()?;
    let seconds = t0.elapsed().as_secs_f64();
    Ok(Summary {
        input: input.display().to_string(),
        outputs: written
            .files
            .iter()
            .map(|p| p.display().to_string())
            .collect(),
        points: cloud.len(),
        centres: written.rows,
        seconds,
        centres_per_second: written.rows as f64 / seconds.max(1e-9),
        columns: written.columns,
        radii,
        radius_suggested: suggested,
        centres_without_neighbours: written.counts.first().map_or(0, |s| s.without_neighbours),
    })
}

/// Refuses a run whose estimate exceeds the time or memory budget (unless `--force`); warns
/// when the radius is larger than the cloud.
fn check_cost(
    args: &FeaturesArgs,
    input: &Path,
    cloud: &Cloud,
    index: &KdIndex,
    centres: &CentreList,
    recipe: &Recipe,
) -> Result<()> {
    let c = &args.common;
    let threads = rayon::current_num_threads();
    let r = recipe.radii().iter().copied().fold(0.0f32, f32::max);
    if let Some((lo, hi)) = cloud.local_bounds() {
        let extent = (0..3)
            .map(|k| (hi[k] - lo[k]) as f64)
            .map(|d| d * d)
            .sum::<f64>()
            .sqrt();
        if r as f64 > extent {
            c.note(&format!(
                "{}: the support radius {r} is larger than the whole cloud ({:.3} corner to corner): every centre sees every point",
                input.display(),
                extent
            ));
        }
    }
    let cost = estimate(&cloud.positions, index, centres, recipe, threads);
    let secs = cost.seconds_on(threads);
    let budget = args
        .max_memory
        .map_or_else(super::common::default_memory_budget, |s| s.0);
    let what = format!(
        "{} × about {} within radius {r}: about {} on {} and {} of working memory",
        plural(cost.centres, "centre", "centres"),
        plural(
            cost.mean_neighbours.round() as usize,
            "neighbour",
            "neighbours"
        ),
        seconds_text(secs),
        plural(threads, "thread", "threads"),
        Size(cost.working_bytes),
    );
    if args.force {
        return Ok(());
    }
    if secs > TIME_BUDGET {
        return Err(Error::file(
            input,
            format!("this run would be long: {what}"),
            "give a smaller --radius, or --voxel SIZE for fewer centres, or --force to run anyway",
        ));
    }
    if cost.working_bytes > budget {
        return Err(Error::file(
            input,
            format!(
                "this run would need more memory than allowed ({}): {what}",
                Size(budget)
            ),
            "give a smaller --radius or --max-neighbours, a larger --max-memory, or --force",
        ));
    }
    Ok(())
}
