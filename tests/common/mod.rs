//! Registration benchmark built from real geometry: virtual partial scans of the Stanford bunny
//! mesh (tests/data/bunny). Shared by the registration tests and the benchmark.
//!
//! A virtual scan looks at the mesh along a view direction (orthographic): triangles facing away
//! are dropped (back-face test), the rest are rasterised into a depth buffer, and points are
//! sampled area-uniformly on the front-facing triangles with their own seed and kept only where
//! they are not hidden behind the depth buffer; then Gaussian noise is added. Two scans therefore
//! share no point. The source scan is then moved by a uniformly random rotation (Shoemake 1992)
//! and a random translation, and stored about a far-away origin, as files often are.
#![allow(dead_code)]

use std::path::Path;

use equiscan::Cloud;
use equiscan::align::Rigid;
use equiscan::so3::rng::SplitMix64;
use equiscan::spatial::{KdIndex, estimate_spacing};
use nalgebra::{Matrix3, Rotation3, Vector3};

/// A triangle mesh.
pub struct Mesh {
    /// Vertex positions.
    pub vertices: Vec<Vector3<f64>>,
    /// Triangles as vertex indices.
    pub faces: Vec<[u32; 3]>,
}

impl Mesh {
    /// Axis-aligned bounding-box diagonal.
    pub fn diagonal(&self) -> f64 {
        let mut lo = Vector3::repeat(f64::INFINITY);
        let mut hi = Vector3::repeat(f64::NEG_INFINITY);
        for v in &self.vertices {
            lo = lo.inf(v);
            hi = hi.sup(v);
        }
        (hi - lo).norm()
    }

    /// Bounding-box centre.
    pub fn centre(&self) -> Vector3<f64> {
        let mut lo = Vector3::repeat(f64::INFINITY);
        let mut hi = Vector3::repeat(f64::NEG_INFINITY);
        for v in &self.vertices {
            lo = lo.inf(v);
            hi = hi.sup(v);
        }
        (lo + hi) * 0.5
    }
}

/// Reads the bunny test mesh (binary little-endian PLY: float x, y, z vertices, then faces as
/// `list uchar int`), the one layout tests/data/bunny/bunny.ply has.
pub fn bunny() -> Mesh {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/bunny/bunny.ply");
    let bytes = std::fs::read(&path).expect("tests/data/bunny/bunny.ply");
    let end = b"end_header\n";
    let at = bytes
        .windows(end.len())
        .position(|w| w == end)
        .expect("PLY header end");
    let header = std::str::from_utf8(&bytes[..at]).unwrap();
    assert!(header.contains("binary_little_endian"));
    let count = |name: &str| -> usize {
        header
            .lines()
            .find_map(|l| l.strip_prefix(&format!("element {name} ")))
            .unwrap()
            .trim()
            .parse()
            .unwrap()
    };
    let (nv, nf) = (count("vertex"), count("face"));
    let mut off = at + end.len();
    let f32_at = |o: usize| f32::from_le_bytes(bytes[o..o + 4].try_into().unwrap());
    let i32_at = |o: usize| i32::from_le_bytes(bytes[o..o + 4].try_into().unwrap());
    let mut vertices = Vec::with_capacity(nv);
    for _ in 0..nv {
        vertices.push(Vector3::new(
            f32_at(off) as f64,
            f32_at(off + 4) as f64,
            f32_at(off + 8) as f64,
        ));
        off += 12;
    }
    let mut faces = Vec::with_capacity(nf);
    for _ in 0..nf {
        assert_eq!(bytes[off], 3, "triangles only");
        faces.push([
            i32_at(off + 1) as u32,
            i32_at(off + 5) as u32,
            i32_at(off + 9) as u32,
        ]);
        off += 13;
    }
    Mesh { vertices, faces }
}

/// Uniformly random rotation (Shoemake 1992), from the library's SO(3) core.
pub use equiscan::so3::rotation::random_rotation;

fn unit(rng: &mut SplitMix64) -> Vector3<f64> {
    let [x, y, z] = rng.unit_vector();
    Vector3::new(x, y, z)
}

/// Points seen from direction `view` (pointing from the object towards the viewer), `points`
/// of them (fewer only if the view shows too little), with isotropic Gaussian noise of standard deviation `noise`.
pub fn virtual_scan(
    mesh: &Mesh,
    view: Vector3<f64>,
    points: usize,
    noise: f64,
    seed: u64,
) -> Vec<Vector3<f64>> {
    const GRID: usize = 256;
    let view = view.normalize();
    let side = if view.x.abs() < 0.9 {
        Vector3::x()
    } else {
        Vector3::y()
    };
    let e1 = view.cross(&side).normalize();
    let e2 = view.cross(&e1);
    let c = mesh.centre();
    let d = mesh.diagonal();
    let half = 0.55 * d;
    let pix = 2.0 * half / GRID as f64;
    let proj = |p: &Vector3<f64>| {
        let q = p - c;
        (
            (q.dot(&e1) + half) / pix,
            (q.dot(&e2) + half) / pix,
            q.dot(&view),
        )
    };
    let front: Vec<usize> = (0..mesh.faces.len())
        .filter(|&f| {
            let [a, b, cc] = mesh.faces[f].map(|i| mesh.vertices[i as usize]);
            (b - a).cross(&(cc - a)).dot(&view) > 0.0
        })
        .collect();
    // Depth buffer: the largest depth (closest to the viewer) per pixel.
    let mut zbuf = vec![f64::NEG_INFINITY; GRID * GRID];
    for &f in &front {
        let [a, b, cc] = mesh.faces[f].map(|i| proj(&mesh.vertices[i as usize]));
        let x0 = a.0.min(b.0).min(cc.0).floor().max(0.0) as usize;
        let x1 = (a.0.max(b.0).max(cc.0).ceil() as usize).min(GRID - 1);
        let y0 = a.1.min(b.1).min(cc.1).floor().max(0.0) as usize;
        let y1 = (a.1.max(b.1).max(cc.1).ceil() as usize).min(GRID - 1);
        let area = (b.0 - a.0) * (cc.1 - a.1) - (cc.0 - a.0) * (b.1 - a.1);
        if area.abs() < 1e-12 {
            continue;
        }
        for y in y0..=y1 {
            for x in x0..=x1 {
                let (px, py) = (x as f64 + 0.5, y as f64 + 0.5);
                let w0 = ((b.0 - px) * (cc.1 - py) - (cc.0 - px) * (b.1 - py)) / area;
                let w1 = ((cc.0 - px) * (a.1 - py) - (a.0 - px) * (cc.1 - py)) / area;
                let w2 = 1.0 - w0 - w1;
                if w0 < 0.0 || w1 < 0.0 || w2 < 0.0 {
                    continue;
                }
                let z = w0 * a.2 + w1 * b.2 + w2 * cc.2;
                let slot = &mut zbuf[y * GRID + x];
                if z > *slot {
                    *slot = z;
                }
            }
        }
    }
    let areas: Vec<f64> = front
        .iter()
        .map(|&f| {
            let [a, b, cc] = mesh.faces[f].map(|i| mesh.vertices[i as usize]);
            0.5 * (b - a).cross(&(cc - a)).norm()
        })
        .collect();
    let total: f64 = areas.iter().sum();
    // Usually a third to a half of the front-facing area is visible; oversample, then thin.
    let density = 4.0 * points as f64 / total;
    let eps = 0.01 * d;
    let mut rng = SplitMix64::new(seed);
    let mut out = Vec::with_capacity(points * 2);
    for (k, &f) in front.iter().enumerate() {
        let expected = areas[k] * density;
        let n = expected.floor() as usize + usize::from(rng.next_f64() < expected.fract());
        let [a, b, cc] = mesh.faces[f].map(|i| mesh.vertices[i as usize]);
        for _ in 0..n {
            let (r1, r2) = (rng.next_f64().sqrt(), rng.next_f64());
            let p = a * (1.0 - r1) + b * (r1 * (1.0 - r2)) + cc * (r1 * r2);
            let (x, y, z) = proj(&p);
            let (xi, yi) = (x as usize, y as usize);
            if xi >= GRID || yi >= GRID || z < zbuf[yi * GRID + xi] - eps {
                continue;
            }
            let jitter = Vector3::new(rng.normal(), rng.normal(), rng.normal()) * noise;
            out.push(p + jitter);
        }
    }
    // The visible share of the front-facing area varies with the view: sample more, then keep a
    // random subset of exactly `points` (partial Fisher–Yates), in sampling order.
    if out.len() > points {
        let mut idx: Vec<usize> = (0..out.len()).collect();
        for k in 0..points {
            let j = k + rng.below((idx.len() - k) as u64) as usize;
            idx.swap(k, j);
        }
        idx.truncate(points);
        idx.sort_unstable();
        out = idx.into_iter().map(|i| out[i]).collect();
    }
    out
}

/// One registration problem with its ground truth.
pub struct Problem {
    /// The moved scan.
    pub source: Cloud,
    /// The scan in the mesh frame.
    pub target: Cloud,
    /// True transform from SOURCE file coordinates to TARGET file coordinates.
    pub truth: Rigid,
    /// Fraction of source points within 2 point spacings of a target point (true pose).
    pub overlap: f64,
    /// Bounding-box diagonal of the mesh.
    pub diagonal: f64,
    /// Unit view directions of SOURCE and TARGET (mesh frame, from the object towards the
    /// viewer; the scans are orthographic).
    pub views: [Vector3<f64>; 2],
}

/// Builds a problem: two views `separation_deg` apart, `points` per scan, noise as a fraction of
/// the diagonal, everything drawn from `seed`.
pub fn problem(
    mesh: &Mesh,
    separation_deg: f64,
    points: usize,
    noise_frac: f64,
    seed: u64,
) -> Problem {
    let mut rng = SplitMix64::new(seed);
    let d = mesh.diagonal();
    let v1 = unit(&mut rng);
    let axis = v1.cross(&unit(&mut rng)).normalize();
    let v2 = Rotation3::from_axis_angle(
        &nalgebra::Unit::new_normalize(axis),
        separation_deg.to_radians(),
    ) * v1;
    let noise = noise_frac * d;
    let t_pts = virtual_scan(mesh, v1, points, noise, rng.next_u64());
    let s_pts = virtual_scan(mesh, v2, points, noise, rng.next_u64());
    let r0 = random_rotation(&mut rng);
    let t0 = Vector3::new(
        rng.uniform(-1.0, 1.0),
        rng.uniform(-1.0, 1.0),
        rng.uniform(-1.0, 1.0),
    ) * d;
    let moved: Vec<[f64; 3]> = s_pts
        .iter()
        .map(|p| {
            let q = r0 * p + t0;
            [q.x, q.y, q.z]
        })
        .collect();
    // Files keep large coordinates; store the source about a far-away origin.
    let offset = [5000.0, -3000.0, 120.0];
    let global: Vec<[f64; 3]> = moved
        .iter()
        .map(|p| [p[0] + offset[0], p[1] + offset[1], p[2] + offset[2]])
        .collect();
    let source = Cloud::from_global(&global);
    let target_global: Vec<[f64; 3]> = t_pts.iter().map(|p| [p.x, p.y, p.z]).collect();
    let target = Cloud::from_global(&target_global);
    // x_file = r0 p + t0 + offset  ⇒  p = r0ᵀ (x_file − t0 − offset).
    let rt = r0.transpose();
    let truth = Rigid::new(rt, -(rt * (t0 + Vector3::from(offset))));
    let overlap = measured_overlap(&source, &target, &truth);
    Problem {
        source,
        target,
        truth,
        overlap,
        diagonal: d,
        views: [v2.normalize(), v1.normalize()],
    }
}

/// Fraction of source points that `tf` (file frames) brings within 2 × target spacing of a
/// target point.
pub fn measured_overlap(source: &Cloud, target: &Cloud, tf: &Rigid) -> f64 {
    let spacing = estimate_spacing(&target.positions).unwrap() as f64;
    let index = KdIndex::new(&target.positions).unwrap();
    let o = Vector3::from(target.origin);
    let near = (0..source.len())
        .filter(|&i| {
            let g = source.global(i);
            let q = tf.apply(&Vector3::new(g[0], g[1], g[2])) - o;
            let (_, d2) = index.nearest_one([q.x as f32, q.y as f32, q.z as f32]);
            (d2 as f64).sqrt() <= 2.0 * spacing
        })
        .count();
    near as f64 / source.len() as f64
}

/// Rotation error (degrees) and translation error (file units, measured at the source
/// centroid so that a far-away origin does not magnify it) of `est` against `truth`.
pub fn errors(source: &Cloud, est: &Rigid, truth: &Rigid) -> (f64, f64) {
    let mut c = Vector3::zeros();
    for i in 0..source.len() {
        c += Vector3::from(source.global(i));
    }
    c /= source.len() as f64;
    let rot = equiscan::align::rotation_error_deg(&est.rotation, &truth.rotation);
    (rot, (est.apply(&c) - truth.apply(&c)).norm())
}

/// Scans of the mesh from views `step_deg` apart around one axis; scan 0 stays in the mesh
/// frame, every other is moved by a random rigid transform. Returns each scan with its true
/// transform into scan 0's frame (file coordinates).
pub fn view_ring(
    mesh: &Mesh,
    count: usize,
    step_deg: f64,
    points: usize,
    noise_frac: f64,
    seed: u64,
) -> Vec<(Cloud, Rigid)> {
    let mut rng = SplitMix64::new(seed);
    let d = mesh.diagonal();
    let v0 = unit(&mut rng);
    let axis = nalgebra::Unit::new_normalize(v0.cross(&unit(&mut rng)));
    (0..count)
        .map(|k| {
            let view = Rotation3::from_axis_angle(&axis, (k as f64 * step_deg).to_radians()) * v0;
            let pts = virtual_scan(mesh, view, points, noise_frac * d, rng.next_u64());
            let (r0, t0) = if k == 0 {
                (Matrix3::identity(), Vector3::zeros())
            } else {
                let t = Vector3::new(
                    rng.uniform(-1.0, 1.0),
                    rng.uniform(-1.0, 1.0),
                    rng.uniform(-1.0, 1.0),
                ) * d;
                (random_rotation(&mut rng), t)
            };
            let global: Vec<[f64; 3]> = pts
                .iter()
                .map(|p| {
                    let q = r0 * p + t0;
                    [q.x, q.y, q.z]
                })
                .collect();
            let rt = r0.transpose();
            (Cloud::from_global(&global), Rigid::new(rt, -(rt * t0)))
        })
        .collect()
}
pub mod shapes;
pub mod tune;

/// At most about 3 000 of `source`'s points, evenly strided, in global coordinates: the sample
/// on which the benchmark measures how much of SOURCE a pose lays on TARGET.
pub fn sample_points(source: &Cloud) -> Vec<Vector3<f64>> {
    let stride = source.len().div_ceil(3000).max(1);
    (0..source.len())
        .step_by(stride)
        .map(|i| Vector3::from(source.global(i)))
        .collect()
}

/// For the benchmark's per-pair lines ("off the largest plane"): SOURCE sample points (at most about 3 000, evenly
/// strided, global coordinates) that lie farther than `gate` from SOURCE's largest plane
/// (RANSAC over the sample, 400 draws, fixed seed; Fischler & Bolles 1981).
pub fn off_plane_sample(source: &Cloud, gate: f64) -> Vec<Vector3<f64>> {
    let pts = sample_points(source);
    if pts.len() < 3 {
        return pts;
    }
    let mut rng = SplitMix64::new(0x9e37_79b9);
    let mut best: Option<(usize, Vector3<f64>, f64)> = None;
    for _ in 0..400 {
        let a = pts[rng.below(pts.len() as u64) as usize];
        let b = pts[rng.below(pts.len() as u64) as usize];
        let c = pts[rng.below(pts.len() as u64) as usize];
        let n = (b - a).cross(&(c - a));
        if n.norm() < 1e-12 {
            continue;
        }
        let n = n.normalize();
        let d = n.dot(&a);
        let count = pts.iter().filter(|p| (n.dot(p) - d).abs() <= gate).count();
        if best.is_none_or(|x| count > x.0) {
            best = Some((count, n, d));
        }
    }
    match best {
        Some((_, n, d)) => pts
            .into_iter()
            .filter(|p| (n.dot(p) - d).abs() > gate)
            .collect(),
        None => pts,
    }
}

/// Share of `points` (SOURCE global coordinates) that `tf` lays within `gate` of a TARGET
/// point.
pub fn share_near(
    points: &[Vector3<f64>],
    target: &Cloud,
    index: &KdIndex,
    tf: &Rigid,
    gate: f64,
) -> f64 {
    let o = Vector3::from(target.origin);
    let near = points
        .iter()
        .filter(|p| {
            let q = tf.apply(p) - o;
            let (_, d2) = index.nearest_one([q.x as f32, q.y as f32, q.z as f32]);
            (d2 as f64).sqrt() <= gate
        })
        .count();
    near as f64 / points.len().max(1) as f64
}
