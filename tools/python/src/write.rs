//! `write`: a cloud from numpy arrays to a LAS, LAZ or PLY file.

use std::path::PathBuf;

use equiscan::io::{write_las, write_ply};
use equiscan::{Error, Result};
use numpy::{PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;

use crate::arrays::cloud_from;
use crate::errors::detached;

fn rows3<T: numpy::Element + Copy>(a: Option<PyReadonlyArray2<'_, T>>) -> Option<Vec<[T; 3]>> {
    a.map(|a| {
        a.as_array()
            .rows()
            .into_iter()
            .map(|r| [r[0], r[1], r[2]])
            .collect()
    })
}

fn values<T: numpy::Element + Copy>(a: Option<PyReadonlyArray1<'_, T>>) -> Option<Vec<T>> {
    a.map(|a| a.as_array().iter().copied().collect())
}

/// See `equiscan.write` (python/equiscan/__init__.py): the attributes arrive with the
/// dtypes and shapes the Python side has already cast them to.
#[pyfunction]
#[pyo3(signature = (path, points, *, origin=None, intensity=None, color=None, normals=None,
    classification=None, return_number=None, gps_time=None))]
#[allow(clippy::too_many_arguments)]
pub fn write(
    py: Python<'_>,
    path: PathBuf,
    points: &Bound<'_, PyAny>,
    origin: Option<[f64; 3]>,
    intensity: Option<PyReadonlyArray1<'_, f32>>,
    color: Option<PyReadonlyArray2<'_, u16>>,
    normals: Option<PyReadonlyArray2<'_, f32>>,
    classification: Option<PyReadonlyArray1<'_, u8>>,
    return_number: Option<PyReadonlyArray1<'_, u8>>,
    gps_time: Option<PyReadonlyArray1<'_, f64>>,
) -> PyResult<()> {
    let mut cloud = cloud_from(py, "points", points, origin)?;
    cloud.intensity = values(intensity);
    cloud.color = rows3(color);
    cloud.normals = rows3(normals);
    cloud.classification = values(classification);
    cloud.return_number = values(return_number);
    cloud.gps_time = values(gps_time);
    detached(py, None, move || -> Result<()> {
        cloud.validate().map_err(|e| e.about(&path))?;
        let ext = path
            .extension()
            .and_then(|e| e.to_str())
            .map(str::to_ascii_lowercase);
        match ext.as_deref() {
            Some("las" | "laz") => write_las(&path, &cloud, &[]),
            Some("ply") => write_ply(&path, &cloud, &[]),
            _ => Err(Error::invalid(
                "cannot tell the format from the name",
                "end the name in .las, .laz or .ply",
            )
            .about(&path)),
        }
    })
}
