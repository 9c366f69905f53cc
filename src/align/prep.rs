//! Preparing a cloud for registration: voxel-grid keypoints, their normals and a k-d tree.

use rayon::prelude::*;

use crate::error::{Error, Result};
use crate::spatial::{KdIndex, estimate_normals, estimate_spacing, voxel_downsample};

/// Keypoints per cloud aimed at when the voxel size is chosen automatically.
pub const TARGET_KEYPOINTS: f64 = 5000.0;

/// Neighbours used for PCA normals at the keypoints.
pub const NORMAL_NEIGHBOURS: usize = 12;

/// Neighbours used for PCA normals at the fine points: as many fine points as lie, on average,
/// in the area of [`NORMAL_NEIGHBOURS`] keypoints, `NORMAL_NEIGHBOURS × fine / keypoints` for
/// `fine` fine points and `keypoints` keypoints of the same cloud, between
/// [`NORMAL_NEIGHBOURS`] and 192 (about 48 on a dense scan at the default fine grid of half a
/// voxel; 12 on a scan whose points are no denser than the keypoints). With 12 fine neighbours
/// on dense scans (a quarter of that area) the normals of the benchmark's noisiest scans (noise
/// 0.4–0.8 % of the diagonal) tilted enough to pull the point-to-plane fit 2–4° off the truth
/// (DEVELOPERS.md, Registration, "Precision of the fine fit").
pub fn fine_normal_neighbours(fine: usize, keypoints: usize) -> usize {
    let n = NORMAL_NEIGHBOURS as f64 * fine as f64 / keypoints.max(1) as f64;
    (n.round() as usize).clamp(NORMAL_NEIGHBOURS, 192)
}

/// A cloud reduced to keypoints, with normals and an index over the keypoints.
pub struct Prepared {
    /// Keypoint positions (local frame of the cloud).
    pub points: Vec<[f32; 3]>,
    /// Unit normals at the keypoints, oriented away from the keypoints' centroid.
    pub normals: Vec<[f32; 3]>,
    /// k-d tree over `points`.
    pub index: KdIndex,
}

/// Measured point spacing of a cloud (median nearest-neighbour distance), or an error for a
/// cloud with fewer than two distinct points.
pub fn spacing_of(name: &str, points: &[[f32; 3]]) -> Result<f64> {
    // A strided sample of at most 200 000 points keeps this cheap on very large clouds; the
    // spacing of a subsample is rescaled by √(stride), as spacing goes with 1/√density.
    let stride = points.len().div_ceil(200_000).max(1);
    let sample: Vec<[f32; 3]> = points.iter().step_by(stride).copied().collect();
    let s = estimate_spacing(&sample).ok_or_else(|| {
        Error::invalid(
            format!("{name}: fewer than two distinct points"),
            "give a scan with more points",
        )
    })?;
    Ok(s as f64 / (stride as f64).sqrt())
}

/// The voxel size chosen from a cloud's size and spacing: the surface area is about
/// `n × spacing² / 0.4`, and a voxel grid keeps about `1.5 × area / voxel²` points on a
/// surface; the voxel is sized so that about [`TARGET_KEYPOINTS`] remain, and never below two
/// spacings.
pub fn auto_voxel(n: usize, spacing: f64) -> f64 {
    let area = n as f64 * spacing * spacing / 0.4;
    (1.5 * area / TARGET_KEYPOINTS).sqrt().max(2.0 * spacing)
}

/// A voxel size that leaves about [`TARGET_KEYPOINTS`] keypoints (at most 1.5 times as many):
/// starts from [`auto_voxel`] and, where the spacing varies widely (terrestrial scans, whose
/// spacing grows with range), enlarges the voxel by `√(count / target)` and re-thins the
/// keypoints already found, a few times.
pub fn choose_voxel(points: &[[f32; 3]], spacing: f64) -> f64 {
    let mut voxel = auto_voxel(points.len(), spacing);
    let mut kept: Vec<[f32; 3]> = voxel_downsample(points, voxel as f32)
        .into_iter()
        .map(|i| points[i])
        .collect();
    for _ in 0..6 {
        let n = kept.len() as f64;
        if n <= 1.5 * TARGET_KEYPOINTS {
            break;
        }
        voxel *= (n / TARGET_KEYPOINTS).sqrt();
        kept = voxel_downsample(&kept, voxel as f32)
            .into_iter()
            .map(|i| kept[i])
            .collect();
    }
    voxel
}

/// A length or other figure for a message: three significant digits, trailing zeros dropped
/// (`3.464101552963257` → `3.46`, `0.05` → `0.05`, `1200.4` → `1200`).
pub fn figure(v: f64) -> String {
    if !v.is_finite() || v == 0.0 {
        return format!("{v}");
    }
    let digits = (2 - v.abs().log10().floor() as i32).max(0) as usize;
    let s = format!("{v:.digits$}");
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

/// `n` followed by the singular or plural noun (`1 keypoint`, `3 keypoints`).
pub fn count(n: usize, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
}

/// Downsamples `points` on a voxel grid of edge `voxel`, estimates normals and builds the index.
pub fn prepare(name: &str, points: &[[f32; 3]], voxel: f64) -> Result<Prepared> {
    prepare_with(name, points, voxel, NORMAL_NEIGHBOURS)
}

/// [`prepare`] with the normals fitted to each point's `neighbours` nearest points.
pub fn prepare_with(
    name: &str,
    points: &[[f32; 3]],
    voxel: f64,
    neighbours: usize,
) -> Result<Prepared> {
    let keep = voxel_downsample(points, voxel as f32);
    let kp: Vec<[f32; 3]> = keep.iter().map(|&i| points[i]).collect();
    if kp.len() < 10 {
        return Err(Error::invalid(
            format!(
                "{name}: only {} at voxel size {}",
                count(kp.len(), "keypoint", "keypoints"),
                figure(voxel)
            ),
            "give a smaller voxel size or a denser scan",
        ));
    }
    let index = KdIndex::new(&kp)?;
    let all: Vec<usize> = (0..kp.len()).collect();
    let mut normals = estimate_normals(&kp, &index, &all, neighbours, None);
    let mut c = [0.0f64; 3];
    for p in &kp {
        for k in 0..3 {
            c[k] += p[k] as f64;
        }
    }
    let c = c.map(|v| v / kp.len() as f64);
    normals.par_iter_mut().zip(&kp).for_each(|(n, p)| {
        let away: f64 = (0..3).map(|k| n[k] as f64 * (p[k] as f64 - c[k])).sum();
        if away < 0.0 {
            *n = n.map(|v| -v);
        }
    });
    Ok(Prepared {
        points: kp,
        normals,
        index,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn figures_are_rounded_to_three_significant_digits() {
        assert_eq!(figure(3.464101552963257), "3.46");
        assert_eq!(figure(0.05), "0.05");
        assert_eq!(figure(0.012345), "0.0123");
        assert_eq!(figure(1200.4), "1200");
        assert_eq!(figure(-2.5), "-2.5");
        assert_eq!(figure(f64::NAN), "NaN");
    }

    #[test]
    fn fine_normals_cover_the_area_of_the_keypoint_normals() {
        assert_eq!(fine_normal_neighbours(20_000, 5_000), 48);
        assert_eq!(fine_normal_neighbours(5_000, 5_000), NORMAL_NEIGHBOURS);
        assert_eq!(fine_normal_neighbours(4_000, 5_000), NORMAL_NEIGHBOURS);
        assert_eq!(fine_normal_neighbours(1_000_000, 5_000), 192);
        assert_eq!(fine_normal_neighbours(10, 0), 120);
    }

    #[test]
    fn counts_take_the_singular_for_one() {
        assert_eq!(count(1, "keypoint", "keypoints"), "1 keypoint");
        assert_eq!(count(0, "keypoint", "keypoints"), "0 keypoints");
        assert_eq!(count(7, "keypoint", "keypoints"), "7 keypoints");
    }

    #[test]
    fn too_few_keypoints_is_told_in_words() {
        let pts = vec![[0.0f32; 3], [0.1, 0.0, 0.0]];
        let e = prepare("elbow.ply", &pts, 3.464101552963257)
            .err()
            .expect("two points cannot be prepared");
        let text = e.to_string();
        assert!(
            text.contains("elbow.ply: only 1 keypoint at voxel size 3.46"),
            "{text}"
        );
    }
}
