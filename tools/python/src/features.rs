//! `features`: descriptors of an in-memory cloud, as the CLI's `features` writes them.

use equiscan::Cloud;
use equiscan::descriptor::output::{Format, chunk_rows, column_names, push_row};
use equiscan::descriptor::{Centres, Engine, Invariants, Recipe, suggested_radius};
use equiscan::spatial::{KdIndex, estimate_spacing_with, voxel_downsample};
use equiscan::{Error, Result};
use numpy::PyArray2;
use pyo3::prelude::*;

use crate::arrays::{cloud_from, matrix};
use crate::errors::detached;

/// The recipe of a call (the CLI's options, same defaults).
pub(crate) struct Options {
    pub radii: Option<Vec<f32>>,
    pub degree: usize,
    pub shells: usize,
    pub version: u32,
    pub max_neighbours: Option<usize>,
    pub invariants: String,
    pub keep_coefficients: bool,
    pub voxel: Option<f32>,
}

impl Options {
    /// The recipe with `radii`, checked.
    pub fn recipe(&self, radii: Vec<f32>) -> Result<Recipe> {
        Recipe::builder()
            .radii(radii)
            .version(self.version)
            .degree(self.degree)
            .shells(self.shells)
            .max_neighbours(self.max_neighbours)
            .invariants(Invariants::parse(&self.invariants)?)
            .keep_coefficients(self.keep_coefficients)
            .build()
    }
}

/// The rows and column names of an NPY feature file of `cloud`: `x_local y_local z_local`,
/// per scale count and flags, invariants, coefficients; one row per centre (every point, or
/// one per voxel).
fn compute(cloud: &Cloud, o: &Options) -> Result<(Vec<f32>, Vec<String>)> {
    // The recipe is checked before the index is built (a placeholder radius when none given).
    o.recipe(o.radii.clone().unwrap_or_else(|| vec![1.0]))?;
    if let Some(v) = o.voxel
        && !(v.is_finite() && v > 0.0)
    {
        return Err(Error::invalid(
            format!("voxel={v} is not a size greater than 0"),
            "give a voxel size such as 0.05 (file units)",
        ));
    }
    cloud.validate()?;
    let index = KdIndex::new(&cloud.positions)?;
    let radii = match &o.radii {
        Some(r) => r.clone(),
        None => {
            let spacing = estimate_spacing_with(&cloud.positions, &index).ok_or_else(|| {
                Error::invalid(
                    "the point spacing cannot be measured (fewer than two distinct points)",
                    "give radius=",
                )
            })?;
            vec![suggested_radius(spacing)]
        }
    };
    let recipe = o.recipe(radii)?;
    let names = column_names(&recipe, Format::Npy);
    let centres: Vec<usize> = match o.voxel {
        Some(v) => voxel_downsample(&cloud.positions, v),
        None => (0..cloud.len()).collect(),
    };
    let engine = Engine::new(recipe);
    let prepared = engine.prepare(&cloud.positions, &index)?;
    let mut out = Vec::with_capacity(centres.len() * names.len());
    for chunk in centres.chunks(chunk_rows(names.len())) {
        let f = engine.compute_prepared(&prepared, &Centres::Indices(chunk.to_vec()), None)?;
        for i in 0..f.len() {
            push_row(&f, i, true, &mut out);
        }
    }
    Ok((out, names))
}

/// See `equiscan.features` (python/equiscan/__init__.py).
#[pyfunction]
#[pyo3(signature = (points, *, origin=None, radius=None, degree=equiscan::descriptor::DEFAULT_DEGREE, shells=equiscan::descriptor::DEFAULT_SHELLS,
    descriptor_version=equiscan::descriptor::RECIPE_VERSION, max_neighbours=None, invariants="norms,power".to_string(),
    keep_coefficients=false, voxel=None, threads=None))]
#[allow(clippy::too_many_arguments)]
pub fn features<'py>(
    py: Python<'py>,
    points: &Bound<'py, PyAny>,
    origin: Option<[f64; 3]>,
    radius: Option<Vec<f32>>,
    degree: usize,
    shells: usize,
    descriptor_version: u32,
    max_neighbours: Option<usize>,
    invariants: String,
    keep_coefficients: bool,
    voxel: Option<f32>,
    threads: Option<usize>,
) -> PyResult<(Bound<'py, PyArray2<f32>>, Vec<String>)> {
    let cloud = cloud_from(py, "points", points, origin)?;
    let o = Options {
        radii: radius,
        degree,
        shells,
        version: descriptor_version,
        max_neighbours,
        invariants,
        keep_coefficients,
        voxel,
    };
    let (values, names) = detached(py, threads, || compute(&cloud, &o))?;
    let cols = names.len();
    Ok((matrix(py, values, cols), names))
}
