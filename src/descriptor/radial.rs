//! Radial basis: Gaussian shells times a cosine cutoff.
//!
//! With `ρ = |d|/r` in `[0, 1]`, shell `n` of `N` is `g_n(ρ) = exp(−(ρ − μ_n)²/(2σ²))` with
//! `μ_n = (n + ½)/N` and `σ = 1/N`; the cutoff is `f_c(ρ) = ½(1 + cos πρ)`.
//!
//! Writing `t = Nρ`, `g_n = exp(−(t − n − ½)²/2)`, and consecutive shells differ by one factor:
//! `g_{n+1} = g_n · exp(t − n − 1)` and `g_{n−1} = g_n · exp(n − t)`. The kernel evaluates the
//! shell nearest to `t` with one `exp`, one more `exp` gives the step factor, and the factors
//! of the following steps shrink by `1/e` each: two `exp` per neighbour for any `N`, and no
//! underflow trouble since the recurrence starts from the largest value.

/// `1/e`.
const INV_E: f32 = 0.367_879_44;

/// Writes `g_n(ρ)` for `n = 0..out.len()` (so `N = out.len()`), `t = N·ρ`.
#[inline(always)]
pub fn gaussian_shells(t: f32, out: &mut [f32]) {
    let n_sh = out.len();
    debug_assert!(n_sh >= 1);
    let n0 = (t.max(0.0) as usize).min(n_sh - 1);
    let a = t - n0 as f32 - 0.5;
    out[n0] = (-0.5 * a * a).exp();
    let up = (a - 0.5).exp();
    let mut f = up;
    for n in n0..n_sh - 1 {
        out[n + 1] = out[n] * f;
        f *= INV_E;
    }
    // exp(n0 − t) = exp(−a − ½) = 1 / (e · exp(a − ½))
    let mut f = INV_E / up;
    for n in (1..=n0).rev() {
        out[n - 1] = out[n] * f;
        f *= INV_E;
    }
}

/// The cutoff `½(1 + cos πρ)`, for `ρ` in `[0, 1]`.
#[inline(always)]
pub fn cutoff(rho: f32) -> f32 {
    0.5 * (1.0 + (std::f32::consts::PI * rho).cos())
}

#[cfg(test)]
mod tests {
    use super::*;

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
                    let want = (-(rho - mu).powi(2) / (2.0 * sigma * sigma)).exp();
                    let err = (v as f64 - want).abs();
                    assert!(
                        err <= 1e-6 * want + 1e-9,
                        "N={n_sh} n={n} rho={rho}: {v} vs {want}"
                    );
                }
            }
        }
    }

    #[test]
    fn cutoff_ends() {
        assert_eq!(cutoff(0.0), 1.0);
        assert!(cutoff(1.0).abs() < 1e-7);
        assert!((cutoff(0.5) - 0.5).abs() < 1e-7);
    }
}
