//! Part scanning: dense reference sampling of the whole surface, and a structured-light-style
//! partial scan seen from one viewpoint.
//!
//! The partial scanner has its camera at the origin of its frame looking along +z and its
//! projector `baseline` millimetres along +x. Each camera pixel is a ray on a regular grid
//! (fixed in the camera, not in the part); a point is measured where the ray meets the part,
//! the surface faces both camera and projector well enough, and the projector sees the point
//! too (no projector shadow). Noise is added along the camera ray.

use crate::rng::Rng;
use crate::solid::{Body, V3};
use rayon::prelude::*;

/// Structured-light scanner settings.
#[derive(Debug, Clone, Copy)]
pub struct Sensor {
    /// Projector offset along +x from the camera, mm.
    pub baseline: f64,
    /// Angle between neighbouring pixels, radians.
    pub pixel_pitch: f64,
    /// Noise along the viewing ray, mm (standard deviation).
    pub sigma: f64,
    /// Smallest cosine between the surface normal and the direction to camera or projector.
    pub min_cos: f64,
}

/// Samples the whole surface with about `target` points; returns points and outward normals.
pub fn reference_samples(body: &Body, target: usize, seed: u64) -> Vec<(V3, V3)> {
    let pilot_spacing = body.aabb.diagonal() / 150.0;
    let pilot = body.surface_samples(pilot_spacing, &mut Rng::new(seed ^ 0x5157));
    let area = pilot.len() as f64 * pilot_spacing * pilot_spacing;
    let spacing = (area / target as f64).sqrt();
    body.surface_samples(spacing, &mut Rng::new(seed))
}

/// Scans a part already placed in the scanner frame. `centre` and `radius` bound the part.
pub fn partial_scan(body: &Body, centre: &V3, radius: f64, s: &Sensor, seed: u64) -> Vec<V3> {
    let pitch = s.pixel_pitch;
    let half = radius / centre.z;
    let (cx, cy) = (centre.x / centre.z, centre.y / centre.z);
    let i0 = ((cx - half) / pitch).floor() as i64;
    let i1 = ((cx + half) / pitch).ceil() as i64;
    let j0 = ((cy - half) / pitch).floor() as i64;
    let j1 = ((cy + half) / pitch).ceil() as i64;
    let width = (i1 - i0 + 1) as u64;
    let projector = V3::new(s.baseline, 0.0, 0.0);
    let rows: Vec<Vec<V3>> = (j0..=j1)
        .into_par_iter()
        .map(|j| {
            let mut scratch = Vec::new();
            let mut out = Vec::new();
            for i in i0..=i1 {
                let d = V3::new(i as f64 * pitch, j as f64 * pitch, 1.0).normalize();
                let Some(h) = body.hit(&V3::zeros(), &d, 0.0, f64::INFINITY, &mut scratch) else {
                    continue;
                };
                if -h.normal.dot(&d) < s.min_cos {
                    continue;
                }
                let p = d * h.t;
                let to_proj = projector - p;
                let dist = to_proj.norm();
                let l = to_proj / dist;
                if h.normal.dot(&l) < s.min_cos {
                    continue;
                }
                let lit = body
                    .hit(&projector, &(-l), 0.0, f64::INFINITY, &mut scratch)
                    .is_some_and(|g| g.t > dist - 1e-4);
                if !lit {
                    continue;
                }
                let index = (j - j0) as u64 * width + (i - i0) as u64;
                let mut rng = Rng::derive(seed, index);
                out.push(d * (h.t + s.sigma * rng.normal()));
            }
            out
        })
        .collect();
    rows.into_iter().flatten().collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::solid::{Convex, Pose};

    #[test]
    fn a_plate_facing_the_camera_is_sampled_on_the_pixel_grid() {
        // 40 × 40 × 2 mm plate, front face at z = 499 mm.
        let plate = Convex::cuboid(
            V3::new(20.0, 20.0, 1.0),
            &Pose::translation(V3::new(0.0, 0.0, 500.0)),
        );
        let body = Body::new(plate.into());
        let s = Sensor {
            baseline: 100.0,
            pixel_pitch: 1e-3,
            sigma: 0.0,
            min_cos: 0.1,
        };
        let pts = partial_scan(&body, &V3::new(0.0, 0.0, 500.0), 30.0, &s, 1);
        // One point per 0.499 mm pixel footprint: about (40 / 0.499)² points.
        let want = (40.0f64 / 0.499).powi(2);
        assert!(
            (pts.len() as f64 / want - 1.0).abs() < 0.05,
            "{} vs {want}",
            pts.len()
        );
        assert!(pts.iter().all(|p| (p.z - 499.0).abs() < 1e-9));
    }

    #[test]
    fn reference_samples_hit_the_target_count() {
        let cube = Convex::cuboid(V3::repeat(10.0), &Pose::translation(V3::zeros()));
        let n = reference_samples(&Body::new(cube.into()), 5000, 3).len();
        assert!((n as f64 / 5000.0 - 1.0).abs() < 0.05, "{n}");
    }
}
