//! Distances of scan points from a reference surface.
//!
//! - [`residuals`]: unsigned distances of a sample under a trial pose, for fit figures and
//!   evidence: `max(|n·(p − q)|, |p − q| − s)` with `q` the nearest reference point, `n` its
//!   normal and `s` the reference spacing (the plane distance, but never less than the
//!   distance to the sampled surface's edge).
//! - [`signed_deviations`]: the inspection's signed deviation of every scan point, positive
//!   outside the material: to the nearest triangle for a mesh reference (exact,
//!   [`super::triangles`]), to the local plane of the four nearest reference points (their mean
//!   point and mean outward normal) for a cloud reference, with the same edge rule as above.
//!
//! Units: file units of the reference. Points are given in the scan's local frame and moved by
//! a transform into the reference's local frame.

use nalgebra::Vector3;
use rayon::prelude::*;

use super::reference::Prepared;
use super::triangles::TriangleIndex;
use crate::geometry::{Rigid, vec3};

/// Unsigned residuals of a sample under one pose.
#[derive(Debug, Clone)]
pub struct Residuals {
    /// One distance per sample point.
    pub distance: Vec<f32>,
    /// The inlier distance they are judged at.
    pub tau: f64,
}

impl Residuals {
    /// Share of points within the inlier distance.
    pub fn share(&self) -> f64 {
        let n = self
            .distance
            .iter()
            .filter(|&&d| d as f64 <= self.tau)
            .count();
        n as f64 / self.distance.len().max(1) as f64
    }

    /// RMS of the distances within the inlier distance.
    pub fn rms(&self) -> f64 {
        let (s, n) = self
            .distance
            .iter()
            .filter(|&&d| d as f64 <= self.tau)
            .fold((0.0, 0usize), |(s, n), &d| (s + (d as f64).powi(2), n + 1));
        (s / n.max(1) as f64).sqrt()
    }

    /// Lower is better: mean of the distances capped at four inlier distances.
    pub fn score(&self) -> f64 {
        let cap = 4.0 * self.tau;
        self.distance
            .iter()
            .map(|&d| (d as f64).min(cap))
            .sum::<f64>()
            / self.distance.len().max(1) as f64
    }
}

/// Residuals of `points` (scan local) moved by `tf` onto the reference (module docs).
pub fn residuals(points: &[[f32; 3]], r: &Prepared, tf: &Rigid, tau: f64) -> Residuals {
    let distance = points.par_iter().map(|p| residual(p, r, tf)).collect();
    Residuals { distance, tau }
}

/// [`residuals`] on the calling thread (for loops that are already parallel over poses).
pub fn residuals_seq(points: &[[f32; 3]], r: &Prepared, tf: &Rigid, tau: f64) -> Residuals {
    let distance = points.iter().map(|p| residual(p, r, tf)).collect();
    Residuals { distance, tau }
}

fn residual(p: &[f32; 3], r: &Prepared, tf: &Rigid) -> f32 {
    let m = tf.apply(&vec3(*p));
    let (j, d2) = r.index.nearest_one([m.x as f32, m.y as f32, m.z as f32]);
    let n = vec3(r.reference.normals[j]);
    let q = vec3(r.reference.points[j]);
    let plane = n.dot(&(m - q)).abs();
    plane.max((d2 as f64).sqrt() - r.spacing) as f32
}

/// Signed deviation of every point (scan local, moved by `tf` into the reference's local
/// frame), positive outside the material (module docs).
pub fn signed_deviations(
    points: &[[f32; 3]],
    r: &Prepared,
    triangles: Option<&TriangleIndex>,
    tf: &Rigid,
) -> Vec<f32> {
    let origin = Vector3::from(r.reference.origin);
    points
        .par_iter()
        .map(|p| {
            let m = tf.apply(&vec3(*p));
            if let Some(t) = triangles {
                return t.signed_distance(&(m + origin)).0 as f32;
            }
            let hits = r.index.nearest([m.x as f32, m.y as f32, m.z as f32], 4);
            let k = hits.len().max(1) as f64;
            let q = hits
                .iter()
                .map(|h| vec3(r.reference.points[h.0]))
                .sum::<Vector3<f64>>()
                / k;
            let n = hits
                .iter()
                .map(|h| vec3(r.reference.normals[h.0]))
                .sum::<Vector3<f64>>();
            let n = if n.norm() > 0.0 { n.normalize() } else { n };
            let plane = n.dot(&(m - q));
            let nearest = hits.first().map_or(0.0, |h| (h.1 as f64).sqrt());
            let size = plane.abs().max(nearest - r.spacing);
            (if plane < 0.0 { -size } else { size }) as f32
        })
        .collect()
}
