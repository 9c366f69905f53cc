//! Minimum-of-many timing of the batched f32 harmonics (robust to a busy machine), ns per
//! direction, against a one-multiply-add-per-output floor over the same buffer.
use equiscan::so3::rng::SplitMix64;
use equiscan::so3::sh::{num_coeffs, real_sh_batch_f32};
use std::hint::black_box;
use std::time::Instant;

fn min_ns_per_dir(n_dirs: usize, mut f: impl FnMut()) -> f64 {
    let mut best = f64::MAX;
    for _ in 0..200 {
        let t = Instant::now();
        f();
        best = best.min(t.elapsed().as_secs_f64());
    }
    best * 1e9 / n_dirs as f64
}

fn main() {
    let mut rng = SplitMix64::new(1);
    let dirs: Vec<[f32; 3]> = (0..1024)
        .map(|_| rng.unit_vector().map(|v| v as f32))
        .collect();
    let coef: Vec<f32> = (0..num_coeffs(16)).map(|k| 1.0 + 0.25 * k as f32).collect();
    println!("L  | harmonics ns/dir | floor ns/dir | ratio");
    for l_max in [1usize, 2, 3, 4, 5, 6, 8, 12, 16] {
        let n = num_coeffs(l_max);
        let mut out = vec![0.0f32; dirs.len() * n];
        let sh = min_ns_per_dir(dirs.len(), || {
            real_sh_batch_f32(l_max, black_box(&dirs), &mut out)
        });
        let floor = min_ns_per_dir(dirs.len(), || {
            for (u, o) in black_box(&dirs).iter().zip(out.chunks_exact_mut(n)) {
                for (v, c) in o.iter_mut().zip(&coef[..n]) {
                    *v = u[0] * c + u[1];
                }
            }
        });
        black_box(&out);
        println!(
            "{l_max:>2} | {sh:>16.1} | {floor:>12.1} | {:.1}",
            sh / floor
        );
    }
}
