//! The two vectorised inner loops of the engine: radial weights and the projection of the
//! neighbours' harmonics onto the shells.
//!
//! Both run over structure-of-arrays buffers so that the compiler turns them into SIMD code.
//! Where the processor has AVX2 and FMA (checked once, at run time) the projection is compiled
//! for them and uses fused multiply-adds; elsewhere a portable build of the same loops runs.
//! Each sum still runs over the neighbours in ascending point index, so on one machine the
//! result is the same for any number of threads; the two kernels differ only by the rounding
//! that fusing saves (a few f32 units in the last place).

use super::radial::{cutoff, exp};

/// Rows of harmonics are padded to a multiple of this many f32 values.
pub(crate) const BLOCK: usize = 8;

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
const INV_E: f32 = 0.367_879_44;

/// `acc[n·stride + k] = Σ_j w[n·J + j] · y[j·stride + k]` for `n < n_sh`, `k < stride`, with
/// `J = count` neighbours, summed in ascending `j`.
pub(crate) fn project(
    k: Kernel,
    w: &[f32],
    y: &[f32],
    count: usize,
    n_sh: usize,
    stride: usize,
    acc: &mut [f32],
) {
    match k {
        Kernel::Portable => project_impl::<false>(w, y, count, n_sh, stride, acc),
        #[cfg(target_arch = "x86_64")]
        // SAFETY: `Avx2Fma` is only chosen after the processor reported AVX2 and FMA.
        Kernel::Avx2Fma => unsafe { project_avx2(w, y, count, n_sh, stride, acc) },
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
fn project_avx2(w: &[f32], y: &[f32], count: usize, n_sh: usize, stride: usize, acc: &mut [f32]) {
    project_impl::<true>(w, y, count, n_sh, stride, acc)
}

#[inline(always)]
fn project_impl<const FMA: bool>(
    w: &[f32],
    y: &[f32],
    count: usize,
    n_sh: usize,
    stride: usize,
    acc: &mut [f32],
) {
    let y = &y[..count * stride];
    for n in 0..n_sh {
        let wn = &w[n * count..(n + 1) * count];
        let out = &mut acc[n * stride..(n + 1) * stride];
        let mut kb = 0;
        while kb + 32 <= stride {
            block::<32, FMA>(wn, y, stride, kb, &mut out[kb..kb + 32]);
            kb += 32;
        }
        while kb + 16 <= stride {
            block::<16, FMA>(wn, y, stride, kb, &mut out[kb..kb + 16]);
            kb += 16;
        }
        while kb + BLOCK <= stride {
            block::<BLOCK, FMA>(wn, y, stride, kb, &mut out[kb..kb + BLOCK]);
            kb += BLOCK;
        }
    }
}

/// Columns `kb..kb + B` of one shell's sums, kept in registers over all neighbours.
#[inline(always)]
fn block<const B: usize, const FMA: bool>(
    wn: &[f32],
    y: &[f32],
    stride: usize,
    kb: usize,
    out: &mut [f32],
) {
    let mut a = [0.0f32; B];
    for (j, &wj) in wn.iter().enumerate() {
        let row: &[f32; B] = y[j * stride + kb..j * stride + kb + B]
            .try_into()
            .expect("block width");
        for k in 0..B {
            a[k] = if FMA {
                wj.mul_add(row[k], a[k])
            } else {
                wj * row[k] + a[k]
            };
        }
    }
    out.copy_from_slice(&a);
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn projection_kernels_agree_with_a_plain_sum() {
        let (count, n_sh, stride) = (37, 3, 48);
        let w: Vec<f32> = (0..n_sh * count)
            .map(|i| ((i * 7919) % 101) as f32 / 101.0)
            .collect();
        let y: Vec<f32> = (0..count * stride)
            .map(|i| ((i * 104_729) % 97) as f32 / 48.0 - 1.0)
            .collect();
        for k in [Kernel::Portable, Kernel::detect()] {
            let mut acc = vec![0.0f32; n_sh * stride];
            project(k, &w, &y, count, n_sh, stride, &mut acc);
            for n in 0..n_sh {
                for c in 0..stride {
                    let want: f64 = (0..count)
                        .map(|j| w[n * count + j] as f64 * y[j * stride + c] as f64)
                        .sum();
                    assert!(
                        (acc[n * stride + c] as f64 - want).abs() < 1e-5,
                        "{k:?} n {n} col {c}"
                    );
                }
            }
        }
    }
}
