//! Cuts a point cloud into a grid of LAS/LAZ tiles, for batch runs and their figures.
//!
//! `cargo run --release --example cut_tiles -- INPUT OUTDIR COLS ROWS [las|laz] [COPIES]`
//! writes `OUTDIR/tile_C_R.EXT` (points in input order within each tile). With `COPIES` > 1
//! the grid is repeated that many times side by side along x (each copy shifted by the
//! cloud's width plus 1 %), so that a run of many tiles can be made from one demo station.
//! With an OUTDIR ending in `.las` or `.laz`, the copies are written side by side into that
//! one file instead (COLS and ROWS are ignored): a single large input for chunked runs.

#[path = "../../tests/batch_tiles/mod.rs"]
mod batch_tiles;

use std::path::PathBuf;

fn main() {
    let a: Vec<String> = std::env::args().skip(1).collect();
    if a.len() < 4 {
        eprintln!("usage: cut_tiles INPUT OUTDIR COLS ROWS [las|laz] [COPIES]");
        std::process::exit(2);
    }
    let (cloud, _) = equiscan::io::read_cloud(a[0].as_ref()).unwrap_or_else(|e| {
        eprintln!("{e}");
        std::process::exit(2)
    });
    let dir = PathBuf::from(&a[1]);
    let cols: usize = a[2].parse().expect("COLS");
    let rows: usize = a[3].parse().expect("ROWS");
    let ext = a.get(4).map_or("las", String::as_str);
    let copies: usize = a.get(5).map_or(1, |s| s.parse().expect("COPIES"));
    let (lo, hi) = cloud.local_bounds().expect("points");
    let width = (hi[0] - lo[0]) as f64 * 1.01;
    let single = dir
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("las") || e.eq_ignore_ascii_case("laz"));
    if single {
        let all = side_by_side(&cloud, copies, width);
        equiscan::io::write_las(&dir, &all, &[]).expect("file written");
        println!("{} {}", dir.display(), all.len());
        return;
    }
    std::fs::create_dir_all(&dir).expect("OUTDIR");
    for k in 0..copies {
        let mut c = cloud.clone();
        c.origin[0] += k as f64 * width;
        let sub = dir.join(format!("copy{k}"));
        let target = if copies > 1 { &sub } else { &dir };
        std::fs::create_dir_all(target).expect("folder");
        for (p, idx) in batch_tiles::cut(&c, cols, rows, target, ext) {
            let name = if copies > 1 {
                let n = dir.join(format!("c{k}_{}", p.file_name().unwrap().to_string_lossy()));
                std::fs::rename(&p, &n).expect("rename");
                n
            } else {
                p
            };
            println!("{} {}", name.display(), idx.len());
        }
        if copies > 1 {
            let _ = std::fs::remove_dir(&sub);
        }
    }
}

/// `copies` copies of `cloud` side by side along x, `width` apart, in one cloud (the first
/// copy's origin; attributes and LAS records kept).
fn side_by_side(cloud: &equiscan::Cloud, copies: usize, width: f64) -> equiscan::Cloud {
    fn rep<T: Copy>(v: &Option<Vec<T>>, k: usize) -> Option<Vec<T>> {
        v.as_ref().map(|v| v.repeat(k))
    }
    let mut all = cloud.clone();
    all.positions = (0..copies)
        .flat_map(|k| {
            cloud
                .positions
                .iter()
                .map(move |p| [(p[0] as f64 + k as f64 * width) as f32, p[1], p[2]])
        })
        .collect();
    all.intensity = rep(&cloud.intensity, copies);
    all.color = rep(&cloud.color, copies);
    all.normals = rep(&cloud.normals, copies);
    all.classification = rep(&cloud.classification, copies);
    all.return_number = rep(&cloud.return_number, copies);
    all.gps_time = rep(&cloud.gps_time, copies);
    if let Some(r) = all.records.as_mut() {
        r.bytes = r.bytes.repeat(copies);
    }
    all
}
