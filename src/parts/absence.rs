//! Absence evidence: reference surface a scan should have seen and did not.
//!
//! Presence evidence ([`super::evidence`]) counts scan points one part explains and the other
//! does not. A hole seen straight on shows no wall, only missing points on a face the scan
//! clearly saw; that difference is in what the scan lacks. Here a reference point `r` (with
//! outward normal `n`) of part X at X's pose is **missing** when
//! - no point of the scan's dense sample lies within the gap radius `g` of it, and
//! - it is enclosed by seen surface of its own plane: in the annulus from its gap distance `d`
//!   to `3d + 2g` around it (far enough to reach across a round hole from any point inside
//!   it), the scan points within `2τ` of its tangent plane fill all [`SECTORS`] angular
//!   sectors about `n`, at their density the empty disc of radius `d` would hold at least
//!   [`MIN_EXPECTED`] points, and the scan's own surface normal (plane of the 12 nearest scan
//!   points) at one point per sector is within 25° of `n` (the seen surface faces the same way:
//!   points of other faces crossing the tangent plane's slab do not enclose anything).
//!
//! A missing point of X counts *against X and for Y* only where Y, at its own pose, has no
//! reference surface within `g` of the same place: Y explains the gap, X does not. A gap both
//! parts have surface in (a shadow, a dirty spot) is evidence for neither. Counts are turned
//! into fine-sample point equivalents (area of the missing reference points divided by the
//! area per fine sample point), so that they add to presence evidence on the same scale.
//!
//! Conventions: file units; reference points in the part's local frame; poses carry the scan's
//! local frame into the part's local frame. Deterministic: every loop is sequential or
//! collected in order.

use nalgebra::Vector3;
use rayon::prelude::*;

use super::reference::Prepared;
use super::scan::PreparedScan;
use crate::geometry::{Rigid, vec3};
use crate::spatial::KdIndex;

/// Angular sectors about the normal that must all hold seen surface around a missing point.
pub const SECTORS: usize = 8;
/// Fewest scan points the empty disc around a missing point would hold at the density of the
/// seen surface around it: a random gap of a surface sampled at that density is empty with
/// probability about e^-10 (Poisson), and a near-regular sample (voxel grid, raster of rays)
/// has fewer gaps still.
pub const MIN_EXPECTED: f64 = 10.0;
/// Cosine of the largest angle between a missing point's normal and the scan's own surface
/// normal around it (25°).
const MIN_NORMAL_COS: f64 = 0.906;
/// Largest gap distance considered, in gap radii (a wider gap is an unseen region, not a hole
/// in a seen face).
const MAX_GAP: f64 = 8.0;

/// Reference points of one part missing from the scan at its pose (module docs).
#[derive(Debug, Clone)]
pub struct Missing {
    /// The missing reference points, part's local frame.
    pub points: Vec<[f32; 3]>,
    /// Area one reference point stands for (inverse surface density), file units².
    pub area_per_point: f64,
    /// Gap radius used, file units.
    pub gap: f64,
}

/// Points per unit area of a surface sample: median over (up to 200 of) its points of the count
/// within `radius`, over π radius² (the surface is locally flat at that radius).
fn surface_density(points: &[[f32; 3]], index: &KdIndex, radius: f64) -> f64 {
    let step = points.len().div_ceil(200).max(1);
    let mut counts: Vec<usize> = points
        .iter()
        .step_by(step)
        .map(|p| {
            let mut n = 0;
            index.for_each_within(*p, radius as f32, |_, _| n += 1);
            n
        })
        .collect();
    if counts.is_empty() {
        return 0.0;
    }
    counts.sort_unstable();
    counts[counts.len() / 2] as f64 / (std::f64::consts::PI * radius * radius)
}

/// Unit normal of the scan's surface at `p`: least-squares plane of its 12 nearest points.
fn local_normal(points: &[[f32; 3]], index: &KdIndex, p: [f32; 3]) -> Option<Vector3<f64>> {
    let hits = index.nearest(p, 12);
    if hits.len() < 6 {
        return None;
    }
    let n = hits.len() as f64;
    let mean = hits.iter().map(|h| vec3(points[h.0])).sum::<Vector3<f64>>() / n;
    let mut cov = nalgebra::Matrix3::zeros();
    for h in &hits {
        let d = vec3(points[h.0]) - mean;
        cov += d * d.transpose();
    }
    let e = nalgebra::SymmetricEigen::new(cov);
    let k = e.eigenvalues.imin();
    Some(e.eigenvectors.column(k).into_owned())
}

/// Median nearest-neighbour distance of a sample (over up to 500 points).
fn spacing(points: &[[f32; 3]], index: &KdIndex) -> f64 {
    let step = points.len().div_ceil(500).max(1);
    let mut d: Vec<f32> = points
        .iter()
        .step_by(step)
        .filter_map(|p| index.nearest(*p, 2).get(1).map(|h| h.1.sqrt()))
        .collect();
    if d.is_empty() {
        return 0.0;
    }
    d.sort_by(f32::total_cmp);
    d[d.len() / 2] as f64
}

/// The reference points of `r` missing from the scan's dense sample moved by `pose`, judged at
/// the inlier distance `tau` (module docs).
pub fn missing(scan: &PreparedScan, r: &Prepared, pose: &Rigid, tau: f64) -> Missing {
    let moved: Vec<[f32; 3]> = scan
        .dense
        .iter()
        .map(|p| {
            let m = pose.apply_f32(*p);
            [m.x as f32, m.y as f32, m.z as f32]
        })
        .collect();
    let empty = Missing {
        points: Vec::new(),
        area_per_point: 0.0,
        gap: 0.0,
    };
    let Ok(index) = KdIndex::new(&moved) else {
        return empty;
    };
    let h = spacing(&moved, &index);
    if h <= 0.0 {
        return empty;
    }
    let gap = (3.0 * h).max(2.0 * tau);
    let ref_density = surface_density(&r.reference.points, &r.index, 4.0 * r.spacing);
    if ref_density <= 0.0 {
        return empty;
    }
    let slab = 2.0 * tau;
    let refs = &r.reference.points;
    let normals = &r.reference.normals;
    let core: Vec<(usize, f64)> = (0..refs.len())
        .into_par_iter()
        .filter_map(|k| {
            let (p, n) = (refs[k], normals[k]);
            let (_, d2) = index.nearest_one(p);
            let d = (d2 as f64).sqrt();
            if d <= gap || d > MAX_GAP * gap {
                return None;
            }
            let c = vec3(p);
            let nv = vec3(n);
            if nv.norm() < 0.5 {
                return None;
            }
            let nv = nv.normalize();
            let a = if nv.x.abs() < 0.9 {
                Vector3::x()
            } else {
                Vector3::y()
            };
            let u = nv.cross(&a).normalize();
            let w = nv.cross(&u);
            let outer = 3.0 * d + 2.0 * gap;
            // Per sector, the seen point of smallest index (deterministic whatever the tree's
            // visiting order).
            let mut sectors = [usize::MAX; SECTORS];
            let mut count = 0usize;
            index.for_each_within(p, outer as f32, |i, _| {
                let q = vec3(moved[i]) - c;
                if nv.dot(&q).abs() > slab {
                    return;
                }
                let (x, y) = (u.dot(&q), w.dot(&q));
                let rad = (x * x + y * y).sqrt();
                if rad < d - 1e-9 || rad > outer {
                    return;
                }
                count += 1;
                let t = (y.atan2(x) + std::f64::consts::PI) / std::f64::consts::TAU;
                let k = ((t * SECTORS as f64) as usize).min(SECTORS - 1);
                sectors[k] = sectors[k].min(i);
            });
            if sectors.contains(&usize::MAX) {
                return None;
            }
            // Points the empty disc of radius d would hold at the seen surface's own density.
            let ring = std::f64::consts::PI * (outer * outer - d * d);
            let expected = count as f64 / ring * std::f64::consts::PI * d * d;
            if expected < MIN_EXPECTED {
                return None;
            }
            // The enclosing points must lie on a surface facing the same way (not on other
            // faces that cross the tangent plane's slab, as a plate's faces do beside a hole's
            // wall).
            sectors
                .iter()
                .all(|&i| {
                    local_normal(&moved, &index, moved[i])
                        .is_some_and(|m| m.dot(&nv).abs() >= MIN_NORMAL_COS)
                })
                .then_some((k, d))
        })
        .collect();
    // Every reference point of the same face inside a core point's empty disc, shrunk by the
    // gap radius, is missing too (no scan point within g of it).
    let mut marked = vec![false; refs.len()];
    for &(k, d) in &core {
        let c = vec3(refs[k]);
        let nc = vec3(normals[k]).normalize();
        r.index.for_each_within(refs[k], (d - gap) as f32, |j, _| {
            let nj = vec3(normals[j]);
            if nj.norm() > 0.5
                && nj.normalize().dot(&nc) >= MIN_NORMAL_COS
                && nc.dot(&(vec3(refs[j]) - c)).abs() <= slab
            {
                marked[j] = true;
            }
        });
        marked[k] = true;
    }
    let points: Vec<[f32; 3]> = refs
        .iter()
        .zip(&marked)
        .filter(|(_, m)| **m)
        .map(|(p, _)| *p)
        .collect();
    Missing {
        points,
        area_per_point: 1.0 / ref_density,
        gap,
    }
}

/// Absence evidence against part X for part Y, in fine-sample point equivalents: X's missing
/// points (`mx`, X's frame, X at `pose_x`) where Y at `pose_y` has no reference point within
/// the gap radius. `fine_area` is the area per point of the scan's fine sample.
pub fn against(
    mx: &Missing,
    pose_x: &Rigid,
    y: &Prepared,
    pose_y: &Rigid,
    fine_area: f64,
) -> usize {
    if mx.points.is_empty() || fine_area <= 0.0 {
        return 0;
    }
    let to_y = pose_y.compose(&pose_x.inverse());
    let reach = (mx.gap * mx.gap) as f32;
    let n = mx
        .points
        .iter()
        .filter(|p| {
            let m = to_y.apply_f32(**p);
            y.index.nearest_one([m.x as f32, m.y as f32, m.z as f32]).1 > reach
        })
        .count();
    (n as f64 * mx.area_per_point / fine_area).floor() as usize
}

/// Area per point of the scan's fine sample, file units²: the reference area the scan covers
/// (`coverage` share of part `r`'s surface, its points over their density) over the fine
/// sample's size.
pub fn fine_area(scan: &PreparedScan, r: &Prepared, coverage: f64) -> f64 {
    let rho = surface_density(&r.reference.points, &r.index, 4.0 * r.spacing);
    if rho <= 0.0 || scan.fine.is_empty() {
        return 0.0;
    }
    coverage * r.reference.points.len() as f64 / rho / scan.fine.len() as f64
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::cloud::Cloud;
    use crate::parts::reference::Reference;

    /// Points of the square [0, 40]² at height 0, normal +z, on a grid of `step`, leaving out
    /// those within `hole` of (20, 20).
    fn face(step: f32, hole: f32, jitter: bool) -> Vec<[f32; 3]> {
        let n = (40.0 / step) as usize;
        let mut out = Vec::new();
        for i in 0..=n {
            for j in 0..=n {
                // Deterministic jitter of a third of the step (a raster is never exact).
                let (dx, dy) = if jitter {
                    let h = ((i * 7919 + j * 104_729) % 997) as f32 / 997.0 - 0.5;
                    let g = ((i * 6151 + j * 3571) % 991) as f32 / 991.0 - 0.5;
                    (h * step / 3.0, g * step / 3.0)
                } else {
                    (0.0, 0.0)
                };
                let (x, y) = (i as f32 * step + dx, j as f32 * step + dy);
                if ((x - 20.0).powi(2) + (y - 20.0).powi(2)).sqrt() >= hole {
                    out.push([x, y, 0.0]);
                }
            }
        }
        out
    }

    fn part(hole: f32) -> Prepared {
        let p = face(0.4, hole, false);
        let n = vec![[0.0, 0.0, 1.0]; p.len()];
        Prepared::new(Reference::from_points([0.0; 3], p, n)).unwrap()
    }

    /// A scan of a face with a Ø10 hole: the solid face's reference points inside the hole
    /// are missing (and not on the holed part's surface); the holed part misses nothing.
    #[test]
    fn a_hole_seen_straight_on_is_missing_surface_of_the_solid_part() {
        let scan = PreparedScan::new(&Cloud::new([0.0; 3], face(0.8, 5.0, true)), "scan").unwrap();
        let (solid, holed) = (part(0.0), part(5.0));
        let id = Rigid::identity();
        let tau = 0.2;
        let ms = missing(&scan, &solid, &id, tau);
        let mh = missing(&scan, &holed, &id, tau);
        assert!(mh.points.is_empty(), "{} missing", mh.points.len());
        assert!(!ms.points.is_empty());
        for p in &ms.points {
            let r = ((p[0] - 20.0).powi(2) + (p[1] - 20.0).powi(2)).sqrt();
            assert!(r < 5.0, "missing point {p:?} outside the hole");
        }
        // At least half the hole's area (the rim within the gap radius is not counted).
        let area = ms.points.len() as f64 * ms.area_per_point;
        let hole = std::f64::consts::PI * 25.0;
        assert!(area > 0.4 * hole && area < 1.1 * hole, "area {area}");
        let fine = 1600.0 / scan.fine.len() as f64;
        assert!(against(&ms, &id, &holed, &id, fine) > 0);
        assert_eq!(against(&ms, &id, &solid, &id, fine), 0);
    }

    /// The same face without a hole: nothing is missing (its random gaps are too small).
    #[test]
    fn a_face_seen_whole_misses_nothing() {
        let scan = PreparedScan::new(&Cloud::new([0.0; 3], face(0.8, 0.0, true)), "scan").unwrap();
        let m = missing(&scan, &part(0.0), &Rigid::identity(), 0.2);
        assert!(m.points.is_empty(), "{} missing", m.points.len());
    }
}
