//! The vectorised inner loops of the engine: the per-neighbour pass (distances, directions,
//! harmonics, eight neighbours at a time), radial weights, and the projection of the
//! neighbours' harmonics onto the shells.
//!
//! All run over structure-of-arrays buffers padded to a multiple of eight neighbours, so that
//! the compiler turns them into SIMD code. Where the processor has AVX2 and FMA (checked once,
//! at run time) the loops are compiled for them and the projection uses fused multiply-adds;
//! elsewhere a portable build of the same loops runs. The per-neighbour values and the weights
//! are bit-identical on both builds. Each projection sum runs in eight lanes (neighbours
//! `j ≡ i (mod 8)` in ascending point index) added in a fixed tree, so on one machine the result
//! is the same for any number of threads; the two kernels differ only by the rounding that
//! fusing saves (a few f32 units in the last place).

use super::radial::{cutoff, exp};
use crate::so3::sh::{num_coeffs, real_sh_f32, real_sh_lanes8_f32};

/// Which build of the loops runs.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Kernel {
    /// Plain multiply and add, any processor.
    Portable,
    /// AVX2 with fused multiply-add (x86-64).
    #[cfg(target_arch = "x86_64")]
    Avx2Fma,
}

impl Kernel {
    /// The fastest kernel this processor runs.
    pub(crate) fn detect() -> Kernel {
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx2") && std::arch::is_x86_feature_detected!("fma")
        {
            return Kernel::Avx2Fma;
        }
        Kernel::Portable
    }
}

/// Cutoffs `fc[j] = f_c(ρ_j)` and weights (`step` is scratch) `w[n·J + j] = g_n(ρ_j) f_c(ρ_j)` for the `J = rho.len()`
/// neighbours; returns `Σ_j f_c(ρ_j)` summed in order.
pub(crate) fn weights(
    k: Kernel,
    rho: &[f32],
    n_sh: usize,
    fc: &mut Vec<f32>,
    step: &mut Vec<f32>,
    w: &mut Vec<f32>,
) -> f32 {
    match k {
        Kernel::Portable => weights_impl(rho, n_sh, fc, step, w),
        #[cfg(target_arch = "x86_64")]
        // SAFETY: `Avx2Fma` is only chosen after the processor reported AVX2 and FMA.
        Kernel::Avx2Fma => unsafe { weights_avx2(rho, n_sh, fc, step, w) },
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
fn weights_avx2(
    rho: &[f32],
    n_sh: usize,
    fc: &mut Vec<f32>,
    step: &mut Vec<f32>,
    w: &mut Vec<f32>,
) -> f32 {
    // The default recipe's six shells as a constant (same operations, same bits).
    if n_sh == 6 {
        return weights_impl(rho, 6, fc, step, w);
    }
    weights_impl(rho, n_sh, fc, step, w)
}

/// The same arithmetic on every kernel (Rust never fuses a multiply and an add on its own), so
/// the weights are bit-identical whichever build runs; AVX2 only makes the vectors wider.
#[inline(always)]
fn weights_impl(
    rho: &[f32],
    n_sh: usize,
    fc: &mut Vec<f32>,
    step: &mut Vec<f32>,
    w: &mut Vec<f32>,
) -> f32 {
    let j = rho.len();
    fc.clear();
    fc.extend(rho.iter().map(|&r| cutoff(r)));
    let mut wsum = 0.0f32;
    for &f in fc.iter() {
        wsum += f;
    }
    w.resize(n_sh * j, 0.0);
    let nf = n_sh as f32;
    if n_sh <= RECURRENCE_SHELLS && j > 0 {
        // g_0 = exp(−(t − ½)²/2), then g_{n+1} = g_n · exp(t − n − 1): two exponentials per
        // neighbour; the step factor shrinks by 1/e per shell. With N ≤ 8 nothing leaves the
        // normal f32 range (g ≥ e^−29, steps ≤ e^7).
        step.clear();
        step.extend(rho.iter().map(|&r| exp(r * nf - 1.0)));
        let (first, rest) = w.split_at_mut(j);
        for (o, &r) in first.iter_mut().zip(rho) {
            let a = r * nf - 0.5;
            *o = exp(-0.5 * a * a);
        }
        let mut prev: &mut [f32] = first;
        for wn in rest.chunks_exact_mut(j).take(n_sh - 1) {
            for ((o, p), st) in wn.iter_mut().zip(prev.iter()).zip(step.iter_mut()) {
                *o = p * *st;
                *st *= INV_E;
            }
            prev = wn;
        }
        for wn in w.chunks_exact_mut(j) {
            for (o, &f) in wn.iter_mut().zip(fc.iter()) {
                *o *= f;
            }
        }
    } else {
        for (n, wn) in w.chunks_exact_mut(j.max(1)).take(n_sh).enumerate() {
            let off = n as f32 + 0.5;
            for ((o, &r), &f) in wn.iter_mut().zip(rho).zip(fc.iter()) {
                let a = r * nf - off;
                *o = exp(-0.5 * a * a) * f;
            }
        }
    }
    wsum
}

/// Up to this many shells the weights use the two-exponential recurrence.
const RECURRENCE_SHELLS: usize = 8;

/// `1/e`.
pub(super) const INV_E: f32 = 0.367_879_44;

/// Neighbours are processed in lanes of this many; buffers are padded to a multiple of it.
pub(crate) const LANES: usize = 8;

/// The version-2 fade `h = 1 − exp(−s²)` at `s = ρ/ρ₀`: below `s² = 1/64` the cubic Taylor
/// polynomial `x − x²/2 + x³/6` (`x = s²`, relative error below 2e-7), which keeps the relative
/// accuracy that `1 − exp(−x)` loses to cancellation near the centre; above it, the
/// difference itself (absolute error about 1e-7).
#[inline(always)]
pub(crate) fn fade_factor(s: f32) -> f32 {
    let x = s * s;
    let series = x * (1.0 - x * (0.5 - x * (1.0 / 6.0)));
    let direct = 1.0 - exp(-x);
    if x < 1.0 / 64.0 { series } else { direct }
}

/// Per-neighbour pass over `J = d2.len()` neighbours (a multiple of [`LANES`]), given their
/// offsets `dx, dy, dz` and squared distances `d2 > 0`: `rho[j] = min(|d_j|/r, 1)` (with
/// `inv_r = 1/r`) and the harmonics of `d_j/|d_j|`, structure of arrays, `y[k·J + j]` for the
/// flat index `k < (L+1)²`. With `fade = Some(1/ρ₀)` (version 2) the harmonics of degree
/// `l ≥ 1` are multiplied by [`fade_factor`]`(ρ/ρ₀)`, so the projection applies the fade to
/// them alone. Plain IEEE square roots, divisions and products (no fusing), so the values are
/// bit-identical on every kernel and to the one-direction functions of so3.
#[allow(clippy::too_many_arguments)]
pub(crate) fn directions(
    k: Kernel,
    l_max: usize,
    inv_r: f32,
    fade: Option<f32>,
    dx: &[f32],
    dy: &[f32],
    dz: &[f32],
    d2: &[f32],
    rho: &mut Vec<f32>,
    y: &mut Vec<f32>,
) {
    match k {
        Kernel::Portable => directions_impl(l_max, inv_r, fade, dx, dy, dz, d2, rho, y),
        #[cfg(target_arch = "x86_64")]
        // SAFETY: `Avx2Fma` is only chosen after the processor reported AVX2 and FMA.
        Kernel::Avx2Fma => unsafe { directions_avx2(l_max, inv_r, fade, dx, dy, dz, d2, rho, y) },
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
#[allow(clippy::too_many_arguments)]
fn directions_avx2(
    l_max: usize,
    inv_r: f32,
    fade: Option<f32>,
    dx: &[f32],
    dy: &[f32],
    dz: &[f32],
    d2: &[f32],
    rho: &mut Vec<f32>,
    y: &mut Vec<f32>,
) {
    if l_max > 4 {
        return directions_impl(l_max, inv_r, fade, dx, dy, dz, d2, rho, y);
    }
    // The closed form written with 256-bit instructions (same operations, same bits).
    let jp = d2.len();
    let nk = num_coeffs(l_max);
    rho.resize(jp, 0.0);
    if y.len() < nk * jp {
        y.resize(nk * jp, 0.0);
    }
    super::avx2::directions_closed(l_max, inv_r, fade, dx, dy, dz, d2, rho, y)
}

#[inline(always)]
#[allow(clippy::too_many_arguments)]
fn directions_impl(
    l_max: usize,
    inv_r: f32,
    fade: Option<f32>,
    dx: &[f32],
    dy: &[f32],
    dz: &[f32],
    d2: &[f32],
    rho: &mut Vec<f32>,
    y: &mut Vec<f32>,
) {
    let jp = d2.len();
    debug_assert!(jp.is_multiple_of(LANES));
    let nk = num_coeffs(l_max);
    // Every value in use is overwritten below. The harmonic table only grows (rows of stride
    // `jp`; values beyond `nk·jp` are stale and never read), so a centre with more neighbours
    // than the last does not pay for zero-filling it.
    rho.resize(jp, 0.0);
    if y.len() < nk * jp {
        y.resize(nk * jp, 0.0);
    }
    let mut sh = [[0.0f32; LANES]; 25];
    let mut row = vec![0.0f32; if l_max > 4 { nk } else { 0 }];
    for (b, (((x8, y8), z8), q8)) in dx
        .chunks_exact(LANES)
        .zip(dy.chunks_exact(LANES))
        .zip(dz.chunks_exact(LANES))
        .zip(d2.chunks_exact(LANES))
        .enumerate()
    {
        let j0 = b * LANES;
        let mut u = [[0.0f32; LANES]; 3];
        let r8 = &mut rho[j0..j0 + LANES];
        for i in 0..LANES {
            let dist = q8[i].sqrt();
            r8[i] = (dist * inv_r).min(1.0);
            let inv = 1.0 / dist;
            u[0][i] = x8[i] * inv;
            u[1][i] = y8[i] * inv;
            u[2][i] = z8[i] * inv;
        }
        if l_max <= 4 {
            real_sh_lanes8_f32(l_max, u[0], u[1], u[2], &mut sh);
            if let Some(inv_rho0) = fade {
                let h: [f32; LANES] = std::array::from_fn(|i| fade_factor(r8[i] * inv_rho0));
                for v in sh[1..nk].iter_mut() {
                    for i in 0..LANES {
                        v[i] *= h[i];
                    }
                }
            }
            for (kk, v) in sh[..nk].iter().enumerate() {
                y[kk * jp + j0..kk * jp + j0 + LANES].copy_from_slice(v);
            }
        } else {
            for i in 0..LANES {
                real_sh_f32(l_max, [u[0][i], u[1][i], u[2][i]], &mut row);
                let h = fade.map_or(1.0, |inv_rho0| fade_factor(r8[i] * inv_rho0));
                y[j0 + i] = row[0];
                for (kk, &v) in row.iter().enumerate().skip(1) {
                    y[kk * jp + j0 + i] = if fade.is_some() { v * h } else { v };
                }
            }
        }
    }
}

/// [`directions`] of the `J = d2.len()` (padded) neighbours of which the first `count` are
/// real, then [`weights`] at their `ρ` with `ρ = 1` in the padding: fills `y` and `w` (`rho`,
/// `fc` and `step` are scratch) and returns `Σ_j f_c(ρ_j)`. On AVX2 with `l_max ≤ 4` and at
/// most eight shells, one pass computes both ([`super::avx2::directions_weights`], the same
/// bits).
#[allow(clippy::too_many_arguments)]
pub(crate) fn directions_weights(
    k: Kernel,
    l_max: usize,
    inv_r: f32,
    fade: Option<f32>,
    n_sh: usize,
    count: usize,
    d: [&[f32]; 4],
    scratch: [&mut Vec<f32>; 3],
    y: &mut Vec<f32>,
    w: &mut Vec<f32>,
) -> f32 {
    let [rho, fc, step] = scratch;
    #[cfg(target_arch = "x86_64")]
    if k == Kernel::Avx2Fma && l_max <= 4 && (1..=RECURRENCE_SHELLS).contains(&n_sh) {
        let jp = d[3].len();
        let nk = num_coeffs(l_max);
        // Both tables only grow (rows of stride `jp`; values beyond are stale, never read).
        if y.len() < nk * jp {
            y.resize(nk * jp, 0.0);
        }
        if w.len() < n_sh * jp {
            w.resize(n_sh * jp, 0.0);
        }
        // SAFETY: `Avx2Fma` is only chosen after the processor reported AVX2 and FMA.
        return unsafe {
            super::avx2::directions_weights(l_max, inv_r, fade, n_sh, count, d, y, w)
        };
    }
    let [dx, dy, dz, d2] = d;
    directions(k, l_max, inv_r, fade, dx, dy, dz, d2, rho, y);
    // Padding lanes sit on the sphere: f_c(1) = 0 exactly, so their weights are 0 and their
    // cutoffs add exact zeros to the sum.
    rho[count..].fill(1.0);
    weights(k, rho, n_sh, fc, step, w)
}

/// `c[k] = acc[k] / w` for every `k` of `acc` (one correctly rounded division each, so the
/// AVX2 build, eight at a time, gives the same bits).
pub(crate) fn divide(k: Kernel, acc: &[f32], w: f32, c: &mut [f32]) {
    match k {
        Kernel::Portable => divide_impl(acc, w, c),
        #[cfg(target_arch = "x86_64")]
        // SAFETY: `Avx2Fma` is only chosen after the processor reported AVX2 and FMA.
        Kernel::Avx2Fma => unsafe { divide_avx2(acc, w, c) },
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
fn divide_avx2(acc: &[f32], w: f32, c: &mut [f32]) {
    divide_impl(acc, w, c);
}

#[inline(always)]
fn divide_impl(acc: &[f32], w: f32, c: &mut [f32]) {
    for (o, a) in c.iter_mut().zip(acc) {
        *o = a / w;
    }
}

/// `acc[n·K + k] = Σ_j w[n·J + j] · y[k·J + j]` for `n < n_sh`, `k < K = nk`, over the `J`
/// (a multiple of [`LANES`]) neighbours: each lane `i` sums the neighbours `j ≡ i (mod 8)` in
/// ascending `j`, then the eight lane sums are added in a fixed tree. The order depends only on
/// `J`, never on the thread or the tree's visiting order.
/// `lanes` is scratch space (the eight lane sums of every value before the tree).
#[allow(clippy::too_many_arguments)]
pub(crate) fn project(
    k: Kernel,
    w: &[f32],
    y: &[f32],
    jp: usize,
    n_sh: usize,
    nk: usize,
    lanes: &mut Vec<[f32; LANES]>,
    acc: &mut [f32],
) {
    lanes.resize(n_sh * nk, [0.0; LANES]);
    match k {
        Kernel::Portable => {
            project_impl::<false>(w, y, jp, n_sh, nk, lanes);
            for (o, l) in acc[..n_sh * nk].iter_mut().zip(lanes.iter()) {
                *o = ((l[0] + l[1]) + (l[2] + l[3])) + ((l[4] + l[5]) + (l[6] + l[7]));
            }
        }
        #[cfg(target_arch = "x86_64")]
        // SAFETY: `Avx2Fma` is only chosen after the processor reported AVX2 and FMA.
        Kernel::Avx2Fma => unsafe {
            project_avx2(w, y, jp, n_sh, nk, lanes, &mut acc[..n_sh * nk])
        },
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
fn project_avx2(
    w: &[f32],
    y: &[f32],
    jp: usize,
    n_sh: usize,
    nk: usize,
    _lanes: &mut [[f32; LANES]],
    acc: &mut [f32],
) {
    // The default recipe's shape (N = 6, L = 4) with constant bounds, which the compiler
    // unrolls (same operations, same bits).
    if (n_sh, nk) == (6, 25) {
        return super::avx2::project(w, y, jp, 6, 25, acc);
    }
    super::avx2::project(w, y, jp, n_sh, nk, acc)
}

/// The lane sums `lanes[n·K + k][i]` of [`project`], before the tree.
#[inline(always)]
fn project_impl<const FMA: bool>(
    w: &[f32],
    y: &[f32],
    jp: usize,
    n_sh: usize,
    nk: usize,
    acc: &mut [[f32; LANES]],
) {
    debug_assert!(jp.is_multiple_of(LANES));
    let mut n = 0;
    while n < n_sh {
        let two = n + 2 <= n_sh;
        let mut k = 0;
        while k < nk {
            let five = k + 5 <= nk;
            match (two, five) {
                (true, true) => tile::<2, 5, FMA>(w, y, jp, n, k, nk, acc),
                (true, false) => tile::<2, 1, FMA>(w, y, jp, n, k, nk, acc),
                (false, true) => tile::<1, 5, FMA>(w, y, jp, n, k, nk, acc),
                (false, false) => tile::<1, 1, FMA>(w, y, jp, n, k, nk, acc),
            }
            k += if five { 5 } else { 1 };
        }
        n += if two { 2 } else { 1 };
    }
}

/// Sums of shells `n..n + NB` against harmonics `k..k + KB`, lane sums kept in registers.
#[inline(always)]
fn tile<const NB: usize, const KB: usize, const FMA: bool>(
    w: &[f32],
    y: &[f32],
    jp: usize,
    n: usize,
    k: usize,
    nk: usize,
    acc: &mut [[f32; LANES]],
) {
    let wr: [&[f32]; NB] = std::array::from_fn(|a| &w[(n + a) * jp..(n + a + 1) * jp]);
    let yr: [&[f32]; KB] = std::array::from_fn(|b| &y[(k + b) * jp..(k + b + 1) * jp]);
    let mut s = [[[0.0f32; LANES]; KB]; NB];
    for j0 in (0..jp).step_by(LANES) {
        let wv: [[f32; LANES]; NB] =
            std::array::from_fn(|a| wr[a][j0..j0 + LANES].try_into().expect("lane block"));
        for b in 0..KB {
            let yv: &[f32; LANES] = yr[b][j0..j0 + LANES].try_into().expect("lane block");
            for a in 0..NB {
                for i in 0..LANES {
                    s[a][b][i] = if FMA {
                        wv[a][i].mul_add(yv[i], s[a][b][i])
                    } else {
                        wv[a][i] * yv[i] + s[a][b][i]
                    };
                }
            }
        }
    }
    for a in 0..NB {
        for b in 0..KB {
            acc[(n + a) * nk + k + b] = s[a][b];
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Projection inputs: `n_sh` shells of weights for `count` neighbours padded to `jp` (zero
    /// weights in the padding) and `nk` columns of harmonic values, from fixed integer hashes.
    fn projection_inputs(count: usize, jp: usize, n_sh: usize, nk: usize) -> (Vec<f32>, Vec<f32>) {
        let w = (0..n_sh * jp)
            .map(|i| {
                if i % jp < count {
                    ((i * 7919) % 101) as f32 / 101.0
                } else {
                    0.0
                }
            })
            .collect();
        let y = (0..nk * jp)
            .map(|i| ((i * 104_729) % 97) as f32 / 48.0 - 1.0)
            .collect();
        (w, y)
    }

    #[test]
    fn projection_kernels_agree_with_a_plain_sum() {
        // 37 neighbours padded to 40 (zero weights), 3 shells and 27 columns: every tile shape.
        let (count, jp, n_sh, nk) = (37, 40, 3, 27);
        let (w, y) = projection_inputs(count, jp, n_sh, nk);
        for k in [Kernel::Portable, Kernel::detect()] {
            let mut acc = vec![0.0f32; n_sh * nk];
            project(k, &w, &y, jp, n_sh, nk, &mut Vec::new(), &mut acc);
            for n in 0..n_sh {
                for c in 0..nk {
                    let want: f64 = (0..count)
                        .map(|j| w[n * jp + j] as f64 * y[c * jp + j] as f64)
                        .sum();
                    assert!(
                        (acc[n * nk + c] as f64 - want).abs() < 1e-5,
                        "{k:?} n {n} col {c}"
                    );
                }
            }
        }
    }

    #[test]
    fn avx2_projection_is_the_lane_by_lane_fused_sum() {
        // The AVX2 tiles against the same sums written lane by lane with `f32::mul_add` (one
        // rounding, as the FMA instruction) and the scalar tree: the same bits.
        if Kernel::detect() == Kernel::Portable {
            return;
        }
        for (count, n_sh, nk) in [
            (37usize, 3usize, 27usize),
            (8, 6, 25),
            (80, 6, 25),
            (3, 1, 9),
        ] {
            let jp = count.div_ceil(LANES) * LANES;
            let (w, y) = projection_inputs(count, jp, n_sh, nk);
            let mut got = vec![0.0f32; n_sh * nk];
            project(
                Kernel::detect(),
                &w,
                &y,
                jp,
                n_sh,
                nk,
                &mut Vec::new(),
                &mut got,
            );
            let mut lanes = vec![[0.0f32; LANES]; n_sh * nk];
            project_impl::<true>(&w, &y, jp, n_sh, nk, &mut lanes);
            for (g, l) in got.iter().zip(&lanes) {
                let want = ((l[0] + l[1]) + (l[2] + l[3])) + ((l[4] + l[5]) + (l[6] + l[7]));
                assert_eq!(
                    g.to_bits(),
                    want.to_bits(),
                    "count {count}, N {n_sh}, K {nk}"
                );
            }
        }
    }

    #[test]
    fn fade_matches_expm1_in_f64() {
        // Reference: f64 `exp_m1` of the standard library (libm), common practice.
        let mut worst_rel = 0.0f64;
        let mut worst_abs = 0.0f64;
        for i in 0..=20_000 {
            let s = 5.0 * (i as f32 / 20_000.0).powi(3);
            let want = -(-(s as f64) * s as f64).exp_m1();
            let got = fade_factor(s) as f64;
            worst_abs = worst_abs.max((got - want).abs());
            if want > 0.0 {
                worst_rel = worst_rel.max((got - want).abs() / want);
            }
        }
        assert!(worst_abs < 2e-7, "absolute {worst_abs:e}");
        // Relative accuracy near the centre, where 1 − e^−x would cancel.
        for s in [1e-6f32, 1e-4, 1e-2, 0.1] {
            let want = -(-(s as f64) * s as f64).exp_m1();
            let e = (fade_factor(s) as f64 - want).abs() / want;
            assert!(e < 1e-6, "s {s}: relative {e:e}");
        }
        assert_eq!(fade_factor(0.0), 0.0);
        assert_eq!(fade_factor(10.0), 1.0);
        assert!(worst_rel < 1e-5, "relative {worst_rel:e}");
    }

    #[test]
    fn one_pass_directions_and_weights_give_the_two_passes_bits() {
        // The AVX2 pass that computes both against the portable directions and weights run
        // one after the other (on a processor without AVX2 both sides are the portable ones).
        let mut s = 0x2545_f491_4f6c_dd1du64;
        let mut next = move || {
            s ^= s << 13;
            s ^= s >> 7;
            s ^= s << 17;
            (s >> 40) as f32 / (1u64 << 24) as f32 * 2.0 - 1.0
        };
        for (count, n_sh, l_max, fade) in [
            (1usize, 6usize, 4usize, Some(12.0f32)),
            (7, 6, 4, Some(12.0)),
            (19, 6, 4, Some(12.0)),
            (75, 6, 4, Some(12.0)),
            (75, 6, 4, None),
            (16, 1, 2, None),
            (33, 8, 3, Some(16.0)),
        ] {
            let jp = count.div_ceil(LANES) * LANES;
            let r = 1.5f32;
            // Offsets inside the sphere (some near the centre); padding (r, 0, 0) as the
            // engine pads.
            let mut d: [Vec<f32>; 4] = Default::default();
            for j in 0..jp {
                let v = if j < count {
                    let scale = if j % 5 == 0 { 1e-3 } else { 0.8 };
                    [next() * scale, next() * scale, next() * scale]
                } else {
                    [r, 0.0, 0.0]
                };
                for (a, x) in d.iter_mut().zip(v) {
                    a.push(x);
                }
                d[3].push(v[0] * v[0] + v[1] * v[1] + v[2] * v[2]);
            }
            let run = |k: Kernel| {
                let (mut rho, mut fc, mut step) = (Vec::new(), Vec::new(), Vec::new());
                let (mut y, mut w) = (Vec::new(), Vec::new());
                let sum = directions_weights(
                    k,
                    l_max,
                    1.0 / r,
                    fade,
                    n_sh,
                    count,
                    [&d[0], &d[1], &d[2], &d[3]],
                    [&mut rho, &mut fc, &mut step],
                    &mut y,
                    &mut w,
                );
                let bits = |v: &[f32]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
                (
                    sum.to_bits(),
                    bits(&y[..num_coeffs(l_max) * jp]),
                    bits(&w[..n_sh * jp]),
                )
            };
            assert_eq!(
                run(Kernel::detect()),
                run(Kernel::Portable),
                "count {count}, N {n_sh}, L {l_max}, fade {fade:?}"
            );
        }
    }

    #[test]
    fn directions_match_the_one_direction_harmonics() {
        for l_max in [0usize, 2, 4, 5] {
            let nk = num_coeffs(l_max);
            let jp = 24;
            // The last eight sit near the centre, where the fade takes its series branch.
            let d: Vec<[f32; 3]> = (0..jp)
                .map(|i| {
                    let t = i as f32 * 0.7;
                    let v = [t.cos() * 1.3, (t * 1.7).sin() - 0.2, 0.4 * t - 2.0];
                    if i < 16 {
                        v
                    } else {
                        v.map(|x| x * 1e-3 * (i - 15) as f32)
                    }
                })
                .collect();
            let (dx, dy, dz): (Vec<f32>, Vec<f32>, Vec<f32>) = (
                d.iter().map(|v| v[0]).collect(),
                d.iter().map(|v| v[1]).collect(),
                d.iter().map(|v| v[2]).collect(),
            );
            let d2: Vec<f32> = d
                .iter()
                .map(|v| v[0] * v[0] + v[1] * v[1] + v[2] * v[2])
                .collect();
            for k in [Kernel::Portable, Kernel::detect()] {
                let (mut rho, mut y) = (Vec::new(), Vec::new());
                directions(k, l_max, 0.5, None, &dx, &dy, &dz, &d2, &mut rho, &mut y);
                let mut row = vec![0.0f32; nk];
                let (mut rho2, mut y2) = (Vec::new(), Vec::new());
                let fade = 12.0;
                directions(
                    k,
                    l_max,
                    0.5,
                    Some(fade),
                    &dx,
                    &dy,
                    &dz,
                    &d2,
                    &mut rho2,
                    &mut y2,
                );
                assert_eq!(rho2, rho);
                for j in 0..jp {
                    let dist = d2[j].sqrt();
                    assert_eq!(rho[j], (dist * 0.5).min(1.0));
                    let inv = 1.0 / dist;
                    real_sh_f32(
                        l_max,
                        [d[j][0] * inv, d[j][1] * inv, d[j][2] * inv],
                        &mut row,
                    );
                    let h = fade_factor(rho[j] * fade);
                    for c in 0..nk {
                        assert_eq!(y[c * jp + j], row[c], "{k:?} L {l_max} j {j} k {c}");
                        let faded = if c == 0 { row[c] } else { row[c] * h };
                        assert_eq!(y2[c * jp + j], faded, "{k:?} L {l_max} j {j} k {c}");
                    }
                }
            }
        }
    }
}
