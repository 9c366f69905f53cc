//! Is the answer pinned? A restart test of the fine fit, for answers that would be `confident`.
//!
//! Point-to-plane ICP stops at the first minimum it reaches. On a nearly symmetric part (a
//! shaft whose keyway and flat are small against its cylinders) that minimum can be a shallow
//! basin a few degrees from the truth, and the fit there is firm by every local figure: the
//! normal matrix's smallest eigenvalue is above the weak threshold, the residual is small.
//! What tells such a basin from a pinned pose is where the fit goes when it is started a little
//! off: point-to-plane ICP of SOURCE's keypoints onto TARGET's fine points (the fine fit's
//! pairing distance and loss; the keypoints rather than the fine points keep it to about a
//! tenth of a second on a 100 k-point pair), restarted from small motions along the weakest
//! directions of the fit's own normal matrix (the eigenvectors of the 6 × 6 matrix of Gelfand,
//! Ikemoto, Rusinkiewicz & Levoy 2003, [`super::constraint::motions`]; a turn of
//! [`super::Tuning::pin_turn_deg`] about a rotational eigen-axis through its point nearest the
//! overlap's centroid, a slide of [`super::Tuning::pin_slide_taus`] τ along a translational
//! one, both signs), a pinned fit
//! returns to the answer; a fit in a shallow basin ends at another pose. When such a pose lies
//! farther than [`super::Tuning::pin_angle_deg`] or [`super::Tuning::pin_distance_taus`] τ
//! from the answer and fits the fine points as well (its tight fine overlap, the share of
//! SOURCE's fine points within the plane tolerance of TARGET's surface with normals agreeing,
//! at least 1 − [`super::Tuning::pin_fit_margin`] times the answer's), the answer is not pinned
//! down (multi-start local optimisation, common practice).
//!
//! Lengths in TARGET's local frame (SOURCE local → TARGET local poses), angles in degrees.

use nalgebra::Vector3;
use rayon::prelude::*;

use super::candidates::difference;
use super::constraint::{Motion, motions, paired};
use super::pipeline::AlignParams;
use super::prepared_scan::PreparedScan;
use super::refine::{fit_fine, fit_onto_fine, smoothed_source, tight_share};
use super::rigid::Rigid;

/// A pose that a restarted fit reached, away from the answer, fitting as well.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Unpinned {
    /// SOURCE local → TARGET local.
    pub pose: Rigid,
    /// Its tight fine overlap (share of SOURCE's fine points).
    pub fit: f64,
    /// The answer's tight fine overlap.
    pub answer_fit: f64,
    /// ICP iterations of that restart.
    pub iterations: usize,
}

/// The turn, in degrees, between `answer` (SOURCE local → TARGET local) and the fine fit made
/// the other way round: TARGET's fine points fitted onto SOURCE's (SOURCE's normals, the same
/// ICP stages and constraint refit as [`super::refine::fit_fine`]) from `answer`'s inverse,
/// inverted back. Point-to-plane ICP uses the normals of one scan only, so on a pinned pose
/// both fits end together, while a pose held by too little detail for the noise ends where
/// each scan's noise pulls it, and the two fits part (forward–backward consistency, common
/// practice in registration and motion estimation).
pub fn reverse_fit_turn(
    answer: &Rigid,
    source: &PreparedScan,
    target: &PreparedScan,
    params: &AlignParams,
    tau: f64,
) -> f64 {
    let back = reverse_fit(answer, source, target, params, tau);
    super::rigid::rotation_error_deg(&back.rotation, &answer.rotation)
}

/// The fit of [`reverse_fit_turn`] itself: TARGET's fine points fitted onto SOURCE's from
/// `answer`'s inverse, inverted back (SOURCE local → TARGET local, as `answer`).
pub fn reverse_fit(
    answer: &Rigid,
    source: &PreparedScan,
    target: &PreparedScan,
    params: &AlignParams,
    tau: f64,
) -> Rigid {
    fit_fine(&answer.inverse(), target, source, params, tau)
        .local
        .inverse()
}

/// The tight overlap of `pose` on the fine points: the share of SOURCE's fine points within
/// the plane tolerance of TARGET's fine surface (paired within τ), normals agreeing.
pub fn fine_fit(
    source: &PreparedScan,
    target: &PreparedScan,
    pose: &Rigid,
    params: &AlignParams,
    tau: f64,
) -> f64 {
    tight_share(
        (&source.fine_points, &source.fine_normals),
        (
            &target.fine_points,
            &target.fine_normals,
            target.fine_index(),
        ),
        source.voxel,
        pose,
        params,
        tau,
    )
}

/// The start poses of the restart test of `answer`: for each of the
/// [`super::Tuning::pin_directions`] weakest motions of the normal matrix of the answer's
/// fine pairs, the answer moved by that motion (turned about its axis or slid along it) in
/// both senses, in order of the motions, the positive sense first.
pub fn restarts(
    answer: &Rigid,
    source: &PreparedScan,
    target: &PreparedScan,
    params: &AlignParams,
    tau: f64,
) -> Vec<Rigid> {
    let tu = &params.tuning;
    if tu.pin_directions == 0 {
        return Vec::new();
    }
    let (pts, nrm, _) = paired(
        &source.fine_points,
        &target.fine_normals,
        target.fine_index(),
        answer,
        tau,
    );
    if pts.len() < 6 {
        return Vec::new();
    }
    let mut out = Vec::new();
    for m in motions(&pts, &nrm).iter().take(tu.pin_directions) {
        let axis = Vector3::from(m.axis);
        for sense in [1.0, -1.0] {
            out.push(match m.motion {
                Motion::Turn => {
                    answer.turned_about(&axis, &Vector3::from(m.through), sense * tu.pin_turn_deg)
                }
                Motion::Slide => {
                    Rigid::translation(sense * tu.pin_slide_taus * tau * axis).compose(answer)
                }
            });
        }
    }
    out
}

/// The restart test of `answer` (module docs): the best-fitting pose (tight fine overlap) that
/// a restarted fit ends at away from the answer and fitting as well, or `None` when every
/// restart returns to the answer or fits worse (or the test is off,
/// [`super::Tuning::pin_directions`] 0). Ties go to the earlier restart; the restarts run in
/// parallel, each deterministic.
pub fn restart_test(
    answer: &Rigid,
    source: &PreparedScan,
    target: &PreparedScan,
    params: &AlignParams,
    tau: f64,
) -> Option<Unpinned> {
    let tu = &params.tuning;
    let starts = restarts(answer, source, target, params, tau);
    if starts.is_empty() {
        return None;
    }
    let keypoints = match smoothed_source(source, params) {
        Some(smoothed) => &smoothed.keypoints[..],
        None => &source.keypoints[..],
    };
    let ends: Vec<(Rigid, f64, usize)> = starts
        .par_iter()
        .map(|s| {
            let end = fit_onto_fine(keypoints, target, s, params, tau);
            let fit = fine_fit(source, target, &end.transform, params, tau);
            (end.transform, fit, end.iterations)
        })
        .collect();
    let answer_fit = fine_fit(source, target, answer, params, tau);
    let n = source.fine_points.len().max(1) as f64;
    let centroid = source
        .fine_points
        .iter()
        .fold(Vector3::zeros(), |a, p| a + crate::geometry::vec3(*p))
        / n;
    let away = |p: &Rigid| {
        let (angle, distance) = difference(answer, p, &centroid);
        angle > tu.pin_angle_deg || distance > tu.pin_distance_taus * tau
    };
    let mut best: Option<Unpinned> = None;
    for &(pose, fit, iterations) in &ends {
        if away(&pose)
            && fit >= answer_fit * (1.0 - tu.pin_fit_margin)
            && best.is_none_or(|b| fit > b.fit)
        {
            best = Some(Unpinned {
                pose,
                fit,
                answer_fit,
                iterations,
            });
        }
    }
    best
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::Cloud;

    /// A scan of a closed cylinder (radius 1, height 2, axis z) on a regular grid of about
    /// 0.03 spacing.
    fn cylinder() -> Cloud {
        let mut p = Vec::new();
        for k in 0..200 {
            let a = k as f64 * std::f64::consts::TAU / 200.0;
            for h in 0..=66 {
                p.push([a.cos() as f32, a.sin() as f32, (0.03 * h as f64) as f32]);
            }
        }
        for i in -33..=33 {
            for j in -33..=33 {
                let (x, y) = (0.03 * i as f64, 0.03 * j as f64);
                if x * x + y * y < 0.97 {
                    for z in [0.0, 2.0] {
                        p.push([x as f32, y as f32, z]);
                    }
                }
            }
        }
        Cloud::new([0.0; 3], p)
    }

    /// A scan of the inside corner of three unequal rectangles meeting at right angles (every
    /// motion opposed by a face), same spacing.
    fn corner() -> Cloud {
        let mut p = Vec::new();
        let grid = |n: usize, m: usize| {
            (0..n).flat_map(move |i| (0..m).map(move |j| (0.03 * i as f32, 0.03 * j as f32)))
        };
        p.extend(grid(70, 50).map(|(a, b)| [a, b, 0.0]));
        p.extend(grid(70, 40).map(|(a, b)| [a, 0.0, b + 0.03]));
        p.extend(grid(50, 40).map(|(a, b)| [0.0, a + 0.03, b + 0.03]));
        Cloud::new([0.0; 3], p)
    }

    /// Registered onto itself at the identity (the true pose): the turn about a cylinder's axis
    /// changes nothing it sees (a surface of revolution), so a restart turned about it stays
    /// turned and the answer is not pinned; the corner's faces pull every restart back.
    #[test]
    fn a_surface_of_revolution_is_not_pinned_and_a_corner_is() {
        let params = AlignParams::default();
        let voxel = 0.1;
        let tau = params.inlier_voxels * voxel;
        let cyl = PreparedScan::prepare("cylinder", &cylinder(), &params, voxel).unwrap();
        let u = restart_test(&Rigid::identity(), &cyl, &cyl, &params, tau)
            .expect("the cylinder's turn is not pinned");
        let angle = u.pose.angle_deg();
        assert!(
            angle > params.tuning.pin_angle_deg && angle <= params.tuning.pin_turn_deg + 0.5,
            "{angle}°"
        );
        assert!(u.pose.axis()[2].abs() > 0.99, "axis {:?}", u.pose.axis());
        assert!(u.fit >= u.answer_fit * (1.0 - params.tuning.pin_fit_margin));
        let c = PreparedScan::prepare("corner", &corner(), &params, voxel).unwrap();
        assert_eq!(restart_test(&Rigid::identity(), &c, &c, &params, tau), None);
        let off = AlignParams {
            tuning: crate::align::Tuning {
                pin_directions: 0,
                ..params.tuning
            },
            ..params
        };
        assert_eq!(
            restart_test(&Rigid::identity(), &cyl, &cyl, &off, tau),
            None
        );
    }
}
