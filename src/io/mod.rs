//! Reading and writing point clouds and per-point feature matrices.
//!
//! Readers: [`read_cloud`] picks the format from the file's first bytes (`LASF` for LAS and
//! LAZ, `ply` for PLY, `ASTM-E57` for E57, ASTM E2807), not from the extension, and returns a
//! [`Cloud`] plus a [`FileInfo`] describing the file as its header declares it. An E57 file
//! with several scans is read whole (every scan in the file's frame) or one scan at a time,
//! named `FILE.e57#NAME` or `FILE.e57#INDEX` ([`split_scan`]). [`read_ply_mesh`] also returns
//! triangles.
//!
//! Writers: [`write_ply`] (binary little-endian PLY), [`write_las`] (LAS 1.4, or LAZ when the
//! path ends in `.laz`, with named f32 columns as Extra Bytes), [`write_npy`] and
//! [`write_npy_with_sidecar`] (NumPy float32 matrices), [`write_csv`]. Every writer is atomic
//! ([`write_atomic`]): the output appears complete or not at all, and inputs are never touched.
//!
//! Conventions: coordinates are in file units (usually metres). A [`Cloud`] keeps an f64
//! origin and f32 offsets; readers choose the origin so that offsets stay small (LAS: the centre
//! of the header bounds rounded to whole units, or the first point rounded when the bounds
//! are missing or do not hold it; PLY with double coordinates: the first vertex
//! rounded to whole units, or the origin recorded by [`write_ply`]; PLY with float
//! coordinates: zero, so the file's values are kept bit for bit). Matrices are row-major, one
//! row per point, in the cloud's point order.
//!
//! Every failure is an [`Error::File`] that reads `PATH: what is wrong; what to do`.

pub mod apply;
mod atomic;
pub mod crs;
mod csv;
pub mod describe;
mod direct;
mod e57;
pub mod guard;
mod las;
pub mod mesh;
mod npy;
mod ply;
mod quiet_panics;
mod source;

use std::fs::File;
use std::io::Read;
use std::path::Path;

use serde::Serialize;

use crate::cloud::Cloud;
use crate::error::{Error, Result};

pub use atomic::{
    Finished, TEMP_SUFFIX, TempFile, TempOwner, host_label, owner_is_stale, process_gone,
    remove_live_temp_files, remove_stale_entries, remove_stale_temp_files, temp_owner,
    write_atomic,
};
pub use csv::write_csv;
pub use direct::DirectAppend;
pub use e57::split_scan;
pub use las::{LasOptions, LasRowWriter, MAX_LAS_COLUMNS, write_las, write_las_with};
pub use npy::{npy_header, write_npy, write_npy_with_sidecar};
pub use ply::{PLY_TAKEN, PlyLayout, read_ply_mesh, write_ply, write_ply_with_comments};
pub use source::PointSource;

/// A named per-point f32 column, borrowed: `values[i]` belongs to point `i`.
#[derive(Debug, Clone, Copy)]
pub struct Column<'a> {
    /// Column name as written into the output (PLY property, LAS extra-bytes name, CSV
    /// header, NPY sidecar). Letters, digits and `_` only; LAS allows at most 32 bytes.
    pub name: &'a str,
    /// One value per point.
    pub values: &'a [f32],
}

impl<'a> Column<'a> {
    /// A column named `name` with `values`.
    pub fn new(name: &'a str, values: &'a [f32]) -> Self {
        Column { name, values }
    }
}

/// Axis-aligned bounds in file coordinates.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Bounds {
    /// Smallest x, y, z.
    pub min: [f64; 3],
    /// Largest x, y, z.
    pub max: [f64; 3],
}

/// What a point-cloud file declares about itself, as read from its header.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FileInfo {
    /// The file as named by the caller.
    pub path: String,
    /// `"LAS"`, `"LAZ"`, `"PLY"` or `"E57"`.
    pub format: String,
    /// Format version, e.g. `"1.4"` (LAS) or `"1.0"` (PLY).
    pub version: String,
    /// PLY encoding (`ascii`, `binary_little_endian`, `binary_big_endian`); `None` for LAS.
    pub encoding: Option<String>,
    /// Number of points the header declares.
    pub point_count: u64,
    /// LAS point data record format (0–10); `None` for PLY.
    pub point_format: Option<u8>,
    /// Bytes per LAS point record, including extra bytes; `None` for PLY.
    pub record_length: Option<u16>,
    /// Attributes the reader keeps in the [`Cloud`], in [`Cloud::attribute_names`] order.
    pub attributes: Vec<String>,
    /// Other per-point fields present in the file but not decoded into the cloud's columns:
    /// LAS Extra Bytes names (kept all the same in the cloud's source records and written
    /// again by LAS/LAZ writers), other PLY vertex properties, E57 fields such as row and
    /// column indices.
    pub other_fields: Vec<String>,
    /// Coordinate reference system as found: the WKT text of a LAS WKT record or of an E57
    /// file's `coordinateMetadata`, or LAS GeoTIFF keys as `GeoTIFF keys id=value, …`. `None`
    /// when the file carries none. Plain text, so that any output (JSON, Parquet metadata, a
    /// LAS WKT record) can hold it.
    pub crs: Option<String>,
    /// LAS scale factors x, y, z.
    pub scale: Option<[f64; 3]>,
    /// LAS offsets x, y, z.
    pub offset: Option<[f64; 3]>,
    /// Bounds stored in the LAS header, file coordinates.
    pub header_bounds: Option<Bounds>,
    /// Other elements of a PLY file (e.g. `face 6`), as `name count`.
    pub other_elements: Vec<String>,
    /// The scans of an E57 file, in file order (every scan, read or not); empty for other
    /// formats.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub scans: Vec<ScanInfo>,
    /// Where the scanner stood, file coordinates, when the points come from one scan whose
    /// position the file records (an E57 scan's pose translation): the viewpoint for
    /// visibility checks and normal orientation.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub viewpoint: Option<[f64; 3]>,
    /// CRS records of a LAS file, kept so that a LAS writer can copy them.
    #[serde(skip)]
    pub(crate) crs_records: Vec<::las::Vlr>,
}

impl FileInfo {
    fn new(path: &Path, format: &str, version: String) -> Self {
        FileInfo {
            path: path.display().to_string(),
            format: format.to_string(),
            version,
            encoding: None,
            point_count: 0,
            point_format: None,
            record_length: None,
            attributes: Vec::new(),
            other_fields: Vec::new(),
            crs: None,
            scale: None,
            offset: None,
            header_bounds: None,
            other_elements: Vec::new(),
            scans: Vec::new(),
            viewpoint: None,
            crs_records: Vec::new(),
        }
    }
}

/// One scan of an E57 file.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ScanInfo {
    /// Position in the file, from 0 (`FILE.e57#INDEX`).
    pub index: usize,
    /// The scan's name (`FILE.e57#NAME`); empty when the file gives none.
    pub name: String,
    /// Points the scan declares (invalid points included).
    pub points: u64,
    /// Row-major 4×4 carrying the scan's own coordinates into the file's frame (the identity
    /// when the file gives no pose).
    pub pose: [[f64; 4]; 4],
    /// False when the file gives no pose for the scan.
    pub has_pose: bool,
    /// Where the scanner stood, file coordinates (the pose's translation).
    pub scanner_position: [f64; 3],
    /// `cartesian`, `spherical` or `cartesian+spherical`.
    pub coordinates: String,
    /// Every per-point field the scan stores, as the standard names them.
    pub fields: Vec<String>,
    /// True when this read includes the scan.
    pub selected: bool,
}

/// The formats [`read_cloud`] recognises by content.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Kind {
    Las,
    Ply,
    E57,
}

/// Opens `path` for reading, with a clear message for folders and missing or empty files.
/// Returns the file and its length in bytes.
pub(crate) fn open_input(path: &Path) -> Result<(File, u64)> {
    let meta = std::fs::metadata(path).map_err(|e| Error::io(path, &e))?;
    if meta.is_dir() {
        return Err(Error::file(
            path,
            "is a folder, not a point-cloud file",
            "give a .las, .laz, .ply or .e57 file",
        ));
    }
    if meta.len() == 0 {
        return Err(Error::file(
            path,
            "the file is empty",
            "copy or export the file again",
        ));
    }
    let file = File::open(path).map_err(|e| Error::io(path, &e))?;
    Ok((file, meta.len()))
}

pub(crate) fn sniff(path: &Path) -> Result<Kind> {
    let (mut file, _) = open_input(path)?;
    let mut head = [0u8; 8];
    let mut n = 0;
    while n < head.len() {
        match file.read(&mut head[n..]) {
            Ok(0) => break,
            Ok(k) => n += k,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => return Err(Error::io(path, &e)),
        }
    }
    let head = &head[..n];
    if head.starts_with(b"LASF") {
        Ok(Kind::Las)
    } else if head == e57::SIGNATURE {
        Ok(Kind::E57)
    } else if head.starts_with(b"ply") && matches!(head.get(3), Some(b'\n' | b'\r')) {
        Ok(Kind::Ply)
    } else {
        let shown: String = head
            .iter()
            .map(|&b| {
                if b.is_ascii_graphic() {
                    (b as char).to_string()
                } else {
                    format!("\\x{b:02x}")
                }
            })
            .collect();
        Err(Error::file(
            path,
            format!("not a LAS, LAZ, PLY or E57 file (it starts with \"{shown}\")"),
            "give a .las, .laz, .ply or .e57 file",
        ))
    }
}

/// Reads a LAS, LAZ, PLY or E57 file into a [`Cloud`], choosing the reader from the file's
/// content. `FILE.e57#NAME` or `FILE.e57#INDEX` reads one scan of an E57 file; without it
/// every scan is read, each placed by its pose.
///
/// LAS and LAZ keep intensity, colour (when the point format has it), classification, return
/// number and GPS time (when present). PLY keeps x/y/z, `nx ny nz`, `red green blue` (uchar
/// or ushort), `intensity` or `scalar_intensity`, and the `classification`, `return_number`
/// and `gps_time` properties written by [`write_ply`]; other properties and elements are
/// skipped. Coordinates must be finite.
///
/// The points' extent must fit the cloud's f32 local offsets with useful precision (at most
/// [`MAX_EXTENT`] file units along each axis); a larger one is refused here, naming the file,
/// rather than failing later inside spacing estimates and registration. [`PointSource`]
/// reads the same file in chunks, header first.
pub fn read_cloud(path: &Path) -> Result<(Cloud, FileInfo)> {
    let (file, sel) = split_scan(path);
    match (sniff(&file)?, sel) {
        (Kind::E57, sel) => e57::read_e57(path, &file, sel.as_deref()),
        (_, Some(sel)) => Err(no_scans(&file, &sel)),
        (Kind::Las, None) => las::read_las(path),
        (Kind::Ply, None) => ply::read_ply(path, false).map(|(c, _, i)| (c, i)),
    }
}

/// The error for `FILE#SEL` when FILE is not E57.
pub(crate) fn no_scans(file: &Path, sel: &str) -> Error {
    Error::file(
        file,
        format!("#{sel} selects a scan, but only E57 files hold several scans"),
        "give the file name without #",
    )
}

/// Largest extent of a cloud along any axis, file units. f32 offsets carry 24 significant
/// bits: at 5 × 10⁸ units from the origin one step is 32 units, far coarser than any scan's
/// point spacing, and squared distances of larger extents overflow f32 (≈ 3.4 × 10³⁸).
pub const MAX_EXTENT: f64 = 1e9;

/// Running bounds of local positions, to refuse an extent f32 offsets cannot hold.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Extent {
    lo: [f64; 3],
    hi: [f64; 3],
}

impl Default for Extent {
    fn default() -> Self {
        Extent {
            lo: [f64::INFINITY; 3],
            hi: [f64::NEG_INFINITY; 3],
        }
    }
}

impl Extent {
    /// Adds `positions` and checks the extent so far.
    pub(crate) fn add(&mut self, path: &Path, positions: &[[f32; 3]]) -> Result<()> {
        for p in positions {
            for (k, &v) in p.iter().enumerate() {
                self.lo[k] = self.lo[k].min(v as f64);
                self.hi[k] = self.hi[k].max(v as f64);
            }
        }
        for k in 0..3 {
            let e = self.hi[k] - self.lo[k];
            if e > MAX_EXTENT || e.is_nan() {
                return Err(Error::file(
                    path,
                    format!(
                        "the points span {} file units along {}, more than 32-bit local offsets hold with useful precision (at most {})",
                        compact(e),
                        ["x", "y", "z"][k],
                        compact(MAX_EXTENT)
                    ),
                    "drop the stray points, split the file or convert it to smaller units",
                ));
            }
        }
        Ok(())
    }
}

/// Refuses a cloud whose extent [`Extent`] does not accept.
pub(crate) fn check_extent(path: &Path, cloud: &Cloud) -> Result<()> {
    Extent::default().add(path, &cloud.positions)
}

/// A number for a message: plain when moderate, compact scientific notation (`1.5e300`, six
/// significant digits at most) when very large or small, so no message prints 300 digits.
pub(crate) fn compact(v: f64) -> String {
    let a = v.abs();
    if !v.is_finite() || a == 0.0 || (1e-4..1e9).contains(&a) {
        format!("{v}")
    } else {
        let s = format!("{v:.5e}");
        // Trim trailing zeros of the mantissa: 1.50000e300 -> 1.5e300.
        match s.split_once('e') {
            Some((m, e)) => {
                let m = if m.contains('.') {
                    m.trim_end_matches('0').trim_end_matches('.')
                } else {
                    m
                };
                format!("{m}e{e}")
            }
            None => s,
        }
    }
}

/// Checks that `columns` fit `n` points and have distinct, plain names not in `taken`.
pub(crate) fn check_columns(
    path: &Path,
    n: usize,
    columns: &[Column<'_>],
    taken: &[&str],
) -> Result<()> {
    for (i, c) in columns.iter().enumerate() {
        if c.name.is_empty()
            || !c
                .name
                .chars()
                .all(|ch| ch.is_ascii_alphanumeric() || ch == '_')
        {
            return Err(Error::file(
                path,
                format!("column name \"{}\" is not plain", c.name),
                "use letters, digits and _ only",
            ));
        }
        if c.values.len() != n {
            return Err(Error::file(
                path,
                format!(
                    "column {} has {} values for {} points",
                    c.name,
                    c.values.len(),
                    n
                ),
                "give one value per point",
            ));
        }
        if taken.contains(&c.name) || columns[..i].iter().any(|o| o.name == c.name) {
            return Err(Error::file(
                path,
                format!("column name {} is used twice", c.name),
                "give each column its own name",
            ));
        }
    }
    Ok(())
}

/// Puts `path` in front of an in-memory error, keeping its fix.
pub(crate) fn about(path: &Path, e: Error) -> Error {
    e.about(path)
}
