//! The journal of a batch run: a folder `OUTDIR/equiscan-journal/` holding `run.json` (the
//! recipe, format and halo rule the outputs are made with) and one record per output,
//! `<output file name>.json`, written atomically (temporary file, then rename) once the output
//! is in place.
//!
//! One file per output, never a shared file that several processes append to, so shards
//! running at once in one OUTDIR cannot corrupt each other's records, and a kill at any moment
//! leaves every record either complete or absent. A record says `done` (with each output
//! file's size and CRC-32 and the stamps of the inputs it was made from) or `failed` (with the
//! one-line error). An output counts as finished when its record says `done` for the current
//! run settings and input stamps, and every file still has the recorded size and CRC-32.

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::descriptor::Recipe;
use crate::descriptor::output::{Format, checksum};
use crate::error::{Error, Result};
use crate::io::TempFile;

/// Name of the journal folder inside OUTDIR.
pub const JOURNAL_DIR: &str = "equiscan-journal";

/// Version of the journal's layout.
pub const JOURNAL_VERSION: u32 = 1;

/// Size and modification time of an input, to notice a changed input on a rerun.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Stamp {
    /// Size, bytes.
    pub bytes: u64,
    /// Modification time, whole seconds since the Unix epoch.
    pub modified_s: u64,
    /// Nanoseconds past `modified_s`.
    pub modified_ns: u32,
}

impl Stamp {
    /// The stamp of `path` now.
    pub fn of(path: &Path) -> Result<Stamp> {
        let m = std::fs::metadata(path).map_err(|e| Error::io(path, &e))?;
        let t = m
            .modified()
            .ok()
            .and_then(|t| t.duration_since(std::time::UNIX_EPOCH).ok())
            .unwrap_or_default();
        Ok(Stamp {
            bytes: m.len(),
            modified_s: t.as_secs(),
            modified_ns: t.subsec_nanos(),
        })
    }
}

/// What the outputs of an OUTDIR are made with (`run.json`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunRecord {
    /// [`JOURNAL_VERSION`].
    pub journal_version: u32,
    /// The descriptor recipe.
    pub recipe: Recipe,
    /// Output format.
    pub format: Format,
    /// True when halos from neighbouring tiles are used (`--tile-grid auto`).
    pub halo: bool,
}

impl RunRecord {
    /// A short fingerprint of the settings (CRC-32 of the JSON), kept in each tile record.
    pub fn digest(&self) -> u32 {
        crc32fast::hash(serde_json::to_string(self).unwrap_or_default().as_bytes())
    }

    /// The differences from `other` (the journal's), in words, `old → new` (empty when the
    /// same).
    pub fn differences(&self, other: &RunRecord) -> Vec<String> {
        let mut d = Vec::new();
        if self.recipe != other.recipe {
            // The recipe fields that differ, compactly: `radii [0.5] → [0.25]`.
            let (now, then) = (
                serde_json::to_value(&self.recipe).unwrap_or_default(),
                serde_json::to_value(&other.recipe).unwrap_or_default(),
            );
            if let (Some(a), Some(b)) = (now.as_object(), then.as_object()) {
                for (k, v) in a {
                    let old = b.get(k).cloned().unwrap_or_default();
                    if old != *v {
                        d.push(format!("{k} {old} → {v}"));
                    }
                }
            }
        }
        if self.format != other.format {
            d.push(format!(
                "format {} → {}",
                other.format.ext(),
                self.format.ext()
            ));
        }
        if self.halo != other.halo {
            d.push(format!(
                "tile grid {} → {}",
                if other.halo { "auto" } else { "off" },
                if self.halo { "auto" } else { "off" }
            ));
        }
        if self.journal_version != other.journal_version {
            d.push(format!(
                "journal version {} → {}",
                other.journal_version, self.journal_version
            ));
        }
        d
    }
}

/// Outcome of a tile in its record.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Status {
    /// Every output file is in place.
    Done,
    /// The tile could not be done; `error` says why.
    Failed,
}

/// One output file as written.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct FileRecord {
    /// File name (in OUTDIR).
    pub name: String,
    /// Size, bytes.
    pub bytes: u64,
    /// CRC-32 (IEEE 802.3, as zlib's `crc32`).
    pub crc32: u32,
}

/// The record of one tile's output.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TileRecord {
    /// [`JOURNAL_VERSION`].
    pub journal_version: u32,
    /// Done or failed.
    pub status: Status,
    /// The input as named in the plan.
    pub input: String,
    /// [`RunRecord::digest`] of the settings it was made with.
    pub run: u32,
    /// The input's stamp when it was read; `None` when it could not be read.
    pub stamp: Option<Stamp>,
    /// Stamps of the neighbours whose points formed the halo, in plan order.
    pub halo_stamps: Vec<(String, Option<Stamp>)>,
    /// Output files, data file first (empty when failed).
    pub files: Vec<FileRecord>,
    /// Rows written (the tile's points).
    pub rows: u64,
    /// Halo points used as neighbours.
    pub halo_points: u64,
    /// Wall-clock seconds of the tile.
    pub seconds: f64,
    /// The one-line error of a failed tile.
    pub error: Option<String>,
    /// Warnings (e.g. a neighbour that could not be read: incomplete halo).
    pub warnings: Vec<String>,
}

/// The journal folder of `outdir`.
pub fn dir(outdir: &Path) -> PathBuf {
    outdir.join(JOURNAL_DIR)
}

/// The record path of the output `data` (a file in OUTDIR).
pub fn record_path(outdir: &Path, data: &Path) -> PathBuf {
    let mut name = data.file_name().unwrap_or_default().to_os_string();
    name.push(".json");
    dir(outdir).join(name)
}

/// Writes `value` as pretty JSON to `path`, atomically.
pub fn write_json(path: &Path, value: &impl Serialize) -> Result<()> {
    let text = serde_json::to_string_pretty(value)
        .map_err(|e| Error::internal(format!("journal record: {e}"), "report this as a bug"))?;
    let mut f = TempFile::create(path)?;
    {
        use std::io::Write;
        let w = f.writer();
        w.write_all(text.as_bytes())
            .and_then(|_| w.write_all(b"\n"))
            .map_err(|e| Error::io(path, &e))?;
    }
    f.finish()?.commit()
}

/// Reads a record; `None` when absent or unreadable (then the output is simply redone).
pub fn read_record(path: &Path) -> Option<TileRecord> {
    let text = std::fs::read_to_string(path).ok()?;
    serde_json::from_str(&text).ok()
}

/// Reads `run.json`; `Ok(None)` when absent, an error when present but not readable.
pub fn read_run(outdir: &Path) -> Result<Option<RunRecord>> {
    let path = dir(outdir).join("run.json");
    let text = match std::fs::read_to_string(&path) {
        Ok(t) => t,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(None),
        Err(e) => return Err(Error::io(&path, &e)),
    };
    serde_json::from_str(&text).map(Some).map_err(|e| {
        Error::file(
            &path,
            format!("not a journal of this version ({e})"),
            "give --restart to start the journal again, or another OUTDIR",
        )
    })
}

/// Size and CRC-32 of every file in `files`, as records.
pub fn file_records(files: &[PathBuf]) -> Result<Vec<FileRecord>> {
    files
        .iter()
        .map(|f| {
            let (bytes, crc32) = checksum(f)?;
            Ok(FileRecord {
                name: f
                    .file_name()
                    .unwrap_or_default()
                    .to_string_lossy()
                    .into_owned(),
                bytes,
                crc32,
            })
        })
        .collect()
}

/// Why an output is not finished, or `None` when it is: its record says done for `digest`,
/// the stamps match, and every file has its recorded size and CRC-32.
pub fn unfinished_reason(
    record: Option<&TileRecord>,
    outdir: &Path,
    digest: u32,
    stamp: Option<&Stamp>,
    halo_stamps: &[(String, Option<Stamp>)],
) -> Option<String> {
    let Some(r) = record else {
        return Some("not done yet".into());
    };
    if r.status != Status::Done {
        return Some("failed before; tried again".into());
    }
    if r.run != digest {
        return Some("made with other settings".into());
    }
    if r.stamp.as_ref() != stamp || r.halo_stamps != halo_stamps {
        return Some("an input changed since".into());
    }
    for f in &r.files {
        match checksum(&outdir.join(&f.name)) {
            Ok((b, c)) if b == f.bytes && c == f.crc32 => {}
            Ok(_) => return Some(format!("{} differs from its record", f.name)),
            Err(_) => return Some(format!("{} is missing", f.name)),
        }
    }
    None
}
