//! Writing SOURCE moved into TARGET's frame, in the format its extension names, with the
//! verdict and the transform recorded in the file.
//!
//! LAS/LAZ: SOURCE's point format and scale, TARGET's CRS records (the points are now in
//! TARGET's frame), every attribute, and a variable-length record of our own (user id
//! [`RECORD_USER_ID`], record id [`RECORD_ID`]) holding a JSON object with the tool version,
//! the verdict and the row-major transform. PLY: the same as `comment equiscan registration …`
//! header lines.

use std::path::Path;

use crate::cloud::Cloud;
use crate::error::{Error, Result};
use crate::geometry::Rigid;
use crate::io::{FileInfo, LasOptions, write_las_with, write_ply_with_comments};

/// User id of our own LAS variable-length record.
pub const RECORD_USER_ID: &str = "equiscan";
/// Record id of the registration record.
pub const RECORD_ID: u16 = 1001;

/// What a moved file records about how it was moved.
#[derive(Debug, Clone, serde::Serialize)]
pub struct MoveRecord {
    /// Program version.
    pub version: String,
    /// `confident` or `not_found`.
    pub verdict: String,
    /// Row-major 4×4 transform applied (SOURCE file coordinates into TARGET's).
    pub transform: [[f64; 4]; 4],
}

/// Writes `source` moved by `tf` (file coordinates) to `path` (`.las`, `.laz` or `.ply`),
/// every attribute kept, normals turned, `record` written into the file.
pub fn write_moved(
    path: &Path,
    source: (&Cloud, &FileInfo),
    target_info: &FileInfo,
    tf: &Rigid,
    record: &MoveRecord,
) -> Result<()> {
    let ext = path
        .extension()
        .and_then(|e| e.to_str())
        .map(|e| e.to_ascii_lowercase())
        .unwrap_or_default();
    let cloud = source.0.transformed(tf);
    let json = serde_json::to_string(record)
        .map_err(|e| Error::invalid(format!("record: {e}"), "report this as a bug"))?;
    match ext.as_str() {
        "las" | "laz" => {
            let mut options = LasOptions::like(source.1).with_crs_of(target_info);
            // The moved points lie about the moved origin, not about SOURCE's offset.
            options.offset = None;
            let options = options.with_record(
                RECORD_USER_ID,
                RECORD_ID,
                "registration record",
                json.into_bytes(),
            );
            write_las_with(path, &cloud, &[], &options)
        }
        "ply" => {
            let mut comments = vec![
                format!("equiscan registration version {}", record.version),
                format!("equiscan registration verdict {}", record.verdict),
            ];
            for row in &record.transform {
                comments.push(format!(
                    "equiscan registration transform {} {} {} {}",
                    row[0], row[1], row[2], row[3]
                ));
            }
            // The points are now in TARGET's frame: its CRS, on one line.
            if let Some(crs) = &target_info.crs {
                comments.push(format!("crs {}", crs.replace(['\n', '\r'], " ")));
            }
            write_ply_with_comments(path, &cloud, &[], &comments)
        }
        _ => Err(Error::file(
            path,
            "has no .las, .laz or .ply extension",
            "name the output file with one of those extensions",
        )),
    }
}
