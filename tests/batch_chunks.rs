//! A tile above the memory budget is cut into spatial blocks with the halo rule and its rows
//! merged back in point order: they equal the descriptors of the whole file (a single input)
//! or of the merged cloud (a grid of tiles, each cut in blocks and lending halos).
//!
//! Reference: the descriptor engine on the whole cloud as read (what `features` computes), so
//! positions are bit-identical and only the order of the neighbour sums differs. Tolerance:
//! 1e-5 of each column's largest magnitude (the bound, as for tile halos); positions,
//! counts and flags exactly.

mod batch_tiles;

use std::path::Path;

use batch_tiles::{cut, read_npy, thin};
use equiscan::Cloud;
use equiscan::batch::chunked::{RESERVE_BYTES, block_points};
use equiscan::batch::{BatchOptions, JOURNAL_DIR, plan, run_tile};
use equiscan::descriptor::output::Format;
use equiscan::descriptor::{Centres, Engine, Features, Recipe};
use equiscan::io::{read_cloud, write_las};

const RADIUS: f32 = 0.12;

fn station(step: usize) -> Cloud {
    let (station, _) = read_cloud("scans/depot_station1.laz".as_ref()).expect("demo station");
    thin(&station, step)
}

/// Compares an NPY output with reference rows `want` (centres `start..start + n` of the
/// reference); returns the largest deviation as a share of the column maximum.
fn compare(out: &Path, want: &Features, n: usize) -> f64 {
    let inv = want.columns.len();
    let (rows, cols, got) = read_npy(out);
    assert_eq!((rows, cols), (n, 5 + inv), "{}", out.display());
    let mut colmax = vec![0.0f32; inv];
    for r in 0..n {
        for (c, m) in colmax.iter_mut().enumerate() {
            *m = m.max(want.row(r)[c].abs());
        }
    }
    let mut worst = 0.0f64;
    for r in 0..n {
        let g = &got[r * cols..(r + 1) * cols];
        assert_eq!(&g[..3], &want.positions[r][..], "row {r} position");
        assert_eq!(g[3], want.count(r, 0) as f32, "row {r} count");
        assert_eq!(g[4], want.flag(r, 0) as f32, "row {r} flags");
        for c in 0..inv {
            let d = (g[5 + c] - want.row(r)[c]).abs() as f64;
            assert!(
                d <= 1e-5 * colmax[c] as f64,
                "{} row {r} column {}: {} vs {}",
                out.display(),
                want.columns[c],
                g[5 + c],
                want.row(r)[c]
            );
            if colmax[c] > 0.0 {
                worst = worst.max(d / colmax[c] as f64);
            }
        }
    }
    worst
}

/// No chunk folder is left in the journal folder.
fn no_chunk_folders(outdir: &Path) {
    let left: Vec<String> = std::fs::read_dir(outdir.join(JOURNAL_DIR))
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.starts_with("chunks."))
        .collect();
    assert!(left.is_empty(), "left behind: {left:?}");
}

#[test]
fn a_file_above_the_budget_equals_the_whole_file() {
    let cloud = station(8);
    let n = cloud.len();
    let dir = tempfile::tempdir().unwrap();
    let input = dir.path().join("big.las");
    write_las(&input, &cloud, &[]).unwrap();
    let (cloud, _) = read_cloud(&input).unwrap();
    let recipe = Recipe::builder().radius(RADIUS).build().unwrap();
    let mut opts = BatchOptions::new(recipe.clone());
    // Blocks of at most about 15 000 points: the file (about 90 000) in 6 or more.
    opts.memory_budget = Some(RESERVE_BYTES + 15_000 * 64 * 5 / 4);
    assert!((14_000..=15_000).contains(&block_points(opts.memory_budget.unwrap())));
    let out = dir.path().join("out");
    let p = plan(std::slice::from_ref(&input), &out, &opts).unwrap();
    let o = run_tile(&p, 0).unwrap();
    assert!(o.blocks >= 6, "{} blocks", o.blocks);
    assert_eq!(o.rows as usize, n);
    no_chunk_folders(&out);
    let want = Engine::new(recipe.clone())
        .compute(&cloud, &Centres::All)
        .unwrap();
    let worst = compare(&p.tiles[0].output, &want, n);
    println!(
        "{n} points in {} blocks: largest deviation {worst:.2e} of the column maximum",
        o.blocks
    );
    // The sidecar gives the whole read's origin and the same neighbour counts as a run with
    // the file whole.
    let side = |path: &Path| -> serde_json::Value {
        serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
    };
    let chunked = side(&out.join("big.npy.json"));
    let whole_out = dir.path().join("whole");
    let p2 = plan(&[input], &whole_out, &BatchOptions::new(recipe)).unwrap();
    assert_eq!(run_tile(&p2, 0).unwrap().blocks, 0);
    let whole = side(&whole_out.join("big.npy.json"));
    for key in ["origin", "counts", "input", "recipe", "crs"] {
        assert_eq!(
            chunked["metadata"][key], whole["metadata"][key],
            "sidecar {key}"
        );
    }
    assert_eq!(chunked["columns"], whole["columns"]);
    assert_eq!(chunked["rows"], whole["rows"]);
}

#[test]
fn tiles_in_blocks_keep_their_halos() {
    // Every tile of a 3 × 3 grid is cut in blocks of the smallest size and lends and receives
    // halos as when whole.
    let cloud = station(8);
    let dir = tempfile::tempdir().unwrap();
    let tiles = dir.path().join("tiles");
    std::fs::create_dir(&tiles).unwrap();
    assert_eq!(cut(&cloud, 3, 3, &tiles, "las").len(), 9);
    let recipe = Recipe::builder().radius(RADIUS).build().unwrap();
    let mut opts = BatchOptions::new(recipe.clone());
    opts.memory_budget = Some(RESERVE_BYTES);
    let out = dir.path().join("out");
    let p = plan(&[tiles], &out, &opts).unwrap();
    let mut halo = 0;
    for &i in &p.todo {
        let o = run_tile(&p, i).unwrap();
        assert!(o.blocks >= 2, "{}: {} blocks", o.input, o.blocks);
        halo += o.halo_points;
    }
    assert!(halo > 0);
    no_chunk_folders(&out);
    let clouds: Vec<Cloud> = p
        .tiles
        .iter()
        .map(|t| read_cloud(&t.input).unwrap().0)
        .collect();
    let engine = Engine::new(recipe);
    let mut worst = 0.0f64;
    for (i, t) in p.tiles.iter().enumerate() {
        let o = clouds[i].origin;
        let n = clouds[i].len();
        // The tile's own points as read first, then every other tile's about its origin.
        let mut pts: Vec<[f32; 3]> = clouds[i].positions.clone();
        for (j, c) in clouds.iter().enumerate() {
            if j != i {
                pts.extend((0..c.len()).map(|k| {
                    let g = c.global(k);
                    std::array::from_fn(|a| (g[a] - o[a]) as f32)
                }));
            }
        }
        let want = engine
            .compute(&Cloud::new(o, pts), &Centres::Indices((0..n).collect()))
            .unwrap();
        worst = worst.max(compare(&t.output, &want, n));
    }
    println!("9 tiles in blocks: largest deviation {worst:.2e} of the column maximum");
}

/// Runs `input` through `batch` in `format`, whole and in blocks of at most about 15 000
/// points; returns the two outputs.
fn both_ways(input: &Path, dir: &Path, format: Format) -> (std::path::PathBuf, std::path::PathBuf) {
    let recipe = Recipe::builder().radius(RADIUS).build().unwrap();
    let mut opts = BatchOptions::new(recipe);
    opts.format = format;
    let whole = plan(
        &[input.to_path_buf()],
        &dir.join(format!("whole_{}", format.ext())),
        &opts,
    )
    .unwrap();
    assert_eq!(run_tile(&whole, 0).unwrap().blocks, 0);
    opts.memory_budget = Some(RESERVE_BYTES + 15_000 * 64 * 5 / 4);
    let cut = plan(
        &[input.to_path_buf()],
        &dir.join(format!("cut_{}", format.ext())),
        &opts,
    )
    .unwrap();
    assert!(run_tile(&cut, 0).unwrap().blocks >= 6);
    no_chunk_folders(&dir.join(format!("cut_{}", format.ext())));
    (whole.tiles[0].output.clone(), cut.tiles[0].output.clone())
}

/// Largest |a − b| over each column's largest |a|, columns given as rows × cols values.
fn assert_close(a: &[f32], b: &[f32], cols: usize, what: &str) {
    assert_eq!(a.len(), b.len(), "{what}");
    let rows = a.len() / cols;
    for c in 0..cols {
        let m = (0..rows)
            .map(|r| a[r * cols + c].abs())
            .fold(0.0f32, f32::max);
        for r in 0..rows {
            let d = (a[r * cols + c] - b[r * cols + c]).abs();
            assert!(
                d <= 1e-5 * m,
                "{what}: row {r} column {c}: {} vs {}",
                a[r * cols + c],
                b[r * cols + c]
            );
        }
    }
}

#[test]
fn outputs_with_point_attributes_in_blocks_equal_the_whole_run() {
    // LAS records (every field and the feature columns as Extra Bytes), CSV text and PLY
    // layout: blocks give the whole run's points in order, values to rounding.
    let cloud = station(8);
    let dir = tempfile::tempdir().unwrap();
    let input = dir.path().join("big.las");
    write_las(&input, &cloud, &[]).unwrap();

    let (w, c) = both_ways(&input, dir.path(), Format::Las);
    let ((a, ia), (b, ib)) = (read_cloud(&w).unwrap(), read_cloud(&c).unwrap());
    assert_eq!(a.len(), cloud.len());
    assert_eq!((a.origin, &a.positions), (b.origin, &b.positions));
    assert_eq!(a.intensity, b.intensity);
    assert_eq!(a.classification, b.classification);
    assert_eq!(a.gps_time, b.gps_time);
    assert_eq!(ia.other_fields, ib.other_fields);
    let (ra, rb) = (a.records.unwrap(), b.records.unwrap());
    let (len, extra) = (ra.record_len, ra.extra_bytes);
    assert_eq!((len, extra), (rb.record_len, rb.extra_bytes));
    assert!(extra >= 4 * 7, "{extra} extra bytes");
    let floats = |r: &equiscan::cloud::SourceRecords| -> Vec<f32> {
        (0..r.len())
            .flat_map(|i| {
                r.record(i)[len - extra..]
                    .chunks_exact(4)
                    .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
                    .collect::<Vec<_>>()
            })
            .collect()
    };
    for i in 0..ra.len() {
        // Every field but the Extra Bytes, exactly.
        assert_eq!(
            &ra.record(i)[..len - extra],
            &rb.record(i)[..len - extra],
            "record {i}"
        );
    }
    assert_close(&floats(&ra), &floats(&rb), extra / 4, "LAS Extra Bytes");

    let (w, c) = both_ways(&input, dir.path(), Format::Csv);
    let parse = |p: &Path| -> (String, Vec<f32>) {
        let t = std::fs::read_to_string(p).unwrap();
        let (head, body) = t.split_once('\n').unwrap();
        let v = body
            .lines()
            .flat_map(|l| {
                l.split(',')
                    .map(|x| x.parse::<f32>().unwrap())
                    .collect::<Vec<_>>()
            })
            .collect();
        (head.to_string(), v)
    };
    let ((ha, va), (hb, vb)) = (parse(&w), parse(&c));
    assert_eq!(ha, hb);
    assert_close(&va, &vb, ha.split(',').count(), "CSV");

    let (w, c) = both_ways(&input, dir.path(), Format::Ply);
    let (a, b) = (std::fs::read(&w).unwrap(), std::fs::read(&c).unwrap());
    assert_eq!(a.len(), b.len());
    let end = a.windows(11).position(|x| x == b"end_header\n").unwrap() + 11;
    assert_eq!(a[..end], b[..end], "PLY header");
}
