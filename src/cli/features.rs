//! `equiscan features INPUT... -o OUT`: rotation-invariant descriptors per point, written as
//! NPY (+ JSON sidecar), PLY, CSV (+ JSON sidecar), or a LAS/LAZ copy with Extra Bytes.
//!
//! Output columns, in order: for NPY and CSV `x_local y_local z_local` (the centre in the
//! input's local frame; the sidecar gives the origin to add), for PLY `x y z` (global, double);
//! then per scale `{s}_count {s}_flags`; then the invariants ([`Recipe::column_names`]); then,
//! with `--keep-coefficients`, the coefficients ([`Recipe::coefficient_names`], layout
//! `[scale][n][l² + l + m]`). LAS/LAZ outputs hold the centre points with their attributes and
//! the same columns (without the local coordinates) as f32 Extra Bytes.

use std::io::{IsTerminal, Write};
use std::path::{Path, PathBuf};
use std::time::Instant;

use equiscan::descriptor::{Centres, Engine, Features, Invariants, Recipe};
use equiscan::io::{Column, FileInfo, LasOptions, read_cloud};
use equiscan::spatial::{
    KdIndex, estimate_spacing_with, suggested_support_radius, voxel_downsample,
};
use equiscan::{Cloud, Error, Result};
use serde::Serialize;

/// A keypoint within this fraction of the smallest support radius of an input point is taken
/// to be that point.
const SNAP: f32 = 1e-4;

/// Arguments of `equiscan features`.
#[derive(Debug, clap::Args)]
pub struct FeaturesArgs {
    /// LAS, LAZ or PLY files.
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<PathBuf>,
    /// Output file (format from its extension: .npy, .ply, .csv, .las, .laz), or a folder when
    /// several inputs are given (one `<input name>.<format>` per input).
    #[arg(short, long, value_name = "OUT")]
    pub output: PathBuf,
    /// Output format, overriding the extension (needed for a folder; default there: npy).
    #[arg(long, value_enum)]
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
    #[arg(long, value_name = "SIZE", conflicts_with = "keypoints")]
    pub voxel: Option<f32>,
    /// Descriptors at the points of this cloud file (any readable format), placed by their
    /// global coordinates; a keypoint within 1e-4 × the support radius of an input point is
    /// taken to be that point, others are used where they are.
    #[arg(long, value_name = "FILE")]
    pub keypoints: Option<PathBuf>,
    /// Worker threads (default: all cores).
    #[arg(long, value_name = "N")]
    pub threads: Option<usize>,
    /// Print nothing but errors.
    #[arg(short, long)]
    pub quiet: bool,
    /// Print a JSON summary per input on stdout.
    #[arg(long)]
    pub json: bool,
}

/// Output formats.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Format {
    /// NumPy float32 matrix plus a JSON sidecar.
    Npy,
    /// Binary PLY with the columns as vertex properties.
    Ply,
    /// Comma-separated values plus a JSON sidecar.
    Csv,
    /// LAS 1.4 with Extra Bytes.
    Las,
    /// Compressed LAS 1.4 with Extra Bytes.
    Laz,
}

impl Format {
    fn from_path(p: &Path) -> Option<Format> {
        let ext = p.extension()?.to_str()?.to_ascii_lowercase();
        Some(match ext.as_str() {
            "npy" => Format::Npy,
            "ply" => Format::Ply,
            "csv" => Format::Csv,
            "las" => Format::Las,
            "laz" => Format::Laz,
            _ => return None,
        })
    }

    fn ext(self) -> &'static str {
        match self {
            Format::Npy => "npy",
            Format::Ply => "ply",
            Format::Csv => "csv",
            Format::Las => "las",
            Format::Laz => "laz",
        }
    }
}

/// The JSON summary of one input.
#[derive(Debug, Serialize)]
pub struct Summary {
    /// Input file.
    pub input: String,
    /// Output file.
    pub output: String,
    /// Points in the input.
    pub points: usize,
    /// Centres computed.
    pub centres: usize,
    /// Wall-clock seconds for the descriptors (index, spacing and computation; no file I/O).
    pub seconds: f64,
    /// Centres per second over `seconds`.
    pub points_per_second: f64,
    /// Columns written (coordinates, counts, flags, invariants, coefficients).
    pub columns: usize,
    /// Support radii used, file units.
    pub radii: Vec<f32>,
    /// True when the radius was suggested from the point spacing.
    pub radius_suggested: bool,
    /// Centres without any neighbour at the first scale.
    pub centres_without_neighbours: usize,
}

/// Runs `features`; a failing input prints `path: error` and the others go on. Exit code 0
/// when every input was written, 2 otherwise.
pub fn run(args: &FeaturesArgs) -> Result<u8> {
    let invariants = Invariants::parse(&args.invariants)?;
    // Validate the recipe once up front (with a placeholder radius when none is given), so
    // that a bad option fails before any file is read.
    let check = Recipe::builder()
        .radii(if args.radius.is_empty() {
            vec![1.0]
        } else {
            args.radius.clone()
        })
        .version(args.descriptor_version)
        .degree(args.degree)
        .shells(args.shells)
        .max_neighbours(args.max_neighbours)
        .invariants(invariants)
        .keep_coefficients(args.keep_coefficients)
        .build()?;
    if let Some(v) = args.voxel
        && !(v.is_finite() && v > 0.0)
    {
        return Err(Error::invalid(
            format!("--voxel {v} is not a size greater than 0"),
            "give a voxel size such as 0.05 (file units)",
        ));
    }
    if args.threads == Some(0) {
        return Err(Error::invalid(
            "--threads 0 leaves no worker",
            "give at least 1 thread, or leave it out",
        ));
    }
    let jobs = plan_outputs(args)?;
    let keypoints = match &args.keypoints {
        Some(p) => Some(read_cloud(p)?.0),
        None => None,
    };
    let pool = {
        let mut b = rayon::ThreadPoolBuilder::new();
        if let Some(t) = args.threads {
            b = b.num_threads(t);
        }
        b.build().map_err(|e| {
            Error::invalid(
                format!("cannot start worker threads: {e}"),
                "give fewer --threads",
            )
        })?
    };
    let mut code = 0;
    for (input, output, format) in jobs {
        let res = pool.install(|| one(args, &check, keypoints.as_ref(), &input, &output, format));
        match res {
            Ok(summary) => {
                if args.json {
                    let text = serde_json::to_string(&summary).map_err(|e| {
                        Error::invalid(
                            format!("cannot encode the summary: {e}"),
                            "report this as a bug",
                        )
                    })?;
                    let mut out = std::io::stdout().lock();
                    if writeln!(out, "{text}").and_then(|_| out.flush()).is_err() {
                        return Ok(code);
                    }
                } else if !args.quiet {
                    eprintln!(
                        "{}: {} centres of {} points, {} columns, {:.2} s ({:.0} centres/s) -> {}",
                        summary.input,
                        summary.centres,
                        summary.points,
                        summary.columns,
                        summary.seconds,
                        summary.points_per_second,
                        summary.output
                    );
                    if summary.centres_without_neighbours > 0 {
                        eprintln!(
                            "{}: {} centres ({:.1} %) found no neighbour within the support radius and are all zeros (flag 1); give a larger --radius if they matter",
                            summary.input,
                            summary.centres_without_neighbours,
                            100.0 * summary.centres_without_neighbours as f64
                                / summary.centres.max(1) as f64
                        );
                    }
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

/// `(input, output, format)` per input, checked before any work.
fn plan_outputs(args: &FeaturesArgs) -> Result<Vec<(PathBuf, PathBuf, Format)>> {
    if args.inputs.len() == 1 && !args.output.is_dir() {
        let format = match args.format.or_else(|| Format::from_path(&args.output)) {
            Some(f) => f,
            None => {
                return Err(Error::invalid(
                    format!("cannot tell the output format of {}", args.output.display()),
                    "end the output name in .npy, .ply, .csv, .las or .laz, or give --format",
                ));
            }
        };
        return Ok(vec![(args.inputs[0].clone(), args.output.clone(), format)]);
    }
    if args.output.exists() && !args.output.is_dir() {
        return Err(Error::file(
            &args.output,
            "is a file, but several inputs need an output folder",
            "give a folder for -o",
        ));
    }
    let format = args.format.unwrap_or(Format::Npy);
    let mut seen = std::collections::HashSet::new();
    let mut jobs = Vec::new();
    for input in &args.inputs {
        let stem = input
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_else(|| "features".to_string());
        if !seen.insert(stem.clone()) {
            return Err(Error::file(
                input,
                format!("another input also has the name {stem}, so their outputs would collide"),
                "run them separately or rename one",
            ));
        }
        let out = args.output.join(format!("{stem}.{}", format.ext()));
        jobs.push((input.clone(), out, format));
    }
    if !args.output.exists() {
        std::fs::create_dir_all(&args.output).map_err(|e| Error::io(&args.output, &e))?;
    }
    Ok(jobs)
}

/// Reads one input, computes, writes.
fn one(
    args: &FeaturesArgs,
    check: &Recipe,
    keypoints: Option<&Cloud>,
    input: &Path,
    output: &Path,
    format: Format,
) -> Result<Summary> {
    let (cloud, info) = read_cloud(input)?;
    let t0 = Instant::now();
    let index = KdIndex::new(&cloud.positions)
        .map_err(|e| Error::file(input, e.to_string(), "give a cloud with points"))?;
    let (radii, suggested) = if args.radius.is_empty() {
        let spacing = estimate_spacing_with(&cloud.positions, &index).ok_or_else(|| {
            Error::file(
                input,
                "the point spacing cannot be measured (fewer than two distinct points)",
                "give --radius",
            )
        })?;
        let r = round_2_significant(suggested_support_radius(spacing));
        if !args.quiet && !args.json {
            eprintln!(
                "{}: support radius {r} (5 × point spacing {spacing:.4}, rounded); give --radius to choose",
                input.display()
            );
        }
        (vec![r], true)
    } else {
        (args.radius.clone(), false)
    };
    let recipe = Recipe::builder()
        .radii(radii.clone())
        .version(check.version())
        .degree(check.degree())
        .shells(check.shells())
        .max_neighbours(check.max_neighbours())
        .invariants(check.invariants())
        .keep_coefficients(check.keep_coefficients())
        .build()?;
    let engine = Engine::new(recipe);
    let mut centres_kind;
    let features = match keypoints {
        Some(kp) => {
            centres_kind = serde_json::json!({"kind": "keypoints", "file": args.keypoints.as_ref().map(|p| p.display().to_string())});
            // File formats round coordinates, so a keypoint taken from the input lands a hair
            // off its point; within SNAP × the smallest radius it is taken to be that point.
            let tol = SNAP * radii.iter().copied().fold(f32::INFINITY, f32::min);
            let mut matched = 0usize;
            let at: Vec<[f32; 3]> = (0..kp.len())
                .map(|i| {
                    let g = kp.global(i);
                    let local: [f32; 3] = std::array::from_fn(|k| (g[k] - cloud.origin[k]) as f32);
                    let (j, d2) = index.nearest_one(local);
                    if d2.sqrt() <= tol {
                        matched += 1;
                        cloud.positions[j]
                    } else {
                        local
                    }
                })
                .collect();
            centres_kind["matched_to_points"] = serde_json::json!(matched);
            with_progress(args, at.len(), |cb| {
                Ok(engine.compute_at_with(&cloud.positions, &index, &at, Some(cb)))
            })?
        }
        None => {
            let centres = match args.voxel {
                Some(v) => {
                    centres_kind = serde_json::json!({"kind": "voxel", "voxel": v});
                    Centres::Indices(voxel_downsample(&cloud.positions, v))
                }
                None => {
                    centres_kind = serde_json::json!({"kind": "all"});
                    Centres::All
                }
            };
            let n = match &centres {
                Centres::Indices(ix) => ix.len(),
                _ => cloud.len(),
            };
            with_progress(args, n, |cb| {
                engine.compute_with_index(&cloud.positions, &index, &centres, Some(cb))
            })?
        }
    };
    let seconds = t0.elapsed().as_secs_f64();
    drop(index);
    let centres = features.len();
    let without = (0..centres).filter(|&i| features.count(i, 0) == 0).count();
    let columns = write_features(
        &cloud,
        &info,
        features,
        output,
        format,
        centres_kind,
        suggested,
    )?;
    Ok(Summary {
        input: input.display().to_string(),
        output: output.display().to_string(),
        points: cloud.len(),
        centres,
        seconds,
        points_per_second: centres as f64 / seconds.max(1e-9),
        columns,
        radii,
        radius_suggested: suggested,
        centres_without_neighbours: without,
    })
}

/// `x` rounded to two significant digits (a suggested radius is a rule of thumb; a round value
/// gives readable column names such as `r1p4`).
fn round_2_significant(x: f32) -> f32 {
    if !(x.is_finite() && x > 0.0) {
        return x;
    }
    let e = (x as f64).log10().floor() as i32 - 1;
    let p = 10f64.powi(e);
    ((x as f64 / p).round() * p) as f32
}

/// Runs `f` with a progress callback: a bar on stderr when it is a terminal and not `--quiet`.
fn with_progress<T>(
    args: &FeaturesArgs,
    total: usize,
    f: impl FnOnce(&(dyn Fn(usize) + Sync)) -> Result<T>,
) -> Result<T> {
    let show = !args.quiet && total > 0 && std::io::stderr().is_terminal();
    let bar = if show {
        let b = indicatif::ProgressBar::new(total as u64);
        b.set_style(
            indicatif::ProgressStyle::with_template("{bar:40} {pos}/{len} centres, {eta} left")
                .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
        );
        b
    } else {
        indicatif::ProgressBar::hidden()
    };
    let cb = |n: usize| bar.inc(n as u64);
    let out = f(&cb);
    bar.finish_and_clear();
    out
}

/// Writes the features; returns the number of columns written. Takes the features by value
/// so that their matrices are freed as soon as the writer's copy exists (peak: one copy).
fn write_features(
    cloud: &Cloud,
    info: &FileInfo,
    f: Features,
    output: &Path,
    format: Format,
    centres: serde_json::Value,
    suggested: bool,
) -> Result<usize> {
    let rows = f.len();
    let recipe = f.recipe.clone();
    let ns = recipe.scales();
    let with_local = matches!(format, Format::Npy | Format::Csv);
    let mut names: Vec<String> = Vec::new();
    if with_local {
        names.extend(["x_local", "y_local", "z_local"].map(String::from));
    }
    names.extend(recipe.count_column_names());
    names.extend(f.columns.iter().cloned());
    if f.coefficients.is_some() {
        names.extend(recipe.coefficient_names());
    }
    let metadata = serde_json::json!({
        "input": info.path,
        "origin": cloud.origin,
        "coordinates": "x_local, y_local, z_local are f32 offsets from origin (file units)",
        "recipe": recipe,
        "centres": centres,
        "centre_indices": match (&f.indices, centres.get("kind").and_then(|k| k.as_str())) {
            (Some(ix), Some("voxel")) => serde_json::json!(ix),
            // Every point: row i is point i; keypoints: row i is keypoint i.
            _ => serde_json::Value::Null,
        },
        "radius_suggested": suggested,
        "counts": count_summary(&f),
        "layout": "rows follow the centres; per scale count and flags, then invariants \
                   (norms l outer n inner; power spectrum l, n, n' >= n; bispectrum n, l1 <= l2, l), \
                   then coefficients [scale][n][l^2 + l + m]",
    });
    // One row of the output, in the order of `names`.
    let row = |i: usize, out: &mut Vec<f32>| {
        if with_local {
            out.extend_from_slice(&f.positions[i]);
        }
        for s in 0..ns {
            out.push(f.count(i, s) as f32);
            out.push(f.flag(i, s) as f32);
        }
        out.extend_from_slice(f.row(i));
        if let Some(k) = &f.coefficients {
            let per = k.len() / rows.max(1);
            out.extend_from_slice(&k[i * per..(i + 1) * per]);
        }
    };
    if format == Format::Npy {
        // Streamed row by row from the features (no second copy of the matrix), in the layout
        // of io::write_npy_with_sidecar: the matrix, then `<name>.json` beside it.
        let side = output.with_extension("json");
        if side == output {
            return Err(Error::file(
                output,
                "the matrix and its JSON sidecar would have the same name",
                "name the matrix file with the extension .npy",
            ));
        }
        equiscan::io::write_atomic(output, |w| {
            let io = |e: std::io::Error| Error::io(output, &e);
            w.write_all(&equiscan::io::npy_header(rows, names.len()))
                .map_err(io)?;
            let (mut vals, mut bytes) = (Vec::new(), Vec::new());
            for i in 0..rows {
                vals.clear();
                bytes.clear();
                row(i, &mut vals);
                for v in &vals {
                    bytes.extend_from_slice(&v.to_le_bytes());
                }
                w.write_all(&bytes).map_err(io)?;
            }
            Ok(())
        })?;
        let doc = serde_json::json!({
            "file": output.file_name().map(|f| f.to_string_lossy().into_owned()),
            "dtype": "float32",
            "order": "C",
            "rows": rows,
            "columns": names,
            "metadata": metadata,
        });
        write_json(&side, &doc)?;
        return Ok(names.len());
    }
    // Column-major copies for the other writers.
    let nc = names.len();
    let mut cols: Vec<Vec<f32>> = (0..nc).map(|_| Vec::with_capacity(rows)).collect();
    let mut buf = Vec::with_capacity(nc);
    for i in 0..rows {
        buf.clear();
        row(i, &mut buf);
        for (c, v) in cols.iter_mut().zip(&buf) {
            c.push(*v);
        }
    }
    let centre_cloud = match &f.indices {
        Some(ix) => cloud.select(ix),
        None => Cloud::new(cloud.origin, f.positions.clone()),
    };
    drop(f);
    let columns: Vec<Column<'_>> = names
        .iter()
        .zip(&cols)
        .map(|(n, v)| Column::new(n, v))
        .collect();
    match format {
        Format::Npy => unreachable!("written above"),
        Format::Csv => {
            equiscan::io::write_csv(output, &columns)?;
            let doc = serde_json::json!({
                "file": output.file_name().map(|f| f.to_string_lossy().into_owned()),
                "rows": rows,
                "columns": names,
                "metadata": metadata,
            });
            write_json(&output.with_extension("json"), &doc)?;
        }
        Format::Ply => equiscan::io::write_ply(output, &centre_cloud, &columns)?,
        Format::Las | Format::Laz => {
            let opts = LasOptions::like(info);
            equiscan::io::write_las_with(output, &centre_cloud, &columns, &opts)?
        }
    }
    Ok(columns.len())
}

/// Writes pretty JSON and a newline to `path`, atomically.
fn write_json(path: &Path, doc: &serde_json::Value) -> Result<()> {
    let text = serde_json::to_string_pretty(doc)
        .map_err(|e| Error::file(path, e.to_string(), "report this as a bug"))?;
    equiscan::io::write_atomic(path, |w| {
        w.write_all(text.as_bytes())
            .and_then(|_| w.write_all(b"\n"))
            .map_err(|e| Error::io(path, &e))
    })
}

/// Per scale: smallest, mean and largest neighbour count, and centres without neighbours.
fn count_summary(f: &Features) -> serde_json::Value {
    let ns = f.recipe.scales();
    let per: Vec<serde_json::Value> = (0..ns)
        .map(|s| {
            let c: Vec<u32> = (0..f.len()).map(|i| f.count(i, s)).collect();
            let mean = c.iter().map(|&v| v as f64).sum::<f64>() / c.len().max(1) as f64;
            serde_json::json!({
                // the radius as written in the recipe (shortest f32 decimal), not widened
                "radius": format!("{}", f.recipe.radii()[s]).parse::<f64>().unwrap_or(f64::NAN),
                "min": c.iter().min(),
                "mean": mean,
                "max": c.iter().max(),
                "without_neighbours": c.iter().filter(|&&v| v == 0).count(),
            })
        })
        .collect();
    serde_json::Value::Array(per)
}
