//! Feature files: descriptors computed in chunks of centres and written row by row, so memory
//! stays bounded (the cloud, its index and a few chunks) and rows reach the file before the
//! whole cloud is done.
//!
//! [`FeatureWriter`] is one sink per format ([`Format`]): NPY (float32, C order) and CSV, each
//! with its own JSON [`Sidecar`] named `<file>.json`; binary PLY (the centres in global
//! coordinates with their attributes and the columns as float properties); LAS/LAZ 1.4 (the
//! centres with their attributes, the columns as f32 Extra Bytes). [`write_features`] drives
//! the [`Engine`] over successive chunks of centres and feeds the writer in order.
//!
//! Columns, in order: for NPY and CSV `x_local y_local z_local` (the centre in the input's
//! local frame; the sidecar gives the origin to add); then per scale `{s}_count {s}_flags`;
//! then the invariants ([`Recipe::column_names`]); then, when the recipe keeps them, the
//! coefficients ([`Recipe::coefficient_names`], `[scale][n][l² + l + m]`). The bytes depend on
//! the input and the recipe only, not on the chunk size or the thread count.
//!
//! Replacement as a whole: every file is written under a temporary name and renamed when
//! complete. A data file and its sidecar are both complete before either is renamed, the data
//! file first and the sidecar last; the sidecar records the data file's size and CRC-32, so
//! [`verify`] refuses a pair torn by a kill between the two renames.

mod cost;
mod parquet;
mod plan;
mod run;
mod sidecar;
mod sinks;

use std::path::{Path, PathBuf};

use crate::cloud::Cloud;
use crate::descriptor::{Centres, Engine, Features, PreparedCloud, Recipe};
use crate::error::{Error, Result};
use crate::io::{FileInfo, LasOptions};
use crate::spatial::KdIndex;

pub use cost::{Cost, estimate};
pub use parquet::{ROW_GROUP_BYTES, row_group_rows};
pub use plan::{Job, plan};
pub use run::{Budget, CentreChoice, Summary, check_budget, choose_centres, radius_from_spacing};
pub use sidecar::{
    CentresInfo, CountSummary, Metadata, SIDECAR_VERSION, Sidecar, checksum, sidecar_path, verify,
};

/// Bytes of output rows computed per chunk (each chunk is computed in parallel, then written;
/// the engine reuses one chunk's buffers for the next ([`Engine::recycle`]), so only the first
/// chunk's pages are fresh: a 50 000-point `features` run took 8 530 page faults with 16 MB
/// chunks and fresh buffers, 3 360 with 4 MB). 1 MB, small enough for the recycled buffers to
/// stay in a core's second-level cache, measured faster than 4 MB (DEVELOPERS.md, "Descriptor
/// engine: 2.5× goal").
const CHUNK_BYTES: usize = 1 << 20;

/// Feature-file formats.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
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
    /// Apache Parquet: file coordinates (f64), point attributes, feature columns (f32).
    Parquet,
}

impl Format {
    /// The format named by a file's extension (without case), if any.
    pub fn from_path(p: &Path) -> Option<Format> {
        let ext = p.extension()?.to_str()?.to_ascii_lowercase();
        Some(match ext.as_str() {
            "npy" => Format::Npy,
            "ply" => Format::Ply,
            "csv" => Format::Csv,
            "las" => Format::Las,
            "laz" => Format::Laz,
            "parquet" => Format::Parquet,
            _ => return None,
        })
    }

    /// The file extension.
    pub fn ext(self) -> &'static str {
        match self {
            Format::Npy => "npy",
            Format::Ply => "ply",
            Format::Csv => "csv",
            Format::Las => "las",
            Format::Laz => "laz",
            Format::Parquet => "parquet",
        }
    }

    /// True for the formats written with a JSON sidecar.
    pub fn has_sidecar(self) -> bool {
        matches!(self, Format::Npy | Format::Csv)
    }

    /// Every file written for `data`: the data file and, for NPY and CSV, its sidecar.
    pub fn files(self, data: &Path) -> Vec<PathBuf> {
        let mut v = vec![data.to_path_buf()];
        if self.has_sidecar() {
            v.push(sidecar_path(data));
        }
        v
    }
}

impl std::str::FromStr for Format {
    type Err = String;

    /// `npy`, `ply`, `csv`, `las`, `laz` or `parquet`, without case.
    fn from_str(s: &str) -> std::result::Result<Format, String> {
        Format::from_path(Path::new(&format!("x.{s}"))).ok_or_else(|| {
            format!("{s} is not a feature-file format; give npy, ply, csv, las, laz or parquet")
        })
    }
}

/// The centres to compute, in row order.
#[derive(Debug, Clone, PartialEq)]
pub enum CentreList {
    /// Every point of the cloud, in order.
    All(usize),
    /// These points of the cloud.
    Points(Vec<usize>),
    /// Positions in the cloud's local frame (not points of the cloud: no attributes).
    Positions(Vec<[f32; 3]>),
}

impl CentreList {
    /// Number of centres (rows).
    pub fn len(&self) -> usize {
        match self {
            CentreList::All(n) => *n,
            CentreList::Points(v) => v.len(),
            CentreList::Positions(v) => v.len(),
        }
    }

    /// True without centres.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// True when the centres are points of the cloud (rows carry their attributes).
    pub fn are_points(&self) -> bool {
        !matches!(self, CentreList::Positions(_))
    }
}

/// Everything a feature file records besides the rows.
#[derive(Debug, Clone)]
pub struct FileSpec {
    /// Output path; its format is `format`.
    pub path: PathBuf,
    /// Output format.
    pub format: Format,
    /// The recipe the rows are computed with.
    pub recipe: Recipe,
    /// The input's header summary (LAS layout and CRS are kept in LAS/LAZ outputs).
    pub input: FileInfo,
    /// How the centres were chosen (sidecar).
    pub centres: CentresInfo,
    /// True when the radius was suggested from the point spacing (sidecar).
    pub radius_suggested: bool,
}

/// What [`FeatureWriter::finish`] wrote.
#[derive(Debug, Clone)]
pub struct Written {
    /// Files written, data file first.
    pub files: Vec<PathBuf>,
    /// Rows written.
    pub rows: usize,
    /// Columns per row.
    pub columns: usize,
    /// Neighbour counts per scale.
    pub counts: Vec<CountSummary>,
}

/// Column names of a feature file of `recipe` in `format`, in order.
pub fn column_names(recipe: &Recipe, format: Format) -> Vec<String> {
    let mut names: Vec<String> = Vec::new();
    if format.has_sidecar() {
        names.extend(["x_local", "y_local", "z_local"].map(String::from));
    }
    names.extend(recipe.count_column_names());
    names.extend(recipe.column_names());
    if recipe.keep_coefficients() {
        names.extend(recipe.coefficient_names());
    }
    names
}

/// Running neighbour-count statistics per scale.
#[derive(Debug, Clone)]
struct CountStats {
    min: Vec<Option<u32>>,
    max: Vec<Option<u32>>,
    sum: Vec<f64>,
    zero: Vec<usize>,
    rows: usize,
}

impl CountStats {
    fn new(scales: usize) -> Self {
        CountStats {
            min: vec![None; scales],
            max: vec![None; scales],
            sum: vec![0.0; scales],
            zero: vec![0; scales],
            rows: 0,
        }
    }

    fn add(&mut self, f: &Features) {
        for i in 0..f.len() {
            for s in 0..self.sum.len() {
                let c = f.count(i, s);
                self.min[s] = Some(self.min[s].map_or(c, |m| m.min(c)));
                self.max[s] = Some(self.max[s].map_or(c, |m| m.max(c)));
                self.sum[s] += c as f64;
                self.zero[s] += (c == 0) as usize;
            }
        }
        self.rows += f.len();
    }

    fn summary(&self, recipe: &Recipe) -> Vec<CountSummary> {
        (0..self.sum.len())
            .map(|s| CountSummary {
                // the radius as written in the recipe (shortest f32 decimal), not widened
                radius: format!("{}", recipe.radii()[s])
                    .parse::<f64>()
                    .unwrap_or(0.0),
                min: self.min[s],
                mean: self.sum[s] / self.rows.max(1) as f64,
                max: self.max[s],
                without_neighbours: self.zero[s],
            })
            .collect()
    }
}

/// Appends row `i` of `f` in file column order ([`column_names`]; the local coordinates first
/// when `with_local`, as in NPY and CSV files).
pub fn push_row(f: &Features, i: usize, with_local: bool, out: &mut Vec<f32>) {
    for part in row_parts(f, i, with_local, out) {
        out.extend_from_slice(part);
    }
}

/// Row `i` of `f` in file column order in three parts: the head (local coordinates when
/// `with_local`, then count and flag per scale) appended to `head`, then the invariants and
/// the coefficients (empty when not kept), borrowed from `f`.
pub(crate) fn row_parts<'f>(
    f: &'f Features,
    i: usize,
    with_local: bool,
    head: &mut Vec<f32>,
) -> [&'f [f32]; 2] {
    if with_local {
        head.extend_from_slice(&f.positions[i]);
    }
    for s in 0..f.recipe.scales() {
        head.push(f.count(i, s) as f32);
        head.push(f.flag(i, s) as f32);
    }
    let coefficients = f.coefficients.as_ref().map_or(&[][..], |k| {
        let per = k.len() / f.len().max(1);
        &k[i * per..(i + 1) * per]
    });
    [f.row(i), coefficients]
}

/// A feature file being written: rows go in with [`FeatureWriter::push`] in order, and
/// [`FeatureWriter::finish`] completes the file (and its sidecar) and puts it in place.
/// Dropping it unfinished removes the temporary files and leaves any existing output as it was.
pub struct FeatureWriter<'a> {
    cloud: &'a Cloud,
    spec: FileSpec,
    names: Vec<String>,
    rows: usize,
    written: usize,
    stats: CountStats,
    sink: sinks::Sink,
    /// Point index of each row for voxel centres (sidecar).
    indices: Option<Vec<usize>>,
}

impl<'a> FeatureWriter<'a> {
    /// Starts a feature file of `centres.len()` rows of centres of `cloud`. The centres decide
    /// whether rows carry point attributes (PLY, LAS) and, for voxel centres, the sidecar's
    /// `centre_indices`.
    pub fn create(cloud: &'a Cloud, spec: FileSpec, centres: &CentreList) -> Result<Self> {
        Self::start(cloud, spec, centres, None)
    }

    /// Starts a feature file of `centres.len()` rows whose point attributes come with each
    /// chunk ([`FeatureWriter::push_with`]) rather than from one cloud held whole: `frame`
    /// gives the origin (the sidecar's) and which attributes are present (its columns may be
    /// empty); `wide_colour` tells a PLY output that some colour exceeds 255.
    pub fn create_streaming(
        frame: &'a Cloud,
        spec: FileSpec,
        centres: &CentreList,
        wide_colour: bool,
    ) -> Result<Self> {
        Self::start(frame, spec, centres, Some(wide_colour))
    }

    fn start(
        cloud: &'a Cloud,
        spec: FileSpec,
        centres: &CentreList,
        wide: Option<bool>,
    ) -> Result<Self> {
        let names = column_names(&spec.recipe, spec.format);
        let rows = centres.len();
        let sink = sinks::Sink::create(cloud, &spec, &names, centres, wide)?;
        let indices = match (&spec.centres, centres) {
            (CentresInfo::Voxel { .. }, CentreList::Points(ix)) => Some(ix.clone()),
            _ => None,
        };
        Ok(FeatureWriter {
            cloud,
            stats: CountStats::new(spec.recipe.scales()),
            spec,
            names,
            rows,
            written: 0,
            sink,
            indices,
        })
    }

    /// Column names, in file order.
    pub fn columns(&self) -> &[String] {
        &self.names
    }

    /// Writes the rows of `chunk` (the next rows in order). For centres that are cloud points,
    /// `chunk.indices` must hold their point indices.
    pub fn push(&mut self, chunk: &Features) -> Result<()> {
        let cloud = self.cloud;
        self.push_with(cloud, chunk)
    }

    /// [`FeatureWriter::push`] with the point attributes of these rows taken from `cloud`
    /// (`chunk.indices` index into it): for a writer made by
    /// [`FeatureWriter::create_streaming`], `cloud` holds the rows' points in order.
    pub fn push_with(&mut self, cloud: &Cloud, chunk: &Features) -> Result<()> {
        if self.written + chunk.len() > self.rows {
            return Err(Error::file(
                &self.spec.path,
                format!("more rows than the {} announced in the header", self.rows),
                "report this as a bug",
            ));
        }
        self.sink.push(cloud, chunk, &self.names)?;
        self.stats.add(chunk);
        self.written += chunk.len();
        Ok(())
    }

    /// Completes the file and its sidecar, then renames the data file and the sidecar onto
    /// their names (the sidecar last).
    pub fn finish(self) -> Result<Written> {
        if self.written != self.rows {
            return Err(Error::file(
                &self.spec.path,
                format!("{} rows written of {}", self.written, self.rows),
                "report this as a bug",
            ));
        }
        let counts = self.stats.summary(&self.spec.recipe);
        let data = self.sink.finish()?;
        let path = self.spec.path.clone();
        let mut files = vec![path.clone()];
        match data {
            sinks::Done::Alone(f) => f.commit()?,
            sinks::Done::WithSidecar { file, bytes, crc32 } => {
                let side_path = sidecar_path(&path);
                let doc = Sidecar {
                    sidecar_version: SIDECAR_VERSION,
                    file: path
                        .file_name()
                        .map(|f| f.to_string_lossy().into_owned())
                        .unwrap_or_default(),
                    format: self.spec.format.ext().to_string(),
                    bytes,
                    crc32,
                    dtype: (self.spec.format == Format::Npy).then(|| "float32".to_string()),
                    order: (self.spec.format == Format::Npy).then(|| "C".to_string()),
                    rows: self.rows,
                    columns: self.names.clone(),
                    metadata: Metadata {
                        input: self.spec.input.path.clone(),
                        origin: self.cloud.origin,
                        coordinates:
                            "x_local, y_local, z_local are f32 offsets from origin (file units)"
                                .to_string(),
                        recipe: self.spec.recipe.clone(),
                        centres: self.spec.centres.clone(),
                        centre_indices: self.indices,
                        radius_suggested: self.spec.radius_suggested,
                        counts: counts.clone(),
                        layout: "rows follow the centres; per scale count and flags, then \
                                 invariants (norms l outer n inner; power spectrum l, n, n' >= n; \
                                 bispectrum n, l1 <= l2, l), then coefficients \
                                 [scale][n][l^2 + l + m]"
                            .to_string(),
                        crs: self.spec.input.crs.clone(),
                        units: self
                            .spec
                            .input
                            .crs
                            .as_deref()
                            .and_then(crate::io::crs::units_label),
                    },
                };
                let text = serde_json::to_string_pretty(&doc)
                    .map_err(|e| Error::file(&side_path, e.to_string(), "report this as a bug"))?;
                // Both complete before either is renamed; a failure here leaves the old pair.
                let mut side = crate::io::TempFile::create(&side_path)?;
                {
                    use std::io::Write;
                    let w = side.writer();
                    w.write_all(text.as_bytes())
                        .and_then(|_| w.write_all(b"\n"))
                        .map_err(|e| Error::io(&side_path, &e))?;
                }
                let side = side.finish()?;
                file.commit()?;
                side.commit()?;
                files.push(side_path);
            }
        }
        Ok(Written {
            files,
            rows: self.rows,
            columns: self.names.len(),
            counts,
        })
    }
}

/// Rows per chunk for `columns` f32 columns: about 1 MiB of output, 1 024 to 65 536.
pub fn chunk_rows(columns: usize) -> usize {
    (CHUNK_BYTES / (4 * columns.max(1))).clamp(1 << 10, 1 << 16)
}

/// Computes the descriptors of `centres` with `engine` over `points` (indexed by `index`), in
/// chunks of [`chunk_rows`] centres, and pushes each chunk to `writer` in order. `progress`
/// is called with the number of centres finished (from worker threads).
pub fn write_features(
    engine: &Engine,
    points: &[[f32; 3]],
    index: &KdIndex,
    centres: &CentreList,
    writer: &mut FeatureWriter<'_>,
    progress: Option<&(dyn Fn(usize) + Sync)>,
) -> Result<()> {
    // The cell grid is built once for the whole cloud, not once per chunk (each run over a
    // fresh grid of all the points made writing N points O(N²/step)).
    let prepared = engine.prepare(points, index)?;
    write_features_prepared(engine, &prepared, centres, writer, progress)
}

/// [`write_features`] over a cloud already prepared for `engine` ([`Engine::prepare`] or,
/// without a k-d tree, [`Engine::prepare_own`]); the same bytes.
pub fn write_features_prepared(
    engine: &Engine,
    prepared: &PreparedCloud<'_>,
    centres: &CentreList,
    writer: &mut FeatureWriter<'_>,
    progress: Option<&(dyn Fn(usize) + Sync)>,
) -> Result<()> {
    let step = chunk_rows(writer.columns().len());
    write_features_in(engine, prepared, centres, writer, progress, step)
}

/// [`write_features_prepared`] with `step` centres per chunk.
fn write_features_in(
    engine: &Engine,
    prepared: &PreparedCloud<'_>,
    centres: &CentreList,
    writer: &mut FeatureWriter<'_>,
    progress: Option<&(dyn Fn(usize) + Sync)>,
    step: usize,
) -> Result<()> {
    let n = centres.len();
    let mut start = 0;
    while start < n {
        let end = (start + step).min(n);
        let chunk = match centres {
            CentreList::All(_) => engine.compute_prepared(
                prepared,
                &Centres::Indices((start..end).collect()),
                progress,
            )?,
            CentreList::Points(ix) => engine.compute_prepared(
                prepared,
                &Centres::Indices(ix[start..end].to_vec()),
                progress,
            )?,
            CentreList::Positions(at) => {
                engine.compute_at_prepared(prepared, &at[start..end], progress)?
            }
        };
        writer.push(&chunk)?;
        engine.recycle(chunk);
        start = end;
    }
    Ok(())
}

/// A keypoint within this fraction of the smallest support radius of an input point is taken
/// to be that point.
pub const SNAP: f32 = 1e-4;

/// Places the points of `keypoints` (any origin) in `cloud`'s local frame; a keypoint within
/// [`SNAP`] × `radius` of a point of `cloud` is taken to be that point (file formats round
/// coordinates, so a keypoint taken from the input lands a hair off its point). Returns the
/// positions and how many were matched to points.
pub fn place_keypoints(
    cloud: &Cloud,
    index: &KdIndex,
    keypoints: &Cloud,
    radius: f32,
) -> (Vec<[f32; 3]>, usize) {
    let tol = SNAP * radius;
    let mut matched = 0usize;
    let at = (0..keypoints.len())
        .map(|i| {
            let g = keypoints.global(i);
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
    (at, matched)
}

/// The options of a LAS/LAZ output of an input with header `info`.
fn las_options(info: &FileInfo) -> LasOptions {
    LasOptions::like(info)
}

#[cfg(test)]
mod tests;
