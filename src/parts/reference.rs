//! A part's reference surface: points with outward unit normals in the part's own frame, the
//! exact mesh when there is one, and the search structures built once for registration and
//! deviations.
//!
//! Conventions: file units; points are f32 offsets from an f64 `origin` (as in [`Cloud`]);
//! the part's frame is the reference files' coordinate frame. Normals point out of the
//! material. Meshes are sampled area-uniformly ([`MESH_SAMPLES`] points per part, seeded);
//! clouds are kept as read (thinned by a voxel grid above [`MAX_POINTS`] points). A cloud
//! without normals gets PCA normals turned away from the part's centroid, which is right for
//! convex regions only: [`Reference::normals_estimated`] says so, and reports carry it.

use std::path::Path;

use nalgebra::Vector3;

use super::lookup::ClosestGrid;
use crate::cloud::Cloud;
use crate::error::{Error, Result};
use crate::geometry::vec3;
use crate::io::mesh::{Mesh, Surface, read_surface};
use crate::spatial::{KdIndex, estimate_normals, estimate_spacing_with, voxel_downsample};

/// Points drawn from a mesh reference (area-uniform).
pub const MESH_SAMPLES: usize = 40_000;
/// Most points kept of a cloud reference; larger ones are thinned by a voxel grid.
pub const MAX_POINTS: usize = 120_000;
/// Seed of the mesh sampling (fixed, so a catalogue is the same bytes on every run).
pub const SAMPLE_SEED: u64 = 0x5EED_0013;

/// A part's reference surface (module docs).
#[derive(Debug, Clone)]
pub struct Reference {
    /// Global coordinate of the local frame's zero, file units.
    pub origin: [f64; 3],
    /// Surface points about `origin`.
    pub points: Vec<[f32; 3]>,
    /// Outward unit normals, one per point.
    pub normals: Vec<[f32; 3]>,
    /// The exact surface, when the reference is a mesh (global coordinates).
    pub mesh: Option<Mesh>,
    /// True when normals were estimated (PCA, turned away from the centroid) rather than read.
    pub normals_estimated: bool,
}

impl Reference {
    /// Reads one or more files of the same part (meshes and/or clouds, all in the part's frame)
    /// into one reference. Meshes are kept exactly only when the part is a single mesh file.
    pub fn read(paths: &[&Path]) -> Result<Reference> {
        let mut globals: Vec<[f64; 3]> = Vec::new();
        let mut normals: Vec<[f32; 3]> = Vec::new();
        let mut missing_normals: Vec<(usize, usize)> = Vec::new();
        let mut meshes = Vec::new();
        for path in paths {
            match read_surface(path)? {
                Surface::Mesh(m) => {
                    let (p, n) = m.sample(MESH_SAMPLES, SAMPLE_SEED);
                    globals.extend(p);
                    normals.extend(n);
                    meshes.push(m);
                }
                Surface::Cloud(c) => {
                    if c.is_empty() {
                        return Err(Error::file(
                            path,
                            "holds no points",
                            "give a reference scan with points",
                        ));
                    }
                    let start = globals.len();
                    globals.extend((0..c.len()).map(|i| c.global(i)));
                    match &c.normals {
                        Some(n) => normals.extend(n.iter().map(|v| unit_or_zero(*v))),
                        None => {
                            normals.extend(std::iter::repeat_n([0.0; 3], c.len()));
                            missing_normals.push((start, globals.len()));
                        }
                    }
                }
            }
        }
        let cloud = Cloud::from_global(&globals);
        let mut r = Reference {
            origin: cloud.origin,
            points: cloud.positions,
            normals,
            mesh: if paths.len() == 1 { meshes.pop() } else { None },
            normals_estimated: !missing_normals.is_empty(),
        };
        if !missing_normals.is_empty() {
            r.estimate_missing_normals(&missing_normals)?;
        }
        r.thin();
        Ok(r)
    }

    /// A reference from points and outward normals in memory (local about `origin`).
    pub fn from_points(origin: [f64; 3], points: Vec<[f32; 3]>, normals: Vec<[f32; 3]>) -> Self {
        Reference {
            origin,
            points,
            normals,
            mesh: None,
            normals_estimated: false,
        }
    }

    fn estimate_missing_normals(&mut self, ranges: &[(usize, usize)]) -> Result<()> {
        let index = KdIndex::new(&self.points)?;
        let c = centroid(&self.points);
        for &(a, b) in ranges {
            let at: Vec<usize> = (a..b).collect();
            let est = estimate_normals(&self.points, &index, &at, 12, None);
            for (k, i) in at.into_iter().enumerate() {
                let mut n = vec3(est[k]);
                if n.dot(&(vec3(self.points[i]) - c)) < 0.0 {
                    n = -n;
                }
                self.normals[i] = [n.x as f32, n.y as f32, n.z as f32];
            }
        }
        Ok(())
    }

    fn thin(&mut self) {
        if self.points.len() <= MAX_POINTS {
            return;
        }
        let (lo, hi) = bounds(&self.points);
        let area = 2.0
            * ((hi - lo).x * (hi - lo).y + (hi - lo).y * (hi - lo).z + (hi - lo).x * (hi - lo).z);
        let mut voxel = (area / MAX_POINTS as f64).sqrt().max(1e-9);
        loop {
            let keep = voxel_downsample(&self.points, voxel as f32);
            if keep.len() <= MAX_POINTS {
                self.points = keep.iter().map(|&i| self.points[i]).collect();
                self.normals = keep.iter().map(|&i| self.normals[i]).collect();
                return;
            }
            voxel *= 1.25;
        }
    }

    /// Number of points.
    pub fn len(&self) -> usize {
        self.points.len()
    }

    /// True when there is no point.
    pub fn is_empty(&self) -> bool {
        self.points.is_empty()
    }

    /// Axis-aligned size (x, y, z extents), file units.
    pub fn size(&self) -> [f64; 3] {
        let (lo, hi) = bounds(&self.points);
        [hi.x - lo.x, hi.y - lo.y, hi.z - lo.z]
    }

    /// Bounding-box diagonal, file units.
    pub fn diagonal(&self) -> f64 {
        Vector3::from(self.size()).norm()
    }

    /// The reference as a [`Cloud`] with normals.
    pub fn to_cloud(&self) -> Cloud {
        let mut c = Cloud::new(self.origin, self.points.clone());
        c.normals = Some(self.normals.clone());
        c
    }
}

fn unit_or_zero(v: [f32; 3]) -> [f32; 3] {
    let n = (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt();
    if n > 0.0 && n.is_finite() {
        [v[0] / n, v[1] / n, v[2] / n]
    } else {
        [0.0; 3]
    }
}

/// Mean of local points (f64).
pub fn centroid(points: &[[f32; 3]]) -> Vector3<f64> {
    let mut s = Vector3::zeros();
    for p in points {
        s += vec3(*p);
    }
    s / points.len().max(1) as f64
}

/// Axis-aligned bounds of local points (f64); zeros when empty.
pub fn bounds(points: &[[f32; 3]]) -> (Vector3<f64>, Vector3<f64>) {
    if points.is_empty() {
        return (Vector3::zeros(), Vector3::zeros());
    }
    let mut lo = Vector3::repeat(f64::INFINITY);
    let mut hi = Vector3::repeat(f64::NEG_INFINITY);
    for p in points {
        let v = vec3(*p);
        lo = lo.inf(&v);
        hi = hi.sup(&v);
    }
    (lo, hi)
}

/// A reference with its search structures, built once and shared by every scan.
pub struct Prepared {
    /// The reference.
    pub reference: Reference,
    /// k-d tree over `reference.points`.
    pub index: KdIndex,
    /// Median nearest-neighbour spacing of the reference points.
    pub spacing: f64,
    /// Coarse points (voxel grid of [`Prepared::coarse_voxel`]) for the global pose search.
    pub coarse: Vec<[f32; 3]>,
    /// k-d tree over `coarse`.
    pub coarse_index: KdIndex,
    /// Voxel size of the coarse points: the diagonal / 40.
    pub coarse_voxel: f64,
    /// Centroid of the reference points (local frame).
    pub centroid: Vector3<f64>,
    /// Bounding-box diagonal.
    pub diagonal: f64,
    /// Principal axes of the reference points (columns), largest spread first.
    pub axes: nalgebra::Matrix3<f64>,
    /// Closest-point lookup grid over `reference.points`, built on first use
    /// ([`Prepared::lookup`]): only the parts a scan is registered against pay for it.
    lookup: std::sync::OnceLock<ClosestGrid>,
}

impl Prepared {
    /// Builds the search structures.
    pub fn new(reference: Reference) -> Result<Prepared> {
        let index = KdIndex::new(&reference.points)?;
        let spacing = estimate_spacing_with(&reference.points, &index).unwrap_or(0.0) as f64;
        let diagonal = reference.diagonal();
        let coarse_voxel = (diagonal / 40.0).max(spacing).max(1e-9);
        let coarse: Vec<[f32; 3]> = voxel_downsample(&reference.points, coarse_voxel as f32)
            .into_iter()
            .map(|i| reference.points[i])
            .collect();
        let coarse_index = KdIndex::new(&coarse)?;
        let centroid = centroid(&reference.points);
        let axes = principal_axes(&reference.points, &centroid);
        Ok(Prepared {
            reference,
            index,
            spacing,
            coarse,
            coarse_index,
            coarse_voxel,
            centroid,
            diagonal,
            axes,
            lookup: std::sync::OnceLock::new(),
        })
    }

    /// The closest-point lookup grid of the reference points (built on first use, then
    /// shared): cells of [`LOOKUP_CELLS_PER_DIAGONAL`]-th of the diagonal (at least the point
    /// spacing), over the bounds widened by a tenth of the diagonal on every side.
    pub fn lookup(&self) -> &ClosestGrid {
        self.lookup.get_or_init(|| {
            let cell = (self.diagonal / LOOKUP_CELLS_PER_DIAGONAL).max(self.spacing);
            ClosestGrid::new(
                &self.reference.points,
                &self.index,
                cell,
                0.1 * self.diagonal,
            )
        })
    }
}

/// Cells of the closest-point lookup grid along the reference's diagonal.
pub const LOOKUP_CELLS_PER_DIAGONAL: f64 = 64.0;

/// Principal axes (eigenvectors of the covariance, columns, largest eigenvalue first).
pub fn principal_axes(points: &[[f32; 3]], c: &Vector3<f64>) -> nalgebra::Matrix3<f64> {
    let mut cov = nalgebra::Matrix3::zeros();
    for p in points {
        let d = vec3(*p) - c;
        cov += d * d.transpose();
    }
    let eig = nalgebra::SymmetricEigen::new(cov / points.len().max(1) as f64);
    let mut order = [0usize, 1, 2];
    order.sort_by(|&a, &b| eig.eigenvalues[b].total_cmp(&eig.eigenvalues[a]));
    nalgebra::Matrix3::from_columns(&order.map(|k| eig.eigenvectors.column(k).into_owned()))
}
