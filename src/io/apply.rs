//! Moving whole files by a rigid transform: where the transform comes from (a registration or
//! inspection report, or 16 numbers) and writing the moved file with everything it carries.
//!
//! Transforms are row-major 4×4 in file coordinates (f64), mapping the file's coordinates to
//! the new frame, as every report of this crate writes them. LAS/LAZ into LAS/LAZ is moved
//! record by record in f64 (the LAS module's `move_las`: every field and Extra Byte kept, the
//! input's scale kept, offsets chosen near the moved points, a span the scale cannot hold
//! refused). Any other pairing of formats goes through a [`Cloud`]: coordinates are moved in
//! f64 and stored as f32 offsets about a whole-unit origin near the points (steps of at most
//! 0.06 mm within 1 km of it), then written by the output's writer; normals are turned; the
//! CRS is written where the output can hold it (LAS records, a PLY comment).

use std::path::Path;

use serde::Serialize;

use crate::cloud::Cloud;
use crate::error::{Error, Result};
use crate::geometry::Rigid;

use super::{FileInfo, LasOptions, read_cloud, sniff, split_scan, write_las_with};

/// User id of our own LAS record in a moved file.
pub const APPLIED_USER_ID: &str = "equiscan";
/// Record id of the "applied transform" record (the registration export uses 1001).
pub const APPLIED_RECORD_ID: u16 = 1002;

/// Where a transform came from.
#[derive(Debug, Clone, PartialEq)]
pub enum TransformSource {
    /// Sixteen numbers given on the command line.
    Numbers,
    /// A report file: its path and verdict, when it has one.
    Report {
        /// The report as named by the caller.
        path: String,
        /// The report's `verdict` (`confident`, `ambiguous`, `not_found`, …), when present.
        verdict: Option<String>,
    },
}

/// The transform(s) to apply.
#[derive(Debug, Clone, PartialEq)]
pub enum Transforms {
    /// One transform for every file.
    One(Rigid),
    /// One transform per scan of a multi-scan registration (`poses`: the scan as the report
    /// names it, and its transform into the first scan's frame, `None` when not placed).
    PerScan(Vec<(String, Option<Rigid>)>),
}

/// A transform specification read from `--transform`.
#[derive(Debug, Clone, PartialEq)]
pub struct TransformSpec {
    /// What to apply.
    pub transforms: Transforms,
    /// Where it came from.
    pub source: TransformSource,
}

/// A 4×4 from a JSON value: 4 rows of 4 numbers, or 16 numbers row by row.
fn rows_of(v: &serde_json::Value) -> Option<[[f64; 4]; 4]> {
    if let Ok(rows) = serde_json::from_value::<[[f64; 4]; 4]>(v.clone()) {
        return Some(rows);
    }
    let flat: [f64; 16] = serde_json::from_value(v.clone()).ok()?;
    Some(std::array::from_fn(|i| {
        std::array::from_fn(|j| flat[4 * i + j])
    }))
}

fn rigid(what: &Path, rows: &[[f64; 4]; 4]) -> Result<Rigid> {
    if !rows.iter().flatten().all(|v| v.is_finite()) {
        return Err(Error::file(
            what,
            "the transform holds a number that is not finite",
            "give finite numbers",
        ));
    }
    Rigid::from_rows(rows).ok_or_else(|| {
        Error::file(
            what,
            "the 4×4 is not a rigid transform (its upper-left 3×3 is not a rotation, or its last row is not 0 0 0 1)",
            "give a rotation with a translation, row by row, last row 0 0 0 1",
        )
    })
}

/// Reads `--transform`: the path of a JSON report, or 16 numbers (row by row, separated by
/// spaces or commas).
///
/// From a report: a top-level `transform` (registration of a pair, an inspection) as 4 rows of
/// 4 numbers or 16 numbers; else `poses` (a registration of several scans: `file` and
/// `transform` per scan, each into the first scan's frame); else `matrix`; else the document
/// itself as a 4×4. The report's `verdict` is returned for the caller to judge.
pub fn read_transform_spec(spec: &str) -> Result<TransformSpec> {
    let path = Path::new(spec);
    if path.is_file() {
        return read_report(path);
    }
    let numbers: Vec<&str> = spec
        .split(|c: char| c.is_whitespace() || c == ',')
        .filter(|s| !s.is_empty())
        .collect();
    let parsed: Option<Vec<f64>> = numbers.iter().map(|s| s.parse().ok()).collect();
    match parsed {
        Some(v) if v.len() == 16 => {
            let rows = std::array::from_fn(|i| std::array::from_fn(|j| v[4 * i + j]));
            Ok(TransformSpec {
                transforms: Transforms::One(rigid(Path::new("--transform"), &rows)?),
                source: TransformSource::Numbers,
            })
        }
        Some(v) if !v.is_empty() => Err(Error::invalid(
            format!("--transform has {} numbers, a 4×4 needs 16", v.len()),
            "give the 16 numbers of the matrix row by row, e.g. \"1 0 0 5  0 1 0 0  0 0 1 0  0 0 0 1\"",
        )),
        _ => Err(Error::invalid(
            format!("--transform {spec:?} is neither a report file nor 16 numbers"),
            "give the JSON report of align or inspect, or the 16 numbers of a 4×4 row by row",
        )),
    }
}

fn read_report(path: &Path) -> Result<TransformSpec> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, &e))?;
    let v: serde_json::Value = serde_json::from_str(&text).map_err(|e| {
        Error::file(
            path,
            format!("is not valid JSON ({e})"),
            "give the JSON report written by align or inspect",
        )
    })?;
    let verdict = v
        .get("verdict")
        .and_then(|x| x.as_str())
        .map(str::to_string);
    let source = TransformSource::Report {
        path: path.display().to_string(),
        verdict,
    };
    if let Some(t) = v.get("transform") {
        let rows = rows_of(t).ok_or_else(|| {
            Error::file(
                path,
                "its `transform` is not a 4×4",
                "give a report whose transform has 4 rows of 4 numbers",
            )
        })?;
        return Ok(TransformSpec {
            transforms: Transforms::One(rigid(path, &rows)?),
            source,
        });
    }
    if let Some(poses) = v.get("poses").and_then(|p| p.as_array()) {
        let mut out = Vec::new();
        for p in poses {
            let file = p.get("file").and_then(|f| f.as_str()).unwrap_or("");
            let tf = match p.get("transform") {
                None | Some(serde_json::Value::Null) => None,
                Some(t) => Some(rigid(
                    path,
                    &rows_of(t).ok_or_else(|| {
                        Error::file(
                            path,
                            format!("the pose of {file} is not a 4×4"),
                            "give the report written by align",
                        )
                    })?,
                )?),
            };
            out.push((file.to_string(), tf));
        }
        return Ok(TransformSpec {
            transforms: Transforms::PerScan(out),
            source,
        });
    }
    let m = v.get("matrix").unwrap_or(&v);
    match rows_of(m) {
        Some(rows) => Ok(TransformSpec {
            transforms: Transforms::One(rigid(path, &rows)?),
            source,
        }),
        None => Err(Error::file(
            path,
            "holds no transform (no `transform`, `poses` or `matrix`, and is not a 4×4)",
            "give the JSON report of align or inspect, or a file with 4 rows of 4 numbers",
        )),
    }
}

/// The transform of a multi-scan report for `file`: the pose whose `file` is the same path
/// text, else the same file on disk, else the same file name.
pub fn pose_for<'a>(
    poses: &'a [(String, Option<Rigid>)],
    file: &Path,
) -> Option<&'a (String, Option<Rigid>)> {
    let text = file.display().to_string();
    let (disk, sel) = split_scan(file);
    poses
        .iter()
        .find(|(f, _)| *f == text)
        .or_else(|| {
            poses.iter().find(|(f, _)| {
                let (pd, psel) = split_scan(Path::new(f));
                psel == sel && super::guard::same_file(&pd, &disk)
            })
        })
        .or_else(|| {
            poses
                .iter()
                .find(|(f, _)| Path::new(f).file_name() == file.file_name())
        })
}

/// What [`apply_to_file`] did.
#[derive(Debug, Clone, Serialize)]
pub struct Applied {
    /// The input as named.
    pub input: String,
    /// The output written.
    pub output: String,
    /// Points written.
    pub points: u64,
    /// Row-major 4×4 applied.
    pub transform: [[f64; 4]; 4],
    /// `records` (LAS/LAZ record by record, every field kept) or `cloud` (through a cloud).
    pub path: String,
    /// LAS scale of the output, when LAS/LAZ.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub scale: Option<[f64; 3]>,
    /// LAS offset of the output, when LAS/LAZ.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub offset: Option<[f64; 3]>,
    /// The CRS carried into the output (its label), when the input has one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub crs: Option<String>,
    /// Unit of the coordinates named by that CRS (`m`, `ft`, `US survey ft`), when it names one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub units: Option<String>,
}

/// The record a moved file carries: the version, the transform and where it came from.
#[derive(Debug, Clone, Serialize)]
struct AppliedRecord<'a> {
    version: &'a str,
    transform: [[f64; 4]; 4],
    from: String,
}

fn output_kind(output: &Path) -> Result<&'static str> {
    let ext = output
        .extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase)
        .unwrap_or_default();
    match ext.as_str() {
        "las" => Ok("las"),
        "laz" => Ok("laz"),
        "ply" => Ok("ply"),
        _ => Err(Error::file(
            output,
            "has no .las, .laz or .ply extension",
            "name the output with the extension of the format to write",
        )),
    }
}

/// Writes `input` moved by `tf` to `output` (format from its extension: .las, .laz, .ply).
/// `from` says where the transform came from (recorded in the output). Atomic.
pub fn apply_to_file(input: &Path, output: &Path, tf: &Rigid, from: &str) -> Result<Applied> {
    let kind = output_kind(output)?;
    let record = AppliedRecord {
        version: env!("CARGO_PKG_VERSION"),
        transform: tf.to_rows(),
        from: from.to_string(),
    };
    let json = serde_json::to_string(&record)
        .map_err(|e| Error::internal(format!("record: {e}"), "report this as a bug"))?;
    let (disk, sel) = split_scan(input);
    let is_las = sel.is_none() && sniff(&disk)? == super::Kind::Las;
    if is_las && kind != "ply" {
        let crs = super::PointSource::open(input)?.info().crs.clone();
        let vlr = ::las::Vlr {
            user_id: APPLIED_USER_ID.to_string(),
            record_id: APPLIED_RECORD_ID,
            description: "applied transform".to_string(),
            data: json.into_bytes(),
        };
        let m = super::las::move_las(input, output, tf, Some(vlr))?;
        return Ok(Applied {
            input: input.display().to_string(),
            output: output.display().to_string(),
            points: m.points,
            transform: tf.to_rows(),
            path: "records".into(),
            scale: Some(m.scale),
            offset: Some(m.offset),
            units: crs.as_deref().and_then(super::crs::units_label),
            crs: crs.as_deref().map(super::crs::crs_label),
        });
    }
    let (cloud, info) = read_cloud(input)?;
    let moved = cloud.transformed(tf);
    let (scale, offset) = write_moved_cloud(output, kind, &moved, &info, &json)?;
    Ok(Applied {
        input: input.display().to_string(),
        output: output.display().to_string(),
        points: moved.len() as u64,
        transform: tf.to_rows(),
        path: "cloud".into(),
        scale,
        offset,
        units: info.crs.as_deref().and_then(super::crs::units_label),
        crs: info.crs.as_deref().map(super::crs::crs_label),
    })
}

type LasLayout = (Option<[f64; 3]>, Option<[f64; 3]>);

fn write_moved_cloud(
    output: &Path,
    kind: &str,
    moved: &Cloud,
    info: &FileInfo,
    json: &str,
) -> Result<LasLayout> {
    match kind {
        "ply" => {
            let mut comments = vec![format!("equiscan applied {json}")];
            if let Some(c) = &info.crs {
                comments.push(format!("crs {}", c.replace(['\n', '\r'], " ")));
            }
            super::write_ply_with_comments(output, moved, &[], &comments)?;
            Ok((None, None))
        }
        _ => {
            let mut options = LasOptions::like(info);
            // The moved points lie about the moved origin, not about the input's offset.
            options.offset = None;
            let scale = options.scale.unwrap_or([0.001; 3]);
            let offset = moved.origin;
            let options = options.with_record(
                APPLIED_USER_ID,
                APPLIED_RECORD_ID,
                "applied transform",
                json.as_bytes().to_vec(),
            );
            write_las_with(output, moved, &[], &options)?;
            Ok((Some(scale), Some(offset)))
        }
    }
}
