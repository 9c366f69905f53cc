//! Writing SOURCE moved into TARGET's frame, in the format its extension names.

use std::path::Path;

use crate::cloud::Cloud;
use crate::error::{Error, Result};
use crate::geometry::Rigid;
use crate::io::{write_las, write_ply};

/// Writes `source` moved by `tf` (file coordinates) to `path` (`.las`, `.laz` or `.ply`),
/// every attribute kept and normals turned.
pub fn write_moved(path: &Path, source: &Cloud, tf: &Rigid) -> Result<()> {
    let ext = path
        .extension()
        .and_then(|e| e.to_str())
        .map(|e| e.to_ascii_lowercase())
        .unwrap_or_default();
    let cloud = source.transformed(tf);
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
