//! Neighbourhoods: k-d tree queries (k nearest, radius), a cell grid for fixed-radius queries,
//! voxel downsampling, normals, point-spacing estimate.
//!
//! All coordinates are the cloud's f32 local positions (file units about the cloud's origin).
//! Radii are plain distances here; the squared distances that the k-d tree works with stay
//! inside [`KdIndex`]. Nothing here knows about harmonics.

mod grid;
mod index;
mod index_track;
mod normals;
mod orientation;
mod spacing;
mod voxel;

#[cfg(target_arch = "x86_64")]
pub(crate) use grid::PACK;
pub use grid::{CellGrid, GridQuery, MAX_CELLS_PER_AXIS, order_by_key};
pub use index::KdIndex;
pub use index_track::{NearestTrack, TrackGrids, TrackQueries};
pub use normals::{estimate_normals, project_to_local_planes};
pub use orientation::{Oriented, orient_consistently};
pub use spacing::{
    SUPPORT_RADIUS_PER_SPACING, estimate_spacing, estimate_spacing_with, suggested_support_radius,
};
pub use voxel::voxel_downsample;
