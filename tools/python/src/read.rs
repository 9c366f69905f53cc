//! `read`: a point-cloud file as numpy arrays.

use std::path::PathBuf;

use pyo3::prelude::*;
use pyo3::types::PyDict;

use crate::arrays::{matrix, vector};
use crate::errors::detached;

/// See `equiscan.read` (python/equiscan/__init__.py). Returns a dict: `points` (n × 3
/// float64, file coordinates), `local` (n × 3 float32 offsets from `origin`), `origin`
/// (3 floats), `attributes` (name → array, only those the file has) and `info_json` (the
/// header summary as JSON text, the fields of `equiscan info --json`).
#[pyfunction]
pub fn read<'py>(py: Python<'py>, path: PathBuf) -> PyResult<Bound<'py, PyDict>> {
    let (cloud, info) = detached(py, None, || equiscan::io::read_cloud(&path))?;
    let info_json = serde_json::to_string(&info).map_err(|e| {
        crate::errors::to_py(
            py,
            equiscan::Error::internal(format!("file information: {e}"), "report this as a bug"),
        )
    })?;
    let n = cloud.len();
    let global: Vec<f64> = (0..n).flat_map(|i| cloud.global(i)).collect();
    let local: Vec<f32> = cloud.positions.iter().flatten().copied().collect();
    let out = PyDict::new(py);
    out.set_item("points", matrix(py, global, 3))?;
    out.set_item("local", matrix(py, local, 3))?;
    out.set_item("origin", cloud.origin.to_vec())?;
    let attributes = PyDict::new(py);
    if let Some(v) = cloud.intensity {
        attributes.set_item("intensity", vector(py, v))?;
    }
    if let Some(v) = cloud.color {
        attributes.set_item("color", matrix(py, v.concat(), 3))?;
    }
    if let Some(v) = cloud.normals {
        attributes.set_item("normals", matrix(py, v.concat(), 3))?;
    }
    if let Some(v) = cloud.classification {
        attributes.set_item("classification", vector(py, v))?;
    }
    if let Some(v) = cloud.return_number {
        attributes.set_item("return_number", vector(py, v))?;
    }
    if let Some(v) = cloud.gps_time {
        attributes.set_item("gps_time", vector(py, v))?;
    }
    out.set_item("attributes", attributes)?;
    out.set_item("info_json", info_json)?;
    Ok(out)
}
