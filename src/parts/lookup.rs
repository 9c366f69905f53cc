//! A closest-point lookup grid: for every cell of a regular grid around a reference, the index
//! of the reference point nearest to the cell's centre, so the global pose search pairs a
//! moved scan point with a reference point in constant time instead of a k-d tree descent.
//!
//! Built by vector propagation (Danielsson 1980, "Euclidean distance mapping", CVGIP 14, in its
//! 3-D raster-scan form): every cell holding reference points is seeded with the one nearest
//! its centre, then forward and backward raster passes hand each cell the nearest of its
//! neighbours' candidates (13 neighbours per pass, two rounds). The result is the exact nearest
//! point for almost every cell and otherwise one a fraction of a cell farther (the known
//! approximation of vector propagation); a query point anywhere in a cell gets a point at most
//! one cell diagonal farther than its true nearest point. Points outside the grid are clamped
//! to its border cells (their pair is then farther, which the callers' cutoffs reject).
//!
//! Conventions: the reference's local frame and file units; cell `(i, j, k)` is stored at
//! `(k · ny + j) · nx + i` (x fastest). The build is sequential and deterministic.

/// The grid (module docs).
#[derive(Debug, Clone)]
pub struct ClosestGrid {
    lo: [f32; 3],
    cell: f32,
    inv: f32,
    dims: [usize; 3],
    nearest: Vec<u32>,
}

const NONE: u32 = u32::MAX;

impl ClosestGrid {
    /// The grid over the bounds of `points` widened by `pad` on every side, with cubic cells
    /// of `cell` (file units). `points` must not be empty.
    pub fn new(points: &[[f32; 3]], cell: f64, pad: f64) -> ClosestGrid {
        let (lo, hi) = super::reference::bounds(points);
        let cell = cell.max(1e-9);
        let dims =
            [0, 1, 2].map(|a| (((hi[a] - lo[a]) + 2.0 * pad) / cell).ceil().max(1.0) as usize);
        let lo = [0, 1, 2].map(|a| (lo[a] - pad) as f32);
        let mut g = ClosestGrid {
            lo,
            cell: cell as f32,
            inv: (1.0 / cell) as f32,
            dims,
            nearest: vec![NONE; dims[0] * dims[1] * dims[2]],
        };
        let mut best = vec![f32::INFINITY; g.nearest.len()];
        for (k, p) in points.iter().enumerate() {
            let c = g.cell_index(*p);
            let d = dist2(g.centre(c), *p);
            if d < best[c] {
                best[c] = d;
                g.nearest[c] = k as u32;
            }
        }
        // Neighbour offsets before a cell in raster order (z, then y, then x): 13 of 26.
        let mut before: Vec<[i64; 3]> = Vec::with_capacity(13);
        for dk in -1i64..=0 {
            for dj in -1i64..=1 {
                for di in -1i64..=1 {
                    if dk < 0 || dj < 0 || (dj == 0 && di < 0) {
                        before.push([di, dj, dk]);
                    }
                }
            }
        }
        let after: Vec<[i64; 3]> = before.iter().map(|o| o.map(|v| -v)).collect();
        for _round in 0..2 {
            g.pass(points, &mut best, &before, true);
            g.pass(points, &mut best, &after, false);
        }
        g
    }

    fn pass(&mut self, points: &[[f32; 3]], best: &mut [f32], offsets: &[[i64; 3]], fwd: bool) {
        let [nx, ny, nz] = self.dims.map(|d| d as i64);
        let n = self.nearest.len();
        for step in 0..n {
            let c = if fwd { step } else { n - 1 - step };
            let ci = c as i64;
            let (i, j, k) = (ci % nx, (ci / nx) % ny, ci / (nx * ny));
            let centre = self.centre(c);
            for o in offsets {
                let (a, b, d) = (i + o[0], j + o[1], k + o[2]);
                if a < 0 || b < 0 || d < 0 || a >= nx || b >= ny || d >= nz {
                    continue;
                }
                let cand = self.nearest[((d * ny + b) * nx + a) as usize];
                if cand == NONE || cand == self.nearest[c] {
                    continue;
                }
                let dd = dist2(centre, points[cand as usize]);
                if dd < best[c] || (dd == best[c] && cand < self.nearest[c]) {
                    best[c] = dd;
                    self.nearest[c] = cand;
                }
            }
        }
    }

    fn centre(&self, c: usize) -> [f32; 3] {
        let [nx, ny, _] = self.dims;
        let (i, j, k) = (c % nx, (c / nx) % ny, c / (nx * ny));
        [
            self.lo[0] + (i as f32 + 0.5) * self.cell,
            self.lo[1] + (j as f32 + 0.5) * self.cell,
            self.lo[2] + (k as f32 + 0.5) * self.cell,
        ]
    }

    #[inline]
    fn cell_index(&self, p: [f32; 3]) -> usize {
        let ax = |a: usize| {
            let v = ((p[a] - self.lo[a]) * self.inv).floor();
            // NaN and out-of-range values clamp to the border (`as` saturates, NaN → 0).
            (v as i64).clamp(0, self.dims[a] as i64 - 1) as usize
        };
        (ax(2) * self.dims[1] + ax(1)) * self.dims[0] + ax(0)
    }

    /// Index of a reference point near `p` (module docs: the nearest to the centre of `p`'s
    /// cell, or of the border cell nearest `p` when `p` is outside the grid).
    #[inline]
    pub fn lookup(&self, p: [f32; 3]) -> usize {
        self.nearest[self.cell_index(p)] as usize
    }

    /// Cell size, file units.
    pub fn cell(&self) -> f64 {
        self.cell as f64
    }

    /// Number of cells.
    pub fn cells(&self) -> usize {
        self.nearest.len()
    }
}

#[inline]
fn dist2(a: [f32; 3], b: [f32; 3]) -> f32 {
    let d = [a[0] - b[0], a[1] - b[1], a[2] - b[2]];
    d[0] * d[0] + d[1] * d[1] + d[2] * d[2]
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::so3::rng::SplitMix64;

    /// Against brute force on random points: every lookup is within one cell diagonal of the
    /// true nearest distance, and the cell centres get their exact nearest point almost always.
    #[test]
    fn lookup_is_near_the_true_nearest() {
        let mut rng = SplitMix64::new(7);
        let pts: Vec<[f32; 3]> = (0..400)
            .map(|_| {
                // Points on a sphere of radius 10 (a surface, as references are).
                let u = rng.unit_vector();
                [10.0 * u[0] as f32, 10.0 * u[1] as f32, 10.0 * u[2] as f32]
            })
            .collect();
        let g = ClosestGrid::new(&pts, 1.0, 3.0);
        let brute = |q: [f32; 3]| {
            pts.iter()
                .map(|p| dist2(*p, q))
                .fold(f32::INFINITY, f32::min)
                .sqrt()
        };
        let mut exact_centres = 0;
        for c in 0..g.cells() {
            let q = g.centre(c);
            if (dist2(pts[g.nearest[c] as usize], q).sqrt() - brute(q)).abs() < 1e-5 {
                exact_centres += 1;
            }
        }
        assert!(
            exact_centres as f64 >= 0.99 * g.cells() as f64,
            "{exact_centres} of {}",
            g.cells()
        );
        let diag = 3f32.sqrt();
        for _ in 0..2000 {
            let q = [
                rng.uniform(-14.0, 14.0) as f32,
                rng.uniform(-14.0, 14.0) as f32,
                rng.uniform(-14.0, 14.0) as f32,
            ];
            let got = dist2(pts[g.lookup(q)], q).sqrt();
            assert!(
                got <= brute(q) + diag + 1e-4,
                "{q:?}: {got} vs {}",
                brute(q)
            );
        }
        // Far outside: clamped, still a valid index.
        assert!(g.lookup([1e6, -1e6, f32::NAN]) < pts.len());
    }
}
