//! An RGB8 raster with a depth buffer: point splats, lines, rectangles, bitmap text, PNG output.
//!
//! Pixel `(0, 0)` is the top-left corner; `x` grows to the right and `y` downwards. Drawing is
//! clipped to the canvas, so callers may pass coordinates outside it. Point splats pass a depth
//! test: a smaller depth is nearer the viewer and wins; equal depths keep the first point drawn,
//! so the picture depends only on the input order, never on timing.
//!
//! Orthographic views look along a coordinate axis ([`ViewAxis`]); a [`Viewport`] maps the two
//! in-plane coordinates (file units) to pixels with the same scale on both axes.

use std::io::Write;
use std::path::Path;

use super::font::{self, ADVANCE, GLYPH_HEIGHT, GLYPH_WIDTH, LINE_HEIGHT};
use crate::error::{Error, Result};

/// A colour: red, green, blue, 0–255 each.
pub type Rgb = [u8; 3];

/// An orthographic view along one coordinate axis, seen from outside the scene.
///
/// Every view is right-handed: `right × up` points towards the viewer.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ViewAxis {
    /// From above (+Z) looking down: X to the right, Y up.
    Top,
    /// From the front (−Y) looking along +Y: X to the right, Z up.
    Front,
    /// From the side (+X) looking along −X: Y to the right, Z up.
    Side,
}

impl ViewAxis {
    /// The three views in picture order: top, front, side.
    pub const ALL: [ViewAxis; 3] = [ViewAxis::Top, ViewAxis::Front, ViewAxis::Side];

    /// `[right, up, depth]` of a point; a smaller depth is nearer the viewer.
    pub fn project(self, p: [f64; 3]) -> [f64; 3] {
        match self {
            ViewAxis::Top => [p[0], p[1], -p[2]],
            ViewAxis::Front => [p[0], p[2], p[1]],
            ViewAxis::Side => [p[1], p[2], -p[0]],
        }
    }

    /// Names of the axes drawn to the right and upwards, e.g. `("X", "Y")` for the top view.
    pub fn axis_names(self) -> (&'static str, &'static str) {
        match self {
            ViewAxis::Top => ("X", "Y"),
            ViewAxis::Front => ("X", "Z"),
            ViewAxis::Side => ("Y", "Z"),
        }
    }

    /// A short name: `top`, `front` or `side`.
    pub fn name(self) -> &'static str {
        match self {
            ViewAxis::Top => "top",
            ViewAxis::Front => "front",
            ViewAxis::Side => "side",
        }
    }
}

/// Maps in-plane coordinates (file units) to pixels, with one scale for both axes.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Viewport {
    /// Left edge of the pixel rectangle.
    pub x: f64,
    /// Top edge of the pixel rectangle.
    pub y: f64,
    /// Width of the pixel rectangle.
    pub width: f64,
    /// Height of the pixel rectangle.
    pub height: f64,
    /// The `[right, up]` coordinate shown at the centre of the rectangle.
    pub centre: [f64; 2],
    /// Pixels per file unit, on both axes.
    pub pixels_per_unit: f64,
}

impl Viewport {
    /// The viewport that shows the coordinate box `lo..hi` (`[right, up]`) as large as fits in
    /// the pixel rectangle, centred, with equal scales. A degenerate box is treated as one unit
    /// wide (or as wide as its other side), so the scale stays finite.
    pub fn fit(rect: [f64; 4], lo: [f64; 2], hi: [f64; 2]) -> Self {
        let [x, y, width, height] = rect;
        let mut span = [hi[0] - lo[0], hi[1] - lo[1]];
        let largest = span[0].max(span[1]);
        for s in &mut span {
            // Zero, negative (an empty box) or NaN.
            if s.is_nan() || *s <= 0.0 {
                *s = if largest > 0.0 { largest } else { 1.0 };
            }
        }
        let pixels_per_unit = (width / span[0]).min(height / span[1]);
        Viewport {
            x,
            y,
            width,
            height,
            centre: [(lo[0] + hi[0]) * 0.5, (lo[1] + hi[1]) * 0.5],
            pixels_per_unit,
        }
    }

    /// Pixel position `[x, y]` (fractional) of the coordinate `[right, up]`.
    pub fn to_pixel(&self, right: f64, up: f64) -> [f64; 2] {
        [
            self.x + self.width * 0.5 + (right - self.centre[0]) * self.pixels_per_unit,
            self.y + self.height * 0.5 - (up - self.centre[1]) * self.pixels_per_unit,
        ]
    }
}

/// The footprint of one point on the canvas.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Splat {
    /// A filled square, this many pixels wide (at least 1).
    Square(u32),
    /// A filled disc of this diameter in pixels; diameters 1 and 2 are squares, 3 is a plus.
    Disc(u32),
}

/// How a layer shares pixels with other layers at the same depth; see [`Canvas::splat_shared`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Share {
    /// This layer's number, `0..layers`.
    pub layer: u32,
    /// How many layers take turns.
    pub layers: u32,
    /// Depths closer than this count as equal (file units).
    pub tolerance: f32,
}

/// An RGB8 raster with a depth buffer.
#[derive(Debug, Clone)]
pub struct Canvas {
    width: u32,
    height: u32,
    pixels: Vec<Rgb>,
    depth: Vec<f32>,
}

impl Canvas {
    /// A canvas of `width × height` pixels filled with `background`.
    pub fn new(width: u32, height: u32, background: Rgb) -> Self {
        let n = width as usize * height as usize;
        Canvas {
            width,
            height,
            pixels: vec![background; n],
            depth: vec![f32::INFINITY; n],
        }
    }

    /// Width in pixels.
    pub fn width(&self) -> u32 {
        self.width
    }

    /// Height in pixels.
    pub fn height(&self) -> u32 {
        self.height
    }

    /// Fills the canvas with `colour` and forgets every depth.
    pub fn clear(&mut self, colour: Rgb) {
        self.pixels.fill(colour);
        self.depth.fill(f32::INFINITY);
    }

    /// The colour at `(x, y)`; `None` outside the canvas.
    pub fn pixel(&self, x: i64, y: i64) -> Option<Rgb> {
        self.index(x, y).map(|i| self.pixels[i])
    }

    /// The pixels, row by row from the top, three bytes each.
    pub fn rgb_bytes(&self) -> Vec<u8> {
        self.pixels.iter().flatten().copied().collect()
    }

    fn index(&self, x: i64, y: i64) -> Option<usize> {
        if x < 0 || y < 0 || x >= self.width as i64 || y >= self.height as i64 {
            None
        } else {
            Some(y as usize * self.width as usize + x as usize)
        }
    }

    /// Sets one pixel; ignored outside the canvas. The depth buffer is not changed.
    pub fn set_pixel(&mut self, x: i64, y: i64, colour: Rgb) {
        if let Some(i) = self.index(x, y) {
            self.pixels[i] = colour;
        }
    }

    /// Fills the rectangle with top-left corner `(x, y)`, `w` wide and `h` high (clipped).
    pub fn fill_rect(&mut self, x: i64, y: i64, w: u32, h: u32, colour: Rgb) {
        let x0 = x.max(0);
        let y0 = y.max(0);
        let x1 = (x + w as i64).min(self.width as i64);
        let y1 = (y + h as i64).min(self.height as i64);
        for yy in y0..y1 {
            let row = yy as usize * self.width as usize;
            self.pixels[row + x0 as usize..row + x1.max(x0) as usize].fill(colour);
        }
    }

    /// Draws the outline of a rectangle, `thickness` pixels wide, inside the given bounds.
    pub fn stroke_rect(&mut self, x: i64, y: i64, w: u32, h: u32, thickness: u32, colour: Rgb) {
        let t = thickness.min(w).min(h);
        self.fill_rect(x, y, w, t, colour);
        self.fill_rect(x, y + h as i64 - t as i64, w, t, colour);
        self.fill_rect(x, y, t, h, colour);
        self.fill_rect(x + w as i64 - t as i64, y, t, h, colour);
    }

    /// A one-pixel line from `(x0, y0)` to `(x1, y1)`, both ends included.
    pub fn line(&mut self, x0: i64, y0: i64, x1: i64, y1: i64, colour: Rgb) {
        let dx = (x1 - x0).abs();
        let dy = -(y1 - y0).abs();
        let sx = if x0 < x1 { 1 } else { -1 };
        let sy = if y0 < y1 { 1 } else { -1 };
        let (mut x, mut y, mut err) = (x0, y0, dx + dy);
        loop {
            self.set_pixel(x, y, colour);
            if x == x1 && y == y1 {
                break;
            }
            let e2 = 2 * err;
            if e2 >= dy {
                err += dy;
                x += sx;
            }
            if e2 <= dx {
                err += dx;
                y += sy;
            }
        }
    }

    /// Draws a point centred on the pixel that contains `(x, y)`, keeping each covered pixel
    /// only where `depth` is nearer (smaller) than what is there. Non-finite input is skipped.
    pub fn splat(&mut self, x: f64, y: f64, depth: f32, shape: Splat, colour: Rgb) {
        self.splat_shared(x, y, depth, shape, colour, None);
    }

    /// Like [`Canvas::splat`], but points of several layers that lie at the same depth (within
    /// `share.tolerance`) share the pixels in a 2 × 2-pixel checkerboard instead of the first
    /// layer hiding the others: where depths tie, pixel `(x, y)` goes to layer
    /// `(x / 2 + y / 2) % share.layers`. Layers that coincide exactly therefore show as a fine
    /// mix of their colours.
    pub fn splat_shared(
        &mut self,
        x: f64,
        y: f64,
        depth: f32,
        shape: Splat,
        colour: Rgb,
        share: Option<Share>,
    ) {
        if !(x.is_finite() && y.is_finite()) || depth.is_nan() {
            return;
        }
        let (cx, cy) = (x.floor() as i64, y.floor() as i64);
        let (size, round) = match shape {
            Splat::Square(s) => (s.max(1) as i64, false),
            Splat::Disc(d) => (d.max(1) as i64, d > 2),
        };
        // Offsets -(size-1)/2 ..= size/2 around the centre pixel.
        let start = -(size - 1) / 2;
        for j in start..start + size {
            for i in start..start + size {
                if round {
                    // Twice the offset from the disc's centre, to stay in integers.
                    let di = 2 * i - 2 * start - (size - 1);
                    let dj = 2 * j - 2 * start - (size - 1);
                    if di * di + dj * dj >= size * size - 1 {
                        continue;
                    }
                }
                let (px, py) = (cx + i, cy + j);
                let Some(k) = self.index(px, py) else {
                    continue;
                };
                let stored = self.depth[k];
                let wins = match share {
                    None => depth < stored,
                    Some(s) => {
                        if stored.is_infinite() || depth < stored - s.tolerance {
                            true
                        } else if depth <= stored + s.tolerance {
                            let owner = (px / 2 + py / 2) as u64 % s.layers.max(1) as u64;
                            owner == s.layer as u64
                        } else {
                            false
                        }
                    }
                };
                if wins {
                    self.depth[k] = depth.min(stored);
                    self.pixels[k] = colour;
                }
            }
        }
    }

    /// Width in pixels of `text` drawn at `scale` (the widest line when it holds `\n`).
    pub fn text_width(text: &str, scale: u32) -> u32 {
        text.split('\n')
            .map(|line| {
                let n = line.chars().count() as u32;
                if n == 0 {
                    0
                } else {
                    ((n - 1) * ADVANCE + GLYPH_WIDTH) * scale
                }
            })
            .max()
            .unwrap_or(0)
    }

    /// Height in pixels of one line of text at `scale`, descenders included.
    pub fn text_height(scale: u32) -> u32 {
        GLYPH_HEIGHT * scale
    }

    /// Line pitch in pixels for text at `scale`.
    pub fn line_height(scale: u32) -> u32 {
        LINE_HEIGHT * scale
    }

    /// Draws `text` with the built-in font, top-left corner at `(x, y)`, each font pixel a
    /// `scale × scale` block (scale 0 counts as 1). `\n` starts a new line. Returns the width
    /// drawn, as [`Canvas::text_width`].
    pub fn text(&mut self, x: i64, y: i64, text: &str, scale: u32, colour: Rgb) -> u32 {
        let s = scale.max(1);
        for (row, line) in text.split('\n').enumerate() {
            let top = y + (row as u32 * LINE_HEIGHT * s) as i64;
            for (col, ch) in line.chars().enumerate() {
                let left = x + (col as u32 * ADVANCE * s) as i64;
                for (gy, bits) in font::glyph(ch).iter().enumerate() {
                    for gx in 0..GLYPH_WIDTH {
                        if bits >> (GLYPH_WIDTH - 1 - gx) & 1 == 1 {
                            let px = left + (gx * s) as i64;
                            let py = top + (gy as u32 * s) as i64;
                            self.fill_rect(px, py, s, s, colour);
                        }
                    }
                }
            }
        }
        Canvas::text_width(text, s)
    }

    /// The picture as PNG bytes (8-bit RGB, no metadata, so equal canvases give equal bytes).
    pub fn encode_png(&self) -> Result<Vec<u8>> {
        if self.width == 0 || self.height == 0 {
            return Err(Error::invalid(
                format!("a {} x {} picture is empty", self.width, self.height),
                "give the picture a width and a height of at least one pixel",
            ));
        }
        let mut out = Vec::new();
        let fail = |e: png::EncodingError| {
            Error::invalid(
                format!("cannot encode the picture as PNG ({e})"),
                "report this as a defect",
            )
        };
        let mut encoder = png::Encoder::new(&mut out, self.width, self.height);
        encoder.set_color(png::ColorType::Rgb);
        encoder.set_depth(png::BitDepth::Eight);
        encoder.set_compression(png::Compression::Fast);
        let mut writer = encoder.write_header().map_err(fail)?;
        writer.write_image_data(&self.rgb_bytes()).map_err(fail)?;
        writer.finish().map_err(fail)?;
        Ok(out)
    }

    /// Writes the picture as a PNG file at `path`, atomically: the bytes go to a temporary
    /// file in the same folder, which is then renamed over `path`. On failure the temporary
    /// file is removed and `path` is left as it was.
    pub fn save_png(&self, path: &Path) -> Result<()> {
        let bytes = self.encode_png()?;
        write_atomically(path, &bytes)
    }
}

/// Writes `bytes` to `path` with [`crate::io::write_atomic`] (temporary file in the same
/// folder, then a rename), after checking that the folder exists.
pub fn write_atomically(path: &Path, bytes: &[u8]) -> Result<()> {
    let folder = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    if !folder.is_dir() {
        return Err(Error::file(
            path,
            format!(
                "cannot write here: the folder {} does not exist",
                folder.display()
            ),
            "create the folder first or choose another output path",
        ));
    }
    crate::io::write_atomic(path, |w| {
        w.write_all(bytes).map_err(|e| Error::io(path, &e))
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::fs;

    const WHITE: Rgb = [255, 255, 255];
    const RED: Rgb = [200, 0, 0];
    const BLUE: Rgb = [0, 0, 200];

    fn count(c: &Canvas, colour: Rgb) -> usize {
        (0..c.height() as i64)
            .flat_map(|y| (0..c.width() as i64).map(move |x| (x, y)))
            .filter(|&(x, y)| c.pixel(x, y) == Some(colour))
            .count()
    }

    #[test]
    fn top_view_splat_lands_on_the_expected_pixel() {
        // A 100 x 100 pixel viewport showing x, y in [0, 10]: 10 pixels per unit.
        let vp = Viewport::fit([0.0, 0.0, 100.0, 100.0], [0.0, 0.0], [10.0, 10.0]);
        assert_eq!(vp.pixels_per_unit, 10.0);
        let mut c = Canvas::new(100, 100, WHITE);
        let [r, u, d] = ViewAxis::Top.project([2.05, 7.05, 3.0]);
        let [px, py] = vp.to_pixel(r, u);
        c.splat(px, py, d as f32, Splat::Square(1), RED);
        // x = 2.05 -> column 20; y = 7.05 -> 2.95 units below the top -> row 29.
        assert_eq!(c.pixel(20, 29), Some(RED));
        assert_eq!(count(&c, RED), 1);
    }

    #[test]
    fn views_are_right_handed_and_look_from_outside() {
        for v in ViewAxis::ALL {
            let ex = v.project([1.0, 0.0, 0.0]);
            let ey = v.project([0.0, 1.0, 0.0]);
            let ez = v.project([0.0, 0.0, 1.0]);
            // Rows of the projection: right, up, depth. right x up = -depth direction.
            let col = |i: usize| [ex[i], ey[i], ez[i]];
            let (r, u, d) = (col(0), col(1), col(2));
            let cross = [
                r[1] * u[2] - r[2] * u[1],
                r[2] * u[0] - r[0] * u[2],
                r[0] * u[1] - r[1] * u[0],
            ];
            assert_eq!(cross, [-d[0], -d[1], -d[2]], "{v:?}");
        }
        // The top view sees the highest point first.
        assert!(ViewAxis::Top.project([0.0, 0.0, 5.0])[2] < ViewAxis::Top.project([0.0; 3])[2]);
    }

    #[test]
    fn depth_test_keeps_the_nearer_point_in_either_order() {
        for near_first in [true, false] {
            let mut c = Canvas::new(10, 10, WHITE);
            let draws = [(1.0f32, RED), (2.0f32, BLUE)];
            let order: Vec<_> = if near_first {
                draws.to_vec()
            } else {
                draws.iter().rev().copied().collect()
            };
            for (d, col) in order {
                c.splat(5.5, 5.5, d, Splat::Square(3), col);
            }
            assert_eq!(count(&c, RED), 9);
            assert_eq!(count(&c, BLUE), 0);
        }
        // clear() forgets depths.
        let mut c = Canvas::new(4, 4, WHITE);
        c.splat(1.0, 1.0, 0.0, Splat::Square(1), RED);
        c.clear(WHITE);
        c.splat(1.0, 1.0, 5.0, Splat::Square(1), BLUE);
        assert_eq!(c.pixel(1, 1), Some(BLUE));
    }

    #[test]
    fn coincident_layers_share_pixels_in_a_checkerboard() {
        let mut c = Canvas::new(8, 8, WHITE);
        for (layer, colour, depth) in [(0, RED, 1.0), (1, BLUE, 1.0 + 1e-7)] {
            let share = Share {
                layer,
                layers: 2,
                tolerance: 1e-4,
            };
            for y in 0..8 {
                for x in 0..8 {
                    c.splat_shared(
                        x as f64,
                        y as f64,
                        depth,
                        Splat::Square(1),
                        colour,
                        Some(share),
                    );
                }
            }
        }
        assert_eq!(count(&c, RED), 32);
        assert_eq!(count(&c, BLUE), 32);
        assert_eq!(c.pixel(0, 0), Some(RED));
        assert_eq!(c.pixel(2, 0), Some(BLUE));
        // A clearly nearer point still wins every pixel.
        let share = Share {
            layer: 1,
            layers: 2,
            tolerance: 1e-4,
        };
        c.splat_shared(0.0, 0.0, 0.5, Splat::Square(1), BLUE, Some(share));
        assert_eq!(c.pixel(0, 0), Some(BLUE));
        // A farther one never does.
        c.splat_shared(2.0, 0.0, 3.0, Splat::Square(1), RED, Some(share));
        assert_eq!(c.pixel(2, 0), Some(BLUE));
    }

    #[test]
    fn splat_shapes_cover_the_expected_pixels() {
        let cases = [
            (Splat::Square(1), 1),
            (Splat::Square(2), 4),
            (Splat::Square(3), 9),
            (Splat::Disc(2), 4),
            (Splat::Disc(3), 5),
            (Splat::Disc(4), 12),
        ];
        for (shape, n) in cases {
            let mut c = Canvas::new(12, 12, WHITE);
            c.splat(6.0, 6.0, 0.0, shape, RED);
            assert_eq!(count(&c, RED), n, "{shape:?}");
            assert_eq!(c.pixel(6, 6), Some(RED), "{shape:?} misses its centre");
        }
        // Splats at the border are clipped, not wrapped.
        let mut c = Canvas::new(5, 5, WHITE);
        c.splat(0.0, 0.0, 0.0, Splat::Square(3), RED);
        assert_eq!(count(&c, RED), 4);
    }

    #[test]
    fn lines_and_rectangles() {
        let mut c = Canvas::new(20, 20, WHITE);
        c.line(2, 3, 12, 3, RED);
        assert_eq!(count(&c, RED), 11);
        c.line(0, 0, 19, 19, BLUE);
        assert!((0..20).all(|i| c.pixel(i, i) == Some(BLUE)));
        let mut c = Canvas::new(20, 20, WHITE);
        c.fill_rect(-5, -5, 10, 10, RED);
        assert_eq!(count(&c, RED), 25);
        c.stroke_rect(10, 10, 5, 4, 1, BLUE);
        assert_eq!(count(&c, BLUE), 14);
    }

    #[test]
    fn text_draws_glyph_pixels_and_distinct_glyphs_differ() {
        let draw = |s: &str, scale: u32| {
            let mut c = Canvas::new(60, 30, WHITE);
            let w = c.text(1, 1, s, scale, RED);
            (c, w)
        };
        let (a, wa) = draw("A", 1);
        assert_eq!(wa, 5);
        assert!(count(&a, RED) > 8);
        let (b, _) = draw("B", 1);
        assert_ne!(a.rgb_bytes(), b.rgb_bytes());
        let (a2, wa2) = draw("A", 2);
        assert_eq!(wa2, 10);
        assert_eq!(count(&a2, RED), 4 * count(&a, RED));
        let (deg, _) = draw("\u{b0}", 1);
        assert!(count(&deg, RED) > 0);
        let (blank, w) = draw("   ", 1);
        assert_eq!(count(&blank, RED), 0);
        assert_eq!(w, 17);
        assert_eq!(Canvas::text_width("ab\nlonger", 1), 35);
    }

    #[test]
    fn png_round_trips_through_the_decoder() {
        let mut c = Canvas::new(7, 5, WHITE);
        c.set_pixel(3, 2, RED);
        let bytes = c.encode_png().unwrap();
        assert_eq!(bytes, c.encode_png().unwrap());
        let decoder = png::Decoder::new(std::io::Cursor::new(bytes));
        let mut reader = decoder.read_info().unwrap();
        let mut buf = vec![0; reader.output_buffer_size().unwrap()];
        let info = reader.next_frame(&mut buf).unwrap();
        assert_eq!((info.width, info.height), (7, 5));
        assert_eq!(info.color_type, png::ColorType::Rgb);
        assert_eq!(&buf[..info.buffer_size()], &c.rgb_bytes()[..]);
        assert_eq!(&buf[(2 * 7 + 3) * 3..(2 * 7 + 3) * 3 + 3], &RED);
    }

    #[test]
    fn save_writes_the_file_and_leaves_no_temporary() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("picture.png");
        let c = Canvas::new(4, 3, RED);
        c.save_png(&path).unwrap();
        assert_eq!(fs::read(&path).unwrap(), c.encode_png().unwrap());
        let names: Vec<_> = fs::read_dir(dir.path()).unwrap().collect();
        assert_eq!(names.len(), 1);
    }

    #[test]
    fn save_into_a_missing_folder_fails_with_a_one_line_message() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("missing").join("picture.png");
        let err = Canvas::new(4, 3, RED).save_png(&path).unwrap_err();
        let msg = err.to_string();
        assert!(!msg.contains('\n'), "{msg}");
        assert!(msg.contains("picture.png"), "{msg}");
        assert!(msg.contains("create the folder"), "{msg}");
        assert_eq!(fs::read_dir(dir.path()).unwrap().count(), 0);
    }

    #[test]
    fn a_failed_rename_removes_the_temporary_file() {
        // The target is an existing folder, so the rename fails after the temp file is written.
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("taken");
        fs::create_dir(&target).unwrap();
        fs::write(target.join("keep"), b"x").unwrap();
        let err = Canvas::new(2, 2, RED).save_png(&target).unwrap_err();
        assert!(err.to_string().contains("taken"), "{err}");
        let names: Vec<_> = fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(names, vec![std::ffi::OsString::from("taken")]);
    }
}
