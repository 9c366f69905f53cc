//! Times the descriptor engine on a synthetic scan-like scene and reports the figures used in
//! the performance notes (run under `/usr/bin/time -v` for the peak memory): the bare
//! fixed-radius search with the k-d tree and with the cell grid over the same centres, then the
//! engine (cell grid, centres in grid order) and the engine as it was before the grid (k-d
//! tree, centres in index order), with the checksum of each output (they must agree).
//!
//! `cargo run --release --example descriptor_run -- [POINTS] [THREADS] [--search-only]
//! [--radius-spacings K] [--write SCENE.ply]` (`--write` saves the scene, e.g. for the numpy
//! reference's timing; `K` sets the support radius to K × the measured spacing, default 5).

use std::time::Instant;

use equiscan::descriptor::{Centres, Engine, Recipe};
use equiscan::spatial::{CellGrid, GridQuery, KdIndex, estimate_spacing_with};

#[path = "../bench/scene.rs"]
mod scene;

/// CPU seconds used by this process so far (user + system, from /proc/self/stat; 0 elsewhere).
/// On a shared machine the wall clock overstates the work; CPU time does not.
fn cpu_seconds() -> f64 {
    let Ok(stat) = std::fs::read_to_string("/proc/self/stat") else {
        return 0.0;
    };
    let after = &stat[stat.rfind(')').map_or(0, |i| i + 2)..];
    let f: Vec<&str> = after.split_whitespace().collect();
    let ticks: f64 = f[11].parse::<f64>().unwrap_or(0.0) + f[12].parse::<f64>().unwrap_or(0.0);
    ticks / 100.0
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let n: usize = args
        .first()
        .and_then(|a| a.parse().ok())
        .unwrap_or(1_000_000);
    let threads: usize = args.get(1).and_then(|a| a.parse().ok()).unwrap_or(0);
    let search_only = args.iter().any(|a| a == "--search-only");
    if threads > 0 {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build_global()
            .unwrap();
    }
    let pts = scene::scene(n, 1.0, 42);
    if let Some(i) = args.iter().position(|a| a == "--write") {
        let path = std::path::Path::new(&args[i + 1]);
        equiscan::io::write_ply(path, &equiscan::Cloud::new([0.0; 3], pts.clone()), &[]).unwrap();
    }
    let t0 = Instant::now();
    let index = KdIndex::new(&pts).unwrap();
    let t_tree = t0.elapsed().as_secs_f64();
    let spacing = estimate_spacing_with(&pts, &index).unwrap();
    let k: f32 = args
        .iter()
        .position(|a| a == "--radius-spacings")
        .and_then(|i| args.get(i + 1))
        .and_then(|a| a.parse().ok())
        .unwrap_or(5.0);
    let r = k * spacing;
    let recipe = Recipe::builder().radius(r).build().unwrap();
    let engine = Engine::new(recipe.clone());
    let engine_tree = Engine::new(recipe).tree_search();
    use rayon::prelude::*;
    let t1 = Instant::now();
    let c1 = cpu_seconds();
    let total: u64 = pts
        .par_chunks(256)
        .map(|c| {
            let mut k = 0u64;
            for p in c {
                index.for_each_within(*p, r, |_, _| k += 1);
            }
            k
        })
        .sum();
    let t_search = t1.elapsed().as_secs_f64();
    let c_search = cpu_seconds() - c1;
    println!(
        "points {n}, spacing {spacing:.3}, radius {r:.3}, tree {t_tree:.3} s, mean hits {:.1}",
        total as f64 / n as f64
    );
    println!(
        "bare search: {t_search:.3} s wall, {c_search:.2} s cpu, {:.0} centres/s, {:.0} centres per cpu-s",
        n as f64 / t_search,
        n as f64 / c_search
    );
    let c1 = cpu_seconds();
    let grid = CellGrid::new(&pts, r).unwrap();
    let order = grid.order().to_vec();
    let total_grid: u64 = order
        .par_chunks(256)
        .map_init(
            || (GridQuery::default(), Vec::new()),
            |(q, ids), c| {
                let mut k = 0u64;
                for &i in c {
                    ids.clear();
                    grid.within(pts[i as usize], r, q, ids);
                    k += ids.len() as u64;
                }
                k
            },
        )
        .sum();
    let c_grid = cpu_seconds() - c1;
    println!(
        "bare grid search (build included), grid order: {c_grid:.2} s cpu, {:.0} centres per cpu-s, mean hits {:.1} ({:.2}x the k-d tree's speed)",
        n as f64 / c_grid,
        total_grid as f64 / n as f64,
        c_search / c_grid
    );
    if search_only {
        return;
    }
    let mut out_bytes = 0;
    for (name, eng) in [("grid", &engine), ("k-d tree", &engine_tree)] {
        let t2 = Instant::now();
        let c2 = cpu_seconds();
        let f = eng
            .compute_with_index(&pts, &index, &Centres::All, None)
            .unwrap();
        out_bytes = f.values.len() * 4 + f.counts.len() * 4 + f.flags.len() + f.len() * (12 + 8);
        let t_all = t2.elapsed().as_secs_f64();
        let c_all = cpu_seconds() - c2;
        println!(
            "descriptors ({name}): {t_all:.3} s wall, {c_all:.2} s cpu, {:.0} centres/s, {:.0} centres per cpu-s, {} columns",
            n as f64 / t_all,
            n as f64 / c_all,
            f.columns.len(),
        );
        // FNV-1a over the output bytes: equal checksums for any thread count (determinism).
        let mut h = 0xcbf2_9ce4_8422_2325u64;
        let bytes = f
            .values
            .iter()
            .flat_map(|v| v.to_le_bytes())
            .chain(f.counts.iter().flat_map(|v| v.to_le_bytes()))
            .chain(f.flags.iter().copied());
        for b in bytes {
            h = (h ^ b as u64).wrapping_mul(0x0100_0000_01b3);
        }
        println!("output checksum ({name}) {h:016x}");
    }
    println!(
        "memory: cloud {:.0} MB, output {:.0} MB",
        (pts.len() * 12) as f64 / 1e6,
        out_bytes as f64 / 1e6
    );
}
