//! [`CellGrid`]: a fixed-radius neighbour search over cubic cells, for queries whose radius is
//! at most the cell size.
//!
//! The points are sorted into cubic cells of edge `cell` (file units), cell coordinates
//! `floor((p − origin)/cell)` computed in f64 from the f32 positions, `origin` the lower corner
//! of the bounding box. Cells are ordered row by row (`x` fastest, then `y`, then `z`) and the
//! points of a cell by ascending index, so that the three cells of a row that a query touches
//! form one run of the sorted arrays: a query scans 9 runs (27 cells) and tests each candidate's
//! distance, coordinates read from structure-of-arrays copies in grid order. Any point within
//! `cell` of a centre lies in one of the 27 cells around the centre's cell (the f64 cell
//! coordinates are exact to far below a cell for any extent the grid accepts).
//!
//! Hits come out grouped by row and, within a run, in ascending cell and index order: a fixed
//! order that depends on the points and the cell size only, never on the thread. Where the
//! processor has AVX2 the candidates are tested eight at a time and the hits packed left by a
//! lane permutation from a table (no branch per hit); the hits and their order are the same.

use crate::error::{Error, Result};

/// Largest number of cells along one axis; beyond it (a radius tiny against the cloud's
/// extent) the grid is not built and the caller falls back to the k-d tree.
pub const MAX_CELLS_PER_AXIS: u64 = 1 << 20;

/// Extra values after the sorted arrays, so that an eight-wide scan of a run may read up to
/// seven values past its end (the lanes beyond the run are masked out).
const PAD: usize = 7;

/// A read-only cell grid over f32 local positions.
#[derive(Debug)]
pub struct CellGrid {
    /// Scan runs eight candidates at a time (the processor has AVX2).
    wide: bool,
    cell: f32,
    inv: f64,
    origin: [f64; 3],
    dims: [u64; 3],
    /// Occupied cell keys `(z·ny + y)·nx + x`, ascending.
    keys: Vec<u64>,
    /// `starts[c]..starts[c + 1]`: the points of cell `keys[c]` in the sorted arrays.
    starts: Vec<u32>,
    /// When the box has few cells (at most twice the points plus 4 096): `before[k]`, the
    /// number of points in cells of key below `k`, for every key `k ≤` the cell count, so that
    /// a row's run is two lookups instead of a search of `keys`.
    before: Option<Vec<u32>>,
    /// Point index of each sorted position, then [`PAD`] zeros.
    order: Vec<u32>,
    /// Coordinates in sorted order, then [`PAD`] zeros each.
    xs: Vec<f32>,
    ys: Vec<f32>,
    zs: Vec<f32>,
}

/// The 9 runs (start, end in sorted positions) of the rows around one cell, reused while the
/// centres stay in that cell.
#[derive(Debug, Default, Clone)]
pub struct GridQuery {
    cell: Option<[i64; 3]>,
    runs: Vec<(u32, u32)>,
}

impl CellGrid {
    /// Sorts `points` into cells of edge `cell`. Fails on an empty slice, a cell size that is
    /// not finite and positive, more than `u32::MAX` points, or more than
    /// [`MAX_CELLS_PER_AXIS`] cells along an axis (use the k-d tree then).
    pub fn new(points: &[[f32; 3]], cell: f32) -> Result<CellGrid> {
        if points.is_empty() || points.len() > u32::MAX as usize {
            return Err(Error::invalid(
                format!("cannot grid {} points", points.len()),
                "give a cloud with 1 to 4 294 967 295 points",
            ));
        }
        if !(cell.is_finite() && cell > 0.0) {
            return Err(Error::invalid(
                format!("cell size {cell} is not a finite number greater than 0"),
                "give a positive cell size",
            ));
        }
        let mut lo = [f64::INFINITY; 3];
        let mut hi = [f64::NEG_INFINITY; 3];
        for p in points {
            for k in 0..3 {
                lo[k] = lo[k].min(p[k] as f64);
                hi[k] = hi[k].max(p[k] as f64);
            }
        }
        let inv = 1.0 / cell as f64;
        let mut dims = [0u64; 3];
        for k in 0..3 {
            let n = ((hi[k] - lo[k]) * inv).floor();
            if !(n.is_finite() && n < MAX_CELLS_PER_AXIS as f64) {
                return Err(Error::invalid(
                    format!("cell size {cell} is too small for the cloud's extent"),
                    "use the k-d tree for this radius",
                ));
            }
            dims[k] = n as u64 + 1;
        }
        let mut grid = CellGrid {
            wide: wide_scan_available(),
            cell,
            inv,
            origin: lo,
            dims,
            keys: Vec::new(),
            starts: Vec::new(),
            before: None,
            order: Vec::new(),
            xs: Vec::new(),
            ys: Vec::new(),
            zs: Vec::new(),
        };
        let keys: Vec<u64> = points
            .iter()
            .map(|p| {
                let c = grid.cell_of(*p);
                grid.key(c[0] as u64, c[1] as u64, c[2] as u64)
            })
            .collect();
        grid.order = order_by_key(&keys, grid.cell_count());
        grid.xs = grid.order.iter().map(|&i| points[i as usize][0]).collect();
        grid.ys = grid.order.iter().map(|&i| points[i as usize][1]).collect();
        grid.zs = grid.order.iter().map(|&i| points[i as usize][2]).collect();
        for (j, &i) in grid.order.iter().enumerate() {
            let k = keys[i as usize];
            if grid.keys.last() != Some(&k) {
                grid.keys.push(k);
                grid.starts.push(j as u32);
            }
        }
        grid.starts.push(grid.order.len() as u32);
        let cells = grid.cell_count();
        if cells <= 2 * points.len() as u64 + 4096 {
            let mut before = vec![0u32; cells as usize + 1];
            for &k in &keys {
                before[k as usize + 1] += 1;
            }
            for c in 1..before.len() {
                before[c] += before[c - 1];
            }
            grid.before = Some(before);
        }
        for v in [&mut grid.xs, &mut grid.ys, &mut grid.zs] {
            v.resize(v.len() + PAD, 0.0);
        }
        grid.order.resize(grid.order.len() + PAD, 0);
        Ok(grid)
    }

    /// The cell edge length.
    pub fn cell(&self) -> f32 {
        self.cell
    }

    /// Number of points.
    pub fn len(&self) -> usize {
        self.order.len() - PAD
    }

    /// Always false: a grid holds at least one point.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Point indices in grid order (cells row by row, ascending index within a cell): an
    /// order in which consecutive points are near each other.
    pub fn order(&self) -> &[u32] {
        &self.order[..self.len()]
    }

    /// The same grid scanning one candidate at a time even where the processor has AVX2
    /// (same hits in the same order; for comparison).
    pub fn portable(mut self) -> CellGrid {
        self.wide = false;
        self
    }

    /// Number of cells of the grid's box (occupied or not): every [`CellGrid::sort_key`] is
    /// below it.
    pub fn cell_count(&self) -> u64 {
        self.dims[0] * self.dims[1] * self.dims[2]
    }

    /// The same grid finding rows by a search of the occupied cells even when it has the
    /// lookup table (same runs).
    #[cfg(test)]
    fn without_table(mut self) -> CellGrid {
        self.before = None;
        self
    }

    /// Cell coordinates of a position (may lie outside the grid for a centre that is not a
    /// grid point).
    #[inline]
    pub fn cell_of(&self, p: [f32; 3]) -> [i64; 3] {
        std::array::from_fn(|k| floor_i64((p[k] as f64 - self.origin[k]) * self.inv))
    }

    /// Sort key of a position's cell (cells outside the grid clamped to its border), for
    /// visiting centres in spatial order.
    pub fn sort_key(&self, p: [f32; 3]) -> u64 {
        let c = self.cell_of(p);
        let cl = |k: usize| c[k].clamp(0, self.dims[k] as i64 - 1) as u64;
        self.key(cl(0), cl(1), cl(2))
    }

    #[inline]
    fn key(&self, x: u64, y: u64, z: u64) -> u64 {
        (z * self.dims[1] + y) * self.dims[0] + x
    }

    /// Sorted-position runs of the rows around cell `c` (up to 9).
    fn runs_around(&self, c: [i64; 3], runs: &mut Vec<(u32, u32)>) {
        runs.clear();
        let (nx, ny, nz) = (
            self.dims[0] as i64,
            self.dims[1] as i64,
            self.dims[2] as i64,
        );
        let (x0, x1) = ((c[0] - 1).max(0), (c[0] + 1).min(nx - 1));
        if x0 > x1 {
            return;
        }
        for z in (c[2] - 1).max(0)..=(c[2] + 1).min(nz - 1) {
            for y in (c[1] - 1).max(0)..=(c[1] + 1).min(ny - 1) {
                let lo = self.key(x0 as u64, y as u64, z as u64);
                let hi = self.key(x1 as u64, y as u64, z as u64);
                if let Some(before) = &self.before {
                    let (a, b) = (before[lo as usize], before[hi as usize + 1]);
                    if b > a {
                        runs.push((a, b));
                    }
                    continue;
                }
                let a = self.keys.partition_point(|&k| k < lo);
                let mut b = a;
                while b < self.keys.len() && self.keys[b] <= hi {
                    b += 1;
                }
                if b > a {
                    runs.push((self.starts[a], self.starts[b]));
                }
            }
        }
    }

    /// Appends to `out` the indices of the points `q` with `|q − p|² ≤ radius²` (squared
    /// distance computed in f32 as `dx² + dy² + dz²`, `d = q − p`), for `radius ≤` the cell
    /// size; order: rows of the 27 cells around `p`'s cell (z outer, then y), within a row
    /// ascending cell and index. `query` caches the rows between calls in the same cell.
    pub fn within(&self, p: [f32; 3], radius: f32, query: &mut GridQuery, out: &mut Vec<u32>) {
        debug_assert!(radius <= self.cell);
        let c = self.cell_of(p);
        if query.cell != Some(c) {
            self.runs_around(c, &mut query.runs);
            query.cell = Some(c);
        }
        let r2 = radius * radius;
        #[cfg(target_arch = "x86_64")]
        if self.wide {
            for &(a, b) in &query.runs {
                let (a, b) = (a as usize, b as usize);
                // Eight values are stored at a time: room for the run and seven more.
                out.reserve(b - a + PAD);
                let base = out.len();
                // SAFETY: the processor has AVX2 (`wide`), `a ≤ b ≤ len()` so every eight-wide
                // read from `j < b` ends within the [`PAD`] values past the sorted arrays, and
                // the spare capacity holds `b − a + PAD` values, enough for any store at
                // `m ≤ j − a` of eight values.
                let m = unsafe {
                    scan_avx2(
                        [&self.xs, &self.ys, &self.zs],
                        &self.order,
                        a,
                        b,
                        p,
                        r2,
                        out.as_mut_ptr().add(base),
                    )
                };
                // SAFETY: `scan_avx2` wrote the first `m` spare values.
                unsafe { out.set_len(base + m) };
            }
            return;
        }
        for &(a, b) in &query.runs {
            let (a, b) = (a as usize, b as usize);
            let base = out.len();
            // Branch-free compaction: every candidate is written, the end advances on a hit
            // (into spare capacity: no zero-filling of the candidates first).
            out.reserve(b - a);
            let dst = &mut out.spare_capacity_mut()[..b - a];
            let mut m = 0;
            for (((&x, &y), &z), &i) in self.xs[a..b]
                .iter()
                .zip(&self.ys[a..b])
                .zip(&self.zs[a..b])
                .zip(&self.order[a..b])
            {
                let (dx, dy, dz) = (x - p[0], y - p[1], z - p[2]);
                let d2 = dx * dx + dy * dy + dz * dz;
                dst[m.min(b - a - 1)].write(i);
                m += (d2 <= r2) as usize;
            }
            // SAFETY: the first `m` spare values were written above (`m ≤ b − a`; a value is
            // kept only when written at its own position, before `m` moves past it).
            unsafe { out.set_len(base + m) };
        }
    }
}

/// The indices `0..keys.len()` in the order of `(keys[i], i)`, for keys below `bound`: a
/// counting sort (stable, so ties stay in ascending index) when `bound` is at most twice the
/// number of keys plus 4 096, else a comparison sort of `key·2³² + i` (or of the pairs when a
/// key does not fit 32 bits).
///
/// # Panics
/// If there are more than `u32::MAX` keys, or (counting sort) a key is not below `bound`.
pub fn order_by_key(keys: &[u64], bound: u64) -> Vec<u32> {
    let n = keys.len();
    assert!(n <= u32::MAX as usize, "at most 2³² − 1 keys");
    if bound <= 2 * n as u64 + 4096 {
        // start[k]: where the next index of key k goes.
        let mut start = vec![0u32; bound as usize + 1];
        for &k in keys {
            start[k as usize + 1] += 1;
        }
        for c in 1..start.len() {
            start[c] += start[c - 1];
        }
        let mut out = vec![0u32; n];
        for (i, &k) in keys.iter().enumerate() {
            let at = &mut start[k as usize];
            out[*at as usize] = i as u32;
            *at += 1;
        }
        out
    } else if bound <= 1 << 32 {
        let mut packed: Vec<u64> = keys
            .iter()
            .enumerate()
            .map(|(i, &k)| (k << 32) | i as u64)
            .collect();
        packed.sort_unstable();
        packed.iter().map(|&v| v as u32).collect()
    } else {
        let mut v: Vec<u32> = (0..n as u32).collect();
        v.sort_unstable_by_key(|&i| (keys[i as usize], i));
        v
    }
}

/// Whether [`scan_avx2`] can run on this processor.
fn wide_scan_available() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        std::arch::is_x86_feature_detected!("avx2")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

/// `PACK[mask]`: the lanes whose bit is set in `mask`, in ascending order, then zeros (the
/// permutation that packs the kept lanes of eight to the left).
#[cfg(target_arch = "x86_64")]
pub(crate) static PACK: [[u32; 8]; 256] = {
    let mut t = [[0u32; 8]; 256];
    let mut mask = 0;
    while mask < 256 {
        let (mut lane, mut k) = (0, 0);
        while lane < 8 {
            if mask & (1 << lane) != 0 {
                t[mask][k] = lane as u32;
                k += 1;
            }
            lane += 1;
        }
        mask += 1;
    }
    t
};

/// The candidates `a..b` of the sorted arrays tested eight at a time, as the portable loop of
/// [`CellGrid::within`] tests them one at a time (`dx² + dy² + dz² ≤ r2` in f32, a product then
/// a sum, same order); the indices of the hits are stored from `dst` in candidate order.
/// Returns the number of hits.
///
/// # Safety
/// AVX2 must be available; `xyz` and `order` must hold at least `b + 7` values (`a ≤ b`);
/// `dst` must be valid for `b − a + 7` writes of `u32`.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn scan_avx2(
    xyz: [&[f32]; 3],
    order: &[u32],
    a: usize,
    b: usize,
    p: [f32; 3],
    r2: f32,
    dst: *mut u32,
) -> usize {
    use std::arch::x86_64::*;
    debug_assert!(xyz.iter().all(|v| v.len() >= b + PAD) && order.len() >= b + PAD);
    let c = p.map(|v| _mm256_set1_ps(v));
    let r2 = _mm256_set1_ps(r2);
    let lanes = _mm256_setr_epi32(0, 1, 2, 3, 4, 5, 6, 7);
    let mut m = 0usize;
    let mut j = a;
    while j < b {
        // SAFETY: reads of eight values from `j < b` stay below `b + 7` (caller); the store
        // of eight at `m ≤ j − a` stays below `b − a + 7`.
        unsafe {
            let d = std::array::from_fn::<_, 3, _>(|k| {
                _mm256_sub_ps(_mm256_loadu_ps(xyz[k].as_ptr().add(j)), c[k])
            });
            let d2 = _mm256_add_ps(
                _mm256_add_ps(_mm256_mul_ps(d[0], d[0]), _mm256_mul_ps(d[1], d[1])),
                _mm256_mul_ps(d[2], d[2]),
            );
            let inside = _mm256_castps_si256(_mm256_cmp_ps::<_CMP_LE_OQ>(d2, r2));
            let in_run = _mm256_cmpgt_epi32(_mm256_set1_epi32((b - j).min(8) as i32), lanes);
            let keep =
                _mm256_movemask_ps(_mm256_castsi256_ps(_mm256_and_si256(inside, in_run))) as usize;
            let ids = _mm256_loadu_si256(order.as_ptr().add(j) as *const __m256i);
            let perm = _mm256_loadu_si256(PACK[keep].as_ptr() as *const __m256i);
            _mm256_storeu_si256(
                dst.add(m) as *mut __m256i,
                _mm256_permutevar8x32_epi32(ids, perm),
            );
            m += keep.count_ones() as usize;
        }
        j += 8;
    }
    m
}

/// `v.floor() as i64` without a call to the C library's `floor` (x86-64 before SSE4.1 has no
/// rounding instruction): the truncation, minus one when it rounded up (negative non-integers).
/// The same value for every finite `v` whose floor fits an `i64`; NaN gives 0 as `as` does.
#[inline]
fn floor_i64(v: f64) -> i64 {
    let t = v as i64;
    t - ((t as f64) > v) as i64
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::spatial::KdIndex;

    fn points(n: usize, seed: u64) -> Vec<[f32; 3]> {
        let mut rng = crate::so3::rng::SplitMix64::new(seed);
        (0..n)
            .map(|_| std::array::from_fn(|k| (rng.next_f64() * [1.0, 2.0, 0.5][k]) as f32))
            .collect()
    }

    #[test]
    fn grid_matches_the_tree_and_brute_force() {
        let seed = 11;
        let pts = points(3000, seed);
        let index = KdIndex::new(&pts).unwrap();
        for r in [0.05f32, 0.13, 0.4] {
            let grid = CellGrid::new(&pts, r).unwrap();
            let mut q = GridQuery::default();
            let mut got = Vec::new();
            let mut tree = Vec::new();
            // Centres in grid order (the cache is reused) and off-cloud centres.
            let mut centres: Vec<[f32; 3]> =
                grid.order().iter().map(|&i| pts[i as usize]).collect();
            centres.extend(
                points(200, seed + 1)
                    .iter()
                    .map(|p| p.map(|v| 1.2 * v - 0.1)),
            );
            let narrow = CellGrid::new(&pts, r).unwrap().portable().without_table();
            assert!(grid.before.is_some(), "the test box has few cells");
            let (mut qn, mut one_by_one) = (GridQuery::default(), Vec::new());
            for (n, c) in centres.iter().enumerate().step_by(7) {
                got.clear();
                grid.within(*c, r, &mut q, &mut got);
                // The eight-wide scan (where available) and the row table give the same hits in
                // the same order as the one-by-one scan of searched rows.
                one_by_one.clear();
                narrow.within(*c, r, &mut qn, &mut one_by_one);
                assert_eq!(got, one_by_one, "seed {seed}, r {r}, centre {n}");
                got.sort_unstable();
                let want: Vec<u32> = pts
                    .iter()
                    .enumerate()
                    .filter(|(_, p)| {
                        let d = [p[0] - c[0], p[1] - c[1], p[2] - c[2]];
                        d[0] * d[0] + d[1] * d[1] + d[2] * d[2] <= r * r
                    })
                    .map(|(i, _)| i as u32)
                    .collect();
                assert_eq!(got, want, "seed {seed}, r {r}, centre {n}");
                index.within_sorted(*c, r * 0.999, &mut tree);
                assert!(tree.iter().all(|h| want.binary_search(&h.0).is_ok()));
            }
        }
    }

    #[test]
    fn order_by_key_is_the_order_of_key_then_index() {
        let mut rng = crate::so3::rng::SplitMix64::new(5);
        // Counting sort, packed comparison sort, pair comparison sort.
        for (n, bound) in [
            (0usize, 1u64),
            (1, 1),
            (500, 40),
            (300, 5000),
            (300, 1 << 32),
            (300, 1 << 40),
        ] {
            let keys: Vec<u64> = (0..n)
                .map(|_| (rng.next_f64() * bound as f64) as u64 % bound)
                .collect();
            let mut want: Vec<u32> = (0..n as u32).collect();
            want.sort_by_key(|&i| (keys[i as usize], i));
            assert_eq!(order_by_key(&keys, bound), want, "n {n}, bound {bound}");
        }
    }

    #[test]
    fn floor_without_the_library_call_matches_floor() {
        for v in [
            0.0,
            -0.0,
            0.5,
            -0.5,
            1.0,
            -1.0,
            2.999_999,
            -2.000_001,
            1e15 + 0.5,
            -1e15 - 0.5,
            4503599627370497.0,
            -4503599627370497.0,
            f64::MIN_POSITIVE,
            -f64::MIN_POSITIVE,
        ] {
            assert_eq!(floor_i64(v), v.floor() as i64, "{v}");
        }
    }

    #[test]
    fn bad_grids_are_refused() {
        assert!(CellGrid::new(&[], 1.0).is_err());
        assert!(CellGrid::new(&[[0.0; 3]], 0.0).is_err());
        assert!(CellGrid::new(&[[0.0; 3], [1e6, 0.0, 0.0]], 1e-3).is_err());
        let g = CellGrid::new(&[[0.0; 3]], 1.0).unwrap();
        assert_eq!((g.len(), g.order()), (1, &[0u32][..]));
    }
}
