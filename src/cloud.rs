//! `Cloud`: a point cloud in memory, with no file I/O.
//!
//! Positions are stored as f32 offsets from an f64 `origin` (file units, usually metres): a
//! global coordinate is `origin + position`. LAS coordinates such as 638 864.60 would lose
//! millimetres in f32; offsets within a few kilometres of the origin keep sub-millimetre
//! precision. Optional per-point attributes are `None` when the source did not carry them and
//! otherwise have exactly one entry per point.

use crate::error::{Error, Result};

/// A point cloud: f64 origin plus f32 local positions and optional scanner attributes.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Cloud {
    /// Global coordinate of the local frame's zero, file units.
    pub origin: [f64; 3],
    /// Point positions relative to `origin`, file units.
    pub positions: Vec<[f32; 3]>,
    /// Return intensity as recorded (LAS: u16; PLY: scaled into u16 range is not done, raw value kept).
    pub intensity: Option<Vec<f32>>,
    /// Colour, red/green/blue as 16-bit values (8-bit sources are kept as read, 0..=255).
    pub color: Option<Vec<[u16; 3]>>,
    /// Unit normals in the local frame.
    pub normals: Option<Vec<[f32; 3]>>,
    /// ASPRS classification code.
    pub classification: Option<Vec<u8>>,
    /// Return number (1 = first return).
    pub return_number: Option<Vec<u8>>,
    /// GPS time, seconds, as stored in the file.
    pub gps_time: Option<Vec<f64>>,
}

impl Cloud {
    /// A cloud from local positions about `origin`, with no attributes.
    pub fn new(origin: [f64; 3], positions: Vec<[f32; 3]>) -> Self {
        Cloud {
            origin,
            positions,
            ..Default::default()
        }
    }

    /// A cloud from global f64 coordinates. The origin is the centre of the bounding box,
    /// rounded to whole units, so that offsets are small and the origin is a round number.
    pub fn from_global(points: &[[f64; 3]]) -> Self {
        let origin = if points.is_empty() {
            [0.0; 3]
        } else {
            let mut lo = [f64::INFINITY; 3];
            let mut hi = [f64::NEG_INFINITY; 3];
            for p in points {
                for k in 0..3 {
                    lo[k] = lo[k].min(p[k]);
                    hi[k] = hi[k].max(p[k]);
                }
            }
            std::array::from_fn(|k| ((lo[k] + hi[k]) * 0.5).round())
        };
        let positions = points
            .iter()
            .map(|p| std::array::from_fn(|k| (p[k] - origin[k]) as f32))
            .collect();
        Cloud::new(origin, positions)
    }

    /// Number of points.
    pub fn len(&self) -> usize {
        self.positions.len()
    }

    /// True when the cloud has no point.
    pub fn is_empty(&self) -> bool {
        self.positions.is_empty()
    }

    /// Global f64 coordinate of point `i`.
    pub fn global(&self, i: usize) -> [f64; 3] {
        let p = self.positions[i];
        std::array::from_fn(|k| self.origin[k] + p[k] as f64)
    }

    /// Axis-aligned bounds of the local positions, `(min, max)`; `None` when empty.
    pub fn local_bounds(&self) -> Option<([f32; 3], [f32; 3])> {
        let first = *self.positions.first()?;
        let mut lo = first;
        let mut hi = first;
        for p in &self.positions {
            for k in 0..3 {
                lo[k] = lo[k].min(p[k]);
                hi[k] = hi[k].max(p[k]);
            }
        }
        Some((lo, hi))
    }

    /// Axis-aligned bounds in global coordinates, `(min, max)`; `None` when empty.
    pub fn global_bounds(&self) -> Option<([f64; 3], [f64; 3])> {
        let (lo, hi) = self.local_bounds()?;
        Some((
            std::array::from_fn(|k| self.origin[k] + lo[k] as f64),
            std::array::from_fn(|k| self.origin[k] + hi[k] as f64),
        ))
    }

    /// Names of the optional attributes that are present, in a fixed order.
    pub fn attribute_names(&self) -> Vec<&'static str> {
        let mut names = Vec::new();
        if self.intensity.is_some() {
            names.push("intensity");
        }
        if self.color.is_some() {
            names.push("color");
        }
        if self.normals.is_some() {
            names.push("normals");
        }
        if self.classification.is_some() {
            names.push("classification");
        }
        if self.return_number.is_some() {
            names.push("return_number");
        }
        if self.gps_time.is_some() {
            names.push("gps_time");
        }
        names
    }

    /// A new cloud with the points at `indices` (in that order) and their attributes.
    pub fn select(&self, indices: &[usize]) -> Cloud {
        fn pick<T: Copy>(v: &Option<Vec<T>>, idx: &[usize]) -> Option<Vec<T>> {
            v.as_ref().map(|v| idx.iter().map(|&i| v[i]).collect())
        }
        Cloud {
            origin: self.origin,
            positions: indices.iter().map(|&i| self.positions[i]).collect(),
            intensity: pick(&self.intensity, indices),
            color: pick(&self.color, indices),
            normals: pick(&self.normals, indices),
            classification: pick(&self.classification, indices),
            return_number: pick(&self.return_number, indices),
            gps_time: pick(&self.gps_time, indices),
        }
    }

    /// Checks that every attribute has one entry per point and that positions are finite.
    pub fn validate(&self) -> Result<()> {
        let n = self.len();
        let lens = [
            ("intensity", self.intensity.as_ref().map(Vec::len)),
            ("color", self.color.as_ref().map(Vec::len)),
            ("normals", self.normals.as_ref().map(Vec::len)),
            ("classification", self.classification.as_ref().map(Vec::len)),
            ("return_number", self.return_number.as_ref().map(Vec::len)),
            ("gps_time", self.gps_time.as_ref().map(Vec::len)),
        ];
        for (name, len) in lens {
            if let Some(len) = len
                && len != n
            {
                return Err(Error::invalid(
                    format!("attribute {name} has {len} entries for {n} points"),
                    "give one entry per point",
                ));
            }
        }
        if let Some(i) = self
            .positions
            .iter()
            .position(|p| !p.iter().all(|v| v.is_finite()))
        {
            return Err(Error::invalid(
                format!("point {i} has a non-finite coordinate"),
                "drop or repair such points",
            ));
        }
        if !self.origin.iter().all(|v| v.is_finite()) {
            return Err(Error::invalid(
                "the origin is not finite",
                "use a finite origin",
            ));
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn global_coordinates_keep_millimetres() {
        // A LAS-like easting/northing: f32 alone would round to about 6 cm here.
        let pts = [
            [638_864.601, 4_853_123.457, 120.003],
            [638_874.612, 4_853_133.468, 121.0],
        ];
        let c = Cloud::from_global(&pts);
        for (i, p) in pts.iter().enumerate() {
            let g = c.global(i);
            for k in 0..3 {
                assert!((g[k] - p[k]).abs() < 1e-3, "{g:?} vs {p:?}");
            }
        }
    }

    #[test]
    fn validate_catches_bad_lengths_and_nan() {
        let mut c = Cloud::new([0.0; 3], vec![[0.0; 3], [1.0, 0.0, 0.0]]);
        assert!(c.validate().is_ok());
        c.intensity = Some(vec![1.0]);
        assert!(c.validate().is_err());
        c.intensity = None;
        c.positions[1][2] = f32::NAN;
        assert!(c.validate().is_err());
    }
}
