//! Solids for ray casting and surface sampling.
//!
//! Three primitives — convex polyhedra (half-space intersections), cone frustums (cylinders when
//! both radii agree) and torus segments — combined by union, intersection and difference. A ray
//! meets a combined solid where it crosses the surface of one of its primitives and passes from
//! outside the solid to inside; a sample on a primitive's surface lies on the solid's surface when
//! a tiny step along the normal leaves the solid on one side and not on the other. Both rules
//! need only per-primitive crossings, surface samples and a point-membership test, so every
//! combination works without special cases.
//!
//! Units are whatever the caller uses (metres for the depot, millimetres for the parts).

use crate::rng::Rng;
use nalgebra::{Matrix3, Vector3};

/// A 3-vector of f64.
pub type V3 = Vector3<f64>;

/// The library's rigid transform `p -> R p + t`, under the name the scene code uses.
pub use equiscan::geometry::Rigid as Pose;

/// Rotation by `a` radians about +x.
pub fn rot_x(a: f64) -> Matrix3<f64> {
    let (s, c) = a.sin_cos();
    Matrix3::new(1.0, 0.0, 0.0, 0.0, c, -s, 0.0, s, c)
}

/// Rotation by `a` radians about +y.
pub fn rot_y(a: f64) -> Matrix3<f64> {
    let (s, c) = a.sin_cos();
    Matrix3::new(c, 0.0, s, 0.0, 1.0, 0.0, -s, 0.0, c)
}

/// Rotation by `a` radians about +z.
pub fn rot_z(a: f64) -> Matrix3<f64> {
    let (s, c) = a.sin_cos();
    Matrix3::new(c, -s, 0.0, s, c, 0.0, 0.0, 0.0, 1.0)
}

/// Two unit vectors completing `n` (unit) to a right-handed orthonormal basis.
pub fn basis_for(n: &V3) -> (V3, V3) {
    let other = if n.x.abs() < 0.6 { V3::x() } else { V3::y() };
    let e1 = n.cross(&other).normalize();
    let e2 = n.cross(&e1);
    (e1, e2)
}

/// Axis-aligned bounding box.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Aabb {
    /// Lower corner.
    pub lo: V3,
    /// Upper corner.
    pub hi: V3,
}

impl Aabb {
    /// The box around a set of points.
    pub fn around(points: &[V3]) -> Aabb {
        let mut lo = V3::repeat(f64::INFINITY);
        let mut hi = V3::repeat(f64::NEG_INFINITY);
        for p in points {
            lo = lo.inf(p);
            hi = hi.sup(p);
        }
        Aabb { lo, hi }
    }

    /// The box around both.
    pub fn union(&self, other: &Aabb) -> Aabb {
        Aabb {
            lo: self.lo.inf(&other.lo),
            hi: self.hi.sup(&other.hi),
        }
    }

    /// Length of the diagonal.
    pub fn diagonal(&self) -> f64 {
        (self.hi - self.lo).norm()
    }

    /// Parameter where the ray `o + t d` enters the box, if it meets it within `[0, tmax]`.
    pub fn entry(&self, o: &V3, inv_d: &V3, tmax: f64) -> Option<f64> {
        let mut t0 = 0.0f64;
        let mut t1 = tmax;
        for k in 0..3 {
            let a = (self.lo[k] - o[k]) * inv_d[k];
            let b = (self.hi[k] - o[k]) * inv_d[k];
            let (a, b) = if a < b { (a, b) } else { (b, a) };
            if a.is_nan() || b.is_nan() {
                // Ray parallel to the slab: inside the slab or not.
                if o[k] < self.lo[k] || o[k] > self.hi[k] {
                    return None;
                }
                continue;
            }
            t0 = t0.max(a);
            t1 = t1.min(b);
            if t0 > t1 {
                return None;
            }
        }
        Some(t0)
    }
}

/// A convex polyhedron: the points with `n · p <= d` for every plane `(n, d)`, `n` unit.
#[derive(Debug, Clone, PartialEq)]
pub struct Convex {
    planes: Vec<(V3, f64)>,
    vertices: Vec<V3>,
}

impl Convex {
    /// A convex polyhedron from its planes (outward unit normals and offsets). The planes must
    /// bound a finite volume.
    pub fn from_planes(planes: Vec<(V3, f64)>) -> Convex {
        let mut vertices = Vec::new();
        let n = planes.len();
        for i in 0..n {
            for j in i + 1..n {
                for k in j + 1..n {
                    let m = Matrix3::from_rows(&[
                        planes[i].0.transpose(),
                        planes[j].0.transpose(),
                        planes[k].0.transpose(),
                    ]);
                    if m.determinant().abs() < 1e-12 {
                        continue;
                    }
                    if let Some(inv) = m.try_inverse() {
                        let p = inv * V3::new(planes[i].1, planes[j].1, planes[k].1);
                        let scale = 1.0 + p.norm();
                        if planes.iter().all(|(nn, d)| nn.dot(&p) <= d + 1e-9 * scale) {
                            vertices.push(p);
                        }
                    }
                }
            }
        }
        assert!(
            !vertices.is_empty(),
            "planes do not bound a convex polyhedron"
        );
        Convex { planes, vertices }
    }

    /// A box with half extents `half`, centred at the origin, then moved by `pose`.
    pub fn cuboid(half: V3, pose: &Pose) -> Convex {
        let mut planes = Vec::new();
        for k in 0..3 {
            let mut n = V3::zeros();
            n[k] = 1.0;
            planes.push((n, half[k]));
            planes.push((-n, half[k]));
        }
        Convex::from_planes(planes).transformed(pose)
    }

    /// A box between two corners (axis-aligned in the local frame), then moved by `pose`.
    pub fn between(lo: V3, hi: V3, pose: &Pose) -> Convex {
        let centre = (lo + hi) * 0.5;
        Convex::cuboid((hi - lo) * 0.5, &pose.compose(&Pose::translation(centre)))
    }

    /// The same polyhedron moved by `pose`.
    pub fn transformed(&self, pose: &Pose) -> Convex {
        Convex {
            planes: self
                .planes
                .iter()
                .map(|(n, d)| {
                    let n2 = pose.rotate(n);
                    (n2, d + n2.dot(&pose.translation))
                })
                .collect(),
            vertices: self.vertices.iter().map(|v| pose.apply(v)).collect(),
        }
    }

    fn contains(&self, p: &V3) -> bool {
        self.planes.iter().all(|(n, d)| n.dot(p) < *d)
    }

    fn aabb(&self) -> Aabb {
        Aabb::around(&self.vertices)
    }

    fn crossings(&self, o: &V3, dir: &V3, out: &mut Vec<(f64, V3)>) {
        let scale = 1e-9 * (1.0 + self.aabb_extent());
        for (i, (n, d)) in self.planes.iter().enumerate() {
            let nd = n.dot(dir);
            if nd.abs() < 1e-15 {
                continue;
            }
            let t = (d - n.dot(o)) / nd;
            let p = o + dir * t;
            let inside = self
                .planes
                .iter()
                .enumerate()
                .all(|(j, (m, e))| j == i || m.dot(&p) <= e + scale);
            if inside {
                out.push((t, *n));
            }
        }
    }

    fn aabb_extent(&self) -> f64 {
        let b = self.aabb();
        b.diagonal()
    }

    fn samples(&self, spacing: f64, rng: &mut Rng, out: &mut Vec<(V3, V3)>) {
        let b = self.aabb();
        let centre = (b.lo + b.hi) * 0.5;
        let half = b.diagonal() * 0.5;
        let tol = 1e-9 * (1.0 + half);
        for (i, (n, d)) in self.planes.iter().enumerate() {
            let (e1, e2) = basis_for(n);
            let m = centre - n * (n.dot(&centre) - d);
            let cells = (2.0 * half / spacing).ceil() as usize;
            let start = -(cells as f64) * spacing * 0.5;
            for a in 0..cells {
                for c in 0..cells {
                    let u = start + (a as f64 + rng.uniform()) * spacing;
                    let v = start + (c as f64 + rng.uniform()) * spacing;
                    let p = m + e1 * u + e2 * v;
                    let on_face = self
                        .planes
                        .iter()
                        .enumerate()
                        .all(|(j, (mm, e))| j == i || mm.dot(&p) <= e + tol);
                    if on_face {
                        out.push((p, *n));
                    }
                }
            }
        }
    }
}

/// A cone frustum along the axis from `base` (radius `r0`) to `base + h * axis` (radius `r1`);
/// a cylinder when `r0 == r1`.
#[derive(Debug, Clone, PartialEq)]
pub struct Frustum {
    base: V3,
    u: V3,
    v: V3,
    w: V3,
    h: f64,
    r0: f64,
    r1: f64,
}

impl Frustum {
    /// A frustum from the centre of one end to the centre of the other, with the radii there.
    pub fn new(from: V3, to: V3, r0: f64, r1: f64) -> Frustum {
        let axis = to - from;
        let h = axis.norm();
        let w = axis / h;
        let (u, v) = basis_for(&w);
        Frustum {
            base: from,
            u,
            v,
            w,
            h,
            r0,
            r1,
        }
    }

    /// A cylinder of radius `r` between two end centres.
    pub fn cylinder(from: V3, to: V3, r: f64) -> Frustum {
        Frustum::new(from, to, r, r)
    }

    fn transformed(&self, pose: &Pose) -> Frustum {
        Frustum {
            base: pose.apply(&self.base),
            u: pose.rotate(&self.u),
            v: pose.rotate(&self.v),
            w: pose.rotate(&self.w),
            ..*self
        }
    }

    fn slope(&self) -> f64 {
        (self.r1 - self.r0) / self.h
    }

    fn local(&self, p: &V3) -> V3 {
        let q = p - self.base;
        V3::new(q.dot(&self.u), q.dot(&self.v), q.dot(&self.w))
    }

    fn to_world_dir(&self, l: &V3) -> V3 {
        self.u * l.x + self.v * l.y + self.w * l.z
    }

    fn contains(&self, p: &V3) -> bool {
        let l = self.local(p);
        if l.z <= 0.0 || l.z >= self.h {
            return false;
        }
        let rho = self.r0 + self.slope() * l.z;
        rho > 0.0 && l.x * l.x + l.y * l.y < rho * rho
    }

    fn aabb(&self) -> Aabb {
        let top = self.base + self.w * self.h;
        let mut pts = Vec::with_capacity(16);
        for (c, r) in [(self.base, self.r0), (top, self.r1)] {
            for s in [-1.0, 1.0] {
                for t in [-1.0, 1.0] {
                    pts.push(c + (self.u * s + self.v * t) * r);
                }
            }
        }
        Aabb::around(&pts)
    }

    fn crossings(&self, o: &V3, dir: &V3, out: &mut Vec<(f64, V3)>) {
        let ol = self.local(o);
        let dl = V3::new(dir.dot(&self.u), dir.dot(&self.v), dir.dot(&self.w));
        let k = self.slope();
        let a = dl.x * dl.x + dl.y * dl.y - k * k * dl.z * dl.z;
        let rz = self.r0 + k * ol.z;
        let b = 2.0 * (ol.x * dl.x + ol.y * dl.y - k * rz * dl.z);
        let c = ol.x * ol.x + ol.y * ol.y - rz * rz;
        if a.abs() > 1e-14 {
            let disc = b * b - 4.0 * a * c;
            if disc >= 0.0 {
                let sq = disc.sqrt();
                let q = -0.5 * (b + b.signum() * sq);
                let mut roots = [q / a, if q != 0.0 { c / q } else { q / a }];
                if q == 0.0 {
                    roots[1] = roots[0];
                }
                for t in roots {
                    let l = ol + dl * t;
                    let rho = self.r0 + k * l.z;
                    if l.z >= 0.0 && l.z <= self.h && rho > 0.0 {
                        let rr = (l.x * l.x + l.y * l.y).sqrt().max(1e-300);
                        let n = V3::new(l.x / rr, l.y / rr, -k).normalize();
                        out.push((t, self.to_world_dir(&n)));
                    }
                }
            }
        }
        if dl.z.abs() > 1e-15 {
            for (z, r, sign) in [(0.0, self.r0, -1.0), (self.h, self.r1, 1.0)] {
                let t = (z - ol.z) / dl.z;
                let l = ol + dl * t;
                if l.x * l.x + l.y * l.y <= r * r {
                    out.push((t, self.w * sign));
                }
            }
        }
    }

    fn samples(&self, spacing: f64, rng: &mut Rng, out: &mut Vec<(V3, V3)>) {
        let k = self.slope();
        let rmax = self.r0.max(self.r1);
        // Lateral surface: cells of (angle, slant length), accepted with the true cell area.
        let slant = self.h * (1.0 + k * k).sqrt();
        let na = ((std::f64::consts::TAU * rmax / spacing).ceil() as usize).max(3);
        let nz = ((slant / spacing).ceil() as usize).max(1);
        let da = std::f64::consts::TAU / na as f64;
        let dz = self.h / nz as f64;
        let cell_slant = slant / nz as f64;
        for i in 0..nz {
            for j in 0..na {
                let z = (i as f64 + rng.uniform()) * dz;
                let a = (j as f64 + rng.uniform()) * da;
                let rho = self.r0 + k * z;
                let area = rho * da * cell_slant;
                if rng.uniform() * spacing * spacing >= area {
                    continue;
                }
                let (s, c) = a.sin_cos();
                let p = self.base + (self.u * c + self.v * s) * rho + self.w * z;
                let n = self.to_world_dir(&V3::new(c, s, -k).normalize());
                out.push((p, n));
            }
        }
        // End discs.
        for (z, r, sign) in [(0.0, self.r0, -1.0), (self.h, self.r1, 1.0)] {
            if r <= 0.0 {
                continue;
            }
            let cells = (2.0 * r / spacing).ceil() as usize;
            let start = -(cells as f64) * spacing * 0.5;
            for a in 0..cells {
                for b in 0..cells {
                    let x = start + (a as f64 + rng.uniform()) * spacing;
                    let y = start + (b as f64 + rng.uniform()) * spacing;
                    if x * x + y * y <= r * r {
                        let p = self.base + self.u * x + self.v * y + self.w * z;
                        out.push((p, self.w * sign));
                    }
                }
            }
        }
    }
}

/// A segment of a torus: the tube of radius `r` around the circle of radius `big_r` about
/// `centre` in the plane spanned by `u` and `v`, for polar angles `0..=sweep` measured from `u`
/// towards `v` (`sweep <= π`).
#[derive(Debug, Clone, PartialEq)]
pub struct TorusSegment {
    centre: V3,
    u: V3,
    v: V3,
    w: V3,
    big_r: f64,
    r: f64,
    sweep: f64,
}

impl TorusSegment {
    /// A torus segment about `centre` with in-plane axes `u`, `v` (orthonormal).
    pub fn new(centre: V3, u: V3, v: V3, big_r: f64, r: f64, sweep: f64) -> TorusSegment {
        TorusSegment {
            centre,
            u,
            v,
            w: u.cross(&v),
            big_r,
            r,
            sweep,
        }
    }

    fn transformed(&self, pose: &Pose) -> TorusSegment {
        TorusSegment {
            centre: pose.apply(&self.centre),
            u: pose.rotate(&self.u),
            v: pose.rotate(&self.v),
            w: pose.rotate(&self.w),
            ..*self
        }
    }

    fn local(&self, p: &V3) -> V3 {
        let q = p - self.centre;
        V3::new(q.dot(&self.u), q.dot(&self.v), q.dot(&self.w))
    }

    fn to_world_dir(&self, l: &V3) -> V3 {
        self.u * l.x + self.v * l.y + self.w * l.z
    }

    /// Signed distance to the full torus (negative inside), local coordinates.
    fn sdf_local(&self, l: &V3) -> f64 {
        let rho = (l.x * l.x + l.y * l.y).sqrt();
        ((rho - self.big_r).powi(2) + l.z * l.z).sqrt() - self.r
    }

    fn in_sweep(&self, l: &V3, tol: f64) -> bool {
        let a = l.y.atan2(l.x);
        a >= -tol && a <= self.sweep + tol
    }

    fn contains(&self, p: &V3) -> bool {
        let l = self.local(p);
        self.in_sweep(&l, 0.0) && self.sdf_local(&l) < 0.0
    }

    fn aabb(&self) -> Aabb {
        // Points along the centre circle, each padded by the tube radius (plus the chord's
        // sagitta between samples) in every axis.
        let steps = 64;
        let da = self.sweep / steps as f64;
        let pad = self.r + self.big_r * (1.0 - (0.5 * da).cos());
        let mut pts = Vec::with_capacity(2 * (steps + 1));
        for i in 0..=steps {
            let (s, c) = (i as f64 * da).sin_cos();
            let p = self.centre + (self.u * c + self.v * s) * self.big_r;
            pts.push(p - V3::repeat(pad));
            pts.push(p + V3::repeat(pad));
        }
        Aabb::around(&pts)
    }

    fn tube_normal(&self, l: &V3) -> V3 {
        let rho = (l.x * l.x + l.y * l.y).sqrt().max(1e-300);
        let c = V3::new(l.x / rho * self.big_r, l.y / rho * self.big_r, 0.0);
        self.to_world_dir(&(l - c).normalize())
    }

    fn crossings(&self, o: &V3, dir: &V3, out: &mut Vec<(f64, V3)>) {
        let ol = self.local(o);
        let dl = V3::new(dir.dot(&self.u), dir.dot(&self.v), dir.dot(&self.w));
        // Bounding sphere.
        let rr = self.big_r + self.r;
        let b = ol.dot(&dl);
        let c = ol.norm_squared() - rr * rr;
        let disc = b * b - c;
        if disc > 0.0 {
            let sq = disc.sqrt();
            // March with steps no longer than the distance to the surface, so that no crossing
            // is stepped over; bisect each sign change. Start and end just outside the bounding
            // sphere, where the distance is surely positive.
            let min_step = self.r * 1e-3;
            let (t_in, t_out) = (-b - sq - min_step, -b + sq + min_step);
            let f = |t: f64| self.sdf_local(&(ol + dl * t));
            let mut t0 = t_in;
            let mut f0 = f(t0);
            while t0 < t_out {
                let t1 = (t0 + f0.abs().max(min_step)).min(t_out);
                let f1 = f(t1);
                if (f0 < 0.0) != (f1 < 0.0) {
                    let (mut a, mut bb, mut fa) = (t0, t1, f0);
                    for _ in 0..60 {
                        let m = 0.5 * (a + bb);
                        let fm = f(m);
                        if (fa < 0.0) == (fm < 0.0) {
                            a = m;
                            fa = fm;
                        } else {
                            bb = m;
                        }
                        if bb - a < 1e-12 * (1.0 + rr) {
                            break;
                        }
                    }
                    let t = 0.5 * (a + bb);
                    let l = ol + dl * t;
                    if self.in_sweep(&l, 1e-9) {
                        out.push((t, self.tube_normal(&l)));
                    }
                }
                t0 = t1;
                f0 = f1;
            }
        }
        // End discs at angle 0 and at angle `sweep`.
        let (s, c) = self.sweep.sin_cos();
        for (m_local, e_local) in [
            (V3::new(0.0, -1.0, 0.0), V3::new(1.0, 0.0, 0.0)),
            (V3::new(-s, c, 0.0), V3::new(c, s, 0.0)),
        ] {
            let dm = dl.dot(&m_local);
            if dm.abs() < 1e-15 {
                continue;
            }
            let t = -ol.dot(&m_local) / dm;
            let l = ol + dl * t;
            let radial = l.dot(&e_local);
            if radial > 0.0 && (radial - self.big_r).powi(2) + l.z * l.z <= self.r * self.r {
                out.push((t, self.to_world_dir(&m_local)));
            }
        }
    }

    fn samples(&self, spacing: f64, rng: &mut Rng, out: &mut Vec<(V3, V3)>) {
        let nu = ((self.sweep * (self.big_r + self.r) / spacing).ceil() as usize).max(1);
        let nv = ((std::f64::consts::TAU * self.r / spacing).ceil() as usize).max(3);
        let du = self.sweep / nu as f64;
        let dv = std::f64::consts::TAU / nv as f64;
        for i in 0..nu {
            for j in 0..nv {
                let a = (i as f64 + rng.uniform()) * du;
                let b = (j as f64 + rng.uniform()) * dv;
                let area = (self.big_r + self.r * b.cos()) * du * self.r * dv;
                if rng.uniform() * spacing * spacing >= area {
                    continue;
                }
                let (sa, ca) = a.sin_cos();
                let (sb, cb) = b.sin_cos();
                let radial = V3::new(ca, sa, 0.0);
                let n_local = radial * cb + V3::new(0.0, 0.0, sb);
                let p_local = radial * self.big_r + n_local * self.r;
                out.push((
                    self.centre + self.to_world_dir(&p_local),
                    self.to_world_dir(&n_local),
                ));
            }
        }
        let (s, c) = self.sweep.sin_cos();
        for (m_local, e_local) in [
            (V3::new(0.0, -1.0, 0.0), V3::new(1.0, 0.0, 0.0)),
            (V3::new(-s, c, 0.0), V3::new(c, s, 0.0)),
        ] {
            let cells = (2.0 * self.r / spacing).ceil() as usize;
            let start = -(cells as f64) * spacing * 0.5;
            for a in 0..cells {
                for b in 0..cells {
                    let x = start + (a as f64 + rng.uniform()) * spacing;
                    let y = start + (b as f64 + rng.uniform()) * spacing;
                    if x * x + y * y <= self.r * self.r {
                        let p_local = e_local * (self.big_r + x) + V3::new(0.0, 0.0, y);
                        out.push((
                            self.centre + self.to_world_dir(&p_local),
                            self.to_world_dir(&m_local),
                        ));
                    }
                }
            }
        }
    }
}

/// One primitive.
#[derive(Debug, Clone, PartialEq)]
pub enum Prim {
    /// Convex polyhedron.
    Convex(Convex),
    /// Cone frustum or cylinder.
    Frustum(Frustum),
    /// Torus segment.
    Torus(TorusSegment),
}

impl Prim {
    fn contains(&self, p: &V3) -> bool {
        match self {
            Prim::Convex(c) => c.contains(p),
            Prim::Frustum(f) => f.contains(p),
            Prim::Torus(t) => t.contains(p),
        }
    }

    fn aabb(&self) -> Aabb {
        match self {
            Prim::Convex(c) => c.aabb(),
            Prim::Frustum(f) => f.aabb(),
            Prim::Torus(t) => t.aabb(),
        }
    }

    fn crossings(&self, o: &V3, d: &V3, out: &mut Vec<(f64, V3)>) {
        match self {
            Prim::Convex(c) => c.crossings(o, d, out),
            Prim::Frustum(f) => f.crossings(o, d, out),
            Prim::Torus(t) => t.crossings(o, d, out),
        }
    }

    fn samples(&self, spacing: f64, rng: &mut Rng, out: &mut Vec<(V3, V3)>) {
        match self {
            Prim::Convex(c) => c.samples(spacing, rng, out),
            Prim::Frustum(f) => f.samples(spacing, rng, out),
            Prim::Torus(t) => t.samples(spacing, rng, out),
        }
    }

    fn transformed(&self, pose: &Pose) -> Prim {
        match self {
            Prim::Convex(c) => Prim::Convex(c.transformed(pose)),
            Prim::Frustum(f) => Prim::Frustum(f.transformed(pose)),
            Prim::Torus(t) => Prim::Torus(t.transformed(pose)),
        }
    }
}

/// A solid built from primitives.
#[derive(Debug, Clone, PartialEq)]
pub enum Solid {
    /// A single primitive.
    Prim(Prim),
    /// Points in any of the parts.
    Union(Vec<Solid>),
    /// Points in all of the parts.
    Inter(Vec<Solid>),
    /// Points in the first solid and not in the second.
    Diff(Box<Solid>, Box<Solid>),
}

impl From<Convex> for Solid {
    fn from(c: Convex) -> Solid {
        Solid::Prim(Prim::Convex(c))
    }
}

impl From<Frustum> for Solid {
    fn from(f: Frustum) -> Solid {
        Solid::Prim(Prim::Frustum(f))
    }
}

impl From<TorusSegment> for Solid {
    fn from(t: TorusSegment) -> Solid {
        Solid::Prim(Prim::Torus(t))
    }
}

impl Solid {
    /// `a` minus `b`.
    pub fn minus(a: impl Into<Solid>, b: impl Into<Solid>) -> Solid {
        Solid::Diff(Box::new(a.into()), Box::new(b.into()))
    }

    /// True when `p` lies strictly inside.
    pub fn contains(&self, p: &V3) -> bool {
        match self {
            Solid::Prim(q) => q.contains(p),
            Solid::Union(v) => v.iter().any(|s| s.contains(p)),
            Solid::Inter(v) => v.iter().all(|s| s.contains(p)),
            Solid::Diff(a, b) => a.contains(p) && !b.contains(p),
        }
    }

    /// The same solid moved by `pose`.
    pub fn transformed(&self, pose: &Pose) -> Solid {
        match self {
            Solid::Prim(q) => Solid::Prim(q.transformed(pose)),
            Solid::Union(v) => Solid::Union(v.iter().map(|s| s.transformed(pose)).collect()),
            Solid::Inter(v) => Solid::Inter(v.iter().map(|s| s.transformed(pose)).collect()),
            Solid::Diff(a, b) => {
                Solid::Diff(Box::new(a.transformed(pose)), Box::new(b.transformed(pose)))
            }
        }
    }

    /// A box containing the solid.
    pub fn aabb(&self) -> Aabb {
        match self {
            Solid::Prim(q) => q.aabb(),
            Solid::Union(v) => v
                .iter()
                .map(Solid::aabb)
                .reduce(|a, b| a.union(&b))
                .expect("an empty union has no extent"),
            Solid::Inter(v) => {
                let mut it = v.iter().map(Solid::aabb);
                let first = it.next().expect("an empty intersection has no extent");
                it.fold(first, |a, b| Aabb {
                    lo: a.lo.sup(&b.lo),
                    hi: a.hi.inf(&b.hi),
                })
            }
            Solid::Diff(a, _) => a.aabb(),
        }
    }

    fn collect_prims(&self, out: &mut Vec<Prim>) {
        match self {
            Solid::Prim(q) => out.push(q.clone()),
            Solid::Union(v) | Solid::Inter(v) => v.iter().for_each(|s| s.collect_prims(out)),
            Solid::Diff(a, b) => {
                a.collect_prims(out);
                b.collect_prims(out);
            }
        }
    }
}

/// A solid prepared for ray casting and sampling.
#[derive(Debug, Clone)]
pub struct Body {
    solid: Solid,
    prims: Vec<Prim>,
    /// Bounding box.
    pub aabb: Aabb,
    eps: f64,
}

/// Where a ray meets a body.
#[derive(Debug, Clone, Copy)]
pub struct Hit {
    /// Ray parameter (distance along the unit direction).
    pub t: f64,
    /// Unit surface normal facing the ray's origin.
    pub normal: V3,
}

impl Body {
    /// Prepares a solid.
    pub fn new(solid: Solid) -> Body {
        let mut prims = Vec::new();
        solid.collect_prims(&mut prims);
        let aabb = solid.aabb();
        let eps = 1e-7 * aabb.diagonal().max(1e-3);
        Body {
            solid,
            prims,
            aabb,
            eps,
        }
    }

    /// The first place beyond `t_min` and before `t_max` where the ray `o + t d` (`d` unit)
    /// enters the body.
    pub fn hit(
        &self,
        o: &V3,
        d: &V3,
        t_min: f64,
        t_max: f64,
        scratch: &mut Vec<(f64, V3)>,
    ) -> Option<Hit> {
        scratch.clear();
        for p in &self.prims {
            p.crossings(o, d, scratch);
        }
        if self.prims.len() == 1 {
            return scratch
                .iter()
                .filter(|(t, n)| *t > t_min && *t < t_max && n.dot(d) < 0.0)
                .min_by(|a, b| a.0.total_cmp(&b.0))
                .map(|&(t, normal)| Hit { t, normal });
        }
        scratch.retain(|(t, _)| *t > t_min && *t < t_max);
        scratch.sort_by(|a, b| a.0.total_cmp(&b.0));
        for &(t, n) in scratch.iter() {
            let p = o + d * t;
            if self.solid.contains(&(p + d * self.eps)) && !self.solid.contains(&(p - d * self.eps))
            {
                let normal = if n.dot(d) < 0.0 { n } else { -n };
                return Some(Hit { t, normal });
            }
        }
        None
    }

    /// Jittered-grid samples of the body's whole surface, about one per `spacing²` of area,
    /// with outward unit normals.
    pub fn surface_samples(&self, spacing: f64, rng: &mut Rng) -> Vec<(V3, V3)> {
        let mut candidates = Vec::new();
        for p in &self.prims {
            p.samples(spacing, rng, &mut candidates);
        }
        candidates
            .into_iter()
            .filter_map(|(p, n)| {
                let outside_in = self.solid.contains(&(p + n * self.eps));
                let inside_in = self.solid.contains(&(p - n * self.eps));
                match (inside_in, outside_in) {
                    (true, false) => Some((p, n)),
                    (false, true) => Some((p, -n)),
                    _ => None,
                }
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn box_with_hole_is_hit_on_the_face_and_in_the_hole() {
        let plate = Convex::between(
            V3::new(-10.0, -10.0, 0.0),
            V3::new(10.0, 10.0, 2.0),
            &Pose::translation(V3::zeros()),
        );
        let hole = Frustum::cylinder(V3::new(0.0, 0.0, -1.0), V3::new(0.0, 0.0, 3.0), 3.0);
        let body = Body::new(Solid::minus(plate, hole));
        let mut s = Vec::new();
        let down = V3::new(0.0, 0.0, -1.0);
        let h = body
            .hit(&V3::new(5.0, 0.0, 10.0), &down, 0.0, 100.0, &mut s)
            .unwrap();
        assert!((h.t - 8.0).abs() < 1e-9 && (h.normal - V3::z()).norm() < 1e-12);
        assert!(
            body.hit(&V3::new(0.0, 0.0, 10.0), &down, 0.0, 100.0, &mut s)
                .is_none()
        );
        // A slanted ray through the hole wall.
        let d = V3::new(1.0, 0.0, -0.2).normalize();
        let h = body
            .hit(&V3::new(-2.0, 0.0, 2.5), &d, 0.0, 100.0, &mut s)
            .unwrap();
        let p = V3::new(-2.0, 0.0, 2.5) + d * h.t;
        assert!((p.x - 3.0).abs() < 1e-9, "{p:?}");
        assert!((h.normal + V3::x()).norm() < 1e-9);
    }

    #[test]
    fn torus_segment_crossings_lie_on_the_tube() {
        let t = TorusSegment::new(
            V3::zeros(),
            V3::x(),
            V3::y(),
            50.0,
            10.0,
            std::f64::consts::FRAC_PI_2,
        );
        let body = Body::new(t.into());
        let mut s = Vec::new();
        let h = body
            .hit(
                &V3::new(100.0, 100.0, 0.0),
                &V3::new(-1.0, -1.0, 0.0).normalize(),
                0.0,
                1e3,
                &mut s,
            )
            .unwrap();
        let p = V3::new(100.0, 100.0, 0.0) + V3::new(-1.0, -1.0, 0.0).normalize() * h.t;
        assert!((p.norm() - 60.0).abs() < 1e-8, "{p:?}");
    }

    #[test]
    fn surface_samples_match_the_area() {
        // Unit cube minus nothing: area 6, spacing 0.05 -> about 2400 samples.
        let cube = Convex::cuboid(V3::repeat(0.5), &Pose::translation(V3::zeros()));
        let body = Body::new(cube.into());
        let n = body.surface_samples(0.05, &mut Rng::new(1)).len();
        assert!((n as f64 - 2400.0).abs() < 60.0, "{n}");
        // Cylinder r = 1, h = 2: area 2π·2 + 2π = 6π.
        let cyl = Frustum::cylinder(V3::zeros(), V3::new(0.0, 0.0, 2.0), 1.0);
        let n = Body::new(cyl.into())
            .surface_samples(0.05, &mut Rng::new(2))
            .len();
        let want = 6.0 * std::f64::consts::PI / 0.0025;
        assert!((n as f64 / want - 1.0).abs() < 0.03, "{n} vs {want}");
    }

    #[test]
    fn cone_is_hit_at_its_radius_with_a_tilted_normal() {
        let cone = Frustum::new(V3::zeros(), V3::new(0.0, 0.0, 10.0), 5.0, 0.0);
        let body = Body::new(cone.into());
        let mut s = Vec::new();
        let o = V3::new(10.0, 0.0, 5.0);
        let h = body.hit(&o, &-V3::x(), 0.0, 100.0, &mut s).unwrap();
        assert!((h.t - 7.5).abs() < 1e-9, "{}", h.t);
        let want = V3::new(1.0, 0.0, 0.5).normalize();
        assert!((h.normal - want).norm() < 1e-9, "{:?}", h.normal);
    }

    #[test]
    fn intersection_keeps_only_the_common_part() {
        let cube = Convex::cuboid(V3::repeat(1.0), &Pose::translation(V3::zeros()));
        let rod = Frustum::cylinder(V3::new(0.0, 0.0, -2.0), V3::new(0.0, 0.0, 2.0), 0.5);
        let body = Body::new(Solid::Inter(vec![cube.into(), rod.into()]));
        let mut s = Vec::new();
        let down = -V3::z();
        let h = body
            .hit(&V3::new(0.2, 0.0, 5.0), &down, 0.0, 100.0, &mut s)
            .unwrap();
        assert!((h.t - 4.0).abs() < 1e-9 && (h.normal - V3::z()).norm() < 1e-12);
        assert!(
            body.hit(&V3::new(0.8, 0.0, 5.0), &down, 0.0, 100.0, &mut s)
                .is_none()
        );
        let b = body.aabb;
        assert!((b.hi - V3::new(0.5, 0.5, 1.0)).norm() < 1e-12, "{b:?}");
    }

    #[test]
    fn pose_matrix_is_row_major() {
        let p = Pose::new(rot_z(std::f64::consts::FRAC_PI_2), V3::new(1.0, 2.0, 3.0));
        let m = p.to_rows();
        let q = p.apply(&V3::new(1.0, 0.0, 0.0));
        let r: Vec<f64> = (0..3).map(|i| m[i][0] + m[i][3]).collect();
        assert!((q - V3::new(r[0], r[1], r[2])).norm() < 1e-12);
        assert!((q - V3::new(1.0, 3.0, 3.0)).norm() < 1e-12);
    }
}
