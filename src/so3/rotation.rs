//! Rotation parametrisations, uniformly random rotations and a refinable SO(3) grid.
//!
//! Conventions: rotations act on column vectors (`u ↦ R u`, right-handed, counter-clockwise for a
//! positive angle about an axis pointing at the viewer). Unit quaternions are `[w, x, y, z]`,
//! scalar first, `q` and `−q` being the same rotation; functions returning a quaternion choose
//! `w ≥ 0`. A rotation vector is `angle · axis` (radians).

use super::rng::SplitMix64;
use nalgebra::{Matrix3, Vector3};
use std::f64::consts::PI;

/// Rotation matrix of the unit quaternion `q = [w, x, y, z]` (normalised here first; a zero
/// quaternion gives the identity).
pub fn quat_to_matrix(q: [f64; 4]) -> Matrix3<f64> {
    let n = (q[0] * q[0] + q[1] * q[1] + q[2] * q[2] + q[3] * q[3]).sqrt();
    if n == 0.0 || !n.is_finite() {
        return Matrix3::identity();
    }
    let [w, x, y, z] = q.map(|v| v / n);
    Matrix3::new(
        1.0 - 2.0 * (y * y + z * z),
        2.0 * (x * y - w * z),
        2.0 * (x * z + w * y),
        2.0 * (x * y + w * z),
        1.0 - 2.0 * (x * x + z * z),
        2.0 * (y * z - w * x),
        2.0 * (x * z - w * y),
        2.0 * (y * z + w * x),
        1.0 - 2.0 * (x * x + y * y),
    )
}

/// Unit quaternion `[w, x, y, z]` (with `w ≥ 0`) of a rotation matrix (Shepperd's method: the
/// largest of the four squared components is taken from the diagonal, the rest from
/// off-diagonal sums, so the result is accurate for every angle).
pub fn matrix_to_quat(r: &Matrix3<f64>) -> [f64; 4] {
    let t = r.trace();
    let cand = [t, r[(0, 0)], r[(1, 1)], r[(2, 2)]];
    let mut k = 0;
    for i in 1..4 {
        if cand[i] > cand[k] {
            k = i;
        }
    }
    let q = match k {
        0 => {
            let s = (1.0 + t).max(0.0).sqrt() * 2.0;
            [
                0.25 * s,
                (r[(2, 1)] - r[(1, 2)]) / s,
                (r[(0, 2)] - r[(2, 0)]) / s,
                (r[(1, 0)] - r[(0, 1)]) / s,
            ]
        }
        1 => {
            let s = (1.0 + r[(0, 0)] - r[(1, 1)] - r[(2, 2)]).max(0.0).sqrt() * 2.0;
            [
                (r[(2, 1)] - r[(1, 2)]) / s,
                0.25 * s,
                (r[(0, 1)] + r[(1, 0)]) / s,
                (r[(0, 2)] + r[(2, 0)]) / s,
            ]
        }
        2 => {
            let s = (1.0 - r[(0, 0)] + r[(1, 1)] - r[(2, 2)]).max(0.0).sqrt() * 2.0;
            [
                (r[(0, 2)] - r[(2, 0)]) / s,
                (r[(0, 1)] + r[(1, 0)]) / s,
                0.25 * s,
                (r[(1, 2)] + r[(2, 1)]) / s,
            ]
        }
        _ => {
            let s = (1.0 - r[(0, 0)] - r[(1, 1)] + r[(2, 2)]).max(0.0).sqrt() * 2.0;
            [
                (r[(1, 0)] - r[(0, 1)]) / s,
                (r[(0, 2)] + r[(2, 0)]) / s,
                (r[(1, 2)] + r[(2, 1)]) / s,
                0.25 * s,
            ]
        }
    };
    let n = (q[0] * q[0] + q[1] * q[1] + q[2] * q[2] + q[3] * q[3]).sqrt();
    let s = if q[0] < 0.0 { -1.0 / n } else { 1.0 / n };
    q.map(|v| v * s)
}

/// Rotation by `angle` (radians) about `axis` (normalised here; a zero axis gives the identity).
pub fn axis_angle_to_matrix(axis: [f64; 3], angle: f64) -> Matrix3<f64> {
    let a = Vector3::from(axis);
    let n = a.norm();
    if n == 0.0 || !n.is_finite() {
        return Matrix3::identity();
    }
    let (s, c) = (angle / 2.0).sin_cos();
    let v = a * (s / n);
    quat_to_matrix([c, v.x, v.y, v.z])
}

/// Unit axis and angle in `[0, π]` of a rotation matrix (axis `+z` for the identity).
pub fn matrix_to_axis_angle(r: &Matrix3<f64>) -> ([f64; 3], f64) {
    let q = matrix_to_quat(r);
    let s = (q[1] * q[1] + q[2] * q[2] + q[3] * q[3]).sqrt();
    if s < 1e-300 {
        return ([0.0, 0.0, 1.0], 0.0);
    }
    ([q[1] / s, q[2] / s, q[3] / s], 2.0 * s.atan2(q[0]))
}

/// Exponential map: rotation of the rotation vector `w` (`|w|` = angle).
pub fn rotation_vector_to_matrix(w: [f64; 3]) -> Matrix3<f64> {
    let t = (w[0] * w[0] + w[1] * w[1] + w[2] * w[2]).sqrt();
    if t < 1e-300 {
        return Matrix3::identity();
    }
    axis_angle_to_matrix(w, t)
}

/// Logarithm map: rotation vector (angle in `[0, π]` times unit axis) of a rotation matrix.
pub fn matrix_to_rotation_vector(r: &Matrix3<f64>) -> [f64; 3] {
    let (a, t) = matrix_to_axis_angle(r);
    a.map(|v| v * t)
}

/// Rotation by `angle` about `x`.
pub fn rot_x(angle: f64) -> Matrix3<f64> {
    let (s, c) = angle.sin_cos();
    Matrix3::new(1.0, 0.0, 0.0, 0.0, c, -s, 0.0, s, c)
}

/// Rotation by `angle` about `y`.
pub fn rot_y(angle: f64) -> Matrix3<f64> {
    let (s, c) = angle.sin_cos();
    Matrix3::new(c, 0.0, s, 0.0, 1.0, 0.0, -s, 0.0, c)
}

/// Rotation by `angle` about `z`.
pub fn rot_z(angle: f64) -> Matrix3<f64> {
    let (s, c) = angle.sin_cos();
    Matrix3::new(c, -s, 0.0, s, c, 0.0, 0.0, 0.0, 1.0)
}

/// `R_z(α) R_y(β) R_z(γ)` (z-y-z Euler angles, rotating frame read right to left).
pub fn euler_zyz(alpha: f64, beta: f64, gamma: f64) -> Matrix3<f64> {
    rot_z(alpha) * rot_y(beta) * rot_z(gamma)
}

/// Geodesic distance on SO(3): the angle in `[0, π]` of `aᵀ b`, radians. Accurate near 0 and π
/// (uses `atan2` of the skew and symmetric parts rather than `acos` of the trace).
pub fn geodesic_angle(a: &Matrix3<f64>, b: &Matrix3<f64>) -> f64 {
    let m = a.transpose() * b;
    let c = 0.5 * (m.trace() - 1.0);
    let v = Vector3::new(
        m[(2, 1)] - m[(1, 2)],
        m[(0, 2)] - m[(2, 0)],
        m[(1, 0)] - m[(0, 1)],
    );
    (0.5 * v.norm()).atan2(c)
}

/// Geodesic angle between the rotations of two unit quaternions: `2 acos |q₁·q₂|`, computed as
/// `4 atan2(|q₁ − s q₂|, |q₁ + s q₂|)` with `s = sign(q₁·q₂)` (accurate for small angles).
pub fn quat_angle(a: [f64; 4], b: [f64; 4]) -> f64 {
    let d: f64 = (0..4).map(|i| a[i] * b[i]).sum();
    let s = if d < 0.0 { -1.0 } else { 1.0 };
    let (mut p, mut m) = (0.0, 0.0);
    for i in 0..4 {
        p += (a[i] + s * b[i]).powi(2);
        m += (a[i] - s * b[i]).powi(2);
    }
    4.0 * m.sqrt().atan2(p.sqrt())
}

/// Uniformly random unit quaternion (Haar measure on SO(3)), by Shoemake's method ("Uniform
/// random rotations", Graphics Gems III, 1992): three uniforms `u₁, u₂, u₃` give
/// `(√(1−u₁) sin 2πu₂, √(1−u₁) cos 2πu₂, √u₁ sin 2πu₃, √u₁ cos 2πu₃)`.
pub fn random_quaternion(rng: &mut SplitMix64) -> [f64; 4] {
    let (u1, u2, u3) = (rng.next_f64(), rng.next_f64(), rng.next_f64());
    let (a, b) = ((1.0 - u1).sqrt(), u1.sqrt());
    let (s2, c2) = (2.0 * PI * u2).sin_cos();
    let (s3, c3) = (2.0 * PI * u3).sin_cos();
    // Shoemake's (x, y, z, w) = (a s2, a c2, b s3, b c3), stored scalar first.
    let q = [b * c3, a * s2, a * c2, b * s3];
    if q[0] < 0.0 { q.map(|v| -v) } else { q }
}

/// Uniformly random rotation matrix (see [`random_quaternion`]).
pub fn random_rotation(rng: &mut SplitMix64) -> Matrix3<f64> {
    quat_to_matrix(random_quaternion(rng))
}

/// Centre `(z, φ)` of pixel `p` of the HEALPix ring scheme with resolution `nside`
/// (Górski et al., ApJ 622, 759, 2005): `12·nside²` pixels of equal area, on iso-latitude rings.
/// `nside = 0` is treated as 1; `p` is taken modulo the number of pixels.
pub fn healpix_ring_centre(nside: usize, p: usize) -> (f64, f64) {
    let nside = nside.max(1);
    let p = p % (12 * nside * nside);
    let ns = nside as f64;
    let npix = 12 * nside * nside;
    let ncap = 2 * nside * (nside - 1);
    if p < ncap {
        let i = ((1.0 + (1.0 + 2.0 * p as f64).sqrt()) / 2.0).floor() as usize;
        let j = p + 1 - 2 * i * (i - 1);
        let z = 1.0 - (i * i) as f64 / (3.0 * ns * ns);
        (z, PI / (2.0 * i as f64) * (j as f64 - 0.5))
    } else if p < npix - ncap {
        let q = p - ncap;
        let i = q / (4 * nside) + nside;
        let j = q % (4 * nside) + 1;
        let s = ((i + 1 - nside) % 2) as f64;
        let z = 4.0 / 3.0 - 2.0 * i as f64 / (3.0 * ns);
        (z, PI / (2.0 * ns) * (j as f64 - s / 2.0))
    } else {
        let q = npix - p;
        let i = ((1.0 + (2.0 * q as f64 - 1.0).sqrt()) / 2.0).floor() as usize;
        let j = 4 * i + 1 - (q - 2 * i * (i - 1));
        let z = -1.0 + (i * i) as f64 / (3.0 * ns * ns);
        (z, PI / (2.0 * i as f64) * (j as f64 - 0.5))
    }
}

/// A deterministic, roughly uniform grid on SO(3) built on the Hopf fibration
/// (Yershova, Jain, LaValle & Mitchell, "Generating uniform incremental grids on SO(3) using the
/// Hopf fibration", IJRR 29, 2010).
///
/// A rotation `R` is split into the direction `R e_z ∈ S²` (the base of the fibration) and a
/// spin about it (the circle fibre): `R = R_z(φ) R_y(θ) R_z(ψ)`. Level `k` takes the
/// `12·4^k` HEALPix pixel centres (equal-area) for `(θ, φ)` and `6·2^k` equally spaced
/// `ψ = 2π(j + ½)/(6·2^k)`, so `72·8^k` rotations; each level subdivides the cells of the
/// previous one (every HEALPix pixel in four, every circle step in two), so the spacing halves.
///
/// Covering radius (largest geodesic distance from any rotation to its nearest grid point),
/// measured with [`measure_covering_radius`] over 20 000 Shoemake-random rotations (seed 1):
/// see [`HOPF_COVERING_RADIUS_DEG`].
#[derive(Clone, Debug)]
pub struct HopfGrid {
    level: u32,
    quats: Vec<[f64; 4]>,
    mats: Vec<Matrix3<f64>>,
}

/// Measured covering radius of [`HopfGrid`] levels 0, 1, 2, 3 in degrees: 50.04°, 27.15°, 13.20°,
/// 6.26° (the largest nearest-grid distance of 20 000 random rotations, seed 1, printed by
/// `cargo run --release --example so3_covering`; an empirical lower bound of the true radius).
/// Each level roughly halves it.
pub const HOPF_COVERING_RADIUS_DEG: [f64; 4] = [50.04, 27.15, 13.20, 6.26];

impl HopfGrid {
    /// The grid of refinement `level` (`72·8^level` rotations; levels above 5 are clamped to 5,
    /// 2 359 296 rotations, about 250 MB; level ≤ 3 suits most uses).
    pub fn new(level: u32) -> Self {
        let level = level.min(5);
        let nside = 1usize << level;
        let npix = 12 * nside * nside;
        let npsi = 6 * nside;
        let mut quats = Vec::with_capacity(npix * npsi);
        let mut mats = Vec::with_capacity(npix * npsi);
        for p in 0..npix {
            let (z, phi) = healpix_ring_centre(nside, p);
            let theta = z.clamp(-1.0, 1.0).acos();
            let base = rot_z(phi) * rot_y(theta);
            for j in 0..npsi {
                let psi = 2.0 * PI * (j as f64 + 0.5) / npsi as f64;
                let r = base * rot_z(psi);
                quats.push(matrix_to_quat(&r));
                mats.push(r);
            }
        }
        HopfGrid { level, quats, mats }
    }

    /// Refinement level.
    pub fn level(&self) -> u32 {
        self.level
    }

    /// Number of rotations.
    pub fn len(&self) -> usize {
        self.mats.len()
    }

    /// Whether the grid is empty (never, for a constructed grid).
    pub fn is_empty(&self) -> bool {
        self.mats.is_empty()
    }

    /// Rotation matrices.
    pub fn matrices(&self) -> &[Matrix3<f64>] {
        &self.mats
    }

    /// Unit quaternions `[w, x, y, z]`, `w ≥ 0`, in the order of [`HopfGrid::matrices`].
    pub fn quaternions(&self) -> &[[f64; 4]] {
        &self.quats
    }

    /// Index of the grid rotation nearest to `q` and its geodesic distance (radians).
    pub fn nearest(&self, q: [f64; 4]) -> (usize, f64) {
        let mut best = (0, -1.0);
        for (i, g) in self.quats.iter().enumerate() {
            let d = (g[0] * q[0] + g[1] * q[1] + g[2] * q[2] + g[3] * q[3]).abs();
            if d > best.1 {
                best = (i, d);
            }
        }
        (best.0, quat_angle(self.quats[best.0], q))
    }
}

/// Largest distance (radians) from `samples` Shoemake-random rotations (from `seed`) to their
/// nearest grid rotation: an empirical estimate (from below) of the grid's covering radius.
pub fn measure_covering_radius(grid: &HopfGrid, samples: usize, seed: u64) -> f64 {
    let mut rng = SplitMix64::new(seed);
    (0..samples)
        .map(|_| grid.nearest(random_quaternion(&mut rng)).1)
        .fold(0.0, f64::max)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(a: &Matrix3<f64>, b: &Matrix3<f64>, tol: f64) -> bool {
        (a - b).abs().max() < tol
    }

    #[test]
    fn round_trips() {
        let seed = 4;
        let mut rng = SplitMix64::new(seed);
        for _ in 0..200 {
            let r = random_rotation(&mut rng);
            assert!(close(&(r.transpose() * r), &Matrix3::identity(), 1e-14));
            assert!((r.determinant() - 1.0).abs() < 1e-14);
            assert!(
                close(&quat_to_matrix(matrix_to_quat(&r)), &r, 1e-14),
                "seed {seed}"
            );
            let w = matrix_to_rotation_vector(&r);
            assert!(
                close(&rotation_vector_to_matrix(w), &r, 1e-13),
                "seed {seed}"
            );
            let s = random_rotation(&mut rng);
            let (qa, qb) = (matrix_to_quat(&r), matrix_to_quat(&s));
            assert!((geodesic_angle(&r, &s) - quat_angle(qa, qb)).abs() < 1e-12);
        }
    }

    #[test]
    fn elementary_rotations() {
        // R_z(90°) maps x to y (right-handed).
        let r = rot_z(PI / 2.0);
        assert!((r * Vector3::x() - Vector3::y()).norm() < 1e-15);
        assert!(close(
            &axis_angle_to_matrix([0.0, 0.0, 2.0], PI / 2.0),
            &r,
            1e-15
        ));
        assert!(close(
            &axis_angle_to_matrix([1.0, 0.0, 0.0], 0.3),
            &rot_x(0.3),
            1e-15
        ));
        assert!(close(
            &axis_angle_to_matrix([0.0, 1.0, 0.0], 0.3),
            &rot_y(0.3),
            1e-15
        ));
        assert!((geodesic_angle(&Matrix3::identity(), &rot_y(3.0)) - 3.0).abs() < 1e-14);
        assert!((geodesic_angle(&Matrix3::identity(), &rot_y(1e-9)) - 1e-9).abs() < 1e-20);
        let (ax, an) = matrix_to_axis_angle(&rot_x(PI));
        assert!((an - PI).abs() < 1e-14 && (ax[0].abs() - 1.0).abs() < 1e-14);
    }

    /// Shoemake rotations are uniform: the rotation angle θ of a Haar-random rotation has
    /// density (1 − cos θ)/π on [0, π], so E[θ] = π/2 + 2/π (from memory; follows by integrating
    /// θ(1 − cos θ)/π), and the rotated z axis is uniform on the sphere (mean 0).
    #[test]
    fn random_rotations_are_uniform() {
        let mut rng = SplitMix64::new(8);
        let n = 50_000;
        let (mut s, mut zs) = (0.0, Vector3::zeros());
        for _ in 0..n {
            let r = random_rotation(&mut rng);
            s += matrix_to_axis_angle(&r).1;
            zs += r * Vector3::z();
        }
        let mean = s / n as f64;
        assert!((mean - (PI / 2.0 + 2.0 / PI)).abs() < 0.01, "{mean}");
        assert!(zs.norm() / (n as f64) < 0.01);
    }

    /// Base-resolution centres (nside = 1): rings at z = 2/3, 0, −2/3 with four pixels each,
    /// the polar rings starting at φ = π/4 and the equatorial one at φ = π/2 (from memory, the
    /// base-pixel layout of Górski et al. 2005, fig. 3).
    #[test]
    fn healpix_base_pixels() {
        for p in 0..12 {
            let (z, phi) = healpix_ring_centre(1, p);
            let ring = p / 4;
            let want_z = [2.0 / 3.0, 0.0, -2.0 / 3.0][ring];
            let want_phi = if ring == 1 {
                PI / 2.0 * (p % 4 + 1) as f64
            } else {
                PI / 4.0 + PI / 2.0 * (p % 4) as f64
            };
            assert!(
                (z - want_z).abs() < 1e-15 && (phi - want_phi).abs() < 1e-15,
                "pixel {p}: {z} {phi}"
            );
        }
    }

    #[test]
    fn healpix_pixels_cover_equal_areas() {
        // Mean z of equal-area pixel centres is 0, and all 12·nside² centres are distinct.
        for nside in [1usize, 2, 4, 8] {
            let n = 12 * nside * nside;
            let c: Vec<(f64, f64)> = (0..n).map(|p| healpix_ring_centre(nside, p)).collect();
            let mz: f64 = c.iter().map(|p| p.0).sum::<f64>() / n as f64;
            assert!(mz.abs() < 1e-12);
            // rings: number of pixels with z > 0 is half of those not on the equator
            let north = c.iter().filter(|p| p.0 > 1e-12).count();
            let south = c.iter().filter(|p| p.0 < -1e-12).count();
            assert_eq!(north, south);
            // Every pixel has area 4π/n: the fraction of centres above z0 approximates the cap
            // area fraction (1 − z0)/2.
            let above = c.iter().filter(|p| p.0 > 0.5).count() as f64 / n as f64;
            assert!(
                (above - 0.25).abs() < 0.5 / nside as f64,
                "nside {nside}: {above}"
            );
        }
    }

    #[test]
    fn grid_sizes_and_covering() {
        for level in 0..3u32 {
            let g = HopfGrid::new(level);
            assert_eq!(g.len(), 72 * 8usize.pow(level));
            let r = measure_covering_radius(&g, 2000, 1).to_degrees();
            let documented = HOPF_COVERING_RADIUS_DEG[level as usize];
            // a smaller sample can only find a smaller maximum
            assert!(
                r <= documented + 1e-9 && r > 0.8 * documented,
                "level {level}: {r}"
            );
        }
    }
}
