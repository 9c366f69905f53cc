//! Writes the synthetic scan-like scene of the descriptor benchmarks (tools/bench/scene.rs,
//! spacing 1, seed 42) as a PLY file, for timing `equiscan features` end to end:
//! `cargo run --release --example features_scene -- N OUT.ply [--shuffle]`. `--shuffle` puts
//! the points in a seeded random order (as a file merged from many sources may be); without it
//! they are in the scene's own order (surface by surface, row by row, like a scan).

#[path = "../bench/scene.rs"]
mod scene;

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let (Some(n), Some(out)) = (args.first().and_then(|a| a.parse().ok()), args.get(1)) else {
        eprintln!("usage: features_scene N OUT.ply [--shuffle]");
        std::process::exit(2);
    };
    let mut pts = scene::scene(n, 1.0, 42);
    if args.iter().any(|a| a == "--shuffle") {
        // Fisher–Yates with the library's seeded generator.
        let mut rng = equiscan::so3::rng::SplitMix64::new(7);
        for i in (1..pts.len()).rev() {
            let j = (rng.next_f64() * (i + 1) as f64) as usize;
            pts.swap(i, j.min(i));
        }
    }
    let cloud = equiscan::Cloud::new([0.0; 3], pts);
    if let Err(e) = equiscan::io::write_ply(std::path::Path::new(out), &cloud, &[]) {
        eprintln!("{e}");
        std::process::exit(2);
    }
    eprintln!("wrote {out} ({} points)", cloud.len());
}
