//! equiscan: SO(3)-equivariant local descriptors for 3D scans.
//!
//! Data flows one way: files are read by [`io`] into a [`cloud::Cloud`] (f64 origin, f32 local
//! positions); [`spatial`] finds neighbourhoods; the descriptor engine expands each
//! neighbourhood in real spherical harmonics times a radial basis (conventions in `so3`); the
//! invariants feed feature files, registration ([`align`]) and part identification; [`report`]
//! draws pictures.
//!
//! Descriptors of every point of a scan, in three lines ([`descriptor`] documents the recipe,
//! the column layout and the conventions):
//!
//! ```
//! use equiscan::descriptor::{Centres, Engine, Recipe};
//! # fn main() -> equiscan::Result<()> {
//! let (cloud, _info) = equiscan::io::read_cloud("tests/data/bunny/bunny.ply".as_ref())?;
//! let recipe = Recipe::builder().radius(1.5).build()?; // L = 4, N = 6: norms + power spectrum
//! let features = Engine::new(recipe).compute(&cloud, &Centres::All)?;
//!
//! assert_eq!(features.len(), cloud.len());
//! assert_eq!(features.columns[0], "r1p5_norm_l0_n0");
//! assert_eq!(features.row(0).len(), 6 * 5 + 21 * 5);
//! # Ok(())
//! # }
//! ```
#![deny(missing_docs)]

pub mod align;
pub mod batch;
pub mod cloud;
pub mod descriptor;
pub mod error;
pub mod geometry;
pub mod io;
pub mod parts;
pub mod report;
pub mod so3;
pub mod spatial;
pub mod text;

pub use cloud::Cloud;
pub use error::{Error, Result};
