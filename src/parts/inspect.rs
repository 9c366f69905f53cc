//! Inspection: register a scan onto a part's reference, measure every point's signed
//! deviation, and summarise it against a tolerance.
//!
//! - Deviation: [`super::deviation::signed_deviations`], positive outside the material, file
//!   units, one value per scan point in input order.
//! - Statistics over all points: mean, standard deviation (population), RMS, min, max and the
//!   1, 5, 25, 50, 75, 95, 99th percentiles (nearest rank on the sorted values).
//! - Out-of-tolerance clusters: points with `|d| > tolerance`, split by sign, joined when closer
//!   than [`CLUSTER_LINK_SPACINGS`] scan spacings; clusters of at least [`min_cluster`] points
//!   are reported with their centre (scan file coordinates and part frame), extent in the part
//!   frame, mean and extreme deviation and an area estimate (points × spacing²).
//! - Outcome: within tolerance when no such cluster exists (isolated noisy points beyond the
//!   band do not fail a part; their share is reported).
//!
//! A scan that does not fit the reference (less than [`MIN_FIT_SHARE`] of its sample within
//! the inlier distance after the best pose) is an error: no deviation map is made from a wrong
//! pose.

use nalgebra::Vector3;
use serde::Serialize;

use super::reference::Prepared;
use super::register::{Fit, FitParams, PoseVerdict, fit};
use super::scan::PreparedScan;
use super::triangles::TriangleIndex;
use crate::cloud::Cloud;
use crate::error::{Error, Result};
use crate::geometry::{Rigid, vec3};
use crate::spatial::KdIndex;

/// Out-of-tolerance points closer than this many scan spacings join one cluster.
///
/// Why five: the spacing is the median nearest-neighbour distance, and scans are often
/// irregular (overlapping views, random sampling). For points scattered at random (Poisson)
/// with density λ on a surface, the median nearest-neighbour distance is `√(ln 2 / (π λ))`, so
/// a link of `k` spacings gives each point `k² ln 2` neighbours on average: 4.3 at 2.5
/// spacings, just below the percolation threshold of random disks in the plane (about 4.5
/// neighbours, Quintanilla, Torquato & Ziff 2000; from memory), where one defect falls apart
/// into several clusters (a 0.8 mm bump on a plate gave four); 17 at five spacings, well
/// above it. Two defects closer than five spacings (a millimetre or two on the demo parts)
/// are reported as one.
pub const CLUSTER_LINK_SPACINGS: f64 = 5.0;
/// Smallest share of the scan sample within the inlier distance for a usable registration.
pub const MIN_FIT_SHARE: f64 = 0.5;

/// Fewest points of a reported cluster: 0.1 % of the scan, at least 24 (smaller groups are
/// noise and the reference's sampling at sharp edges; their points still count in the share
/// outside tolerance).
pub fn min_cluster(n: usize) -> usize {
    ((0.001 * n as f64).ceil() as usize).max(24)
}

/// Deviation statistics, file units.
#[derive(Debug, Clone, Serialize)]
pub struct Stats {
    /// Points measured.
    pub points: usize,
    /// Mean.
    pub mean: f64,
    /// Standard deviation (population).
    pub std: f64,
    /// Root mean square.
    pub rms: f64,
    /// Smallest.
    pub min: f64,
    /// Largest.
    pub max: f64,
    /// `[percent, value]` for 1, 5, 25, 50, 75, 95, 99.
    pub percentiles: Vec<[f64; 2]>,
}

/// A cluster of out-of-tolerance points.
#[derive(Debug, Clone, Serialize)]
pub struct Cluster {
    /// Points in it.
    pub points: usize,
    /// `above` (material where there should be none, positive) or `below`.
    pub side: &'static str,
    /// Centre (mean of its points), scan file coordinates.
    pub centre_scan: [f64; 3],
    /// Centre in the part's frame.
    pub centre_part: [f64; 3],
    /// Axis-aligned extent in the part's frame, file units.
    pub size_part: [f64; 3],
    /// Mean deviation.
    pub mean_deviation: f64,
    /// Deviation of largest magnitude.
    pub extreme_deviation: f64,
    /// Area estimate: points × scan spacing², file units².
    pub area: f64,
}

/// The result of an inspection.
#[derive(Debug, Clone)]
pub struct Inspection {
    /// Scan file coordinates → part frame.
    pub transform: Rigid,
    /// The registration.
    pub fit: Fit,
    /// Deviation of every scan point, input order, file units.
    pub deviations: Vec<f32>,
    /// Statistics.
    pub stats: Stats,
    /// Tolerance (±), file units.
    pub tolerance: f64,
    /// Share of points outside the tolerance.
    pub outside_share: f64,
    /// Clusters, largest first.
    pub clusters: Vec<Cluster>,
    /// Scan point spacing.
    pub spacing: f64,
    /// Origins of the scan's and the reference's local frames (the fit's poses are between
    /// them).
    pub origins: [[f64; 3]; 2],
}

impl Inspection {
    /// Within tolerance: no cluster of out-of-tolerance points.
    pub fn passed(&self) -> bool {
        self.clusters.is_empty()
    }
}

/// Inspects `scan` (named `name` in errors) against `r` at `tolerance` (file units).
pub fn inspect(
    scan: &Cloud,
    name: &str,
    r: &Prepared,
    triangles: Option<&TriangleIndex>,
    tolerance: f64,
    params: &FitParams,
) -> Result<Inspection> {
    if !(tolerance > 0.0 && tolerance.is_finite()) {
        return Err(Error::invalid(
            format!("tolerance {tolerance} is not a positive number"),
            "give --tolerance in file units, e.g. 0.2, or --tolerance-class m",
        ));
    }
    let prepared = PreparedScan::new(scan, name)?;
    let f = fit(&prepared, r, params);
    let share = f.best.residuals.share();
    if share < MIN_FIT_SHARE {
        return Err(Error::file(
            name,
            format!(
                "does not fit the reference: after the best pose only {:.0} % of its points lie within {:.3} of the surface (at least {:.0} % needed)",
                100.0 * share,
                f.tau,
                100.0 * MIN_FIT_SHARE
            ),
            "check that the scan shows this part and little else",
        ));
    }
    let deviations =
        super::deviation::signed_deviations(&scan.positions, r, triangles, &f.best.local);
    let stats = stats(&deviations);
    let outside = deviations
        .iter()
        .filter(|d| d.abs() as f64 > tolerance)
        .count();
    let transform = f
        .best
        .local
        .between_origins(scan.origin, r.reference.origin);
    let clusters = clusters(scan, &deviations, tolerance, prepared.spacing, &transform)?;
    Ok(Inspection {
        transform,
        fit: f,
        outside_share: outside as f64 / deviations.len().max(1) as f64,
        deviations,
        stats,
        tolerance,
        clusters,
        spacing: prepared.spacing,
        origins: [scan.origin, r.reference.origin],
    })
}

/// Statistics of `values` (module docs).
pub fn stats(values: &[f32]) -> Stats {
    let n = values.len().max(1) as f64;
    let mean = values.iter().map(|&v| v as f64).sum::<f64>() / n;
    let var = values
        .iter()
        .map(|&v| (v as f64 - mean).powi(2))
        .sum::<f64>()
        / n;
    let rms = (values.iter().map(|&v| (v as f64).powi(2)).sum::<f64>() / n).sqrt();
    let mut sorted: Vec<f32> = values.to_vec();
    sorted.sort_by(f32::total_cmp);
    let at = |q: f64| {
        if sorted.is_empty() {
            0.0
        } else {
            let rank = ((q / 100.0) * sorted.len() as f64).ceil().max(1.0) as usize;
            sorted[rank.min(sorted.len()) - 1] as f64
        }
    };
    Stats {
        points: values.len(),
        mean,
        std: var.sqrt(),
        rms,
        min: sorted.first().map_or(0.0, |&v| v as f64),
        max: sorted.last().map_or(0.0, |&v| v as f64),
        percentiles: [1.0, 5.0, 25.0, 50.0, 75.0, 95.0, 99.0]
            .iter()
            .map(|&q| [q, at(q)])
            .collect(),
    }
}

fn clusters(
    scan: &Cloud,
    deviations: &[f32],
    tolerance: f64,
    spacing: f64,
    transform: &Rigid,
) -> Result<Vec<Cluster>> {
    let mut out = Vec::new();
    let link = (CLUSTER_LINK_SPACINGS * spacing) as f32;
    for (side, sign) in [("above", 1.0f32), ("below", -1.0f32)] {
        let idx: Vec<usize> = (0..deviations.len())
            .filter(|&i| deviations[i] * sign > tolerance as f32)
            .collect();
        if idx.is_empty() {
            continue;
        }
        let pts: Vec<[f32; 3]> = idx.iter().map(|&i| scan.positions[i]).collect();
        let tree = KdIndex::new(&pts)?;
        let mut label = vec![usize::MAX; pts.len()];
        let mut stack = Vec::new();
        for seed in 0..pts.len() {
            if label[seed] != usize::MAX {
                continue;
            }
            label[seed] = seed;
            stack.push(seed);
            let mut members = vec![seed];
            while let Some(k) = stack.pop() {
                tree.for_each_within(pts[k], link, |j, _| {
                    if label[j] == usize::MAX {
                        label[j] = seed;
                        stack.push(j);
                        members.push(j);
                    }
                });
            }
            if members.len() < min_cluster(scan.len()) {
                continue;
            }
            members.sort_unstable();
            out.push(describe(
                scan, deviations, &idx, &members, side, spacing, transform,
            ));
        }
    }
    out.sort_by(|a, b| b.points.cmp(&a.points).then(a.side.cmp(b.side)));
    Ok(out)
}

fn describe(
    scan: &Cloud,
    deviations: &[f32],
    idx: &[usize],
    members: &[usize],
    side: &'static str,
    spacing: f64,
    transform: &Rigid,
) -> Cluster {
    let n = members.len() as f64;
    let mut centre = Vector3::zeros();
    let mut lo = Vector3::repeat(f64::INFINITY);
    let mut hi = Vector3::repeat(f64::NEG_INFINITY);
    let mut sum = 0.0;
    let mut extreme = 0.0f64;
    let origin = Vector3::from(scan.origin);
    for &m in members {
        let i = idx[m];
        let g = vec3(scan.positions[i]) + origin;
        centre += g;
        let p = transform.apply(&g);
        lo = lo.inf(&p);
        hi = hi.sup(&p);
        let d = deviations[i] as f64;
        sum += d;
        if d.abs() > extreme.abs() {
            extreme = d;
        }
    }
    centre /= n;
    let part = transform.apply(&centre);
    Cluster {
        points: members.len(),
        side,
        centre_scan: [centre.x, centre.y, centre.z],
        centre_part: [part.x, part.y, part.z],
        size_part: [hi.x - lo.x, hi.y - lo.y, hi.z - lo.z],
        mean_deviation: sum / n,
        extreme_deviation: extreme,
        area: n * spacing * spacing,
    }
}

/// The pose verdict as a word.
pub fn pose_word(v: PoseVerdict) -> &'static str {
    match v {
        PoseVerdict::Confident => "confident",
        PoseVerdict::Ambiguous => "ambiguous",
    }
}
