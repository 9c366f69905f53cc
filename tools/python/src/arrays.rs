//! numpy arrays in and out.

use equiscan::Cloud;
use numpy::ndarray::{Array1, Array2};
use numpy::{IntoPyArray, PyArray1, PyArray2, PyReadonlyArray2};
use pyo3::prelude::*;

use crate::errors::to_py;

/// A cloud from an `(n, 3)` numpy array. float32: offsets about `origin` (default 0), taken
/// as they are (the `local` array of `equiscan.read`, with its `origin`, gives the cloud the
/// reader made). float64: file coordinates; offsets about `origin`, or by default about the
/// centre of the bounding box rounded to whole units (`Cloud::from_global`).
pub fn cloud_from(
    py: Python<'_>,
    name: &str,
    points: &Bound<'_, PyAny>,
    origin: Option<[f64; 3]>,
) -> PyResult<Cloud> {
    let bad = |what: String| {
        to_py(
            py,
            equiscan::Error::invalid(
                format!("{name}: {what}"),
                "give a numpy array of shape (n, 3), float64 (file coordinates) or float32 (offsets from origin)",
            ),
        )
    };
    if let Some(o) = origin
        && !o.iter().all(|v| v.is_finite())
    {
        return Err(bad(format!("the origin {o:?} is not finite")));
    }
    let cloud = if let Ok(a) = points.extract::<PyReadonlyArray2<'_, f64>>() {
        let a = a.as_array();
        if a.ncols() != 3 {
            return Err(bad(format!("the array has shape {:?}", a.shape())));
        }
        let rows: Vec<[f64; 3]> = a.rows().into_iter().map(|r| [r[0], r[1], r[2]]).collect();
        check_finite(py, name, rows.iter().copied())?;
        match origin {
            None => Cloud::from_global(&rows),
            Some(o) => Cloud::new(
                o,
                rows.iter()
                    .map(|p| std::array::from_fn(|k| (p[k] - o[k]) as f32))
                    .collect(),
            ),
        }
    } else if let Ok(a) = points.extract::<PyReadonlyArray2<'_, f32>>() {
        let a = a.as_array();
        if a.ncols() != 3 {
            return Err(bad(format!("the array has shape {:?}", a.shape())));
        }
        let rows: Vec<[f32; 3]> = a.rows().into_iter().map(|r| [r[0], r[1], r[2]]).collect();
        check_finite(py, name, rows.iter().map(|p| p.map(f64::from)))?;
        Cloud::new(origin.unwrap_or([0.0; 3]), rows)
    } else {
        let kind = points
            .get_type()
            .name()
            .map(|n| n.to_string())
            .unwrap_or_default();
        let detail = match points.getattr("dtype").and_then(|d| d.str()) {
            Ok(d) => format!("{kind} of dtype {d}"),
            Err(_) => kind,
        };
        return Err(bad(format!("expected a 2-D numpy array, got a {detail}")));
    };
    if cloud.is_empty() {
        return Err(bad("the array has no point".into()));
    }
    Ok(cloud)
}

/// Refuses the first non-finite coordinate, naming its row.
fn check_finite(py: Python<'_>, name: &str, rows: impl Iterator<Item = [f64; 3]>) -> PyResult<()> {
    for (i, p) in rows.enumerate() {
        if let Some(k) = p.iter().position(|v| !v.is_finite()) {
            return Err(to_py(
                py,
                equiscan::Error::invalid(
                    format!(
                        "{name}: row {i} has a non-finite coordinate ({} = {})",
                        ["x", "y", "z"][k],
                        p[k]
                    ),
                    "drop or repair such points",
                )
                .with_kind(equiscan::error::Kind::Input),
            ));
        }
    }
    Ok(())
}

/// A row-major `rows × cols` matrix as a numpy array (no copy).
pub fn matrix<'py, T: numpy::Element>(
    py: Python<'py>,
    values: Vec<T>,
    cols: usize,
) -> Bound<'py, PyArray2<T>> {
    let rows = values.len().checked_div(cols).unwrap_or(0);
    Array2::from_shape_vec((rows, cols), values)
        .expect("rows × cols values")
        .into_pyarray(py)
}

/// A vector as a 1-D numpy array (no copy).
pub fn vector<'py, T: numpy::Element>(py: Python<'py>, values: Vec<T>) -> Bound<'py, PyArray1<T>> {
    Array1::from_vec(values).into_pyarray(py)
}
