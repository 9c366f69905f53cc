//! Which side of its surface each scan saw: a pose that lays one face of a thin plate on the
//! opposite face of the same plate fits both surfaces, but the two scans then see that plate from
//! opposite sides.
//!
//! Each scan's keypoint normals are oriented consistently over its own neighbour graph
//! ([`crate::spatial::orient_consistently`]): all out of the part or all into it, per connected
//! component. Under the true pose, the normals of the two scans agree in sign wherever they
//! overlap (both saw the outside of the same surface), or disagree everywhere (one scan's
//! orientation came out inward); which of the two it is, is not known, so it is chosen per pair
//! of components, the larger count. A pose that stacks opposite faces of a plate makes the
//! normals agree on some of the overlap and disagree on the rest: the smaller count is the
//! share of the tight overlap that the pose lays on the wrong side.

use rayon::prelude::*;

use super::icp::TightTest;
use super::pipeline::AlignParams;
use super::prepared_scan::PreparedScan;
use super::rigid::Rigid;

/// The tightly overlapping keypoints of a pose split by side.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct SideAgreement {
    /// Keypoints whose side agrees with the majority of their pair of components.
    pub consistent: usize,
    /// Keypoints laid on the opposite side (the minority of their pair of components).
    pub opposed: usize,
}

/// The [`SideAgreement`] of `pose` (local frames): SOURCE keypoints within τ of their nearest
/// TARGET keypoint, within the plane tolerance of its tangent plane and with normal lines within
/// [`super::Tuning::normal_angle_deg`] (the tight overlap's [`TightTest`]: `consistent +
/// opposed` is the tight overlap's count), counted per pair of components by the
/// sign of their oriented normals' dot product.
pub fn side_agreement(
    source: &PreparedScan,
    target: &PreparedScan,
    pose: &Rigid,
    params: &AlignParams,
    tau: f64,
) -> SideAgreement {
    let tu = &params.tuning;
    let (ss, ts) = (source.sides(), target.sides());
    let tight = TightTest::new(
        (&target.keypoints, &target.normals, target.keypoint_index()),
        pose,
        tau,
        tu.plane_tolerance_voxels * source.voxel,
        tu.normal_angle_deg,
    );
    // (SOURCE component, TARGET component, agrees) per tight keypoint, in keypoint order.
    let test = |i: usize| -> Option<(u32, u32, bool)> {
        let (j, c) = tight.check(source.keypoints[i], source.normals[i])?;
        let signed = c * ss.sign[i] as f64 * ts.sign[j] as f64;
        Some((ss.component[i], ts.component[j], signed > 0.0))
    };
    let keys: Vec<(u32, u32, bool)> = (0..source.keypoints.len())
        .into_par_iter()
        .with_min_len(1024)
        .filter_map(test)
        .collect();
    tally(keys)
}

/// Counts tight keypoints `(SOURCE component, TARGET component, normals agree)` per pair of
/// components: the majority of each pair is consistent (which sign is right is not known), the
/// minority opposed.
fn tally(mut keys: Vec<(u32, u32, bool)>) -> SideAgreement {
    keys.sort_unstable();
    let mut out = SideAgreement::default();
    let mut at = 0;
    while at < keys.len() {
        let (a, b) = (keys[at].0, keys[at].1);
        let end = at + keys[at..].partition_point(|k| k.0 == a && k.1 == b);
        let agree = keys[at..end].iter().filter(|k| k.2).count();
        let n = end - at;
        out.consistent += agree.max(n - agree);
        out.opposed += agree.min(n - agree);
        at = end;
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::Cloud;
    use crate::align::prepared_scan::PreparedScan;

    /// Each pair of components keeps its own sign: 7 agreeing and 3 opposed in one pair, 4
    /// opposed (all of them: the sign of that pair is the other one) in another.
    #[test]
    fn the_minority_of_each_pair_of_components_is_opposed() {
        let mut keys = vec![(0, 0, true); 7];
        keys.extend([(0, 0, false); 3]);
        keys.extend([(1, 0, false); 4]);
        assert_eq!(
            tally(keys),
            SideAgreement {
                consistent: 11,
                opposed: 3
            }
        );
    }

    /// Three faces of a box's corner sampled twice on grids half a spacing apart, each
    /// oriented over its own neighbour graph, laid on each other at the identity: no keypoint is
    /// opposed (with signs that did not follow the faces about half would be), and the consistent
    /// ones are the tight overlap's count.
    #[test]
    fn a_corner_on_a_resampled_copy_of_itself_has_no_opposed_keypoint() {
        let corner = |shift: f32| {
            let mut p = Vec::new();
            let grid = |n: usize, m: usize| {
                (0..n).flat_map(move |i| {
                    (0..m).map(move |j| (0.03 * i as f32 + shift, 0.03 * j as f32 + shift))
                })
            };
            p.extend(grid(70, 50).map(|(a, b)| [a, b, 0.0]));
            p.extend(grid(70, 40).map(|(a, b)| [a, 0.0, b + 0.03]));
            p.extend(grid(50, 40).map(|(a, b)| [0.0, a + 0.03, b + 0.03]));
            Cloud::new([0.0; 3], p)
        };
        let params = crate::align::AlignParams::default();
        let voxel = 0.1;
        let tau = params.inlier_voxels * voxel;
        let target = PreparedScan::prepare("corner", &corner(0.0), &params, voxel).unwrap();
        let source = PreparedScan::prepare("copy", &corner(0.015), &params, voxel).unwrap();
        let a = side_agreement(&source, &target, &Rigid::identity(), &params, tau);
        assert_eq!(a.opposed, 0, "{a:?}");
        assert!(a.consistent * 2 > source.keypoints.len(), "{a:?}");
        let tight =
            super::super::refine::tight_overlap(&source, &target, &Rigid::identity(), &params, tau);
        assert_eq!(a.consistent as f64 / source.keypoints.len() as f64, tight);
    }
}
