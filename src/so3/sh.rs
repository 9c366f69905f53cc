//! Real spherical harmonics `Y_lm` of a direction, evaluated by a Cartesian recurrence.
//!
//! Conventions (fixed for the whole crate):
//! - orthonormal on the unit sphere: `∫ Y_lm Y_l'm' dΩ = δ_ll' δ_mm'`;
//! - **no** Condon–Shortley phase: every `Y_lm` with `m > 0` is positive at `u = +x` and every
//!   `Y_l,−m` with `m > 0` is positive just off `+x` towards `+y`;
//! - flat index `l² + l + m` for `m = −l..=l`, degrees `0..=L`, so `(L+1)²` values in all;
//! - degree 1 is `√(3/4π) (y, z, x)`: `m = −1 ↔ y`, `m = 0 ↔ z`, `m = +1 ↔ x`.
//!
//! With `ρ² = x² + y²`, `C_m + i S_m = (x + i y)^m` and the normalised associated Legendre
//! polynomials `Q_l^m(z)` (the Legendre function divided by `sin^m θ`, times the normalisation
//! and by `√2` for `m > 0`):
//! `Y_l0 = Q_l^0(z)`, `Y_lm = Q_l^m(z) C_m`, `Y_l,−m = Q_l^m(z) S_m` for `m > 0`.
//! `C_m`, `S_m` follow from complex multiplication by `x + i y`; `Q_l^m` from the three-term
//! recurrence in `l` at fixed `m`. No trigonometric function is called. Degrees `L ≤ 4` take a
//! hand-unrolled closed form of the same polynomials.

use super::float::{Lanes8, Poly, Real};
use std::sync::OnceLock;

/// Degrees up to this value (exclusive) use precomputed recurrence coefficients; higher degrees
/// are supported too but compute their coefficients on the fly (slower).
pub const TABLE_DEGREES: usize = 64;

/// Number of coefficients of a real harmonic expansion up to degree `l_max`: `(l_max + 1)²`.
#[inline]
pub const fn num_coeffs(l_max: usize) -> usize {
    (l_max + 1) * (l_max + 1)
}

/// Flat index `l² + l + m` of `Y_lm` (`−l ≤ m ≤ l`).
///
/// The result is meaningless (but no panic) when `|m| > l`.
#[inline]
pub const fn index(l: usize, m: i64) -> usize {
    ((l * l + l) as i64 + m) as usize
}

/// Inverse of [`index`]: the `(l, m)` pair stored at flat index `k`.
pub fn degree_order(k: usize) -> (usize, i64) {
    let mut l = (k as f64).sqrt() as usize;
    while l * l > k {
        l -= 1;
    }
    while (l + 1) * (l + 1) <= k {
        l += 1;
    }
    (l, k as i64 - (l * l + l) as i64)
}

/// `1/(2√π)`, the constant `Y_00`.
const Y00: f64 = 0.282_094_791_773_878_14;

/// Recurrence coefficients in the precision of the kernel.
struct Tables<T> {
    /// `q_mm[m] = Q_m^m / Q_{m−1}^{m−1}` (with `Q_0^0 = Y00`).
    q_mm: Vec<T>,
    /// `a[l(l+1)/2 + m]` and `b[..]` of `Q_l^m = a (z Q_{l−1}^m − b Q_{l−2}^m)`, `l ≥ m + 2`.
    a: Vec<T>,
    b: Vec<T>,
    /// `c[m] = √(2m+3)`, giving `Q_{m+1}^m = c z Q_m^m`.
    c: Vec<T>,
}

fn ratio_mm(m: usize) -> f64 {
    match m {
        0 => Y00,
        // √2 folded in at m = 1 (real harmonics with m > 0 carry a factor √2)
        1 => (3.0f64 / 2.0).sqrt() * std::f64::consts::SQRT_2,
        _ => ((2 * m + 1) as f64 / (2 * m) as f64).sqrt(),
    }
}

fn coef_a(l: usize, m: usize) -> f64 {
    let (l, m) = (l as f64, m as f64);
    ((4.0 * l * l - 1.0) / (l * l - m * m)).sqrt()
}

fn coef_b(l: usize, m: usize) -> f64 {
    let (l1, m) = ((l - 1) as f64, m as f64);
    ((l1 * l1 - m * m) / (4.0 * l1 * l1 - 1.0)).sqrt()
}

fn coef_c(m: usize) -> f64 {
    ((2 * m + 3) as f64).sqrt()
}

impl<T: Real> Tables<T> {
    fn build() -> Self {
        let n = TABLE_DEGREES;
        let mut a = vec![T::ZERO; n * (n + 1) / 2];
        let mut b = vec![T::ZERO; n * (n + 1) / 2];
        for l in 2..n {
            for m in 0..=l - 2 {
                a[l * (l + 1) / 2 + m] = T::from_f64(coef_a(l, m));
                b[l * (l + 1) / 2 + m] = T::from_f64(coef_b(l, m));
            }
        }
        Tables {
            q_mm: (0..n).map(|m| T::from_f64(ratio_mm(m))).collect(),
            a,
            b,
            c: (0..n).map(|m| T::from_f64(coef_c(m))).collect(),
        }
    }
}

/// Scalars with a cached recurrence table.
trait ShScalar: Real + Poly {
    fn tables() -> &'static Tables<Self>;
}

impl ShScalar for f32 {
    fn tables() -> &'static Tables<f32> {
        static T: OnceLock<Tables<f32>> = OnceLock::new();
        T.get_or_init(Tables::build)
    }
}

impl ShScalar for f64 {
    fn tables() -> &'static Tables<f64> {
        static T: OnceLock<Tables<f64>> = OnceLock::new();
        T.get_or_init(Tables::build)
    }
}

/// Closed form for `l_max ≤ 4` (unit `x, y, z`).
#[inline(always)]
fn sh_closed<T: Poly>(l_max: usize, x: T, y: T, z: T, out: &mut [T]) {
    let k = |v: f64| T::constant(v);
    let out = &mut out[..num_coeffs(l_max)];
    out[0] = k(Y00);
    if l_max == 0 {
        return;
    }
    let k1 = k(0.488_602_511_902_919_9);
    out[1] = k1 * y;
    out[2] = k1 * z;
    out[3] = k1 * x;
    if l_max == 1 {
        return;
    }
    let z2 = z * z;
    let (c2, s2) = (x * x - y * y, (x + x) * y);
    let k22 = k(0.546_274_215_296_039_6);
    let k21 = k(1.092_548_430_592_079_2);
    let k20 = k(0.315_391_565_252_520_05);
    out[4] = k22 * s2;
    out[5] = k21 * z * y;
    out[6] = k20 * (k(3.0) * z2 - T::UNIT);
    out[7] = k21 * z * x;
    out[8] = k22 * c2;
    if l_max == 2 {
        return;
    }
    let (c3, s3) = (x * c2 - y * s2, x * s2 + y * c2);
    let k33 = k(0.590_043_589_926_643_6);
    let k32 = k(1.445_305_721_320_277_3);
    let p31 = k(0.457_045_799_464_465_8) * (k(5.0) * z2 - T::UNIT);
    let k32z = k32 * z;
    out[9] = k33 * s3;
    out[10] = k32z * s2;
    out[11] = p31 * y;
    out[12] = k(0.373_176_332_590_115_4) * z * (k(5.0) * z2 - k(3.0));
    out[13] = p31 * x;
    out[14] = k32z * c2;
    out[15] = k33 * c3;
    if l_max == 3 {
        return;
    }
    let (c4, s4) = (x * c3 - y * s3, x * s3 + y * c3);
    let k44 = k(0.625_835_735_449_176_3);
    let k43z = k(1.770_130_769_779_930_7) * z;
    let p42 = k(0.473_087_347_878_78) * (k(7.0) * z2 - T::UNIT);
    let p41 = k(0.669_046_543_557_289_2) * z * (k(7.0) * z2 - k(3.0));
    out[16] = k44 * s4;
    out[17] = k43z * s3;
    out[18] = p42 * s2;
    out[19] = p41 * y;
    out[20] = k(0.105_785_546_915_204_31) * ((k(35.0) * z2 - k(30.0)) * z2 + k(3.0));
    out[21] = p41 * x;
    out[22] = p42 * c2;
    out[23] = k43z * c3;
    out[24] = k44 * c4;
}

/// General recurrence, any `l_max`: for each order `m`, `Q_m^m` from `Q_{m−1}^{m−1}`, then
/// `Q_l^m` up the degrees by the three-term recurrence.
fn sh_recurrence<T: ShScalar>(l_max: usize, x: T, y: T, z: T, out: &mut [T]) {
    if l_max < TABLE_DEGREES {
        sh_recurrence_table(l_max, x, y, z, out)
    } else {
        sh_recurrence_any(l_max, x, y, z, out)
    }
}

/// [`sh_recurrence`] with every coefficient from the table (`l_max < TABLE_DEGREES`).
#[inline(always)]
fn sh_recurrence_table<T: ShScalar>(l_max: usize, x: T, y: T, z: T, out: &mut [T]) {
    let t = T::tables();
    let out = &mut out[..num_coeffs(l_max)];
    // m = 0: zonal harmonics
    let mut qmm = t.q_mm[0];
    out[0] = qmm;
    if l_max == 0 {
        return;
    }
    let mut q2 = qmm;
    let mut q1 = t.c[0] * z * qmm;
    out[2] = q1;
    for l in 2..=l_max {
        let i = l * (l + 1) / 2;
        let q = t.a[i] * (z * q1 - t.b[i] * q2);
        out[l * l + l] = q;
        q2 = q1;
        q1 = q;
    }
    let (mut cm, mut sm) = (T::ONE, T::ZERO);
    for m in 1..=l_max {
        qmm = qmm * t.q_mm[m];
        let c_new = x * cm - y * sm;
        sm = x * sm + y * cm;
        cm = c_new;
        let centre = m * m + m;
        out[centre + m] = qmm * cm;
        out[centre - m] = qmm * sm;
        if m == l_max {
            break;
        }
        let mut q2 = qmm;
        let mut q1 = t.c[m] * z * qmm;
        let centre = (m + 1) * (m + 1) + m + 1;
        out[centre + m] = q1 * cm;
        out[centre - m] = q1 * sm;
        for l in m + 2..=l_max {
            let i = l * (l + 1) / 2 + m;
            let q = t.a[i] * (z * q1 - t.b[i] * q2);
            let centre = l * l + l;
            out[centre + m] = q * cm;
            out[centre - m] = q * sm;
            q2 = q1;
            q1 = q;
        }
    }
}

/// Directions evaluated together by the batched recurrence.
const LANES: usize = 8;

/// [`sh_recurrence_table`] for `LANES` directions at once: every step is the same operation on
/// each lane, so the arithmetic vectorises; `out` holds `LANES` expansions direction-major.
#[inline(always)]
fn sh_recurrence_lanes<T: ShScalar>(l_max: usize, d: &[[T; 3]], out: &mut [T]) {
    type V<T> = [T; LANES];
    let t = T::tables();
    let n = num_coeffs(l_max);
    let out = &mut out[..LANES * n];
    let (mut x, mut y, mut z) = ([T::ZERO; LANES], [T::ZERO; LANES], [T::ZERO; LANES]);
    for i in 0..LANES {
        [x[i], y[i], z[i]] = d[i];
    }
    let store = |out: &mut [T], idx: usize, v: &V<T>| {
        for i in 0..LANES {
            out[i * n + idx] = v[i];
        }
    };
    let store_cs = |out: &mut [T], l: usize, m: usize, q: &V<T>, c: &V<T>, s: &V<T>| {
        let centre = l * l + l;
        for i in 0..LANES {
            out[i * n + centre + m] = q[i] * c[i];
            out[i * n + centre - m] = q[i] * s[i];
        }
    };
    let step = |q1: &V<T>, q2: &V<T>, a: T, b: T| -> V<T> {
        let mut q = [T::ZERO; LANES];
        for i in 0..LANES {
            q[i] = a * (z[i] * q1[i] - b * q2[i]);
        }
        q
    };
    let mut qmm = [t.q_mm[0]; LANES];
    store(out, 0, &qmm);
    if l_max == 0 {
        return;
    }
    let c0 = t.c[0];
    let mut q2 = qmm;
    let mut q1 = [T::ZERO; LANES];
    for i in 0..LANES {
        q1[i] = c0 * z[i] * qmm[i];
    }
    store(out, 2, &q1);
    for l in 2..=l_max {
        let k = l * (l + 1) / 2;
        let q = step(&q1, &q2, t.a[k], t.b[k]);
        store(out, l * l + l, &q);
        q2 = q1;
        q1 = q;
    }
    let (mut cm, mut sm) = ([T::ONE; LANES], [T::ZERO; LANES]);
    for m in 1..=l_max {
        let k = t.q_mm[m];
        for i in 0..LANES {
            qmm[i] = qmm[i] * k;
            let c_new = x[i] * cm[i] - y[i] * sm[i];
            sm[i] = x[i] * sm[i] + y[i] * cm[i];
            cm[i] = c_new;
        }
        store_cs(out, m, m, &qmm, &cm, &sm);
        if m == l_max {
            break;
        }
        let cz = t.c[m];
        let mut q2 = qmm;
        let mut q1 = [T::ZERO; LANES];
        for i in 0..LANES {
            q1[i] = cz * z[i] * qmm[i];
        }
        store_cs(out, m + 1, m, &q1, &cm, &sm);
        for l in m + 2..=l_max {
            let k = l * (l + 1) / 2 + m;
            let q = step(&q1, &q2, t.a[k], t.b[k]);
            store_cs(out, l, m, &q, &cm, &sm);
            q2 = q1;
            q1 = q;
        }
    }
}

/// [`sh_recurrence`] for any degree (coefficients beyond the table computed on the fly).
fn sh_recurrence_any<T: ShScalar>(l_max: usize, x: T, y: T, z: T, out: &mut [T]) {
    let t = T::tables();
    let out = &mut out[..num_coeffs(l_max)];
    let q_mm = |m: usize| {
        if m < TABLE_DEGREES {
            t.q_mm[m]
        } else {
            T::from_f64(ratio_mm(m))
        }
    };
    let c_m = |m: usize| {
        if m < TABLE_DEGREES {
            t.c[m]
        } else {
            T::from_f64(coef_c(m))
        }
    };
    let ab = |l: usize, m: usize| {
        if l < TABLE_DEGREES {
            let i = l * (l + 1) / 2 + m;
            (t.a[i], t.b[i])
        } else {
            (T::from_f64(coef_a(l, m)), T::from_f64(coef_b(l, m)))
        }
    };
    // (cm, sm) = (x + i y)^m
    let (mut cm, mut sm) = (T::ONE, T::ZERO);
    let mut qmm = T::ZERO;
    for m in 0..=l_max {
        if m == 0 {
            qmm = q_mm(0);
        } else {
            qmm = qmm * q_mm(m);
            let c_new = x * cm - y * sm;
            sm = x * sm + y * cm;
            cm = c_new;
        }
        let mut put = |l: usize, q: T| {
            let centre = l * l + l;
            if m == 0 {
                out[centre] = q;
            } else {
                out[centre + m] = q * cm;
                out[centre - m] = q * sm;
            }
        };
        put(m, qmm);
        if m == l_max {
            break;
        }
        let mut q2 = qmm;
        let mut q1 = c_m(m) * z * qmm;
        put(m + 1, q1);
        for l in m + 2..=l_max {
            let (a, b) = ab(l, m);
            let q = a * (z * q1 - b * q2);
            put(l, q);
            q2 = q1;
            q1 = q;
        }
    }
}

#[inline(always)]
fn sh_unit<T: ShScalar>(l_max: usize, u: [T; 3], out: &mut [T]) {
    let [x, y, z] = u;
    if l_max <= 4 {
        sh_closed(l_max, x, y, z, out);
    } else {
        sh_recurrence(l_max, x, y, z, out);
    }
}

#[inline(always)]
fn sh_vec<T: ShScalar>(l_max: usize, v: [T; 3], out: &mut [T]) -> T {
    let r2 = v[0] * v[0] + v[1] * v[1] + v[2] * v[2];
    let r = r2.sqrt();
    if r > T::ZERO && r2.to_f64().is_finite() {
        let inv = T::ONE / r;
        sh_unit(l_max, [v[0] * inv, v[1] * inv, v[2] * inv], out);
    } else {
        let out = &mut out[..num_coeffs(l_max)];
        out.fill(T::ZERO);
        out[0] = T::from_f64(Y00);
    }
    r
}

/// Real spherical harmonics of degrees `0..=l_max` at the unit vector `u`, written to
/// `out[..(l_max+1)²]` in the order `l² + l + m`.
///
/// `u` must have unit length (the result is a polynomial in `u`, so a non-unit `u` gives the
/// solid harmonics' values, not the direction's). Any `l_max` is supported; `l_max ≤ 4` takes an
/// unrolled path.
///
/// # Panics
/// If `out.len() < (l_max + 1)²`.
#[inline]
pub fn real_sh_f32(l_max: usize, u: [f32; 3], out: &mut [f32]) {
    sh_unit(l_max, u, out)
}

/// Real spherical harmonics of degrees `0..=l_max ≤ 4` at eight unit vectors at once (lane `i`
/// is the vector `(x[i], y[i], z[i])`), structure of arrays: `out[k][i] = Y_k(u_i)` for the flat
/// index `k = l² + l + m`. Each lane is bit-identical to [`real_sh_f32`] of that vector.
///
/// # Panics
/// If `l_max > 4` or `out.len() < (l_max + 1)²`.
#[inline(always)]
pub fn real_sh_lanes8_f32(
    l_max: usize,
    x: [f32; 8],
    y: [f32; 8],
    z: [f32; 8],
    out: &mut [[f32; 8]],
) {
    assert!(l_max <= 4, "real_sh_lanes8_f32: degree {l_max} is above 4");
    let mut v = [Lanes8([0.0; 8]); 25];
    sh_closed(l_max, Lanes8(x), Lanes8(y), Lanes8(z), &mut v);
    for (o, v) in out[..num_coeffs(l_max)].iter_mut().zip(&v) {
        *o = v.0;
    }
}

/// `f64` version of [`real_sh_f32`].
///
/// # Panics
/// If `out.len() < (l_max + 1)²`.
#[inline]
pub fn real_sh_f64(l_max: usize, u: [f64; 3], out: &mut [f64]) {
    sh_unit(l_max, u, out)
}

/// Real spherical harmonics of the direction of a (not necessarily unit) vector `v`; returns
/// `|v|`.
///
/// A zero (or non-finite) vector has no direction: `out` then gets the sphere average of each
/// harmonic, i.e. `Y_00 = 1/(2√π)` and zeros for `l ≥ 1`.
///
/// # Panics
/// If `out.len() < (l_max + 1)²`.
#[inline]
pub fn real_sh_vec_f32(l_max: usize, v: [f32; 3], out: &mut [f32]) -> f32 {
    sh_vec(l_max, v, out)
}

/// `f64` version of [`real_sh_vec_f32`].
///
/// # Panics
/// If `out.len() < (l_max + 1)²`.
#[inline]
pub fn real_sh_vec_f64(l_max: usize, v: [f64; 3], out: &mut [f64]) -> f64 {
    sh_vec(l_max, v, out)
}

fn batch<T: ShScalar>(l_max: usize, dirs: &[[T; 3]], out: &mut [T]) {
    let n = num_coeffs(l_max);
    assert!(
        out.len() >= dirs.len() * n,
        "spherical-harmonic batch: output buffer holds {} values, {} directions need {}",
        out.len(),
        dirs.len(),
        dirs.len() * n
    );
    // Dispatch once, outside the loop, so each loop body is a fixed straight-line kernel.
    macro_rules! run {
        ($l:expr) => {
            for (u, o) in dirs.iter().zip(out.chunks_exact_mut(n)) {
                sh_closed($l, u[0], u[1], u[2], o);
            }
        };
    }
    match l_max {
        0 => run!(0),
        1 => run!(1),
        2 => run!(2),
        3 => run!(3),
        4 => run!(4),
        _ if l_max < TABLE_DEGREES => {
            let full = dirs.len() / LANES * LANES;
            for (d, o) in dirs[..full]
                .chunks_exact(LANES)
                .zip(out.chunks_exact_mut(LANES * n))
            {
                sh_recurrence_lanes(l_max, d, o);
            }
            for (u, o) in dirs[full..].iter().zip(out[full * n..].chunks_exact_mut(n)) {
                sh_recurrence(l_max, u[0], u[1], u[2], o);
            }
        }
        _ => {
            for (u, o) in dirs.iter().zip(out.chunks_exact_mut(n)) {
                sh_recurrence(l_max, u[0], u[1], u[2], o);
            }
        }
    }
}

fn batch_vec<T: ShScalar>(l_max: usize, vecs: &[[T; 3]], out: &mut [T], norms: &mut [T]) {
    let n = num_coeffs(l_max);
    assert!(
        out.len() >= vecs.len() * n && norms.len() >= vecs.len(),
        "spherical-harmonic batch: buffers too short for {} vectors",
        vecs.len()
    );
    for ((v, o), r) in vecs
        .iter()
        .zip(out.chunks_exact_mut(n))
        .zip(norms.iter_mut())
    {
        *r = sh_vec(l_max, *v, o);
    }
}

/// Batched [`real_sh_f32`]: harmonics of every unit vector of `dirs`, direction-major:
/// `out[i·(L+1)² + l² + l + m] = Y_lm(dirs[i])`. Allocates nothing.
///
/// # Panics
/// If `out.len() < dirs.len()·(l_max + 1)²`.
pub fn real_sh_batch_f32(l_max: usize, dirs: &[[f32; 3]], out: &mut [f32]) {
    batch(l_max, dirs, out)
}

/// `f64` version of [`real_sh_batch_f32`].
///
/// # Panics
/// If `out.len() < dirs.len()·(l_max + 1)²`.
pub fn real_sh_batch_f64(l_max: usize, dirs: &[[f64; 3]], out: &mut [f64]) {
    batch(l_max, dirs, out)
}

/// Batched [`real_sh_vec_f32`] on arbitrary (non-unit) vectors: harmonics of each direction into
/// `out` (direction-major, as in [`real_sh_batch_f32`]) and each vector's length into `norms`.
///
/// # Panics
/// If `out.len() < vecs.len()·(l_max + 1)²` or `norms.len() < vecs.len()`.
pub fn real_sh_vec_batch_f32(l_max: usize, vecs: &[[f32; 3]], out: &mut [f32], norms: &mut [f32]) {
    batch_vec(l_max, vecs, out, norms)
}

/// `f64` version of [`real_sh_vec_batch_f32`].
///
/// # Panics
/// If `out.len() < vecs.len()·(l_max + 1)²` or `norms.len() < vecs.len()`.
pub fn real_sh_vec_batch_f64(l_max: usize, vecs: &[[f64; 3]], out: &mut [f64], norms: &mut [f64]) {
    batch_vec(l_max, vecs, out, norms)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::so3::rng::SplitMix64;

    fn unit(rng: &mut SplitMix64) -> [f64; 3] {
        rng.unit_vector()
    }

    #[test]
    fn index_round_trip() {
        for k in 0..num_coeffs(20) {
            let (l, m) = degree_order(k);
            assert_eq!(index(l, m), k);
            assert!(m.unsigned_abs() as usize <= l);
        }
        assert_eq!(index(1, -1), 1);
        assert_eq!(index(2, 2), 8);
    }

    /// The unrolled path (L ≤ 4) against the general recurrence.
    #[test]
    fn closed_form_matches_recurrence() {
        let seed = 11;
        let mut rng = SplitMix64::new(seed);
        for _ in 0..200 {
            let [x, y, z] = unit(&mut rng);
            let mut a = [0.0f64; 25];
            let mut b = [0.0f64; 25];
            sh_closed(4, x, y, z, &mut a);
            sh_recurrence(4, x, y, z, &mut b);
            for k in 0..25 {
                assert!(
                    (a[k] - b[k]).abs() < 1e-14,
                    "seed {seed}: k={k} {} {}",
                    a[k],
                    b[k]
                );
            }
        }
    }

    /// The table-driven recurrence against the on-the-fly one.
    #[test]
    fn table_recurrence_matches_general() {
        let mut rng = SplitMix64::new(12);
        let n = num_coeffs(20);
        let (mut a, mut b) = (vec![0.0f64; n], vec![0.0f64; n]);
        for l_max in 0..=20 {
            let [x, y, z] = unit(&mut rng);
            sh_recurrence_table(l_max, x, y, z, &mut a);
            sh_recurrence_any(l_max, x, y, z, &mut b);
            for k in 0..num_coeffs(l_max) {
                assert!((a[k] - b[k]).abs() < 1e-13, "L={l_max} k={k}");
            }
        }
    }

    /// Degree-1 order (y, z, x) and the absence of the Condon–Shortley phase.
    #[test]
    fn degree_one_order_and_phase() {
        let mut o = [0.0f64; 4];
        let c = (3.0 / (4.0 * std::f64::consts::PI)).sqrt();
        real_sh_f64(1, [1.0, 0.0, 0.0], &mut o);
        assert_eq!(o[1..], [0.0, 0.0, c]);
        real_sh_f64(1, [0.0, 1.0, 0.0], &mut o);
        assert_eq!(o[1..], [c, 0.0, 0.0]);
        real_sh_f64(1, [0.0, 0.0, 1.0], &mut o);
        assert_eq!(o[1..], [0.0, c, 0.0]);
        // high degree: Y_ll at +x is positive (no (−1)^m phase)
        let mut o = vec![0.0f64; num_coeffs(16)];
        real_sh_f64(16, [1.0, 0.0, 0.0], &mut o);
        for l in 0..=16 {
            assert!(o[index(l, l as i64)] > 0.0, "l={l}");
        }
    }

    #[test]
    fn f32_matches_f64_and_vec_forms() {
        let mut rng = SplitMix64::new(5);
        for l_max in [0, 1, 2, 3, 4, 5, 8, 12, 16] {
            let n = num_coeffs(l_max);
            let mut a = vec![0.0f64; n];
            let mut b = vec![0.0f32; n];
            let mut c = vec![0.0f64; n];
            for _ in 0..50 {
                let u = unit(&mut rng);
                real_sh_f64(l_max, u, &mut a);
                real_sh_f32(l_max, u.map(|v| v as f32), &mut b);
                let r = real_sh_vec_f64(l_max, u.map(|v| 3.5 * v), &mut c);
                assert!((r - 3.5).abs() < 1e-12);
                for k in 0..n {
                    assert!((a[k] - b[k] as f64).abs() < 2e-5, "L={l_max} k={k}");
                    assert!((a[k] - c[k]).abs() < 1e-12, "L={l_max} k={k}");
                }
            }
        }
    }

    #[test]
    fn zero_vector_gives_average() {
        let mut o = [9.0f32; 9];
        let r = real_sh_vec_f32(2, [0.0; 3], &mut o);
        assert_eq!(r, 0.0);
        assert!((o[0] - Y00 as f32).abs() < 1e-7);
        assert!(o[1..].iter().all(|&v| v == 0.0));
    }

    #[test]
    fn batch_matches_single() {
        let mut rng = SplitMix64::new(9);
        let dirs: Vec<[f32; 3]> = (0..37).map(|_| unit(&mut rng).map(|v| v as f32)).collect();
        for l_max in [0, 2, 4, 5, 6, 9, 16] {
            let n = num_coeffs(l_max);
            let mut out = vec![0.0f32; dirs.len() * n];
            real_sh_batch_f32(l_max, &dirs, &mut out);
            let mut one = vec![0.0f32; n];
            for (i, d) in dirs.iter().enumerate() {
                real_sh_f32(l_max, *d, &mut one);
                assert_eq!(&out[i * n..(i + 1) * n], &one[..]);
            }
        }
    }

    /// Degrees far above the table still evaluate (orthonormality spot check via the addition
    /// theorem: Σ_m Y_lm(u)² = (2l+1)/4π).
    #[test]
    fn addition_theorem_high_degree() {
        let mut rng = SplitMix64::new(21);
        let l_max = 70;
        let mut o = vec![0.0f64; num_coeffs(l_max)];
        for _ in 0..5 {
            real_sh_f64(l_max, unit(&mut rng), &mut o);
            for l in 0..=l_max {
                let s: f64 = o[l * l..(l + 1) * (l + 1)].iter().map(|v| v * v).sum();
                let want = (2 * l + 1) as f64 / (4.0 * std::f64::consts::PI);
                assert!((s - want).abs() < 1e-10 * want, "l={l}: {s} vs {want}");
            }
        }
    }
}
