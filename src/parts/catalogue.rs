//! The part catalogue: every part's reference points and normals, its size and signature, in
//! one versioned file.
//!
//! Building ([`build`]): the folder holds one sub-folder per part, named after the part, with
//! that part's reference files (LAS, LAZ, PLY clouds; PLY with faces, STL, OBJ meshes) in the
//! part's own frame; a file directly in the folder is a part of its own, named after the file
//! without its extension. Hidden entries (names starting with `.`) are skipped. Parts are
//! listed by name.
//!
//! File layout (little-endian): the 8 bytes `EQSPARTS`, the format version (u32, see
//! [`FORMAT_VERSION`]), the length of the JSON header (u64), the JSON header ([`Header`]: the
//! recipe and one entry per part), then for every part in header order its points and its
//! normals (`3 × n` f32 each, local about the part's origin), then the CRC-32 (IEEE) of
//! everything before it (u32). A file of another version is refused with the fix (build it
//! again); a torn or damaged file is refused by its length and CRC.

use std::io::Write;
use std::path::{Path, PathBuf};

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::reference::{self, Prepared, Reference};
use super::scan::diameter;
use super::signature::{self, Signature};
use crate::error::{Error, Result};
use crate::io::write_atomic;

/// First bytes of a catalogue file.
pub const MAGIC: &[u8; 8] = b"EQSPARTS";
/// Version of the file layout and recipe this build writes and reads.
pub const FORMAT_VERSION: u32 = 1;

/// How the catalogue was made (every value that changes its content).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Recipe {
    /// Points drawn from a mesh reference.
    pub mesh_samples: usize,
    /// Seed of the mesh sampling.
    pub sample_seed: u64,
    /// Most points kept of a cloud reference.
    pub max_points: usize,
    /// D2 histogram bins up to the diameter.
    pub signature_bins: usize,
    /// Random pairs per D2 histogram.
    pub signature_pairs: usize,
    /// Seed of the pair draws.
    pub signature_seed: u64,
}

impl Default for Recipe {
    fn default() -> Self {
        Recipe {
            mesh_samples: reference::MESH_SAMPLES,
            sample_seed: reference::SAMPLE_SEED,
            max_points: reference::MAX_POINTS,
            signature_bins: signature::BINS,
            signature_pairs: signature::PAIRS,
            signature_seed: signature::PAIR_SEED,
        }
    }
}

/// One part's entry in the header.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Entry {
    /// The part's name.
    pub name: String,
    /// Its reference files, as found in the folder (names relative to the catalogue folder).
    pub sources: Vec<String>,
    /// Reference points stored.
    pub points: usize,
    /// Global coordinate of the local frame's zero (the part's frame).
    pub origin: [f64; 3],
    /// Axis-aligned size x, y, z of the reference, file units.
    pub size: [f64; 3],
    /// Median point spacing of the reference.
    pub spacing: f64,
    /// Normals estimated (cloud without normals) rather than read or from a mesh.
    pub normals_estimated: bool,
    /// Whole-shape signature.
    pub signature: Signature,
}

/// The catalogue header.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Header {
    /// Always `equiscan part catalogue`.
    pub kind: String,
    /// [`FORMAT_VERSION`].
    pub version: u32,
    /// The recipe.
    pub recipe: Recipe,
    /// The parts, by name.
    pub parts: Vec<Entry>,
}

/// A catalogue in memory, references prepared for search.
pub struct Catalogue {
    /// The header.
    pub header: Header,
    /// Prepared references, in header order.
    pub parts: Vec<Prepared>,
}

impl Catalogue {
    /// Index of the part named `name`.
    pub fn find(&self, name: &str) -> Option<usize> {
        self.header.parts.iter().position(|e| e.name == name)
    }
}

/// The part folders and files of `dir`: `(name, files)`, sorted by name.
pub fn list_parts(dir: &Path) -> Result<Vec<(String, Vec<PathBuf>)>> {
    let meta = std::fs::metadata(dir).map_err(|e| Error::io(dir, &e))?;
    if !meta.is_dir() {
        return Err(Error::file(
            dir,
            "is not a folder",
            "give a folder holding one folder of reference files per part",
        ));
    }
    let entries = sorted_entries(dir)?;
    let mut parts: Vec<(String, Vec<PathBuf>)> = Vec::new();
    for path in entries {
        let name = name_of(&path)?;
        if path.is_dir() {
            let files: Vec<PathBuf> = sorted_entries(&path)?
                .into_iter()
                .filter(|p| !p.is_dir())
                .collect();
            if files.is_empty() {
                return Err(Error::file(
                    &path,
                    "the part folder holds no reference file",
                    "put the part's reference scans or meshes into it, or remove the folder",
                ));
            }
            parts.push((name, files));
        } else {
            let stem = path
                .file_stem()
                .map(|s| s.to_string_lossy().into_owned())
                .unwrap_or(name);
            parts.push((stem, vec![path]));
        }
    }
    if parts.is_empty() {
        return Err(Error::file(
            dir,
            "the folder holds no part",
            "put one folder per part, named after the part, with its reference scans or meshes",
        ));
    }
    parts.sort_by(|a, b| a.0.cmp(&b.0));
    for w in parts.windows(2) {
        if w[0].0 == w[1].0 {
            return Err(Error::file(
                dir,
                format!("two entries are named after the part \"{}\"", w[0].0),
                "give every part one folder or one file",
            ));
        }
    }
    Ok(parts)
}

fn name_of(path: &Path) -> Result<String> {
    path.file_name()
        .and_then(|s| s.to_str())
        .map(str::to_string)
        .ok_or_else(|| {
            Error::file(
                path,
                "the name is not valid UTF-8",
                "rename it with plain letters, digits, - and _",
            )
        })
}

fn sorted_entries(dir: &Path) -> Result<Vec<PathBuf>> {
    let rd = std::fs::read_dir(dir).map_err(|e| Error::io(dir, &e))?;
    let mut v = Vec::new();
    for e in rd {
        let e = e.map_err(|e| Error::io(dir, &e))?;
        let hidden = e.file_name().to_string_lossy().starts_with('.');
        if !hidden {
            v.push(e.path());
        }
    }
    v.sort();
    Ok(v)
}

/// Builds the catalogue of `dir` (module docs). Parts are read and prepared in parallel; the
/// result does not depend on the thread count.
pub fn build(dir: &Path) -> Result<Catalogue> {
    let listed = list_parts(dir)?;
    let built: Vec<Result<(Entry, Prepared)>> = listed
        .par_iter()
        .map(|(name, files)| {
            let refs: Vec<&Path> = files.iter().map(|p| p.as_path()).collect();
            let r = Reference::read(&refs)?;
            let sources = files
                .iter()
                .map(|p| {
                    p.strip_prefix(dir)
                        .unwrap_or(p)
                        .to_string_lossy()
                        .into_owned()
                })
                .collect();
            entry_for(name, sources, r)
        })
        .collect();
    let mut header = Header {
        kind: "equiscan part catalogue".into(),
        version: FORMAT_VERSION,
        recipe: Recipe::default(),
        parts: Vec::new(),
    };
    let mut parts = Vec::new();
    for b in built {
        let (e, p) = b?;
        header.parts.push(e);
        parts.push(p);
    }
    Ok(Catalogue { header, parts })
}

/// The entry and prepared reference of one part.
pub fn entry_for(name: &str, sources: Vec<String>, r: Reference) -> Result<(Entry, Prepared)> {
    let prepared = Prepared::new(r)?;
    let diam = diameter(&prepared.coarse);
    let sig = signature::signature(&prepared.reference.points, diam);
    let e = Entry {
        name: name.to_string(),
        sources,
        points: prepared.reference.len(),
        origin: prepared.reference.origin,
        size: prepared.reference.size(),
        spacing: prepared.spacing,
        normals_estimated: prepared.reference.normals_estimated,
        signature: sig,
    };
    Ok((e, prepared))
}

/// Writes the catalogue to `path` atomically (module docs for the layout).
pub fn write(cat: &Catalogue, path: &Path) -> Result<()> {
    let json = serde_json::to_vec(&cat.header).map_err(|e| {
        Error::invalid(
            format!("the catalogue header cannot be written as JSON ({e})"),
            "report this as a defect",
        )
    })?;
    let mut bytes = Vec::new();
    bytes.extend_from_slice(MAGIC);
    bytes.extend_from_slice(&FORMAT_VERSION.to_le_bytes());
    bytes.extend_from_slice(&(json.len() as u64).to_le_bytes());
    bytes.extend_from_slice(&json);
    for p in &cat.parts {
        for set in [&p.reference.points, &p.reference.normals] {
            for v in set.iter() {
                for c in v {
                    bytes.extend_from_slice(&c.to_le_bytes());
                }
            }
        }
    }
    let crc = crc32fast::hash(&bytes);
    bytes.extend_from_slice(&crc.to_le_bytes());
    write_atomic(path, |w| {
        w.write_all(&bytes).map_err(|e| Error::io(path, &e))
    })
}

fn damaged(path: &Path, what: &str) -> Error {
    Error::file(
        path,
        format!("the part catalogue is damaged ({what})"),
        "build it again with `equiscan catalogue build`",
    )
}

/// Reads only the header of a catalogue file (checks magic, version, length and CRC).
pub fn read_header(path: &Path) -> Result<Header> {
    read_inner(path, false).map(|c| c.0)
}

/// Reads a catalogue and prepares its references.
pub fn read(path: &Path) -> Result<Catalogue> {
    let (header, refs) = read_inner(path, true)?;
    let parts: Vec<Result<Prepared>> = refs.into_par_iter().map(Prepared::new).collect();
    Ok(Catalogue {
        header,
        parts: parts.into_iter().collect::<Result<Vec<_>>>()?,
    })
}

fn read_inner(path: &Path, with_points: bool) -> Result<(Header, Vec<Reference>)> {
    let bytes = std::fs::read(path).map_err(|e| Error::io(path, &e))?;
    if bytes.len() < 8 || &bytes[..8] != MAGIC {
        return Err(Error::file(
            path,
            "is not an equiscan part catalogue",
            "give a file written by `equiscan catalogue build`",
        ));
    }
    if bytes.len() < 24 {
        return Err(damaged(path, "it ends inside its header"));
    }
    let version = u32::from_le_bytes(bytes[8..12].try_into().expect("4 bytes"));
    if version != FORMAT_VERSION {
        return Err(Error::file(
            path,
            format!(
                "the part catalogue has format version {version}; this equiscan reads version {FORMAT_VERSION}"
            ),
            "build the catalogue again from its reference folder with this equiscan (`equiscan catalogue build`)",
        ));
    }
    let body = bytes.len() - 4;
    let crc = u32::from_le_bytes(bytes[body..].try_into().expect("4 bytes"));
    if crc32fast::hash(&bytes[..body]) != crc {
        return Err(damaged(
            path,
            "its CRC-32 does not match: truncated or changed",
        ));
    }
    let len = u64::from_le_bytes(bytes[12..20].try_into().expect("8 bytes"));
    let end = 20u64.saturating_add(len);
    if end > body as u64 {
        return Err(damaged(path, "its header runs past the end"));
    }
    let header: Header = serde_json::from_slice(&bytes[20..end as usize])
        .map_err(|e| damaged(path, &format!("its header is not valid: {e}")))?;
    let need: u64 = header.parts.iter().map(|e| e.points as u64 * 24).sum();
    if end + need != body as u64 {
        return Err(damaged(path, "the point data does not match the header"));
    }
    let mut refs = Vec::new();
    if with_points {
        let mut at = end as usize;
        let mut take = |n: usize| -> Vec<[f32; 3]> {
            let v = (0..n)
                .map(|i| {
                    std::array::from_fn(|k| {
                        let o = at + 12 * i + 4 * k;
                        f32::from_le_bytes(bytes[o..o + 4].try_into().expect("4 bytes"))
                    })
                })
                .collect();
            at += 12 * n;
            v
        };
        for e in &header.parts {
            let points = take(e.points);
            let normals = take(e.points);
            if points.iter().flatten().any(|v| !v.is_finite()) || points.is_empty() {
                return Err(damaged(
                    path,
                    &format!("part {} has no valid points", e.name),
                ));
            }
            let mut r = Reference::from_points(e.origin, points, normals);
            r.normals_estimated = e.normals_estimated;
            refs.push(r);
        }
    }
    Ok((header, refs))
}
