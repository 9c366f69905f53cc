//! Halos: a tile's rows equal the descriptors of the same points computed on the merged cloud
//! (every tile of the run together), on a 3 × 3 grid cut from a demo station.
//!
//! Reference: the descriptor engine on the merged cloud, in the tile's own local frame (the
//! tile's points as read, the other tiles' points re-expressed about the tile's origin from
//! their global coordinates), so positions are bit-identical and only the order of the
//! neighbour sums differs. Tolerance: 1e-5 of each column's largest
//! magnitude (the bound); counts and flags exactly.

mod batch_tiles;

use std::path::PathBuf;

use batch_tiles::{cut, read_npy, thin};
use equiscan::Cloud;
use equiscan::batch::{BatchOptions, TileGrid, plan, run_tile};
use equiscan::descriptor::{Centres, Engine, Recipe};
use equiscan::io::read_cloud;

const RADIUS: f32 = 0.12;

/// The tiles of every 8th point of station 1, cut 3 × 3, in a temporary folder.
fn grid() -> (tempfile::TempDir, PathBuf) {
    let (station, _) = read_cloud("scans/depot_station1.laz".as_ref()).expect("demo station");
    let cloud = thin(&station, 8);
    let dir = tempfile::tempdir().expect("temp dir");
    let tiles = dir.path().join("tiles");
    std::fs::create_dir(&tiles).unwrap();
    assert_eq!(cut(&cloud, 3, 3, &tiles, "las").len(), 9);
    (dir, tiles)
}

#[test]
fn tile_rows_equal_the_merged_cloud() {
    let (dir, tiles) = grid();
    let out = dir.path().join("out");
    let recipe = Recipe::builder().radius(RADIUS).build().unwrap();
    let p = plan(&[tiles], &out, &BatchOptions::new(recipe.clone())).unwrap();
    assert_eq!(p.tiles.len(), 9);
    // Quantile grid: the middle tile (tile_1_1, plan position 4) touches all eight others.
    assert_eq!(p.tiles[4].halo.len(), 8, "{:?}", p.tiles[4].halo);
    for &i in &p.todo {
        run_tile(&p, i).unwrap();
    }
    let clouds: Vec<Cloud> = p
        .tiles
        .iter()
        .map(|t| read_cloud(&t.input).unwrap().0)
        .collect();
    let engine = Engine::new(recipe);
    let mut gained = 0usize;
    let mut worst = 0.0f64;
    for (i, t) in p.tiles.iter().enumerate() {
        let o = clouds[i].origin;
        let n = clouds[i].len();
        let mut pts: Vec<[f32; 3]> = Vec::new();
        let mut start = 0;
        for (j, c) in clouds.iter().enumerate() {
            if j == i {
                // The tile's own points as read (an f64 round trip through the global
                // coordinate would round offsets below 1e-4 differently).
                start = pts.len();
                pts.extend_from_slice(&c.positions);
                continue;
            }
            pts.extend((0..c.len()).map(|k| {
                let g = c.global(k);
                std::array::from_fn(|a| (g[a] - o[a]) as f32)
            }));
        }
        let merged = Cloud::new(o, pts);
        let want = engine
            .compute(&merged, &Centres::Indices((start..start + n).collect()))
            .unwrap();
        let alone = engine.compute(&clouds[i], &Centres::All).unwrap();
        let (rows, cols, got) = read_npy(&t.output);
        let inv = want.columns.len();
        assert_eq!((rows, cols), (n, 5 + inv), "{}", t.output.display());
        let mut colmax = vec![0.0f32; inv];
        for r in 0..n {
            for (c, m) in colmax.iter_mut().enumerate() {
                *m = m.max(want.row(r)[c].abs());
            }
        }
        for r in 0..n {
            let g = &got[r * cols..(r + 1) * cols];
            assert_eq!(&g[..3], &want.positions[r][..], "row {r} position");
            assert_eq!(
                g[3],
                want.count(r, 0) as f32,
                "{} row {r} count",
                t.input.display()
            );
            assert_eq!(g[4], want.flag(r, 0) as f32, "row {r} flags");
            gained += (want.count(r, 0) > alone.count(r, 0)) as usize;
            for c in 0..inv {
                let d = (g[5 + c] - want.row(r)[c]).abs() as f64;
                let tol = 1e-5 * colmax[c] as f64;
                assert!(
                    d <= tol,
                    "{} row {r} column {}: {} vs {} (merged cloud)",
                    t.input.display(),
                    want.columns[c],
                    g[5 + c],
                    want.row(r)[c]
                );
                if colmax[c] > 0.0 {
                    worst = worst.max(d / colmax[c] as f64);
                }
            }
        }
    }
    // Without halos the edge points would have fewer neighbours: the check above would fail.
    assert!(
        gained > 100,
        "only {gained} rows gained neighbours from the halo"
    );
    println!(
        "halo: {gained} rows gained neighbours; largest deviation {worst:.2e} of the column maximum"
    );
}

#[test]
fn tile_grid_off_equals_each_tile_alone() {
    let (dir, tiles) = grid();
    let out = dir.path().join("out");
    let recipe = Recipe::builder().radius(RADIUS).build().unwrap();
    let mut opts = BatchOptions::new(recipe.clone());
    opts.tile_grid = TileGrid::Off;
    let p = plan(&[tiles], &out, &opts).unwrap();
    assert!(p.tiles.iter().all(|t| t.halo.is_empty()));
    let engine = Engine::new(recipe);
    for &i in &p.todo {
        let o = run_tile(&p, i).unwrap();
        assert_eq!(o.halo_points, 0);
        let c = read_cloud(&p.tiles[i].input).unwrap().0;
        let want = engine.compute(&c, &Centres::All).unwrap();
        let (rows, cols, got) = read_npy(&p.tiles[i].output);
        assert_eq!(rows, c.len());
        for r in 0..rows {
            // Same cloud, same order: the same bits.
            assert_eq!(got[r * cols + 3], want.count(r, 0) as f32);
            assert_eq!(&got[r * cols + 5..(r + 1) * cols], want.row(r));
        }
    }
}
