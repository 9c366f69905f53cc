//! Batch runs over many tiles: one feature file per input, with halos from neighbouring tiles,
//! a journal for resuming, and shards for splitting a run over processes or hosts.
//!
//! The shape, shared by the `batch` command and the Python package (one task per tile):
//!
//! 1. [`plan`]`(inputs, outdir, &`[`BatchOptions`]`)` expands the inputs (files, folders,
//!    glob patterns), reads every header (points, bounds, CRS), finds each tile's halo
//!    neighbours from the header bounds, checks the outputs and the journal, and returns a
//!    [`Plan`] (serde: it can be sent to another process as JSON). It makes OUTDIR and the
//!    journal folder, and records the run settings there (`run.json`); a journal of another
//!    recipe is refused unless [`BatchOptions::restart`].
//! 2. [`run_tile`]`(&plan, index)` for each index of [`Plan::todo`] (in any order, in any
//!    process): reads the tile and its halo, computes the descriptors, writes the output
//!    atomically and records it in the journal. A failed tile is recorded as failed and its
//!    error returned; the other tiles are not affected.
//! 3. [`Summary`] counts what was done, skipped (finished before) and failed; its
//!    [`Summary::exit_code`] is 0 only when every tile of the shard is done.
//!
//! ```no_run
//! use equiscan::batch::{BatchOptions, Summary, plan, run_tile};
//! use equiscan::descriptor::Recipe;
//! # fn main() -> equiscan::Result<()> {
//! let recipe = Recipe::builder().radius(0.5).build()?;
//! let opts = BatchOptions::new(recipe);
//! let plan = plan(&["tiles/".into()], "features/".as_ref(), &opts)?;
//! let mut summary = Summary::new(&plan);
//! for &i in &plan.todo {
//!     summary.add(&plan, i, &run_tile(&plan, i));
//! }
//! std::process::exit(summary.exit_code());
//! # }
//! ```
//!
//! Rows: one per point of the input, in the input's point order, with the columns of
//! `features` (see [`crate::descriptor::output`]); halo points are neighbours, never rows
//! ([`halo`] states the rule). Memory: one tile, its halo and the halo cache at a time; a
//! tile that would need more than [`BatchOptions::memory_budget`] whole is cut into spatial
//! blocks with the same halo rule and never held whole ([`chunked`]).
//!
//! Concurrency: [`run_tile`] may run for different tiles at once, in threads of one process
//! (the halo cache is shared under a lock) or in separate processes, even on several hosts
//! sharing OUTDIR (each output has its own journal record); the engine inside uses the
//! current rayon pool. Run one process per tile or per shard, not two for the same tile.

pub mod chunked;
pub mod halo;
pub mod inputs;
pub mod journal;

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::time::Instant;

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::descriptor::output::write_features;
use crate::descriptor::output::{CentreList, CentresInfo, FeatureWriter, FileSpec, Format};
use crate::descriptor::{Engine, Recipe};
use crate::error::{Error, Result};
use crate::io::guard::{FOLDER_MISSING, FOLDER_MISSING_FIX, check_outputs, folder_of};
use crate::io::{PointSource, read_cloud};
use crate::spatial::KdIndex;

pub use halo::{Bbox, HaloCache};
pub use journal::{JOURNAL_DIR, RunRecord, Stamp, Status, TileRecord};

/// Default bound of the halo cache, points (24 bytes each: about 100 MB).
pub const HALO_CACHE_POINTS: usize = 4 << 20;

/// Whether tiles lend each other halo points.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum TileGrid {
    /// Neighbours found from the header bounds lend their points within the largest support
    /// radius (inputs that do not touch lend nothing).
    Auto,
    /// Every input alone, as `features` would do it.
    Off,
}

impl std::str::FromStr for TileGrid {
    type Err = String;
    fn from_str(s: &str) -> std::result::Result<Self, String> {
        match s.to_ascii_lowercase().as_str() {
            "auto" => Ok(TileGrid::Auto),
            "off" => Ok(TileGrid::Off),
            _ => Err(format!("{s} is not a tile-grid mode; give auto or off")),
        }
    }
}

/// Shard `index` of `count` (1-based): the tiles at positions `index − 1`, `index − 1 + count`,
/// … of the sorted input list.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Shard {
    /// 1 to `count`.
    pub index: usize,
    /// Number of shards, at least 1.
    pub count: usize,
}

impl Shard {
    /// True when the tile at `position` of the sorted list belongs to this shard.
    pub fn takes(&self, position: usize) -> bool {
        position % self.count == self.index - 1
    }
}

impl std::str::FromStr for Shard {
    type Err = String;
    /// `K/N` with 1 ≤ K ≤ N.
    fn from_str(s: &str) -> std::result::Result<Self, String> {
        let bad = || format!("{s} is not a shard; give K/N with 1 <= K <= N, e.g. 1/4");
        let (k, n) = s.split_once('/').ok_or_else(bad)?;
        let index: usize = k.trim().parse().map_err(|_| bad())?;
        let count: usize = n.trim().parse().map_err(|_| bad())?;
        if index == 0 || count == 0 || index > count {
            return Err(bad());
        }
        Ok(Shard { index, count })
    }
}

/// Settings of a batch run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BatchOptions {
    /// The descriptor recipe (its largest radius is the halo width).
    pub recipe: Recipe,
    /// Output format (default NPY with its sidecar).
    pub format: Format,
    /// Halos from neighbouring tiles or not.
    pub tile_grid: TileGrid,
    /// This process's share of the tiles; `None`: all of them.
    pub shard: Option<Shard>,
    /// Redo every tile of the shard whatever the journal says, and record the new settings.
    pub restart: bool,
    /// Bound of the halo cache, points (0: no cache).
    pub halo_cache_points: usize,
    /// Memory a tile may take, bytes; a tile that would need more whole is processed in
    /// spatial blocks ([`chunked`]). `None`: [`chunked::default_budget`] (half the memory
    /// available when the tile starts). Not part of the run's settings: it never changes
    /// the rows.
    #[serde(default)]
    pub memory_budget: Option<u64>,
    /// Read a halo neighbour that this process runs later (after the current tile in
    /// [`Plan::todo`]) whole, and keep it for its turn, so that it is decoded once, not twice
    /// (within a quarter of the memory budget). Right for one process running the tiles of
    /// `todo` in order (the CLI); turn it off when the tiles are spread over processes (one
    /// task per tile on a cluster), where the kept tile would mostly run elsewhere.
    #[serde(default = "yes")]
    pub keep_neighbours_whole: bool,
}

fn yes() -> bool {
    true
}

impl BatchOptions {
    /// NPY outputs, halos on, all tiles, no restart, the default halo cache.
    pub fn new(recipe: Recipe) -> Self {
        BatchOptions {
            recipe,
            format: Format::Npy,
            tile_grid: TileGrid::Auto,
            shard: None,
            restart: false,
            halo_cache_points: HALO_CACHE_POINTS,
            memory_budget: None,
            keep_neighbours_whole: true,
        }
    }
}

/// One input of the run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Tile {
    /// The input file.
    pub input: PathBuf,
    /// Its feature file (`OUTDIR/<stem>.<ext>`); NPY and CSV get a sidecar beside it.
    pub output: PathBuf,
    /// Points the header declares.
    pub points: u64,
    /// Bounds from the header (for PLY, which has none, from a pass over the points when
    /// halos are on); `None` when unknown.
    pub bounds: Option<Bbox>,
    /// CRS text from the header, if any.
    pub crs: Option<String>,
    /// Size and time of the input when planned.
    pub stamp: Option<Stamp>,
    /// Indices (into [`Plan::tiles`]) of the tiles that lend this one halo points.
    pub halo: Vec<usize>,
    /// Why the header could not be read; such a tile fails when run.
    pub problem: Option<String>,
    /// True when the tile belongs to this process's shard.
    pub in_shard: bool,
}

/// The plan of a batch run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Plan {
    /// Output folder.
    pub outdir: PathBuf,
    /// The settings.
    pub options: BatchOptions,
    /// Halo width: the largest support radius (0 with `--tile-grid off`), file units.
    pub halo_width: f64,
    /// Every input, sorted by path (all shards, so halos can be found).
    pub tiles: Vec<Tile>,
    /// Tiles of this shard still to do, in order.
    pub todo: Vec<usize>,
    /// Tiles of this shard finished before (journal checked: sizes and CRC-32 match).
    pub finished: Vec<usize>,
    /// Notes for the user: skipped files, CRS differences, why tiles are redone.
    pub notes: Vec<String>,
}

impl Plan {
    /// The run settings as recorded in the journal.
    pub fn run_record(&self) -> RunRecord {
        RunRecord {
            journal_version: journal::JOURNAL_VERSION,
            recipe: self.options.recipe.clone(),
            format: self.options.format,
            halo: self.options.tile_grid == TileGrid::Auto,
        }
    }

    /// Every file written for tile `i` (data file first, then its sidecar if any).
    pub fn files_of(&self, i: usize) -> Vec<PathBuf> {
        self.options.format.files(&self.tiles[i].output)
    }

    /// The grown box of tile `i` (its halo reach); `None` without bounds or halos.
    fn reach(&self, i: usize) -> Option<Bbox> {
        if self.halo_width <= 0.0 {
            return None;
        }
        self.tiles[i]
            .bounds
            .map(|b| halo::reach(&b, self.halo_width))
    }

    /// Stamps of the halo neighbours of tile `i`, as a record keeps them.
    fn halo_stamps(&self, i: usize) -> Vec<(String, Option<Stamp>)> {
        self.tiles[i]
            .halo
            .iter()
            .map(|&j| {
                (
                    self.tiles[j].input.display().to_string(),
                    self.tiles[j].stamp.clone(),
                )
            })
            .collect()
    }
}

/// Plans a batch run (see the module documentation). Errors (exit code 2): inputs missing or
/// without any point-cloud file, OUTDIR a file or in a missing folder, two inputs of one stem,
/// an output that is an input, a journal of other settings without `restart`.
pub fn plan(inputs: &[PathBuf], outdir: &Path, opts: &BatchOptions) -> Result<Plan> {
    if outdir.exists() && !outdir.is_dir() {
        return Err(Error::file(
            outdir,
            "is a file, not a folder",
            "give a folder for -o (it is made when missing)",
        ));
    }
    if !outdir.exists() && !folder_of(outdir).is_dir() {
        return Err(Error::file(
            folder_of(outdir),
            FOLDER_MISSING,
            FOLDER_MISSING_FIX,
        ));
    }
    let found = inputs::expand(inputs, Some(outdir))?;
    let mut notes = found.notes;
    let format = opts.format;
    let mut stems = HashMap::new();
    let mut tiles = Vec::new();
    for (pos, input) in found.files.iter().enumerate() {
        let stem = input
            .file_stem()
            .map_or("features".to_string(), |s| s.to_string_lossy().into_owned());
        if let Some(other) = stems.insert(stem.clone(), input.clone()) {
            return Err(Error::file(
                input,
                format!(
                    "{} has the same name {stem}, so their outputs would collide",
                    other.display()
                ),
                "rename one, or run them into different output folders",
            ));
        }
        tiles.push(Tile {
            input: input.clone(),
            output: outdir.join(format!("{stem}.{}", format.ext())),
            points: 0,
            bounds: None,
            crs: None,
            stamp: None,
            halo: Vec::new(),
            problem: None,
            in_shard: opts.shard.is_none_or(|s| s.takes(pos)),
        });
    }
    let halos = opts.tile_grid == TileGrid::Auto;
    // Headers: point count, bounds, CRS (a failure here is the tile's, not the run's).
    tiles.par_iter_mut().for_each(|t| {
        if let Err(e) = read_header(t, halos) {
            t.problem = Some(e.to_string());
        }
    });
    crs_notes(&tiles, &mut notes);
    if halos {
        for t in tiles.iter().filter(|t| t.problem.is_some()) {
            notes.push(format!(
                "{}: the header cannot be read, so its neighbours get no halo points from it",
                t.input.display()
            ));
        }
    }
    let halo_width = if halos {
        opts.recipe.radii().iter().copied().fold(0.0f32, f32::max) as f64
    } else {
        0.0
    };
    if halos {
        find_neighbours(&mut tiles, halo_width);
    }
    // Outputs never inputs; then OUTDIR and the journal.
    let read: Vec<&Path> = tiles.iter().map(|t| t.input.as_path()).collect();
    let files: Vec<PathBuf> = tiles.iter().flat_map(|t| format.files(&t.output)).collect();
    let files: Vec<&Path> = files.iter().map(PathBuf::as_path).collect();
    std::fs::create_dir_all(journal::dir(outdir)).map_err(|e| Error::io(outdir, &e))?;
    chunked::remove_stale_chunk_dirs(outdir);
    check_outputs(&read, &files)?;
    let mut plan = Plan {
        outdir: outdir.to_path_buf(),
        options: opts.clone(),
        halo_width,
        tiles,
        todo: Vec::new(),
        finished: Vec::new(),
        notes,
    };
    let run = plan.run_record();
    if let Some(old) =
        journal::read_run(outdir).or_else(|e| if opts.restart { Ok(None) } else { Err(e) })?
    {
        let diff = run.differences(&old);
        if !diff.is_empty() && !opts.restart {
            return Err(Error::recipe(
                format!(
                    "{}: the journal holds outputs made with other settings ({})",
                    outdir.display(),
                    diff.join("; ")
                ),
                "give --restart to redo every tile with these settings, or another output folder",
            ));
        }
    }
    journal::write_json(&journal::dir(outdir).join("run.json"), &run)?;
    let digest = run.digest();
    let mine: Vec<usize> = (0..plan.tiles.len())
        .filter(|&i| plan.tiles[i].in_shard)
        .collect();
    let reasons: Vec<Option<String>> = mine
        .par_iter()
        .map(|&i| {
            if opts.restart {
                return Some("--restart".to_string());
            }
            let t = &plan.tiles[i];
            let rec = journal::read_record(&journal::record_path(outdir, &t.output));
            journal::unfinished_reason(
                rec.as_ref(),
                outdir,
                digest,
                t.stamp.as_ref(),
                &plan.halo_stamps(i),
            )
        })
        .collect();
    for (&i, why) in mine.iter().zip(reasons) {
        match why {
            None => plan.finished.push(i),
            Some(w) => {
                if w != "not done yet" && w != "--restart" {
                    plan.notes
                        .push(format!("{}: redone ({w})", plan.tiles[i].output.display()));
                }
                plan.todo.push(i);
            }
        }
    }
    Ok(plan)
}

/// Fills a tile's point count, bounds, CRS and stamp from its header.
fn read_header(t: &mut Tile, need_bounds: bool) -> Result<()> {
    t.stamp = Some(Stamp::of(&t.input)?);
    let mut src = PointSource::open(&t.input)?;
    let info = src.info().clone();
    t.points = info.point_count;
    t.crs = info.crs.clone();
    t.bounds = info.header_bounds.map(|b| Bbox {
        min: b.min,
        max: b.max,
    });
    if t.bounds.is_none() && need_bounds {
        // PLY carries no bounds: one pass over the points.
        let mut b: Option<Bbox> = None;
        while let Some(chunk) = src.next_chunk(1 << 20)? {
            if let Some(c) = Bbox::of_cloud(&chunk) {
                b = Some(match b {
                    None => c,
                    Some(o) => Bbox {
                        min: std::array::from_fn(|k| o.min[k].min(c.min[k])),
                        max: std::array::from_fn(|k| o.max[k].max(c.max[k])),
                    },
                });
            }
        }
        t.bounds = b;
    }
    Ok(())
}

/// The CRS most tiles have; a note for each tile with another (it lends and receives no halo).
fn crs_notes(tiles: &[Tile], notes: &mut Vec<String>) {
    let Some(common) = common_crs(tiles) else {
        return;
    };
    for t in tiles.iter().filter(|t| t.problem.is_none()) {
        if t.crs != common {
            notes.push(format!(
                "{}: its coordinate reference system ({}) differs from the other tiles' ({}); it is processed alone, without halo; check that it belongs to this run",
                t.input.display(),
                crs_short(t.crs.as_deref()),
                crs_short(common.as_deref()),
            ));
        }
    }
}

fn common_crs(tiles: &[Tile]) -> Option<Option<String>> {
    let mut counts: Vec<(Option<String>, usize)> = Vec::new();
    for t in tiles.iter().filter(|t| t.problem.is_none()) {
        match counts.iter_mut().find(|c| c.0 == t.crs) {
            Some(c) => c.1 += 1,
            None => counts.push((t.crs.clone(), 1)),
        }
    }
    // Most tiles first; ties to the first seen (sorted paths).
    let best = counts.iter().map(|c| c.1).max()?;
    counts.into_iter().find(|c| c.1 == best).map(|c| c.0)
}

/// A CRS for a message: its first 60 characters, or "none".
fn crs_short(crs: Option<&str>) -> String {
    match crs {
        None => "none".into(),
        Some(s) if s.chars().count() > 60 => format!("{}…", s.chars().take(60).collect::<String>()),
        Some(s) => s.to_string(),
    }
}

/// Halo neighbours: tiles of the common CRS whose bounds meet each other's grown box.
fn find_neighbours(tiles: &mut [Tile], width: f64) {
    let common = common_crs(tiles);
    let ok: Vec<bool> = tiles
        .iter()
        .map(|t| t.problem.is_none() && t.bounds.is_some() && Some(&t.crs) == common.as_ref())
        .collect();
    let n = tiles.len();
    for i in 0..n {
        if !ok[i] {
            continue;
        }
        let reach = halo::reach(&tiles[i].bounds.expect("checked"), width);
        tiles[i].halo = (0..n)
            .filter(|&j| j != i && ok[j] && reach.meets(&tiles[j].bounds.expect("checked")))
            .collect();
    }
}

/// What [`run_tile`] did.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TileOutcome {
    /// Index into [`Plan::tiles`].
    pub index: usize,
    /// The input.
    pub input: String,
    /// Files written, data file first.
    pub outputs: Vec<String>,
    /// Rows written (the tile's points).
    pub rows: u64,
    /// Halo points taken from neighbours.
    pub halo_points: u64,
    /// Wall-clock seconds.
    pub seconds: f64,
    /// Warnings (an unreadable neighbour: incomplete halo).
    pub warnings: Vec<String>,
    /// Spatial blocks the tile was processed in (0: read whole).
    #[serde(default)]
    pub blocks: usize,
}

/// Runs tile `index` of `plan` with the current rayon pool (see the module documentation).
pub fn run_tile(plan: &Plan, index: usize) -> Result<TileOutcome> {
    run_tile_with(plan, index, None)
}

/// [`run_tile`] with a progress callback, called with the number of rows just finished
/// (from worker threads).
pub fn run_tile_with(
    plan: &Plan,
    index: usize,
    progress: Option<&(dyn Fn(usize) + Sync)>,
) -> Result<TileOutcome> {
    let t0 = Instant::now();
    let tile = plan.tiles.get(index).ok_or_else(|| {
        Error::invalid(
            format!(
                "tile {index} is not in the plan ({} tiles)",
                plan.tiles.len()
            ),
            "give an index of Plan::todo",
        )
    })?;
    let digest = plan.run_record().digest();
    let record_path = journal::record_path(&plan.outdir, &tile.output);
    let mut record = TileRecord {
        journal_version: journal::JOURNAL_VERSION,
        status: Status::Failed,
        input: tile.input.display().to_string(),
        run: digest,
        stamp: tile.stamp.clone(),
        halo_stamps: plan.halo_stamps(index),
        files: Vec::new(),
        rows: 0,
        halo_points: 0,
        seconds: 0.0,
        error: None,
        warnings: Vec::new(),
    };
    match compute_tile(plan, index, &mut record, progress) {
        Ok(blocks) => {
            record.status = Status::Done;
            record.seconds = t0.elapsed().as_secs_f64();
            journal::write_json(&record_path, &record)?;
            Ok(TileOutcome {
                index,
                input: record.input.clone(),
                outputs: plan
                    .files_of(index)
                    .iter()
                    .map(|p| p.display().to_string())
                    .collect(),
                rows: record.rows,
                halo_points: record.halo_points,
                seconds: record.seconds,
                warnings: record.warnings,
                blocks,
            })
        }
        Err(e) => {
            record.error = Some(e.to_string());
            record.seconds = t0.elapsed().as_secs_f64();
            // Best effort: a full disk may refuse the record too; the error is still returned.
            let _ = journal::write_json(&record_path, &record);
            Err(e)
        }
    }
}

/// Reads, computes and writes one tile; fills the record's figures. Returns the number of
/// spatial blocks it was processed in (0: whole).
fn compute_tile(
    plan: &Plan,
    index: usize,
    record: &mut TileRecord,
    progress: Option<&(dyn Fn(usize) + Sync)>,
) -> Result<usize> {
    let tile = &plan.tiles[index];
    if let Some(p) = &tile.problem {
        // The header's own message already names the file and the fix.
        let (what, fix) = p
            .rsplit_once("; ")
            .unwrap_or((p.as_str(), "repair or remove the file, then run again"));
        return Err(Error::invalid(what, fix).with_kind(crate::error::Kind::Input));
    }
    let budget = plan
        .options
        .memory_budget
        .unwrap_or_else(chunked::default_budget);
    // Read whole already, as a neighbour of an earlier tile.
    let cached = tile
        .stamp
        .as_ref()
        .and_then(|st| HaloCache::take_whole(&tile.input, st));
    let (cloud, info) = match cached {
        Some(c) => c,
        None => match read_or_chunk(plan, index, record, progress, budget)? {
            Whole::Read(whole) => *whole,
            Whole::Chunked(blocks) => return Ok(blocks),
        },
    };
    // Neighbours were chosen from the header bounds: points outside them may be missed.
    if let (Some(b), Some(actual)) = (tile.bounds, Bbox::of_cloud(&cloud))
        && plan.halo_width > 0.0
        && !tile.halo.is_empty()
    {
        let slack = 1e-3 * plan.halo_width;
        if !(b.grown(slack).contains(actual.min) && b.grown(slack).contains(actual.max)) {
            record.warnings.push(
                "points lie outside the bounds its header declares, so neighbouring tiles may miss some of them in their halos; rewrite the file's header".to_string(),
            );
        }
    }
    let limit = plan.options.halo_cache_points;
    // What this tile lends its neighbours, kept while the cloud is in memory.
    if let Some(st) = &tile.stamp {
        let boxes: Vec<Bbox> = tile.halo.iter().filter_map(|&j| plan.reach(j)).collect();
        HaloCache::keep_from_cloud(&tile.input, st.clone(), &cloud, boxes, limit);
    }
    let mut points = cloud.positions.clone();
    points.extend(
        gather_halo(plan, index, record, budget)
            .iter()
            .map(|g| std::array::from_fn(|k| (g[k] - cloud.origin[k]) as f32)),
    );
    let recipe = plan.options.recipe.clone();
    let engine = Engine::new(recipe.clone());
    let spec = FileSpec {
        path: tile.output.clone(),
        format: plan.options.format,
        recipe,
        input: info,
        centres: CentresInfo::All,
        radius_suggested: false,
    };
    let centres = CentreList::All(cloud.len());
    let mut writer = FeatureWriter::create(&cloud, spec, &centres)?;
    if !cloud.is_empty() {
        let index = KdIndex::new(&points).map_err(|_| {
            Error::internal(
                "a tile with points gave an empty index",
                "report this as a bug",
            )
        })?;
        write_features(&engine, &points, &index, &centres, &mut writer, progress)?;
    }
    let written = writer.finish()?;
    record.rows = written.rows as u64;
    record.files = journal::file_records(&written.files)?;
    Ok(0)
}

/// How [`compute_tile`] gets a tile not cached whole.
enum Whole {
    /// Read whole.
    Read(Box<(crate::cloud::Cloud, crate::io::FileInfo)>),
    /// Done in this many spatial blocks.
    Chunked(usize),
}

/// Reads tile `index` whole, or, when that would take more than `budget` bytes and its
/// output can be written in chunks, runs it in spatial blocks ([`chunked`]).
fn read_or_chunk(
    plan: &Plan,
    index: usize,
    record: &mut TileRecord,
    progress: Option<&(dyn Fn(usize) + Sync)>,
    budget: u64,
) -> Result<Whole> {
    let tile = &plan.tiles[index];
    // Whole or in blocks: the estimated memory of a whole read against the budget.
    let src = PointSource::open(&tile.input)?;
    let (points, record_len, format) = {
        let i = src.info();
        (
            i.point_count,
            i.record_length.unwrap_or(0) as u64,
            i.format.clone(),
        )
    };
    let whole = chunked::whole_bytes(points, record_len);
    if whole > budget && points > 0 {
        if tile.bounds.is_some() && format != "E57" {
            let halo = gather_halo(plan, index, record, budget);
            let done = chunked::run(
                plan,
                index,
                src,
                &halo,
                chunked::block_points(budget),
                record,
                progress,
            )?;
            return Ok(Whole::Chunked(done.blocks));
        }
        record.warnings.push(format!(
            "read whole although it needs about {} MB, above the memory budget of {} MB: {}",
            whole >> 20,
            budget >> 20,
            if format == "E57" {
                "E57 scans are not read in chunks"
            } else {
                "its bounds are unknown"
            }
        ));
    }
    drop(src);
    let (cloud, info) = read_cloud(&tile.input)?;
    Ok(Whole::Read(Box::new((cloud, info))))
}

/// The points the halo neighbours of tile `index` lend it (global coordinates, neighbours in
/// plan order, each in its file order); counts them in the record and warns of unreadable
/// neighbours.
fn gather_halo(plan: &Plan, index: usize, record: &mut TileRecord, budget: u64) -> Vec<[f64; 3]> {
    let tile = &plan.tiles[index];
    let limit = plan.options.halo_cache_points;
    // Neighbours this process runs later are read whole and kept for their turn, within a
    // quarter of the budget.
    let whole_limit = (budget / 4).min(usize::MAX as u64) as usize;
    let later: &[usize] = plan
        .todo
        .iter()
        .position(|&k| k == index)
        .map_or(&[], |p| &plan.todo[p + 1..]);
    let mut out = Vec::new();
    if let Some(want) = plan.reach(index) {
        for &j in &tile.halo {
            let nb = &plan.tiles[j];
            let boxes: Vec<Bbox> = nb.halo.iter().filter_map(|&k| plan.reach(k)).collect();
            let small = chunked::whole_bytes(nb.points, 64) <= whole_limit as u64;
            let keep =
                if plan.options.keep_neighbours_whole && later.contains(&j) && small && limit > 0 {
                    whole_limit
                } else {
                    0
                };
            match HaloCache::points_for(&nb.input, nb.stamp.as_ref(), &want, boxes, limit, keep) {
                Ok(pts) => {
                    record.halo_points += pts.len() as u64;
                    out.extend_from_slice(&pts);
                }
                Err(e) => record.warnings.push(format!(
                    "incomplete halo: neighbour {} could not be read ({e})",
                    nb.input.display()
                )),
            }
        }
    }
    out
}

/// One failed tile.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Failure {
    /// The input.
    pub input: String,
    /// The one-line error.
    pub error: String,
}

/// Counts of a batch run (this process's shard).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Summary {
    /// Tiles of the shard.
    pub tiles: usize,
    /// Tiles done by this run.
    pub done: usize,
    /// Tiles finished before (journal checked), not redone.
    pub skipped: usize,
    /// Tiles that failed.
    pub failed: usize,
    /// Rows written by this run (points of the tiles done).
    pub points: u64,
    /// Halo points read as neighbours.
    pub halo_points: u64,
    /// Wall-clock seconds since [`Summary::new`].
    pub seconds: f64,
    /// `points / seconds`.
    pub points_per_second: f64,
    /// The failed tiles with their errors.
    pub failures: Vec<Failure>,
    /// Warnings of tiles done (incomplete halos).
    pub warnings: Vec<String>,
    #[serde(skip)]
    started: Option<Instant>,
}

impl Summary {
    /// A summary of `plan`'s shard with its finished tiles counted as skipped; the clock
    /// starts now.
    pub fn new(plan: &Plan) -> Summary {
        Summary {
            tiles: plan.todo.len() + plan.finished.len(),
            done: 0,
            skipped: plan.finished.len(),
            failed: 0,
            points: 0,
            halo_points: 0,
            seconds: 0.0,
            points_per_second: 0.0,
            failures: Vec::new(),
            warnings: Vec::new(),
            started: Some(Instant::now()),
        }
    }

    /// Counts the result of [`run_tile`] for tile `index`.
    pub fn add(&mut self, plan: &Plan, index: usize, result: &Result<TileOutcome>) {
        match result {
            Ok(o) => {
                self.done += 1;
                self.points += o.rows;
                self.halo_points += o.halo_points;
                self.warnings
                    .extend(o.warnings.iter().map(|w| format!("{}: {w}", o.input)));
            }
            Err(e) => {
                self.failed += 1;
                self.failures.push(Failure {
                    input: plan.tiles[index].input.display().to_string(),
                    error: e.to_string(),
                });
            }
        }
        if let Some(t) = self.started {
            self.seconds = t.elapsed().as_secs_f64();
        }
        self.points_per_second = self.points as f64 / self.seconds.max(1e-9);
    }

    /// 0 when every tile of the shard is done (now or before), 1 otherwise.
    pub fn exit_code(&self) -> i32 {
        if self.failed == 0 && self.done + self.skipped == self.tiles {
            0
        } else {
            1
        }
    }
}
