//! The depot yard: an invented scene in a local frame (metres; x east, y north, z up; the
//! ground passes through the origin). Sloping ground with a kerb, four sheds with pitched roofs
//! and door recesses, a row of container-like boxes (two stacked) plus one on its own, a pole line
//! with cross-arms and sagging wires, bollards and drums.

use crate::solid::{Body, Convex, Frustum, Pose, Solid, V3};

/// Surface class written to the LAS classification field (ASPRS codes).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Class {
    /// Ground and kerb (2).
    Ground,
    /// Sheds (6, building).
    Building,
    /// Containers, poles, bollards, drums (1, unclassified).
    Other,
    /// Wires (14, wire conductor).
    Wire,
}

impl Class {
    /// The ASPRS classification code.
    pub fn code(self) -> u8 {
        match self {
            Class::Ground => 2,
            Class::Building => 6,
            Class::Other => 1,
            Class::Wire => 14,
        }
    }
}

/// One thing in the scene.
#[derive(Debug, Clone)]
pub struct Object {
    /// Geometry.
    pub body: Body,
    /// Diffuse reflectivity at the scanner's wavelength, 0..1.
    pub reflectivity: f64,
    /// Classification code to write.
    pub class: Class,
}

/// The whole scene.
#[derive(Debug, Clone)]
pub struct Scene {
    /// Every object; the ground is the first.
    pub objects: Vec<Object>,
}

/// Ground slope: height gain per metre east and per metre north.
const SLOPE_X: f64 = 0.012;
const SLOPE_Y: f64 = -0.006;
/// How far objects are sunk into the ground so that the slope leaves no gap beneath them.
const SINK: f64 = 0.08;

/// Ground height at `(x, y)`.
pub fn ground_z(x: f64, y: f64) -> f64 {
    SLOPE_X * x + SLOPE_Y * y
}

fn ground_normal() -> V3 {
    V3::new(-SLOPE_X, -SLOPE_Y, 1.0).normalize()
}

/// A pose standing on the ground at `(x, y)`, turned by `heading_deg` (counter-clockwise from
/// east), with `lift` metres added to the ground height.
fn on_ground(x: f64, y: f64, heading_deg: f64, lift: f64) -> Pose {
    Pose::new(
        crate::solid::rot_z(heading_deg.to_radians()),
        V3::new(x, y, ground_z(x, y) + lift),
    )
}

fn ground(half: f64) -> Solid {
    let n = ground_normal();
    Convex::from_planes(vec![
        (n, 0.0),
        (-V3::z(), 3.0),
        (V3::x(), half),
        (-V3::x(), half),
        (V3::y(), half),
        (-V3::y(), half),
    ])
    .into()
}

fn kerb(y: f64, x0: f64, x1: f64) -> Solid {
    let n = ground_normal();
    Convex::from_planes(vec![
        (n, 0.15 * n.z),
        (-n, 0.10),
        (V3::y(), y + 0.15),
        (-V3::y(), -(y - 0.15)),
        (V3::x(), x1),
        (-V3::x(), -x0),
    ])
    .into()
}

/// A shed: walls with a door recess, and a pitched roof with overhang, as two objects.
fn shed(x: f64, y: f64, heading: f64, len: f64, wid: f64, wall: f64, rise: f64) -> [Solid; 2] {
    let pose = on_ground(x, y, heading, 0.0);
    let walls = Convex::between(
        V3::new(-len / 2.0, -wid / 2.0, -SINK),
        V3::new(len / 2.0, wid / 2.0, wall),
        &pose,
    );
    let door_x = len * 0.18;
    let recess = Convex::between(
        V3::new(door_x - 0.5, -wid / 2.0 - 0.2, 0.0),
        V3::new(door_x + 0.5, -wid / 2.0 + 0.12, 2.05),
        &pose,
    );
    let eave = wid / 2.0 + 0.3;
    let over = 0.2;
    let up = V3::new(0.0, rise, eave).normalize();
    let down = V3::new(0.0, -rise, eave).normalize();
    let ridge = V3::new(0.0, 0.0, wall + rise);
    let roof = Convex::from_planes(vec![
        (-V3::z(), -(wall - 0.03)),
        (V3::x(), len / 2.0 + over),
        (-V3::x(), len / 2.0 + over),
        (up, up.dot(&ridge)),
        (down, down.dot(&ridge)),
    ])
    .transformed(&pose);
    [Solid::minus(walls, recess), roof.into()]
}

/// Container-like box, 6.06 × 2.44 × 2.59 m, bottom `lift` above the ground.
fn container(x: f64, y: f64, heading: f64, lift: f64) -> Solid {
    let pose = on_ground(x, y, heading, lift);
    Convex::between(
        V3::new(-3.03, -1.22, -0.05),
        V3::new(3.03, 1.22, 2.54),
        &pose,
    )
    .into()
}

fn pole(x: f64, y: f64) -> [Solid; 2] {
    let g = ground_z(x, y);
    let post = Frustum::new(V3::new(x, y, g - 0.5), V3::new(x, y, g + 9.0), 0.15, 0.12);
    let arm = Convex::between(
        V3::new(-0.06, -1.1, 8.3),
        V3::new(0.06, 1.1, 8.42),
        &Pose::translation(V3::new(x, y, g)),
    );
    [post.into(), arm.into()]
}

/// A sagging wire between two points as short cylinders (parabolic sag, `sag` metres mid-span).
fn wire(a: V3, b: V3, sag: f64, pieces: usize) -> Vec<Solid> {
    let at = |s: f64| a + (b - a) * s - V3::z() * (4.0 * sag * s * (1.0 - s));
    (0..pieces)
        .map(|i| {
            let p = at(i as f64 / pieces as f64);
            let q = at((i + 1) as f64 / pieces as f64);
            Frustum::cylinder(p, q, 0.011).into()
        })
        .collect()
}

fn bollard(x: f64, y: f64) -> Solid {
    let g = ground_z(x, y);
    Solid::Union(vec![
        Frustum::cylinder(V3::new(x, y, g - SINK), V3::new(x, y, g + 1.0), 0.1).into(),
        Frustum::new(V3::new(x, y, g + 1.0), V3::new(x, y, g + 1.07), 0.1, 0.05).into(),
    ])
}

fn drum_upright(x: f64, y: f64) -> Solid {
    let g = ground_z(x, y);
    Frustum::cylinder(V3::new(x, y, g - 0.02), V3::new(x, y, g + 0.88), 0.29).into()
}

fn drum_lying(x: f64, y: f64, heading_deg: f64) -> Solid {
    let pose = on_ground(x, y, heading_deg, 0.27);
    let a = pose.apply(&V3::new(-0.44, 0.0, 0.0));
    let b = pose.apply(&V3::new(0.44, 0.0, 0.0));
    Frustum::cylinder(a, b, 0.29).into()
}

impl Scene {
    /// Builds the depot.
    pub fn depot() -> Scene {
        let mut objects = Vec::new();
        let mut add = |solid: Solid, reflectivity: f64, class: Class| {
            objects.push(Object {
                body: Body::new(solid),
                reflectivity,
                class,
            })
        };
        add(ground(75.0), 0.14, Class::Ground);
        add(kerb(-8.0, -45.0, 45.0), 0.38, Class::Ground);

        // Sheds: position, heading, length, width, wall height, roof rise; wall and roof
        // reflectivity.
        let sheds = [
            (-14.0, 6.0, 80.0, 6.0, 4.0, 2.6, 0.9, 0.55, 0.30),
            (-15.5, -3.5, 95.0, 5.0, 3.5, 2.4, 0.7, 0.62, 0.22),
            (24.0, 21.0, -20.0, 7.0, 4.5, 2.9, 1.1, 0.48, 0.35),
            (27.0, 1.0, 210.0, 4.0, 3.0, 2.3, 0.6, 0.58, 0.28),
        ];
        for (x, y, h, l, w, wall, rise, rw, rr) in sheds {
            let [walls, roof] = shed(x, y, h, l, w, wall, rise);
            add(walls, rw, Class::Building);
            add(roof, rr, Class::Building);
        }

        // A row of containers, two of them carrying a second tier, and one standing apart.
        let row = [(-6.0, 0.42), (0.6, 0.25), (7.2, 0.51)];
        for (i, (x, refl)) in row.into_iter().enumerate() {
            let y = 18.0 + x * 0.05;
            add(container(x, y, 3.0, 0.0), refl, Class::Other);
            if i < 2 {
                add(
                    container(x + 0.1, y, 3.0, 2.59),
                    0.33 + 0.1 * i as f64,
                    Class::Other,
                );
            }
        }
        add(container(-3.0, 32.0, 62.0, 0.0), 0.45, Class::Other);

        // Pole line along y = -14 with three wires.
        let xs = [-30.0, -15.0, 0.0, 15.0, 30.0];
        for &x in &xs {
            let [post, arm] = pole(x, -14.0);
            add(post, 0.40, Class::Other);
            add(arm, 0.36, Class::Other);
        }
        for w in xs.windows(2) {
            for dy in [-0.95, 0.95] {
                let za = ground_z(w[0], -14.0 + dy) + 8.43;
                let zb = ground_z(w[1], -14.0 + dy) + 8.43;
                for piece in wire(
                    V3::new(w[0], -14.0 + dy, za),
                    V3::new(w[1], -14.0 + dy, zb),
                    0.35,
                    10,
                ) {
                    add(piece, 0.10, Class::Wire);
                }
            }
        }

        // Bollards along the kerb and a few drums by the small shed.
        for x in [-9.0, -6.0, -3.0, 3.0, 6.0, 9.0] {
            add(bollard(x, -6.6), 0.70, Class::Other);
        }
        add(drum_upright(22.6, -2.2), 0.55, Class::Other);
        add(drum_upright(23.3, -2.6), 0.50, Class::Other);
        add(drum_upright(22.9, -1.5), 0.60, Class::Other);
        add(drum_lying(24.2, -1.4, 35.0), 0.52, Class::Other);
        Scene { objects }
    }
}
