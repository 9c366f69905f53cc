//! How well a point-to-plane fit pins each of the six rigid motions, and sampling that pins
//! them as well as the data allows.
//!
//! Method: Gelfand, Ikemoto, Rusinkiewicz & Levoy 2003, "Geometrically stable sampling for the
//! ICP algorithm" (3DIM). A pair (point `p` on the source, target normal `n`) constrains the
//! small motion `x = (ω, t)` through `n·(ω × p + t) = (p × n)·ω + n·t`; the 6×6 matrix
//! `C = Σ v vᵀ` with `v = ((p − c)/L × n, n)` (points about their centroid `c`, scaled by their
//! mean distance `L` so that turns and slides weigh alike) is the fit's normal matrix. Its
//! eigenvectors with small eigenvalues are motions that barely change the residual: the fit is
//! free along them. The condition figure is `λ_max / λ_min`.
//!
//! Stability-aware sampling (same paper, section 4): points are taken, one at a time, from the
//! eigenvector whose accumulated constraint is smallest, in order of how strongly each point
//! constrains it, so that the few points on holes and edges are kept when a plane would drown
//! them.

use nalgebra::{Matrix6, SymmetricEigen, Vector3, Vector6};
use serde::{Deserialize, Serialize};

use super::rigid::Rigid;
use crate::spatial::KdIndex;

/// What a weakly constrained motion looks like.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Motion {
    /// A translation along `axis`.
    Slide,
    /// A rotation about `axis` through `through`.
    Turn,
}

/// One weakly constrained direction of the fit, in TARGET file coordinates.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WeakDirection {
    /// Slide or turn.
    pub motion: Motion,
    /// Unit direction of the slide, or of the turn's axis.
    pub axis: [f64; 3],
    /// A point on the turn's axis (the point closest to the overlap's centroid); for a slide,
    /// the overlap's centroid.
    pub through: [f64; 3],
    /// The direction's eigenvalue over the largest (0 = entirely free, 1 = as firm as the
    /// firmest).
    pub ratio: f64,
}

impl WeakDirection {
    /// One line for people, lengths rounded to 4 significant digits.
    pub fn describe(&self) -> String {
        let v = |a: [f64; 3]| format!("({:.3}, {:.3}, {:.3})", a[0], a[1], a[2]);
        match self.motion {
            Motion::Slide => format!(
                "slides along {} (relative stiffness {:.3})",
                v(self.axis),
                self.ratio
            ),
            Motion::Turn => format!(
                "turns about the axis {} through ({}) (relative stiffness {:.3})",
                v(self.axis),
                self.through.map(|x| format!("{x:.4}")).join(", "),
                self.ratio
            ),
        }
    }
}

/// The constraint analysis of a fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Constraint {
    /// `λ_max / λ_min` of the normal matrix (infinite when a motion is entirely free).
    pub condition: f64,
    /// Eigenvalues over the largest, ascending.
    pub ratios: [f64; 6],
    /// Directions whose ratio is below [`WEAK_RATIO`].
    pub weak: Vec<WeakDirection>,
    /// Pairs used.
    pub pairs: usize,
}

/// A direction is weak when its eigenvalue is below this share of the largest one.
pub const WEAK_RATIO: f64 = 0.02;

/// The constraint rows `v = ((p − c)/L × n, n)` of points `p` with normals `n`.
fn rows(
    points: &[Vector3<f64>],
    normals: &[Vector3<f64>],
) -> (Vec<Vector6<f64>>, Vector3<f64>, f64) {
    let n = points.len().max(1) as f64;
    let c = points.iter().fold(Vector3::zeros(), |a, p| a + p) / n;
    let l = (points.iter().map(|p| (p - c).norm()).sum::<f64>() / n).max(f64::MIN_POSITIVE);
    let v = points
        .iter()
        .zip(normals)
        .map(|(p, nn)| {
            let m = ((p - c) / l).cross(nn);
            Vector6::new(m.x, m.y, m.z, nn.x, nn.y, nn.z)
        })
        .collect();
    (v, c, l)
}

/// Eigen-decomposition of `Σ v vᵀ` (in order of the rows, so deterministic), ascending.
fn eigen(v: &[Vector6<f64>]) -> (Vector6<f64>, Matrix6<f64>) {
    let mut c = Matrix6::zeros();
    for r in v {
        c += r * r.transpose();
    }
    let e = SymmetricEigen::new(c);
    let mut order: Vec<usize> = (0..6).collect();
    order.sort_by(|&a, &b| e.eigenvalues[a].total_cmp(&e.eigenvalues[b]));
    let vals = Vector6::from_iterator(order.iter().map(|&i| e.eigenvalues[i].max(0.0)));
    let mut vecs = Matrix6::zeros();
    for (k, &i) in order.iter().enumerate() {
        vecs.set_column(k, &e.eigenvectors.column(i));
    }
    (vals, vecs)
}

/// Analyses points `p` (already in TARGET's local frame) paired with unit normals `n`;
/// `origin` is TARGET's file origin, added to the reported points.
pub fn analyse(points: &[Vector3<f64>], normals: &[Vector3<f64>], origin: [f64; 3]) -> Constraint {
    let (v, c, l) = rows(points, normals);
    let (vals, vecs) = eigen(&v);
    let top = vals[5].max(f64::MIN_POSITIVE);
    let ratios: [f64; 6] = std::array::from_fn(|k| vals[k] / top);
    let o = Vector3::from(origin);
    let weak = (0..6)
        .filter(|&k| ratios[k] < WEAK_RATIO)
        .map(|k| direction(&vecs.column(k).into_owned(), c, l, o, ratios[k]))
        .collect();
    Constraint {
        condition: if vals[0] > 0.0 {
            top / vals[0]
        } else {
            f64::INFINITY
        },
        ratios,
        weak,
        pairs: points.len(),
    }
}

/// The six motions of the normal matrix of points `p` (TARGET's local frame) with unit normals
/// `n`, weakest first, each described as a slide or a turn like a [`WeakDirection`] (local
/// frame, no origin added; `ratio` is its eigenvalue over the largest).
pub fn motions(points: &[Vector3<f64>], normals: &[Vector3<f64>]) -> Vec<WeakDirection> {
    let (v, c, l) = rows(points, normals);
    let (vals, vecs) = eigen(&v);
    let top = vals[5].max(f64::MIN_POSITIVE);
    (0..6)
        .map(|k| {
            let x = vecs.column(k).into_owned();
            direction(&x, c, l, Vector3::zeros(), vals[k] / top)
        })
        .collect()
}

/// The motion `x = (ω L, t)` (an eigenvector of the normal matrix of points about `c` at mean
/// distance `l`) described as a slide or a turn, reported with `origin` added.
fn direction(
    x: &Vector6<f64>,
    c: Vector3<f64>,
    l: f64,
    origin: Vector3<f64>,
    ratio: f64,
) -> WeakDirection {
    let w = Vector3::new(x[0], x[1], x[2]);
    let t = Vector3::new(x[3], x[4], x[5]);
    if w.norm() < t.norm() {
        let a = signed_axis(t);
        WeakDirection {
            motion: Motion::Slide,
            axis: [a.x, a.y, a.z],
            through: (c + origin).into(),
            ratio,
        }
    } else {
        let omega = w / l;
        let through = c + omega.cross(&t) / omega.norm_squared();
        let a = signed_axis(omega);
        WeakDirection {
            motion: Motion::Turn,
            axis: [a.x, a.y, a.z],
            through: (through + origin).into(),
            ratio,
        }
    }
}

/// For `source` moved by `tf`: the moved points that have a TARGET point within
/// `max_distance`, each with that target point's normal (TARGET's local frame), and the index
/// of each in `source`.
pub fn paired(
    source: &[[f32; 3]],
    target_normals: &[[f32; 3]],
    target_index: &KdIndex,
    tf: &Rigid,
    max_distance: f64,
) -> (Vec<Vector3<f64>>, Vec<Vector3<f64>>, Vec<usize>) {
    let cutoff2 = max_distance * max_distance;
    let mut pts = Vec::new();
    let mut nrm = Vec::new();
    let mut idx = Vec::new();
    for (i, p) in source.iter().enumerate() {
        let q = tf.apply_f32(*p);
        let Some((j, _)) =
            target_index.nearest_within([q.x as f32, q.y as f32, q.z as f32], cutoff2)
        else {
            continue;
        };
        let n = crate::geometry::vec3(target_normals[j]);
        if n.norm_squared() > 0.5 {
            pts.push(q);
            nrm.push(n);
            idx.push(i);
        }
    }
    (pts, nrm, idx)
}

/// Indices of `count` of the points (all if fewer), chosen by stability-aware sampling
/// (Gelfand et al. 2003, section 4): repeatedly the eigenvector with the smallest accumulated
/// constraint takes its next strongest unused point. Deterministic; returned in ascending order.
pub fn stable_sample(
    points: &[Vector3<f64>],
    normals: &[Vector3<f64>],
    count: usize,
) -> Vec<usize> {
    let n = points.len();
    if count >= n {
        return (0..n).collect();
    }
    let (v, _, _) = rows(points, normals);
    let (_, vecs) = eigen(&v);
    let proj: Vec<[f64; 6]> = v
        .iter()
        .map(|r| std::array::from_fn(|k| r.dot(&vecs.column(k)).powi(2)))
        .collect();
    let buckets: Vec<Vec<usize>> = (0..6)
        .map(|k| {
            let mut b: Vec<usize> = (0..n).collect();
            b.sort_by(|&a, &c| proj[c][k].total_cmp(&proj[a][k]).then(a.cmp(&c)));
            b
        })
        .collect();
    let mut next = [0usize; 6];
    let mut used = vec![false; n];
    let mut acc = [0.0f64; 6];
    let mut out = Vec::with_capacity(count);
    while out.len() < count {
        let k = (0..6)
            .min_by(|&a, &b| acc[a].total_cmp(&acc[b]).then(a.cmp(&b)))
            .unwrap();
        while next[k] < n && used[buckets[k][next[k]]] {
            next[k] += 1;
        }
        if next[k] >= n {
            acc[k] = f64::INFINITY;
            continue;
        }
        let i = buckets[k][next[k]];
        used[i] = true;
        out.push(i);
        for (a, p) in acc.iter_mut().zip(proj[i]) {
            *a += p;
        }
    }
    out.sort_unstable();
    out
}

/// `v` normalised, with its largest component (by magnitude) made positive, so that the same
/// weak direction is always reported with the same sign.
fn signed_axis(v: Vector3<f64>) -> Vector3<f64> {
    let a = v.normalize();
    let largest = a
        .iter()
        .copied()
        .fold(0.0, |m: f64, q| if q.abs() > m.abs() { q } else { m });
    if largest < 0.0 { -a } else { a }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Two planes meeting at a right angle along the y axis (a floor z = 0 and a wall x = 0):
    /// nothing opposes a slide along y, and the analysis must say so.
    fn two_planes(with_hole_wall: bool) -> (Vec<Vector3<f64>>, Vec<Vector3<f64>>) {
        let (mut p, mut n) = (Vec::new(), Vec::new());
        for i in 0..40 {
            for j in 0..40 {
                let (a, b) = (0.025 * i as f64 + 0.0125, 0.025 * j as f64);
                p.push(Vector3::new(a, b, 0.0));
                n.push(Vector3::z());
                p.push(Vector3::new(0.0, b, a));
                n.push(Vector3::x());
            }
        }
        if with_hole_wall {
            // The wall of a round hole in the floor: normals point to the hole's axis.
            for k in 0..60 {
                let a = k as f64 * std::f64::consts::TAU / 60.0;
                for h in 0..4 {
                    p.push(Vector3::new(
                        0.5 + 0.05 * a.cos(),
                        0.5 + 0.05 * a.sin(),
                        -0.01 * h as f64,
                    ));
                    n.push(Vector3::new(-a.cos(), -a.sin(), 0.0));
                }
            }
        }
        (p, n)
    }

    #[test]
    fn the_slide_along_two_planes_is_a_weak_direction() {
        let (p, n) = two_planes(false);
        let c = analyse(&p, &n, [100.0, 200.0, 0.0]);
        assert_eq!(c.weak.len(), 1, "{:?}", c.weak);
        let w = &c.weak[0];
        assert_eq!(w.motion, Motion::Slide);
        assert!((w.axis[1] - 1.0).abs() < 1e-6, "{:?}", w.axis);
        assert!(c.condition > 1e6);
    }

    #[test]
    fn a_hole_pins_the_slide_once_sampled_for_stability() {
        let (p, n) = two_planes(true);
        // With every point, the hole's 240 points against 3200 plane points.
        let all = analyse(&p, &n, [0.0; 3]);
        let keep = stable_sample(&p, &n, 400);
        assert_eq!(keep.len(), 400);
        let (sp, sn): (Vec<_>, Vec<_>) = keep.iter().map(|&i| (p[i], n[i])).unzip();
        let sampled = analyse(&sp, &sn, [0.0; 3]);
        assert!(sampled.weak.is_empty(), "{:?}", sampled.weak);
        // The sample keeps the hole wall far above its share of the points.
        let wall = keep.iter().filter(|&&i| i >= 3200).count();
        assert!(wall > 100, "{wall} hole points kept");
        assert!(sampled.ratios[0] > all.ratios[0]);
    }

    #[test]
    fn a_cylinder_turns_about_its_axis() {
        let (mut p, mut n) = (Vec::new(), Vec::new());
        for k in 0..90 {
            let a = k as f64 * std::f64::consts::TAU / 90.0;
            for h in 0..20 {
                p.push(Vector3::new(1.0 + a.cos(), 2.0 + a.sin(), 0.1 * h as f64));
                n.push(Vector3::new(a.cos(), a.sin(), 0.0));
            }
        }
        // Close the ends so that only the turn is free.
        for i in 0..21 {
            for j in 0..21 {
                let (x, y) = (-1.0 + 0.1 * i as f64, -1.0 + 0.1 * j as f64);
                if x * x + y * y < 1.0 {
                    p.push(Vector3::new(1.0 + x, 2.0 + y, 0.0));
                    n.push(-Vector3::z());
                }
            }
        }
        let c = analyse(&p, &n, [0.0; 3]);
        assert_eq!(c.weak.len(), 1, "{:?}", c.weak);
        let w = &c.weak[0];
        assert_eq!(w.motion, Motion::Turn);
        assert!((w.axis[2] - 1.0).abs() < 1e-6);
        assert!((w.through[0] - 1.0).abs() < 1e-6 && (w.through[1] - 2.0).abs() < 1e-6);
    }
}
