//! Rigid and similarity transforms, and closed-form fits between matched point sets.
//!
//! A [`Rigid`] maps a point `p` to `R p + t` (rotation acting on column vectors). Two
//! independent closed-form least-squares fits are provided: [`umeyama`] (SVD of the
//! cross-covariance, optional scale; S. Umeyama, IEEE TPAMI 13(4), 1991) and [`horn`] (unit
//! quaternion from the largest eigenvector of a 4×4 symmetric matrix; B. K. P. Horn, JOSA A
//! 4(4), 1987). Both accept per-pair weights.

use nalgebra::{
    DMatrix, DVector, Matrix3, Matrix4, Rotation3, SymmetricEigen, UnitQuaternion, Vector3,
};

/// A rigid transform `p ↦ R p + t`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Rigid {
    /// Proper rotation matrix (orthonormal, determinant +1).
    pub rotation: Matrix3<f64>,
    /// Translation, applied after the rotation.
    pub translation: Vector3<f64>,
}

impl Default for Rigid {
    fn default() -> Self {
        Rigid::identity()
    }
}

impl Rigid {
    /// The identity transform.
    pub fn identity() -> Self {
        Rigid {
            rotation: Matrix3::identity(),
            translation: Vector3::zeros(),
        }
    }

    /// A transform from a rotation matrix and a translation.
    pub fn new(rotation: Matrix3<f64>, translation: Vector3<f64>) -> Self {
        Rigid {
            rotation,
            translation,
        }
    }

    /// Applies the transform to a point.
    #[inline]
    pub fn apply(&self, p: &Vector3<f64>) -> Vector3<f64> {
        self.rotation * p + self.translation
    }

    /// Applies the rotation only (for directions and normals).
    #[inline]
    pub fn rotate(&self, d: &Vector3<f64>) -> Vector3<f64> {
        self.rotation * d
    }

    /// A translation only.
    pub fn translation(t: Vector3<f64>) -> Self {
        Rigid::new(Matrix3::identity(), t)
    }

    /// `self` followed by a turn of `deg` degrees (right-handed) about the line through
    /// `through` along `axis` (need not be unit; the zero vector gives `self`).
    pub fn turned_about(&self, axis: &Vector3<f64>, through: &Vector3<f64>, deg: f64) -> Rigid {
        let Some(dir) = nalgebra::Unit::try_new(*axis, f64::MIN_POSITIVE) else {
            return *self;
        };
        let r = *Rotation3::from_axis_angle(&dir, deg.to_radians()).matrix();
        Rigid::new(
            r * self.rotation,
            r * (self.translation - through) + through,
        )
    }

    /// Applies the transform to an f32 point, computing in f64.
    #[inline]
    pub fn apply_f32(&self, p: [f32; 3]) -> Vector3<f64> {
        self.apply(&super::vec3(p))
    }

    /// `self ∘ other`: first `other`, then `self`.
    pub fn compose(&self, other: &Rigid) -> Rigid {
        Rigid {
            rotation: self.rotation * other.rotation,
            translation: self.rotation * other.translation + self.translation,
        }
    }

    /// The inverse transform.
    pub fn inverse(&self) -> Rigid {
        let rt = self.rotation.transpose();
        Rigid {
            rotation: rt,
            translation: -(rt * self.translation),
        }
    }

    /// Re-expresses a transform between local frames as one between global frames:
    /// given `self` mapping `x_s − source_origin` to `x_t − target_origin`, returns the
    /// transform mapping `x_s` to `x_t`.
    pub fn between_origins(&self, source_origin: [f64; 3], target_origin: [f64; 3]) -> Rigid {
        let os = Vector3::from(source_origin);
        let ot = Vector3::from(target_origin);
        Rigid {
            rotation: self.rotation,
            translation: self.translation + ot - self.rotation * os,
        }
    }

    /// The row-major 4×4 homogeneous matrix.
    pub fn to_rows(&self) -> [[f64; 4]; 4] {
        let r = &self.rotation;
        let t = &self.translation;
        [
            [r[(0, 0)], r[(0, 1)], r[(0, 2)], t[0]],
            [r[(1, 0)], r[(1, 1)], r[(1, 2)], t[1]],
            [r[(2, 0)], r[(2, 1)], r[(2, 2)], t[2]],
            [0.0, 0.0, 0.0, 1.0],
        ]
    }

    /// From a row-major 4×4 matrix whose upper-left 3×3 block is a rotation. The block is
    /// re-orthonormalised (nearest rotation), so small rounding in a file does no harm; `None`
    /// when the last row is not `0 0 0 1` or the block is far from a rotation.
    pub fn from_rows(m: &[[f64; 4]; 4]) -> Option<Rigid> {
        let last_ok = m[3][0].abs() < 1e-9
            && m[3][1].abs() < 1e-9
            && m[3][2].abs() < 1e-9
            && (m[3][3] - 1.0).abs() < 1e-9;
        if !last_ok {
            return None;
        }
        let r = Matrix3::from_fn(|i, j| m[i][j]);
        let fixed = nearest_rotation(&r)?;
        if (fixed - r).norm() > 1e-3 {
            return None;
        }
        Some(Rigid::new(fixed, Vector3::new(m[0][3], m[1][3], m[2][3])))
    }

    /// The homogeneous 4×4 matrix.
    pub fn to_matrix4(&self) -> Matrix4<f64> {
        Matrix4::from_fn(|i, j| self.to_rows()[i][j])
    }

    /// Rotation angle in degrees, in `[0, 180]`.
    pub fn angle_deg(&self) -> f64 {
        rotation_angle(&self.rotation).to_degrees()
    }

    /// Unit rotation axis (right-hand rule); `[0, 0, 1]` for the identity.
    pub fn axis(&self) -> [f64; 3] {
        let rot = Rotation3::from_matrix_unchecked(self.rotation);
        match rot.axis() {
            Some(a) => [a[0], a[1], a[2]],
            None => [0.0, 0.0, 1.0],
        }
    }
}

/// Angle of a rotation matrix, radians, in `[0, π]`, computed stably from both the trace and
/// the skew part.
pub fn rotation_angle(r: &Matrix3<f64>) -> f64 {
    let c = (r.trace() - 1.0) * 0.5;
    let s = 0.5
        * Vector3::new(
            r[(2, 1)] - r[(1, 2)],
            r[(0, 2)] - r[(2, 0)],
            r[(1, 0)] - r[(0, 1)],
        )
        .norm();
    s.atan2(c)
}

/// Geodesic angle between two rotations, degrees.
pub fn rotation_error_deg(a: &Matrix3<f64>, b: &Matrix3<f64>) -> f64 {
    rotation_angle(&(a.transpose() * b)).to_degrees()
}

/// The proper rotation nearest to `m` in the Frobenius norm (`None` for a non-finite input).
pub fn nearest_rotation(m: &Matrix3<f64>) -> Option<Matrix3<f64>> {
    if !m.iter().all(|v| v.is_finite()) {
        return None;
    }
    let svd = m.svd(true, true);
    let (u, vt) = (svd.u?, svd.v_t?);
    let d = (u * vt).determinant().signum();
    let s = Matrix3::from_diagonal(&Vector3::new(1.0, 1.0, d));
    Some(u * s * vt)
}

/// True for a number above zero (false for NaN).
fn positive(x: f64) -> bool {
    x > 0.0
}

/// True for a number at or above zero (false for NaN).
fn non_negative(x: f64) -> bool {
    x >= 0.0
}

/// A similarity transform `p ↦ c R p + t`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Similarity {
    /// Scale factor `c`.
    pub scale: f64,
    /// The rigid part (rotation and translation).
    pub rigid: Rigid,
}

fn weighted_means(
    src: &[Vector3<f64>],
    dst: &[Vector3<f64>],
    weights: Option<&[f64]>,
) -> Option<(Vector3<f64>, Vector3<f64>, f64)> {
    if src.len() != dst.len() || src.is_empty() {
        return None;
    }
    if let Some(w) = weights
        && (w.len() != src.len() || w.iter().any(|v| !non_negative(*v)))
    {
        return None;
    }
    let w = |i: usize| weights.map_or(1.0, |w| w[i]);
    let mut total = 0.0;
    let mut ms = Vector3::zeros();
    let mut md = Vector3::zeros();
    for i in 0..src.len() {
        total += w(i);
        ms += w(i) * src[i];
        md += w(i) * dst[i];
    }
    if !positive(total) {
        return None;
    }
    Some((ms / total, md / total, total))
}

/// Least-squares similarity transform in any dimension `dim` (Umeyama 1991): points are rows of
/// `src` and `dst` (row-major, `dim` values each). Minimises `Σ wᵢ ‖dstᵢ − (c R srcᵢ + t)‖²`
/// over proper rotations `R` (the reflection guard `S = diag(1, …, 1, det U det V)` applies to
/// the smallest singular value), scale `c` (1 when `with_scale` is false) and translation `t`.
/// Returns `(c, R, t)`; `None` on mismatched lengths, no points, a negative or all-zero weight,
/// or coincident source points.
pub fn umeyama_dim(
    dim: usize,
    src: &[f64],
    dst: &[f64],
    weights: Option<&[f64]>,
    with_scale: bool,
) -> Option<(f64, DMatrix<f64>, DVector<f64>)> {
    if dim == 0 || src.len() != dst.len() || src.is_empty() || !src.len().is_multiple_of(dim) {
        return None;
    }
    let n = src.len() / dim;
    let w = |i: usize| weights.map_or(1.0, |w| w[i]);
    if let Some(ws) = weights
        && (ws.len() != n || ws.iter().any(|v| !non_negative(*v)))
    {
        return None;
    }
    let total: f64 = (0..n).map(w).sum();
    if !positive(total) {
        return None;
    }
    let row = |m: &[f64], i: usize| DVector::from_column_slice(&m[i * dim..(i + 1) * dim]);
    let mut ms = DVector::zeros(dim);
    let mut md = DVector::zeros(dim);
    for i in 0..n {
        ms += w(i) * row(src, i);
        md += w(i) * row(dst, i);
    }
    ms /= total;
    md /= total;
    let mut cov = DMatrix::zeros(dim, dim);
    let mut var_s = 0.0;
    for i in 0..n {
        let a = row(src, i) - &ms;
        let b = row(dst, i) - &md;
        cov += w(i) * &b * a.transpose();
        var_s += w(i) * a.norm_squared();
    }
    cov /= total;
    var_s /= total;
    if !positive(var_s) || !cov.iter().all(|v| v.is_finite()) {
        return None;
    }
    let svd = cov.svd(true, true);
    let (u, vt) = (svd.u?, svd.v_t?);
    // nalgebra sorts singular values in decreasing order: the last one is the smallest.
    let d = (u.determinant() * vt.determinant()).signum();
    let mut s = DVector::from_element(dim, 1.0);
    s[dim - 1] = d;
    let rotation = &u * DMatrix::from_diagonal(&s) * &vt;
    let scale = if with_scale {
        svd.singular_values.dot(&s) / var_s
    } else {
        1.0
    };
    let translation = &md - scale * &rotation * &ms;
    Some((scale, rotation, translation))
}

/// [`umeyama_dim`] in 3-D: the least-squares similarity (or rigid, when `with_scale` is false)
/// transform taking `src` onto `dst`.
pub fn umeyama(
    src: &[Vector3<f64>],
    dst: &[Vector3<f64>],
    weights: Option<&[f64]>,
    with_scale: bool,
) -> Option<Similarity> {
    if src.len() != dst.len() {
        return None;
    }
    let flat = |p: &[Vector3<f64>]| p.iter().flat_map(|v| [v.x, v.y, v.z]).collect::<Vec<_>>();
    let (scale, r, t) = umeyama_dim(3, &flat(src), &flat(dst), weights, with_scale)?;
    Some(Similarity {
        scale,
        rigid: Rigid::new(
            Matrix3::from_fn(|i, j| r[(i, j)]),
            Vector3::new(t[0], t[1], t[2]),
        ),
    })
}

/// Least-squares rigid transform taking `src` onto `dst` by Horn's unit-quaternion method
/// (1987): the rotation is the eigenvector of the largest eigenvalue of the symmetric 4×4
/// matrix built from the weighted cross-covariance. Same failure cases as [`umeyama`].
pub fn horn(src: &[Vector3<f64>], dst: &[Vector3<f64>], weights: Option<&[f64]>) -> Option<Rigid> {
    let (ms, md, _) = weighted_means(src, dst, weights)?;
    let w = |i: usize| weights.map_or(1.0, |w| w[i]);
    // M = Σ w a bᵀ with a = src − mean, b = dst − mean; S_xy = M[(0,1)] etc.
    let mut m = Matrix3::zeros();
    let mut spread = 0.0;
    for i in 0..src.len() {
        let a = src[i] - ms;
        let b = dst[i] - md;
        m += w(i) * a * b.transpose();
        spread += w(i) * a.norm_squared();
    }
    if !positive(spread) || !m.iter().all(|v| v.is_finite()) {
        return None;
    }
    let (sxx, sxy, sxz) = (m[(0, 0)], m[(0, 1)], m[(0, 2)]);
    let (syx, syy, syz) = (m[(1, 0)], m[(1, 1)], m[(1, 2)]);
    let (szx, szy, szz) = (m[(2, 0)], m[(2, 1)], m[(2, 2)]);
    let n = Matrix4::new(
        sxx + syy + szz,
        syz - szy,
        szx - sxz,
        sxy - syx,
        syz - szy,
        sxx - syy - szz,
        sxy + syx,
        szx + sxz,
        szx - sxz,
        sxy + syx,
        -sxx + syy - szz,
        syz + szy,
        sxy - syx,
        szx + sxz,
        syz + szy,
        -sxx - syy + szz,
    );
    let eig = SymmetricEigen::new(n);
    let (imax, _) = eig
        .eigenvalues
        .iter()
        .enumerate()
        .max_by(|a, b| a.1.total_cmp(b.1))?;
    let q = eig.eigenvectors.column(imax);
    let quat = UnitQuaternion::from_quaternion(nalgebra::Quaternion::new(q[0], q[1], q[2], q[3]));
    let rotation = *quat.to_rotation_matrix().matrix();
    Some(Rigid::new(rotation, md - rotation * ms))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::so3::rng::SplitMix64;
    use crate::so3::rotation::random_rotation;

    /// A turn about a line keeps the line's points fixed and moves the others on circles about
    /// it (the definition of a rotation about an axis, common practice).
    #[test]
    fn turned_about_keeps_the_axis_fixed() {
        let pose = Rigid::new(
            *Rotation3::from_axis_angle(&Vector3::y_axis(), 0.4).matrix(),
            Vector3::new(1.0, -2.0, 0.5),
        );
        let through = Vector3::new(3.0, 1.0, -1.0);
        let axis = Vector3::new(0.0, 0.0, 2.0);
        let turned = pose.turned_about(&axis, &through, 90.0);
        // A point whose image under `pose` lies on the axis stays there.
        let on = pose
            .inverse()
            .apply(&(through + Vector3::new(0.0, 0.0, 5.0)));
        assert!((turned.apply(&on) - pose.apply(&on)).norm() < 1e-12);
        // A point one unit off the axis along x is carried a quarter turn to +y.
        let off = pose.inverse().apply(&(through + Vector3::x()));
        assert!((turned.apply(&off) - (through + Vector3::y())).norm() < 1e-12);
        assert_eq!(pose.turned_about(&Vector3::zeros(), &through, 90.0), pose);
    }

    fn v(x: f64, y: f64, z: f64) -> Vector3<f64> {
        Vector3::new(x, y, z)
    }

    /// Umeyama (1991), worked example: (0,0), (1,0), (0,2) onto (0,0), (−1,0), (0,2) gives
    /// c = 0.7211 and t = (−0.8, 0.4) in the plane. The rotation quoted with it from memory,
    /// [[0.8321, −0.5547], [0.5547, 0.8321]], is inconsistent with that t (it would need
    /// t = (−0.267, 0.133)); the rotation that goes with c and t is its transpose, a turn by
    /// −33.69°. A brute-force scan over planar rotations confirms the optimum independently.
    #[test]
    fn umeyama_worked_example_in_the_plane() {
        let src = [0.0, 0.0, 1.0, 0.0, 0.0, 2.0];
        let dst = [0.0, 0.0, -1.0, 0.0, 0.0, 2.0];
        let (c, r, t) = umeyama_dim(2, &src, &dst, None, true).unwrap();
        assert!((c - 0.7211).abs() < 1e-4, "c = {c}");
        let want = [[0.8321, 0.5547], [-0.5547, 0.8321]];
        for i in 0..2 {
            for j in 0..2 {
                assert!((r[(i, j)] - want[i][j]).abs() < 1e-4, "R = {r}");
            }
        }
        assert!(
            (t[0] + 0.8).abs() < 1e-4 && (t[1] - 0.4).abs() < 1e-4,
            "t = {t}"
        );
        // Independent check: for each angle the optimal c and t are closed-form given R; scan
        // the angle in 0.01° steps and find the smallest residual.
        let cost = |theta: f64| {
            let (co, si) = (theta.cos(), theta.sin());
            let rot = |x: f64, y: f64| (co * x - si * y, si * x + co * y);
            let (ms, md) = ((1.0 / 3.0, 2.0 / 3.0), (-1.0 / 3.0, 2.0 / 3.0));
            let pts: Vec<((f64, f64), (f64, f64))> = (0..3)
                .map(|i| {
                    let a = rot(src[2 * i] - ms.0, src[2 * i + 1] - ms.1);
                    (a, (dst[2 * i] - md.0, dst[2 * i + 1] - md.1))
                })
                .collect();
            let num: f64 = pts.iter().map(|(a, b)| a.0 * b.0 + a.1 * b.1).sum();
            let den: f64 = pts.iter().map(|(a, _)| a.0 * a.0 + a.1 * a.1).sum();
            let k = num / den;
            pts.iter()
                .map(|(a, b)| (k * a.0 - b.0).powi(2) + (k * a.1 - b.1).powi(2))
                .sum::<f64>()
        };
        let best = (0..36_000)
            .map(|i| (i as f64 * 0.01 - 180.0).to_radians())
            .min_by(|a, b| cost(*a).total_cmp(&cost(*b)))
            .unwrap();
        let got = r[(1, 0)].atan2(r[(0, 0)]);
        assert!((best - got).abs() < 2e-4, "scan {best}, fit {got}");
        assert!((got.to_degrees() + 33.69).abs() < 0.01);
    }

    /// The same example in 3-D with z = 0: the plane's mirror image x ↦ −x is now reachable by a
    /// proper rotation (a half turn about the y axis, which also flips z = 0 onto itself), so the
    /// 3-D optimum is that half turn with c = 1 and zero residual, not the planar answer.
    #[test]
    fn umeyama_worked_example_lifted_to_3d() {
        let v3 = |x: f64, y: f64| Vector3::new(x, y, 0.0);
        let src = [v3(0.0, 0.0), v3(1.0, 0.0), v3(0.0, 2.0)];
        let dst = [v3(0.0, 0.0), v3(-1.0, 0.0), v3(0.0, 2.0)];
        let s = umeyama(&src, &dst, None, true).unwrap();
        assert!((s.scale - 1.0).abs() < 1e-12, "c = {}", s.scale);
        let half_turn_y = Matrix3::from_diagonal(&Vector3::new(-1.0, 1.0, -1.0));
        assert!(
            (s.rigid.rotation - half_turn_y).norm() < 1e-12,
            "R = {}",
            s.rigid.rotation
        );
        assert!(s.rigid.translation.norm() < 1e-12);
        for (a, b) in src.iter().zip(&dst) {
            assert!((s.rigid.apply(a) - b).norm() < 1e-12);
        }
    }

    /// Horn (1987) and Umeyama (1991) are independent derivations of the same optimum: on exact
    /// data both recover a random rotation and translation, and on noisy data they agree.
    #[test]
    fn horn_and_umeyama_recover_random_rotations_and_agree() {
        let seed = 20_260_101;
        let mut rng = SplitMix64::new(seed);
        for trial in 0..50 {
            let r = random_rotation(&mut rng);
            let t = v(
                rng.uniform(-5.0, 5.0),
                rng.uniform(-5.0, 5.0),
                rng.uniform(-5.0, 5.0),
            );
            let n = 4 + trial % 20;
            let src: Vec<_> = (0..n)
                .map(|_| {
                    v(
                        rng.uniform(-1.0, 1.0),
                        rng.uniform(-1.0, 1.0),
                        rng.uniform(-1.0, 1.0),
                    )
                })
                .collect();
            let dst: Vec<_> = src.iter().map(|p| r * p + t).collect();
            let a = umeyama(&src, &dst, None, false).unwrap().rigid;
            let b = horn(&src, &dst, None).unwrap();
            for fit in [a, b] {
                assert!(
                    rotation_error_deg(&fit.rotation, &r) < 1e-6,
                    "seed {seed} trial {trial}"
                );
                assert!(
                    (fit.translation - t).norm() < 1e-9,
                    "seed {seed} trial {trial}"
                );
            }
            let w: Vec<f64> = (0..n).map(|_| rng.uniform(0.1, 2.0)).collect();
            let noisy: Vec<_> = dst
                .iter()
                .map(|p| p + 0.05 * v(rng.normal(), rng.normal(), rng.normal()))
                .collect();
            let a = umeyama(&src, &noisy, Some(&w), false).unwrap().rigid;
            let b = horn(&src, &noisy, Some(&w)).unwrap();
            assert!(
                rotation_error_deg(&a.rotation, &b.rotation) < 1e-6,
                "seed {seed} trial {trial}"
            );
            assert!(
                (a.translation - b.translation).norm() < 1e-9,
                "seed {seed} trial {trial}"
            );
        }
    }

    #[test]
    fn compose_inverse_and_rows_round_trip() {
        let mut rng = SplitMix64::new(3);
        let a = Rigid::new(random_rotation(&mut rng), v(1.0, 2.0, 3.0));
        let b = Rigid::new(random_rotation(&mut rng), v(-4.0, 0.5, 2.0));
        let p = v(0.3, -0.2, 0.9);
        assert!((a.compose(&b).apply(&p) - a.apply(&b.apply(&p))).norm() < 1e-12);
        assert!((a.compose(&a.inverse()).apply(&p) - p).norm() < 1e-12);
        let back = Rigid::from_rows(&a.to_rows()).unwrap();
        assert!((back.rotation - a.rotation).norm() < 1e-12);
        // Local-frame transform re-expressed between origins maps global points the same way.
        let (os, ot) = ([100.0, 200.0, 5.0], [-30.0, 7.0, 1.0]);
        let g = a.between_origins(os, ot);
        let xs = v(101.0, 199.0, 6.0);
        let via_local = a.apply(&(xs - Vector3::from(os))) + Vector3::from(ot);
        assert!((g.apply(&xs) - via_local).norm() < 1e-9);
        // Angle and axis of a known rotation: 90° about z.
        let rz = Rigid::new(
            Matrix3::new(0.0, -1.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, 1.0),
            Vector3::zeros(),
        );
        assert!((rz.angle_deg() - 90.0).abs() < 1e-12);
        assert!((rz.axis()[2] - 1.0).abs() < 1e-12);
    }

    #[test]
    fn degenerate_inputs_give_none() {
        let p = [v(1.0, 1.0, 1.0); 3];
        assert!(umeyama(&p, &p, None, false).is_none());
        assert!(horn(&p, &p, None).is_none());
        assert!(umeyama(&p[..2], &p, None, false).is_none());
        assert!(horn(&p, &p, Some(&[0.0, 0.0, 0.0])).is_none());
    }
}
