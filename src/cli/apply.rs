//! `equiscan apply FILE... --transform REPORT.json|MATRIX -o OUT`: move whole files by a
//! transform found earlier (a registration or inspection report) or given as 16 numbers.
//!
//! The library does the work ([`equiscan::io::apply`]); this file checks the arguments and
//! outputs before reading, picks each file's transform and output name, and prints. Exit
//! codes: 0 every file written, 2 an error (a failing file is reported and the others go on).

use std::path::{Path, PathBuf};

use equiscan::geometry::Rigid;
use equiscan::io::apply::{
    TransformSource, Transforms, apply_to_file, pose_for, read_transform_spec,
};
use equiscan::io::guard::{check_extension, check_folder, check_outputs};
use equiscan::io::split_scan;
use equiscan::{Error, Result};

use super::common::{CommonArgs, print_stdout};

/// Arguments of `equiscan apply`.
#[derive(Debug, clap::Args)]
pub struct ApplyArgs {
    /// Files to move (LAS, LAZ, PLY or E57; one scan of an E57 file as FILE.e57#NAME or
    /// FILE.e57#INDEX from 0), at full resolution.
    #[arg(required = true, value_name = "FILE")]
    pub files: Vec<PathBuf>,
    /// The transform: the JSON report of `align` (two scans: SOURCE into TARGET's frame;
    /// several scans: each FILE by its own pose, matched by name) or of `inspect`, or the 16
    /// numbers of a row-major 4×4 in one argument ("1 0 0 5  0 1 0 0  0 0 1 0  0 0 0 1").
    #[arg(
        long,
        short = 't',
        value_name = "REPORT.json|MATRIX",
        allow_hyphen_values = true
    )]
    pub transform: String,
    /// Output: a .las, .laz or .ply file (one FILE), or an existing folder (each FILE keeps
    /// its name; E57 becomes .laz).
    #[arg(short, long, value_name = "OUT")]
    pub output: PathBuf,
    /// Apply the inverse transform (move back).
    #[arg(long)]
    pub inverse: bool,
    /// Apply a report's transform even when its verdict is not `confident`.
    #[arg(long)]
    pub anyway: bool,
    /// `-q`, `--json` (one object per file written), `--threads`.
    #[command(flatten)]
    pub common: CommonArgs,
}

/// The output name in folder `dir` for `input`: the same name; an E57 scan selection
/// `a.e57#north` becomes `a_north.laz`, a whole E57 file `a.laz`.
fn output_in(dir: &Path, input: &Path) -> PathBuf {
    let (file, sel) = split_scan(input);
    let stem = file
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "moved".into());
    let ext = file
        .extension()
        .map(|e| e.to_string_lossy().to_ascii_lowercase())
        .unwrap_or_default();
    let ext = if matches!(ext.as_str(), "las" | "laz" | "ply") {
        ext
    } else {
        "laz".to_string()
    };
    let name = match sel {
        Some(s) => {
            let clean: String = s
                .chars()
                .map(|c| {
                    if c.is_alphanumeric() || c == '-' {
                        c
                    } else {
                        '_'
                    }
                })
                .collect();
            format!("{stem}_{clean}.{ext}")
        }
        None => format!("{stem}.{ext}"),
    };
    dir.join(name)
}

/// Runs `apply`; returns the exit code.
pub fn run(args: &ApplyArgs) -> Result<u8> {
    let c = &args.common;
    let spec = read_transform_spec(&args.transform)?;
    let from = match &spec.source {
        TransformSource::Numbers => "the 16 numbers given".to_string(),
        TransformSource::Report { path, verdict } => {
            if let Some(v) = verdict
                && v != "confident"
                && !args.anyway
            {
                return Err(Error::file(
                    path,
                    format!("the report's verdict is {v}: its transform is not a confident result"),
                    "check the registration, or give --anyway to apply it all the same",
                ));
            }
            path.clone()
        }
    };
    // Each file's transform, before anything is read.
    let mut jobs: Vec<(PathBuf, Rigid)> = Vec::new();
    for f in &args.files {
        let tf = match &spec.transforms {
            Transforms::One(tf) => *tf,
            Transforms::PerScan(poses) => match pose_for(poses, f) {
                Some((_, Some(tf))) => *tf,
                Some((name, None)) => {
                    return Err(Error::file(
                        f,
                        format!(
                            "the report places {name} nowhere (no confident chain of pairs reaches it)"
                        ),
                        "leave this file out, or register it again with more overlap",
                    ));
                }
                None => {
                    let names: Vec<&str> = poses.iter().map(|(n, _)| n.as_str()).collect();
                    return Err(Error::file(
                        f,
                        format!("is not among the report's scans ({})", names.join(", ")),
                        "give the files the report registered (by the same name)",
                    ));
                }
            },
        };
        jobs.push((f.clone(), if args.inverse { tf.inverse() } else { tf }));
    }
    let into_folder = args.output.is_dir();
    if args.files.len() > 1 && !into_folder {
        check_folder(&args.output)?;
    }
    let outputs: Vec<PathBuf> = args
        .files
        .iter()
        .map(|f| {
            if into_folder {
                output_in(&args.output, f)
            } else {
                args.output.clone()
            }
        })
        .collect();
    for o in &outputs {
        check_extension(o, &["las", "laz", "ply"], "a LAS, LAZ or PLY point cloud")?;
    }
    let mut inputs: Vec<&Path> = args.files.iter().map(PathBuf::as_path).collect();
    if let TransformSource::Report { .. } = spec.source {
        inputs.push(Path::new(&args.transform));
    }
    let outs: Vec<&Path> = outputs.iter().map(PathBuf::as_path).collect();
    check_outputs(&inputs, &outs)?;
    let pool = c.pool()?;
    let mut code = 0;
    for ((file, tf), out) in jobs.iter().zip(&outputs) {
        match pool.install(|| apply_to_file(file, out, tf, &from)) {
            Ok(done) => {
                c.wrote(out);
                if c.json {
                    c.print_json(&done)?;
                } else if c.chatty() {
                    let t = tf.translation;
                    let unit = done.units.as_deref().unwrap_or("file units");
                    let mut line = format!(
                        "{}: {} points moved (turn {:.4}°, shift {:.4} {:.4} {:.4} {unit}) into {}",
                        done.input,
                        done.points,
                        tf.angle_deg(),
                        t.x,
                        t.y,
                        t.z,
                        done.output
                    );
                    if let (Some(s), Some(o)) = (done.scale, done.offset) {
                        let whose = if done.path == "records" {
                            " (the input's)"
                        } else {
                            ""
                        };
                        line += &format!(
                            "; LAS scale {} {} {}{whose}, offset {} {} {}",
                            s[0], s[1], s[2], o[0], o[1], o[2]
                        );
                    }
                    if let Some(crs) = &done.crs {
                        line += &format!("; CRS {crs} kept");
                    }
                    if !print_stdout(&format!("{line}\n")) {
                        return Ok(code);
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
