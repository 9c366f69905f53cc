//! What a feature run will cost, estimated before the heavy work from a sample of centres:
//! neighbours per centre, CPU time and peak memory, so that a radius far too large for the
//! cloud is refused with its price instead of running for days.

use crate::descriptor::{PreparedCloud, Recipe};
use crate::error::Result;

use super::{CentreList, chunk_rows, column_names};

/// Centres sampled for the neighbour count.
const SAMPLE: usize = 64;
/// CPU seconds per neighbour and per centre of the engine at L = 4, N = 6 (measured on the
/// synthetic scene of DEVELOPERS.md: 240 000 centres per CPU-second at 69.5 neighbours, half
/// of it the search), rounded up: an estimate, not a promise.
const SECONDS_PER_NEIGHBOUR: f64 = 65e-9;
const SECONDS_PER_CENTRE: f64 = 1e-6;

/// The estimate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Cost {
    /// Centres (rows).
    pub centres: usize,
    /// Mean neighbours per centre within the largest radius, over the sample.
    pub mean_neighbours: f64,
    /// Largest count in the sample.
    pub max_neighbours: usize,
    /// CPU seconds for the descriptors.
    pub cpu_seconds: f64,
    /// Peak memory of the run beyond the cloud and its index, bytes (chunk buffers and the
    /// workers' neighbour buffers).
    pub working_bytes: u64,
}

impl Cost {
    /// Wall-clock seconds on `threads` workers.
    pub fn seconds_on(&self, threads: usize) -> f64 {
        self.cpu_seconds / threads.max(1) as f64
    }
}

/// Estimates the cost of `recipe` at `centres` of the prepared cloud on `threads` workers,
/// from the neighbours of up to 64 evenly spaced centres ([`PreparedCloud::counts_within`]).
///
/// # Errors
/// When counting needs a k-d tree that cannot be built.
pub fn estimate(
    cloud: &PreparedCloud<'_>,
    centres: &CentreList,
    recipe: &Recipe,
    threads: usize,
) -> Result<Cost> {
    let points = cloud.points();
    let n = centres.len();
    let r = recipe.radii().iter().copied().fold(0.0f32, f32::max);
    let at = |k: usize| -> [f32; 3] {
        match centres {
            CentreList::All(_) => points[k],
            CentreList::Points(ix) => points[ix[k]],
            CentreList::Positions(p) => p[k],
        }
    };
    let step = n.div_ceil(SAMPLE).max(1);
    let counts = cloud.counts_within((0..n).step_by(step).map(at), r)?;
    let mean = counts.iter().sum::<usize>() as f64 / counts.len().max(1) as f64;
    let max = counts.iter().copied().max().unwrap_or(0);
    let used = recipe.max_neighbours().map_or(mean, |k| mean.min(k as f64));
    // The kernel's work grows with the harmonics times the shells (25 × 6 at the defaults).
    let per = ((recipe.degree() + 1).pow(2) * recipe.shells()) as f64 / 150.0;
    let scales = recipe.scales() as f64;
    let cpu = n as f64
        * scales
        * (SECONDS_PER_CENTRE + SECONDS_PER_NEIGHBOUR * (mean + used * (per - 1.0).max(0.0)));
    // Per worker: neighbour offsets, distances, weights and harmonics of the largest
    // neighbourhood, in f32.
    let per_neighbour = 4 * (8 + recipe.shells() + (recipe.degree() + 1).pow(2)) as u64;
    let cols = column_names(recipe, super::Format::Npy).len();
    let chunk = (chunk_rows(cols) * cols * 4) as u64;
    Ok(Cost {
        centres: n,
        mean_neighbours: mean,
        max_neighbours: max,
        cpu_seconds: cpu,
        working_bytes: 3 * chunk + threads.max(1) as u64 * max as u64 * per_neighbour,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::descriptor::Engine;
    use crate::spatial::KdIndex;

    #[test]
    fn neighbour_counts_on_a_grid() {
        // 21 × 21 grid, step 1: radius 1.01 holds the centre and its 4 neighbours inside.
        let pts: Vec<[f32; 3]> = (0..21)
            .flat_map(|i| (0..21).map(move |j| [i as f32, j as f32, 0.0]))
            .collect();
        let index = KdIndex::new(&pts).unwrap();
        let recipe = Recipe::builder().radius(1.01).build().unwrap();
        let all = CentreList::All(pts.len());
        let run = |recipe: &Recipe, tree: bool| {
            let engine = Engine::new(recipe.clone());
            let prepared = if tree {
                engine.prepare(&pts, &index).unwrap()
            } else {
                engine.prepare_own(&pts).unwrap()
            };
            estimate(&prepared, &all, recipe, 2).unwrap()
        };
        let c = run(&recipe, true);
        // The cell grid counts the same neighbours as the tree here (no point at the radius).
        assert_eq!(run(&recipe, false), c);
        assert!(c.mean_neighbours > 3.0 && c.mean_neighbours <= 5.0, "{c:?}");
        assert_eq!(c.max_neighbours, 5);
        let big = Recipe::builder().radius(100.0).build().unwrap();
        let c2 = run(&big, false);
        assert_eq!(c2.max_neighbours, pts.len());
        assert!(c2.cpu_seconds > 10.0 * c.cpu_seconds, "{c2:?}");
    }
}
