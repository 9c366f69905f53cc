//! Free-space consistency: where a sensor's position is known, the space between the sensor and
//! the surface it measured was seen through, so a pose that moves the other scan's points into
//! that space is contradicted by the data.
//!
//! This is the visibility test of range-image registration (common practice; the "free-space
//! violation" of Huber & Hebert 2003, "Fully automatic registration of multiple 3D data sets",
//! Image and Vision Computing 21(7), from memory). Overlap alone cannot tell two partial views
//! laid on top of each other from the same views side by side when the shape is nearly
//! symmetric; what one sensor saw through (a keyway floor behind where the other scan puts a
//! surface, empty space in front of a wall where a wrong pose puts a post) can.
//!
//! Conventions: a [`RangeImage`] is built in one scan's local frame from its fine points and its
//! sensor position (file coordinates minus the scan's origin). Directions from the sensor are
//! binned on a cube map with equal-angle cells: the face is the axis of the largest direction
//! component, the two cell indices are `⌊atan(dₐ/|dₖ|)/δ⌋` and `⌊atan(d_b/|dₖ|)/δ⌋` for a cell
//! angle δ (radians). Each cell keeps the smallest measured range (the nearest surface seen in
//! it), which makes the test conservative: a point counts as a violation only when it lies in
//! front of the nearest surface measured in its cell and the eight cells around it by more
//! than the margin (the neighbours keep a thin foreground edge from passing for free space).
//! Cells with no measurement (outside the field of view, no return) are unknown and never
//! count. Lengths are in file units.

use std::collections::HashMap;

use nalgebra::Vector3;
use serde::{Deserialize, Serialize};

use super::candidates::Scored;
use super::prepared_scan::PreparedScan;
use super::rigid::Rigid;
use super::tuning::Tuning;
use crate::geometry::vec3;

/// Sensor positions of SOURCE and TARGET where known, each in its own file's coordinates.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize)]
pub struct Viewpoints {
    /// SOURCE's sensor position, SOURCE file coordinates.
    pub source: Option<[f64; 3]>,
    /// TARGET's sensor position, TARGET file coordinates.
    pub target: Option<[f64; 3]>,
}

impl Viewpoints {
    /// True when neither position is known.
    pub fn is_empty(&self) -> bool {
        self.source.is_none() && self.target.is_none()
    }

    /// The positions of SOURCE and TARGET and where each came from: `given` (the command-line
    /// options, named by `options`) first, else what the file records (`recorded`:
    /// [`crate::io::FileInfo::viewpoint`], an E57 scan's pose when one scan is read; LAS/LAZ
    /// has no standard field for a scanner position and PLY none either, so those give
    /// `None`), the files named by `files`.
    pub fn pick(
        given: [Option<[f64; 3]>; 2],
        recorded: [Option<[f64; 3]>; 2],
        options: [&str; 2],
        files: [&str; 2],
    ) -> (Viewpoints, [Option<String>; 2]) {
        let one = |k: usize| match (given[k], recorded[k]) {
            (Some(p), _) => (Some(p), Some(format!("given ({})", options[k]))),
            (None, Some(p)) => (
                Some(p),
                Some(format!(
                    "the scanner position recorded in {} (E57 scan pose)",
                    files[k]
                )),
            ),
            (None, None) => (None, None),
        };
        let ((source, sf), (target, tf)) = (one(0), one(1));
        (Viewpoints { source, target }, [sf, tf])
    }
}

/// The nearest measured range per direction cell of one sensor (module docs).
pub struct RangeImage {
    centre: Vector3<f64>,
    cell: f64,
    nearest: HashMap<u64, f32>,
}

impl RangeImage {
    /// The range image of `points` (local frame) seen from `centre` (same frame) with cells of
    /// `cell` radians. `None` when no point lies away from the centre.
    pub fn new(points: &[[f32; 3]], centre: Vector3<f64>, cell: f64) -> Option<RangeImage> {
        let mut nearest: HashMap<u64, f32> = HashMap::new();
        for p in points {
            let d = vec3(*p) - centre;
            let r = d.norm();
            if !(r > 0.0 && r.is_finite()) {
                continue;
            }
            let key = cell_key(&d, cell);
            let e = nearest.entry(key).or_insert(f32::INFINITY);
            *e = e.min(r as f32);
        }
        (!nearest.is_empty()).then_some(RangeImage {
            centre,
            cell,
            nearest,
        })
    }

    /// Whether `p` (local frame) lies in space the sensor saw through: `Some(true)` when it is
    /// closer to the sensor than the nearest surface measured in its direction cell and the
    /// eight cells around it by more than `margin`, `Some(false)` when it is not, `None` when
    /// nothing was measured in that direction.
    pub fn seen_through(&self, p: &Vector3<f64>, margin: f64) -> Option<bool> {
        let d = p - self.centre;
        let r = d.norm();
        if !(r > 0.0 && r.is_finite()) {
            return None;
        }
        let key = cell_key(&d, self.cell);
        self.nearest.get(&key)?;
        // The nearest surface over the cell and its eight neighbours on the same face: a thin
        // foreground edge whose fine points fell in the next cell still counts.
        let measured = (-1i64..=1)
            .flat_map(|a| (-1i64..=1).map(move |b| (a, b)))
            .filter_map(|(a, b)| {
                let k = key.wrapping_add_signed((a << 20) + b);
                self.nearest.get(&k).copied()
            })
            .fold(f32::INFINITY, f32::min) as f64;
        Some(r < measured - margin)
    }

    /// Number of direction cells with a measurement.
    pub fn cells(&self) -> usize {
        self.nearest.len()
    }
}

/// The cube-map cell of direction `d` (not zero) for cells of `cell` radians.
fn cell_key(d: &Vector3<f64>, cell: f64) -> u64 {
    let a = d.abs();
    let k = if a.x >= a.y && a.x >= a.z {
        0
    } else if a.y >= a.z {
        1
    } else {
        2
    };
    let (i, j) = ((k + 1) % 3, (k + 2) % 3);
    let face = 2 * k as u64 + u64::from(d[k] < 0.0);
    let index = |c: f64| {
        let t = (c / a[k]).atan() / cell;
        // |atan| ≤ π/4: the index fits easily in 20 bits for any sensible cell.
        (t.floor() as i64 + (1 << 19)).clamp(0, (1 << 20) - 1) as u64
    };
    (face << 40) | (index(d[i]) << 20) | index(d[j])
}

/// The free-space test of one registration: the range images of the sensors that are known.
pub struct Visibility {
    /// TARGET's sensor (TARGET local frame) and its range image.
    target: Option<RangeImage>,
    /// SOURCE's sensor (SOURCE local frame) and its range image.
    source: Option<RangeImage>,
    /// Points in front of the measured surface by more than this count (file units).
    margin: f64,
    /// SOURCE keypoints tested against TARGET's sensor (a strided sample, local frame).
    source_sample: Vec<[f32; 3]>,
    /// TARGET keypoints tested against SOURCE's sensor (a strided sample, local frame).
    target_sample: Vec<[f32; 3]>,
}

impl Visibility {
    /// The test for `source` onto `target` with the sensor positions of `viewpoints` (file
    /// coordinates); cells of [`Tuning::free_space_cell_voxels`] fine voxels at the median
    /// range of each scan's fine points; margin [`Tuning::free_space_margin_voxels`] voxels or
    /// [`Tuning::free_space_noise_sigmas`] × the two scans' noise estimates added in
    /// quadrature ([`noise`]), whichever is larger; at most [`Tuning::free_space_sample`]
    /// keypoints of each scan tested.
    pub fn new(
        source: &PreparedScan,
        target: &PreparedScan,
        viewpoints: &Viewpoints,
        tu: &Tuning,
    ) -> Visibility {
        let image = |scan: &PreparedScan, vp: Option<[f64; 3]>| {
            let c = Vector3::from(vp?) - Vector3::from(scan.origin);
            let mut ranges: Vec<f64> = scan
                .fine_points
                .iter()
                .map(|p| (vec3(*p) - c).norm())
                .filter(|r| r.is_finite() && *r > 0.0)
                .collect();
            if ranges.is_empty() {
                return None;
            }
            let mid = ranges.len() / 2;
            let (_, median, _) = ranges.select_nth_unstable_by(mid, f64::total_cmp);
            let cell = (tu.free_space_cell_voxels * scan.fine_voxel / *median).clamp(1e-5, 0.2);
            RangeImage::new(&scan.fine_points, c, cell)
        };
        let sample = |pts: &[[f32; 3]]| {
            let stride = pts.len().div_ceil(tu.free_space_sample.max(1)).max(1);
            pts.iter().step_by(stride).copied().collect::<Vec<_>>()
        };
        let known = !viewpoints.is_empty();
        let sigma = if known {
            noise(source).hypot(noise(target))
        } else {
            0.0
        };
        Visibility {
            target: image(target, viewpoints.target),
            source: image(source, viewpoints.source),
            margin: (tu.free_space_margin_voxels * source.voxel)
                .max(tu.free_space_noise_sigmas * sigma),
            source_sample: sample(&source.keypoints),
            target_sample: sample(&target.keypoints),
        }
    }

    /// The margin in front of a measured surface beyond which a point counts (file units).
    pub fn margin(&self) -> f64 {
        self.margin
    }

    /// True when at least one sensor position is known.
    pub fn known(&self) -> bool {
        self.target.is_some() || self.source.is_some()
    }

    /// What `pose` (SOURCE local → TARGET local) does to the tested points of each scan whose
    /// other sensor is known: SOURCE keypoints against TARGET's range image, TARGET keypoints
    /// (moved back by the inverse) against SOURCE's.
    pub fn tally(&self, pose: &Rigid) -> Tally {
        let count = |image: &RangeImage, pts: &[[f32; 3]], tf: &Rigid| {
            let mut c = Counts {
                tested: pts.len(),
                ..Counts::default()
            };
            for p in pts {
                match image.seen_through(&tf.apply_f32(*p), self.margin) {
                    Some(true) => c.seen_through += 1,
                    Some(false) => {}
                    None => c.unmeasured += 1,
                }
            }
            c
        };
        Tally {
            in_target: self
                .target
                .as_ref()
                .map(|image| count(image, &self.source_sample, pose)),
            in_source: self
                .source
                .as_ref()
                .map(|image| count(image, &self.target_sample, &pose.inverse())),
        }
    }

    /// Share of the tested points, in [0, 1], that `pose` (SOURCE local → TARGET local) puts
    /// in space a sensor saw through: SOURCE keypoints in front of TARGET's measured surface
    /// along TARGET's sensor rays, and TARGET keypoints (moved back by the inverse) in front of
    /// SOURCE's, over every keypoint of the sample of each scan whose sensor is known. `None`
    /// when no sensor position is known.
    pub fn violation(&self, pose: &Rigid) -> Option<f64> {
        let t = self.tally(pose);
        let (mut bad, mut tested) = (0usize, 0usize);
        for c in [t.in_target, t.in_source].into_iter().flatten() {
            bad += c.seen_through;
            tested += c.tested;
        }
        (self.known() && tested > 0).then(|| bad as f64 / tested as f64)
    }

    /// Fills [`Scored::free_space`] of every pose in `scored`.
    pub fn assess(&self, scored: &mut [Scored]) {
        if !self.known() {
            return;
        }
        use rayon::prelude::*;
        scored
            .par_iter_mut()
            .for_each(|s| s.free_space = self.violation(&s.pose));
    }
}

/// The points of one scan tested against the other scan's range image.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Counts {
    /// Points tested.
    pub tested: usize,
    /// Points in front of the measured surface by more than the margin.
    pub seen_through: usize,
    /// Points in a direction where nothing was measured (unknown: they never count).
    pub unmeasured: usize,
}

/// The free-space test of one pose in both directions ([`Visibility::tally`]).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Tally {
    /// SOURCE's sample against TARGET's sensor (`None` when TARGET's position is unknown).
    pub in_target: Option<Counts>,
    /// TARGET's sample against SOURCE's sensor (`None` when SOURCE's position is unknown).
    pub in_source: Option<Counts>,
}

/// Robust estimate of a scan's noise along the surface normal (file units): for a strided
/// sample of at most 500 fine points, the distances of their 8 nearest fine points to the
/// point's tangent plane (its PCA normal); a difference of two noisy points, so σ̂ = 1.4826 ×
/// median / √2 (median absolute deviation of a normal distribution). Curvature and edges add
/// to it, which only widens the margin.
pub fn noise(scan: &PreparedScan) -> f64 {
    let pts = &scan.fine_points;
    if pts.len() < 9 {
        return 0.0;
    }
    let stride = pts.len().div_ceil(500).max(1);
    let mut d: Vec<f64> = Vec::new();
    for i in (0..pts.len()).step_by(stride) {
        let (p, n) = (vec3(pts[i]), vec3(scan.fine_normals[i]));
        for (j, _) in scan.fine_index().nearest(pts[i], 9) {
            if j != i {
                d.push(n.dot(&(vec3(pts[j]) - p)).abs());
            }
        }
    }
    if d.is_empty() {
        return 0.0;
    }
    let mid = d.len() / 2;
    let (_, median, _) = d.select_nth_unstable_by(mid, f64::total_cmp);
    1.4826 * *median / std::f64::consts::SQRT_2
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A wall at x = 10 seen from the origin: a point in front of it is seen through, a point
    /// on it or behind it is not, a direction away from the wall is unknown.
    #[test]
    fn points_in_front_of_the_measured_wall_are_seen_through() {
        let mut wall = Vec::new();
        for i in -50..=50 {
            for j in -50..=50 {
                wall.push([10.0, i as f32 * 0.1, j as f32 * 0.1]);
            }
        }
        let image = RangeImage::new(&wall, Vector3::zeros(), 0.02).unwrap();
        assert!(image.cells() > 100);
        let at = |x, y, z| image.seen_through(&Vector3::new(x, y, z), 0.2);
        assert_eq!(at(5.0, 1.0, 1.0), Some(true));
        assert_eq!(at(9.9, 1.0, 1.0), Some(false), "within the margin");
        assert_eq!(at(10.0, 2.0, -2.0), Some(false), "on the wall");
        assert_eq!(at(14.0, 2.0, -2.0), Some(false), "behind the wall");
        assert_eq!(
            at(-5.0, 0.0, 0.0),
            None,
            "nothing measured behind the sensor"
        );
        assert_eq!(at(3.0, 30.0, 0.0), None, "outside the wall's directions");
    }

    /// An option beats what the file records; with neither, nothing is known.
    #[test]
    fn given_positions_come_before_recorded_ones() {
        let (v, from) = Viewpoints::pick(
            [Some([1.0, 2.0, 3.0]), None],
            [Some([9.0; 3]), Some([4.0, 5.0, 6.0])],
            ["--source-viewpoint", "--target-viewpoint"],
            ["a.e57#0", "b.e57#1"],
        );
        assert_eq!(v.source, Some([1.0, 2.0, 3.0]));
        assert_eq!(v.target, Some([4.0, 5.0, 6.0]));
        assert_eq!(from[0].as_deref(), Some("given (--source-viewpoint)"));
        assert!(from[1].as_deref().unwrap().contains("b.e57#1"));
        let (v, from) = Viewpoints::pick([None; 2], [None; 2], ["-s", "-t"], ["a", "b"]);
        assert!(v.is_empty() && from == [None, None]);
    }

    /// Cells are equal-angle on each face and faces do not share keys.
    #[test]
    fn cell_keys_separate_faces_and_angles() {
        let k = |x, y, z| cell_key(&Vector3::new(x, y, z), 0.01);
        assert_ne!(k(1.0, 0.0, 0.0), k(-1.0, 0.0, 0.0));
        assert_ne!(k(0.0, 1.0, 0.0), k(0.0, 0.0, 1.0));
        assert_eq!(k(1.0, 0.001, 0.001), k(2.0, 0.002, 0.002), "same direction");
        assert_ne!(k(1.0, 0.0, 0.0), k(1.0, 0.02, 0.0));
    }
}
