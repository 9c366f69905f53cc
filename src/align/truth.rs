//! A known SOURCE→TARGET transform read from a JSON file, and the errors of a result against it.

use std::path::Path;

use nalgebra::Vector3;
use serde::Serialize;

use crate::error::{Error, Result};
use crate::geometry::{Rigid, rotation_error_deg};

/// Errors of a found transform against a known one.
#[derive(Debug, Clone, Serialize)]
pub struct TruthCheck {
    /// Geodesic angle between the found and the true rotation, degrees.
    pub rotation_error_deg: f64,
    /// Distance between where the found and the true transform put SOURCE's centroid, file
    /// units.
    pub translation_error: f64,
}

impl TruthCheck {
    /// Compares `found` with `truth` at `centroid` (SOURCE's centroid, file coordinates).
    pub fn new(found: &Rigid, truth: &Rigid, centroid: &Vector3<f64>) -> Self {
        TruthCheck {
            rotation_error_deg: rotation_error_deg(&found.rotation, &truth.rotation),
            translation_error: (found.apply(centroid) - truth.apply(centroid)).norm(),
        }
    }
}

/// Reads a true transform: a JSON array of 4 rows of 4 numbers, or an object holding one in a
/// `matrix` field, optionally under a dotted `key` path whose numeric parts index lists
/// (`parts.0.pose`).
pub fn read_truth(path: &Path, key: Option<&str>) -> Result<Rigid> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, &e))?;
    let mut v: serde_json::Value = serde_json::from_str(&text).map_err(|e| {
        Error::file(
            path,
            format!("is not valid JSON ({e})"),
            "check the --truth file",
        )
    })?;
    if let Some(key) = key {
        for part in key.split('.') {
            let next = match (&v, part.parse::<usize>()) {
                (serde_json::Value::Array(items), Ok(i)) => items.get(i).cloned(),
                _ => v.get(part).cloned(),
            };
            v = next.ok_or_else(|| {
                Error::file(
                    path,
                    format!("has no `{part}` along --truth-key {key}"),
                    "give the dotted path to the object holding the matrix (list items by number from 0, e.g. parts.0.pose)",
                )
            })?;
        }
    }
    if let Some(m) = v.get("matrix") {
        v = m.clone();
    }
    let rows: [[f64; 4]; 4] = serde_json::from_value(v).map_err(|_| {
        Error::file(
            path,
            "holds no 4×4 matrix there",
            "give 4 rows of 4 numbers, or an object with a `matrix` field (see --truth-key)",
        )
    })?;
    Rigid::from_rows(&rows).ok_or_else(|| {
        Error::file(
            path,
            "the matrix is not a rigid transform",
            "give a rotation with a translation and a last row of 0 0 0 1",
        )
    })
}
