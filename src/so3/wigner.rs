//! Real Wigner-D matrices: the matrices `D^l(R)` with `Y_l(R u) = D^l(R) Y_l(u)` for the real
//! harmonics of [`super::sh`].
//!
//! Built by the recursion of Ivanic & Ruedenberg (J. Phys. Chem. 100, 6342, 1996; corrections
//! J. Phys. Chem. A 102, 9099, 1998): `D^1` is the rotation matrix itself with rows and columns
//! permuted to the order `(y, z, x)` of the degree-1 harmonics, and each `D^l` follows from
//! `D^1` and `D^(l−1)` by the published `u U + v V + w W` formula. Their real harmonics use the
//! same `m` ordering and sign choice as ours (checked by the `Y(R u) = D(R) Y(u)` tests), so no
//! sign change is needed.
//!
//! Properties: `D^l` is `(2l+1)×(2l+1)` orthogonal, `D(R₁R₂) = D(R₁) D(R₂)`, `D(Rᵀ) = D(R)ᵀ`.
//! Over a flat coefficient vector (index `l² + l + m`) the full `D` is block-diagonal in `l`.
//!
//! Relation to Wigner's small-d (see [`small_d`]): for a rotation by `β` about `y`,
//! `D(R_y(β)) = T d(β) T†`, with `T` the unitary matrix taking complex (Condon–Shortley)
//! harmonics to ours: row `m > 0` is `((−1)^m e_m + e_−m)/√2`, row `m < 0` is
//! `−i((−1)^m e_|m| − e_−|m|)/√2`, row `0` is `e_0`. This follows from `Y_c(R_y(β) u) = d(β) Y_c(u)`
//! for the complex harmonics (a rotation about `y` has no azimuthal phase factors, and `d(β)` is
//! real) and `Y = T Y_c`. Since `d^l_{m'm}(β)` has the parity `(−1)^{m−m'} d^l_{−m',−m}`, the real
//! matrix is block-diagonal over `{m ≥ 0}` and `{m < 0}` (cos-type and sin-type harmonics, even
//! and odd under `y ↦ −y`), which commutes with rotations about `y`.

use nalgebra::Matrix3;

/// Real Wigner-D matrices `D^l(R)` for `l = 0..=l_max`, each stored row-major.
#[derive(Clone, Debug)]
pub struct WignerD {
    l_max: usize,
    /// Blocks for `l = 0..=l_max`, concatenated; block `l` starts at `offset(l)`.
    data: Vec<f64>,
    /// Work space of the recursion.
    scratch: Vec<f64>,
}

/// Start of block `l` in the concatenated storage: `Σ_{k<l} (2k+1)² = l(2l−1)(2l+1)/3`.
#[inline]
pub const fn block_offset(l: usize) -> usize {
    if l == 0 {
        0
    } else {
        l * (2 * l - 1) * (2 * l + 1) / 3
    }
}

/// Total number of matrix entries of the blocks `0..=l_max`.
#[inline]
pub const fn block_entries(l_max: usize) -> usize {
    block_offset(l_max + 1)
}

impl WignerD {
    /// The real Wigner-D matrices of the rotation matrix `r` (acting on column vectors) up to
    /// degree `l_max`.
    ///
    /// `r` should be a proper rotation; it is used as given (no re-orthonormalisation), so an
    /// approximate rotation yields approximate matrices.
    pub fn new(r: &Matrix3<f64>, l_max: usize) -> Self {
        let mut w = WignerD {
            l_max,
            data: vec![0.0; block_entries(l_max)],
            scratch: vec![0.0; if l_max >= 2 { scratch_len(l_max) } else { 0 }],
        };
        w.set(r);
        w
    }

    /// Recomputes the matrices in place for another rotation (same `l_max`, no allocation).
    pub fn set(&mut self, r: &Matrix3<f64>) {
        let l_max = self.l_max;
        self.data[0] = 1.0;
        if l_max == 0 {
            return;
        }
        // D^1 in (y, z, x) order: index −1, 0, 1 ↔ axis 1, 2, 0.
        const P: [usize; 3] = [1, 2, 0];
        let mut r1 = [0.0f64; 9];
        for i in 0..3 {
            for j in 0..3 {
                r1[i * 3 + j] = r[(P[i], P[j])];
            }
        }
        self.data[1..10].copy_from_slice(&r1);
        for l in 2..=l_max {
            let (head, tail) = self.data.split_at_mut(block_offset(l));
            let prev = &head[block_offset(l - 1)..];
            let cur = &mut tail[..(2 * l + 1) * (2 * l + 1)];
            recursion_step(l as i64, &r1, prev, cur, &mut self.scratch);
        }
    }

    /// Highest degree held.
    pub fn l_max(&self) -> usize {
        self.l_max
    }

    /// `D^l`, row-major `(2l+1)²` (row `m'`, column `m`, both from `−l`).
    ///
    /// # Panics
    /// If `l > l_max`.
    pub fn block(&self, l: usize) -> &[f64] {
        &self.data[block_offset(l)..block_offset(l + 1)]
    }

    /// All blocks `l = 0..=l_max` concatenated (see [`block_offset`]).
    pub fn blocks(&self) -> &[f64] {
        &self.data
    }

    /// Entry `D^l_{m'm}`.
    pub fn get(&self, l: usize, mp: i64, m: i64) -> f64 {
        let n = 2 * l + 1;
        let (i, j) = ((mp + l as i64) as usize, (m + l as i64) as usize);
        self.data[block_offset(l) + i * n + j]
    }

    /// `coeffs_out = D(R) coeffs_in` on a flat expansion of degrees `0..=l_max`
    /// (`(l_max+1)²` values each, index `l² + l + m`). Extra trailing values are left alone.
    ///
    /// # Panics
    /// If either slice is shorter than `(l_max+1)²`.
    pub fn apply(&self, coeffs_in: &[f64], coeffs_out: &mut [f64]) {
        apply_generic(&self.data, self.l_max, coeffs_in, coeffs_out, |d| d);
    }

    /// `f32` version of [`WignerD::apply`] (accumulates in `f64`).
    ///
    /// # Panics
    /// If either slice is shorter than `(l_max+1)²`.
    pub fn apply_f32(&self, coeffs_in: &[f32], coeffs_out: &mut [f32]) {
        apply_generic(&self.data, self.l_max, coeffs_in, coeffs_out, |d| d as f32);
    }

    /// `Dᵀ coeffs_in`, the action of the inverse rotation.
    ///
    /// # Panics
    /// If either slice is shorter than `(l_max+1)²`.
    pub fn apply_transpose(&self, coeffs_in: &[f64], coeffs_out: &mut [f64]) {
        let nc = (self.l_max + 1) * (self.l_max + 1);
        let (ci, co) = (&coeffs_in[..nc], &mut coeffs_out[..nc]);
        for l in 0..=self.l_max {
            let n = 2 * l + 1;
            let b = self.block(l);
            let s = l * l;
            for j in 0..n {
                co[s + j] = (0..n).map(|i| b[i * n + j] * ci[s + i]).sum();
            }
        }
    }

    /// Rotates a block of `n_shells` expansions laid out `[n][l² + l + m]` (stride
    /// `(l_max+1)²`): `out[n] = D(R) input[n]` for every shell.
    ///
    /// # Panics
    /// If either slice is shorter than `n_shells·(l_max+1)²`.
    pub fn apply_shells(&self, n_shells: usize, input: &[f64], out: &mut [f64]) {
        let nc = (self.l_max + 1) * (self.l_max + 1);
        for (i, o) in input[..n_shells * nc]
            .chunks_exact(nc)
            .zip(out[..n_shells * nc].chunks_exact_mut(nc))
        {
            self.apply(i, o);
        }
    }

    /// `f32` version of [`WignerD::apply_shells`].
    ///
    /// # Panics
    /// If either slice is shorter than `n_shells·(l_max+1)²`.
    pub fn apply_shells_f32(&self, n_shells: usize, input: &[f32], out: &mut [f32]) {
        let nc = (self.l_max + 1) * (self.l_max + 1);
        for (i, o) in input[..n_shells * nc]
            .chunks_exact(nc)
            .zip(out[..n_shells * nc].chunks_exact_mut(nc))
        {
            self.apply_f32(i, o);
        }
    }
}

fn apply_generic<T: Copy + Into<f64>>(
    data: &[f64],
    l_max: usize,
    coeffs_in: &[T],
    coeffs_out: &mut [T],
    back: impl Fn(f64) -> T,
) {
    let nc = (l_max + 1) * (l_max + 1);
    let (ci, co) = (&coeffs_in[..nc], &mut coeffs_out[..nc]);
    for l in 0..=l_max {
        let n = 2 * l + 1;
        let b = &data[block_offset(l)..block_offset(l + 1)];
        let s = l * l;
        let x = &ci[s..s + n];
        for (i, row) in b.chunks_exact(n).enumerate() {
            let acc: f64 = row.iter().zip(x).map(|(d, &v)| d * v.into()).sum();
            co[s + i] = back(acc);
        }
    }
}

/// Scratch length needed by [`recursion_step`] for degree `l`.
fn scratch_len(l: usize) -> usize {
    3 * (2 * l - 1) * (2 * l + 1) + (2 * l + 1)
}

/// One step of the Ivanic–Ruedenberg recursion: `cur = D^l` from `r1 = D^1` and `prev = D^(l−1)`.
///
/// In the paper's notation `D^l_{mk} = u U + v V + w W`, where `u, v, w` factor into a part
/// depending on the row `m` and the common `1/√denom(k)`, and `U, V, W` are sums of the
/// auxiliary function `P(i, a, k)`. The rows `P(i, a, ·)` are formed once per `(i, a)` and each
/// output row is then a short linear combination of them (vectorisable).
fn recursion_step(l: i64, r1: &[f64; 9], prev: &[f64], cur: &mut [f64], scratch: &mut [f64]) {
    let np = (2 * l - 1) as usize;
    let n = (2 * l + 1) as usize;
    let (prows, s) = scratch[..3 * np * n + n].split_at_mut(3 * np * n);
    // P(i, a, k) rows; i = −1, 0, 1 stored at 0, 1, 2.
    for i in 0..3 {
        let (rm, r0, rp) = (r1[i * 3], r1[i * 3 + 1], r1[i * 3 + 2]);
        for a in 0..np {
            let pr = &prev[a * np..(a + 1) * np];
            let out = &mut prows[(i * np + a) * n..(i * np + a + 1) * n];
            out[0] = rp * pr[0] + rm * pr[np - 1];
            out[n - 1] = rp * pr[np - 1] - rm * pr[0];
            for (o, &v) in out[1..n - 1].iter_mut().zip(pr) {
                *o = r0 * v;
            }
        }
    }
    // 1/√denom(k)
    for k in -l..=l {
        let denom = if k.abs() == l {
            2 * l * (2 * l - 1)
        } else {
            (l + k) * (l - k)
        };
        s[(k + l) as usize] = 1.0 / (denom as f64).sqrt();
    }
    let prow = |i: i64, a: i64| {
        let o = (((i + 1) as usize) * np + (a + l - 1) as usize) * n;
        &prows[o..o + n]
    };
    for m in -l..=l {
        let am = m.abs();
        let row = &mut cur[(m + l) as usize * n..(m + l + 1) as usize * n];
        row.fill(0.0);
        let mut add = |c: f64, i: i64, a: i64| {
            for (o, &p) in row.iter_mut().zip(prow(i, a)) {
                *o += c * p;
            }
        };
        if am < l {
            add((((l + m) * (l - m)) as f64).sqrt(), 0, m);
        }
        let sqrt2 = std::f64::consts::SQRT_2;
        if m == 0 {
            let v = -0.5 * ((2 * (l - 1) * l) as f64).sqrt();
            add(v, 1, 1);
            add(v, -1, -1);
        } else {
            let v = 0.5 * (((l + am - 1) * (l + am)) as f64).sqrt();
            if m == 1 {
                add(v * sqrt2, 1, 0);
            } else if m == -1 {
                add(v * sqrt2, -1, 0);
            } else if m > 0 {
                add(v, 1, m - 1);
                add(-v, -1, -m + 1);
            } else {
                add(v, 1, m + 1);
                add(v, -1, -m - 1);
            }
            if am < l - 1 {
                let w = -0.5 * (((l - am - 1) * (l - am)) as f64).sqrt();
                if m > 0 {
                    add(w, 1, m + 1);
                    add(w, -1, -m - 1);
                } else {
                    add(w, 1, m - 1);
                    add(-w, -1, -m + 1);
                }
            }
        }
        for (o, &f) in row.iter_mut().zip(s.iter()) {
            *o *= f;
        }
    }
}

/// Wigner's small-d `d^l_{m'm}(β)` (integer `l`), by Wigner's explicit sum, in the convention of
/// the Particle Data Group table (e.g. `d^1_{10}(β) = −sin β/√2`). Independent of the recursion
/// above; used to check it. Returns 0 when `|m|` or `|m'|` exceeds `l`.
pub fn small_d(l: usize, mp: i64, m: i64, beta: f64) -> f64 {
    let j = l as i64;
    if mp.abs() > j || m.abs() > j {
        return 0.0;
    }
    let lf = super::coupling::ln_factorial;
    let (c, s) = ((beta / 2.0).cos(), (beta / 2.0).sin());
    let pre = 0.5 * (lf(j + mp) + lf(j - mp) + lf(j + m) + lf(j - m));
    let kmin = 0.max(m - mp);
    let kmax = (j + m).min(j - mp);
    let mut sum = 0.0;
    for k in kmin..=kmax {
        let ln_mag = pre - lf(j + m - k) - lf(k) - lf(j - k - mp) - lf(k - m + mp);
        let sign = if (k - m + mp).rem_euclid(2) == 0 {
            1.0
        } else {
            -1.0
        };
        let pc = (2 * j - 2 * k + m - mp) as i32;
        let ps = (2 * k - m + mp) as i32;
        sum += sign * ln_mag.exp() * c.powi(pc) * s.powi(ps);
    }
    sum
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::so3::rng::SplitMix64;
    use crate::so3::rotation::random_rotation;
    use crate::so3::sh::{num_coeffs, real_sh_f64};

    #[test]
    fn offsets() {
        assert_eq!(block_offset(1), 1);
        assert_eq!(block_offset(2), 10);
        assert_eq!(block_offset(3), 35);
        assert_eq!(block_entries(4), 165);
    }

    #[test]
    fn rotates_harmonics() {
        let seed = 77;
        let mut rng = SplitMix64::new(seed);
        let l_max = 8;
        let nc = num_coeffs(l_max);
        let (mut a, mut b, mut c) = (vec![0.0; nc], vec![0.0; nc], vec![0.0; nc]);
        for _ in 0..20 {
            let r = random_rotation(&mut rng);
            let d = WignerD::new(&r, l_max);
            let u = rng.unit_vector();
            let ru = r * nalgebra::Vector3::from(u);
            real_sh_f64(l_max, u, &mut a);
            real_sh_f64(l_max, [ru.x, ru.y, ru.z], &mut b);
            d.apply(&a, &mut c);
            for k in 0..nc {
                assert!(
                    (b[k] - c[k]).abs() < 1e-12,
                    "seed {seed} k={k}: {} vs {}",
                    b[k],
                    c[k]
                );
            }
        }
    }
}
