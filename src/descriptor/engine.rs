//! [`Engine`]: computes coefficients and invariants for many centres in parallel.

use rayon::prelude::*;

use crate::cloud::Cloud;
use crate::error::{Error, Result};
use crate::so3::sh::num_coeffs;
use crate::spatial::{CellGrid, GridQuery, KdIndex, order_by_key, voxel_downsample};

use super::flags;
use super::invariants::InvariantPlan;
use super::kernel;
use super::recipe::Recipe;

/// Centres handled per parallel task (and per progress update).
const CHUNK: usize = 256;

/// The tree is queried a hair beyond the largest radius, so that every point whose distance,
/// computed here as `dx² + dy² + dz²` in f32, is within the radius is found whatever rounding
/// the tree's own distance takes; the radius test itself is made on our distance.
const QUERY_SLACK: f32 = 1.0 + 1e-5;

/// Which points of a cloud to compute descriptors at.
#[derive(Debug, Clone, PartialEq)]
pub enum Centres {
    /// Every point of the cloud.
    All,
    /// One point per occupied voxel of this edge length (file units), the point nearest to the
    /// mean of the voxel's points ([`crate::spatial::voxel_downsample`]); ascending indices.
    Voxel(f32),
    /// The points at these indices, in this order.
    Indices(Vec<usize>),
}

/// Descriptors of a set of centres: invariants, counts, flags and (optionally) coefficients.
///
/// Row `i` belongs to centre `i`. All matrices are row-major `f32`.
#[derive(Debug, Clone, PartialEq)]
pub struct Features {
    /// The recipe the descriptors were computed with.
    pub recipe: Recipe,
    /// Centre positions in the cloud's local frame (file units, about the cloud's origin).
    pub positions: Vec<[f32; 3]>,
    /// Centre point indices into the cloud, when the centres are cloud points.
    pub indices: Option<Vec<usize>>,
    /// Invariant column names ([`Recipe::column_names`]).
    pub columns: Vec<String>,
    /// Invariants, `len() × columns.len()`, row-major.
    pub values: Vec<f32>,
    /// Neighbours used per centre and scale (`0 < |q − p| ≤ r`, after the cap), `len() × scales`.
    pub counts: Vec<u32>,
    /// [`flags`] bits per centre and scale, `len() × scales`.
    pub flags: Vec<u8>,
    /// Equivariant coefficients when the recipe keeps them: `len() × scales × N × (L+1)²`, layout
    /// `[centre][scale][n][l² + l + m]`.
    pub coefficients: Option<Vec<f32>>,
}

impl Features {
    /// Number of centres (rows).
    pub fn len(&self) -> usize {
        self.positions.len()
    }

    /// True when there is no centre.
    pub fn is_empty(&self) -> bool {
        self.positions.is_empty()
    }

    /// The invariants of centre `i`.
    pub fn row(&self, i: usize) -> &[f32] {
        let c = self.columns.len();
        &self.values[i * c..(i + 1) * c]
    }

    /// Neighbour count of centre `i` at scale `s`.
    pub fn count(&self, i: usize, s: usize) -> u32 {
        self.counts[i * self.recipe.scales() + s]
    }

    /// Flags of centre `i` at scale `s`.
    pub fn flag(&self, i: usize, s: usize) -> u8 {
        self.flags[i * self.recipe.scales() + s]
    }

    /// The coefficients of centre `i` at scale `s`, layout `[n][l² + l + m]`; `None` when the
    /// recipe does not keep them.
    pub fn coefficients_of(&self, i: usize, s: usize) -> Option<&[f32]> {
        let k = self.recipe.coefficients_per_scale();
        let at = (i * self.recipe.scales() + s) * k;
        self.coefficients.as_ref().map(|c| &c[at..at + k])
    }
}

/// The descriptor engine: a validated [`Recipe`] with its precomputed constants, shared by all
/// worker threads. Build once, then compute any number of times.
///
/// Conventions (see the crate's design, "the descriptor, exactly", versions 1 and 2): neighbours of a
/// centre `p` are the points with `0 < |q − p| ≤ r`, distances computed in f32 on local
/// positions; `W = 1 + Σ f_c(ρ) + (points coinciding with p, other than the centre)`, where a
/// centre position that coincides with one or more cloud points is taken to be one of them (so
/// a cloud point used as centre and the same position given as [`Engine::compute_at`] agree);
/// `c_nlm = Σ g_n f_c h_l Y_lm / W` (`h_l` the version-2 fade of degrees `l ≥ 1`, 1 in
/// version 1). Neighbours are put in ascending point index before anything is
/// summed, and every sum runs in an order fixed by that list alone (the harmonic sums in eight
/// lanes of neighbours `j ≡ i (mod 8)`, then the lanes in a fixed tree), so the result does not
/// depend on the tree's visiting order or on the number of threads.
#[derive(Debug)]
pub struct Engine {
    recipe: Recipe,
    columns: Vec<String>,
    plan: InvariantPlan,
    kernel: kernel::Kernel,
    /// `1/ρ₀ = 2N` for a version-2 recipe (the fade of degrees `l ≥ 1` at the centre); `None`
    /// for version 1.
    fade: Option<f32>,
    /// Neighbours from the k-d tree, centres in the order given (the engine before the cell
    /// grid; for comparison, same bytes).
    tree_only: bool,
    /// Output buffers of a finished run handed back by [`Engine::recycle`], reused by the next
    /// run (their pages are already mapped: no page faults and no fresh zero pages).
    spare: std::sync::Mutex<Option<Buffers>>,
}

/// The output vectors of one run: invariants, counts, flags, coefficients.
type Buffers = (Vec<f32>, Vec<u32>, Vec<u8>, Vec<f32>);

/// A cloud made ready for repeated [`Engine`] runs: the points, their k-d tree and the cell
/// grid of the engine's largest support radius, built once ([`Engine::prepare`]) and reused by
/// every [`Engine::compute_prepared`] / [`Engine::compute_at_prepared`] call, so computing a
/// cloud chunk by chunk does not rebuild the grid for each chunk. Results are the same bytes
/// as the unprepared calls. A cloud prepared without a tree given ([`Engine::prepare_own`])
/// has one only when the grid cannot serve; a run that needs a tree and finds none builds one.
pub struct PreparedCloud<'a> {
    points: &'a [[f32; 3]],
    /// The k-d tree over the points.
    index: Tree<'a>,
    /// Cell grid with cells of the query radius (`None`: tree search, empty cloud, or too many
    /// cells along an axis).
    grid: Option<CellGrid>,
    /// The query radius the grid was built for (file units).
    query_radius: f32,
}

/// The k-d tree of a [`PreparedCloud`].
enum Tree<'a> {
    /// None built (the cell grid serves).
    Absent,
    /// The caller's.
    Given(&'a KdIndex),
    /// Built by [`Engine::prepare_own`] because the grid could not be.
    Own(KdIndex),
}

impl std::fmt::Debug for PreparedCloud<'_> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("PreparedCloud")
            .field("points", &self.points.len())
            .field("grid", &self.grid.is_some())
            .field("query_radius", &self.query_radius)
            .finish()
    }
}

impl PreparedCloud<'_> {
    /// The points (local frame).
    pub fn points(&self) -> &[[f32; 3]] {
        self.points
    }

    /// The k-d tree over [`PreparedCloud::points`], when it was given or built.
    pub fn index(&self) -> Option<&KdIndex> {
        match &self.index {
            Tree::Absent => None,
            Tree::Given(t) => Some(t),
            Tree::Own(t) => Some(t),
        }
    }

    /// For each of `centres`, the number of points `q` with `|q − p| ≤ r` (the cell grid's
    /// distance when `r` is within its cells, else the k-d tree's, built here once when the
    /// cloud has none): for estimates; the engine's own neighbour test is [`Engine`]'s.
    ///
    /// # Errors
    /// When a tree must be built and cannot be ([`KdIndex::new`]).
    pub fn counts_within(
        &self,
        centres: impl Iterator<Item = [f32; 3]>,
        r: f32,
    ) -> Result<Vec<usize>> {
        if let Some(g) = self.grid.as_ref().filter(|g| r <= g.cell()) {
            let (mut ids, mut query) = (Vec::new(), GridQuery::default());
            return Ok(centres
                .map(|p| {
                    ids.clear();
                    g.within(p, r, &mut query, &mut ids);
                    ids.len()
                })
                .collect());
        }
        let built;
        let index = match self.index() {
            Some(i) => i,
            None => {
                built = KdIndex::new(self.points)?;
                &built
            }
        };
        Ok(centres
            .map(|p| {
                let mut c = 0;
                index.for_each_within(p, r, |_, _| c += 1);
                c
            })
            .collect())
    }
}

/// Where the neighbours of a centre come from: the cell grid (built once per cloud with cells
/// of the query radius, [`PreparedCloud`]), or the k-d tree when the grid would have too many cells along an axis.
enum Search<'a> {
    Grid(&'a CellGrid),
    Tree(&'a KdIndex),
}

/// The output buffers of a run, written row by row from worker threads (see [`Engine::run`]).
struct RowsOut {
    values: *mut f32,
    counts: *mut u32,
    flags: *mut u8,
    coeffs: *mut f32,
}

impl RowsOut {
    /// The output slices of row `i` (`nc` invariants, `ns` counts and flags, `ns·kc`
    /// coefficients when kept).
    ///
    /// # Safety
    /// `i` must be below the number of rows the buffers were made for, with these same `nc`,
    /// `ns` and `kc`, the buffers must be alive, and no other slice of row `i` may exist.
    // The slices come from raw pointers, not from `&self`; exclusivity is the caller's
    // contract above.
    #[allow(clippy::type_complexity, clippy::mut_from_ref)]
    unsafe fn row(
        &self,
        i: usize,
        nc: usize,
        ns: usize,
        kc: Option<usize>,
    ) -> (&mut [f32], &mut [u32], &mut [u8], Option<&mut [f32]>) {
        // SAFETY: guaranteed by the caller (see above).
        unsafe {
            (
                std::slice::from_raw_parts_mut(self.values.add(i * nc), nc),
                std::slice::from_raw_parts_mut(self.counts.add(i * ns), ns),
                std::slice::from_raw_parts_mut(self.flags.add(i * ns), ns),
                kc.map(|kc| std::slice::from_raw_parts_mut(self.coeffs.add(i * ns * kc), ns * kc)),
            )
        }
    }
}

// SAFETY: the pointers are only dereferenced for disjoint rows (a permutation split into
// disjoint chunks), while the buffers they point into are alive and not otherwise borrowed.
unsafe impl Sync for RowsOut {}
unsafe impl Send for RowsOut {}

/// Scratch space of one worker, reused for every centre of its tasks.
struct Scratch {
    ids: Vec<u32>,
    /// The grid rows around the last centre's cell.
    query: GridQuery,
    /// Bitmap for [`sort_distinct`] (all zeros between calls) and its summary words.
    bits: Vec<u64>,
    summary: Vec<u64>,
    /// Offsets `q − p` and squared distances of the gathered neighbours (`0 < |q − p| ≤ r_max`),
    /// ascending index (structure of arrays).
    gx: Vec<f32>,
    gy: Vec<f32>,
    gz: Vec<f32>,
    gd2: Vec<f32>,
    /// Number of gathered neighbours (the arrays above may hold padding beyond it).
    gathered: usize,
    /// Unweighted first and second moments of the gathered offsets ([`Moments`]), summed
    /// while gathering.
    moments: Moments,
    /// Points coinciding with the centre (the centre itself included when it is a cloud point).
    zeros: u32,
    /// Selected neighbours (positions in the gathered arrays), ascending.
    sel: Vec<u32>,
    /// Offsets and squared distances of the selected neighbours when they are not all the
    /// gathered ones; the arrays in use are padded to a multiple of [`kernel::LANES`] (padding:
    /// offset `(r, 0, 0)`, `ρ = 1`, so its weights are exactly 0).
    dx: Vec<f32>,
    dy: Vec<f32>,
    dz: Vec<f32>,
    d2: Vec<f32>,
    /// `ρ` of each selected neighbour (padded).
    rho: Vec<f32>,
    /// Cutoff of each selected neighbour.
    fc: Vec<f32>,
    /// Radial recurrence factors, one per selected neighbour.
    step: Vec<f32>,
    /// Weights `g_n f_c`, layout `[n][neighbour]`.
    w: Vec<f32>,
    /// Harmonics, layout `[l² + l + m][neighbour]`.
    y: Vec<f32>,
    /// Lane sums of the projection (before the tree), `[n][l² + l + m]`.
    lanes: Vec<[f32; kernel::LANES]>,
    /// Unnormalised sums, `[n][l² + l + m]`.
    acc: Vec<f32>,
    /// Coefficients `c[n][l² + l + m]` of the current scale.
    c: Vec<f32>,
    /// The same in f64, for the invariants.
    c64: Vec<f64>,
}

impl Engine {
    /// Builds the engine (coupling table, column layout) for a recipe.
    pub fn new(recipe: Recipe) -> Engine {
        let plan = InvariantPlan::new(recipe.shells(), recipe.degree(), recipe.invariants());
        let fade = (recipe.version() >= 2).then(|| 2.0 * recipe.shells() as f32);
        Engine {
            fade,
            tree_only: false,
            spare: std::sync::Mutex::new(None),
            columns: recipe.column_names(),
            recipe,
            plan,
            kernel: kernel::Kernel::detect(),
        }
    }

    /// The same engine using the portable kernel even where the processor offers AVX2 and FMA
    /// (the two kernels agree to a few f32 rounding steps; this one is for comparison).
    pub fn portable(mut self) -> Engine {
        self.kernel = kernel::Kernel::Portable;
        self
    }

    /// The same engine taking neighbours from the k-d tree and visiting centres in the order
    /// given, as before the cell grid (the output bytes are the same; this one is for
    /// comparison).
    pub fn tree_search(mut self) -> Engine {
        self.tree_only = true;
        self
    }

    /// The recipe.
    pub fn recipe(&self) -> &Recipe {
        &self.recipe
    }

    /// Invariant column names.
    pub fn columns(&self) -> &[String] {
        &self.columns
    }

    /// Descriptors of a cloud at the given centres; builds the k-d tree itself.
    pub fn compute(&self, cloud: &Cloud, centres: &Centres) -> Result<Features> {
        cloud.validate()?;
        let index = KdIndex::new(&cloud.positions)?;
        self.compute_with_index(&cloud.positions, &index, centres, None)
    }

    /// Descriptors at centres that are points of `points`, with a prebuilt `index` over the same
    /// `points`. `progress`, when given, is called with the number of centres finished after each
    /// chunk of work (from worker threads).
    pub fn compute_with_index(
        &self,
        points: &[[f32; 3]],
        index: &KdIndex,
        centres: &Centres,
        progress: Option<&(dyn Fn(usize) + Sync)>,
    ) -> Result<Features> {
        let prepared = self.prepare(points, index)?;
        self.compute_prepared(&prepared, centres, progress)
    }

    /// Prepares `points` (with `index` built over them) for repeated runs of this engine:
    /// builds the cell grid of the largest support radius once. Use it with
    /// [`Engine::compute_prepared`] and [`Engine::compute_at_prepared`] when one cloud is
    /// computed in several calls (for example chunk by chunk); an engine with another largest
    /// radius may use it too (it then searches as the unprepared calls do).
    ///
    /// # Errors
    /// If `index` was not built over `points` (different lengths).
    pub fn prepare<'a>(
        &self,
        points: &'a [[f32; 3]],
        index: &'a KdIndex,
    ) -> Result<PreparedCloud<'a>> {
        check_index(points, index)?;
        let query_radius = self.query_radius();
        let grid = self.grid_for(points);
        Ok(PreparedCloud {
            points,
            index: Tree::Given(index),
            grid,
            query_radius,
        })
    }

    /// [`Engine::prepare`] for callers without a k-d tree (the `features` command with a given
    /// radius needs one only for the search): the cell grid, and a tree built here only when the
    /// grid cannot serve this engine (too many cells along an axis, or
    /// [`Engine::tree_search`]). The same bytes from every run.
    ///
    /// # Errors
    /// When a tree is needed and cannot be built ([`KdIndex::new`]: an empty cloud).
    pub fn prepare_own<'a>(&self, points: &'a [[f32; 3]]) -> Result<PreparedCloud<'a>> {
        let query_radius = self.query_radius();
        let grid = self.grid_for(points);
        let index = match grid {
            Some(_) => Tree::Absent,
            None => Tree::Own(KdIndex::new(points)?),
        };
        Ok(PreparedCloud {
            points,
            index,
            grid,
            query_radius,
        })
    }

    /// [`Engine::compute_with_index`] over a [`PreparedCloud`] (same bytes).
    ///
    /// # Errors
    /// A voxel size that is not a finite number greater than 0, or a centre index beyond the
    /// cloud.
    pub fn compute_prepared(
        &self,
        cloud: &PreparedCloud<'_>,
        centres: &Centres,
        progress: Option<&(dyn Fn(usize) + Sync)>,
    ) -> Result<Features> {
        let points = cloud.points;
        let indices: Vec<usize> = match centres {
            Centres::All => (0..points.len()).collect(),
            Centres::Voxel(v) => {
                if !(v.is_finite() && *v > 0.0) {
                    return Err(Error::invalid(
                        format!("voxel size {v} is not a finite number greater than 0"),
                        "give a voxel size such as 0.05 (file units)",
                    ));
                }
                voxel_downsample(points, *v)
            }
            Centres::Indices(ix) => {
                if let Some(&bad) = ix.iter().find(|&&i| i >= points.len()) {
                    return Err(Error::invalid(
                        format!(
                            "centre index {bad} is beyond the cloud's {} points",
                            points.len()
                        ),
                        "give indices from 0 to the number of points minus 1",
                    ));
                }
                ix.clone()
            }
        };
        let positions: Vec<[f32; 3]> = indices.iter().map(|&i| points[i]).collect();
        let mut f = self.run(cloud, positions, progress)?;
        f.indices = Some(indices);
        Ok(f)
    }

    /// [`Engine::compute_at_with`] over a [`PreparedCloud`] (same bytes).
    ///
    /// # Errors
    /// When the run needs a k-d tree that the cloud was prepared without and it cannot be
    /// built ([`KdIndex::new`]).
    pub fn compute_at_prepared(
        &self,
        cloud: &PreparedCloud<'_>,
        centres: &[[f32; 3]],
        progress: Option<&(dyn Fn(usize) + Sync)>,
    ) -> Result<Features> {
        self.run(cloud, centres.to_vec(), progress)
    }

    /// Hands the buffers of `spent` (a result of this engine that is no longer needed) back
    /// for the next run to reuse, as [`super::output::write_features`] does between chunks.
    /// Optional: results are the same bytes either way.
    pub fn recycle(&self, spent: Features) {
        if let Ok(mut g) = self.spare.lock() {
            *g = Some((
                spent.values,
                spent.counts,
                spent.flags,
                spent.coefficients.unwrap_or_default(),
            ));
        }
    }

    /// The cell grid of this engine's query radius over `points`; `None` for an empty cloud,
    /// too many cells along an axis, or [`Engine::tree_search`].
    fn grid_for(&self, points: &[[f32; 3]]) -> Option<CellGrid> {
        (!points.is_empty() && !self.tree_only)
            .then(|| CellGrid::new(points, self.query_radius()).ok())
            .flatten()
    }

    /// The neighbour query radius: the largest support radius, with [`QUERY_SLACK`].
    fn query_radius(&self) -> f32 {
        let r_max = self.recipe.radii().iter().copied().fold(0.0f32, f32::max);
        r_max * QUERY_SLACK
    }

    /// Descriptors at arbitrary centre positions (local frame of `points`), with `index` built
    /// over `points`. Centres need not be points of the cloud. This is the entry point for
    /// registration: keep the coefficients in the recipe to get the equivariant part.
    ///
    /// # Errors
    /// If `index` was not built over `points` (different lengths).
    pub fn compute_at(
        &self,
        points: &[[f32; 3]],
        index: &KdIndex,
        centres: &[[f32; 3]],
    ) -> Result<Features> {
        self.compute_at_with(points, index, centres, None)
    }

    /// [`Engine::compute_at`] with a progress callback, called with the number of centres
    /// finished after each chunk of work (from worker threads).
    ///
    /// # Errors
    /// If `index` was not built over `points` (different lengths).
    pub fn compute_at_with(
        &self,
        points: &[[f32; 3]],
        index: &KdIndex,
        centres: &[[f32; 3]],
        progress: Option<&(dyn Fn(usize) + Sync)>,
    ) -> Result<Features> {
        let prepared = self.prepare(points, index)?;
        self.run(&prepared, centres.to_vec(), progress)
    }

    fn scratch(&self) -> Scratch {
        let nk = num_coeffs(self.recipe.degree());
        let v = || Vec::with_capacity(256);
        Scratch {
            ids: Vec::with_capacity(256),
            query: GridQuery::default(),
            bits: Vec::new(),
            summary: Vec::new(),
            gx: v(),
            gy: v(),
            gz: v(),
            gd2: v(),
            gathered: 0,
            moments: Moments::default(),
            zeros: 0,
            sel: Vec::with_capacity(256),
            dx: v(),
            dy: v(),
            dz: v(),
            d2: v(),
            rho: v(),
            fc: v(),
            step: v(),
            w: Vec::new(),
            y: Vec::new(),
            lanes: Vec::new(),
            acc: vec![0.0; self.recipe.shells() * nk],
            c: vec![0.0; self.recipe.shells() * nk],
            c64: Vec::with_capacity(self.recipe.shells() * nk),
        }
    }

    fn run(
        &self,
        cloud: &PreparedCloud<'_>,
        positions: Vec<[f32; 3]>,
        progress: Option<&(dyn Fn(usize) + Sync)>,
    ) -> Result<Features> {
        let rows = positions.len();
        let ns = self.recipe.scales();
        let nc = self.columns.len();
        let kc = self.recipe.coefficients_per_scale();
        let keep = self.recipe.keep_coefficients();
        let (mut values, mut counts, mut flag_bits, mut coeffs) = self
            .spare
            .lock()
            .ok()
            .and_then(|mut g| g.take())
            .unwrap_or_default();
        // Every value of every row is written below, so recycled buffers are only resized
        // (zero-filled where they grow), never cleared and filled again.
        values.resize(rows * nc, 0.0);
        counts.resize(rows * ns, 0);
        flag_bits.resize(rows * ns, 0);
        coeffs.resize(if keep { rows * ns * kc } else { 0 }, 0.0);
        let points = cloud.points;
        // The cloud's grid serves when it was built for this engine's query radius; otherwise
        // (a cloud prepared by an engine with another largest radius) the grid is built here.
        let own_grid = (rows > 0 && cloud.query_radius != self.query_radius())
            .then(|| self.grid_for(points))
            .flatten();
        let grid = match (&own_grid, self.tree_only || rows == 0) {
            (Some(g), _) => Some(g),
            (None, false) if cloud.query_radius == self.query_radius() => cloud.grid.as_ref(),
            _ => None,
        };
        // A cloud prepared without a tree always has the grid; a run that cannot use it (an
        // engine with another radius whose own grid has too many cells) builds a tree.
        let built;
        let search = match (grid, cloud.index()) {
            (Some(g), _) => Search::Grid(g),
            (None, Some(index)) => Search::Tree(index),
            (None, None) => {
                built = KdIndex::new(points)?;
                Search::Tree(&built)
            }
        };
        // Centres are visited in the grid's cell order (ties by row), so that consecutive
        // centres share their cells' points in cache; each row is written where it belongs.
        let visit: Vec<u32> = match grid {
            Some(g) => {
                let keys: Vec<u64> = positions.iter().map(|p| g.sort_key(*p)).collect();
                order_by_key(&keys, g.cell_count())
            }
            None => (0..rows as u32).collect(),
        };
        let out = RowsOut {
            values: values.as_mut_ptr(),
            counts: counts.as_mut_ptr(),
            flags: flag_bits.as_mut_ptr(),
            coeffs: coeffs.as_mut_ptr(),
        };
        visit.par_chunks(CHUNK).for_each_init(
            || self.scratch(),
            |s, chunk| {
                for &i in chunk {
                    let i = i as usize;
                    // SAFETY: `visit` holds every row exactly once and the chunks are
                    // disjoint, so no two writers share a row.
                    let (v, c, f, k) = unsafe { out.row(i, nc, ns, keep.then_some(kc)) };
                    self.centre(points, &search, positions[i], s, v, c, f, k);
                }
                if let Some(cb) = progress {
                    cb(chunk.len());
                }
            },
        );
        Ok(Features {
            recipe: self.recipe.clone(),
            positions,
            indices: None,
            columns: self.columns.clone(),
            values,
            counts,
            flags: flag_bits,
            coefficients: keep.then_some(coeffs),
        })
    }

    /// One centre, all scales.
    #[allow(clippy::too_many_arguments)]
    fn centre(
        &self,
        points: &[[f32; 3]],
        search: &Search,
        p: [f32; 3],
        s: &mut Scratch,
        values: &mut [f32],
        counts: &mut [u32],
        flag_out: &mut [u8],
        mut coeffs: Option<&mut [f32]>,
    ) {
        let radii = self.recipe.radii();
        let r_max = radii.iter().copied().fold(0.0f32, f32::max);
        s.ids.clear();
        match search {
            Search::Grid(g) => g.within(p, r_max * QUERY_SLACK, &mut s.query, &mut s.ids),
            Search::Tree(t) => {
                let ids = &mut s.ids;
                t.for_each_within(p, r_max * QUERY_SLACK, |i, _| ids.push(i as u32));
            }
        }
        sort_distinct(&mut s.ids, &mut s.bits, &mut s.summary);
        // Offsets of the neighbours with 0 < |d| ≤ r_max, ascending index ([`gather`]);
        // coincident points are only counted. The buffers only grow.
        let r_max2 = r_max * r_max;
        let n = s.ids.len();
        for v in [&mut s.gx, &mut s.gy, &mut s.gz, &mut s.gd2] {
            if v.len() < n {
                v.resize(n, 0.0);
            }
        }
        let (gx, gy, gz, gd2) = (
            &mut s.gx[..n],
            &mut s.gy[..n],
            &mut s.gz[..n],
            &mut s.gd2[..n],
        );
        let (m, zeros, mo) = match self.kernel {
            kernel::Kernel::Portable => gather(points, &s.ids, p, r_max2, gx, gy, gz, gd2),
            #[cfg(target_arch = "x86_64")]
            // SAFETY: `Avx2Fma` is only chosen after the processor reported AVX2 and FMA.
            kernel::Kernel::Avx2Fma => unsafe {
                super::avx2::gather(points, &s.ids, p, r_max2, gx, gy, gz, gd2)
            },
        };
        s.zeros = zeros;
        s.gathered = m;
        s.moments = mo;
        let per_scale = self.recipe.invariants_per_scale();
        let kc = self.recipe.coefficients_per_scale();
        for (si, &r) in radii.iter().enumerate() {
            let (count, fl) = self.accumulate(s, r, r_max);
            counts[si] = count;
            flag_out[si] = fl;
            self.plan.compute(
                &s.c,
                &mut s.c64,
                &mut values[si * per_scale..(si + 1) * per_scale],
            );
            if let Some(k) = coeffs.as_deref_mut() {
                k[si * kc..(si + 1) * kc].copy_from_slice(&s.c);
            }
        }
    }

    /// Fills `s.c` with the normalised coefficients `c[n][l² + l + m]` of radius `r ≤ r_max` from
    /// the gathered neighbours; returns the neighbour count and the flags.
    fn accumulate(&self, s: &mut Scratch, r: f32, r_max: f32) -> (u32, u8) {
        let r2 = r * r;
        let n_sh = self.recipe.shells();
        let l_max = self.recipe.degree();
        let nk = num_coeffs(l_max);
        let mut fl = 0u8;
        let ng = s.gathered;
        let cap = self.recipe.max_neighbours().unwrap_or(usize::MAX);
        // Every gathered neighbour is used unless a smaller radius or the cap drops some.
        let mut all = r >= r_max;
        if !all || ng > cap {
            s.sel.clear();
            s.sel
                .extend((0..ng as u32).filter(|&j| s.gd2[j as usize] <= r2));
            all = false;
        }
        if !all && s.sel.len() > cap {
            // K nearest, ties by point index (gathered positions follow the index order).
            let gd2 = &s.gd2;
            let key = |&j: &u32| (gd2[j as usize], j);
            s.sel.select_nth_unstable_by(cap - 1, |a, b| {
                let (da, ja) = key(a);
                let (db, jb) = key(b);
                da.total_cmp(&db).then(ja.cmp(&jb))
            });
            s.sel.truncate(cap);
            s.sel.sort_unstable();
            fl |= flags::CAPPED;
        }
        let coincident = s.zeros.saturating_sub(1);
        if coincident > 0 {
            fl |= flags::COINCIDENT;
        }
        let count = if all { ng } else { s.sel.len() };
        let jp = count.div_ceil(kernel::LANES) * kernel::LANES;
        // The selected offsets, padded with offset (r, 0, 0).
        let (dx, dy, dz, d2) = if all {
            (&mut s.gx, &mut s.gy, &mut s.gz, &mut s.gd2)
        } else {
            s.dx.clear();
            s.dy.clear();
            s.dz.clear();
            s.d2.clear();
            for &j in &s.sel {
                let j = j as usize;
                s.dx.push(s.gx[j]);
                s.dy.push(s.gy[j]);
                s.dz.push(s.gz[j]);
                s.d2.push(s.gd2[j]);
            }
            (&mut s.dx, &mut s.dy, &mut s.dz, &mut s.d2)
        };
        for (v, pad) in [
            (&mut *dx, r),
            (&mut *dy, 0.0),
            (&mut *dz, 0.0),
            (&mut *d2, r2),
        ] {
            v.truncate(count);
            v.resize(jp, pad);
        }
        // Unweighted first and second moments of the offsets, for the shape flags (those of
        // the gathered neighbours when all are used).
        let mo = if all {
            s.moments
        } else {
            let mut mo = Moments::default();
            for ((&x, &y), &z) in dx[..count].iter().zip(&dy[..count]).zip(&dz[..count]) {
                mo.add([x, y, z]);
            }
            mo
        };
        // Directions, their harmonics (so3) and radii, eight neighbours at a time, and the
        // radial weights.
        let wsum = kernel::directions_weights(
            self.kernel,
            l_max,
            1.0 / r,
            self.fade,
            n_sh,
            count,
            [dx, dy, dz, d2],
            [&mut s.rho, &mut s.fc, &mut s.step],
            &mut s.y,
            &mut s.w,
        );
        kernel::project(
            self.kernel,
            &s.w,
            &s.y,
            jp,
            n_sh,
            nk,
            &mut s.lanes,
            &mut s.acc,
        );
        let w = 1.0 + wsum + coincident as f32;
        kernel::divide(self.kernel, &s.acc, w, &mut s.c);
        fl |= shape_flags(count as u32, mo.m1, mo.m2);
        (count as u32, fl)
    }
}

/// Sorts distinct point indices (each point appears once in a query's hits) ascending. When
/// the hits span at most about `(2n + 16)·4096` indices (`n` hits), a bitmap over their range
/// is set, with a summary word per 64 bitmap words, and read back in order through the summary
/// (no comparison, no branch per pair); otherwise a comparison sort runs. Either way the result
/// is the ascending order. `bits` is all zeros between calls (each word read is cleared), so
/// only the summary is filled per call.
fn sort_distinct(ids: &mut [u32], bits: &mut Vec<u64>, summary: &mut Vec<u64>) {
    let n = ids.len();
    if n < 2 {
        return;
    }
    let (mut lo, mut hi) = (u32::MAX, 0u32);
    for &i in ids.iter() {
        lo = lo.min(i);
        hi = hi.max(i);
    }
    let words = ((hi - lo) >> 6) as usize + 1;
    let sums = ((words - 1) >> 6) + 1;
    if sums > 2 * n + 16 {
        ids.sort_unstable();
        return;
    }
    if bits.len() < words {
        bits.resize(words, 0);
    }
    summary.clear();
    summary.resize(sums, 0);
    for &i in ids.iter() {
        let o = i - lo;
        bits[(o >> 6) as usize] |= 1u64 << (o & 63);
        summary[(o >> 12) as usize] |= 1u64 << ((o >> 6) & 63);
    }
    let mut k = 0;
    for (s, &sb) in summary.iter().enumerate() {
        let mut sb = sb;
        while sb != 0 {
            let w = (s << 6) + sb.trailing_zeros() as usize;
            let base = lo + ((w as u32) << 6);
            let mut b = std::mem::take(&mut bits[w]);
            while b != 0 {
                ids[k] = base + b.trailing_zeros();
                k += 1;
                b &= b - 1;
            }
            sb &= sb - 1;
        }
    }
    debug_assert_eq!(k, n, "indices must be distinct");
}

/// One hit of [`gather`] (and of the AVX2 build's last `n mod 8` hits): the offset `d = q − p`
/// and `d² = dx² + dy² + dz²` (products then sums, in this order) written at slot `m` of
/// `g = [gx, gy, gz, gd2]`, `zeros` counted up when `d² = 0`; returns `d` and whether the hit
/// is kept (`0 < d² ≤ r2`).
#[inline(always)]
pub(super) fn gather_hit(
    q: [f32; 3],
    p: [f32; 3],
    r2: f32,
    m: usize,
    g: [&mut [f32]; 4],
    zeros: &mut u32,
) -> ([f32; 3], bool) {
    let d = [q[0] - p[0], q[1] - p[1], q[2] - p[2]];
    let d2 = d[0] * d[0] + d[1] * d[1] + d[2] * d[2];
    let [gx, gy, gz, gd2] = g;
    gx[m] = d[0];
    gy[m] = d[1];
    gz[m] = d[2];
    gd2[m] = d2;
    *zeros += (d2 == 0.0) as u32;
    (d, d2 > 0.0 && d2 <= r2)
}

/// The offsets `q − p` of the points `ids` (ascending) of `points` from the centre `p`, with
/// their squared distances `dx² + dy² + dz²` (f32, products then sums, in this order), written
/// at the front of `gx`, `gy`, `gz`, `gd2` for the hits with `0 < d² ≤ r2` (branch-free
/// compaction: every hit is written at the kept count, which advances only for a kept one;
/// values past the kept ones are never read). Returns the kept count, the number of points at
/// distance 0 and the moments of the kept offsets. The AVX2 build
/// ([`super::avx2::gather`]) gives the same bits.
#[allow(clippy::too_many_arguments)]
pub(super) fn gather(
    points: &[[f32; 3]],
    ids: &[u32],
    p: [f32; 3],
    r2: f32,
    gx: &mut [f32],
    gy: &mut [f32],
    gz: &mut [f32],
    gd2: &mut [f32],
) -> (usize, u32, Moments) {
    let mut m = 0;
    let mut zeros = 0u32;
    let mut mo = Moments::default();
    for &i in ids {
        let (d, keep) = gather_hit(points[i as usize], p, r2, m, [gx, gy, gz, gd2], &mut zeros);
        m += keep as usize;
        // A dropped hit adds +0 to every moment, which leaves each sum's bits as they are
        // (the sums start at +0 and so never hold −0): the moments of the kept ones.
        let mask = if keep { u32::MAX } else { 0 };
        mo.add(d.map(|v| f32::from_bits(v.to_bits() & mask)));
    }
    (m, zeros, mo)
}

/// Unweighted first and second moments of neighbour offsets `d`, each summed in f32 in
/// neighbour order from +0: `m1 = Σ d`, `m2 = Σ (dx², dx·dy, dx·dz, dy², dy·dz, dz²)`.
#[derive(Debug, Default, Clone, Copy)]
pub(super) struct Moments {
    pub(super) m1: [f32; 3],
    pub(super) m2: [f32; 6],
}

impl Moments {
    #[inline(always)]
    fn add(&mut self, d: [f32; 3]) {
        for (m, v) in self.m1.iter_mut().zip(d) {
            *m += v;
        }
        self.m2[0] += d[0] * d[0];
        self.m2[1] += d[0] * d[1];
        self.m2[2] += d[0] * d[2];
        self.m2[3] += d[1] * d[1];
        self.m2[4] += d[1] * d[2];
        self.m2[5] += d[2] * d[2];
    }
}

/// Flags from the neighbour count and the offsets' moments (see [`flags`]).
fn shape_flags(count: u32, m1: [f32; 3], m2: [f32; 6]) -> u8 {
    let mut fl = 0;
    if count == 0 {
        return flags::NO_NEIGHBOUR | flags::FEW_NEIGHBOURS;
    }
    if count < 3 {
        fl |= flags::FEW_NEIGHBOURS;
    }
    let n = count as f64;
    let mean = m1.map(|v| v as f64 / n);
    let c = |k: usize, a: usize, b: usize| m2[k] as f64 / n - mean[a] * mean[b];
    let (xx, xy, xz, yy, yz, zz) = (
        c(0, 0, 0),
        c(1, 0, 1),
        c(2, 0, 2),
        c(3, 1, 1),
        c(4, 1, 2),
        c(5, 2, 2),
    );
    let t = (xx + yy + zz).max(0.0);
    // Sum of the principal 2×2 minors (λ1λ2 + λ1λ3 + λ2λ3) and the determinant (λ1λ2λ3).
    let minors = xx * yy - xy * xy + xx * zz - xz * xz + yy * zz - yz * yz;
    let det = xx * (yy * zz - yz * yz) - xy * (xy * zz - yz * xz) + xz * (xy * yz - yy * xz);
    if minors <= flags::SHAPE_TOLERANCE * t * t {
        fl |= flags::LINEAR | flags::PLANAR;
    } else if det <= flags::SHAPE_TOLERANCE * t * t * t {
        fl |= flags::PLANAR;
    }
    fl
}

fn check_index(points: &[[f32; 3]], index: &KdIndex) -> Result<()> {
    if index.len() != points.len() {
        return Err(Error::invalid(
            format!(
                "the k-d index holds {} points but the cloud has {}",
                index.len(),
                points.len()
            ),
            "build the index over the same points",
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::sort_distinct;

    #[test]
    fn sort_distinct_sorts_narrow_and_wide_sets() {
        let (mut bits, mut summary) = (Vec::new(), Vec::new());
        let mut s = 0x2545_f491_4f6c_dd1du64;
        // Narrow spans, spans needing the summary words, and spans too wide for the bitmap.
        for (n, span) in [
            (0usize, 1u32),
            (1, 1),
            (2, 2),
            (70, 2000),
            (60, 64),
            (75, 50_000),
            (20, 200_000),
            (3, 4096 * 64 * 2),
            (70, 1 << 30),
            (70, 2000),
        ] {
            let mut ids: Vec<u32> = Vec::new();
            while ids.len() < n {
                s ^= s << 13;
                s ^= s >> 7;
                s ^= s << 17;
                let v = 1000 + (s % span as u64) as u32;
                if !ids.contains(&v) {
                    ids.push(v);
                }
            }
            let mut want = ids.clone();
            want.sort_unstable();
            sort_distinct(&mut ids, &mut bits, &mut summary);
            assert!(bits.iter().all(|&b| b == 0), "the bitmap is left clear");
            assert_eq!(ids, want, "n {n} span {span}");
        }
    }
}
