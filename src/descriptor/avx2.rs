//! The AVX2 build of the per-neighbour pass and of the projection's lane reduction, written
//! with explicit 256-bit instructions (x86-64 only, chosen at run time by
//! [`super::kernel::Kernel::detect`]).
//!
//! Every value is computed by the same IEEE operations, in the same order, as the portable
//! code it replaces (no fused multiply-add here: a product and a sum are two roundings, as in
//! the scalar source), so the harmonics, radii and version-2 fade are bit-identical to
//! [`crate::so3::sh::real_sh_f32`], [`super::kernel::fade_factor`] and
//! [`super::radial::exp`], and the lane sums are reduced in the same tree
//! `((l0 + l1) + (l2 + l3)) + ((l4 + l5) + (l6 + l7))`. The compiler left to itself turned the
//! eight-lane closed form into many shuffles (a quarter of the engine's time at ~80
//! neighbours, DEVELOPERS.md "Descriptor engine"); written out here each harmonic is a handful
//! of vector products.

use std::arch::x86_64::*;

use super::kernel::LANES;

/// `1/(2√π)`, the constant `Y_00` (as in so3's closed form).
const Y00: f64 = 0.282_094_791_773_878_14;

/// A constant in every lane, rounded from `f64` as so3's `Poly::constant` rounds it.
#[target_feature(enable = "avx2,fma")]
#[inline]
fn k(v: f64) -> __m256 {
    _mm256_set1_ps(v as f32)
}

macro_rules! mul {
    ($a:expr, $b:expr $(,)?) => {
        _mm256_mul_ps($a, $b)
    };
}
macro_rules! add {
    ($a:expr, $b:expr $(,)?) => {
        _mm256_add_ps($a, $b)
    };
}
macro_rules! sub {
    ($a:expr, $b:expr $(,)?) => {
        _mm256_sub_ps($a, $b)
    };
}

/// `e^x` lane by lane, the operations of [`super::radial::exp`] one for one.
#[target_feature(enable = "avx2,fma")]
#[inline]
fn exp8(x: __m256) -> __m256 {
    const ROUND: f32 = 12_582_912.0;
    const LOG2E: f32 = std::f32::consts::LOG2_E;
    const C1: f32 = 0.693_359_4;
    const C2: f32 = -2.121_944_4e-4;
    let lo = _mm256_set1_ps(-87.0);
    let xc = _mm256_max_ps(x, lo);
    let v = add!(mul!(xc, _mm256_set1_ps(LOG2E)), _mm256_set1_ps(ROUND));
    let k_bits = _mm256_sub_epi32(
        _mm256_castps_si256(v),
        _mm256_set1_epi32(ROUND.to_bits() as i32),
    );
    let kf = sub!(v, _mm256_set1_ps(ROUND));
    let r = sub!(
        sub!(xc, mul!(kf, _mm256_set1_ps(C1))),
        mul!(kf, _mm256_set1_ps(C2))
    );
    let mut p = _mm256_set1_ps(1.987_569_1e-4);
    for c in [
        1.398_199_9e-3,
        8.333_452e-3,
        4.166_579_6e-2,
        1.666_666_5e-1,
        0.5,
    ] {
        p = add!(mul!(p, r), _mm256_set1_ps(c));
    }
    let y = add!(add!(mul!(mul!(p, r), r), r), _mm256_set1_ps(1.0));
    let scale = _mm256_castsi256_ps(_mm256_slli_epi32::<23>(_mm256_add_epi32(
        k_bits,
        _mm256_set1_epi32(127),
    )));
    let below = _mm256_cmp_ps::<_CMP_LT_OQ>(x, lo);
    _mm256_andnot_ps(below, mul!(y, scale))
}

/// The version-2 fade of [`super::kernel::fade_factor`] lane by lane.
#[target_feature(enable = "avx2,fma")]
#[inline]
fn fade8(sv: __m256) -> __m256 {
    let c = _mm256_set1_ps;
    let x = mul!(sv, sv);
    let inner = sub!(c(0.5), mul!(x, c(1.0 / 6.0)));
    let series = mul!(x, sub!(c(1.0), mul!(x, inner)));
    let direct = sub!(c(1.0), exp8(_mm256_xor_ps(x, c(-0.0))));
    let small = _mm256_cmp_ps::<_CMP_LT_OQ>(x, c(1.0 / 64.0));
    _mm256_blendv_ps(direct, series, small)
}

/// [`super::kernel::directions`] for `l_max ≤ 4` on AVX2: `rho[j] = min(|d_j|·inv_r, 1)` and
/// the harmonics `y[k·J + j]` (`J = d2.len()`, a multiple of [`LANES`]), degrees `l ≥ 1` times
/// the fade when `fade = Some(1/ρ₀)`.
///
/// # Panics
/// If `l_max > 4`, the offsets differ in length, or `rho`/`y` are shorter than `J` / `(L+1)²·J`.
#[target_feature(enable = "avx2,fma")]
#[allow(clippy::too_many_arguments)]
pub(crate) fn directions_closed(
    l_max: usize,
    inv_r: f32,
    fade: Option<f32>,
    dx: &[f32],
    dy: &[f32],
    dz: &[f32],
    d2: &[f32],
    rho: &mut [f32],
    y: &mut [f32],
) {
    let jp = d2.len();
    let nk = (l_max + 1) * (l_max + 1);
    assert!(l_max <= 4 && jp.is_multiple_of(LANES));
    assert!(dx.len() == jp && dy.len() == jp && dz.len() == jp);
    assert!(rho.len() >= jp && y.len() >= nk * jp);
    let s = _mm256_set1_ps;
    let inv_r8 = s(inv_r);
    let mut sh = [s(0.0); 25];
    for j0 in (0..jp).step_by(LANES) {
        // SAFETY: `j0 + 8 ≤ jp` and every slice holds at least `jp` values (asserted above);
        // the stores to `y` stay below `nk·jp`.
        unsafe {
            let r8 = harmonics8([dx, dy, dz, d2], j0, inv_r8, fade, nk, &mut sh, y);
            _mm256_storeu_ps(rho.as_mut_ptr().add(j0), r8);
        }
    }
}

/// [`directions_closed`] with the radial weights of [`super::kernel::weights`] (the
/// recurrence of at most eight shells) computed in the same pass, eight neighbours at a time
/// in registers: the weights `w[n·J + j] = g_n(ρ_j) f_c(ρ_j)` of `n_sh` shells with `ρ = 1`
/// in the padding lanes `j ≥ count` (as the engine sets them; the harmonics of the padding
/// keep the unset `ρ`, as in the separate passes), and the returned `Σ_j f_c(ρ_j)` summed
/// one neighbour at a time in ascending `j`. Same operations in the same order as the two
/// passes, so the same bits; `ρ` itself is not stored. Folding them saves the weights'
/// passes over memory, and the sum's chain of dependent additions runs beside the vector
/// work instead of alone.
///
/// # Panics
/// As [`directions_closed`], and if `n_sh` is not 1 to 8, `count > J` or `w` is shorter than
/// `n_sh·J`.
#[target_feature(enable = "avx2,fma")]
#[allow(clippy::too_many_arguments)]
pub(crate) fn directions_weights(
    l_max: usize,
    inv_r: f32,
    fade: Option<f32>,
    n_sh: usize,
    count: usize,
    d: [&[f32]; 4],
    y: &mut [f32],
    w: &mut [f32],
) -> f32 {
    let [dx, dy, dz, d2] = d;
    let jp = d2.len();
    let nk = (l_max + 1) * (l_max + 1);
    assert!(l_max <= 4 && jp.is_multiple_of(LANES));
    assert!((1..=8).contains(&n_sh) && count <= jp);
    assert!(dx.len() == jp && dy.len() == jp && dz.len() == jp);
    assert!(y.len() >= nk * jp && w.len() >= n_sh * jp);
    let s = _mm256_set1_ps;
    let one = s(1.0);
    let inv_r8 = s(inv_r);
    let nf = s(n_sh as f32);
    let lane = _mm256_setr_epi32(0, 1, 2, 3, 4, 5, 6, 7);
    let mut sh = [s(0.0); 25];
    let mut wsum = 0.0f32;
    for j0 in (0..jp).step_by(LANES) {
        // SAFETY: `j0 + 8 ≤ jp` and every slice holds at least `jp` values (asserted above);
        // the stores to `y` stay below `nk·jp`, those to `w` below `n_sh·jp`.
        unsafe {
            let r8 = harmonics8([dx, dy, dz, d2], j0, inv_r8, fade, nk, &mut sh, y);
            // The weights, at ρ = 1 in the padding lanes.
            let pad = _mm256_cmpgt_epi32(
                _mm256_add_epi32(lane, _mm256_set1_epi32(j0 as i32)),
                _mm256_set1_epi32(count as i32 - 1),
            );
            let rw = _mm256_blendv_ps(r8, one, _mm256_castsi256_ps(pad));
            let fc = cutoff8(rw);
            let mut f = [0.0f32; LANES];
            _mm256_storeu_ps(f.as_mut_ptr(), fc);
            for v in f {
                wsum += v;
            }
            let mut st = exp8(sub!(mul!(rw, nf), one));
            let a = sub!(mul!(rw, nf), s(0.5));
            let mut g = exp8(mul!(mul!(s(-0.5), a), a));
            _mm256_storeu_ps(w.as_mut_ptr().add(j0), mul!(g, fc));
            for n in 1..n_sh {
                g = mul!(g, st);
                st = mul!(st, s(super::kernel::INV_E));
                _mm256_storeu_ps(w.as_mut_ptr().add(n * jp + j0), mul!(g, fc));
            }
        }
    }
    wsum
}

/// The harmonics of the eight neighbours `j0..j0 + 8` (offsets `d = [dx, dy, dz, |d|²]`),
/// stored to `y[k·J + j]` (`J = d[3].len()`) for the `nk` harmonics, degrees `l ≥ 1` times the
/// fade when `fade = Some(1/ρ₀)`; returns their `ρ = min(|d|·inv_r, 1)`. The shared body of
/// [`directions_closed`] and [`directions_weights`].
///
/// # Safety
/// `j0 + 8 ≤ J`, the offsets hold at least `J` values each and `y` at least `nk·J`.
#[target_feature(enable = "avx2,fma")]
#[inline]
unsafe fn harmonics8(
    d: [&[f32]; 4],
    j0: usize,
    inv_r8: __m256,
    fade: Option<f32>,
    nk: usize,
    sh: &mut [__m256; 25],
    y: &mut [f32],
) -> __m256 {
    let [dx, dy, dz, d2] = d;
    let jp = d2.len();
    let one = _mm256_set1_ps(1.0);
    // SAFETY: the caller's bounds (above).
    unsafe {
        let q = _mm256_loadu_ps(d2.as_ptr().add(j0));
        let dist = _mm256_sqrt_ps(q);
        let r8 = _mm256_min_ps(_mm256_mul_ps(dist, inv_r8), one);
        let inv = _mm256_div_ps(one, dist);
        let x = _mm256_mul_ps(_mm256_loadu_ps(dx.as_ptr().add(j0)), inv);
        let yv = _mm256_mul_ps(_mm256_loadu_ps(dy.as_ptr().add(j0)), inv);
        let z = _mm256_mul_ps(_mm256_loadu_ps(dz.as_ptr().add(j0)), inv);
        closed8(x, yv, z, sh);
        if let Some(inv_rho0) = fade {
            let h = fade8(_mm256_mul_ps(r8, _mm256_set1_ps(inv_rho0)));
            for v in sh[1..nk].iter_mut() {
                *v = _mm256_mul_ps(*v, h);
            }
        }
        for (kk, v) in sh[..nk].iter().enumerate() {
            _mm256_storeu_ps(y.as_mut_ptr().add(kk * jp + j0), *v);
        }
        r8
    }
}

/// The cutoff of [`super::radial::cutoff`] lane by lane, the same operations.
#[target_feature(enable = "avx2,fma")]
#[inline]
fn cutoff8(rho: __m256) -> __m256 {
    let c = _mm256_set1_ps;
    let y = mul!(c(std::f32::consts::FRAC_PI_2), sub!(c(1.0), rho));
    let y2 = mul!(y, y);
    let mut p = c(-2.505_210_8e-8);
    for k in [2.755_731_9e-6, -1.984_127e-4, 8.333_333e-3, -1.666_666_7e-1] {
        p = add!(mul!(p, y2), c(k));
    }
    let sv = add!(y, mul!(mul!(y, y2), p));
    mul!(sv, sv)
}

/// so3's closed form of the harmonics up to degree 4 (`sh_closed`), operation for operation,
/// on eight unit directions.
#[target_feature(enable = "avx2,fma")]
#[inline]
fn closed8(x: __m256, y: __m256, z: __m256, out: &mut [__m256; 25]) {
    let unit = _mm256_set1_ps(1.0);
    out[0] = k(Y00);
    let k1 = k(0.488_602_511_902_919_9);
    out[1] = mul!(k1, y);
    out[2] = mul!(k1, z);
    out[3] = mul!(k1, x);
    let z2 = mul!(z, z);
    let c2 = sub!(mul!(x, x), mul!(y, y));
    let s2 = mul!(add!(x, x), y);
    let k22 = k(0.546_274_215_296_039_6);
    let k21 = k(1.092_548_430_592_079_2);
    let k20 = k(0.315_391_565_252_520_05);
    out[4] = mul!(k22, s2);
    out[5] = mul!(mul!(k21, z), y);
    out[6] = mul!(k20, sub!(mul!(k(3.0), z2), unit));
    out[7] = mul!(mul!(k21, z), x);
    out[8] = mul!(k22, c2);
    let c3 = sub!(mul!(x, c2), mul!(y, s2));
    let s3 = add!(mul!(x, s2), mul!(y, c2));
    let k33 = k(0.590_043_589_926_643_6);
    let k32 = k(1.445_305_721_320_277_3);
    let p31 = mul!(k(0.457_045_799_464_465_8), sub!(mul!(k(5.0), z2), unit));
    let k32z = mul!(k32, z);
    out[9] = mul!(k33, s3);
    out[10] = mul!(k32z, s2);
    out[11] = mul!(p31, y);
    out[12] = mul!(
        mul!(k(0.373_176_332_590_115_4), z),
        sub!(mul!(k(5.0), z2), k(3.0)),
    );
    out[13] = mul!(p31, x);
    out[14] = mul!(k32z, c2);
    out[15] = mul!(k33, c3);
    let c4 = sub!(mul!(x, c3), mul!(y, s3));
    let s4 = add!(mul!(x, s3), mul!(y, c3));
    let k44 = k(0.625_835_735_449_176_3);
    let k43z = mul!(k(1.770_130_769_779_930_7), z);
    let p42 = mul!(k(0.473_087_347_878_78), sub!(mul!(k(7.0), z2), unit));
    let p41 = mul!(
        mul!(k(0.669_046_543_557_289_2), z),
        sub!(mul!(k(7.0), z2), k(3.0)),
    );
    out[16] = mul!(k44, s4);
    out[17] = mul!(k43z, s3);
    out[18] = mul!(p42, s2);
    out[19] = mul!(p41, y);
    out[20] = mul!(
        k(0.105_785_546_915_204_31),
        add!(mul!(sub!(mul!(k(35.0), z2), k(30.0)), z2), k(3.0)),
    );
    out[21] = mul!(p41, x);
    out[22] = mul!(p42, c2);
    out[23] = mul!(k43z, c3);
    out[24] = mul!(k44, c4);
}

/// The power-spectrum block sums of [`super::invariants`] in four-wide f64 vectors, the eight
/// blocks of a group side by side in registers: block `(n, n')` gives `Σ_rows row[n] ·
/// row[n' + j]` (`j < 4`), each from `zero` in row order as `acc + x·v`. The rows hold f32
/// values widened to f64, so every product `x·v` is exact in f64 (24 + 24 significant bits ≤
/// 53, and no f32 product leaves f64's normal range): a fused multiply-add, which rounds
/// `acc + x·v` once, gives the bits of the scalar loop's product-then-sum in one instruction.
///
/// # Panics
/// If a block reads beyond a row (`n ≥ stride` or `n' + 4 > stride`) or `rows` is not whole
/// rows.
#[target_feature(enable = "avx2,fma")]
#[inline]
pub(crate) fn block_sums(
    rows: &[f64],
    stride: usize,
    group: &[(usize, usize); super::invariants::GROUP],
    zero: f64,
) -> [[f64; 4]; super::invariants::GROUP] {
    const G: usize = super::invariants::GROUP;
    assert!(stride > 0 && rows.len().is_multiple_of(stride));
    assert!(group.iter().all(|&(n, n2)| n < stride && n2 + 4 <= stride));
    let mut acc = [_mm256_set1_pd(zero); G];
    for r0 in (0..rows.len()).step_by(stride) {
        // SAFETY: `r0 + stride ≤ rows.len()` and every block reads inside its row (asserted).
        unsafe {
            let row = rows.as_ptr().add(r0);
            for b in 0..G {
                let (n, n2) = group[b];
                let x = _mm256_broadcast_sd(&*row.add(n));
                let v = _mm256_loadu_pd(row.add(n2));
                acc[b] = _mm256_fmadd_pd(x, v, acc[b]);
            }
        }
    }
    let mut out = [[0.0f64; 4]; G];
    for (o, a) in out.iter_mut().zip(acc) {
        // SAFETY: four f64 into a [f64; 4].
        unsafe { _mm256_storeu_pd(o.as_mut_ptr(), a) };
    }
    out
}

/// The engine's gathering loop ([`super::engine`]'s `gather`: offsets, squared distances,
/// branch-free compaction of the hits with `0 < d² ≤ r2`, count of coincident points) eight
/// hits at a time: the points fetched by gather instructions, the same `dx² + dy² + dz²`
/// (products then sums, in this order), the kept lanes packed to the left by a lane
/// permutation ([`crate::spatial::PACK`]) and stored at the kept count. The moments are summed
/// in one vector with lanes `(dx, dy, dz, dx², dx·dy, dx·dz, dy², dy·dz)` plus `dz²` alone, one
/// hit after the other as in the scalar loop: the eight hits' lanes are computed side by side,
/// a dropped hit's masked to +0, then transposed to one vector per hit and added in hit
/// order. The last `ids.len() % 8` hits go one at a time. Same bits as the scalar loop.
///
/// # Panics
/// If a buffer is shorter than `ids` or an id is beyond `points`.
#[target_feature(enable = "avx2,fma")]
#[allow(clippy::too_many_arguments)]
pub(crate) fn gather(
    points: &[[f32; 3]],
    ids: &[u32],
    p: [f32; 3],
    r2: f32,
    gx: &mut [f32],
    gy: &mut [f32],
    gz: &mut [f32],
    gd2: &mut [f32],
) -> (usize, u32, super::engine::Moments) {
    let n = ids.len();
    assert!(gx.len() >= n && gy.len() >= n && gz.len() >= n && gd2.len() >= n);
    let top = ids.iter().copied().max().map_or(0, |i| i as usize + 1);
    assert!(top <= points.len());
    // Eight at a time where the gather instructions' 32-bit offsets reach every coordinate.
    let whole = if 3 * points.len() <= i32::MAX as usize {
        n - n % LANES
    } else {
        0
    };
    let base = points.as_ptr().cast::<f32>();
    let c = p.map(|v| _mm256_set1_ps(v));
    let (zero, r2v) = (_mm256_setzero_ps(), _mm256_set1_ps(r2));
    let three = _mm256_set1_epi32(3);
    let mut acc = _mm256_setzero_ps();
    let mut zz = 0.0f32;
    let mut m = 0;
    let mut zeros = 0u32;
    for j0 in (0..whole).step_by(LANES) {
        // SAFETY: `j0 + 8 ≤ n ≤` every buffer's length; the ids are below `points.len()`
        // (asserted), so `3·id + k` (k < 3) is inside the points' coordinates and fits an
        // `i32`; the stores of eight at `m ≤ j0` end at or before `j0 + 8 ≤ n`.
        unsafe {
            let at = _mm256_mullo_epi32(
                _mm256_loadu_si256(ids.as_ptr().add(j0).cast::<__m256i>()),
                three,
            );
            let d: [__m256; 3] = std::array::from_fn(|k| {
                _mm256_sub_ps(_mm256_i32gather_ps::<4>(base.add(k), at), c[k])
            });
            let d2 = add!(add!(mul!(d[0], d[0]), mul!(d[1], d[1])), mul!(d[2], d[2]));
            zeros += _mm256_movemask_ps(_mm256_cmp_ps::<_CMP_EQ_OQ>(d2, zero)).count_ones();
            let keep = _mm256_and_ps(
                _mm256_cmp_ps::<_CMP_GT_OQ>(d2, zero),
                _mm256_cmp_ps::<_CMP_LE_OQ>(d2, r2v),
            );
            let bits = _mm256_movemask_ps(keep) as usize;
            let perm = _mm256_loadu_si256(crate::spatial::PACK[bits].as_ptr().cast::<__m256i>());
            for (dst, v) in [&mut *gx, &mut *gy, &mut *gz, &mut *gd2]
                .into_iter()
                .zip([d[0], d[1], d[2], d2])
            {
                _mm256_storeu_ps(dst.as_mut_ptr().add(m), _mm256_permutevar8x32_ps(v, perm));
            }
            m += bits.count_ones() as usize;
            // The moments' lanes of the eight hits (rows), masked, then one vector per hit.
            let rows = [
                d[0],
                d[1],
                d[2],
                mul!(d[0], d[0]),
                mul!(d[0], d[1]),
                mul!(d[0], d[2]),
                mul!(d[1], d[1]),
                mul!(d[1], d[2]),
            ]
            .map(|v| _mm256_and_ps(v, keep));
            for v in transpose8(rows) {
                acc = add!(acc, v);
            }
            let mut sq = [0.0f32; LANES];
            _mm256_storeu_ps(sq.as_mut_ptr(), _mm256_and_ps(mul!(d[2], d[2]), keep));
            for v in sq {
                zz += v;
            }
        }
    }
    let a_ix = _mm256_setr_epi32(0, 1, 2, 0, 0, 0, 1, 1);
    let b_ix = _mm256_setr_epi32(0, 0, 0, 0, 1, 2, 1, 2);
    let ones = _mm256_set1_ps(1.0);
    for &i in &ids[whole..] {
        let (d, keep) = super::engine::gather_hit(
            points[i as usize],
            p,
            r2,
            m,
            [&mut *gx, &mut *gy, &mut *gz, &mut *gd2],
            &mut zeros,
        );
        m += keep as usize;
        let mask = if keep { u32::MAX } else { 0 };
        // Lanes 0–2 of `dv` hold the offset; the permutations read no other lane.
        let dv = _mm256_castps128_ps256(_mm_setr_ps(d[0], d[1], d[2], 0.0));
        let a = _mm256_permutevar8x32_ps(dv, a_ix);
        let b = _mm256_blend_ps::<0b0000_0111>(_mm256_permutevar8x32_ps(dv, b_ix), ones);
        let keep8 = _mm256_castsi256_ps(_mm256_set1_epi32(mask as i32));
        acc = _mm256_add_ps(acc, _mm256_and_ps(_mm256_mul_ps(a, b), keep8));
        zz += f32::from_bits((d[2] * d[2]).to_bits() & mask);
    }
    let mut v = [0.0f32; 8];
    // SAFETY: eight f32 into a [f32; 8].
    unsafe { _mm256_storeu_ps(v.as_mut_ptr(), acc) };
    let mo = super::engine::Moments {
        m1: [v[0], v[1], v[2]],
        m2: [v[3], v[4], v[5], v[6], v[7], zz],
    };
    (m, zeros, mo)
}

/// The 8 × 8 transpose: lane `i` of output `j` is lane `j` of input `i`.
#[target_feature(enable = "avx2,fma")]
#[inline]
fn transpose8(r: [__m256; 8]) -> [__m256; 8] {
    let t0 = _mm256_unpacklo_ps(r[0], r[1]);
    let t1 = _mm256_unpackhi_ps(r[0], r[1]);
    let t2 = _mm256_unpacklo_ps(r[2], r[3]);
    let t3 = _mm256_unpackhi_ps(r[2], r[3]);
    let t4 = _mm256_unpacklo_ps(r[4], r[5]);
    let t5 = _mm256_unpackhi_ps(r[4], r[5]);
    let t6 = _mm256_unpacklo_ps(r[6], r[7]);
    let t7 = _mm256_unpackhi_ps(r[6], r[7]);
    let s0 = _mm256_shuffle_ps::<0x44>(t0, t2);
    let s1 = _mm256_shuffle_ps::<0xEE>(t0, t2);
    let s2 = _mm256_shuffle_ps::<0x44>(t1, t3);
    let s3 = _mm256_shuffle_ps::<0xEE>(t1, t3);
    let s4 = _mm256_shuffle_ps::<0x44>(t4, t6);
    let s5 = _mm256_shuffle_ps::<0xEE>(t4, t6);
    let s6 = _mm256_shuffle_ps::<0x44>(t5, t7);
    let s7 = _mm256_shuffle_ps::<0xEE>(t5, t7);
    [
        _mm256_permute2f128_ps::<0x20>(s0, s4),
        _mm256_permute2f128_ps::<0x20>(s1, s5),
        _mm256_permute2f128_ps::<0x20>(s2, s6),
        _mm256_permute2f128_ps::<0x20>(s3, s7),
        _mm256_permute2f128_ps::<0x31>(s0, s4),
        _mm256_permute2f128_ps::<0x31>(s1, s5),
        _mm256_permute2f128_ps::<0x31>(s2, s6),
        _mm256_permute2f128_ps::<0x31>(s3, s7),
    ]
}

/// The projection `acc[n·K + k] = Σ_j w[n·J + j] · y[k·J + j]` of [`super::kernel::project`]
/// on AVX2: lane `i` sums the neighbours `j ≡ i (mod 8)` in ascending `j` with fused
/// multiply-adds, then the eight lanes are added in the tree `((l0 + l1) + (l2 + l3)) + ((l4 +
/// l5) + (l6 + l7))`. Tiles of two shells × four harmonics keep their eight lane sums in
/// registers and reduce them together with horizontal adds (each pair sum is the same IEEE sum
/// whichever operand comes first), so nothing goes through memory between the sums and the
/// tree; the bytes are those of the lane-by-lane code.
///
/// # Panics
/// If `J` is not a multiple of [`LANES`] or a slice is too short.
#[target_feature(enable = "avx2,fma")]
#[inline]
pub(crate) fn project(w: &[f32], y: &[f32], jp: usize, n_sh: usize, nk: usize, acc: &mut [f32]) {
    assert!(jp.is_multiple_of(LANES));
    assert!(w.len() >= n_sh * jp && y.len() >= nk * jp && acc.len() >= n_sh * nk);
    let mut n = 0;
    while n < n_sh {
        let two = n + 2 <= n_sh;
        let mut k = 0;
        while k + 4 <= nk {
            if two {
                let s = lane_sums::<2, 4>(w, y, jp, n, k);
                let t = tree8([
                    s[0][0], s[0][1], s[0][2], s[0][3], s[1][0], s[1][1], s[1][2], s[1][3],
                ]);
                // SAFETY: `n + 1 < n_sh` and `k + 4 ≤ nk`, inside `acc` (asserted above).
                unsafe {
                    _mm_storeu_ps(acc.as_mut_ptr().add(n * nk + k), _mm256_castps256_ps128(t));
                    _mm_storeu_ps(
                        acc.as_mut_ptr().add((n + 1) * nk + k),
                        _mm256_extractf128_ps::<1>(t),
                    );
                }
            } else {
                let s = lane_sums::<1, 4>(w, y, jp, n, k);
                let t = tree8([
                    s[0][0], s[0][1], s[0][2], s[0][3], s[0][0], s[0][1], s[0][2], s[0][3],
                ]);
                // SAFETY: `n < n_sh` and `k + 4 ≤ nk`.
                unsafe {
                    _mm_storeu_ps(acc.as_mut_ptr().add(n * nk + k), _mm256_castps256_ps128(t))
                };
            }
            k += 4;
        }
        for k in k..nk {
            let rows = if two { 2 } else { 1 };
            for a in 0..rows {
                let s = lane_sums::<1, 1>(w, y, jp, n + a, k);
                let mut l = [0.0f32; LANES];
                // SAFETY: eight f32 into a [f32; 8].
                unsafe { _mm256_storeu_ps(l.as_mut_ptr(), s[0][0]) };
                acc[(n + a) * nk + k] =
                    ((l[0] + l[1]) + (l[2] + l[3])) + ((l[4] + l[5]) + (l[6] + l[7]));
            }
        }
        n += if two { 2 } else { 1 };
    }
}

/// Lane sums of shells `n..n + NB` against harmonics `k..k + KB` (fused multiply-adds, `j`
/// ascending), in registers.
#[target_feature(enable = "avx2,fma")]
#[inline]
fn lane_sums<const NB: usize, const KB: usize>(
    w: &[f32],
    y: &[f32],
    jp: usize,
    n: usize,
    k: usize,
) -> [[__m256; KB]; NB] {
    let mut s = [[_mm256_setzero_ps(); KB]; NB];
    let (wp, yp) = (w.as_ptr(), y.as_ptr());
    for j0 in (0..jp).step_by(LANES) {
        // SAFETY: rows `n..n + NB` of `w` and `k..k + KB` of `y` hold `jp` values each (the
        // caller's assertions), `j0 + 8 ≤ jp`.
        unsafe {
            let wv: [__m256; NB] =
                std::array::from_fn(|a| _mm256_loadu_ps(wp.add((n + a) * jp + j0)));
            for b in 0..KB {
                let yv = _mm256_loadu_ps(yp.add((k + b) * jp + j0));
                for (sa, wa) in s.iter_mut().zip(&wv) {
                    sa[b] = _mm256_fmadd_ps(*wa, yv, sa[b]);
                }
            }
        }
    }
    s
}

/// The eight lane sums of `v[0..8]` reduced by the tree, as one vector `[t0, …, t7]`.
#[target_feature(enable = "avx2,fma")]
#[inline]
fn tree8(v: [__m256; 8]) -> __m256 {
    // [v0: 01 23, v1: 01 23, v0: 45 67, v1: 45 67] and so on.
    let a = _mm256_hadd_ps(v[0], v[1]);
    let b = _mm256_hadd_ps(v[2], v[3]);
    let c = _mm256_hadd_ps(v[4], v[5]);
    let d = _mm256_hadd_ps(v[6], v[7]);
    // [v0: 0123, v1: 0123, v2: 0123, v3: 0123 | v0: 4567, ...]
    let ab = _mm256_hadd_ps(a, b);
    let cd = _mm256_hadd_ps(c, d);
    // low halves hold the 0123 sums of v0..v3 (ab) and v4..v7 (cd), high the 4567 sums.
    let lo = _mm256_permute2f128_ps::<0x20>(ab, cd);
    let hi = _mm256_permute2f128_ps::<0x31>(ab, cd);
    _mm256_add_ps(lo, hi)
}

/// Norms and power spectrum of the default shape (six shells, degree 4) into `out[..135]`:
/// the same sums, in the same order, as [`super::invariants`]' general path with its constant
/// blocks, written out so that nothing goes through memory but the transposed coefficients.
/// The transposition converts four shells by four rows at a time (`t[k·10 + n] = c[n·25 + k]`,
/// lanes 6 and 7 of a row zero, lanes 8 and 9 left as they are: they feed only sums that are
/// not kept), the eight blocks of one degree stay in registers, and each block's kept values
/// are converted and stored together; the norms are the square roots of the `(n, n)` sums,
/// four (then two) at a time. Each value is one sum from `zero` over `m` ascending of exact
/// f64 products (fused, see [`block_sums`]), rounded once to f32: bit-identical to the
/// general path (test `spectrum_blocks_give_the_plain_sums_bit_for_bit`).
///
/// # Panics
/// If `c` holds fewer than 150 values, `t` fewer than 250 or `out` fewer than 135.
#[target_feature(enable = "avx2,fma")]
#[inline]
pub(crate) fn spectrum_6_4(c: &[f32], t: &mut [f64], zero: f64, out: &mut [f32]) {
    const NK: usize = 25;
    const S: usize = 10;
    assert!(c.len() >= 6 * NK && t.len() >= NK * S && out.len() >= 135);
    // SAFETY: every read of `c` is below 6·25 and every access of `t` below 25·10 (asserted
    // above); the stores to `out` stay below 135.
    unsafe {
        let cp = c.as_ptr();
        let tp = t.as_mut_ptr();
        for k in (0..24).step_by(4) {
            let r = |n: usize| _mm_loadu_ps(cp.add(n * NK + k));
            let (r0, r1, r2, r3) = (r(0), r(1), r(2), r(3));
            let a = _mm_unpacklo_ps(r0, r1);
            let b = _mm_unpacklo_ps(r2, r3);
            let e = _mm_unpackhi_ps(r0, r1);
            let f = _mm_unpackhi_ps(r2, r3);
            let cols = [
                _mm_movelh_ps(a, b),
                _mm_movehl_ps(b, a),
                _mm_movelh_ps(e, f),
                _mm_movehl_ps(f, e),
            ];
            for (j, col) in cols.into_iter().enumerate() {
                _mm256_storeu_pd(tp.add((k + j) * S), _mm256_cvtps_pd(col));
            }
            let (r4, r5) = (r(4), r(5));
            let lo = _mm256_cvtps_pd(_mm_unpacklo_ps(r4, r5));
            let hi = _mm256_cvtps_pd(_mm_unpackhi_ps(r4, r5));
            // (c4, c5, 0, 0) of each row: a half of `lo` or `hi` and zeros.
            _mm256_storeu_pd(tp.add(k * S + 4), _mm256_permute2f128_pd(lo, lo, 0x80));
            _mm256_storeu_pd(
                tp.add((k + 1) * S + 4),
                _mm256_permute2f128_pd(lo, lo, 0x81),
            );
            _mm256_storeu_pd(
                tp.add((k + 2) * S + 4),
                _mm256_permute2f128_pd(hi, hi, 0x80),
            );
            _mm256_storeu_pd(
                tp.add((k + 3) * S + 4),
                _mm256_permute2f128_pd(hi, hi, 0x81),
            );
        }
        let last = |n: usize| *cp.add(n * NK + 24) as f64;
        _mm256_storeu_pd(
            tp.add(24 * S),
            _mm256_setr_pd(last(0), last(1), last(2), last(3)),
        );
        _mm256_storeu_pd(
            tp.add(24 * S + 4),
            _mm256_setr_pd(last(4), last(5), 0.0, 0.0),
        );

        let (norms, ps) = out.split_at_mut(30);
        let np = norms.as_mut_ptr();
        let mut pp = ps.as_mut_ptr();
        for l in 0..5 {
            let mut acc = [_mm256_set1_pd(zero); 8];
            for kk in l * l..(l + 1) * (l + 1) {
                let row = tp.add(kk * S);
                let bc = |n: usize| _mm256_broadcast_sd(&*row.add(n));
                let ld = |n: usize| _mm256_loadu_pd(row.add(n));
                let (x0, x1) = (bc(0), bc(1));
                acc[0] = _mm256_fmadd_pd(x0, ld(0), acc[0]);
                acc[1] = _mm256_fmadd_pd(x0, ld(4), acc[1]);
                acc[2] = _mm256_fmadd_pd(x1, ld(1), acc[2]);
                acc[3] = _mm256_fmadd_pd(x1, ld(5), acc[3]);
                acc[4] = _mm256_fmadd_pd(bc(2), ld(2), acc[4]);
                acc[5] = _mm256_fmadd_pd(bc(3), ld(3), acc[5]);
                acc[6] = _mm256_fmadd_pd(bc(4), ld(4), acc[6]);
                acc[7] = _mm256_fmadd_pd(bc(5), ld(5), acc[7]);
            }
            // The kept values of blocks (0,0) (0,4) (1,1) (1,5) (2,2) (3,3) (4,4) (5,5):
            // 4, 2, 4, 1, 4, 3, 2, 1 = 21, in this order.
            let f = acc.map(|a| _mm256_cvtpd_ps(a));
            let two = |p: *mut f32, v: __m128| _mm_store_sd(p.cast(), _mm_castps_pd(v));
            _mm_storeu_ps(pp, f[0]);
            two(pp.add(4), f[1]);
            _mm_storeu_ps(pp.add(6), f[2]);
            _mm_store_ss(pp.add(10), f[3]);
            _mm_storeu_ps(pp.add(11), f[4]);
            two(pp.add(15), f[5]);
            _mm_store_ss(pp.add(17), _mm_movehl_ps(f[5], f[5]));
            two(pp.add(18), f[6]);
            _mm_store_ss(pp.add(20), f[7]);
            pp = pp.add(21);
            // Norms l·6 + n: the square roots of lane 0 of the (n, n) blocks.
            let d01 = _mm256_unpacklo_pd(acc[0], acc[2]);
            let d23 = _mm256_unpacklo_pd(acc[4], acc[5]);
            let d0123 = _mm256_permute2f128_pd(d01, d23, 0x20);
            _mm_storeu_ps(np.add(l * 6), _mm256_cvtpd_ps(_mm256_sqrt_pd(d0123)));
            let d45 = _mm_unpacklo_pd(
                _mm256_castpd256_pd128(acc[6]),
                _mm256_castpd256_pd128(acc[7]),
            );
            two(np.add(l * 6 + 4), _mm_cvtpd_ps(_mm_sqrt_pd(d45)));
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::so3::rng::SplitMix64;

    #[test]
    fn gathering_gives_the_scalar_loops_bits() {
        if !(is_x86_feature_detected!("avx2") && is_x86_feature_detected!("fma")) {
            return;
        }
        let mut rng = SplitMix64::new(11);
        let p = [0.3f32, -1.7, 2.2];
        // Points around the centre, some on it (dropped, counted), some beyond the radius
        // (dropped) and some exactly on it (kept), with negative offsets and −0 components.
        let mut points: Vec<[f32; 3]> = (0..300)
            .map(|_| std::array::from_fn(|k| p[k] + (rng.next_f64() * 3.0 - 1.5) as f32))
            .collect();
        points[5] = p;
        points[17] = p;
        points[40] = [p[0] + 1.0, p[1], p[2]];
        points[41] = [p[0], p[1] - 0.0, p[2] - 1.0];
        let all: Vec<u32> = (0..points.len() as u32).filter(|i| i % 3 != 1).collect();
        // Whole blocks of eight and every length of the last partial one.
        for len in [200usize, 0, 1, 7, 8, 13, 45, 199] {
            let ids = &all[..len];
            let run = |simd: bool| {
                let n = ids.len();
                let (mut gx, mut gy, mut gz, mut gd2) =
                    (vec![0.0; n], vec![0.0; n], vec![0.0; n], vec![0.0; n]);
                let (m, zeros, mo) = if simd {
                    // SAFETY: AVX2 and FMA are present (checked above).
                    unsafe { gather(&points, ids, p, 1.0, &mut gx, &mut gy, &mut gz, &mut gd2) }
                } else {
                    super::super::engine::gather(
                        &points, ids, p, 1.0, &mut gx, &mut gy, &mut gz, &mut gd2,
                    )
                };
                let bits = |v: &[f32]| v[..m].iter().map(|x| x.to_bits()).collect::<Vec<_>>();
                let moments: Vec<u32> = mo.m1.iter().chain(&mo.m2).map(|x| x.to_bits()).collect();
                (
                    m,
                    zeros,
                    moments,
                    [bits(&gx), bits(&gy), bits(&gz), bits(&gd2)],
                )
            };
            let (simd, plain) = (run(true), run(false));
            if len == 200 {
                assert!(
                    plain.0 > 10 && plain.0 < ids.len() - 10 && plain.1 == 2,
                    "{:?}",
                    (plain.0, plain.1)
                );
            }
            assert_eq!(simd, plain, "{len} hits");
        }
    }

    #[test]
    fn lane_reduction_is_the_scalar_tree() {
        if !(is_x86_feature_detected!("avx2") && is_x86_feature_detected!("fma")) {
            return;
        }
        let mut rng = SplitMix64::new(3);
        for n in [0usize, 1, 7, 8, 9, 150, 151] {
            let lanes: Vec<[f32; LANES]> = (0..n)
                .map(|_| {
                    std::array::from_fn(|_| {
                        let v = rng.next_f64() * 2.0 - 1.0;
                        (v * 10f64.powf(rng.next_f64() * 8.0 - 4.0)) as f32
                    })
                })
                .collect();
            for l8 in lanes.chunks(8) {
                let mut v = [[0.0f32; LANES]; 8];
                v[..l8.len()].copy_from_slice(l8);
                let mut got = [0.0f32; 8];
                // SAFETY: AVX2 and FMA are present (checked above).
                unsafe {
                    let t = tree8(std::array::from_fn(|i| _mm256_loadu_ps(v[i].as_ptr())));
                    _mm256_storeu_ps(got.as_mut_ptr(), t);
                }
                for (g, l) in got.iter().zip(&v) {
                    let want = ((l[0] + l[1]) + (l[2] + l[3])) + ((l[4] + l[5]) + (l[6] + l[7]));
                    assert_eq!(g.to_bits(), want.to_bits(), "{l:?}");
                }
            }
        }
    }
}
