//! [`NearestTrack`]: the bounded nearest-point query of [`KdIndex::nearest_within`] for a point
//! that moves a little from one query to the next (the SOURCE points of an ICP run), answered
//! from a short list of candidates kept from the last tree search while a certificate holds.
//!
//! A search from `q₀` lists every point within `ρ = d₁ +` a tenth of the cutoff, `d₁` being
//! an upper bound of the nearest distance within the cutoff: the distance to the nearest point
//! of the previous list when that is within the cutoff (one radius search), else the nearest
//! distance found by a bounded search of 1.5 × the cutoff (beyond the cutoff the list stays
//! empty with `ρ = d₁`; nothing found: `ρ` is the search reach). From a new position `q₁` at
//! distance `δ` from `q₀` every point left off the list is at least `ρ − δ` away (triangle
//! inequality), so the nearest listed point is the nearest of all when it is closer than
//! that; and when the nearest listed point and `ρ − δ` both lie beyond the cutoff, nothing is
//! within it. Every test keeps a
//! relative margin ([`MARGIN`]) far above the f32 rounding of the tree's distances (so does the
//! cutoff test, and two listed points at nearly the same distance count as undecided); where
//! the list does not decide, the tree is searched again, and where that search finds a
//! near-tie or a distance near the cutoff the answer is [`KdIndex::nearest_within`]'s own.
//! The answers are therefore those of [`KdIndex::nearest_within`] (the tests below compare
//! them on points moving by steps from a thousandth of the cutoff to twice the cutoff).
//!
//! The searches of a track go to the tree, or to [`TrackGrids`]: cell grids of 0.3, 0.6 and
//! 1.5 × the cutoff over the same points. A radius search scans the finest grid whose cell
//! holds the radius; the search for the nearest distance probes the grids at their cell edges
//! (the last at the reach) and stops at the first probe that finds a point inside it. With
//! grids, a track beyond the cutoff keeps the points within `d₁ +` a tenth of the cutoff
//! (inside the probe) instead of an empty list. The undecided cases still ask the tree.

use super::{CellGrid, GridQuery, KdIndex};

/// Relative safety margin of the certificate and cutoff tests (the tree's f32 squared
/// distances are exact to about 1e-7 relative).
pub const MARGIN: f64 = 1e-4;

/// Each search reaches this many times the cutoff, so that a point outside the cutoff is
/// answered without a search until it has moved half a cutoff.
const REACH: f64 = 1.5;

/// The list of a search holds the points within the nearest distance plus this share of the
/// cutoff: the point may then move about half of that before the next search.
const SLACK: f64 = 0.1;

/// What the last search of one moving point found (see the module documentation).
#[derive(Debug, Clone, Default)]
pub struct NearestTrack {
    /// Where the last search was made; `None` before the first.
    at: Option<[f32; 3]>,
    /// Every point within `rho` of `at`.
    near: Vec<u32>,
    /// Radius of the list.
    rho: f64,
}

fn distance2(a: [f32; 3], b: [f32; 3]) -> f64 {
    (0..3).map(|k| (a[k] as f64 - b[k] as f64).powi(2)).sum()
}

/// The listed point nearest to `centre` with its squared distance, and the second-smallest
/// squared distance (infinite with fewer than two).
fn nearest_listed(
    near: &[u32],
    points: &[[f32; 3]],
    centre: [f32; 3],
) -> (Option<(u32, f64)>, f64) {
    let (mut best, mut second) = (None::<(u32, f64)>, f64::INFINITY);
    for &j in near {
        let e2 = distance2(centre, points[j as usize]);
        match best {
            Some((_, b2)) if e2 >= b2 => second = second.min(e2),
            _ => {
                second = best.map_or(second, |(_, b2)| b2);
                best = Some((j, e2));
            }
        }
    }
    (best, second)
}

/// The smallest cell edge of a [`CellGrid`] that [`NearestTrack::nearest_within_gridded`]
/// can search for squared cutoff `max_d2`: [`REACH`] × the cutoff, and a little more.
fn track_grid_cell(max_d2: f64) -> f32 {
    (REACH * max_d2.sqrt() * (1.0 + 4.0 * MARGIN)) as f32
}

/// Cell edges of the finer grids of [`TrackGrids`], as shares of the cutoff: a refill near
/// the surface lists the points within a small radius, and a grid of a cell just above it
/// scans far fewer candidates than the grid of the reach.
const FINER_CELLS: [f64; 2] = [0.3, 0.6];

/// Cell grids over one point slice for the searches of gridded [`NearestTrack`]s: the grid of
/// the reach (a cell of 1.5 × the cutoff and a margin) and finer ones (0.3 and 0.6 × the
/// cutoff), ascending cell edge; a radius search goes to the finest grid whose cell holds the
/// radius.
#[derive(Debug)]
pub struct TrackGrids {
    grids: Vec<CellGrid>,
}

/// The row caches of the grids of a [`TrackGrids`], one per grid (one per thread or chunk).
#[derive(Debug, Default, Clone)]
pub struct TrackQueries {
    queries: Vec<GridQuery>,
}

impl TrackGrids {
    /// The grids over `points` for squared cutoff `max_d2`; `None` when the grid of the reach
    /// cannot be built (a cutoff tiny against the points' extent: search the tree). A finer
    /// grid that cannot be built is left out.
    pub fn new(points: &[[f32; 3]], max_d2: f64) -> Option<TrackGrids> {
        Self::with_shares(points, max_d2, &FINER_CELLS)
    }

    fn with_shares(points: &[[f32; 3]], max_d2: f64, shares: &[f64]) -> Option<TrackGrids> {
        let reach = CellGrid::new(points, track_grid_cell(max_d2)).ok()?;
        let cutoff = max_d2.sqrt();
        let mut grids: Vec<CellGrid> = shares
            .iter()
            .filter_map(|&k| CellGrid::new(points, (k * cutoff) as f32).ok())
            .filter(|g| g.cell() < reach.cell())
            .collect();
        grids.push(reach);
        grids.sort_by(|a, b| a.cell().total_cmp(&b.cell()));
        Some(TrackGrids { grids })
    }

    /// Appends to `out` every point within `radius` (at most the largest cell) of `centre`,
    /// searching the finest grid whose cell holds the radius.
    fn within(
        &self,
        centre: [f32; 3],
        radius: f32,
        queries: &mut TrackQueries,
        out: &mut Vec<u32>,
    ) {
        queries
            .queries
            .resize_with(self.grids.len(), GridQuery::default);
        let k = self
            .grids
            .iter()
            .position(|g| g.cell() >= radius)
            .unwrap_or(self.grids.len() - 1);
        self.grids[k].within(centre, radius, &mut queries.queries[k], out);
    }

    /// Radii of the probes for the nearest distance: the cells of the finer grids, ascending,
    /// then `reach` (within the cell of the grid of the reach).
    fn probe_radii(&self, reach: f64) -> impl Iterator<Item = f64> + '_ {
        let finer = &self.grids[..self.grids.len() - 1];
        finer
            .iter()
            .map(|g| g.cell() as f64)
            .filter(move |&c| c < reach)
            .chain(std::iter::once(reach))
    }

    /// The cell of the grid of the reach.
    fn largest_cell(&self) -> f32 {
        self.grids.last().map_or(0.0, |g| g.cell())
    }
}

impl NearestTrack {
    /// The answer of `index.nearest_within(centre, max_d2)` (its index only), `points` being
    /// the slice `index` was built from; searches the tree only when the list from the last
    /// search of this track does not decide.
    pub fn nearest_within(
        &mut self,
        index: &KdIndex,
        points: &[[f32; 3]],
        centre: [f32; 3],
        max_d2: f64,
    ) -> Option<usize> {
        self.nearest_within_gridded(index, None, points, centre, max_d2)
    }

    /// [`NearestTrack::nearest_within`] (the same answers), the track's searches (the bounded
    /// search for the nearest distance and the radius search that lists the points within
    /// `ρ`) made in `grid` when one is given: [`TrackGrids`] over the same `points` built for
    /// the same `max_d2` (grids for a smaller cutoff fall back to the tree), with the row
    /// caches. The tree is still asked where the list does not decide.
    pub fn nearest_within_gridded(
        &mut self,
        index: &KdIndex,
        grid: Option<(&TrackGrids, &mut TrackQueries)>,
        points: &[[f32; 3]],
        centre: [f32; 3],
        max_d2: f64,
    ) -> Option<usize> {
        let grid = grid.filter(|(g, _)| g.largest_cell() >= track_grid_cell(max_d2));
        let cutoff = max_d2.sqrt();
        // The distance of the nearest listed point, when it is within the cutoff: the nearest
        // point of all is at most that far, so one radius search lists it.
        let mut bound = None;
        if let Some(at) = self.at {
            // Every point off the list is at least `outside` away.
            let outside = self.rho - distance2(centre, at).sqrt();
            let (best, second) = nearest_listed(&self.near, points, centre);
            let beyond = cutoff * (1.0 + MARGIN);
            match best {
                None if outside > beyond => return None,
                Some((_, e2)) if e2.sqrt().min(outside) > beyond => return None,
                Some((j, e2))
                    if e2.sqrt() < outside * (1.0 - MARGIN)
                        && second > e2 * (1.0 + MARGIN) + f64::MIN_POSITIVE =>
                {
                    if e2 <= max_d2 * (1.0 - MARGIN) {
                        return Some(j as usize);
                    }
                    if e2 >= max_d2 * (1.0 + MARGIN) {
                        return None;
                    }
                }
                _ => {}
            }
            bound = best.map(|(_, e2)| e2.sqrt()).filter(|&u| u <= cutoff);
        }
        self.at = Some(centre);
        self.near.clear();
        let Some((grid, query)) = grid else {
            return self.refill_from_tree(index, points, centre, max_d2, bound);
        };
        // The nearest distance, and the radius within which the list holds every point.
        let (nearest, listed) = match bound {
            Some(u) => (u * (1.0 + MARGIN), None),
            None => {
                // Probes of growing radius, the last the reach (and a margin): the first that
                // finds a point well within its radius has found the nearest distance.
                let reach = REACH * cutoff;
                let mut probe = (f64::INFINITY, reach);
                for r in grid.probe_radii(reach * (1.0 + MARGIN)) {
                    self.near.clear();
                    grid.within(centre, r as f32, query, &mut self.near);
                    let d1 = self
                        .near
                        .iter()
                        .map(|&j| distance2(centre, points[j as usize]))
                        .fold(f64::INFINITY, f64::min)
                        .sqrt();
                    // Every point within `r`, up to the f32 rounding of the test, is listed.
                    let r = (r * (1.0 - MARGIN)).min(reach);
                    probe = (d1, r);
                    if d1 <= r {
                        break;
                    }
                }
                let (d1, r) = probe;
                if d1 > cutoff * (1.0 + MARGIN) {
                    // Beyond the cutoff or nothing within reach: the answer is none, and the
                    // list keeps the points within `d₁` and the slack (within the probe), so
                    // that the point may move by more than `d₁ −` the cutoff before a search.
                    self.rho = (d1 + SLACK * cutoff).min(r);
                    let rho2 = self.rho * self.rho;
                    self.near
                        .retain(|&j| distance2(centre, points[j as usize]) <= rho2);
                    self.rho *= 1.0 - MARGIN;
                    return None;
                }
                (d1, Some(r))
            }
        };
        self.rho = nearest + SLACK * cutoff;
        match listed {
            Some(r) if self.rho <= r => {
                // The probe's list holds every point within `ρ`.
                let rho2 = self.rho * self.rho;
                self.near
                    .retain(|&j| distance2(centre, points[j as usize]) <= rho2);
            }
            _ => {
                self.near.clear();
                grid.within(centre, self.rho as f32, query, &mut self.near);
            }
        }
        // The list's radius as tested (f32), a little inside for the f64 tests.
        self.rho *= 1.0 - MARGIN;
        self.decide(index, points, centre, max_d2)
    }

    /// The refill of [`NearestTrack::nearest_within_gridded`] by tree searches: the bounded
    /// search for the nearest distance when `bound` does not give one, then the radius search.
    fn refill_from_tree(
        &mut self,
        index: &KdIndex,
        points: &[[f32; 3]],
        centre: [f32; 3],
        max_d2: f64,
        bound: Option<f64>,
    ) -> Option<usize> {
        let cutoff = max_d2.sqrt();
        let nearest = match bound {
            Some(u) => u * (1.0 + MARGIN),
            None => {
                let reach = REACH * cutoff;
                let Some((_, d2)) = index.nearest_within(centre, reach * reach) else {
                    self.rho = reach;
                    return None;
                };
                let d1 = (d2 as f64).sqrt();
                if d1 > cutoff * (1.0 + MARGIN) {
                    // Beyond the cutoff: no point lies within `d₁`, and no list is needed.
                    self.rho = d1 * (1.0 - MARGIN);
                    return None;
                }
                d1
            }
        };
        self.rho = nearest + SLACK * cutoff;
        let near = &mut self.near;
        index.for_each_within(centre, self.rho as f32, |i, _| near.push(i as u32));
        // The list's radius as the tree tested it (f32), a little inside for the f64 tests.
        self.rho *= 1.0 - MARGIN;
        self.decide(index, points, centre, max_d2)
    }

    /// The answer from a fresh list: its nearest point, or the tree's answer where two listed
    /// points tie or the nearest lies at the cutoff.
    fn decide(
        &self,
        index: &KdIndex,
        points: &[[f32; 3]],
        centre: [f32; 3],
        max_d2: f64,
    ) -> Option<usize> {
        let (best, second) = nearest_listed(&self.near, points, centre);
        let decided = best.filter(|&(_, e2)| {
            let tie = second <= e2 * (1.0 + MARGIN) + f64::MIN_POSITIVE;
            let at_cutoff = (e2 - max_d2).abs() <= MARGIN * max_d2;
            !tie && !at_cutoff
        });
        match decided {
            Some((j, e2)) => (e2 <= max_d2).then_some(j as usize),
            None => index.nearest_within(centre, max_d2).map(|(i, _)| i),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::so3::rng::SplitMix64;

    /// Points drifting through and around a noisy unit cube of 3 000 points (with exact
    /// duplicates, for ties), by steps that shrink as in a converging ICP run and by jumps:
    /// every tracked answer is the untracked one, searching the tree, a grid of the smallest
    /// cell, a grid of four times that cell, and a grid too fine to be used.
    #[test]
    fn tracked_answers_are_the_bounded_nearest() {
        for grids in [
            None,
            Some(&FINER_CELLS[..]),
            Some(&[][..]),
            Some(&[0.05, 0.9, 3.0][..]),
        ] {
            tracked_answers_with(grids);
        }
    }

    fn tracked_answers_with(shares: Option<&[f64]>) {
        let mut rng = SplitMix64::new(5);
        let mut pts: Vec<[f32; 3]> = (0..3000)
            .map(|_| std::array::from_fn(|_| rng.next_f64() as f32))
            .collect();
        pts.extend_from_within(..100);
        let index = KdIndex::new(&pts).unwrap();
        let mut searched = 0usize;
        let mut asked = 0usize;
        for cutoff in [0.02f64, 0.05, 0.2] {
            let max_d2 = cutoff * cutoff;
            let grid = shares.map(|k| TrackGrids::with_shares(&pts, max_d2, k).unwrap());
            let mut query = TrackQueries::default();
            for walker in 0..200 {
                let mut track = NearestTrack::default();
                let mut c: [f32; 3] = std::array::from_fn(|_| (rng.next_f64() * 1.4 - 0.2) as f32);
                if walker % 7 == 0 {
                    c = pts[walker];
                }
                for step in 0..40 {
                    let size = match step % 10 {
                        9 => 2.0 * cutoff,
                        _ => cutoff * 0.5f64.powi(step / 3),
                    };
                    for v in c.iter_mut() {
                        *v += ((rng.next_f64() - 0.5) * size) as f32;
                    }
                    let want = index.nearest_within(c, max_d2).map(|(i, _)| i);
                    let before = track.at;
                    let got = match &grid {
                        Some(g) => track.nearest_within_gridded(
                            &index,
                            Some((g, &mut query)),
                            &pts,
                            c,
                            max_d2,
                        ),
                        None => track.nearest_within(&index, &pts, c, max_d2),
                    };
                    asked += 1;
                    if track.at != before {
                        searched += 1;
                    }
                    // The same index, also among exact duplicates (ties go to the tree).
                    assert_eq!(got, want, "{c:?}, cutoff {cutoff}, grids {shares:?}");
                }
            }
        }
        // The certificate saves searches (otherwise the track would be pointless).
        assert!(
            searched * 2 < asked,
            "{searched} searches for {asked} queries"
        );
    }
}
