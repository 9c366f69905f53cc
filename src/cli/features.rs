//! `equiscan features INPUT... -o OUT`: rotation-invariant descriptors per point, written as
//! NPY or CSV (each with its own `<file>.json` sidecar), PLY or LAS/LAZ. The file layout and
//! the writing belong to [`equiscan::descriptor::output`]; this file parses, checks the
//! outputs before any work, calls the library and prints.

use std::path::{Path, PathBuf};
use std::time::Instant;

use equiscan::descriptor::output::{
    Budget, CentreChoice, FeatureWriter, FileSpec, Format, Job, Summary, check_budget,
    choose_centres, plan, radius_from_spacing, write_features_prepared,
};
use equiscan::descriptor::{Engine, Recipe};
use equiscan::io::read_cloud;
use equiscan::spatial::KdIndex;
use equiscan::{Cloud, Error, Result};

use super::common::{CommonArgs, Size, default_memory_budget};
use super::recipe_args::RecipeArgs;

/// Longest estimated run (wall clock) started without `--force`, seconds.
const TIME_BUDGET: f64 = 3600.0;

/// Arguments of `equiscan features`.
#[derive(Debug, clap::Args)]
pub struct FeaturesArgs {
    /// LAS, LAZ, PLY or E57 files (one scan of an E57 file as FILE.e57#NAME or
    /// FILE.e57#INDEX from 0; without it every scan, each placed by its pose).
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<PathBuf>,
    /// Output file (format from its extension: .npy, .ply, .csv, .las, .laz, .parquet), or an existing
    /// folder, or with several inputs a folder (one `<input name>.<format>` per input).
    #[arg(short, long, value_name = "OUT")]
    pub output: PathBuf,
    /// Output format, overriding the extension (needed for a folder; default there: npy):
    /// npy (float32 matrix) or csv, each with its JSON sidecar `<file>.json`; ply (the centres
    /// with the columns as properties); las or laz (LAS 1.4 with Extra Bytes, at most 341
    /// columns); parquet (x, y, z as f64, the point attributes, the columns as f32; recipe
    /// and CRS in the file's metadata).
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
    /// `--degree`, `--shells`, `--descriptor-version`, `--max-neighbours`, `--invariants`,
    /// `--keep-coefficients`.
    #[command(flatten)]
    pub recipe: RecipeArgs,
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

/// Runs `features`; a failing input prints its one-line error and the others go on. Exit
/// code 0 when every input was written, 2 otherwise.
pub fn run(args: &FeaturesArgs) -> Result<u8> {
    let c = &args.common;
    // The recipe is checked before any file is read (a placeholder radius when none is given).
    let check = args.recipe.recipe(if args.radius.is_empty() {
        vec![1.0]
    } else {
        args.radius.clone()
    })?;
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
                    s.lines().iter().for_each(|l| c.note(l));
                    s.outputs.iter().for_each(|f| c.wrote(Path::new(f)));
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
    let no_point = || Error::file(input, "the cloud has no point", "give a cloud with points");
    if cloud.is_empty() {
        return Err(no_point());
    }
    let suggested = args.radius.is_empty();
    // A k-d tree only where something needs it: the point spacing (suggested radius) or the
    // keypoints' placement; otherwise the cost estimate and the search use the cell grid
    // (`Engine::prepare_own` builds a tree only when the grid cannot serve).
    let index = (suggested || keypoints.is_some())
        .then(|| KdIndex::new(&cloud.positions).map_err(|_| no_point()))
        .transpose()?;
    let radii = match &index {
        Some(index) if suggested => {
            let (r, note) = radius_from_spacing(input, &cloud, index)?;
            c.note(&note);
            vec![r]
        }
        _ => check.radii().to_vec(),
    };
    let recipe = args.recipe.recipe(radii.clone())?;
    let file = args.keypoints.as_ref().map(|p| p.display().to_string());
    let choice = match (keypoints, args.voxel) {
        (Some(cloud), _) => CentreChoice::Keypoints {
            cloud,
            file: file.as_deref(),
        },
        (None, Some(v)) => CentreChoice::Voxel(v),
        (None, None) => CentreChoice::All,
    };
    let (centres, kind) = choose_centres(&cloud, index.as_ref(), choice, &radii)?;
    let engine = Engine::new(recipe.clone());
    let prepared = match &index {
        Some(index) => engine.prepare(&cloud.positions, index)?,
        None => engine.prepare_own(&cloud.positions)?,
    };
    let budget = Budget {
        seconds: TIME_BUDGET,
        memory: args.max_memory.map_or_else(default_memory_budget, |s| s.0),
        force: args.force,
        threads: rayon::current_num_threads(),
    };
    for note in check_budget(input, &cloud, &prepared, &centres, &recipe, &budget)? {
        c.note(&note);
    }
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
    let res = write_features_prepared(&engine, &prepared, &centres, &mut writer, Some(&cb));
    progress.finish();
    res?;
    let written = writer.finish()?;
    let seconds = t0.elapsed().as_secs_f64();
    Ok(Summary::new(
        input,
        cloud.len(),
        &written,
        seconds,
        radii,
        suggested,
    ))
}
