//! Times the rotation search at L = 4, N = 6 on seeded data (single thread) and counts failures
//! (error above 0.5°) over many random rotations, for both random coefficients and point patterns.
use equiscan::so3::rng::SplitMix64;
use equiscan::so3::rotation::{geodesic_angle, random_rotation};
use equiscan::so3::search::{RotationSearcher, SearchOptions};
use equiscan::so3::sh::{num_coeffs, real_sh_vec_f64};
use equiscan::so3::wigner::WignerD;
use nalgebra::Matrix3;
use std::time::Instant;

fn pattern(rng: &mut SplitMix64, l_max: usize, shells: usize, n_pts: usize) -> Vec<f64> {
    let nc = num_coeffs(l_max);
    let mut c = vec![0.0; shells * nc];
    let mut y = vec![0.0; nc];
    for _ in 0..n_pts {
        let u = rng.unit_vector();
        let r = rng.uniform(0.05, 1.0);
        real_sh_vec_f64(l_max, u.map(|v| v * r), &mut y);
        for s in 0..shells {
            let mu = (s as f64 + 0.5) / shells as f64;
            let w = (-(r - mu).powi(2) * (shells * shells) as f64 / 2.0).exp();
            for k in 0..nc {
                c[s * nc + k] += w * y[k];
            }
        }
    }
    c
}

fn main() {
    let (l_max, shells) = (4, 6);
    let nc = num_coeffs(l_max);
    for level in [1u32, 2] {
        let searcher = RotationSearcher::with_options(
            l_max,
            SearchOptions {
                grid_level: level,
                ..SearchOptions::default()
            },
        );
        for (name, n_pts) in [
            ("random coefficients", 0usize),
            ("40-point patterns", 40),
            ("8-point patterns", 8),
        ] {
            let mut rng = SplitMix64::new(3);
            let cases: Vec<(Vec<f64>, Vec<f64>, Matrix3<f64>)> = (0..1000)
                .map(|_| {
                    let a: Vec<f64> = if n_pts == 0 {
                        (0..shells * nc).map(|_| rng.normal()).collect()
                    } else {
                        pattern(&mut rng, l_max, shells, n_pts)
                    };
                    let r = random_rotation(&mut rng);
                    let mut b = vec![0.0; a.len()];
                    WignerD::new(&r, l_max).apply_shells(shells, &a, &mut b);
                    (a, b, r)
                })
                .collect();
            let t = Instant::now();
            let (mut fail, mut amb) = (0, 0);
            for (a, b, r) in &cases {
                let res = searcher.search(a, b).expect("valid input");
                if geodesic_angle(&res.best.rotation, r).to_degrees() > 0.5 {
                    fail += 1;
                }
                amb += usize::from(res.ambiguous);
            }
            let us = t.elapsed().as_secs_f64() * 1e6 / cases.len() as f64;
            println!(
                "grid level {level}, {name}: {us:.1} µs per search, {fail}/{} above 0.5°, {amb} flagged ambiguous",
                cases.len()
            );
        }
    }
    let mut rng = SplitMix64::new(4);
    let rots: Vec<_> = (0..1000).map(|_| random_rotation(&mut rng)).collect();
    for l_max in [4usize, 8] {
        let mut d = WignerD::new(&Matrix3::identity(), l_max);
        let t0 = Instant::now();
        for r in &rots {
            d.set(r);
        }
        println!(
            "{:.2} µs per Wigner-D set (L = {l_max})",
            t0.elapsed().as_secs_f64() * 1e6 / rots.len() as f64
        );
    }
}
