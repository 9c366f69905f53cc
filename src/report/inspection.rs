//! The inspection picture: the scan in the part's frame coloured by signed deviation in three
//! orthographic views, a colour bar in file units with the tolerance band, a histogram of the
//! deviations with the band marked, the figures and the caution.
//!
//! Palette (our own, [`deviation_colour`]): inside the tolerance band a neutral grey, shaded by
//! depth so that the shape reads; below the band (inside the material) blues, above it
//! (material where there should be none) oranges to brown. Both sides darken steadily with the
//! size of the deviation, so the map is ordered in lightness and reads in grey, and blue
//! against orange stays apart for the common red–green colour deficiencies (they differ in the
//! blue–yellow axis that deuteranopes and protanopes keep).

use nalgebra::Vector3;

use super::canvas::{Canvas, Rgb, Splat, ViewAxis, Viewport};
use crate::cloud::Cloud;
use crate::error::Result;
use crate::geometry::Rigid;
use crate::parts::report::InspectReport;

/// Picture size in pixels.
pub const SIZE: [u32; 2] = [1800, 1080];

const BACKGROUND: Rgb = [255, 255, 255];
const INK: Rgb = [30, 30, 30];
const SOFT_INK: Rgb = [110, 110, 110];
const MARGIN: i64 = 30;
const NEUTRAL: Rgb = [200, 200, 196];
/// Below the band: from pale to deep blue.
const BELOW: [Rgb; 3] = [[150, 195, 235], [60, 120, 200], [20, 45, 120]];
/// Above the band: from pale orange through orange to brown.
const ABOVE: [Rgb; 3] = [[250, 200, 120], [225, 120, 30], [120, 50, 10]];

/// What the picture shows.
#[derive(Debug, Clone)]
pub struct InspectionPicture<'a> {
    /// The scan (file coordinates).
    pub cloud: &'a Cloud,
    /// One deviation per point.
    pub deviations: &'a [f32],
    /// The ± band, file units.
    pub tolerance: f64,
    /// The report (transform, figures, clusters, caution).
    pub report: &'a InspectReport,
    /// Unit name for the scale; empty prints `units`.
    pub unit: &'a str,
}

fn mix(a: Rgb, b: Rgb, t: f64) -> Rgb {
    let t = t.clamp(0.0, 1.0);
    std::array::from_fn(|k| (a[k] as f64 + (b[k] as f64 - a[k] as f64) * t).round() as u8)
}

/// The colour of deviation `d` for band `tol` and colour-bar end `range` (> `tol`).
pub fn deviation_colour(d: f64, tol: f64, range: f64) -> Rgb {
    if d.is_nan() {
        return [150, 150, 150];
    }
    if d.abs() <= tol {
        return NEUTRAL;
    }
    let ramp = if d > 0.0 { ABOVE } else { BELOW };
    let t = ((d.abs() - tol) / (range - tol).max(1e-12)).clamp(0.0, 1.0);
    if t < 0.5 {
        mix(ramp[0], ramp[1], t * 2.0)
    } else {
        mix(ramp[1], ramp[2], t * 2.0 - 1.0)
    }
}

fn printable(s: &str) -> String {
    s.chars()
        .map(|c| match c {
            '×' => 'x',
            '±' => '~',
            c if super::font::has_glyph(c) => c,
            _ => '?',
        })
        .collect()
}

/// Splits `text` into lines of at most `width` characters at spaces.
fn wrap(text: &str, width: usize) -> Vec<String> {
    let mut lines = Vec::new();
    let mut line = String::new();
    for word in text.split(' ') {
        if !line.is_empty() && line.chars().count() + 1 + word.chars().count() > width {
            lines.push(std::mem::take(&mut line));
        }
        if !line.is_empty() {
            line.push(' ');
        }
        line.push_str(word);
    }
    if !line.is_empty() {
        lines.push(line);
    }
    lines
}

fn number(v: f64, span: f64) -> String {
    let decimals = if span >= 10.0 {
        1
    } else if span >= 1.0 {
        2
    } else {
        3
    };
    format!("{v:.decimals$}")
}

/// Draws the picture (module docs).
pub fn draw_inspection(p: &InspectionPicture<'_>) -> Result<Canvas> {
    let [width, height] = SIZE;
    let mut c = Canvas::new(width, height, BACKGROUND);
    let unit = if p.unit.is_empty() {
        "file units"
    } else {
        p.unit
    };
    // Characters per line of text at scale 2 across the picture.
    let chars = ((width as i64 - 2 * MARGIN) / 12) as usize;
    let r = p.report;
    let tf = Rigid::from_rows(&r.transform).unwrap_or_default();
    let tol = p.tolerance;
    let mut mags: Vec<f64> = p.deviations.iter().map(|d| d.abs() as f64).collect();
    mags.sort_by(f64::total_cmp);
    let p995 = mags
        .get(((mags.len() as f64 * 0.995) as usize).min(mags.len().saturating_sub(1)))
        .copied()
        .unwrap_or(0.0);
    let range = p995.max(3.0 * tol);

    // Header.
    let passed = r.outcome == "within_tolerance";
    let title = format!(
        "Inspection of {}: {}",
        r.scan,
        if passed {
            "within tolerance"
        } else {
            "OUTSIDE TOLERANCE"
        }
    );
    c.text(
        MARGIN,
        MARGIN,
        &printable(&title),
        3,
        if passed { INK } else { [170, 40, 20] },
    );
    let d = &r.deviation;
    let lines = [
        format!(
            "reference {}; tolerance +/- {} {unit} ({}); {:.2} % of points outside; clusters: {}",
            r.reference,
            r.tolerance.value,
            r.tolerance.from,
            100.0 * r.outside_share,
            r.clusters.len()
        ),
        format!(
            "deviation mean {:.4}, std {:.4}, RMS {:.4}, min {:.4}, max {:.4} {unit}; registration: {:.1} % of points within {:.3} {unit}, pose {}",
            d.mean,
            d.std,
            d.rms,
            d.min,
            d.max,
            100.0 * r.registration.share_within_inlier_distance,
            r.registration.inlier_distance,
            match r.registration.pose_verdict {
                crate::parts::register::PoseVerdict::Confident => "confident",
                crate::parts::register::PoseVerdict::Ambiguous => "ambiguous (equivalent poses)",
            }
        ),
    ];
    let wrapped: Vec<String> = lines
        .iter()
        .flat_map(|l| wrap(&printable(l), chars))
        .collect();
    for (k, l) in wrapped.iter().take(3).enumerate() {
        c.text(MARGIN, MARGIN + 40 + 24 * k as i64, l, 2, SOFT_INK);
    }

    // Points in the part's frame.
    let origin = Vector3::from(p.cloud.origin);
    let step = p.cloud.len().div_ceil(200_000).max(1);
    let pts: Vec<([f64; 3], f64)> = (0..p.cloud.len())
        .step_by(step)
        .map(|i| {
            let g = crate::geometry::vec3(p.cloud.positions[i]) + origin;
            let q = tf.apply(&g);
            ([q.x, q.y, q.z], p.deviations[i] as f64)
        })
        .collect();
    let top = MARGIN + 116;
    let panel_h = 600.0;
    let panel_w = (width as f64 - 2.0 * MARGIN as f64 - 40.0) / 3.0;
    for (k, view) in ViewAxis::ALL.into_iter().enumerate() {
        let x0 = MARGIN as f64 + k as f64 * (panel_w + 20.0);
        let proj: Vec<[f64; 3]> = pts.iter().map(|(q, _)| view.project(*q)).collect();
        let mut lo = [f64::INFINITY; 3];
        let mut hi = [f64::NEG_INFINITY; 3];
        for q in &proj {
            for a in 0..3 {
                lo[a] = lo[a].min(q[a]);
                hi[a] = hi[a].max(q[a]);
            }
        }
        c.stroke_rect(
            x0 as i64,
            top,
            panel_w as u32,
            panel_h as u32,
            1,
            [210, 210, 210],
        );
        let (ra, ua) = view.axis_names();
        c.text(
            x0 as i64 + 8,
            top + 8,
            &format!("{} view, {ra}-{ua}, part frame", view.name()),
            2,
            SOFT_INK,
        );
        let vp = Viewport::fit(
            [x0 + 20.0, top as f64 + 40.0, panel_w - 40.0, panel_h - 60.0],
            [lo[0], lo[1]],
            [hi[0], hi[1]],
        );
        let depth_span = (hi[2] - lo[2]).max(1e-12);
        for (q, (_, dev)) in proj.iter().zip(&pts) {
            let [x, y] = vp.to_pixel(q[0], q[1]);
            let colour = if dev.abs() <= tol {
                let shade = (q[2] - lo[2]) / depth_span;
                mix(NEUTRAL, [120, 120, 118], shade)
            } else {
                deviation_colour(*dev, tol, range)
            };
            // Out-of-tolerance points drawn slightly in front, so small clusters stay visible.
            let bias = if dev.abs() > tol {
                0.02 * depth_span
            } else {
                0.0
            };
            c.splat(x, y, (q[2] - bias) as f32, Splat::Square(3), colour);
        }
        // Cluster numbers at their centres.
        for (n, cl) in r.clusters.iter().enumerate().take(9) {
            let q = view.project(cl.centre_part);
            let [x, y] = vp.to_pixel(q[0], q[1]);
            let label = format!("{}", n + 1);
            c.stroke_rect(x as i64 - 14, y as i64 - 14, 28, 28, 2, INK);
            c.text(x as i64 + 18, y as i64 - 10, &label, 2, INK);
        }
    }

    // Colour bar.
    let bar_y = top + panel_h as i64 + 40;
    let bar_x = MARGIN + 10;
    let bar_w: i64 = 760;
    c.text(
        bar_x,
        bar_y - 26,
        &format!("signed deviation ({unit}), + = outside the material"),
        2,
        INK,
    );
    for i in 0..bar_w {
        let v = -range + 2.0 * range * i as f64 / (bar_w - 1) as f64;
        c.fill_rect(bar_x + i, bar_y, 1, 26, deviation_colour(v, tol, range));
    }
    c.stroke_rect(bar_x, bar_y, bar_w as u32, 26, 1, INK);
    let at = |v: f64| bar_x + ((v + range) / (2.0 * range) * (bar_w - 1) as f64).round() as i64;
    // Ends and zero on the first row of labels, the band's edges on a second row.
    for (v, row) in [(-range, 0), (0.0, 0), (range, 0), (-tol, 1), (tol, 1)] {
        let x = at(v);
        c.fill_rect(x, bar_y + 26, 1, 8 + 22 * row, INK);
        let label = number(v, range);
        let w = Canvas::text_width(&label, 2) as i64;
        let lx = match row {
            0 => x - w / 2,
            _ if v < 0.0 => x - w - 4,
            _ => x + 4,
        };
        c.text(lx, bar_y + 38 + 22 * row as i64, &label, 2, INK);
    }
    c.text(
        bar_x,
        bar_y + 90,
        "grey: within tolerance; blue: below the surface;\norange to brown: above it (extra material)",
        2,
        SOFT_INK,
    );

    // Histogram.
    let hx = bar_x + bar_w + 80;
    let hw = width as i64 - MARGIN - hx;
    let hh: i64 = 150;
    let hy = bar_y - 20;
    let bins = 60usize;
    let mut counts = vec![0usize; bins];
    for &dv in p.deviations {
        let t = (dv as f64 + range) / (2.0 * range);
        if (0.0..=1.0).contains(&t) {
            counts[((t * bins as f64) as usize).min(bins - 1)] += 1;
        }
    }
    let most = counts.iter().copied().max().unwrap_or(1).max(1) as f64;
    let band_l = hx + ((range - tol) / (2.0 * range) * hw as f64) as i64;
    let band_r = hx + ((range + tol) / (2.0 * range) * hw as f64) as i64;
    c.fill_rect(
        band_l,
        hy,
        (band_r - band_l).max(1) as u32,
        hh as u32,
        [235, 235, 230],
    );
    for (b, &n) in counts.iter().enumerate() {
        // Log scale, so the few points of a defect show beside the many in the band.
        let h = ((n as f64 + 1.0).ln() / (most + 1.0).ln() * hh as f64) as i64;
        let x = hx + (b as f64 / bins as f64 * hw as f64) as i64;
        let w = ((hw as f64 / bins as f64) as u32).max(1) - 1;
        let centre = -range + (b as f64 + 0.5) / bins as f64 * 2.0 * range;
        if n > 0 {
            c.fill_rect(
                x,
                hy + hh - h,
                w.max(1),
                h as u32,
                deviation_colour(centre, tol, range),
            );
        }
    }
    c.line(band_l, hy, band_l, hy + hh, INK);
    c.line(band_r, hy, band_r, hy + hh, INK);
    c.line(hx, hy + hh, hx + hw, hy + hh, INK);
    c.text(
        hx,
        hy + hh + 8,
        &format!(
            "histogram (log count), {} to {} {unit}; lines: tolerance band",
            number(-range, range),
            number(range, range)
        ),
        2,
        SOFT_INK,
    );

    // Caution.
    let caution = wrap(&printable(crate::parts::CAUTION), chars);
    let foot = height as i64 - MARGIN - 24 * caution.len() as i64;
    for (k, l) in caution.iter().enumerate() {
        c.text(MARGIN, foot + 24 * k as i64, l, 2, [150, 30, 20]);
    }
    Ok(c)
}
