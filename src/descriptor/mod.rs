//! Local descriptors: real spherical harmonics × radial shells over k-d-tree neighbourhoods.
//!
//! A [`Recipe`] holds the parameters (support radii, maximum degree `L`, shells `N`, optional
//! neighbour cap `K`, which invariants); an [`Engine`] built from it computes, for each centre
//! `p` and each support radius `r`, the coefficients (design, "the descriptor, exactly",
//! version 2, the default)
//!
//! `c_nlm(p) = Σ_q g_n(ρ_q) f_c(ρ_q) h_l(ρ_q) Y_lm(u_q) / W`, `W = 1 + Σ_q f_c(ρ_q) + coincident points`,
//!
//! over the neighbours `0 < |q − p| ≤ r`, with `ρ = |q − p|/r`, `u = (q − p)/|q − p|`, Gaussian
//! shells `g_n` ([`radial`]), cutoff `f_c(ρ) = ½(1 + cos πρ)`, the orthonormal real harmonics
//! of [`crate::so3::sh`] (no Condon–Shortley phase, index `l² + l + m`), and the fade at the
//! centre `h_0 = 1`, `h_l(ρ) = 1 − exp(−(ρ/ρ₀)²)` for `l ≥ 1`, `ρ₀ = 1/(2N)`: a neighbour
//! close to the centre, whose direction is set by rounding, fades out of every degree `l ≥ 1`,
//! so the descriptor is continuous in the points. Version 1 (`h_l = 1` for every `l`, the
//! original definition) stays computable ([`RecipeBuilder::version`]); column names are the
//! same in both versions, the recipe records which one a file holds. Lengths are in the
//! cloud's file units; all arithmetic is f32 on local positions, summed in an order fixed by the
//! ascending neighbour indices (eight lanes of neighbours, then the lanes in a fixed tree), with
//! invariants formed in f64 from the f32 coefficients.
//!
//! Under a rotation `R` the coefficients of each `(n, l)` turn by the real Wigner-D matrix:
//! `c_nl(Rp; RP) = D^l(R) c_nl(p; P)`; the invariants (norms, power spectrum, bispectrum) do not
//! change.
//!
//! # Output layout
//! - Invariant columns ([`Recipe::column_names`]): per scale (radii in the order given, `{s}`
//!   the radius with `p` for the decimal point, e.g. `r0p25`), norms
//!   `{s}_norm_l{l}_n{n}` (`l` outer, `n` inner), power spectrum `{s}_ps_l{l}_n{n}_n{n'}`
//!   (`l`, then `n`, then `n' ≥ n`), bispectrum `{s}_bs_n{n}_l{l1}_l{l2}_l{l}` (`n`, then
//!   `l1 ≤ l2`, then `l`).
//! - Per scale a neighbour count and [`flags`] ([`Recipe::count_column_names`]).
//! - Coefficients ([`Features::coefficients`]): `[centre][scale][n][l² + l + m]`, column names
//!   `{s}_c_n{n}_l{l}_m{m}` ([`Recipe::coefficient_names`], `mn2` for `m = −2`).

#[cfg(target_arch = "x86_64")]
mod avx2;
mod engine;
mod invariants;
mod kernel;
pub mod output;
pub mod radial;
mod recipe;
mod support;

pub use engine::{Centres, Engine, Features, PreparedCloud};
pub use recipe::{
    DEFAULT_DEGREE, DEFAULT_SHELLS, Invariants, MAX_DEGREE, MAX_SHELLS, OLDEST_RECIPE_VERSION,
    RECIPE_VERSION, Recipe, RecipeBuilder, bispectrum_triples,
};
pub use support::{round_2_significant, suggested_radius};

/// Per-centre, per-scale flag bits ([`Features::flags`]). A flagged row is still well defined
/// (finite, no NaN); the flags say how far to trust it.
pub mod flags {
    /// No neighbour within the support radius: all coefficients and invariants are 0.
    pub const NO_NEIGHBOUR: u8 = 1;
    /// Fewer than 3 neighbours: the directions cannot span space.
    pub const FEW_NEIGHBOURS: u8 = 2;
    /// Other points coincide with the centre (they add weight 1 each to `W`, nothing else).
    pub const COINCIDENT: u8 = 4;
    /// The neighbour cap `K` dropped neighbours; invariance then holds up to distance ties at
    /// rank `K`.
    pub const CAPPED: u8 = 8;
    /// The neighbours lie on one plane: the smallest variance of their offsets is negligible
    /// (determinant of the covariance ≤ [`SHAPE_TOLERANCE`] × trace³; roughly thinner than
    /// 0.3 % of the extent).
    pub const PLANAR: u8 = 16;
    /// The neighbours lie on one line (sum of the covariance's principal 2×2 minors ≤
    /// [`SHAPE_TOLERANCE`] × trace²); a line is planar too, so [`PLANAR`] is set with it.
    pub const LINEAR: u8 = 32;
    /// Relative tolerance of the [`PLANAR`] and [`LINEAR`] tests.
    pub const SHAPE_TOLERANCE: f64 = 1e-6;
}

#[cfg(test)]
mod tests;
