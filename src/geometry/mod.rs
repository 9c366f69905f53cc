//! Geometry shared by every job: the one rigid-transform type and small vector helpers.
//!
//! Conventions: a [`Rigid`] maps a point `p` to `R p + t` (rotation acting on column vectors),
//! f64 throughout; a row-major 4×4 form is `[[R t], [0 0 0 1]]`. Clouds keep f32 offsets from
//! an f64 origin ([`crate::Cloud`]); [`vec3`] lifts one offset into f64 for computing.

pub mod rigid;

pub use rigid::{Rigid, Similarity, horn, rotation_angle, rotation_error_deg, umeyama};

use nalgebra::Vector3;

/// An f32 point or direction (a cloud's local offset or normal) as an f64 vector.
#[inline]
pub fn vec3(p: [f32; 3]) -> Vector3<f64> {
    Vector3::new(p[0] as f64, p[1] as f64, p[2] as f64)
}

/// An f64 vector rounded to f32 (a local offset or a normal for storing in a cloud).
#[inline]
pub fn to_f32(v: &Vector3<f64>) -> [f32; 3] {
    [v.x as f32, v.y as f32, v.z as f32]
}
