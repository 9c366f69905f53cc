//! Terrestrial laser scanner simulation.
//!
//! The instrument steps its beam on a regular grid of azimuth (a full turn) and elevation in
//! its own frame, which may be tilted when the instrument is not levelled. Each beam returns the
//! nearest surface it meets (occlusion casts shadows), within the maximum range. The range gets
//! Gaussian noise; the intensity follows the surface reflectivity and the incidence angle.

use crate::depot::Scene;
use crate::rng::Rng;
use crate::solid::{Pose, V3};
use rayon::prelude::*;

/// Scanner settings.
#[derive(Debug, Clone, Copy)]
pub struct Settings {
    /// Angular step in azimuth and in elevation, degrees.
    pub step_deg: f64,
    /// Lowest elevation, degrees.
    pub elevation_min_deg: f64,
    /// Highest elevation, degrees.
    pub elevation_max_deg: f64,
    /// No return beyond this range, metres.
    pub max_range: f64,
    /// No return closer than this, metres (the instrument's own blind zone).
    pub min_range: f64,
    /// Standard deviation of the range noise, metres.
    pub range_sigma: f64,
    /// Time for one vertical line of the grid, seconds.
    pub line_period: f64,
}

/// A set-up of the instrument.
#[derive(Debug, Clone)]
pub struct Station {
    /// Maps instrument coordinates into the scene frame.
    pub pose: Pose,
    /// Seed of the noise streams.
    pub seed: u64,
    /// GPS time (seconds of the week) at the start of the scan.
    pub start_time: f64,
}

/// One measured point.
#[derive(Debug, Clone, Copy)]
pub struct Return {
    /// Position in the instrument frame, metres.
    pub position: V3,
    /// Intensity, 0..=65535.
    pub intensity: u16,
    /// ASPRS class of the surface.
    pub class: u8,
    /// GPS time of the measurement.
    pub time: f64,
    /// Elevation of the beam in the instrument frame, degrees.
    pub elevation_deg: f32,
}

/// Scans the scene from the station; returns points in column (azimuth) order, each column
/// from low to high elevation.
pub fn scan(scene: &Scene, station: &Station, s: &Settings) -> Vec<Return> {
    let cols = (360.0 / s.step_deg).round() as usize;
    let rows = ((s.elevation_max_deg - s.elevation_min_deg) / s.step_deg).round() as usize + 1;
    let origin = station.pose.translation;
    let columns: Vec<Vec<Return>> = (0..cols)
        .into_par_iter()
        .map(|c| {
            let az = (c as f64 * s.step_deg).to_radians();
            let (saz, caz) = az.sin_cos();
            let mut scratch = Vec::new();
            let mut out = Vec::new();
            for r in 0..rows {
                let el_deg = s.elevation_min_deg + r as f64 * s.step_deg;
                let (sel, cel) = el_deg.to_radians().sin_cos();
                let local = V3::new(cel * caz, cel * saz, sel);
                let d = station.pose.rotate(&local);
                let inv_d = V3::new(1.0 / d.x, 1.0 / d.y, 1.0 / d.z);
                let mut best: Option<(f64, V3, usize)> = None;
                for (k, obj) in scene.objects.iter().enumerate() {
                    let limit = best.map_or(s.max_range, |b| b.0);
                    if obj.body.aabb.entry(&origin, &inv_d, limit).is_none() {
                        continue;
                    }
                    if let Some(h) = obj.body.hit(&origin, &d, s.min_range, limit, &mut scratch) {
                        best = Some((h.t, h.normal, k));
                    }
                }
                let Some((t, normal, k)) = best else { continue };
                let obj = &scene.objects[k];
                let mut rng = Rng::derive(station.seed, (c * rows + r) as u64);
                let cos_inc = (-normal.dot(&d)).clamp(0.0, 1.0);
                // Received signal: Lambertian, a slight fall-off with range, speckle.
                let signal = obj.reflectivity
                    * cos_inc
                    * (1.0 - 0.35 * t / s.max_range)
                    * (1.0 + 0.04 * rng.normal())
                    + 0.004 * rng.normal();
                if signal < 0.004 {
                    continue; // too weak to register
                }
                let range = t + s.range_sigma * rng.normal();
                out.push(Return {
                    position: local * range,
                    intensity: (signal.clamp(0.0, 1.0) * 65535.0).round() as u16,
                    class: obj.class.code(),
                    time: station.start_time + s.line_period * (c as f64 + r as f64 / rows as f64),
                    elevation_deg: el_deg as f32,
                });
            }
            out
        })
        .collect();
    columns.into_iter().flatten().collect()
}
