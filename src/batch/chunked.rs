//! A single input too large for memory, processed in spatial blocks with the halo rule.
//!
//! When a tile would need more memory whole than the run's memory budget
//! ([`BatchOptions::memory_budget`](super::BatchOptions::memory_budget), default
//! [`default_budget`]), it is never held whole:
//!
//! 1. **Split** (one streaming pass over the input, chunks of [`READ_CHUNK`] points): the local
//!    f32 positions go to a raw temporary file in point order, and a histogram of the points
//!    on a [`GRID`] × [`GRID`] grid of cells over the header's x–y bounds is counted (points
//!    outside the bounds fall in the edge cells).
//! 2. **Blocks**: the grid is bisected recursively (along the longer side, at the cell line
//!    where the running count passes half) until every block holds at most
//!    [`block_points`]`(budget)` points or is one cell; blocks are rectangles of cells, and a
//!    block on the grid's border extends to infinity on that side, so every point lies in the
//!    region of exactly one block (its cell's).
//! 3. **Distribute** (one sequential pass over the raw file): each point goes to its block's
//!    file as a centre (with its index in the input), and, as a neighbour only, to the file of
//!    every other block whose region grown by 1.01 × the largest support radius holds it —
//!    the same rule as the halo of tiles ([`super::halo`]): any point within `r` of a centre
//!    of the block lies in that grown region. Halo points that neighbouring tiles lend the
//!    input go, as neighbours only, to every block whose grown region holds them.
//! 4. **Compute** block by block: the block's centres and neighbours are indexed and the
//!    descriptors of the centres written, each row after its input index, to the block's rows
//!    file (rows in increasing index order).
//! 5. **Merge**: the rows files are merged by input index (a k-way merge, one row of each
//!    block in memory at a time) into the feature file, through the same writer as an
//!    unchunked run, so the output is in the input's point order.
//!
//! Positions are the input's own local f32 offsets (the reader's origin, as a whole read), so
//! a centre's neighbours are exactly those of the whole file; only the order of the neighbour
//! sums differs (the index is built over another set), hence rows equal the whole file's to
//! float rounding, counts and flags exactly (tests/batch_chunks.rs).
//!
//! Temporary files live in a folder of the journal folder, `chunks.HOST.PID.TILE`, removed
//! when the tile ends (done or failed); a folder left by a killed process is removed by the
//! next plan on the same host ([`remove_stale_chunk_dirs`]). Disk use while a tile runs: 12
//! bytes per point (split), then 20 bytes per point and halo point (blocks), then the rows
//! files (the output's size plus 8 bytes per row).
//!
//! Every output format: NPY and CSV rows come from the merge alone; PLY, LAS, LAZ and Parquet
//! rows copy each point's attributes (LAS: its whole record), so the merge reads the input a
//! second time, in order, a chunk at a time, beside the rows (a second decode for LAZ
//! inputs). E57 inputs (decoded whole by their reader) and inputs without bounds are read
//! whole, with a warning when that exceeds the budget.

use std::cmp::Reverse;
use std::collections::BinaryHeap;
use std::fs::{self, File};
use std::io::{BufReader, BufWriter, Read, Write};
use std::path::{Path, PathBuf};

use crate::cloud::Cloud;
use crate::descriptor::output::{
    CentreList, CentresInfo, FeatureWriter, FileSpec, Format, chunk_rows, column_names, push_row,
};
use crate::descriptor::{Centres, Engine, Features, Recipe};
use crate::error::{Error, Result};
use crate::io::{PointSource, TempOwner, host_label, remove_stale_entries};
use crate::spatial::KdIndex;

use super::Plan;
use super::halo::{self, Bbox, HaloCache};
use super::journal::{self, TileRecord};

/// Points read per chunk in the split pass.
pub const READ_CHUNK: usize = 1 << 16;
/// Cells per axis of the histogram the blocks are cut from.
pub const GRID: usize = 256;
/// At most this many blocks (one file open for each while distributing); above it blocks get
/// larger than the budget asks.
pub const MAX_BLOCKS: usize = 256;
/// Memory not proportional to the points of a tile: the program, the rows of one chunk being
/// computed and written (about 16 MiB, twice), buffers; bytes.
pub const RESERVE_BYTES: u64 = 48 << 20;
/// Memory per point of a tile read whole, besides its LAS record: f32 position, attributes,
/// k-d tree, cell grid, halo share; bytes (measured: about 110 bytes per point of a LAS 1.4
/// format 7 input with 36-byte records, DEVELOPERS.md "Batch runs").
pub const WHOLE_BYTES_PER_POINT: u64 = 80;
/// Memory per point (centre or neighbour) of a block: f32 position, input index, k-d tree,
/// cell grid; bytes.
pub const BLOCK_BYTES_PER_POINT: u64 = 64;
/// Blocks hold at least this many points (a budget below the reserve still makes progress).
pub const MIN_BLOCK_POINTS: u64 = 4096;
/// Budget when the available memory cannot be read: 4 GiB.
pub const FALLBACK_BUDGET: u64 = 4 << 30;

/// The default memory budget: half the memory available when the run starts (Linux
/// `/proc/meminfo`, `MemAvailable`), or [`FALLBACK_BUDGET`] where that cannot be read.
pub fn default_budget() -> u64 {
    fs::read_to_string("/proc/meminfo")
        .ok()
        .and_then(|t| {
            t.lines()
                .find_map(|l| l.strip_prefix("MemAvailable:"))
                .and_then(|v| v.trim().trim_end_matches("kB").trim().parse::<u64>().ok())
        })
        .map_or(FALLBACK_BUDGET, |kb| kb * 1024 / 2)
}

/// Estimated peak memory of a tile of `points` points with LAS records of `record_len` bytes
/// (0 for other formats) processed whole, bytes.
pub fn whole_bytes(points: u64, record_len: u64) -> u64 {
    RESERVE_BYTES.saturating_add(points.saturating_mul(WHOLE_BYTES_PER_POINT + record_len))
}

/// Largest number of points (centres and neighbours) of one block under `budget` bytes: the
/// budget less the reserve over [`BLOCK_BYTES_PER_POINT`], with a fifth kept for the halo;
/// at least [`MIN_BLOCK_POINTS`].
pub fn block_points(budget: u64) -> u64 {
    (budget.saturating_sub(RESERVE_BYTES) / BLOCK_BYTES_PER_POINT * 4 / 5).max(MIN_BLOCK_POINTS)
}

/// Parses a memory size: a number of bytes, or with a unit `K`, `M`, `G`, `T` (powers of
/// 1024; `KB`, `MiB`… read the same), e.g. `800M`, `1.5G`.
pub fn parse_size(s: &str) -> std::result::Result<u64, String> {
    let bad = || {
        format!(
            "{s} is not a memory size; give bytes or a number with K, M, G or T, e.g. 800M or 4G"
        )
    };
    let t = s.trim();
    let split = t
        .find(|c: char| !(c.is_ascii_digit() || c == '.'))
        .unwrap_or(t.len());
    let (num, unit) = t.split_at(split);
    let v: f64 = num.parse().map_err(|_| bad())?;
    let unit = unit.trim().to_ascii_lowercase();
    let unit = unit
        .trim_end_matches("ib")
        .trim_end_matches('b')
        .to_string();
    let mul: f64 = match unit.as_str() {
        "" => 1.0,
        "k" => 1024.0,
        "m" => 1024.0 * 1024.0,
        "g" => 1024.0 * 1024.0 * 1024.0,
        "t" => 1024.0 * 1024.0 * 1024.0 * 1024.0,
        _ => return Err(bad()),
    };
    let bytes = v * mul;
    if !bytes.is_finite() || bytes < 1.0 || bytes > u64::MAX as f64 {
        return Err(bad());
    }
    Ok(bytes as u64)
}

/// Prefix of the temporary folders of chunked tiles in the journal folder.
const DIR_PREFIX: &str = "chunks.";

/// The owner of a chunk folder named `chunks.HOST.PID.TILE`.
fn dir_owner(name: &str) -> Option<TempOwner> {
    let rest = name.strip_prefix(DIR_PREFIX)?;
    let mut parts = rest.split('.');
    let host = parts.next().filter(|h| !h.is_empty())?;
    let pid: u32 = parts.next()?.parse().ok()?;
    let _tile: usize = parts.next()?.parse().ok()?;
    parts.next().is_none().then(|| TempOwner {
        host: host.to_string(),
        pid,
    })
}

/// Removes the chunk folders in the journal folder of `outdir` left by processes of this host
/// that are gone (other hosts' are kept); returns their number.
pub fn remove_stale_chunk_dirs(outdir: &Path) -> usize {
    remove_stale_entries(&journal::dir(outdir), dir_owner, |p| fs::remove_dir_all(p))
}

/// A folder removed with everything in it when dropped.
struct TempDir(PathBuf);

impl Drop for TempDir {
    fn drop(&mut self) {
        let _ = fs::remove_dir_all(&self.0);
    }
}

/// A block: a rectangle of histogram cells, its region (infinite on the grid's border) and
/// its region grown by the halo width.
#[derive(Debug, Clone)]
struct Block {
    cells: [usize; 4],
    reach: Bbox,
}

/// The x–y grid of the histogram, in the input's local frame.
#[derive(Debug, Clone, Copy)]
struct Grid {
    lo: [f64; 2],
    step: [f64; 2],
}

impl Grid {
    fn new(b: &Bbox, origin: [f64; 3]) -> Grid {
        let lo = [b.min[0] - origin[0], b.min[1] - origin[1]];
        let ext = [b.max[0] - b.min[0], b.max[1] - b.min[1]];
        Grid {
            lo,
            step: ext.map(|e| (e / GRID as f64).max(f64::MIN_POSITIVE)),
        }
    }

    fn cell(&self, p: [f32; 3]) -> usize {
        let at = |k: usize| {
            let v = ((p[k] as f64 - self.lo[k]) / self.step[k]).floor();
            if v.is_nan() || v < 0.0 {
                0
            } else {
                (v as usize).min(GRID - 1)
            }
        };
        at(1) * GRID + at(0)
    }

    /// The region of cells `[x0, x1) × [y0, y1)` (infinite on the grid's border).
    fn region(&self, c: [usize; 4]) -> Bbox {
        let edge = |k: usize, i: usize, low: bool| {
            if (low && i == 0) || (!low && i == GRID) {
                if low {
                    f64::NEG_INFINITY
                } else {
                    f64::INFINITY
                }
            } else {
                self.lo[k] + i as f64 * self.step[k]
            }
        };
        Bbox {
            min: [edge(0, c[0], true), edge(1, c[2], true), f64::NEG_INFINITY],
            max: [edge(0, c[1], false), edge(1, c[3], false), f64::INFINITY],
        }
    }

    /// The cells `[x0, x1) × [y0, y1)` a box overlaps.
    fn cells_of(&self, b: &Bbox) -> [usize; 4] {
        let r = |k: usize| {
            let a = ((b.min[k] - self.lo[k]) / self.step[k]).floor();
            let z = ((b.max[k] - self.lo[k]) / self.step[k]).floor();
            let a = if a.is_nan() || a < 0.0 {
                0
            } else {
                (a as usize).min(GRID - 1)
            };
            let z = if z.is_nan() || z < 0.0 {
                0
            } else {
                (z as usize).min(GRID - 1)
            };
            (a, z + 1)
        };
        let (x0, x1) = r(0);
        let (y0, y1) = r(1);
        [x0, x1, y0, y1]
    }
}

/// Cuts the cells `[x0, x1) × [y0, y1)` with histogram `hist` into blocks of at most `target`
/// points (or single cells), in a fixed order (low half first).
fn bisect(hist: &[u64], grid: &Grid, c: [usize; 4], target: u64, out: &mut Vec<[usize; 4]>) {
    let count = |c: [usize; 4]| -> u64 {
        (c[2]..c[3])
            .map(|y| hist[y * GRID + c[0]..y * GRID + c[1]].iter().sum::<u64>())
            .sum()
    };
    let total = count(c);
    let (nx, ny) = (c[1] - c[0], c[3] - c[2]);
    if total <= target || (nx == 1 && ny == 1) {
        out.push(c);
        return;
    }
    let along_x = if nx == 1 {
        false
    } else if ny == 1 {
        true
    } else {
        nx as f64 * grid.step[0] >= ny as f64 * grid.step[1]
    };
    let (a, b) = if along_x { (c[0], c[1]) } else { (c[2], c[3]) };
    // The first line where the running count reaches half (at least one cell each side).
    let mut run = 0u64;
    let mut cut = a + 1;
    for i in a..b - 1 {
        let slab = if along_x {
            [i, i + 1, c[2], c[3]]
        } else {
            [c[0], c[1], i, i + 1]
        };
        run += count(slab);
        cut = i + 1;
        if 2 * run >= total {
            break;
        }
    }
    let (lo, hi) = if along_x {
        ([c[0], cut, c[2], c[3]], [cut, c[1], c[2], c[3]])
    } else {
        ([c[0], c[1], c[2], cut], [c[0], c[1], cut, c[3]])
    };
    bisect(hist, grid, lo, target, out);
    bisect(hist, grid, hi, target, out);
}

/// What the chunked run of a tile did.
pub(super) struct ChunkedOutcome {
    /// Blocks the tile was cut into.
    pub blocks: usize,
}

/// Bytes of one block-file record: input index (u64, `u64::MAX` for a neighbour only) and the
/// local f32 position.
const RECORD: usize = 20;

fn io_err(path: &Path, e: std::io::Error) -> Error {
    Error::io(path, &e)
}

/// Runs tile `index` of `plan` in blocks of at most `target` points (see the module
/// documentation). `src` is the opened input; `tile_halo` the points other tiles lend it
/// (global coordinates).
pub(super) fn run(
    plan: &Plan,
    index: usize,
    mut src: PointSource,
    tile_halo: &[[f64; 3]],
    target: u64,
    record: &mut TileRecord,
    progress: Option<&(dyn Fn(usize) + Sync)>,
) -> Result<ChunkedOutcome> {
    let tile = &plan.tiles[index];
    let bounds = tile
        .bounds
        .ok_or_else(|| Error::internal("a chunked tile has no bounds", "report this as a bug"))?;
    let recipe = plan.options.recipe.clone();
    let width = recipe.radii().iter().copied().fold(0.0f32, f32::max) as f64;
    let info = src.info().clone();
    let work = journal::dir(&plan.outdir).join(format!(
        "{DIR_PREFIX}{}.{}.{index}",
        host_label(),
        std::process::id()
    ));
    let _ = fs::remove_dir_all(&work);
    fs::create_dir_all(&work).map_err(|e| io_err(&work, e))?;
    let _guard = TempDir(work.clone());

    // 1. Split: raw positions in order, histogram, what this tile lends its neighbours.
    let raw_path = work.join("points.f32");
    let mut raw = BufWriter::with_capacity(
        1 << 20,
        File::create(&raw_path).map_err(|e| io_err(&raw_path, e))?,
    );
    let mut hist = vec![0u64; GRID * GRID];
    let mut origin: Option<[f64; 3]> = None;
    let mut grid: Option<Grid> = None;
    let mut n: usize = 0;
    let limit = plan.options.halo_cache_points;
    let lend_boxes: Vec<Bbox> = tile.halo.iter().filter_map(|&j| plan.reach(j)).collect();
    let mut lend: Option<Vec<[f64; 3]>> =
        (tile.stamp.is_some() && !lend_boxes.is_empty() && limit > 0).then(Vec::new);
    let mut actual: Option<Bbox> = None;
    // Which attributes the points carry (for the output's layout) and whether a colour
    // exceeds 8 bits (PLY writes 16-bit colour then).
    let presence = src.empty_cloud(0);
    let mut wide = false;
    let mut chunk = src.empty_cloud(READ_CHUNK);
    loop {
        chunk.positions.clear();
        clear_attributes(&mut chunk);
        if src.read_into(&mut chunk, READ_CHUNK)? == 0 {
            break;
        }
        wide |= chunk
            .color
            .as_ref()
            .is_some_and(|c| c.iter().flatten().any(|&v| v > 255));
        let o = *origin.get_or_insert(chunk.origin);
        let g = *grid.get_or_insert_with(|| Grid::new(&bounds, o));
        if let Some(b) = Bbox::of_cloud(&chunk) {
            actual = Some(match actual {
                None => b,
                Some(a) => Bbox {
                    min: std::array::from_fn(|k| a.min[k].min(b.min[k])),
                    max: std::array::from_fn(|k| a.max[k].max(b.max[k])),
                },
            });
        }
        let mut bytes = Vec::with_capacity(12 * chunk.len());
        for p in &chunk.positions {
            hist[g.cell(*p)] += 1;
            for v in p {
                bytes.extend_from_slice(&v.to_le_bytes());
            }
        }
        raw.write_all(&bytes).map_err(|e| io_err(&raw_path, e))?;
        if let Some(l) = lend.as_mut() {
            halo::points_in(&chunk, &lend_boxes, l);
            if l.len() > limit {
                lend = None;
            }
        }
        n += chunk.len();
    }
    drop(chunk);
    raw.flush().map_err(|e| io_err(&raw_path, e))?;
    drop(raw);
    if let (Some(l), Some(st)) = (lend, &tile.stamp) {
        HaloCache::keep(&tile.input, st.clone(), lend_boxes, l, limit);
    }
    if let Some(a) = actual
        && plan.halo_width > 0.0
        && !tile.halo.is_empty()
    {
        let slack = bounds.grown(1e-3 * plan.halo_width);
        if !(slack.contains(a.min) && slack.contains(a.max)) {
            record.warnings.push(
                "points lie outside the bounds its header declares, so neighbouring tiles may miss some of them in their halos; rewrite the file's header".to_string(),
            );
        }
    }
    let origin = origin.unwrap_or([0.0; 3]);
    let grid = grid.unwrap_or_else(|| Grid::new(&bounds, origin));

    // 2. Blocks.
    let mut rects = Vec::new();
    let target = target.max((n as u64).div_ceil(MAX_BLOCKS as u64));
    bisect(&hist, &grid, [0, GRID, 0, GRID], target, &mut rects);
    let blocks: Vec<Block> = rects
        .iter()
        .map(|&c| Block {
            cells: c,
            reach: halo::reach(&grid.region(c), width),
        })
        .collect();
    drop(hist);
    let mut cell_block = vec![0u32; GRID * GRID];
    let mut near: Vec<Vec<u32>> = vec![Vec::new(); GRID * GRID];
    for (b, blk) in blocks.iter().enumerate() {
        let c = blk.cells;
        for y in c[2]..c[3] {
            for x in c[0]..c[1] {
                cell_block[y * GRID + x] = b as u32;
            }
        }
        let r = grid.cells_of(&blk.reach);
        for y in r[2]..r[3] {
            for x in r[0]..r[1] {
                near[y * GRID + x].push(b as u32);
            }
        }
    }

    // 3. Distribute.
    let block_path = |b: usize| work.join(format!("block{b}.bin"));
    let mut files: Vec<BufWriter<File>> = Vec::with_capacity(blocks.len());
    for b in 0..blocks.len() {
        let p = block_path(b);
        files.push(BufWriter::with_capacity(
            64 << 10,
            File::create(&p).map_err(|e| io_err(&p, e))?,
        ));
    }
    let mut sizes = vec![(0usize, 0usize); blocks.len()];
    let put = |files: &mut Vec<BufWriter<File>>, b: usize, i: u64, p: [f32; 3]| -> Result<()> {
        let mut rec = [0u8; RECORD];
        rec[..8].copy_from_slice(&i.to_le_bytes());
        for k in 0..3 {
            rec[8 + 4 * k..12 + 4 * k].copy_from_slice(&p[k].to_le_bytes());
        }
        files[b]
            .write_all(&rec)
            .map_err(|e| io_err(&block_path(b), e))
    };
    let mut reader = BufReader::with_capacity(
        1 << 20,
        File::open(&raw_path).map_err(|e| io_err(&raw_path, e))?,
    );
    let mut buf = [0u8; 12];
    for i in 0..n {
        reader
            .read_exact(&mut buf)
            .map_err(|e| io_err(&raw_path, e))?;
        let p: [f32; 3] =
            std::array::from_fn(|k| f32::from_le_bytes(buf[4 * k..4 * k + 4].try_into().unwrap()));
        let cell = grid.cell(p);
        let own = cell_block[cell] as usize;
        put(&mut files, own, i as u64, p)?;
        sizes[own].0 += 1;
        let q = p.map(f64::from);
        for &b in &near[cell] {
            let b = b as usize;
            if b != own && blocks[b].reach.contains(q) {
                put(&mut files, b, u64::MAX, p)?;
                sizes[b].1 += 1;
            }
        }
    }
    drop(reader);
    let _ = fs::remove_file(&raw_path);
    for g in tile_halo {
        let p: [f32; 3] = std::array::from_fn(|k| (g[k] - origin[k]) as f32);
        let cell = grid.cell(p);
        let q = p.map(f64::from);
        let own = cell_block[cell] as usize;
        let mut to: Vec<usize> = vec![own];
        to.extend(
            near[cell]
                .iter()
                .map(|&b| b as usize)
                .filter(|&b| b != own && blocks[b].reach.contains(q)),
        );
        for b in to {
            put(&mut files, b, u64::MAX, p)?;
            sizes[b].1 += 1;
        }
    }
    for (b, f) in files.iter_mut().enumerate() {
        f.flush().map_err(|e| io_err(&block_path(b), e))?;
    }
    drop(files);
    drop(near);
    drop(cell_block);

    // 4. Compute block by block.
    let engine = Engine::new(recipe.clone());
    // Rows files hold the local position first whatever the output format.
    let ncols = column_names(&recipe, Format::Npy).len();
    let step = chunk_rows(ncols);
    let rows_path = |b: usize| work.join(format!("rows{b}.bin"));
    for (b, &(nc, nh)) in sizes.iter().enumerate() {
        let bp = block_path(b);
        let rp = rows_path(b);
        let mut out =
            BufWriter::with_capacity(1 << 20, File::create(&rp).map_err(|e| io_err(&rp, e))?);
        if nc > 0 {
            let (idx, points) = read_block(&bp, nc, nh)?;
            let kd = KdIndex::new(&points).map_err(|_| {
                Error::internal(
                    "a block with points gave an empty index",
                    "report this as a bug",
                )
            })?;
            let prepared = engine.prepare(&points, &kd)?;
            let mut vals = Vec::with_capacity(ncols);
            let mut bytes = Vec::with_capacity((8 + 4 * ncols) * 1024);
            let mut start = 0;
            while start < nc {
                let end = (start + step).min(nc);
                let f = engine.compute_prepared(
                    &prepared,
                    &Centres::Indices((start..end).collect()),
                    progress,
                )?;
                for r in 0..f.len() {
                    vals.clear();
                    push_row(&f, r, true, &mut vals);
                    bytes.extend_from_slice(&idx[start + r].to_le_bytes());
                    for v in &vals {
                        bytes.extend_from_slice(&v.to_le_bytes());
                    }
                    if bytes.len() >= 1 << 20 {
                        out.write_all(&bytes).map_err(|e| io_err(&rp, e))?;
                        bytes.clear();
                    }
                }
                out.write_all(&bytes).map_err(|e| io_err(&rp, e))?;
                bytes.clear();
                start = end;
            }
        }
        out.flush().map_err(|e| io_err(&rp, e))?;
        let _ = fs::remove_file(&bp);
    }

    // 5. Merge by input index into the feature file. Formats whose rows carry the points'
    // attributes (PLY, LAS, LAZ, Parquet) read the input a second time, in order, beside
    // the merge.
    let spec = FileSpec {
        path: tile.output.clone(),
        format: plan.options.format,
        recipe: recipe.clone(),
        input: info,
        centres: CentresInfo::All,
        radius_suggested: false,
    };
    let centres = CentreList::All(n);
    let mut frame = presence;
    frame.origin = origin;
    let mut writer = FeatureWriter::create_streaming(&frame, spec, &centres, wide)?;
    let mut merge = Merge::open(blocks.len(), ncols, &rows_path)?;
    let mut pending: Vec<f32> = Vec::with_capacity(step * ncols);
    if plan.options.format.has_sidecar() {
        while merge.take(step, &mut pending)? {
            writer.push(&features_from_rows(&recipe, &pending, ncols))?;
        }
    } else {
        let mut again = PointSource::open(&tile.input)?;
        let mut chunk = again.empty_cloud(step);
        loop {
            chunk.positions.clear();
            clear_attributes(&mut chunk);
            let m = again.read_into(&mut chunk, step)?;
            if m == 0 {
                break;
            }
            if !merge.take(m, &mut pending)? || pending.len() != m * ncols {
                return Err(Error::internal(
                    "the chunked rows end before the input",
                    "report this as a bug",
                ));
            }
            let mut f = features_from_rows(&recipe, &pending, ncols);
            f.indices = Some((0..m).collect());
            writer.push_with(&chunk, &f)?;
        }
    }
    if merge.taken != n as u64 || merge.take(1, &mut pending)? {
        return Err(Error::internal(
            format!("the chunked rows hold {} points of {n}", merge.taken),
            "report this as a bug",
        ));
    }
    drop(merge);
    let written = writer.finish()?;
    record.rows = written.rows as u64;
    record.files = journal::file_records(&written.files)?;
    Ok(ChunkedOutcome {
        blocks: blocks.len(),
    })
}

/// A k-way merge of the blocks' rows files by input index.
struct Merge {
    readers: Vec<(PathBuf, BufReader<File>)>,
    heads: Vec<Vec<u8>>,
    heap: BinaryHeap<Reverse<(u64, usize)>>,
    /// Rows taken so far (the next expected input index).
    taken: u64,
}

impl Merge {
    fn open(blocks: usize, ncols: usize, path: &dyn Fn(usize) -> PathBuf) -> Result<Merge> {
        let mut m = Merge {
            readers: Vec::with_capacity(blocks),
            heads: vec![vec![0u8; 4 * ncols]; blocks],
            heap: BinaryHeap::new(),
            taken: 0,
        };
        for b in 0..blocks {
            let p = path(b);
            let f = File::open(&p).map_err(|e| io_err(&p, e))?;
            m.readers.push((p, BufReader::with_capacity(64 << 10, f)));
            m.advance(b)?;
        }
        Ok(m)
    }

    /// Reads block `b`'s next row into its head and queues it.
    fn advance(&mut self, b: usize) -> Result<()> {
        let (path, r) = &mut self.readers[b];
        let mut ib = [0u8; 8];
        match r.read_exact(&mut ib) {
            Ok(()) => {}
            Err(e) if e.kind() == std::io::ErrorKind::UnexpectedEof => return Ok(()),
            Err(e) => return Err(io_err(path, e)),
        }
        r.read_exact(&mut self.heads[b])
            .map_err(|e| io_err(path, e))?;
        self.heap.push(Reverse((u64::from_le_bytes(ib), b)));
        Ok(())
    }

    /// Replaces `out` with the next (up to) `count` rows in input order; false when none is
    /// left.
    fn take(&mut self, count: usize, out: &mut Vec<f32>) -> Result<bool> {
        out.clear();
        for _ in 0..count {
            let Some(Reverse((i, b))) = self.heap.pop() else {
                break;
            };
            if i != self.taken {
                return Err(Error::internal(
                    format!("the chunked rows skip from point {} to {i}", self.taken),
                    "report this as a bug",
                ));
            }
            self.taken += 1;
            out.extend(
                self.heads[b]
                    .chunks_exact(4)
                    .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]])),
            );
            self.advance(b)?;
        }
        Ok(!out.is_empty())
    }
}

/// Empties every attribute column of a chunk cloud (kept present, so the reader fills them).
fn clear_attributes(c: &mut Cloud) {
    if let Some(v) = c.intensity.as_mut() {
        v.clear();
    }
    if let Some(v) = c.color.as_mut() {
        v.clear();
    }
    if let Some(v) = c.normals.as_mut() {
        v.clear();
    }
    if let Some(v) = c.classification.as_mut() {
        v.clear();
    }
    if let Some(v) = c.return_number.as_mut() {
        v.clear();
    }
    if let Some(v) = c.gps_time.as_mut() {
        v.clear();
    }
    if let Some(r) = c.records.as_mut() {
        r.bytes.clear();
    }
}

/// Reads a block file: the centres' input indices and the points (centres first, in file
/// order, then the neighbours).
fn read_block(path: &Path, centres: usize, halo: usize) -> Result<(Vec<u64>, Vec<[f32; 3]>)> {
    let bytes = fs::read(path).map_err(|e| io_err(path, e))?;
    if bytes.len() != RECORD * (centres + halo) {
        return Err(Error::internal(
            format!("{}: block file of the wrong size", path.display()),
            "report this as a bug",
        ));
    }
    let mut idx = Vec::with_capacity(centres);
    let mut pts = Vec::with_capacity(centres + halo);
    let mut nb = Vec::with_capacity(halo);
    for rec in bytes.chunks_exact(RECORD) {
        let i = u64::from_le_bytes(rec[..8].try_into().unwrap());
        let p: [f32; 3] = std::array::from_fn(|k| {
            f32::from_le_bytes(rec[8 + 4 * k..12 + 4 * k].try_into().unwrap())
        });
        if i == u64::MAX {
            nb.push(p);
        } else {
            idx.push(i);
            pts.push(p);
        }
    }
    pts.extend_from_slice(&nb);
    Ok((idx, pts))
}

/// Features of rows as [`push_row`] wrote them with local coordinates: `x y z`, per scale
/// count and flags, the invariants, the coefficients.
fn features_from_rows(recipe: &Recipe, rows: &[f32], ncols: usize) -> Features {
    let scales = recipe.scales();
    let columns = recipe.column_names();
    let ninv = columns.len();
    let nrows = rows.len() / ncols;
    let keep = recipe.keep_coefficients();
    let mut f = Features {
        recipe: recipe.clone(),
        positions: Vec::with_capacity(nrows),
        indices: None,
        columns,
        values: Vec::with_capacity(nrows * ninv),
        counts: Vec::with_capacity(nrows * scales),
        flags: Vec::with_capacity(nrows * scales),
        coefficients: keep.then(Vec::new),
    };
    for row in rows.chunks_exact(ncols) {
        f.positions.push([row[0], row[1], row[2]]);
        for s in 0..scales {
            f.counts.push(row[3 + 2 * s] as u32);
            f.flags.push(row[4 + 2 * s] as u8);
        }
        let at = 3 + 2 * scales;
        f.values.extend_from_slice(&row[at..at + ninv]);
        if let Some(c) = f.coefficients.as_mut() {
            c.extend_from_slice(&row[at + ninv..]);
        }
    }
    f
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sizes_parse_with_units() {
        assert_eq!(parse_size("1000").unwrap(), 1000);
        assert_eq!(parse_size("800M").unwrap(), 800 << 20);
        assert_eq!(parse_size("4g").unwrap(), 4 << 30);
        assert_eq!(parse_size("1.5GiB").unwrap(), 3 << 29);
        assert_eq!(parse_size("64 KB").unwrap(), 64 << 10);
        assert!(parse_size("lots").is_err());
        assert!(parse_size("-5M").is_err());
        assert!(parse_size("0").is_err());
        assert!(parse_size("3X").is_err());
    }

    #[test]
    fn chunk_folders_are_recognised() {
        assert_eq!(
            dir_owner("chunks.node-1.42.7"),
            Some(TempOwner {
                host: "node-1".into(),
                pid: 42
            })
        );
        assert_eq!(dir_owner("chunks.node-1.42"), None);
        assert_eq!(dir_owner("tile_0_0.npy.json"), None);
    }

    #[test]
    fn bisection_balances_and_covers_every_cell() {
        // Points crowded in one corner: blocks follow the density.
        let mut hist = vec![0u64; GRID * GRID];
        for y in 0..GRID {
            for x in 0..GRID {
                hist[y * GRID + x] = if x < 16 && y < 16 { 100 } else { 1 };
            }
        }
        let b = Bbox {
            min: [0.0; 3],
            max: [256.0, 256.0, 1.0],
        };
        let g = Grid::new(&b, [0.0; 3]);
        let mut out = Vec::new();
        let total: u64 = hist.iter().sum();
        bisect(&hist, &g, [0, GRID, 0, GRID], total / 8, &mut out);
        let mut cover = vec![0u8; GRID * GRID];
        for c in &out {
            let mut k = 0;
            for y in c[2]..c[3] {
                for x in c[0]..c[1] {
                    cover[y * GRID + x] += 1;
                    k += hist[y * GRID + x];
                }
            }
            assert!(k <= total / 8, "{c:?} holds {k}");
        }
        assert!(cover.iter().all(|&c| c == 1));
        assert!(out.len() >= 8 && out.len() <= 32, "{} blocks", out.len());
        // Regions: the border extends to infinity; every point lands in its cell's block.
        let r = g.region(out[0]);
        assert_eq!(r.min[0], f64::NEG_INFINITY);
        assert_eq!(g.cell([-5.0, 300.0, 0.0]), (GRID - 1) * GRID);
    }
}
