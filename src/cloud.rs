//! `Cloud`: a point cloud in memory, with no file I/O.
//!
//! Positions are stored as f32 offsets from an f64 `origin` (file units, usually metres): a
//! global coordinate is `origin + position`. LAS coordinates such as 638 864.60 would lose
//! millimetres in f32; offsets within a few kilometres of the origin keep sub-millimetre
//! precision. Optional per-point attributes are `None` when the source did not carry them and
//! otherwise have exactly one entry per point.

use nalgebra::Vector3;

use crate::error::{Error, Result};
use crate::geometry::{Rigid, to_f32, vec3};

/// Point records as a LAS/LAZ file stored them, kept beside the decoded columns so that a LAS
/// writer can copy every field of the point format and the Extra Bytes, which `Cloud` does not
/// decode (scan angle, user data, point source id, flags, NIR, waveform packets, …).
///
/// Record `i` is `bytes[i * record_len .. (i + 1) * record_len]`; its first 12 bytes are the
/// stored x, y, z, which writers replace with the cloud's own coordinates; the last
/// `extra_bytes` bytes are the Extra Bytes.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct SourceRecords {
    /// LAS point data record format, 0–10.
    pub format: u8,
    /// Bytes per record, Extra Bytes included.
    pub record_len: usize,
    /// Extra Bytes at the end of each record.
    pub extra_bytes: usize,
    /// The Extra Bytes descriptions (the payload of the `LASF_Spec` record 4, 192 bytes per
    /// field); empty when the file does not describe its Extra Bytes.
    pub extra_descriptors: Vec<u8>,
    /// The records, one after another.
    pub bytes: Vec<u8>,
}

impl SourceRecords {
    /// Record `i`.
    pub fn record(&self, i: usize) -> &[u8] {
        &self.bytes[i * self.record_len..(i + 1) * self.record_len]
    }

    /// Number of records held.
    pub fn len(&self) -> usize {
        self.bytes.len().checked_div(self.record_len).unwrap_or(0)
    }

    /// True when no record is held.
    pub fn is_empty(&self) -> bool {
        self.bytes.is_empty()
    }
}

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
    /// The point records of a LAS/LAZ source, one per point ([`SourceRecords`]); `None` for
    /// other sources. LAS writers copy every field they do not take from the columns above.
    pub records: Option<SourceRecords>,
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

    /// Mean of the points in global coordinates (f64; the origin when the cloud is empty).
    pub fn centroid(&self) -> Vector3<f64> {
        let mut s = Vector3::zeros();
        for p in &self.positions {
            s += vec3(*p);
        }
        s / self.len().max(1) as f64 + Vector3::from(self.origin)
    }

    /// The cloud moved by `tf` (acting on global coordinates), every attribute kept. The new
    /// origin is the moved origin rounded to whole units (so that offsets stay small and the
    /// origin a round number); positions are re-expressed about it in f64 and rounded to f32
    /// once; normals are turned by the rotation.
    pub fn transformed(&self, tf: &Rigid) -> Cloud {
        let o = Vector3::from(self.origin);
        let new_o = tf.apply(&o).map(|v| v.round());
        let shift = tf.apply(&o) - new_o;
        let mut out = self.clone();
        out.origin = [new_o.x, new_o.y, new_o.z];
        out.positions = self
            .positions
            .iter()
            .map(|p| to_f32(&(tf.rotate(&vec3(*p)) + shift)))
            .collect();
        if let Some(n) = &self.normals {
            out.normals = Some(n.iter().map(|d| to_f32(&tf.rotate(&vec3(*d)))).collect());
        }
        out
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
            records: self.records.as_ref().map(|r| {
                let mut bytes = Vec::with_capacity(indices.len() * r.record_len);
                for &i in indices {
                    bytes.extend_from_slice(r.record(i));
                }
                SourceRecords {
                    bytes,
                    extra_descriptors: r.extra_descriptors.clone(),
                    ..*r
                }
            }),
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
            ("records", self.records.as_ref().map(SourceRecords::len)),
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
        if let Some(r) = &self.records
            && (r.record_len < 12
                || r.bytes.len() % r.record_len != 0
                || r.extra_bytes > r.record_len)
        {
            return Err(Error::invalid(
                format!(
                    "the source records hold {} bytes in records of {} bytes with {} extra bytes",
                    r.bytes.len(),
                    r.record_len,
                    r.extra_bytes
                ),
                "give whole records of at least 12 bytes",
            ));
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

    /// A quarter turn about z then a shift: every point's global coordinate moves exactly as
    /// the transform says, normals turn, attributes stay, and the centroid follows.
    #[test]
    fn transformed_moves_points_normals_and_centroid() {
        let mut c = Cloud::new(
            [1000.4, -20.0, 3.0],
            vec![[0.0, 0.0, 0.0], [1.0, 0.0, 0.0], [0.0, 2.0, 0.5]],
        );
        c.normals = Some(vec![[1.0, 0.0, 0.0]; 3]);
        c.intensity = Some(vec![1.0, 2.0, 3.0]);
        let quarter = nalgebra::Matrix3::new(0.0, -1.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, 1.0);
        let tf = Rigid::new(quarter, Vector3::new(5.0, 6.0, 7.0));
        let m = c.transformed(&tf);
        assert_eq!(m.origin.map(|v| v.fract()), [0.0; 3]);
        for i in 0..c.len() {
            let want = tf.apply(&Vector3::from(c.global(i)));
            let got = Vector3::from(m.global(i));
            assert!((want - got).norm() < 1e-5, "{want} vs {got}");
        }
        assert_eq!(m.normals.as_ref().unwrap()[0], [0.0, 1.0, 0.0]);
        assert_eq!(m.intensity, c.intensity);
        assert!((m.centroid() - tf.apply(&c.centroid())).norm() < 1e-5);
        let mean = (Vector3::new(0.0, 0.0, 0.0)
            + Vector3::new(1.0, 0.0, 0.0)
            + Vector3::new(0.0, 2.0, 0.5))
            / 3.0
            + Vector3::from(c.origin);
        assert!((c.centroid() - mean).norm() < 1e-12);
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
