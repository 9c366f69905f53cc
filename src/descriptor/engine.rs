//! [`Engine`]: computes coefficients and invariants for many centres in parallel.

use rayon::prelude::*;

use crate::cloud::Cloud;
use crate::error::{Error, Result};
use crate::so3::sh::num_coeffs;
use crate::spatial::{KdIndex, voxel_downsample};

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
}

/// Scratch space of one worker, reused for every centre of its tasks.
struct Scratch {
    ids: Vec<u32>,
    /// Bitmap for [`sort_distinct`].
    bits: Vec<u64>,
    /// Offsets `q − p` and squared distances of the gathered neighbours (`0 < |q − p| ≤ r_max`),
    /// ascending index (structure of arrays).
    gx: Vec<f32>,
    gy: Vec<f32>,
    gz: Vec<f32>,
    gd2: Vec<f32>,
    /// Number of gathered neighbours (the arrays above may hold padding beyond it).
    gathered: usize,
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
        check_index(points, index)?;
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
        let mut f = self.run(points, index, positions, progress);
        f.indices = Some(indices);
        Ok(f)
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
        check_index(points, index)?;
        Ok(self.run(points, index, centres.to_vec(), progress))
    }

    fn scratch(&self) -> Scratch {
        let nk = num_coeffs(self.recipe.degree());
        let v = || Vec::with_capacity(256);
        Scratch {
            ids: Vec::with_capacity(256),
            bits: Vec::new(),
            gx: v(),
            gy: v(),
            gz: v(),
            gd2: v(),
            gathered: 0,
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
            acc: vec![0.0; self.recipe.shells() * nk],
            c: vec![0.0; self.recipe.shells() * nk],
            c64: Vec::with_capacity(self.recipe.shells() * nk),
        }
    }

    fn run(
        &self,
        points: &[[f32; 3]],
        index: &KdIndex,
        positions: Vec<[f32; 3]>,
        progress: Option<&(dyn Fn(usize) + Sync)>,
    ) -> Features {
        let rows = positions.len();
        let ns = self.recipe.scales();
        let nc = self.columns.len();
        let kc = self.recipe.coefficients_per_scale();
        let keep = self.recipe.keep_coefficients();
        let mut values = vec![0.0f32; rows * nc];
        let mut counts = vec![0u32; rows * ns];
        let mut flag_bits = vec![0u8; rows * ns];
        let mut coeffs = if keep {
            vec![0.0f32; rows * ns * kc]
        } else {
            Vec::new()
        };
        {
            // Split every output into per-chunk slices, then hand the chunks to the pool.
            let mut v_it = values.chunks_mut(CHUNK * nc.max(1));
            let mut c_it = counts.chunks_mut(CHUNK * ns);
            let mut f_it = flag_bits.chunks_mut(CHUNK * ns);
            let mut k_it = coeffs.chunks_mut(CHUNK * ns * kc);
            let mut tasks = Vec::with_capacity(rows.div_ceil(CHUNK));
            for p in positions.chunks(CHUNK) {
                let v = if nc > 0 {
                    v_it.next().unwrap_or_default()
                } else {
                    &mut [][..]
                };
                let c = c_it.next().expect("one count chunk per centre chunk");
                let f = f_it.next().expect("one flag chunk per centre chunk");
                let k = if keep { k_it.next() } else { None };
                tasks.push((p, v, c, f, k));
            }
            tasks.into_par_iter().for_each_init(
                || self.scratch(),
                |s, (p, v, c, f, mut k)| {
                    for (i, centre) in p.iter().enumerate() {
                        let kc_row = k
                            .as_deref_mut()
                            .map(|k| &mut k[i * ns * kc..(i + 1) * ns * kc]);
                        self.centre(
                            points,
                            index,
                            *centre,
                            s,
                            &mut v[i * nc..(i + 1) * nc],
                            &mut c[i * ns..(i + 1) * ns],
                            &mut f[i * ns..(i + 1) * ns],
                            kc_row,
                        );
                    }
                    if let Some(cb) = progress {
                        cb(p.len());
                    }
                },
            );
        }
        Features {
            recipe: self.recipe.clone(),
            positions,
            indices: None,
            columns: self.columns.clone(),
            values,
            counts,
            flags: flag_bits,
            coefficients: keep.then_some(coeffs),
        }
    }

    /// One centre, all scales.
    #[allow(clippy::too_many_arguments)]
    fn centre(
        &self,
        points: &[[f32; 3]],
        index: &KdIndex,
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
        let ids = &mut s.ids;
        index.for_each_within(p, r_max * QUERY_SLACK, |i, _| ids.push(i as u32));
        sort_distinct(&mut s.ids, &mut s.bits);
        // Offsets of the neighbours with 0 < |d| ≤ r_max, ascending index; coincident points
        // are only counted.
        let r_max2 = r_max * r_max;
        // Branch-free compaction: every hit is written at `m`, which advances only for a kept
        // one; the buffers only grow (values past the kept ones are never read).
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
        let mut m = 0;
        let mut zeros = 0u32;
        for &i in &s.ids {
            let q = points[i as usize];
            let d = [q[0] - p[0], q[1] - p[1], q[2] - p[2]];
            let d2 = d[0] * d[0] + d[1] * d[1] + d[2] * d[2];
            gx[m] = d[0];
            gy[m] = d[1];
            gz[m] = d[2];
            gd2[m] = d2;
            zeros += (d2 == 0.0) as u32;
            m += (d2 > 0.0 && d2 <= r_max2) as usize;
        }
        s.zeros = zeros;
        s.gathered = m;
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
        // Unweighted first and second moments of the offsets, for the shape flags.
        let mut m1 = [0.0f32; 3];
        let mut m2 = [0.0f32; 6];
        for ((&x, &y), &z) in dx[..count].iter().zip(&dy[..count]).zip(&dz[..count]) {
            let d = [x, y, z];
            for k in 0..3 {
                m1[k] += d[k];
            }
            m2[0] += d[0] * d[0];
            m2[1] += d[0] * d[1];
            m2[2] += d[0] * d[2];
            m2[3] += d[1] * d[1];
            m2[4] += d[1] * d[2];
            m2[5] += d[2] * d[2];
        }
        // Directions, their harmonics (so3) and radii, eight neighbours at a time.
        kernel::directions(
            self.kernel,
            l_max,
            1.0 / r,
            self.fade,
            dx,
            dy,
            dz,
            d2,
            &mut s.rho,
            &mut s.y,
        );
        // Padding lanes sit on the sphere: f_c(1) = 0 exactly, so their weights are 0 and their
        // cutoffs add exact zeros to the sum.
        s.rho[count..].fill(1.0);
        let wsum = kernel::weights(self.kernel, &s.rho, n_sh, &mut s.fc, &mut s.step, &mut s.w);
        kernel::project(self.kernel, &s.w, &s.y, jp, n_sh, nk, &mut s.acc);
        let w = 1.0 + wsum + coincident as f32;
        for (o, a) in s.c.iter_mut().zip(&s.acc) {
            *o = a / w;
        }
        fl |= shape_flags(count as u32, m1, m2);
        (count as u32, fl)
    }
}

/// Sorts distinct point indices (each point appears once in a query's hits) ascending. When the
/// hits span few indices, as they do in clouds stored in scan or grid order, a bitmap over their
/// range is set and read back in order (no comparison, no branch per pair); otherwise a
/// comparison sort runs. Either way the result is the ascending order.
fn sort_distinct(ids: &mut [u32], bits: &mut Vec<u64>) {
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
    if words > 2 * n + 16 {
        ids.sort_unstable();
        return;
    }
    bits.clear();
    bits.resize(words, 0);
    for &i in ids.iter() {
        let o = i - lo;
        bits[(o >> 6) as usize] |= 1u64 << (o & 63);
    }
    let mut k = 0;
    for (w, &b) in bits.iter().enumerate() {
        let base = lo + ((w as u32) << 6);
        let mut b = b;
        while b != 0 {
            ids[k] = base + b.trailing_zeros();
            k += 1;
            b &= b - 1;
        }
    }
    debug_assert_eq!(k, n, "indices must be distinct");
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
        let mut bits = Vec::new();
        let mut s = 0x2545_f491_4f6c_dd1du64;
        for (n, span) in [
            (0usize, 1u32),
            (1, 1),
            (2, 2),
            (70, 2000),
            (60, 64),
            (70, 1 << 30),
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
            sort_distinct(&mut ids, &mut bits);
            assert_eq!(ids, want, "n {n} span {span}");
        }
    }
}
