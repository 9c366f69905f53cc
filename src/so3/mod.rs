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
//!
//! ```
//! use equiscan::so3::{rotation::rot_z, sh, wigner::WignerD};
//! // Y(R u) = D(R) Y(u)
//! let r = rot_z(0.7);
//! let u = [0.6, 0.0, 0.8];
//! let ru = r * nalgebra::Vector3::from(u);
//! let (mut y, mut yr, mut dy) = ([0.0; 25], [0.0; 25], [0.0; 25]);
//! sh::real_sh_f64(4, u, &mut y);
//! sh::real_sh_f64(4, [ru.x, ru.y, ru.z], &mut yr);
//! WignerD::new(&r, 4).apply(&y, &mut dy);
//! assert!(yr.iter().zip(&dy).all(|(a, b)| (a - b).abs() < 1e-12));
//! ```

#![deny(missing_docs)]

pub mod coupling;

pub mod float;
pub mod rng;
pub mod rotation;
pub mod search;
pub mod sh;
pub mod wigner;
