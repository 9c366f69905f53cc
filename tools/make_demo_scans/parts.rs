//! Five machined parts of our own design, in millimetres, each in its canonical frame.
//!
//! | part | canonical frame |
//! |---|---|
//! | bracket | outer corner of the bend at the origin, base plate on z = 0 along +x, leg up +z |
//! | flange | axis +z, back face on z = 0 |
//! | shaft | axis +z from z = 0 to z = 120 |
//! | elbow | bend centre at the origin, bend in the xy plane, ends along -y and -x |
//! | nut | axis +z, faces on z = 0 and z = 19 |

use crate::solid::{Convex, Frustum, Pose, Solid, TorusSegment, V3};
use std::f64::consts::{FRAC_PI_2, PI};

/// A named part.
#[derive(Debug, Clone)]
pub struct Part {
    /// File-name stem.
    pub name: &'static str,
    /// One line for the README.
    pub description: &'static str,
    /// Geometry in the canonical frame.
    pub solid: Solid,
}

fn z_cyl(x: f64, y: f64, z0: f64, z1: f64, r: f64) -> Solid {
    Frustum::cylinder(V3::new(x, y, z0), V3::new(x, y, z1), r).into()
}

fn between(lo: [f64; 3], hi: [f64; 3]) -> Convex {
    Convex::between(V3::from(lo), V3::from(hi), &Pose::translation(V3::zeros()))
}

/// L-angle bracket, 80 × 50 base, 60 high leg, 6 mm plate, a central gusset, two Ø9 holes in
/// the base and one Ø11 hole in the leg.
pub fn bracket() -> Part {
    let base = between([0.0, -25.0, 0.0], [80.0, 25.0, 6.0]);
    let leg = between([0.0, -25.0, 0.0], [6.0, 25.0, 60.0]);
    let gusset = Convex::from_planes(vec![
        (V3::y(), 3.0),
        (-V3::y(), 3.0),
        (-V3::x(), -5.0),
        (-V3::z(), -5.0),
        (V3::new(1.0, 0.0, 1.0).normalize(), 40.0 / 2f64.sqrt()),
    ]);
    let holes = Solid::Union(vec![
        z_cyl(58.0, -14.0, -1.0, 7.0, 4.5),
        z_cyl(58.0, 14.0, -1.0, 7.0, 4.5),
        Frustum::cylinder(V3::new(-1.0, 13.0, 44.0), V3::new(7.0, 13.0, 44.0), 5.5).into(),
    ]);
    Part {
        name: "bracket",
        description: "L-angle bracket: 80 × 50 mm base, 60 mm leg, 6 mm plate, gusset, three holes",
        solid: Solid::minus(
            Solid::Union(vec![base.into(), leg.into(), gusset.into()]),
            holes,
        ),
    }
}

/// Number of bolt holes of the flange and the one left undrilled in the defective copy.
pub const FLANGE_BOLTS: usize = 6;

/// Flange: Ø120 × 14 disc, Ø60 hub to 38 mm with a 2 mm chamfer, Ø32 bore, Ø13 bolt holes on
/// a Ø92 pitch circle. `skip_hole` leaves one bolt hole undrilled.
pub fn flange(skip_hole: Option<usize>) -> Part {
    let body = Solid::Union(vec![
        z_cyl(0.0, 0.0, 0.0, 14.0, 60.0),
        z_cyl(0.0, 0.0, 13.0, 36.0, 30.0),
        Frustum::new(V3::new(0.0, 0.0, 36.0), V3::new(0.0, 0.0, 38.0), 30.0, 28.0).into(),
    ]);
    let mut holes = vec![z_cyl(0.0, 0.0, -1.0, 39.0, 16.0)];
    for k in 0..FLANGE_BOLTS {
        if Some(k) == skip_hole {
            continue;
        }
        let a = k as f64 * 2.0 * PI / FLANGE_BOLTS as f64;
        holes.push(z_cyl(46.0 * a.cos(), 46.0 * a.sin(), -1.0, 15.0, 6.5));
    }
    Part {
        name: "flange",
        description: "flange: Ø120 × 14 mm disc, Ø60 hub to 38 mm, Ø32 bore, 6 × Ø13 holes on Ø92",
        solid: Solid::minus(body, Solid::Union(holes)),
    }
}

/// Centre of bolt hole `k` of the flange on its front (z = 14) face.
pub fn flange_hole_centre(k: usize) -> V3 {
    let a = k as f64 * 2.0 * PI / FLANGE_BOLTS as f64;
    V3::new(46.0 * a.cos(), 46.0 * a.sin(), 14.0)
}

/// Stepped shaft along z: Ø20 × 30, Ø30 × 50 with an 8 × 4 keyway, Ø25 × 40; 1 mm end chamfers.
pub fn shaft() -> Part {
    let body = Solid::Union(vec![
        Frustum::new(V3::zeros(), V3::new(0.0, 0.0, 1.0), 9.0, 10.0).into(),
        z_cyl(0.0, 0.0, 1.0, 30.0, 10.0),
        z_cyl(0.0, 0.0, 30.0, 80.0, 15.0),
        z_cyl(0.0, 0.0, 80.0, 119.0, 12.5),
        Frustum::new(
            V3::new(0.0, 0.0, 119.0),
            V3::new(0.0, 0.0, 120.0),
            12.5,
            11.5,
        )
        .into(),
    ]);
    let keyway = between([-4.0, 11.0, 40.0], [4.0, 16.0, 72.0]);
    Part {
        name: "shaft",
        description: "stepped shaft: Ø20 × 30, Ø30 × 50 with 8 × 4 keyway, Ø25 × 40 mm, chamfered ends",
        solid: Solid::minus(body, keyway),
    }
}

/// 90° pipe elbow: outer Ø48.3, wall 3.7, bend radius 72, straight ends 40 and 25 mm.
pub fn elbow() -> Part {
    let (big_r, ro, ri) = (72.0, 24.15, 20.45);
    let tube = |r: f64, extra: f64| -> Solid {
        Solid::Union(vec![
            TorusSegment::new(V3::zeros(), V3::x(), V3::y(), big_r, r, FRAC_PI_2).into(),
            Frustum::cylinder(
                V3::new(big_r, 0.0, 0.0),
                V3::new(big_r, -40.0 - extra, 0.0),
                r,
            )
            .into(),
            Frustum::cylinder(
                V3::new(0.0, big_r, 0.0),
                V3::new(-25.0 - extra, big_r, 0.0),
                r,
            )
            .into(),
        ])
    };
    // The bore's straight parts start a little inside the bend so that the joints overlap.
    let bore = Solid::Union(vec![
        tube(ri, 1.0),
        Frustum::cylinder(V3::new(big_r, 0.5, 0.0), V3::new(big_r, -1.0, 0.0), ri).into(),
        Frustum::cylinder(V3::new(0.5, big_r, 0.0), V3::new(-1.0, big_r, 0.0), ri).into(),
    ]);
    Part {
        name: "elbow",
        description: "90° pipe elbow: outer Ø48.3, wall 3.7, bend radius 72, straight ends 40 and 25 mm",
        solid: Solid::minus(tube(ro, 0.0), bore),
    }
}

/// Hex nut: 36 across flats, 19 high, Ø21 bore with 1.5 mm countersinks, 30° chamfers.
pub fn nut() -> Part {
    let (s, h) = (36.0, 19.0);
    let mut planes: Vec<(V3, f64)> = (0..6)
        .map(|k| {
            let a = k as f64 * PI / 3.0;
            (V3::new(a.cos(), a.sin(), 0.0), s / 2.0)
        })
        .collect();
    planes.push((V3::z(), h));
    planes.push((-V3::z(), 0.0));
    let hex = Convex::from_planes(planes);
    // 30° chamfer cones: radius 0.95·s/2 on the faces, growing by dz / tan 30°.
    let rc = 0.95 * s / 2.0;
    let grow = (h / 2.0) / (30f64.to_radians().tan());
    let chamfer = Solid::Union(vec![
        Frustum::new(
            V3::new(0.0, 0.0, -0.01),
            V3::new(0.0, 0.0, h / 2.0),
            rc,
            rc + grow,
        )
        .into(),
        Frustum::new(
            V3::new(0.0, 0.0, h + 0.01),
            V3::new(0.0, 0.0, h / 2.0),
            rc,
            rc + grow,
        )
        .into(),
    ]);
    let rb = 10.5;
    let bore = Solid::Union(vec![
        z_cyl(0.0, 0.0, -1.0, h + 1.0, rb),
        Frustum::new(
            V3::new(0.0, 0.0, -1.0),
            V3::new(0.0, 0.0, 1.5),
            rb + 2.5,
            rb,
        )
        .into(),
        Frustum::new(
            V3::new(0.0, 0.0, h + 1.0),
            V3::new(0.0, 0.0, h - 1.5),
            rb + 2.5,
            rb,
        )
        .into(),
    ]);
    Part {
        name: "nut",
        description: "hex nut: 36 mm across flats, 19 mm high, Ø21 bore, 30° chamfers, countersunk",
        solid: Solid::minus(Solid::Inter(vec![hex.into(), chamfer]), bore),
    }
}

/// All five parts in a fixed order.
pub fn all() -> Vec<Part> {
    vec![bracket(), flange(None), shaft(), elbow(), nut()]
}
