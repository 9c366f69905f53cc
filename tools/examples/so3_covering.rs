//! Prints the measured covering radius of the Hopf grid levels (used for the documented values).
use equiscan::so3::rotation::{HopfGrid, measure_covering_radius};

fn main() {
    for level in 0..4u32 {
        let g = HopfGrid::new(level);
        let r = measure_covering_radius(&g, 20_000, 1);
        println!(
            "level {level}: {} rotations, covering radius {:.2} deg",
            g.len(),
            r.to_degrees()
        );
    }
}
