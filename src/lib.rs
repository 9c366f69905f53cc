//! equiscan: SO(3)-equivariant local descriptors for 3D scans.
//!
//! Data flows one way: files are read by [`io`] into a [`cloud::Cloud`] (f64 origin, f32 local
//! positions); [`spatial`] finds neighbourhoods; the descriptor engine expands each
//! neighbourhood in real spherical harmonics times a radial basis (conventions in `so3`); the
//! invariants feed feature files, registration and part identification.
#![deny(missing_docs)]

pub mod cloud;
pub mod error;
pub mod io;
pub mod report;
pub mod so3;
pub mod spatial;

pub use cloud::Cloud;
pub use error::{Error, Result};
