//! Point-spacing estimate and the support radius suggested from it.

use super::KdIndex;

/// Support radius suggested per unit of point spacing. Five spacings give roughly 60–100
/// neighbours on a scanned surface, enough for stable degree-4 harmonics (common practice:
/// local descriptors use a support of a few to ten times the sampling distance).
pub const SUPPORT_RADIUS_PER_SPACING: f32 = 5.0;

/// Median distance from a point to its nearest distinct neighbour, over an evenly strided
/// sample of at most 10 000 points (file units). `None` when fewer than two distinct points.
pub fn estimate_spacing(points: &[[f32; 3]]) -> Option<f32> {
    if points.len() < 2 {
        return None;
    }
    let index = KdIndex::new(points).ok()?;
    estimate_spacing_with(points, &index)
}

/// As [`estimate_spacing`], reusing an index built over `points`.
pub fn estimate_spacing_with(points: &[[f32; 3]], index: &KdIndex) -> Option<f32> {
    let sample = 10_000usize;
    let step = points.len().div_ceil(sample).max(1);
    let mut d: Vec<f32> = points
        .iter()
        .step_by(step)
        .filter_map(|p| {
            // Duplicates come back at distance 0: look a little further for a distinct point.
            index
                .nearest(*p, 8)
                .into_iter()
                .find(|&(_, d2)| d2 > 0.0)
                .map(|(_, d2)| d2.sqrt())
        })
        .collect();
    if d.is_empty() {
        return None;
    }
    let mid = d.len() / 2;
    let (_, m, _) = d.select_nth_unstable_by(mid, f32::total_cmp);
    Some(*m)
}

/// The support radius suggested for a measured point spacing.
pub fn suggested_support_radius(spacing: f32) -> f32 {
    spacing * SUPPORT_RADIUS_PER_SPACING
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn grid_spacing_is_the_grid_step() {
        let step = 0.02f32;
        let pts: Vec<[f32; 3]> = (0..50)
            .flat_map(|i| (0..50).map(move |j| [i as f32 * step, j as f32 * step, 0.0]))
            .collect();
        let s = estimate_spacing(&pts).unwrap();
        assert!((s - step).abs() < 1e-5, "{s}");
    }

    #[test]
    fn duplicates_do_not_make_the_spacing_zero() {
        let mut pts: Vec<[f32; 3]> = (0..100).map(|i| [i as f32, 0.0, 0.0]).collect();
        pts.extend(pts.clone());
        assert_eq!(estimate_spacing(&pts), Some(1.0));
        assert_eq!(estimate_spacing(&[[0.0; 3], [0.0; 3]]), None);
    }
}
