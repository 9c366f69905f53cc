//! A seeded synthetic scan-like scene: floor, walls, pipes (cylinders) and balls (spheres),
//! each surface sampled at a fixed point spacing with a small jitter, like a scanned site.
//! Shared by the descriptor benchmark and the peak-memory example.

/// SplitMix64 stream of uniforms in `[0, 1)`.
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> f32 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        ((z ^ (z >> 31)) >> 40) as f32 / (1u64 << 24) as f32
    }
}

/// About `n` points (exactly `n` when the surfaces hold that many) at point spacing `spacing`,
/// jittered by ±10 % of the spacing, from `seed`. The scene grows with `n`: a square floor of
/// side `√(0.4 n)·spacing`, two walls, and rows of pipes and balls standing on the floor.
pub fn scene(n: usize, spacing: f32, seed: u64) -> Vec<[f32; 3]> {
    let mut rng = Rng(seed);
    let s = spacing;
    let side = ((0.4 * n as f32).sqrt()).ceil() as usize; // floor cells per side
    let extent = side as f32 * s;
    let height = 0.3 * extent;
    let mut pts = Vec::with_capacity(n + n / 8);
    let jitter = |rng: &mut Rng| (rng.next() - 0.5) * 0.2 * s;
    // floor z = 0
    for i in 0..side {
        for j in 0..side {
            let (a, b, c) = (jitter(&mut rng), jitter(&mut rng), jitter(&mut rng));
            pts.push([i as f32 * s + a, j as f32 * s + b, c * 0.1]);
        }
    }
    // walls x = 0 and y = 0
    let rows = (height / s) as usize;
    for i in 0..side {
        for k in 1..rows {
            let (a, b, c) = (jitter(&mut rng), jitter(&mut rng), jitter(&mut rng));
            pts.push([c * 0.1 - 0.5 * s, i as f32 * s + a, k as f32 * s + b]);
            let (a, b, c) = (jitter(&mut rng), jitter(&mut rng), jitter(&mut rng));
            pts.push([i as f32 * s + a, c * 0.1 - 0.5 * s, k as f32 * s + b]);
        }
    }
    // pipes and balls on a grid over the floor until n points
    let mut cell = 0usize;
    let per_row = 6usize;
    while pts.len() < n {
        let cx = (0.15 + 0.7 * (cell % per_row) as f32 / per_row as f32) * extent;
        let cy = (0.15 + 0.7 * ((cell / per_row) % per_row) as f32 / per_row as f32) * extent;
        let radius = (0.03 + 0.02 * rng.next()) * extent;
        if cell.is_multiple_of(2) {
            // vertical pipe
            let around = ((std::f32::consts::TAU * radius) / s) as usize;
            let up = ((0.5 * height) / s) as usize;
            for k in 0..up {
                for a in 0..around {
                    let t = a as f32 / around as f32 * std::f32::consts::TAU;
                    let rr = radius + jitter(&mut rng) * 0.1;
                    pts.push([
                        cx + rr * t.cos(),
                        cy + rr * t.sin(),
                        k as f32 * s + jitter(&mut rng),
                    ]);
                }
            }
        } else {
            // ball (Fibonacci lattice at the spacing)
            let m = (4.0 * std::f32::consts::PI * radius * radius / (s * s)) as usize;
            let golden = std::f32::consts::PI * (3.0 - 5f32.sqrt());
            for i in 0..m {
                let z = 1.0 - 2.0 * (i as f32 + 0.5) / m as f32;
                let rxy = (1.0 - z * z).max(0.0).sqrt();
                let t = golden * i as f32;
                let rr = radius + jitter(&mut rng) * 0.1;
                pts.push([
                    cx + rr * rxy * t.cos(),
                    cy + rr * rxy * t.sin(),
                    radius * 1.2 + rr * z,
                ]);
            }
        }
        cell += 1;
    }
    pts.truncate(n);
    pts
}
