//! Radial basis: Gaussian shells times a cosine cutoff, in branch-free f32 arithmetic that the
//! compiler vectorises across neighbours.
//!
//! With `ρ = |d|/r` in `[0, 1]`, shell `n` of `N` is `g_n(ρ) = exp(−(ρ − μ_n)²/(2σ²))` with
//! `μ_n = (n + ½)/N` and `σ = 1/N`; writing `t = Nρ`, `g_n = exp(−(t − n − ½)²/2)`. The cutoff
//! `f_c(ρ) = ½(1 + cos πρ)` is evaluated as `sin²(π(1 − ρ)/2)`, which is exactly 0 at `ρ = 1`
//! and keeps its relative accuracy near the sphere's edge.
//!
//! [`exp`] and [`cutoff`] are polynomial kernels (no library call, no branch), accurate to a few
//! units in the last place of f32 over the ranges used here, so that loops over neighbours
//! compile to SIMD code.

/// Rounding constant `1.5·2²³`: adding and subtracting it rounds an f32 of magnitude below 2²²
/// to the nearest integer.
const ROUND: f32 = 12_582_912.0;

/// `e^x` for f32 `x`, branch-free: `x = k ln 2 + r` with `|r| ≤ ½ ln 2`, a degree-6 polynomial
/// for `e^r` (Cephes coefficients, relative error about 1e-7) scaled by `2^k` through the
/// exponent bits. Returns 0 for `x < −87` (where `e^x` leaves the normal f32 range) and is not
/// meant for `x > 88`.
#[inline(always)]
pub fn exp(x: f32) -> f32 {
    const LOG2E: f32 = std::f32::consts::LOG2_E;
    const C1: f32 = 0.693_359_4;
    const C2: f32 = -2.121_944_4e-4;
    let xc = x.max(-87.0);
    let v = xc * LOG2E + ROUND;
    let k_bits = v.to_bits() as i32 - ROUND.to_bits() as i32;
    let kf = v - ROUND;
    let r = xc - kf * C1 - kf * C2;
    let mut p = 1.987_569_1e-4f32;
    p = p * r + 1.398_199_9e-3;
    p = p * r + 8.333_452e-3;
    p = p * r + 4.166_579_6e-2;
    p = p * r + 1.666_666_5e-1;
    p = p * r + 0.5; // Cephes 5.0000001201e-1 rounds to 0.5 in f32
    let y = p * r * r + r + 1.0;
    let scale = f32::from_bits(((k_bits + 127) as u32) << 23);
    if x < -87.0 { 0.0 } else { y * scale }
}

/// The cutoff `½(1 + cos πρ) = sin²(π(1 − ρ)/2)` for `ρ` in `[0, 1]` (odd Taylor polynomial of
/// degree 11 for the sine on `[0, π/2]`, error below 6e-8).
#[inline(always)]
pub fn cutoff(rho: f32) -> f32 {
    let y = std::f32::consts::FRAC_PI_2 * (1.0 - rho);
    let y2 = y * y;
    let mut p = -2.505_210_8e-8f32; // −1/11!
    p = p * y2 + 2.755_731_9e-6; // 1/9!
    p = p * y2 - 1.984_127e-4; // −1/7!
    p = p * y2 + 8.333_333e-3; // 1/5!
    p = p * y2 - 1.666_666_7e-1; // −1/3!
    let s = y + y * y2 * p;
    s * s
}

/// `g_n` of one neighbour at `t = N·ρ`, for `n = 0..out.len()`.
#[inline(always)]
pub fn gaussian_shells(t: f32, out: &mut [f32]) {
    for (n, o) in out.iter_mut().enumerate() {
        let a = t - n as f32 - 0.5;
        *o = exp(-0.5 * a * a);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exp_matches_the_library_to_a_few_ulp() {
        let mut worst = 0.0f64;
        for i in 0..=100_000 {
            let x = -87.0 + 87.0 * i as f32 / 100_000.0;
            let want = (x as f64).exp();
            worst = worst.max((exp(x) as f64 - want).abs() / want);
        }
        assert!(worst < 3e-7, "{worst:e}");
        assert_eq!(exp(-100.0), 0.0);
        assert_eq!(exp(0.0), 1.0);
    }

    #[test]
    fn shells_match_the_closed_form() {
        for n_sh in [1usize, 2, 6, 12, 32] {
            let mut g = vec![0.0f32; n_sh];
            for i in 0..=200 {
                // The closed form is evaluated at the f32 argument actually passed.
                let t = (i as f64 / 200.0 * n_sh as f64) as f32;
                let rho = t as f64 / n_sh as f64;
                gaussian_shells(t, &mut g);
                for (n, &v) in g.iter().enumerate() {
                    let mu = (n as f64 + 0.5) / n_sh as f64;
                    let sigma = 1.0 / n_sh as f64;
                    let arg = (rho - mu).powi(2) / (2.0 * sigma * sigma);
                    let want = (-arg).exp();
                    let err = (v as f64 - want).abs();
                    // f32 rounding of the exponent costs |arg|·ε relative.
                    assert!(
                        err <= (2.0 + arg) * 2.4e-7 * want + 1e-37,
                        "N={n_sh} n={n} rho={rho}: {v} vs {want}"
                    );
                }
            }
        }
    }

    #[test]
    fn cutoff_matches_the_cosine() {
        for i in 0..=1000 {
            let rho = i as f32 / 1000.0;
            let want = 0.5 * (1.0 + (std::f64::consts::PI * rho as f64).cos());
            let got = cutoff(rho) as f64;
            assert!((got - want).abs() < 5e-7, "rho {rho}: {got} vs {want}");
        }
        assert_eq!(cutoff(1.0), 0.0);
        assert!((cutoff(0.0) - 1.0).abs() < 5e-7);
    }
}
