//! Engineering pictures of point clouds: orthographic top, front and side views.
//!
//! Points come in as f32 positions about an f64 origin, like [`Cloud`]: the global coordinate
//! of a point is `origin + position` (file units). Pictures are drawn about the first layer's
//! origin, in f64, so LAS-sized coordinates keep their precision. Large layers are thinned by a
//! fixed stride to at most [`MAX_POINTS_PER_LAYER`] points, so the same input always gives the
//! same picture, byte for byte.
//!
//! Every panel has the same scale on both axes, a scale bar whose length is 1, 2 or 5 × 10^k file
//! units ([`nice_length`]) and a small axis cross. Panels in one column share their extents, so
//! the rows of [`render_alignment_views`] can be compared directly. Points are shaded darker
//! the farther they are from the viewer (layer colours only; value colours are kept exact).

use std::path::Path;

use super::canvas::{Canvas, Rgb, Share, Splat, ViewAxis, Viewport};
use super::colour::{ColourMap, darken};
use crate::cloud::Cloud;
use crate::error::{Error, Result};

/// Most points drawn per layer; larger layers are thinned by a fixed stride.
pub const MAX_POINTS_PER_LAYER: usize = 200_000;

/// Size in pixels of the alignment picture.
pub const ALIGNMENT_SIZE: [u32; 2] = [1800, 1200];

/// Size in pixels of the single-cloud picture.
pub const CLOUD_SIZE: [u32; 2] = [1800, 860];

/// The rigid transform moving a layer in the "after" row, acting on global coordinates.
pub type Transform = crate::geometry::Rigid;

/// One set of points drawn in one colour.
#[derive(Debug, Clone)]
pub struct Layer<'a> {
    /// Name shown in the legend, e.g. `source` or the file name.
    pub name: String,
    /// Colour of the points (see [`super::colour::LAYER_PALETTE`]).
    pub colour: Rgb,
    /// Global coordinate of the local frame's zero, file units.
    pub origin: [f64; 3],
    /// Positions relative to `origin`, file units.
    pub points: &'a [[f32; 3]],
    /// Transform applied to this layer in the "after" row; `None` leaves it in place.
    pub after: Option<Transform>,
    /// Drawn in front of the other layers wherever they cover the same pixel (a partial scan
    /// over a full one), whatever the depth.
    pub on_top: bool,
    /// In the "after" row, colour the points by these values (one per point) instead of the
    /// layer colour, with a colour bar under the panels.
    pub after_values: Option<ScalarField<'a>>,
}

impl<'a> Layer<'a> {
    /// A layer showing `cloud` in place in both rows.
    pub fn from_cloud(name: impl Into<String>, colour: Rgb, cloud: &'a Cloud) -> Self {
        Layer {
            name: name.into(),
            colour,
            origin: cloud.origin,
            points: &cloud.positions,
            after: None,
            on_top: false,
            after_values: None,
        }
    }

    /// The same layer, moved by `transform` (global coordinates) in the "after" row.
    pub fn moved_after(mut self, transform: Transform) -> Self {
        self.after = Some(transform);
        self
    }
}

/// The words printed on a picture.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct FigureText {
    /// Heading, drawn large at the top.
    pub title: String,
    /// Figures under the heading, one per line, e.g. `inlier RMSE 0.0042 m`.
    pub lines: Vec<String>,
    /// A caution or note printed along the bottom edge.
    pub footer: String,
    /// Name of the file unit for scale bars, e.g. `m`; empty prints `units`.
    pub unit: String,
    /// When not empty, the result is not to be trusted: a red band with this text under the
    /// heading, and the "after" panels framed in red.
    pub warning: String,
}

/// Per-point values that colour a cloud through a colour map.
#[derive(Debug, Clone)]
pub struct ScalarField<'a> {
    /// One value per point; NaN marks a point without a value (drawn grey).
    pub values: &'a [f32],
    /// Name printed by the colour bar, e.g. `deviation (m)`.
    pub name: String,
    /// Values mapped to the two ends of the colour map; `None` takes the 1st and 99th
    /// percentiles of the finite values. Values outside are drawn in the end colours.
    pub range: Option<[f32; 2]>,
    /// The colour map.
    pub map: ColourMap,
}

/// The largest length of the form 1, 2 or 5 × 10^k that is not above `max`; 0 when `max` is
/// not a positive finite number.
pub fn nice_length(max: f64) -> f64 {
    if !(max > 0.0 && max.is_finite()) {
        return 0.0;
    }
    let mut base = 10f64.powi(max.log10().floor() as i32);
    // Guard against log10 rounding on exact powers of ten.
    if base > max * (1.0 + 1e-12) {
        base /= 10.0;
    } else if base * 10.0 <= max * (1.0 + 1e-12) {
        base *= 10.0;
    }
    let m = max / base * (1.0 + 1e-12);
    let step = if m >= 5.0 {
        5.0
    } else if m >= 2.0 {
        2.0
    } else {
        1.0
    };
    step * base
}

/// `length` with just the decimals it needs, then the unit: `0.05 m`, `20 m`.
fn length_label(length: f64, unit: &str) -> String {
    let decimals = if length >= 1.0 {
        0
    } else {
        (-length.log10() - 1e-6).ceil().max(0.0) as usize
    };
    let unit = if unit.is_empty() { "units" } else { unit };
    format!("{length:.decimals$} {unit}")
}

/// A value for the colour bar, with decimals fitted to the span of the bar.
fn value_label(value: f32, span: f32) -> String {
    let decimals = if span > 0.0 && span.is_finite() {
        (2.0 - span.log10().floor()).clamp(0.0, 6.0) as usize
    } else {
        3
    };
    let text = format!("{value:.decimals$}");
    let text = if text.contains('.') {
        text.trim_end_matches('0').trim_end_matches('.')
    } else {
        &text
    };
    if text == "-0" {
        "0".into()
    } else {
        text.into()
    }
}

fn count_label(n: usize) -> String {
    if n >= 1_000_000 {
        format!("{:.1} M points", n as f64 / 1e6)
    } else if n >= 10_000 {
        format!("{:.0} k points", n as f64 / 1e3)
    } else {
        format!("{n} points")
    }
}

fn stride(n: usize) -> usize {
    n.div_ceil(MAX_POINTS_PER_LAYER).max(1)
}

const BACKGROUND: Rgb = [255, 255, 255];
const PANEL: Rgb = [250, 250, 248];
const INK: Rgb = [25, 25, 30];
const SOFT_INK: Rgb = [90, 90, 95];
const FRAME: Rgb = [160, 160, 165];
/// Band and frames of a result that is not to be trusted.
const WARNING: Rgb = [180, 20, 30];
const MARGIN: i64 = 24;
const GAP: i64 = 16;
/// Darkening of the farthest points relative to the nearest.
const DEPTH_SHADE: f32 = 0.45;

/// Axis-aligned bounds of finite points, or `None` for no point.
#[derive(Debug, Clone, Copy)]
struct Bounds {
    lo: [f64; 3],
    hi: [f64; 3],
}

impl Bounds {
    fn of<'p>(points: impl IntoIterator<Item = &'p [f64; 3]>) -> Option<Bounds> {
        let mut b: Option<Bounds> = None;
        for p in points {
            if !p.iter().all(|v| v.is_finite()) {
                continue;
            }
            let b = b.get_or_insert(Bounds { lo: *p, hi: *p });
            for (k, &v) in p.iter().enumerate() {
                b.lo[k] = b.lo[k].min(v);
                b.hi[k] = b.hi[k].max(v);
            }
        }
        b
    }

    fn union(a: Option<Bounds>, b: Option<Bounds>) -> Option<Bounds> {
        match (a, b) {
            (Some(a), Some(b)) => Some(Bounds {
                lo: std::array::from_fn(|k| a.lo[k].min(b.lo[k])),
                hi: std::array::from_fn(|k| a.hi[k].max(b.hi[k])),
            }),
            (a, b) => a.or(b),
        }
    }

    /// `(lo, hi)` of `[right, up, depth]` in `view`.
    fn in_view(&self, view: ViewAxis) -> ([f64; 3], [f64; 3]) {
        let a = view.project(self.lo);
        let b = view.project(self.hi);
        (
            std::array::from_fn(|k| a[k].min(b[k])),
            std::array::from_fn(|k| a[k].max(b[k])),
        )
    }
}

/// Points of a layer relative to `reference`, thinned by stride, optionally transformed.
fn prepare(layer: &Layer<'_>, reference: [f64; 3], transform: Option<&Transform>) -> Vec<[f64; 3]> {
    let step = stride(layer.points.len());
    layer
        .points
        .iter()
        .step_by(step)
        .map(|p| {
            let g: [f64; 3] = std::array::from_fn(|k| layer.origin[k] + p[k] as f64);
            let g = match transform {
                Some(t) => {
                    let (m, v) = (&t.rotation, &t.translation);
                    std::array::from_fn(|r| {
                        m[(r, 0)] * g[0] + m[(r, 1)] * g[1] + m[(r, 2)] * g[2] + v[r]
                    })
                }
                None => g,
            };
            std::array::from_fn(|k| g[k] - reference[k])
        })
        .collect()
}

/// A panel's pixel rectangle and the parts inside it.
struct PanelLayout {
    x: i64,
    y: i64,
    w: i64,
    h: i64,
}

const LABEL_STRIP: i64 = 34;
const BOTTOM_STRIP: i64 = 44;
const PAD: i64 = 12;

impl PanelLayout {
    /// The rectangle where points go: `[x, y, w, h]`.
    fn plot_rect(&self) -> [f64; 4] {
        [
            (self.x + PAD) as f64,
            (self.y + LABEL_STRIP) as f64,
            (self.w - 2 * PAD) as f64,
            (self.h - LABEL_STRIP - BOTTOM_STRIP) as f64,
        ]
    }
}

/// Draws the panel's frame, label, scale bar and axis cross; returns its viewport.
fn draw_panel(
    canvas: &mut Canvas,
    panel: &PanelLayout,
    label: &str,
    view: ViewAxis,
    extent: ([f64; 3], [f64; 3]),
    unit: &str,
) -> Viewport {
    let (x, y, w, h) = (panel.x, panel.y, panel.w, panel.h);
    canvas.fill_rect(x, y, w as u32, h as u32, PANEL);
    canvas.stroke_rect(x, y, w as u32, h as u32, 1, FRAME);
    canvas.text(x + PAD, y + 10, label, 2, INK);

    let (lo, hi) = extent;
    // Inset by a splat's width so that points on the extremes stay inside the plot rectangle.
    let [px, py, pw, ph] = panel.plot_rect();
    let inner = [px + 3.0, py + 3.0, pw - 6.0, ph - 6.0];
    let vp = Viewport::fit(inner, [lo[0], lo[1]], [hi[0], hi[1]]);

    // Scale bar: about a quarter of the plot width, rounded down to 1-2-5.
    let base_y = y + h - 14;
    let length = nice_length(vp.width / vp.pixels_per_unit * 0.25);
    let bar = (length * vp.pixels_per_unit).round() as i64;
    if bar >= 2 {
        let bx = x + PAD;
        canvas.fill_rect(bx, base_y - 5, bar as u32, 5, INK);
        canvas.fill_rect(bx, base_y - 12, 2, 12, INK);
        canvas.fill_rect(bx + bar - 2, base_y - 12, 2, 12, INK);
        canvas.text(
            bx + bar + 10,
            base_y - 16,
            &length_label(length, unit),
            2,
            INK,
        );
    }

    // Axis cross at the bottom right: right axis along, up axis upwards.
    let (right, up) = view.axis_names();
    let ox = x + w - PAD - 64;
    let oy = base_y;
    let arm = 26;
    canvas.fill_rect(ox, oy - 1, arm as u32, 2, SOFT_INK);
    canvas.fill_rect(ox, oy - arm, 2, arm as u32, SOFT_INK);
    for d in 1..5 {
        canvas.line(ox + arm - d, oy - 1 - d, ox + arm - d, oy + d, SOFT_INK);
        canvas.line(ox - d, oy - arm + d, ox + 1 + d, oy - arm + d, SOFT_INK);
    }
    canvas.text(ox + arm + 6, oy - 8, right, 2, SOFT_INK);
    canvas.text(ox + 10, oy - arm - 4, up, 2, SOFT_INK);
    vp
}

/// How points are drawn in one panel.
struct PointStyle {
    /// Depth range for shading (farther = darker); `None` keeps colours exact.
    shade: Option<[f64; 2]>,
    /// Pixel sharing with other layers at equal depth.
    share: Option<Share>,
    splat: Splat,
    /// Added to the depth test value only (not the shading): negative draws in front.
    depth_bias: f64,
}

/// Splats points in one view.
fn draw_points(
    canvas: &mut Canvas,
    vp: &Viewport,
    view: ViewAxis,
    points: &[[f64; 3]],
    colour: impl Fn(usize) -> Rgb,
    style: &PointStyle,
) {
    for (i, p) in points.iter().enumerate() {
        let [r, u, d] = view.project(*p);
        let [px, py] = vp.to_pixel(r, u);
        let mut c = colour(i);
        if let Some([dlo, dhi]) = style.shade
            && dhi > dlo
        {
            c = darken(c, DEPTH_SHADE * ((d - dlo) / (dhi - dlo)) as f32);
        }
        canvas.splat_shared(
            px,
            py,
            (d + style.depth_bias) as f32,
            style.splat,
            c,
            style.share,
        );
    }
}

/// `text` cut to at most `max_width` pixels at `scale`, ending in `...` when cut.
fn fit_text(text: &str, scale: u32, max_width: i64) -> String {
    if Canvas::text_width(text, scale) as i64 <= max_width {
        return text.to_string();
    }
    let advance = (Canvas::text_width("xx", scale) - Canvas::text_width("x", scale)) as i64;
    let keep = (max_width / advance.max(1) - 3).max(0) as usize;
    text.chars().take(keep).collect::<String>() + "..."
}

/// `text` broken at spaces into at most `max_lines` lines of at most `max_width` pixels at
/// `scale`; the last line is cut with `...` when the text does not fit.
fn wrap_words(text: &str, scale: u32, max_width: i64, max_lines: usize) -> Vec<String> {
    let mut lines: Vec<String> = Vec::new();
    let mut current = String::new();
    for word in text.split(' ') {
        let candidate = if current.is_empty() {
            word.to_string()
        } else {
            format!("{current} {word}")
        };
        if Canvas::text_width(&candidate, scale) as i64 <= max_width || current.is_empty() {
            current = candidate;
        } else {
            lines.push(std::mem::replace(&mut current, word.to_string()));
        }
    }
    if !current.is_empty() {
        lines.push(current);
    }
    if lines.len() > max_lines {
        let rest = lines.split_off(max_lines - 1).join(" ");
        lines.push(rest);
    }
    lines
        .into_iter()
        .map(|l| fit_text(&l, scale, max_width))
        .collect()
}

/// Most rows of the red "NOT ALIGNED" band: an ambiguous verdict's reason and its advice fit
/// in full on a 1 800-pixel picture.
const MAX_WARNING_ROWS: usize = 4;
/// The red band's rows for `warning` across `usable` pixels (scale 3, 10-pixel inset).
fn warning_rows(warning: &str, usable: i64) -> Vec<String> {
    wrap_words(
        &format!("NOT ALIGNED: {warning}"),
        3,
        usable - 20,
        MAX_WARNING_ROWS,
    )
}

/// Most rows of figure lines under the heading; more lines go to further columns.
const MAX_HEADER_ROWS: usize = 6;
/// Most columns of figure lines.
const MAX_HEADER_COLUMNS: usize = 3;

/// Draws the heading and figure lines; returns the y just below them. Lines that do not fit
/// are cut with `...`; beyond [`MAX_HEADER_ROWS`] × [`MAX_HEADER_COLUMNS`] lines the last
/// shown line says how many were left out.
fn draw_header(canvas: &mut Canvas, text: &FigureText) -> i64 {
    let usable = canvas.width() as i64 - 2 * MARGIN;
    let mut y = MARGIN;
    for line in wrap_words(&text.title, 3, usable, 2) {
        canvas.text(MARGIN, y, &line, 3, INK);
        y += Canvas::line_height(3) as i64 + 6;
    }
    if !text.warning.is_empty() {
        let rows = warning_rows(&text.warning, usable);
        let pitch = Canvas::line_height(3) as i64 + 4;
        let band = rows.len() as i64 * pitch + 10;
        canvas.fill_rect(MARGIN, y, usable as u32, band as u32, WARNING);
        for (i, row) in rows.iter().enumerate() {
            canvas.text(MARGIN + 10, y + 7 + i as i64 * pitch, row, 3, BACKGROUND);
        }
        y += band + 8;
    }
    if !text.lines.is_empty() {
        let limit = MAX_HEADER_ROWS * MAX_HEADER_COLUMNS;
        let mut lines = text.lines.clone();
        if lines.len() > limit {
            let left_out = lines.len() - (limit - 1);
            lines.truncate(limit - 1);
            lines.push(format!("({left_out} more lines not shown)"));
        }
        let widest = lines
            .iter()
            .map(|l| Canvas::text_width(l, 2) as i64)
            .max()
            .unwrap_or(0);
        let gutter = 56;
        let fit = ((usable + gutter) / (widest + gutter).max(1)) as usize;
        let columns = fit
            .max(lines.len().div_ceil(MAX_HEADER_ROWS))
            .clamp(1, MAX_HEADER_COLUMNS);
        let rows = lines.len().div_ceil(columns);
        let column = (usable + gutter) / columns as i64;
        let pitch = Canvas::line_height(2) as i64 + 2;
        for (i, line) in lines.iter().enumerate() {
            let (c, r) = (i / rows, i % rows);
            let line = fit_text(line, 2, column - gutter);
            let x = MARGIN + c as i64 * column.min(widest + gutter);
            canvas.text(x, y + r as i64 * pitch, &line, 2, INK);
        }
        y += rows as i64 * pitch;
    }
    y + 6
}

/// Footer height: the legend row and two lines for the caution (it is never cut).
const FOOTER_HEIGHT: i64 = 92;
/// Footer height of the single-cloud picture: taller with a colour bar and its tick labels.
fn cloud_footer_height(colour_bar: bool) -> i64 {
    if colour_bar {
        FOOTER_HEIGHT + 30
    } else {
        FOOTER_HEIGHT
    }
}

/// Draws the footer caution along the bottom edge, wrapped onto at most two lines (the last
/// line ends at the bottom margin). `reserved` pixels at the right end are kept free.
fn draw_footer_line(canvas: &mut Canvas, footer: &str, reserved: i64) {
    let bottom = canvas.height() as i64 - MARGIN - Canvas::text_height(2) as i64;
    let usable = canvas.width() as i64 - 2 * MARGIN - reserved;
    let lines = wrap_words(footer, 2, usable, 2);
    let pitch = Canvas::line_height(2) as i64 + 2;
    let top = bottom - (lines.len() as i64 - 1) * pitch;
    for (i, line) in lines.iter().enumerate() {
        canvas.text(MARGIN, top + i as i64 * pitch, line, 2, SOFT_INK);
    }
}

/// Draws the depth-shading note after the legend when it fits on that row, otherwise at the
/// right end of the footer row, then the footer caution line in the room left.
fn draw_depth_note(canvas: &mut Canvas, legend_end: i64, legend_y: i64, footer: &str) {
    const NOTE: &str = "darker = farther";
    let note_w = Canvas::text_width(NOTE, 2) as i64;
    let right = canvas.width() as i64 - MARGIN;
    if legend_end + note_w <= right {
        canvas.text(legend_end, legend_y + 2, NOTE, 2, SOFT_INK);
        draw_footer_line(canvas, footer, 0);
    } else {
        let y = canvas.height() as i64 - MARGIN - Canvas::text_height(2) as i64;
        canvas.text(right - note_w, y, NOTE, 2, SOFT_INK);
        draw_footer_line(canvas, footer, note_w + 40);
    }
}

/// Draws legend entries (swatch and name) on one row at `y`; returns the x after the last.
fn draw_legend(canvas: &mut Canvas, x: i64, y: i64, entries: &[(Rgb, String)]) -> i64 {
    let mut x = x;
    for (colour, name) in entries {
        canvas.fill_rect(x, y, 20, 20, *colour);
        canvas.stroke_rect(x, y, 20, 20, 1, INK);
        x += 30;
        x += canvas.text(x, y + 2, name, 2, INK) as i64 + 40;
    }
    x
}

/// Splits the area between `top` and `bottom` into `rows × 3` panels.
fn grid(width: i64, top: i64, bottom: i64, rows: i64) -> Vec<PanelLayout> {
    let w = (width - 2 * MARGIN - 2 * GAP) / 3;
    let h = (bottom - top - (rows - 1) * GAP) / rows;
    let mut out = Vec::new();
    for r in 0..rows {
        for c in 0..3 {
            out.push(PanelLayout {
                x: MARGIN + c * (w + GAP),
                y: top + r * (h + GAP),
                w,
                h,
            });
        }
    }
    out
}

fn check_transform(layer: &Layer<'_>) -> Result<()> {
    if let Some(t) = &layer.after
        && !(t.rotation.iter().chain(t.translation.iter())).all(|v| v.is_finite())
    {
        return Err(Error::invalid(
            format!("the transform of layer {} is not finite", layer.name),
            "pass a finite 4x4 transform",
        ));
    }
    Ok(())
}

/// One row of the alignment picture: a label and, per layer, the transform it is drawn under.
#[derive(Debug, Clone)]
pub struct ViewRow {
    /// Printed before each panel's view name, e.g. `before` or `candidate 2 (score 0.58)`.
    pub label: String,
    /// Per layer (same order as the layers): the transform of that layer in this row, `None`
    /// to draw it in place.
    pub transforms: Vec<Option<Transform>>,
    /// Colour layers by their [`Layer::after_values`] in this row (when they have them).
    pub values: bool,
    /// Frame this row's panels in red with a short note (e.g. `NOT ALIGNED`); empty for none.
    pub flag: String,
}

/// Draws the alignment picture (see [`render_alignment_views`]) without writing it.
pub fn draw_alignment_views(layers: &[Layer<'_>], text: &FigureText) -> Result<Canvas> {
    let flag = if text.warning.is_empty() {
        String::new()
    } else {
        "NOT ALIGNED".to_string()
    };
    let rows = [
        ViewRow {
            label: "before".into(),
            transforms: vec![None; layers.len()],
            values: false,
            flag: String::new(),
        },
        ViewRow {
            label: "after".into(),
            transforms: layers.iter().map(|l| l.after).collect(),
            values: true,
            flag,
        },
    ];
    draw_alignment_rows(layers, &rows, text)
}

/// Draws `layers` in `rows` (each row three orthographic views, the layers under that row's
/// transforms), with `text` above and the legend and caution below. Panels in a column share
/// their extents (the union over every row).
pub fn draw_alignment_rows(
    layers: &[Layer<'_>],
    rows: &[ViewRow],
    text: &FigureText,
) -> Result<Canvas> {
    let [width, height] = ALIGNMENT_SIZE;
    let mut canvas = Canvas::new(width, height, BACKGROUND);
    for layer in layers {
        check_transform(layer)?;
    }
    for row in rows {
        for t in row.transforms.iter().flatten() {
            if !(t.rotation.iter().chain(t.translation.iter())).all(|v| v.is_finite()) {
                return Err(Error::invalid(
                    format!("a transform of the row {} is not finite", row.label),
                    "pass finite 4x4 transforms",
                ));
            }
        }
    }
    let reference = layers.first().map(|l| l.origin).unwrap_or([0.0; 3]);
    let drawn: Vec<Vec<Vec<[f64; 3]>>> = rows
        .iter()
        .map(|row| {
            layers
                .iter()
                .enumerate()
                .map(|(k, l)| prepare(l, reference, row.transforms.get(k).and_then(|t| t.as_ref())))
                .collect()
        })
        .collect();
    let bounds = drawn
        .iter()
        .flatten()
        .map(|pts| Bounds::of(pts.iter()))
        .fold(None, Bounds::union)
        .unwrap_or(Bounds {
            lo: [0.0; 3],
            hi: [0.0; 3],
        });

    let top = draw_header(&mut canvas, text);
    let bar_field = layers
        .iter()
        .find_map(|l| l.after_values.as_ref())
        .filter(|_| rows.iter().any(|r| r.values));
    let footer = if bar_field.is_some() {
        FOOTER_HEIGHT + 56
    } else {
        FOOTER_HEIGHT
    };
    let bottom = height as i64 - MARGIN - footer;
    let panels = grid(width as i64, top, bottom, rows.len().max(1) as i64);
    for (r_index, (row, points)) in rows.iter().zip(&drawn).enumerate() {
        for (col, view) in ViewAxis::ALL.into_iter().enumerate() {
            let extent = bounds.in_view(view);
            let (r, u) = view.axis_names();
            let label = format!("{}: {} view, {r}-{u}", row.label, view.name());
            let panel = &panels[r_index * 3 + col];
            let vp = draw_panel(&mut canvas, panel, &label, view, extent, &text.unit);
            if !row.flag.is_empty() {
                canvas.stroke_rect(panel.x, panel.y, panel.w as u32, panel.h as u32, 5, WARNING);
                let w = Canvas::text_width(&row.flag, 2) as i64;
                canvas.text(
                    panel.x + panel.w - PAD - w,
                    panel.y + 12,
                    &row.flag,
                    2,
                    WARNING,
                );
            }
            let (dlo, dhi) = (extent.0[2], extent.1[2]);
            for (k, (layer, pts)) in layers.iter().zip(points.iter()).enumerate() {
                let style = PointStyle {
                    shade: Some([dlo, dhi]),
                    share: Some(Share {
                        layer: k as u32,
                        layers: layers.len() as u32,
                        tolerance: ((dhi - dlo) * 1e-5).max(1e-6) as f32,
                    }),
                    splat: Splat::Square(2),
                    depth_bias: if layer.on_top {
                        -(dhi - dlo) - 1.0
                    } else {
                        0.0
                    },
                };
                let colour = layer.colour;
                match (&layer.after_values, row.values) {
                    (Some(field), true) => {
                        let step = stride(layer.points.len());
                        let [lo, hi] = value_range(field);
                        let map = field.map;
                        let value_colour = |i: usize| {
                            let v = field.values.get(i * step).copied().unwrap_or(f32::NAN);
                            if v.is_finite() {
                                map.colour(
                                    ((v - lo) / (hi - lo).max(f32::MIN_POSITIVE)).clamp(0.0, 1.0),
                                )
                            } else {
                                super::colour::NO_VALUE
                            }
                        };
                        let flat = PointStyle {
                            shade: None,
                            ..style
                        };
                        draw_points(&mut canvas, &vp, view, pts, value_colour, &flat);
                    }
                    _ => draw_points(&mut canvas, &vp, view, pts, |_| colour, &style),
                }
            }
        }
    }

    let legend: Vec<(Rgb, String)> = layers
        .iter()
        .map(|l| {
            let mut name = format!("{} ({}", l.name, count_label(l.points.len()));
            let s = stride(l.points.len());
            if s > 1 {
                name += &format!(", 1 in {s} drawn");
            }
            name += ")";
            if l.after.is_some() {
                name += ", moved in the after row";
            }
            (l.colour, name)
        })
        .collect();
    let legend_y = height as i64 - MARGIN - footer + 14;
    let x = draw_legend(&mut canvas, MARGIN, legend_y, &legend);
    if let Some(field) = bar_field {
        let note = "after row; grey = no value or beyond the bar";
        draw_colour_bar(&mut canvas, legend_y + 32, field, value_range(field), note);
    }
    draw_depth_note(&mut canvas, x, legend_y, &text.footer);
    Ok(canvas)
}

/// Writes a PNG of `layers` in two rows, before and after each layer's transform, by three
/// orthographic views (top X-Y, front X-Z, side Y-Z), with `text` printed above and below.
///
/// Panels in a column share extents (the union of both rows), so a good registration shows
/// the layers overlapping in the bottom row. The file is written atomically.
pub fn render_alignment_views(layers: &[Layer<'_>], text: &FigureText, path: &Path) -> Result<()> {
    draw_alignment_views(layers, text)?.save_png(path)
}

/// The `[lo, hi]` range used for colouring: the given one or the 1st–99th percentiles.
fn value_range(field: &ScalarField<'_>) -> [f32; 2] {
    if let Some(r) = field.range {
        return r;
    }
    let mut v: Vec<f32> = field
        .values
        .iter()
        .copied()
        .filter(|x| x.is_finite())
        .collect();
    if v.is_empty() {
        return [0.0, 1.0];
    }
    v.sort_by(f32::total_cmp);
    let at = |q: f64| v[((v.len() - 1) as f64 * q).round() as usize];
    [at(0.01), at(0.99)]
}

/// Draws the single-cloud picture (see [`render_cloud_views`]) without writing it.
pub fn draw_cloud_views(
    cloud: &Cloud,
    colour_by: Option<&ScalarField<'_>>,
    text: &FigureText,
) -> Result<Canvas> {
    if let Some(f) = colour_by
        && f.values.len() != cloud.len()
    {
        return Err(Error::invalid(
            format!(
                "{} has {} values for {} points",
                f.name,
                f.values.len(),
                cloud.len()
            ),
            "give one value per point",
        ));
    }
    let [width, height] = CLOUD_SIZE;
    let mut canvas = Canvas::new(width, height, BACKGROUND);
    let layer = Layer::from_cloud("points", super::colour::LAYER_PALETTE[1], cloud);
    let points = prepare(&layer, cloud.origin, None);
    let step = stride(cloud.len());
    let bounds = Bounds::of(&points).unwrap_or(Bounds {
        lo: [0.0; 3],
        hi: [0.0; 3],
    });
    let range = colour_by.map(value_range);

    let footer = cloud_footer_height(colour_by.is_some());
    let top = draw_header(&mut canvas, text);
    let bottom = height as i64 - MARGIN - footer;
    let panels = grid(width as i64, top, bottom, 1);
    for (col, view) in ViewAxis::ALL.into_iter().enumerate() {
        let extent = bounds.in_view(view);
        let (r, u) = view.axis_names();
        let label = format!("{} view, {r}-{u}", view.name());
        let vp = draw_panel(&mut canvas, &panels[col], &label, view, extent, &text.unit);
        match (colour_by, range) {
            (Some(field), Some([lo, hi])) => {
                let span = if hi > lo { hi - lo } else { 1.0 };
                let colour = |i: usize| field.map.colour((field.values[i * step] - lo) / span);
                let style = PointStyle {
                    shade: None,
                    share: None,
                    splat: Splat::Square(2),
                    depth_bias: 0.0,
                };
                draw_points(&mut canvas, &vp, view, &points, colour, &style);
            }
            _ => {
                let style = PointStyle {
                    shade: Some([extent.0[2], extent.1[2]]),
                    share: None,
                    splat: Splat::Square(2),
                    depth_bias: 0.0,
                };
                let c = layer.colour;
                draw_points(&mut canvas, &vp, view, &points, |_| c, &style);
            }
        }
    }

    let legend_y = height as i64 - MARGIN - footer + 14;
    let mut count = count_label(cloud.len());
    if step > 1 {
        count += &format!(", 1 in {step} drawn");
    }
    match (colour_by, range) {
        (Some(field), Some([lo, hi])) => {
            let mut note = count;
            if field.values.iter().any(|v| v.is_nan()) {
                note += ", grey = no value";
            }
            draw_colour_bar(&mut canvas, legend_y, field, [lo, hi], &note);
            draw_footer_line(&mut canvas, &text.footer, 0);
        }
        _ => {
            let x = draw_legend(&mut canvas, MARGIN, legend_y, &[(layer.colour, count)]);
            draw_depth_note(&mut canvas, x, legend_y, &text.footer);
        }
    }
    Ok(canvas)
}

/// Draws the value name, a colour bar with ticks and values at its ends and middle, and a
/// note to its right, from `y` downwards.
fn draw_colour_bar(
    canvas: &mut Canvas,
    y: i64,
    field: &ScalarField<'_>,
    [lo, hi]: [f32; 2],
    note: &str,
) {
    const BAR_W: i64 = 480;
    const BAR_H: i64 = 20;
    let x0 = MARGIN + canvas.text(MARGIN, y + 2, &field.name, 2, INK) as i64 + 24;
    for i in 0..BAR_W {
        let t = i as f32 / (BAR_W - 1) as f32;
        canvas.fill_rect(x0 + i, y, 1, BAR_H as u32, field.map.colour(t));
    }
    canvas.stroke_rect(x0, y, BAR_W as u32, BAR_H as u32, 1, INK);
    let span = hi - lo;
    for q in 0..=4 {
        let tx = x0 + (BAR_W - 1) * q / 4;
        canvas.fill_rect(tx, y + BAR_H, 1, 6, INK);
        if q % 2 == 0 {
            let label = value_label(lo + span * q as f32 / 4.0, span);
            let w = Canvas::text_width(&label, 2) as i64;
            canvas.text(tx - w / 2, y + BAR_H + 9, &label, 2, INK);
        }
    }
    canvas.text(x0 + BAR_W + 60, y + 2, note, 2, SOFT_INK);
}

/// Writes a PNG of `cloud` in three orthographic views (top X-Y, front X-Z, side Y-Z), coloured
/// by `colour_by` through its colour map with a colour bar, or in one colour shaded by depth.
/// The file is written atomically.
pub fn render_cloud_views(
    cloud: &Cloud,
    colour_by: Option<&ScalarField<'_>>,
    text: &FigureText,
    path: &Path,
) -> Result<()> {
    draw_cloud_views(cloud, colour_by, text)?.save_png(path)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The red band of an ambiguous picture holds every verdict reason with the advice after it
    /// (src/align/report.rs) without cutting it, at the picture's width.
    #[test]
    fn every_reason_fits_the_warning_band_uncut() {
        use crate::align::Reason;
        // A new reason fails to compile here until it is added to the list below.
        let _every_reason_is_listed = |r: Reason| match r {
            Reason::TooFewDistinctivePoints
            | Reason::TooLittleOverlap
            | Reason::AmbiguousSymmetricShape
            | Reason::WeaklyConstrained
            | Reason::ContradictsFreeSpace
            | Reason::MatchesFavourAnotherPose
            | Reason::FitNotPinned
            | Reason::FitsDisagree => (),
        };
        let usable = ALIGNMENT_SIZE[0] as i64 - 2 * MARGIN;
        for reason in [
            Reason::TooFewDistinctivePoints,
            Reason::TooLittleOverlap,
            Reason::AmbiguousSymmetricShape,
            Reason::WeaklyConstrained,
            Reason::ContradictsFreeSpace,
            Reason::MatchesFavourAnotherPose,
            Reason::FitNotPinned,
            Reason::FitsDisagree,
        ] {
            let warning = crate::align::report::ambiguous_warning(reason.explain());
            let rows = warning_rows(&warning, usable);
            assert!(
                rows.iter().all(|r| !r.ends_with("...")),
                "{reason:?} is cut: {rows:?}"
            );
            assert_eq!(rows.join(" "), format!("NOT ALIGNED: {warning}"));
        }
    }

    #[test]
    fn nice_lengths_follow_one_two_five() {
        let cases = [
            (7.3, 5.0),
            (0.031, 0.02),
            (1.0, 1.0),
            (199.0, 100.0),
            (250.0, 200.0),
            (9.99, 5.0),
            (2.0, 2.0),
            (5.0, 5.0),
            (0.5, 0.5),
            (0.001, 0.001),
            (1e6, 1e6),
            (0.0, 0.0),
            (-3.0, 0.0),
            (f64::NAN, 0.0),
            (f64::INFINITY, 0.0),
        ];
        for (max, want) in cases {
            let got = nice_length(max);
            assert!(
                (got - want).abs() <= 1e-12 * want.max(1.0),
                "{max} -> {got}"
            );
            assert!(got <= max || got == 0.0);
        }
    }

    #[test]
    fn labels_carry_just_the_needed_decimals() {
        assert_eq!(length_label(0.05, "m"), "0.05 m");
        assert_eq!(length_label(0.1, "m"), "0.1 m");
        assert_eq!(length_label(0.2, "mm"), "0.2 mm");
        assert_eq!(length_label(20.0, ""), "20 units");
        assert_eq!(value_label(-1.0123, 3.0), "-1.01");
        assert_eq!(value_label(0.00421, 0.01), "0.0042");
        assert_eq!(value_label(-0.004, 0.008), "-0.004");
        assert_eq!(value_label(-1e-9, 0.008), "0");
        assert_eq!(value_label(1.5, 3.0), "1.5");
        assert_eq!(value_label(1200.0, 800.0), "1200");
        assert_eq!(count_label(999), "999 points");
        assert_eq!(count_label(42_500), "42 k points");
        assert_eq!(count_label(2_345_678), "2.3 M points");
    }

    #[test]
    fn scale_bar_is_drawn_at_its_nice_length() {
        let mut canvas = Canvas::new(600, 500, BACKGROUND);
        let panel = PanelLayout {
            x: 0,
            y: 0,
            w: 600,
            h: 500,
        };
        // 37 units wide: a quarter is 9.25, so the bar is 5 units.
        let extent = ([0.0, 0.0, 0.0], [37.0, 10.0, 1.0]);
        let vp = draw_panel(&mut canvas, &panel, "x", ViewAxis::Top, extent, "m");
        // The bar is the run of ink that starts at the panel padding.
        let run = (PAD..600)
            .take_while(|&x| canvas.pixel(x, 500 - 14 - 3) == Some(INK))
            .count() as f64;
        let want = 5.0 * vp.pixels_per_unit;
        assert!((run - want).abs() <= 1.0, "bar {run} px, want {want}");
        assert!(vp.pixels_per_unit > 10.0);
    }

    #[test]
    fn long_text_is_cut_to_fit() {
        assert_eq!(fit_text("short", 2, 1000), "short");
        let long = "a".repeat(300);
        let cut = fit_text(&long, 2, 600);
        assert!(cut.ends_with("..."));
        assert!(Canvas::text_width(&cut, 2) <= 600);
        assert!(Canvas::text_width(&cut, 2) > 560);
    }

    #[test]
    fn header_grows_with_lines_but_is_capped() {
        let canvas = || Canvas::new(ALIGNMENT_SIZE[0], ALIGNMENT_SIZE[1], BACKGROUND);
        let with = |n: usize| FigureText {
            title: "t".into(),
            lines: (0..n).map(|i| format!("figure number {i}")).collect(),
            ..FigureText::default()
        };
        let h0 = draw_header(&mut canvas(), &with(0));
        let h3 = draw_header(&mut canvas(), &with(3));
        let h100 = draw_header(&mut canvas(), &with(100));
        assert!(h3 > h0);
        let pitch = Canvas::line_height(2) as i64 + 2;
        assert_eq!(h100 - h0, MAX_HEADER_ROWS as i64 * pitch);
    }

    #[test]
    fn large_layers_are_thinned_by_stride() {
        assert_eq!(stride(0), 1);
        assert_eq!(stride(MAX_POINTS_PER_LAYER), 1);
        assert_eq!(stride(MAX_POINTS_PER_LAYER + 1), 2);
        assert_eq!(stride(3 * MAX_POINTS_PER_LAYER), 3);
        let pts = vec![[0.0f32; 3]; 2 * MAX_POINTS_PER_LAYER + 5];
        let layer = Layer {
            name: "big".into(),
            colour: [0, 0, 0],
            origin: [0.0; 3],
            points: &pts,
            after: None,
            on_top: false,
            after_values: None,
        };
        assert!(prepare(&layer, [0.0; 3], None).len() <= MAX_POINTS_PER_LAYER);
    }

    #[test]
    fn percentile_range_ignores_nan_and_outliers() {
        let mut values: Vec<f32> = (0..=100).map(|i| i as f32).collect();
        values.push(f32::NAN);
        values.push(1e9);
        let field = ScalarField {
            values: &values,
            name: "v".into(),
            range: None,
            map: ColourMap::Sequential,
        };
        let [lo, hi] = value_range(&field);
        assert_eq!(lo, 1.0);
        assert_eq!(hi, 100.0);
    }

    /// Mean pixel position of the pixels in a rectangle that satisfy `pick`, and their count.
    fn centroid(
        c: &Canvas,
        rect: [f64; 4],
        pick: impl Fn(Rgb) -> bool,
    ) -> Option<([f64; 2], usize)> {
        let [x, y, w, h] = rect.map(|v| v as i64);
        let (mut sx, mut sy, mut n) = (0.0, 0.0, 0usize);
        for py in y..y + h {
            for px in x..x + w {
                if pick(c.pixel(px, py).unwrap()) {
                    sx += px as f64;
                    sy += py as f64;
                    n += 1;
                }
            }
        }
        (n > 0).then(|| ([sx / n as f64, sy / n as f64], n))
    }

    #[test]
    fn after_row_shows_the_moved_layer_on_top_of_the_fixed_one() {
        // A 1 m cube of points far from zero (LAS-like coordinates), and a copy shifted by
        // (5, 3, 2) m whose transform moves it back.
        let mut cube = Vec::new();
        for i in 0..10 {
            for j in 0..10 {
                for k in 0..10 {
                    cube.push([i as f32 * 0.1, j as f32 * 0.1, k as f32 * 0.1]);
                }
            }
        }
        let fixed_origin = [638_864.6, 4_853_123.4, 120.0];
        let moved_origin = [638_869.6, 4_853_126.4, 122.0];
        let back = Transform::translation(nalgebra::Vector3::new(-5.0, -3.0, -2.0));
        let orange = [250, 120, 0];
        let blue = [0, 90, 250];
        let layers = [
            Layer {
                name: "moved".into(),
                colour: orange,
                origin: moved_origin,
                points: &cube,
                after: Some(back),
                on_top: false,
                after_values: None,
            },
            Layer {
                name: "fixed".into(),
                colour: blue,
                origin: fixed_origin,
                points: &cube,
                after: None,
                on_top: false,
                after_values: None,
            },
        ];
        let text = FigureText {
            title: "test".into(),
            lines: vec!["rotation 0.00\u{b0}".into()],
            footer: "note".into(),
            unit: "m".into(),
            warning: String::new(),
        };
        let canvas = draw_alignment_views(&layers, &text).unwrap();
        assert_eq!([canvas.width(), canvas.height()], ALIGNMENT_SIZE);
        let again = draw_alignment_views(&layers, &text).unwrap();
        assert_eq!(canvas.encode_png().unwrap(), again.encode_png().unwrap());

        let is_orange = |c: Rgb| c[0] > 60 && c[0] as i32 > c[2] as i32 + 40;
        let is_blue = |c: Rgb| c[2] > 60 && c[2] as i32 > c[0] as i32 + 40;
        let top = draw_header(&mut Canvas::new(1, 1, BACKGROUND), &text);
        let bottom = ALIGNMENT_SIZE[1] as i64 - MARGIN - FOOTER_HEIGHT;
        let panels = grid(ALIGNMENT_SIZE[0] as i64, top, bottom, 2);
        for (i, panel) in panels.iter().enumerate() {
            let rect = panel.plot_rect();
            let (o, no) = centroid(&canvas, rect, is_orange).expect("orange points");
            let (b, nb) = centroid(&canvas, rect, is_blue).expect("blue points");
            let dist = ((o[0] - b[0]).powi(2) + (o[1] - b[1]).powi(2)).sqrt();
            if i < 3 {
                assert!(dist > 50.0, "before panel {i}: layers {dist} px apart");
            } else {
                // Same place; the layers share pixels, so each shows where it is nearer.
                assert!(dist < 6.0, "after panel {i}: layers {dist} px apart");
                assert!(no + nb > 100);
            }
        }
        // In the top view, X grows to the right and Y upwards: the moved copy (+5 m X, +3 m Y)
        // sits right of and above the fixed one.
        let rect = panels[0].plot_rect();
        let (o, _) = centroid(&canvas, rect, is_orange).unwrap();
        let (b, _) = centroid(&canvas, rect, is_blue).unwrap();
        assert!(o[0] > b[0] && o[1] < b[1], "{o:?} vs {b:?}");
    }

    #[test]
    fn cloud_views_colour_by_value_and_check_lengths() {
        let pts: Vec<[f32; 3]> = (0..400)
            .map(|i| [(i % 20) as f32 * 0.1, (i / 20) as f32 * 0.1, 0.0])
            .collect();
        let cloud = Cloud::new([10.0, 20.0, 30.0], pts);
        let values: Vec<f32> = cloud.positions.iter().map(|p| p[0]).collect();
        let field = ScalarField {
            values: &values,
            name: "x".into(),
            range: Some([0.0, 1.9]),
            map: ColourMap::Sequential,
        };
        let text = FigureText::default();
        let canvas = draw_cloud_views(&cloud, Some(&field), &text).unwrap();
        assert_eq!([canvas.width(), canvas.height()], CLOUD_SIZE);
        // Both ends of the map appear in the top view.
        let top = draw_header(&mut Canvas::new(1, 1, BACKGROUND), &text);
        let bottom = CLOUD_SIZE[1] as i64 - MARGIN - cloud_footer_height(true);
        let rect = grid(CLOUD_SIZE[0] as i64, top, bottom, 1)[0].plot_rect();
        for end in [0.0, 1.0] {
            let want = ColourMap::Sequential.colour(end);
            assert!(centroid(&canvas, rect, |c| c == want).is_some(), "{end}");
        }
        let short = ScalarField {
            values: &values[..10],
            ..field
        };
        let err = draw_cloud_views(&cloud, Some(&short), &text).unwrap_err();
        assert!(
            err.to_string().contains("10 values for 400 points"),
            "{err}"
        );
    }

    #[test]
    fn empty_input_still_draws_and_bad_paths_fail_cleanly() {
        let text = FigureText::default();
        assert!(draw_alignment_views(&[], &text).is_ok());
        assert!(draw_cloud_views(&Cloud::default(), None, &text).is_ok());
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("no").join("views.png");
        let err = render_alignment_views(&[], &text, &path).unwrap_err();
        assert!(err.to_string().contains("views.png"), "{err}");
        let bad = Layer {
            name: "bad".into(),
            colour: [0; 3],
            origin: [0.0; 3],
            points: &[],
            after: Some(Transform::translation(nalgebra::Vector3::from_element(
                f64::NAN,
            ))),
            on_top: false,
            after_values: None,
        };
        assert!(draw_alignment_views(&[bad], &text).is_err());
    }

    /// Rows of the alignment picture: each row draws the layer under its own transform (a
    /// point moved in the second row lands in the second row's panels only), and a non-finite
    /// row transform is refused.
    #[test]
    fn each_row_draws_the_layers_under_its_own_transform() {
        let pts: Vec<[f32; 3]> = (0..400)
            .map(|i| [(i % 20) as f32, (i / 20) as f32, 0.0])
            .collect();
        let layer = Layer {
            name: "a".into(),
            colour: [200, 0, 0],
            origin: [0.0; 3],
            points: &pts,
            after: None,
            on_top: false,
            after_values: None,
        };
        let row = |t: Option<Transform>| ViewRow {
            label: "row".into(),
            transforms: vec![t],
            values: false,
            flag: String::new(),
        };
        let shift = Transform::translation(nalgebra::Vector3::new(100.0, 0.0, 0.0));
        let text = FigureText::default();
        let c = draw_alignment_rows(
            std::slice::from_ref(&layer),
            &[row(None), row(Some(shift))],
            &text,
        )
        .unwrap();
        // Top view panels: row 0 shows the square at the left of the shared extent, row 1 at
        // the right; count red pixels in the left and right halves of each top-view panel.
        let panels = grid(
            c.width() as i64,
            draw_header(&mut c.clone(), &text),
            c.height() as i64 - MARGIN - FOOTER_HEIGHT,
            2,
        );
        let red = |p: &PanelLayout, left: bool| {
            let (x0, x1) = if left {
                (p.x, p.x + p.w / 2)
            } else {
                (p.x + p.w / 2, p.x + p.w)
            };
            (x0..x1)
                .flat_map(|x| (p.y..p.y + p.h).map(move |y| (x, y)))
                .filter(|&(x, y)| {
                    c.pixel(x, y)
                        .is_some_and(|[r, g, b]| r > 100 && g < 60 && b < 60)
                })
                .count()
        };
        assert!(red(&panels[0], true) > 50 && red(&panels[0], false) < 5);
        assert!(red(&panels[3], false) > 50 && red(&panels[3], true) < 5);
        let nan = Transform::translation(nalgebra::Vector3::from_element(f64::NAN));
        assert!(draw_alignment_rows(&[layer], &[row(Some(nan))], &text).is_err());
    }
}
