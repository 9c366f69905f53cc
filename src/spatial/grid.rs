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
//! order that depends on the points and the cell size only, never on the thread.

use crate::error::{Error, Result};

/// Largest number of cells along one axis; beyond it (a radius tiny against the cloud's
/// extent) the grid is not built and the caller falls back to the k-d tree.
pub const MAX_CELLS_PER_AXIS: u64 = 1 << 20;

/// A read-only cell grid over f32 local positions.
#[derive(Debug)]
pub struct CellGrid {
    cell: f32,
    inv: f64,
    origin: [f64; 3],
    dims: [u64; 3],
    /// Occupied cell keys `(z·ny + y)·nx + x`, ascending.
    keys: Vec<u64>,
    /// `starts[c]..starts[c + 1]`: the points of cell `keys[c]` in the sorted arrays.
    starts: Vec<u32>,
    /// Point index of each sorted position.
    order: Vec<u32>,
    /// Coordinates in sorted order.
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
            cell,
            inv,
            origin: lo,
            dims,
            keys: Vec::new(),
            starts: Vec::new(),
            order: Vec::new(),
            xs: Vec::new(),
            ys: Vec::new(),
            zs: Vec::new(),
        };
        let mut keyed: Vec<(u64, u32)> = points
            .iter()
            .enumerate()
            .map(|(i, p)| {
                let c = grid.cell_of(*p);
                (grid.key(c[0] as u64, c[1] as u64, c[2] as u64), i as u32)
            })
            .collect();
        keyed.sort_unstable();
        grid.order = keyed.iter().map(|&(_, i)| i).collect();
        grid.xs = grid.order.iter().map(|&i| points[i as usize][0]).collect();
        grid.ys = grid.order.iter().map(|&i| points[i as usize][1]).collect();
        grid.zs = grid.order.iter().map(|&i| points[i as usize][2]).collect();
        for (j, &(k, _)) in keyed.iter().enumerate() {
            if grid.keys.last() != Some(&k) {
                grid.keys.push(k);
                grid.starts.push(j as u32);
            }
        }
        grid.starts.push(keyed.len() as u32);
        Ok(grid)
    }

    /// The cell edge length.
    pub fn cell(&self) -> f32 {
        self.cell
    }

    /// Number of points.
    pub fn len(&self) -> usize {
        self.order.len()
    }

    /// Always false: a grid holds at least one point.
    pub fn is_empty(&self) -> bool {
        self.order.is_empty()
    }

    /// Point indices in grid order (cells row by row, ascending index within a cell): an
    /// order in which consecutive points are near each other.
    pub fn order(&self) -> &[u32] {
        &self.order
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
            for (n, c) in centres.iter().enumerate().step_by(7) {
                got.clear();
                grid.within(*c, r, &mut q, &mut got);
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
