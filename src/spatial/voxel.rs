//! Voxel-grid downsampling that keeps real points.

/// Picks one point per occupied cubic voxel of edge `voxel` (file units): the point nearest to
/// the mean of that voxel's points. Returns point indices in ascending order, so the result is
/// deterministic and independent of thread count. Voxels are aligned to the local origin.
///
/// Keeping an actual point (rather than the mean) keeps descriptors centred on the surface.
pub fn voxel_downsample(points: &[[f32; 3]], voxel: f32) -> Vec<usize> {
    assert!(
        voxel > 0.0 && voxel.is_finite(),
        "voxel size must be positive"
    );
    let inv = 1.0 / voxel as f64;
    let mut keyed: Vec<([i64; 3], u32)> = points
        .iter()
        .enumerate()
        .map(|(i, p)| {
            let key = std::array::from_fn(|k| (p[k] as f64 * inv).floor() as i64);
            (key, i as u32)
        })
        .collect();
    keyed.sort_unstable();
    let mut picked = Vec::new();
    let mut start = 0;
    while start < keyed.len() {
        let key = keyed[start].0;
        let mut end = start;
        let mut mean = [0.0f64; 3];
        while end < keyed.len() && keyed[end].0 == key {
            let p = points[keyed[end].1 as usize];
            for k in 0..3 {
                mean[k] += p[k] as f64;
            }
            end += 1;
        }
        let n = (end - start) as f64;
        let mean = mean.map(|v| v / n);
        let best = keyed[start..end]
            .iter()
            .map(|&(_, i)| {
                let p = points[i as usize];
                let d: f64 = (0..3).map(|k| (p[k] as f64 - mean[k]).powi(2)).sum();
                (d, i)
            })
            .min_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)))
            .map(|(_, i)| i as usize)
            .expect("a voxel run is never empty");
        picked.push(best);
        start = end;
    }
    picked.sort_unstable();
    picked
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_point_per_voxel_nearest_to_the_mean() {
        // Two voxels of edge 1: three points in the first, one in the second.
        let pts = [
            [0.1, 0.1, 0.1],
            [0.5, 0.5, 0.5],
            [0.9, 0.9, 0.9],
            [1.5, 0.2, 0.2],
        ];
        assert_eq!(voxel_downsample(&pts, 1.0), vec![1, 3]);
    }

    #[test]
    fn negative_coordinates_fall_in_their_own_voxels() {
        let pts = [[-0.1, 0.0, 0.0], [0.1, 0.0, 0.0]];
        assert_eq!(voxel_downsample(&pts, 1.0), vec![0, 1]);
    }
}
