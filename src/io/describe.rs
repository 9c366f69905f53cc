//! What a point-cloud file holds, in a report and in words (`equiscan info`).
//!
//! Point spacing is the median nearest-neighbour distance over an evenly strided sample of at
//! most 10 000 points; the suggested support radius is 5 × the spacing, common practice for
//! local descriptors (about 60–100 neighbours on a scanned surface). Both are in file units.

use std::path::Path;

use serde::Serialize;

use crate::Result;
use crate::descriptor::suggested_radius;
use crate::geometry::Rigid;
use crate::io::crs::{crs_label, units_label};
use crate::io::{Bounds, FileInfo, read_cloud};
use crate::spatial::estimate_spacing;

/// What `info` reports for one file.
#[derive(Debug, Serialize)]
pub struct InfoReport {
    /// The header summary.
    #[serde(flatten)]
    pub file: FileInfo,
    /// Points read.
    pub points_read: usize,
    /// Bounds of the points read, file coordinates.
    pub bounds: Option<Bounds>,
    /// Median nearest-neighbour distance, file units; `None` with fewer than two distinct
    /// points.
    pub point_spacing: Option<f32>,
    /// 5 × point spacing rounded to two significant digits, file units
    /// ([`suggested_radius`], the radius `features` uses when none is given).
    pub suggested_support_radius: Option<f32>,
    /// Unit of the coordinates named by the CRS (`m`, `ft`, `US survey ft`); `None` when the
    /// file has no CRS or its CRS names no linear unit.
    pub units: Option<String>,
}

/// Reads `path` and builds its report.
pub fn describe(path: &Path) -> Result<InfoReport> {
    let (cloud, file) = read_cloud(path)?;
    let bounds = cloud.global_bounds().map(|(min, max)| Bounds { min, max });
    let point_spacing = estimate_spacing(&cloud.positions);
    let units = file.crs.as_deref().and_then(units_label);
    Ok(InfoReport {
        units,
        file,
        points_read: cloud.len(),
        bounds,
        point_spacing,
        suggested_support_radius: point_spacing.map(suggested_radius),
    })
}

/// Decimals worth printing for coordinates: from the LAS scale, else 6.
fn decimals(info: &FileInfo) -> usize {
    info.scale
        .map(|s| {
            let finest = s.iter().cloned().fold(f64::INFINITY, f64::min);
            (-finest.log10()).ceil().clamp(0.0, 9.0) as usize
        })
        .unwrap_or(6)
}

/// `v` with `d` decimals, never `-0.000` (a value that rounds to zero prints unsigned).
fn fixed(v: f64, d: usize) -> String {
    let t = format!("{v:.d$}");
    match t.strip_prefix('-') {
        Some(rest) if rest.chars().all(|c| c == '0' || c == '.') => rest.to_string(),
        _ => t,
    }
}

/// Width of the text report; longer lists of names wrap.
const WRAP: usize = 100;

/// `names` joined by `, `, wrapped so that no line (after the 18-column label) passes
/// `width`; continuation lines start with `indent`. `none` when empty.
fn wrap(names: &[String], width: usize, indent: &str) -> String {
    if names.is_empty() {
        return "none".to_string();
    }
    let mut out = String::new();
    let mut col = indent.len();
    for (k, n) in names.iter().enumerate() {
        let piece = if k + 1 < names.len() {
            format!("{n},")
        } else {
            n.clone()
        };
        if k > 0 {
            if col + 1 + piece.len() > width {
                out.push('\n');
                out.push_str(indent);
                col = indent.len();
            } else {
                out.push(' ');
                col += 1;
            }
        }
        out.push_str(&piece);
        col += piece.len();
    }
    out
}

/// Human-readable text for one report.
pub fn render(r: &InfoReport) -> String {
    let f = &r.file;
    let mut s = format!("{}\n", f.path);
    let mut line = |k: &str, v: String| s.push_str(&format!("  {k:<16}{v}\n"));
    let mut format = format!("{} {}", f.format, f.version);
    if let Some(e) = &f.encoding {
        format += &format!(", {e}");
    }
    if let (Some(p), Some(l)) = (f.point_format, f.record_length) {
        format += &format!(", point format {p}, {l}-byte records");
    }
    line("format", format);
    let mut points = format!("{}", r.points_read);
    if r.points_read as u64 != f.point_count {
        if f.format == "E57" {
            points += &format!(
                " ({} declared; points marked invalid are dropped)",
                f.point_count
            );
        } else {
            points += &format!(" (header declares {})", f.point_count);
        }
    }
    line("points", points);
    let d = decimals(f);
    if let Some(b) = r.bounds {
        for (k, axis) in ["x", "y", "z"].iter().enumerate() {
            line(
                if k == 0 { "bounds" } else { "" },
                format!("{axis} {} .. {}", fixed(b.min[k], d), fixed(b.max[k], d)),
            );
        }
    }
    let list = |v: &[String]| wrap(v, WRAP, &" ".repeat(18));
    line("attributes", list(&f.attributes));
    if !f.other_fields.is_empty() {
        line("other fields", list(&f.other_fields));
    }
    if !f.other_elements.is_empty() {
        line("other elements", list(&f.other_elements));
    }
    if let (Some(sc), Some(of)) = (f.scale, f.offset) {
        line("scale", format!("{} {} {}", sc[0], sc[1], sc[2]));
        // Adding 0.0 turns a stored -0 into 0.
        line(
            "offset",
            format!("{} {} {}", of[0] + 0.0, of[1] + 0.0, of[2] + 0.0),
        );
    }
    line(
        "CRS",
        f.crs.as_deref().map_or_else(
            || "none".to_string(),
            |c| {
                let label = crs_label(c);
                if label == c.trim() {
                    label
                } else {
                    format!("{label} (full text with --json)")
                }
            },
        ),
    );
    line(
        "units",
        match &r.units {
            Some(u) => format!("{u} (named by the CRS)"),
            None => "not stated (commands that print lengths take --units)".to_string(),
        },
    );
    if let Some(v) = f.viewpoint {
        line(
            "scanner at",
            format!("{} {} {}", fixed(v[0], d), fixed(v[1], d), fixed(v[2], d)),
        );
    }
    let mut first = true;
    for sc in &f.scans {
        let label = if first { "scans" } else { "" };
        first = false;
        let read = if sc.selected { "" } else { ", not read" };
        line(
            label,
            format!(
                "{} {:?}: {} points, {}{read}",
                sc.index, sc.name, sc.points, sc.coordinates
            ),
        );
        let p = sc.scanner_position;
        line(
            "",
            format!(
                "  scanner at {} {} {}",
                fixed(p[0], d),
                fixed(p[1], d),
                fixed(p[2], d)
            ),
        );
        let pose = if !sc.has_pose {
            "none in the file (identity)".to_string()
        } else {
            match Rigid::from_rows(&sc.pose) {
                Some(tf) => {
                    let a = tf.axis();
                    format!(
                        "turn {:.4}° about ({:.4}, {:.4}, {:.4}), then to the scanner position",
                        tf.angle_deg(),
                        a[0] + 0.0,
                        a[1] + 0.0,
                        a[2] + 0.0
                    )
                }
                None => "not a rotation".to_string(),
            }
        };
        line("", format!("  pose {pose}"));
    }
    match (r.point_spacing, r.suggested_support_radius) {
        (Some(sp), Some(rad)) => {
            line(
                "point spacing",
                format!("{sp:.4} (median nearest-neighbour distance)"),
            );
            line(
                "support radius",
                format!("{rad} suggested (5 × point spacing, two significant digits)"),
            );
        }
        _ => line(
            "point spacing",
            "unknown (fewer than two distinct points)".to_string(),
        ),
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn no_negative_zero() {
        assert_eq!(fixed(-0.0, 3), "0.000");
        assert_eq!(fixed(-0.0001, 3), "0.000");
        assert_eq!(fixed(-0.002, 3), "-0.002");
        assert_eq!(fixed(12.5, 1), "12.5");
    }

    #[test]
    fn long_lists_wrap() {
        let names: Vec<String> = (0..60).map(|i| format!("r1p5_norm_l{i}_n0")).collect();
        let text = wrap(&names, WRAP, "    ");
        assert!(text.lines().count() > 5, "{text}");
        assert!(text.lines().all(|l| l.len() <= WRAP), "{text}");
        assert_eq!(text.matches("r1p5_norm").count(), 60);
        assert_eq!(wrap(&[], WRAP, ""), "none");
        assert_eq!(wrap(&["a".into(), "b".into()], WRAP, ""), "a, b");
    }
}
