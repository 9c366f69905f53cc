//! Pictures: PNG rasters of point clouds drawn with our own bitmap font.
//!
//! - [`canvas`]: the raster (RGB8 with a depth buffer), orthographic views and viewports,
//!   splats, lines, rectangles, text, atomic PNG output.
//! - [`font`]: the 5 × 9 glyph tables (ASCII 32–126 and `°`).
//! - [`colour`]: layer palette and colour maps.
//! - [`inspection`]: the inspection picture (deviation map, colour bar, histogram).
//! - [`views`]: whole pictures — [`render_alignment_views`] (before/after rows × top, front,
//!   side) and [`render_cloud_views`] (one cloud, optionally coloured by a value).
//!
//! Coordinates are file units; points are f32 offsets from an f64 origin, as in
//! [`crate::Cloud`]. Output is deterministic: the same input gives the same PNG bytes.
//!
//! ```
//! use equiscan::Cloud;
//! use equiscan::geometry::Rigid;
//! use nalgebra::Vector3;
//! use equiscan::report::{FigureText, LAYER_PALETTE, Layer, draw_alignment_views};
//!
//! let target = Cloud::new([0.0; 3], vec![[0.0, 0.0, 0.0], [1.0, 0.5, 0.2]]);
//! let source = Cloud::new([5.0, 0.0, 0.0], target.positions.clone());
//! // The rigid transform taking the source onto the target: 5 units along -X.
//! let back = Rigid::translation(Vector3::new(-5.0, 0.0, 0.0));
//! let layers = [
//!     Layer::from_cloud("source", LAYER_PALETTE[0], &source).moved_after(back),
//!     Layer::from_cloud("target", LAYER_PALETTE[1], &target),
//! ];
//! let text = FigureText {
//!     title: "source onto target".into(),
//!     lines: vec!["rotation 0.00\u{b0}".into(), "overlap 100 %".into()],
//!     footer: "A made-up example.".into(),
//!     unit: "m".into(),
//!     warning: String::new(),
//! };
//! let picture = draw_alignment_views(&layers, &text)?;
//! assert_eq!((picture.width(), picture.height()), (1800, 1200));
//! // `render_alignment_views(&layers, &text, path)` writes the same picture as a PNG file.
//! # Ok::<(), equiscan::Error>(())
//! ```

pub mod canvas;
pub mod colour;
pub mod font;
pub mod inspection;
pub mod views;

pub use canvas::{Canvas, Rgb, Share, Splat, ViewAxis, Viewport};
pub use colour::{ColourMap, LAYER_PALETTE, SOURCE_COLOUR, TARGET_COLOUR};
pub use views::{
    FigureText, Layer, ScalarField, Transform, ViewRow, draw_alignment_rows, draw_alignment_views,
    draw_cloud_views, nice_length, render_alignment_views, render_cloud_views,
};
