//! [`PreparedScan`]: everything registration computes for one cloud, once, reusable against any
//! number of other scans prepared the same way, and storable with serde (a catalogue keeps them).
//!
//! A prepared scan holds, in the cloud's own f32 local frame (about `origin`, f64 file
//! coordinates): the keypoints (a voxel grid of edge `voxel` over the fine points), their unit
//! normals (oriented away from the keypoints' centroid), the descriptor rows at the keypoints
//! (and, for the harmonic descriptors, their coefficient blocks), the fine points (a grid of
//! edge `fine_voxel`) with their normals for the final ICP, and the full-resolution positions for
//! the RMSE. Lengths are in file units. The k-d trees are not stored: the keypoint and fine
//! trees are rebuilt when a scan is prepared or loaded, the full-resolution tree the first time
//! the scan is a TARGET.
//!
//! Two prepared scans can be aligned ([`super::align_prepared`]) when they were prepared with the
//! same method, voxel size, support radius and descriptor recipe; [`super::align_pair`] prepares
//! both clouds at the larger of their automatic voxel sizes ([`pair_voxel`]).

use std::sync::OnceLock;

use serde::{Deserialize, Serialize};

use super::equivariant::{self, EquivariantRecipe};
use super::fpfh::{FPFH_LEN, fpfh};
use super::pipeline::{AlignParams, Method};
use super::prep::{
    choose_voxel, figure, fine_normal_neighbours, prepare, prepare_with, spacing_of,
};
use super::tuning::Tuning;
use crate::cloud::Cloud;
use crate::error::{Error, Kind, Result};
use crate::spatial::{KdIndex, estimate_spacing_with, voxel_downsample};

/// Version of the stored form of a [`PreparedScan`]; a scan stored with another version is
/// refused on load (prepare it again). 2: the fine normals are fitted to more neighbours
/// ([`super::prep::fine_normal_neighbours`]), so a scan stored by version 1 would register
/// differently from the same cloud prepared now.
pub const PREPARED_SCAN_VERSION: u32 = 2;

/// Descriptor rows at the keypoints of one cloud.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Descriptors {
    /// Values per row.
    pub dim: usize,
    /// Matching rows, `keypoints × dim`, row-major: FPFH histograms, or the signed square root
    /// of the harmonic power spectrum.
    pub rows: Vec<f32>,
    /// Values per coefficient block (harmonic descriptors: scales × shells × (L+1)²; 0 for FPFH).
    pub block: usize,
    /// Coefficient blocks, `keypoints × block`, layout `[scale][n][l² + l + m]` (scales act as
    /// extra shells for the rotation search); empty for FPFH.
    pub coefficients: Vec<f32>,
}

/// The descriptor settings a scan was prepared with; two scans are comparable when these agree.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DescriptorSettings {
    /// Feature and hypothesis method.
    pub method: Method,
    /// Support radius of the descriptors (file units).
    pub radius: f64,
    /// Harmonic descriptors: radii (largest first), degree, shells and descriptor version;
    /// `None` for FPFH.
    pub recipe: Option<StoredRecipe>,
}

/// The harmonic descriptor recipe of a prepared scan.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StoredRecipe {
    /// Support radii (file units), largest first.
    pub radii: Vec<f32>,
    /// Maximum degree `L`.
    pub degree: usize,
    /// Radial shells `N`.
    pub shells: usize,
    /// Descriptor version (design, "the descriptor, exactly").
    pub version: u32,
}

impl StoredRecipe {
    fn equivariant(&self) -> EquivariantRecipe {
        EquivariantRecipe {
            radii: self.radii.clone(),
            degree: self.degree,
            shells: self.shells,
            version: self.version,
        }
    }
}

/// One cloud prepared for registration (see the module documentation for the frames and units).
/// The fields are read through methods, so that the trees built over them stay valid.
#[derive(Serialize, Deserialize)]
#[serde(try_from = "StoredScan")]
pub struct PreparedScan {
    /// [`PREPARED_SCAN_VERSION`] when stored.
    pub(crate) format_version: u32,
    /// Display name used in messages and reports: the file name.
    pub(crate) name: String,
    /// f64 origin of the local frame, file coordinates.
    pub(crate) origin: [f64; 3],
    /// Keypoint voxel size (file units).
    pub(crate) voxel: f64,
    /// Edge of the fine grid (file units).
    pub(crate) fine_voxel: f64,
    /// Method, support radius and recipe of the descriptors.
    pub(crate) settings: DescriptorSettings,
    /// Keypoints, local frame.
    pub(crate) keypoints: Vec<[f32; 3]>,
    /// Unit normals at the keypoints, oriented away from the keypoints' centroid.
    pub(crate) normals: Vec<[f32; 3]>,
    /// Descriptors at the keypoints, in keypoint order.
    pub(crate) descriptors: Descriptors,
    /// Fine points (final ICP), local frame.
    pub(crate) fine_points: Vec<[f32; 3]>,
    /// Unit normals at the fine points.
    pub(crate) fine_normals: Vec<[f32; 3]>,
    /// Every point of the cloud, local frame (the RMSE is measured on these).
    pub(crate) points: Vec<[f32; 3]>,
    #[serde(skip)]
    keypoint_index: KdIndex,
    #[serde(skip)]
    fine_index: KdIndex,
    #[serde(skip)]
    full: OnceLock<std::result::Result<FullIndex, Error>>,
    #[serde(skip)]
    smoothed: OnceLock<Option<SmoothedFine>>,
    #[serde(skip)]
    sides: OnceLock<crate::spatial::Oriented>,
}

/// The fine points moved onto their neighbourhoods' least-squares planes
/// ([`crate::spatial::project_to_local_planes`], the normals' neighbourhood size), with a tree
/// over them and the keypoints smoothed alike (on the fine points' planes): the points of the
/// fine fit and of its restart test when [`Tuning::fine_smoothing`] is on.
pub(crate) struct SmoothedFine {
    pub(crate) points: Vec<[f32; 3]>,
    pub(crate) index: KdIndex,
    pub(crate) keypoints: Vec<[f32; 3]>,
}

/// Neighbours per keypoint in the graph over which the keypoint normals are oriented
/// ([`PreparedScan::sides`]).
pub(crate) const SIDE_NEIGHBOURS: usize = 10;

/// The k-d tree over every point and the measured point spacing, built when first needed.
pub(crate) struct FullIndex {
    pub(crate) index: KdIndex,
    pub(crate) spacing: Option<f32>,
}

/// The serialised fields of a [`PreparedScan`], checked before the trees are rebuilt.
#[derive(Deserialize)]
struct StoredScan {
    format_version: u32,
    name: String,
    origin: [f64; 3],
    voxel: f64,
    fine_voxel: f64,
    settings: DescriptorSettings,
    keypoints: Vec<[f32; 3]>,
    normals: Vec<[f32; 3]>,
    descriptors: Descriptors,
    fine_points: Vec<[f32; 3]>,
    fine_normals: Vec<[f32; 3]>,
    points: Vec<[f32; 3]>,
}

/// The geometry of a prepared scan, before its descriptors.
pub(crate) struct Geometry<'a> {
    name: &'a str,
    cloud: &'a Cloud,
    voxel: f64,
    fine_voxel: f64,
    radius: f64,
    keypoints: super::prep::Prepared,
    fine: super::prep::Prepared,
}

/// The voxel size chosen automatically for one cloud from its spacing and size
/// ([`choose_voxel`]); errors name the cloud by `name`.
pub fn scan_voxel(name: &str, cloud: &Cloud) -> Result<f64> {
    let spacing = spacing_of(name, &cloud.positions)?;
    Ok(choose_voxel(&cloud.positions, spacing))
}

/// The voxel size of a pair: the one given in `params`, checked, or the larger of the two
/// clouds' automatic voxel sizes ([`scan_voxel`]).
pub fn pair_voxel(
    params: &AlignParams,
    source: (&str, &Cloud),
    target: (&str, &Cloud),
) -> Result<f64> {
    if let Some(v) = params.voxel {
        return checked_voxel(v);
    }
    let (vs, vt) = rayon::join(
        || scan_voxel(source.0, source.1),
        || scan_voxel(target.0, target.1),
    );
    Ok(vs?.max(vt?))
}

/// `v` when it is a usable voxel size (positive, finite), else the error that says so.
pub(crate) fn checked_voxel(v: f64) -> Result<f64> {
    if v > 0.0 && v.is_finite() {
        Ok(v)
    } else {
        Err(Error::invalid(
            format!("voxel size {} is not a positive number", figure(v)),
            "give a voxel size in file units, e.g. 0.05",
        ))
    }
}

/// The support radius for `voxel`: the one in `params`, or [`Method::radius_in_voxels`] voxel
/// sizes; it must exceed the voxel size.
pub fn support_radius(params: &AlignParams, voxel: f64) -> Result<f64> {
    let radius = params
        .radius
        .unwrap_or(params.method.radius_in_voxels() * voxel);
    if radius.is_nan() || radius <= voxel {
        return Err(Error::invalid(
            format!(
                "support radius {} is not larger than the voxel size {}",
                figure(radius),
                figure(voxel)
            ),
            "give a support radius of several voxel sizes",
        ));
    }
    Ok(radius)
}

/// The support radii of the harmonic descriptors for support radius `radius`, largest first:
/// `radius`, [`Tuning::inner_radius_share`] of it and, when set,
/// [`Tuning::third_radius_share`] of it.
fn descriptor_radii(tu: &Tuning, radius: f64) -> Vec<f32> {
    let mut radii = vec![radius as f32, (tu.inner_radius_share * radius) as f32];
    if tu.third_radius_share > 0.0 {
        radii.push((tu.third_radius_share * radius) as f32);
    }
    radii
}

impl<'a> Geometry<'a> {
    /// Keypoints and fine points with normals and trees: one pass over the full cloud gives the
    /// fine points (half the voxel size by default), the keypoints are taken from those.
    pub(crate) fn of(
        name: &'a str,
        cloud: &'a Cloud,
        params: &AlignParams,
        voxel: f64,
    ) -> Result<Geometry<'a>> {
        let voxel = checked_voxel(voxel)?;
        let radius = support_radius(params, voxel)?;
        let fine_voxel = params.tuning.fine_voxels * voxel;
        let fine: Vec<[f32; 3]> = voxel_downsample(&cloud.positions, fine_voxel as f32)
            .into_iter()
            .map(|i| cloud.positions[i])
            .collect();
        let keypoints = prepare(name, &fine, voxel)?;
        let neighbours = fine_normal_neighbours(fine.len(), keypoints.points.len());
        let fine = prepare_with(name, &fine, fine_voxel, neighbours)?;
        Ok(Geometry {
            name,
            cloud,
            voxel,
            fine_voxel,
            radius,
            keypoints,
            fine,
        })
    }

    /// The descriptors at the keypoints, and the finished scan.
    pub(crate) fn describe(self, params: &AlignParams) -> Result<PreparedScan> {
        let tu = &params.tuning;
        let kp = &self.keypoints;
        let (descriptors, recipe) = match params.method {
            Method::Equivariant => {
                let recipe = StoredRecipe {
                    radii: descriptor_radii(tu, self.radius),
                    degree: tu.descriptor_degree,
                    shells: tu.descriptor_shells,
                    version: params.descriptor_version,
                };
                let d = equivariant::describe(&kp.points, &kp.index, &recipe.equivariant())?;
                (d, Some(recipe))
            }
            Method::Fpfh => (
                Descriptors {
                    dim: FPFH_LEN,
                    rows: fpfh(&kp.points, &kp.normals, &kp.index, self.radius as f32),
                    block: 0,
                    coefficients: Vec::new(),
                },
                None,
            ),
        };
        let super::prep::Prepared {
            points: keypoints,
            normals,
            index: keypoint_index,
        } = self.keypoints;
        let super::prep::Prepared {
            points: fine_points,
            normals: fine_normals,
            index: fine_index,
        } = self.fine;
        Ok(PreparedScan {
            format_version: PREPARED_SCAN_VERSION,
            name: self.name.to_string(),
            origin: self.cloud.origin,
            voxel: self.voxel,
            fine_voxel: self.fine_voxel,
            settings: DescriptorSettings {
                method: params.method,
                radius: self.radius,
                recipe,
            },
            keypoints,
            normals,
            descriptors,
            fine_points,
            fine_normals,
            points: self.cloud.positions.clone(),
            keypoint_index,
            fine_index,
            full: OnceLock::new(),
            smoothed: OnceLock::new(),
            sides: OnceLock::new(),
        })
    }
}

impl PreparedScan {
    /// Prepares `cloud` (named `name`, the file name, in messages) for registration at keypoint
    /// voxel size `voxel` with the method, support radius (default [`Method::radius_in_voxels`]
    /// voxel sizes), descriptor version and tuning of `params`. To align two scans, prepare both
    /// at the same voxel size, e.g. [`pair_voxel`] or [`scan_voxel`] of the coarser one.
    pub fn prepare(
        name: &str,
        cloud: &Cloud,
        params: &AlignParams,
        voxel: f64,
    ) -> Result<PreparedScan> {
        Geometry::of(name, cloud, params, voxel)?.describe(params)
    }

    /// Version of the stored form ([`PREPARED_SCAN_VERSION`]).
    pub fn format_version(&self) -> u32 {
        self.format_version
    }

    /// Display name used in messages and reports: the file name.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// f64 origin of the local frame, file coordinates.
    pub fn origin(&self) -> [f64; 3] {
        self.origin
    }

    /// Keypoint voxel size (file units).
    pub fn voxel(&self) -> f64 {
        self.voxel
    }

    /// Edge of the fine grid (file units).
    pub fn fine_voxel(&self) -> f64 {
        self.fine_voxel
    }

    /// Method, support radius and recipe of the descriptors.
    pub fn settings(&self) -> &DescriptorSettings {
        &self.settings
    }

    /// Keypoints, local frame.
    pub fn keypoints(&self) -> &[[f32; 3]] {
        &self.keypoints
    }

    /// Unit normals at the keypoints, oriented away from the keypoints' centroid.
    pub fn normals(&self) -> &[[f32; 3]] {
        &self.normals
    }

    /// Descriptors at the keypoints, in keypoint order.
    pub fn descriptors(&self) -> &Descriptors {
        &self.descriptors
    }

    /// Fine points (final ICP), local frame.
    pub fn fine_points(&self) -> &[[f32; 3]] {
        &self.fine_points
    }

    /// Unit normals at the fine points.
    pub fn fine_normals(&self) -> &[[f32; 3]] {
        &self.fine_normals
    }

    /// Every point of the cloud, local frame (the RMSE is measured on these).
    pub fn points(&self) -> &[[f32; 3]] {
        &self.points
    }

    /// The k-d tree over the keypoints.
    pub fn keypoint_index(&self) -> &KdIndex {
        &self.keypoint_index
    }

    /// The k-d tree over the fine points.
    pub fn fine_index(&self) -> &KdIndex {
        &self.fine_index
    }

    /// The fine points smoothed ([`SmoothedFine`]), built on first use with that call's
    /// `tuning` (later calls get the same points); `None` when no tree can be built over them.
    pub(crate) fn smoothed_fine(&self, tuning: &Tuning) -> Option<&SmoothedFine> {
        self.smoothed
            .get_or_init(|| {
                let k = match tuning.fine_smoothing_neighbours {
                    0 => fine_normal_neighbours(self.fine_points.len(), self.keypoints.len()),
                    k => k,
                };
                let (fine, index) = (&self.fine_points, &self.fine_index);
                let smooth = |at| {
                    crate::spatial::project_to_local_planes(
                        at,
                        fine,
                        index,
                        k,
                        tuning.fine_smoothing_spread,
                    )
                };
                let points = smooth(fine);
                let keypoints = smooth(&self.keypoints);
                let index = KdIndex::new(&points).ok()?;
                Some(SmoothedFine {
                    points,
                    index,
                    keypoints,
                })
            })
            .as_ref()
    }

    /// The keypoint normals oriented consistently over the keypoints' neighbour graph
    /// ([`crate::spatial::orient_consistently`], [`SIDE_NEIGHBOURS`] neighbours), built on
    /// first use: which side of its surface the scan saw, up to one flip per component.
    pub(crate) fn sides(&self) -> &crate::spatial::Oriented {
        self.sides.get_or_init(|| {
            crate::spatial::orient_consistently(
                &self.keypoints,
                &self.normals,
                &self.keypoint_index,
                SIDE_NEIGHBOURS,
            )
        })
    }

    /// The k-d tree over every point and the measured spacing, built on first use.
    pub(crate) fn full(&self) -> Result<&FullIndex> {
        self.full
            .get_or_init(|| {
                let index = KdIndex::new(&self.points)?;
                let spacing = estimate_spacing_with(&self.points, &index);
                Ok(FullIndex { index, spacing })
            })
            .as_ref()
            .map_err(Clone::clone)
    }

    /// Checks that `other` was prepared the same way as `self` and that `params` asks for what
    /// both were prepared with; the error names the files and the setting that differs.
    pub fn check_comparable(&self, other: &PreparedScan, params: &AlignParams) -> Result<()> {
        let (a, b) = (&self.name, &other.name);
        let redo = "prepare both scans with the same settings";
        if self.settings.method != other.settings.method || self.settings.method != params.method {
            return Err(Error::invalid(
                format!(
                    "{a} was prepared for {}, {b} for {}, and the run asks for {}",
                    self.settings.method.name(),
                    other.settings.method.name(),
                    params.method.name()
                ),
                redo,
            ));
        }
        let voxel_asked = params.voxel.is_some_and(|v| v != self.voxel);
        if self.voxel != other.voxel || voxel_asked {
            return Err(Error::invalid(
                format!(
                    "{a} was prepared at voxel size {}, {b} at {}",
                    figure(self.voxel),
                    figure(other.voxel)
                ),
                "prepare both scans at the same voxel size (the one the run asks for)",
            ));
        }
        let radius_asked = params.radius.is_some_and(|r| r != self.settings.radius);
        let fine = params.tuning.fine_voxels * self.voxel;
        if self.settings != other.settings
            || radius_asked
            || self.fine_voxel != other.fine_voxel
            || self.fine_voxel != fine
        {
            return Err(Error::invalid(
                format!(
                    "{a} and {b} were prepared with different descriptor settings (support radius {} and {}) or fine grids",
                    figure(self.settings.radius),
                    figure(other.settings.radius)
                ),
                redo,
            ));
        }
        if let Some(r) = &self.settings.recipe {
            let tu = &params.tuning;
            let radii = descriptor_radii(tu, self.settings.radius);
            if r.version != params.descriptor_version
                || r.degree != tu.descriptor_degree
                || r.shells != tu.descriptor_shells
                || r.radii != radii
            {
                return Err(Error::invalid(
                    format!(
                        "{a} and {b} were prepared with descriptor version {}, degree {}, {} shells, {} support radii; the run asks for version {}, degree {}, {} shells, {} support radii",
                        r.version,
                        r.degree,
                        r.shells,
                        r.radii.len(),
                        params.descriptor_version,
                        tu.descriptor_degree,
                        tu.descriptor_shells,
                        radii.len()
                    ),
                    redo,
                ));
            }
        }
        Ok(())
    }
}

impl std::fmt::Debug for PreparedScan {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("PreparedScan")
            .field("name", &self.name)
            .field("voxel", &self.voxel)
            .field("settings", &self.settings)
            .field("keypoints", &self.keypoints.len())
            .field("fine_points", &self.fine_points.len())
            .field("points", &self.points.len())
            .finish_non_exhaustive()
    }
}

impl TryFrom<StoredScan> for PreparedScan {
    type Error = Error;

    /// Checks a stored scan (version, counts, finite values) and rebuilds its trees.
    fn try_from(s: StoredScan) -> Result<PreparedScan> {
        let bad = |what: String| {
            Error::invalid(
                format!("{}: stored prepared scan {what}", s.name),
                "prepare the scan again from its file",
            )
            .with_kind(Kind::Input)
        };
        if s.format_version != PREPARED_SCAN_VERSION {
            return Err(bad(format!(
                "has version {}, this program reads version {PREPARED_SCAN_VERSION}",
                s.format_version
            )));
        }
        let finite = |p: &[[f32; 3]]| p.iter().flatten().all(|v| v.is_finite());
        let d = &s.descriptors;
        let n = s.keypoints.len();
        let recipe_ok = match (&s.settings.method, &s.settings.recipe) {
            (Method::Equivariant, Some(r)) => !r.radii.is_empty() && d.block > 0,
            (Method::Fpfh, None) => d.block == 0 && d.dim == FPFH_LEN,
            _ => false,
        };
        let ok = n >= 10
            && s.normals.len() == n
            && d.dim > 0
            && d.rows.len() == n * d.dim
            && d.coefficients.len() == n * d.block
            && s.fine_normals.len() == s.fine_points.len()
            && !s.fine_points.is_empty()
            && !s.points.is_empty()
            && recipe_ok
            && s.voxel > 0.0
            && s.voxel.is_finite()
            && s.fine_voxel > 0.0
            && s.fine_voxel.is_finite()
            && s.settings.radius > s.voxel
            && s.settings.radius.is_finite()
            && s.origin.iter().all(|v| v.is_finite())
            && [
                &s.keypoints,
                &s.normals,
                &s.fine_points,
                &s.fine_normals,
                &s.points,
            ]
            .iter()
            .all(|p| finite(p))
            && d.rows.iter().chain(&d.coefficients).all(|v| v.is_finite());
        if !ok {
            return Err(bad(
                "is inconsistent (counts, settings or non-finite values)".to_string(),
            ));
        }
        let keypoint_index = KdIndex::new(&s.keypoints)?;
        let fine_index = KdIndex::new(&s.fine_points)?;
        Ok(PreparedScan {
            format_version: s.format_version,
            name: s.name,
            origin: s.origin,
            voxel: s.voxel,
            fine_voxel: s.fine_voxel,
            settings: s.settings,
            keypoints: s.keypoints,
            normals: s.normals,
            descriptors: s.descriptors,
            fine_points: s.fine_points,
            fine_normals: s.fine_normals,
            points: s.points,
            keypoint_index,
            fine_index,
            full: OnceLock::new(),
            smoothed: OnceLock::new(),
            sides: OnceLock::new(),
        })
    }
}
