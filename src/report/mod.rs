//! Pictures: PNG rasters of point clouds drawn with our own bitmap font.
//!
//! - [`canvas`]: the raster (RGB8 with a depth buffer), orthographic views and viewports,
//!   splats, lines, rectangles, text, atomic PNG output.
//! - [`font`]: the 5 × 9 glyph tables (ASCII 32–126 and `°`).
//! - [`colour`]: layer palette and colour maps.
//! - [`views`]: whole pictures — [`render_alignment_views`] (before/after rows × top, front,
//!   side) and [`render_cloud_views`] (one cloud, optionally coloured by a value).
//!
//! Coordinates are file units; points are f32 offsets from an f64 origin, as in
//! [`crate::Cloud`]. Output is deterministic: the same input gives the same PNG bytes.

pub mod canvas;
pub mod colour;
pub mod font;
pub mod views;

pub use canvas::{Canvas, Rgb, Share, Splat, ViewAxis, Viewport};
pub use colour::{ColourMap, LAYER_PALETTE};
pub use views::{
    FigureText, Layer, ScalarField, Transform, draw_alignment_views, draw_cloud_views, nice_length,
    render_alignment_views, render_cloud_views,
};
