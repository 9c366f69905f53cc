//! Registration benchmark generator: machined-part shapes and a small yard scene described by
//! signed distance functions (planes, boxes, cylinders, tori, holes as subtractions), scanned by
//! a virtual single-view sensor, and seeded pairs of such scans with their ground truth.
//!
//! A virtual scan casts rays from a sensor position (a structured-light head 2.5 diagonals from
//! the part, or a terrestrial station in the scene) and keeps the first surface hit found by
//! sphere tracing (Hart 1996, "Sphere tracing: a geometric method for the antialiased ray
//! tracing of implicit surfaces"): the occlusion test that the mesh scans in `common` do with a
//! back-face test and a depth buffer. Rays are spread uniformly over the part's silhouette
//! square (or over directions, for a station), so the point density falls with the slant of the
//! surface as on a real sensor. Gaussian noise is added afterwards; the overlap of a pair is
//! measured on the noise-free points. Units: millimetres for the parts, metres for the scene.
#![allow(dead_code)]

use equiscan::Cloud;
use equiscan::align::Rigid;
use equiscan::so3::rng::SplitMix64;
use equiscan::so3::rotation::random_rotation;
use equiscan::spatial::{KdIndex, estimate_spacing};
use nalgebra::{Rotation3, Unit, Vector3};

type V = Vector3<f64>;

/// A solid as a signed distance bound (negative inside). Unions, intersections and
/// subtractions of exact distances are lower bounds of the distance, which sphere tracing needs.
#[derive(Clone, Debug)]
pub enum Solid {
    /// Axis-aligned box: centre and half extents.
    Cuboid(V, V),
    /// Finite cylinder: centre, unit axis, radius, half length.
    Cylinder(V, V, f64, f64),
    /// Torus about the z axis through the centre: centre, major radius, minor radius.
    Torus(V, f64, f64),
    /// Half-space `n·p ≤ d`.
    HalfSpace(V, f64),
    /// Union.
    Union(Vec<Solid>),
    /// Intersection.
    Inter(Vec<Solid>),
    /// The first solid minus the union of the others.
    Minus(Box<Solid>, Vec<Solid>),
}

impl Solid {
    /// Signed distance bound at `p`.
    pub fn dist(&self, p: &V) -> f64 {
        match self {
            Solid::Cuboid(c, h) => {
                let q = (p - c).abs() - h;
                q.sup(&V::zeros()).norm() + q.max().min(0.0)
            }
            Solid::Cylinder(c, a, r, h) => {
                let d = p - c;
                let along = d.dot(a);
                let radial = (d - a * along).norm();
                let (x, y) = (radial - r, along.abs() - h);
                (x.max(0.0).powi(2) + y.max(0.0).powi(2)).sqrt() + x.max(y).min(0.0)
            }
            Solid::Torus(c, big, small) => {
                let d = p - c;
                let q = ((d.x * d.x + d.y * d.y).sqrt() - big, d.z);
                (q.0 * q.0 + q.1 * q.1).sqrt() - small
            }
            Solid::HalfSpace(n, d) => n.dot(p) - d,
            Solid::Union(v) => v.iter().map(|s| s.dist(p)).fold(f64::INFINITY, f64::min),
            Solid::Inter(v) => v
                .iter()
                .map(|s| s.dist(p))
                .fold(f64::NEG_INFINITY, f64::max),
            Solid::Minus(a, v) => {
                let b = v.iter().map(|s| s.dist(p)).fold(f64::INFINITY, f64::min);
                a.dist(p).max(-b)
            }
        }
    }
}

fn v(x: f64, y: f64, z: f64) -> V {
    V::new(x, y, z)
}
fn cub(c: V, h: V) -> Solid {
    Solid::Cuboid(c, h)
}
fn cyl(c: V, axis: V, r: f64, half: f64) -> Solid {
    Solid::Cylinder(c, axis.normalize(), r, half)
}

/// A benchmark shape: the solid, its bounding box, and whether it is a scene (scanned from
/// stations inside it) rather than a part (scanned from outside).
pub struct Shape {
    /// Short name used in the tables.
    pub name: &'static str,
    /// The solid.
    pub solid: Solid,
    /// Bounding box corners.
    pub lo: V,
    /// Bounding box corners.
    pub hi: V,
    /// Scanned from stations inside (scene) rather than from outside (part).
    pub scene: bool,
}

impl Shape {
    /// Bounding-box diagonal.
    pub fn diagonal(&self) -> f64 {
        (self.hi - self.lo).norm()
    }
    /// Bounding-box centre.
    pub fn centre(&self) -> V {
        (self.hi + self.lo) * 0.5
    }
}

/// The eight machined parts and the yard scene (all invented for the benchmark).
pub fn shapes() -> Vec<Shape> {
    let z = v(0.0, 0.0, 1.0);
    let x = v(1.0, 0.0, 0.0);
    let y = v(0.0, 1.0, 0.0);
    let mut out = Vec::new();
    // L-bracket 80 × 50 × 66 mm, 6 mm plates, two holes in the base (one larger) and one in the
    // upright, off centre.
    out.push(Shape {
        name: "bracket",
        solid: Solid::Minus(
            Box::new(Solid::Union(vec![
                cub(v(40.0, 25.0, 3.0), v(40.0, 25.0, 3.0)),
                cub(v(3.0, 25.0, 33.0), v(3.0, 25.0, 33.0)),
            ])),
            vec![
                cyl(v(35.0, 15.0, 3.0), z, 5.0, 10.0),
                cyl(v(62.0, 32.0, 3.0), z, 3.5, 10.0),
                cyl(v(3.0, 18.0, 45.0), x, 4.0, 10.0),
            ],
        ),
        lo: v(0.0, 0.0, 0.0),
        hi: v(80.0, 50.0, 66.0),
        scene: false,
    });
    // Stepped shaft: Ø30 × 60 and Ø20 × 50 along z, a keyway in the large step and a flat on
    // the small one.
    out.push(Shape {
        name: "shaft",
        solid: Solid::Minus(
            Box::new(Solid::Union(vec![
                cyl(v(0.0, 0.0, 30.0), z, 15.0, 30.0),
                cyl(v(0.0, 0.0, 85.0), z, 10.0, 25.0),
            ])),
            vec![
                cub(v(0.0, 14.0, 30.0), v(3.0, 3.0, 18.0)),
                Solid::HalfSpace(-x, -7.0).clone_inter(cub(v(0.0, 0.0, 92.0), v(20.0, 20.0, 18.0))),
            ],
        ),
        lo: v(-15.0, -15.0, 0.0),
        hi: v(15.0, 15.0, 110.0),
        scene: false,
    });
    // Flanged disc Ø100 × 10 with a Ø40 hub 20 high, a Ø20 bore, six Ø8 bolt holes on a Ø70
    // circle and an orientation flat at x = 45.
    let mut holes = vec![cyl(v(0.0, 0.0, 15.0), z, 10.0, 20.0)];
    for k in 0..6 {
        let a = k as f64 * std::f64::consts::PI / 3.0 + 0.3;
        holes.push(cyl(v(35.0 * a.cos(), 35.0 * a.sin(), 5.0), z, 4.0, 10.0));
    }
    holes.push(Solid::HalfSpace(-x, -45.0));
    out.push(Shape {
        name: "flange",
        solid: Solid::Minus(
            Box::new(Solid::Union(vec![
                cyl(v(0.0, 0.0, 5.0), z, 50.0, 5.0),
                cyl(v(0.0, 0.0, 20.0), z, 20.0, 10.0),
            ])),
            holes,
        ),
        lo: v(-50.0, -50.0, 0.0),
        hi: v(50.0, 50.0, 30.0),
        scene: false,
    });
    // Pipe elbow: a quarter torus tube (bend radius 50, Ø24 outside, Ø16 inside) with a
    // flange (Ø50 × 6, four bolt holes) on one end.
    let mut fl_holes = vec![cyl(v(50.0, -3.0, 0.0), y, 8.0, 10.0)];
    for k in 0..4 {
        let a = k as f64 * std::f64::consts::FRAC_PI_2 + 0.4;
        fl_holes.push(cyl(
            v(50.0 + 19.0 * a.cos(), -3.0, 19.0 * a.sin()),
            y,
            2.5,
            10.0,
        ));
    }
    out.push(Shape {
        name: "elbow",
        solid: Solid::Union(vec![
            Solid::Minus(
                Box::new(Solid::Inter(vec![
                    Solid::Torus(v(0.0, 0.0, 0.0), 50.0, 12.0),
                    Solid::HalfSpace(-x, 0.0),
                    Solid::HalfSpace(-y, 0.0),
                ])),
                vec![Solid::Torus(v(0.0, 0.0, 0.0), 50.0, 8.0)],
            ),
            Solid::Minus(Box::new(cyl(v(50.0, -3.0, 0.0), y, 25.0, 3.0)), fl_holes),
        ]),
        lo: v(-12.0, -6.0, -25.0),
        hi: v(75.0, 62.0, 25.0),
        scene: false,
    });
    // Box 100 × 60 × 40 with a step (30 × 60 × 15 removed at one end) and a hole in the step.
    out.push(Shape {
        name: "stepbox",
        solid: Solid::Minus(
            Box::new(cub(v(50.0, 30.0, 20.0), v(50.0, 30.0, 20.0))),
            vec![
                cub(v(85.0, 30.0, 32.5), v(15.0, 31.0, 7.5)),
                cyl(v(85.0, 40.0, 25.0), z, 5.0, 10.0),
            ],
        ),
        lo: v(0.0, 0.0, 0.0),
        hi: v(100.0, 60.0, 40.0),
        scene: false,
    });
    // Plate 120 × 80 × 8 with an off-centre boss Ø30 × 20 (Ø12 bore) and two corner holes.
    out.push(Shape {
        name: "bossplate",
        solid: Solid::Minus(
            Box::new(Solid::Union(vec![
                cub(v(60.0, 40.0, 4.0), v(60.0, 40.0, 4.0)),
                cyl(v(40.0, 45.0, 14.0), z, 15.0, 10.0),
            ])),
            vec![
                cyl(v(40.0, 45.0, 14.0), z, 6.0, 12.0),
                cyl(v(10.0, 10.0, 4.0), z, 4.0, 6.0),
                cyl(v(110.0, 70.0, 4.0), z, 4.0, 6.0),
            ],
        ),
        lo: v(0.0, 0.0, 0.0),
        hi: v(120.0, 80.0, 24.0),
        scene: false,
    });
    // Tee: a Ø30 tube 120 long along x with a Ø20 branch 40 long along y (both bored).
    out.push(Shape {
        name: "tee",
        solid: Solid::Minus(
            Box::new(Solid::Union(vec![
                cyl(v(60.0, 0.0, 0.0), x, 15.0, 60.0),
                cyl(v(40.0, 20.0, 0.0), y, 10.0, 20.0),
            ])),
            vec![
                cyl(v(60.0, 0.0, 0.0), x, 11.0, 61.0),
                cyl(v(40.0, 20.0, 0.0), y, 7.0, 21.0),
            ],
        ),
        lo: v(0.0, -15.0, -15.0),
        hi: v(120.0, 40.0, 15.0),
        scene: false,
    });
    // U-channel 100 long, 50 wide, 30 high, 5 mm walls, a slot in the web and a hole in one
    // flange.
    out.push(Shape {
        name: "channel",
        solid: Solid::Minus(
            Box::new(Solid::Union(vec![
                cub(v(50.0, 25.0, 2.5), v(50.0, 25.0, 2.5)),
                cub(v(50.0, 2.5, 15.0), v(50.0, 2.5, 15.0)),
                cub(v(50.0, 47.5, 15.0), v(50.0, 2.5, 15.0)),
            ])),
            vec![
                cub(v(30.0, 25.0, 2.5), v(12.0, 4.0, 5.0)),
                cyl(v(75.0, 47.5, 18.0), y, 5.0, 5.0),
            ],
        ),
        lo: v(0.0, 0.0, 0.0),
        hi: v(100.0, 50.0, 30.0),
        scene: false,
    });
    // Yard scene, metres: ground 40 × 40, a wall, two containers, a tank, a column, a kiosk.
    out.push(Shape {
        name: "yard",
        solid: Solid::Union(vec![
            cub(v(0.0, 0.0, -0.1), v(20.0, 20.0, 0.1)),
            cub(v(0.0, 12.0, 1.5), v(14.0, 0.15, 1.5)),
            cub(v(-6.0, 4.0, 1.3), v(3.0, 1.2, 1.3)),
            cub(v(5.0, -5.0, 1.3), v(1.2, 3.0, 1.3)),
            cyl(v(-8.0, -7.0, 2.0), z, 2.0, 2.0),
            cyl(v(3.0, 5.0, 2.5), z, 0.25, 2.5),
            cub(v(10.0, 3.0, 1.1), v(1.0, 1.5, 1.1)),
        ]),
        lo: v(-20.0, -20.0, -0.2),
        hi: v(20.0, 20.0, 5.0),
        scene: true,
    });
    out
}

/// Two shapes for the verdict tests, outside the benchmark: a plain plate 100 × 60 × 6 mm
/// (seen from above, its 180° turn about the normal fits as well as the truth) and an angle of
/// two 6 mm plates meeting along the y axis, 2 m long so that no scan sees an end (nothing
/// opposes a slide along y); its bounding box is the scanned middle part.
pub fn test_shapes() -> [Shape; 2] {
    [
        Shape {
            name: "plate",
            solid: cub(v(50.0, 30.0, 3.0), v(50.0, 30.0, 3.0)),
            lo: v(0.0, 0.0, 0.0),
            hi: v(100.0, 60.0, 6.0),
            scene: false,
        },
        Shape {
            name: "angle",
            solid: Solid::Union(vec![
                cub(v(40.0, 25.0, 3.0), v(40.0, 1000.0, 3.0)),
                cub(v(3.0, 25.0, 40.0), v(3.0, 1000.0, 40.0)),
            ]),
            lo: v(0.0, 0.0, 0.0),
            hi: v(80.0, 50.0, 80.0),
            scene: false,
        },
    ]
}

impl Solid {
    fn clone_inter(self, other: Solid) -> Solid {
        Solid::Inter(vec![self, other])
    }
}

/// The first surface point along the ray from `o` in unit direction `d`, within `t_max`.
fn trace(solid: &Solid, o: &V, d: &V, t_max: f64, eps: f64) -> Option<V> {
    let mut t = 0.0;
    for _ in 0..400 {
        let p = o + d * t;
        let s = solid.dist(&p);
        if s < eps {
            return Some(p);
        }
        t += s;
        if t > t_max {
            return None;
        }
    }
    None
}

/// A noise-free single-view scan of `shape` from `sensor`, up to `points` points. Parts: rays
/// aimed uniformly over a square 1.2 diagonals wide about the centre, facing the sensor.
/// Scenes: rays in uniformly random directions below 30° elevation, range 35 m.
pub fn scan(shape: &Shape, sensor: &V, points: usize, seed: u64) -> Vec<V> {
    let mut rng = SplitMix64::new(seed);
    let d = shape.diagonal();
    let c = shape.centre();
    let eps = 1e-5 * d;
    let view = (sensor - c).normalize();
    let side = if view.x.abs() < 0.9 { V::x() } else { V::y() };
    let e1 = view.cross(&side).normalize();
    let e2 = view.cross(&e1);
    let mut out = Vec::with_capacity(points);
    let mut rays = 0usize;
    while out.len() < points && rays < 60 * points {
        rays += 1;
        let dir = if shape.scene {
            let [a, b, cz] = rng.unit_vector();
            if cz > 0.5 {
                continue;
            }
            v(a, b, cz)
        } else {
            let aim = c + e1 * rng.uniform(-0.6, 0.6) * d + e2 * rng.uniform(-0.6, 0.6) * d;
            (aim - sensor).normalize()
        };
        let reach = if shape.scene { 35.0 } else { 4.0 * d };
        if let Some(p) = trace(&shape.solid, sensor, &dir, reach, eps) {
            out.push(p);
        }
    }
    out
}

/// One benchmark pair with its ground truth and conditions.
pub struct Pair {
    /// Shape name.
    pub shape: &'static str,
    /// The moved scan (uniform random pose, far-away origin).
    pub source: Cloud,
    /// The scan in the shape's frame.
    pub target: Cloud,
    /// True transform SOURCE file → TARGET file coordinates.
    pub truth: Rigid,
    /// Sensor positions of SOURCE (in SOURCE's file frame) and TARGET (in TARGET's file frame).
    pub viewpoints: [[f64; 3]; 2],
    /// Fraction of noise-free SOURCE points within 2 TARGET spacings of a noise-free TARGET
    /// point, under the true pose.
    pub overlap: f64,
    /// Noise standard deviation as a fraction of the diagonal.
    pub noise_frac: f64,
    /// Angle between the two viewing directions (parts) or station distance (scene, metres).
    pub separation: f64,
    /// Bounding-box diagonal.
    pub diagonal: f64,
}

fn overlap_of(source: &[V], target: &[V]) -> f64 {
    let t: Vec<[f32; 3]> = target
        .iter()
        .map(|p| [p.x as f32, p.y as f32, p.z as f32])
        .collect();
    let index = KdIndex::new(&t).unwrap();
    let spacing = estimate_spacing(&t).unwrap() as f64;
    let near = source
        .iter()
        .filter(|p| {
            let (_, d2) = index.nearest_one([p.x as f32, p.y as f32, p.z as f32]);
            (d2 as f64).sqrt() <= 2.0 * spacing
        })
        .count();
    near as f64 / source.len().max(1) as f64
}

/// Builds the pair for `seed` on `shape`: views up to 120° apart (parts) or stations 3–12 m
/// apart (scene), redrawn until the overlap lies in 30–90 % (at most 40 draws); noise
/// log-uniform in 0.05–0.8 % of the diagonal; 5–50 k points per scan (log-uniform).
pub fn pair(shape: &Shape, seed: u64) -> Pair {
    let mut rng = SplitMix64::new(seed ^ 0x9e37_79b9_7f4a_7c15);
    let d = shape.diagonal();
    let c = shape.centre();
    let noise_frac = (0.0005f64.ln() + rng.next_f64() * (0.008f64 / 0.0005).ln()).exp();
    let points = (5000f64.ln() + rng.next_f64() * 10f64.ln()).exp() as usize;
    // Views are chosen on small trial scans (2000 points), then scanned at full size once.
    let (mut sensors, mut sep) = ([V::zeros(); 2], f64::NAN);
    for _ in 0..40 {
        let (s1, s2, separation) = if shape.scene {
            let a = rng.uniform(0.0, std::f64::consts::TAU);
            let s1 = v(rng.uniform(-6.0, 6.0), rng.uniform(-6.0, 6.0), 1.6);
            let dist = rng.uniform(3.0, 12.0);
            let s2 = s1 + v(a.cos(), a.sin(), 0.0) * dist;
            (s1, s2, dist)
        } else {
            let [a, b, cz] = rng.unit_vector();
            let v1 = v(a, b, cz);
            let [a, b, cz] = rng.unit_vector();
            let axis = Unit::new_normalize(v1.cross(&v(a, b, cz)));
            let separation = rng.uniform(10.0, 120.0);
            let v2 = Rotation3::from_axis_angle(&axis, separation.to_radians()) * v1;
            (c + v1 * 2.5 * d, c + v2 * 2.5 * d, separation)
        };
        let inside = |s: &V| shape.solid.dist(s) < 0.5 || s.x.abs() > 15.0 || s.y.abs() > 11.0;
        if shape.scene && (inside(&s1) || inside(&s2)) {
            continue;
        }
        let t = scan(shape, &s1, 2000, rng.next_u64());
        let s = scan(shape, &s2, 2000, rng.next_u64());
        if s.len() < 1000 || t.len() < 1000 {
            continue;
        }
        (sensors, sep) = ([s2, s1], separation);
        if (0.3..=0.9).contains(&overlap_of(&s, &t)) {
            // Full-size scans; kept when their overlap is in range too.
            let t = scan(shape, &s1, points, rng.next_u64());
            let s = scan(shape, &s2, points, rng.next_u64());
            if (0.3..=0.9).contains(&overlap_of(&s, &t)) {
                return assemble(shape, &s, &t, sensors, sep, noise_frac, &mut rng);
            }
        }
    }
    let t_pts = scan(shape, &sensors[1], points, rng.next_u64());
    let s_pts = scan(shape, &sensors[0], points, rng.next_u64());
    assemble(shape, &s_pts, &t_pts, sensors, sep, noise_frac, &mut rng)
}

/// A pair from two given sensor positions (shape frame), `points` per scan.
pub fn pair_from(
    shape: &Shape,
    sensors: [V; 2],
    points: usize,
    noise_frac: f64,
    seed: u64,
) -> Pair {
    let mut rng = SplitMix64::new(seed);
    let t_pts = scan(shape, &sensors[1], points, rng.next_u64());
    let s_pts = scan(shape, &sensors[0], points, rng.next_u64());
    let sep = rotation_angle_between(
        &(sensors[0] - shape.centre()),
        &(sensors[1] - shape.centre()),
    );
    assemble(shape, &s_pts, &t_pts, sensors, sep, noise_frac, &mut rng)
}

fn rotation_angle_between(a: &V, b: &V) -> f64 {
    a.angle(b).to_degrees()
}

/// Noise, the random pose of SOURCE and the truth, for noise-free scans from `sensors`
/// (SOURCE's, TARGET's).
fn assemble(
    shape: &Shape,
    s_pts: &[V],
    t_pts: &[V],
    sensors: [V; 2],
    sep: f64,
    noise_frac: f64,
    rng: &mut SplitMix64,
) -> Pair {
    let d = shape.diagonal();
    let ov = overlap_of(s_pts, t_pts);
    let noise = noise_frac * d;
    let mut jitter = |p: &V| p + v(rng.normal(), rng.normal(), rng.normal()) * noise;
    let t_noisy: Vec<[f64; 3]> = t_pts
        .iter()
        .map(|p| {
            let q = jitter(p);
            [q.x, q.y, q.z]
        })
        .collect();
    let s_noisy: Vec<V> = s_pts.iter().map(&mut jitter).collect();
    let r0 = random_rotation(rng);
    let t0 = v(
        rng.uniform(-1.0, 1.0),
        rng.uniform(-1.0, 1.0),
        rng.uniform(-1.0, 1.0),
    ) * d
        + v(5000.0, -3000.0, 120.0);
    let global: Vec<[f64; 3]> = s_noisy
        .iter()
        .map(|p| {
            let q = r0 * p + t0;
            [q.x, q.y, q.z]
        })
        .collect();
    let rt = r0.transpose();
    let sv = r0 * sensors[0] + t0;
    Pair {
        shape: shape.name,
        source: Cloud::from_global(&global),
        target: Cloud::from_global(&t_noisy),
        truth: Rigid::new(rt, -(rt * t0)),
        viewpoints: [
            [sv.x, sv.y, sv.z],
            [sensors[1].x, sensors[1].y, sensors[1].z],
        ],
        overlap: ov,
        noise_frac,
        separation: sep,
        diagonal: d,
    }
}

/// How far along its view direction an orthographic bunny scan's sensor is placed, in
/// diagonals: far enough that the rays of a sensor there diverge by at most 0.55 / 200 rad
/// (2.8 mrad) over the scanned square, a sideways error of at most 0.3 % of the diagonal over
/// the object's depth, under the free-space margin (at least 1.5 voxels).
pub const BUNNY_SENSOR_DIAGONALS: f64 = 200.0;

/// Sensor positions of an orthographic bunny problem: SOURCE's in SOURCE file coordinates (the
/// random pose of `problem` applied, through the inverse of the truth), TARGET's in TARGET
/// file coordinates (the mesh frame), each [`BUNNY_SENSOR_DIAGONALS`] diagonals from the mesh
/// centre along the view direction.
fn bunny_viewpoints(mesh: &super::Mesh, p: &super::Problem) -> [[f64; 3]; 2] {
    let c = mesh.centre();
    let far = BUNNY_SENSOR_DIAGONALS * p.diagonal;
    let s = p.truth.inverse().apply(&(c + p.views[0] * far));
    let t = c + p.views[1] * far;
    [[s.x, s.y, s.z], [t.x, t.y, t.z]]
}

/// A bunny pair in the same terms (orthographic mesh scans of `common`): views 10–120° apart,
/// the same noise and size ranges; the viewpoints are far along the view directions
/// ([`BUNNY_SENSOR_DIAGONALS`]).
pub fn bunny_pair(mesh: &super::Mesh, seed: u64) -> Pair {
    let mut rng = SplitMix64::new(seed ^ 0x5851_f42d_4c95_7f2d);
    let noise_frac = (0.0005f64.ln() + rng.next_f64() * (0.008f64 / 0.0005).ln()).exp();
    let points = (5000f64.ln() + rng.next_f64() * 10f64.ln()).exp() as usize;
    let mut p = super::problem(mesh, 0.0, points, noise_frac, 0);
    for _ in 0..20 {
        let sep = rng.uniform(10.0, 120.0);
        p = super::problem(mesh, sep, points, noise_frac, rng.next_u64());
        if (0.3..=0.9).contains(&p.overlap) {
            return Pair {
                shape: "bunny",
                viewpoints: bunny_viewpoints(mesh, &p),
                overlap: p.overlap,
                noise_frac,
                separation: sep,
                diagonal: p.diagonal,
                source: p.source,
                target: p.target,
                truth: p.truth,
            };
        }
    }
    Pair {
        shape: "bunny",
        viewpoints: bunny_viewpoints(mesh, &p),
        overlap: p.overlap,
        noise_frac,
        separation: f64::NAN,
        diagonal: p.diagonal,
        source: p.source,
        target: p.target,
        truth: p.truth,
    }
}
