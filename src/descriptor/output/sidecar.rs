//! The JSON sidecar of an NPY or CSV feature file: what the columns are, how the rows were
//! made, and the data file's size and CRC-32, so that a reader can tell a data file and a
//! sidecar that do not belong together ([`verify`]).

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::descriptor::Recipe;
use crate::error::{Error, Result};

/// Version of the sidecar layout. 2: own name `<data file>.json`, `bytes` and `crc32` of the
/// data file (version 1, unnumbered, was `<stem>.json` shared by an NPY and a CSV of one name).
pub const SIDECAR_VERSION: u32 = 2;

/// The sidecar path of a feature file: its full name plus `.json` (`x.npy` → `x.npy.json`),
/// so that `x.npy` and `x.csv` keep separate sidecars.
pub fn sidecar_path(data: &Path) -> PathBuf {
    let mut name = data.file_name().unwrap_or_default().to_os_string();
    name.push(".json");
    data.with_file_name(name)
}

/// Which centres the rows belong to.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "lowercase")]
pub enum CentresInfo {
    /// Every point; row `i` is point `i`.
    All,
    /// One point per voxel of this edge length (file units); `centre_indices` gives the points.
    Voxel {
        /// Voxel edge length, file units.
        voxel: f32,
    },
    /// The points of another file; row `i` is keypoint `i`.
    Keypoints {
        /// The keypoint file as named by the caller.
        file: Option<String>,
        /// Keypoints taken to be an input point (within 1e-4 × the smallest radius).
        matched_to_points: usize,
    },
}

/// Neighbour counts of one scale over all rows.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CountSummary {
    /// Support radius as written in the recipe (shortest f32 decimal), file units.
    pub radius: f64,
    /// Smallest count; `None` without rows.
    pub min: Option<u32>,
    /// Mean count (0 without rows).
    pub mean: f64,
    /// Largest count; `None` without rows.
    pub max: Option<u32>,
    /// Rows without any neighbour.
    pub without_neighbours: usize,
}

/// What the rows are.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Metadata {
    /// The input file as named by the caller.
    pub input: String,
    /// Origin to add to `x_local y_local z_local`, file coordinates.
    pub origin: [f64; 3],
    /// How to read the coordinate columns.
    pub coordinates: String,
    /// The descriptor recipe.
    pub recipe: Recipe,
    /// Which centres the rows belong to.
    pub centres: CentresInfo,
    /// Point index of each row, for voxel centres; `None` otherwise.
    pub centre_indices: Option<Vec<usize>>,
    /// True when the radius was suggested from the point spacing.
    pub radius_suggested: bool,
    /// Neighbour counts per scale.
    pub counts: Vec<CountSummary>,
    /// Column order, in words.
    pub layout: String,
    /// The input's coordinate reference system as the reader found it (WKT text, or LAS
    /// GeoTIFF keys as `GeoTIFF keys id=value, …`; see `io::FileInfo::crs`); left out when the
    /// input has none.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub crs: Option<String>,
    /// Unit of the coordinates named by that CRS (`m`, `ft`, `US survey ft`); left out when
    /// it names none.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub units: Option<String>,
}

/// The sidecar document.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Sidecar {
    /// [`SIDECAR_VERSION`].
    pub sidecar_version: u32,
    /// The data file's name (same folder).
    pub file: String,
    /// `"npy"` or `"csv"`.
    pub format: String,
    /// Size of the data file, bytes.
    pub bytes: u64,
    /// CRC-32 (IEEE 802.3, as zlib's `crc32`) of the whole data file.
    pub crc32: u32,
    /// `"float32"` for NPY.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub dtype: Option<String>,
    /// `"C"` (row-major) for NPY.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub order: Option<String>,
    /// Rows (centres).
    pub rows: usize,
    /// Column names, in order.
    pub columns: Vec<String>,
    /// What the rows are.
    pub metadata: Metadata,
}

/// CRC-32 and size of a file, read in 1 MiB blocks.
pub fn checksum(path: &Path) -> Result<(u64, u32)> {
    use std::io::Read;
    let mut f = std::fs::File::open(path).map_err(|e| Error::io(path, &e))?;
    let mut h = crc32fast::Hasher::new();
    let mut buf = vec![0u8; 1 << 20];
    let mut n = 0u64;
    loop {
        let k = f.read(&mut buf).map_err(|e| Error::io(path, &e))?;
        if k == 0 {
            break;
        }
        h.update(&buf[..k]);
        n += k as u64;
    }
    Ok((n, h.finalize()))
}

/// Reads the sidecar at `sidecar` and checks that its data file (same folder) has the recorded
/// size and CRC-32: a data file and a sidecar from different runs (a write interrupted between
/// the two renames) are refused.
pub fn verify(sidecar: &Path) -> Result<Sidecar> {
    let text = std::fs::read_to_string(sidecar).map_err(|e| Error::io(sidecar, &e))?;
    let doc: Sidecar = serde_json::from_str(&text).map_err(|e| {
        Error::file(
            sidecar,
            format!("not a feature-file sidecar ({e})"),
            "give the .json written beside a .npy or .csv feature file",
        )
    })?;
    let data = sidecar.with_file_name(&doc.file);
    let (bytes, crc) = checksum(&data)?;
    if bytes != doc.bytes || crc != doc.crc32 {
        return Err(Error::file(
            &data,
            format!(
                "does not match its sidecar {} (size or checksum differ: the two come from different runs)",
                sidecar.display()
            ),
            "write the feature file again",
        ));
    }
    Ok(doc)
}
