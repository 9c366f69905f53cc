//! The rotation group SO(3) and its real representations.
//!
//! Conventions shared by every submodule:
//! - real spherical harmonics are orthonormal, without Condon–Shortley phase, stored at flat index
//!   `l² + l + m` (`m = −l..=l`); degree 1 is `√(3/4π)·(y, z, x)`;
//! - rotations act on column vectors, `u ↦ R u`; the real Wigner-D matrix satisfies
//!   `Y(R u) = D(R) Y(u)`, and `D^l` is orthogonal, so coefficients `c = Σ w Y(u)` of a rotated
//!   point set are `D(R) c`;
//! - angles in radians unless a name says degrees.
//!
//! Submodules: [`sh`] (harmonics), [`wigner`] (Wigner-D), [`coupling`] (Clebsch–Gordan),
//! [`rotation`] (parametrisations, random rotations, grids), [`search`] (best rotation between
//! two expansions), [`rng`] (seeded generator), [`float`] (the scalar trait).

#![deny(missing_docs)]

pub mod coupling;

pub mod float;
pub mod rng;
pub mod rotation;
pub mod search;
pub mod sh;
pub mod wigner;
