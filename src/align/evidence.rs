//! Distinctive evidence of a pose: do the rare details agree where the pose lays them?
//!
//! Overlap alone prefers a pose that stacks two partial views of a near-symmetric part; what
//! tells it from the true, side-by-side pose is the small asymmetric detail (a keyway, a flat,
//! a hole). Each SOURCE keypoint gets a distinctiveness weight from the matching pass: with
//! `ρ = d₁ / d₂`, its nearest over its second-nearest descriptor distance among TARGET's rows
//! (Lowe's ratio), the weight is `1 − ρ / ρ_max` when `ρ < ρ_max` and 0 otherwise, so the many
//! keypoints of a plane or a cylinder, whose descriptors have near-equal neighbours, count for
//! almost nothing, and a rare descriptor counts up to 1. A pose *agrees* at a weighted keypoint
//! when it lays it within the inlier threshold τ of a TARGET keypoint whose descriptor is no
//! farther from it than its second-nearest TARGET row (`d ≤ d₂`): the detail there is the same
//! detail. The evidence of a pose is the weighted share of agreeing keypoints among those it
//! lays within τ of a TARGET keypoint: a stacked pose brings more keypoints into the overlap,
//! but lays the rare ones on other details (our own construction; the ratio is D. G. Lowe's, IJCV 60(2), 2004). Unlike the count of
//! explained matches, it does not need the match to have been the nearest: any equally similar
//! TARGET row at the right place counts.

use rayon::prelude::*;

use super::prepared_scan::PreparedScan;
use super::rigid::Rigid;

/// The weighted SOURCE keypoints of a pair of scans.
pub struct Distinctive {
    /// (SOURCE keypoint, weight, squared second-nearest descriptor distance), keypoint order.
    rows: Vec<(u32, f32, f32)>,
}

const CHUNK: usize = 256;

impl Distinctive {
    /// Weights from the nearest and second-nearest squared distances `(target, d₁², d₂²)` of
    /// every SOURCE row (in keypoint order), keeping the keypoints with `ρ < max_ratio`.
    pub fn new(nearest: &[(u32, f32, f32)], max_ratio: f32) -> Distinctive {
        let rows = nearest
            .iter()
            .enumerate()
            .filter_map(|(i, &(_, d1, d2))| {
                if !(d2 > 0.0 && d2.is_finite()) {
                    return None;
                }
                let ratio = (d1 / d2).sqrt();
                (ratio < max_ratio).then(|| (i as u32, 1.0 - ratio / max_ratio, d2))
            })
            .collect();
        Distinctive { rows }
    }

    /// Number of weighted keypoints.
    pub fn len(&self) -> usize {
        self.rows.len()
    }

    /// True when no keypoint is distinctive.
    pub fn is_empty(&self) -> bool {
        self.rows.is_empty()
    }

    /// The evidence of `pose` (SOURCE local → TARGET local), in [0, 1]: the weighted share of the
    /// distinctive keypoints laid within τ of TARGET whose detail agrees there (module docs). Summed in fixed chunks in order, so the figure
    /// does not depend on the thread count.
    pub fn agreement(
        &self,
        source: &PreparedScan,
        target: &PreparedScan,
        pose: &Rigid,
        tau: f64,
    ) -> f64 {
        let dim = source.descriptors.dim;
        if dim == 0 || target.descriptors.dim != dim {
            return 0.0;
        }
        let (fs, ft) = (&source.descriptors.rows, &target.descriptors.rows);
        let index = target.keypoint_index();
        let parts: Vec<(f64, f64)> = self
            .rows
            .par_chunks(CHUNK)
            .map(|chunk| {
                let (mut agree, mut seen) = (0.0f64, 0.0f64);
                for &(i, w, bound) in chunk {
                    let i = i as usize;
                    let q = pose.apply_f32(source.keypoints[i]);
                    let a = &fs[i * dim..(i + 1) * dim];
                    let (mut agrees, mut near) = (false, false);
                    index.for_each_within(
                        [q.x as f32, q.y as f32, q.z as f32],
                        tau as f32,
                        |j, _| {
                            near = true;
                            if !agrees {
                                let b = &ft[j * dim..(j + 1) * dim];
                                let d: f32 = a.iter().zip(b).map(|(x, y)| (x - y) * (x - y)).sum();
                                agrees = d <= bound;
                            }
                        },
                    );
                    if near {
                        seen += w as f64;
                    }
                    if agrees {
                        agree += w as f64;
                    }
                }
                (agree, seen)
            })
            .collect();
        let (agree, seen) = parts.iter().fold((0.0, 0.0), |a, x| (a.0 + x.0, a.1 + x.1));
        if seen > 0.0 { agree / seen } else { 0.0 }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn weights_favour_rare_descriptors() {
        // Ratios 0 (unique), 0.45 (half of 0.9), 0.9 and above (not distinctive).
        let near = [
            (0u32, 0.0f32, 1.0f32),
            (1, 0.2025, 1.0),
            (2, 0.81, 1.0),
            (3, 1.0, 1.0),
        ];
        let d = Distinctive::new(&near, 0.9);
        assert_eq!(d.len(), 2);
        assert_eq!(d.rows[0].0, 0);
        assert!((d.rows[0].1 - 1.0).abs() < 1e-6);
        assert!((d.rows[1].1 - 0.5).abs() < 1e-6);
    }
}
