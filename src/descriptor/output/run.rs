//! One feature run on one cloud: what every caller of [`super::write_features`] (the `features`
//! command, a batch runner) needs around it — the support radius suggested from the point
//! spacing, the centres (every point, a voxel subsample, or the points of another cloud), the
//! estimated cost held against a time and memory budget before the heavy work, and the summary
//! of what was written. Lengths are in file units; nothing here prints: notes come back as text.

use std::path::Path;

use serde::Serialize;

use super::cost::estimate;
use super::{CentreList, CentresInfo, Written, place_keypoints};
use crate::cloud::Cloud;
use crate::descriptor::{PreparedCloud, Recipe, suggested_radius};
use crate::error::{Error, Result};
use crate::spatial::{KdIndex, estimate_spacing_with, voxel_downsample};
use crate::text::{Size, group, plural, seconds_text};

/// The suggested support radius of `cloud` ([`suggested_radius`] of the measured spacing) and
/// the note that says so; an error naming `input` when the spacing cannot be measured.
pub fn radius_from_spacing(input: &Path, cloud: &Cloud, index: &KdIndex) -> Result<(f32, String)> {
    let spacing = estimate_spacing_with(&cloud.positions, index).ok_or_else(|| {
        Error::file(
            input,
            "the point spacing cannot be measured (fewer than two distinct points)",
            "give --radius",
        )
    })?;
    let r = suggested_radius(spacing);
    let note = format!(
        "{}: support radius {r} (5 × point spacing {spacing:.3}, rounded); give --radius to choose",
        input.display()
    );
    Ok((r, note))
}

/// Where the descriptors of a run are computed.
#[derive(Debug, Clone, Copy)]
pub enum CentreChoice<'a> {
    /// Every point of the cloud.
    All,
    /// One point per voxel of this edge (file units).
    Voxel(f32),
    /// The points of another cloud, placed by their global coordinates ([`place_keypoints`]).
    Keypoints {
        /// The keypoint cloud.
        cloud: &'a Cloud,
        /// Its file as the caller names it (recorded in the sidecar).
        file: Option<&'a str>,
    },
}

/// The centres of `choice` in `cloud` and their description for the sidecar; keypoints snap to
/// input points within [`super::SNAP`] × the smallest of `radii`, found with `index` (the
/// k-d tree over `cloud`'s points; built here when not given and keypoints need it).
///
/// # Errors
/// When keypoints need a tree that cannot be built.
pub fn choose_centres(
    cloud: &Cloud,
    index: Option<&KdIndex>,
    choice: CentreChoice<'_>,
    radii: &[f32],
) -> Result<(CentreList, CentresInfo)> {
    Ok(match choice {
        CentreChoice::Keypoints { cloud: kp, file } => {
            let built;
            let index = match index {
                Some(i) => i,
                None => {
                    built = KdIndex::new(&cloud.positions)?;
                    &built
                }
            };
            let smallest = radii.iter().copied().fold(f32::INFINITY, f32::min);
            let (at, matched) = place_keypoints(cloud, index, kp, smallest);
            let info = CentresInfo::Keypoints {
                file: file.map(str::to_string),
                matched_to_points: matched,
            };
            (CentreList::Positions(at), info)
        }
        CentreChoice::Voxel(v) => (
            CentreList::Points(voxel_downsample(&cloud.positions, v)),
            CentresInfo::Voxel { voxel: v },
        ),
        CentreChoice::All => (CentreList::All(cloud.len()), CentresInfo::All),
    })
}

/// What a run may cost before it is refused.
#[derive(Debug, Clone, Copy)]
pub struct Budget {
    /// Longest estimated wall-clock time, seconds.
    pub seconds: f64,
    /// Most working memory besides the cloud and its index, bytes.
    pub memory: u64,
    /// Run whatever the estimate says.
    pub force: bool,
    /// Worker threads the run will use.
    pub threads: usize,
}

/// Estimates the run of `recipe` at `centres` ([`estimate`]) and refuses it (an error naming
/// `input`, with the price and the ways on) when it exceeds `budget`, unless forced. Returns the
/// notes for the user: a support radius larger than the whole cloud.
pub fn check_budget(
    input: &Path,
    cloud: &Cloud,
    prepared: &PreparedCloud<'_>,
    centres: &CentreList,
    recipe: &Recipe,
    budget: &Budget,
) -> Result<Vec<String>> {
    let mut notes = Vec::new();
    let r = recipe.radii().iter().copied().fold(0.0f32, f32::max);
    if let Some((lo, hi)) = cloud.local_bounds() {
        let extent = (0..3)
            .map(|k| (hi[k] - lo[k]) as f64)
            .map(|d| d * d)
            .sum::<f64>()
            .sqrt();
        if r as f64 > extent {
            notes.push(format!(
                "{}: the support radius {r} is larger than the whole cloud ({extent:.3} corner to corner): every centre sees every point",
                input.display(),
            ));
        }
    }
    let threads = budget.threads;
    let cost = estimate(prepared, centres, recipe, threads)?;
    let secs = cost.seconds_on(threads);
    let neighbours = cost.mean_neighbours.round() as usize;
    let what = format!(
        "{} × about {} within radius {r}: about {} on {} and {} of working memory",
        plural(cost.centres, "centre", "centres"),
        plural(neighbours, "neighbour", "neighbours"),
        seconds_text(secs),
        plural(threads, "thread", "threads"),
        Size(cost.working_bytes),
    );
    if budget.force {
        return Ok(notes);
    }
    if secs > budget.seconds {
        return Err(Error::file(
            input,
            format!("this run would be long: {what}"),
            "give a smaller --radius, or --voxel SIZE for fewer centres, or --force to run anyway",
        ));
    }
    if cost.working_bytes > budget.memory {
        return Err(Error::file(
            input,
            format!(
                "this run would need more memory than allowed ({}): {what}",
                Size(budget.memory)
            ),
            "give a smaller --radius or --max-neighbours, a larger --max-memory, or --force",
        ));
    }
    Ok(notes)
}

/// The summary of one input's run (the `features --json` line).
#[derive(Debug, Clone, Serialize)]
pub struct Summary {
    /// Input file.
    pub input: String,
    /// Files written, the data file first.
    pub outputs: Vec<String>,
    /// Points in the input.
    pub points: usize,
    /// Centres computed (rows).
    pub centres: usize,
    /// Wall-clock seconds from the index to the last row written (reading excluded).
    pub seconds: f64,
    /// Centres per second over `seconds`.
    pub centres_per_second: f64,
    /// Columns written (coordinates, counts, flags, invariants, coefficients).
    pub columns: usize,
    /// Support radii used, file units.
    pub radii: Vec<f32>,
    /// True when the radius was suggested from the point spacing.
    pub radius_suggested: bool,
    /// Centres without any neighbour at the first scale.
    pub centres_without_neighbours: usize,
}

impl Summary {
    /// The summary of `written` from `input` (`points` points) after `seconds`.
    pub fn new(
        input: &Path,
        points: usize,
        written: &Written,
        seconds: f64,
        radii: Vec<f32>,
        radius_suggested: bool,
    ) -> Summary {
        Summary {
            input: input.display().to_string(),
            outputs: written
                .files
                .iter()
                .map(|p| p.display().to_string())
                .collect(),
            points,
            centres: written.rows,
            seconds,
            centres_per_second: written.rows as f64 / seconds.max(1e-9),
            columns: written.columns,
            radii,
            radius_suggested,
            centres_without_neighbours: written.counts.first().map_or(0, |s| s.without_neighbours),
        }
    }

    /// The summary for people: the counts and the rate, then, when some centres found no
    /// neighbour, how many and what to do.
    pub fn lines(&self) -> Vec<String> {
        let s = self;
        let mut lines = vec![format!(
            "{}: {} of {}, {}, {} ({} centres per second)",
            s.input,
            plural(s.centres, "centre", "centres"),
            plural(s.points, "point", "points"),
            plural(s.columns, "column", "columns"),
            seconds_text(s.seconds),
            group(s.centres_per_second.round() as usize),
        )];
        if s.centres_without_neighbours > 0 {
            lines.push(format!(
                "{}: {} ({:.1} %) found no neighbour within the support radius and are all zeros (flag 1); give a larger --radius if they matter",
                s.input,
                plural(s.centres_without_neighbours, "centre", "centres"),
                100.0 * s.centres_without_neighbours as f64 / s.centres.max(1) as f64
            ));
        }
        lines
    }
}
