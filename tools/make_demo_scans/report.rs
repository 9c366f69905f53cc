//! What was generated: `truth.json` (serde structs, so the schema lives here) and `README.md`.

use crate::solid::Pose;
use nalgebra::Rotation3;
use serde::Serialize;

/// A rigid transform (the library's [`Pose`]) with its human-readable parts, as `truth.json`
/// records it.
#[derive(Debug, Clone, Serialize)]
pub struct TransformRecord {
    /// 4×4 homogeneous matrix, row-major, mapping source coordinates to target coordinates.
    pub matrix: [[f64; 4]; 4],
    /// Rotation angle, degrees (0..=180).
    pub rotation_angle_deg: f64,
    /// Unit rotation axis (right-hand rule).
    pub rotation_axis: [f64; 3],
    /// Translation (the image of the source origin).
    pub translation: [f64; 3],
}

impl TransformRecord {
    /// From a pose.
    pub fn from_pose(p: &Pose) -> TransformRecord {
        let rot = Rotation3::from_matrix_unchecked(p.rotation);
        let (axis, angle) = rot
            .axis_angle()
            .map(|(a, g)| ([a.x, a.y, a.z], g.to_degrees()))
            .unwrap_or(([0.0, 0.0, 1.0], 0.0));
        TransformRecord {
            matrix: p.to_rows(),
            rotation_angle_deg: angle,
            rotation_axis: axis,
            translation: [p.translation.x, p.translation.y, p.translation.z],
        }
    }
}

/// One station file.
#[derive(Debug, Clone, Serialize)]
pub struct StationTruth {
    /// File name within the output folder.
    pub file: String,
    /// Number of points.
    pub points: usize,
    /// Frame of the coordinates in the file.
    pub frame: String,
    /// Instrument centre in this file's coordinates, metres.
    pub instrument_in_file: [f64; 3],
    /// Instrument centre in station 1's file (project) coordinates, metres.
    pub instrument_in_project: [f64; 3],
    /// Instrument tilt about x and y and heading about z, degrees, relative to the project frame
    /// (`R = Rz(heading) · Ry(tilt_y) · Rx(tilt_x)`, mapping instrument axes to project axes).
    pub tilt_x_deg: f64,
    /// See `tilt_x_deg`.
    pub tilt_y_deg: f64,
    /// See `tilt_x_deg`.
    pub heading_deg: f64,
    /// Lower corner of the points' bounding box in file coordinates.
    pub bounds_min: [f64; 3],
    /// Upper corner.
    pub bounds_max: [f64; 3],
}

/// The depot scans.
#[derive(Debug, Clone, Serialize)]
pub struct DepotTruth {
    /// Scanner settings in words.
    pub scanner: String,
    /// Angular step, degrees (azimuth and elevation).
    pub angular_step_deg: f64,
    /// Elevation range, degrees.
    pub elevation_range_deg: [f64; 2],
    /// Maximum range, metres.
    pub max_range_m: f64,
    /// Range noise, metres (standard deviation).
    pub range_sigma_m: f64,
    /// Station 1 (project frame).
    pub station1: StationTruth,
    /// Station 2 (its own instrument frame).
    pub station2: StationTruth,
    /// Maps station 2's file coordinates into station 1's file coordinates.
    pub station2_to_station1: TransformRecord,
    /// Distance between the two instrument centres, metres.
    pub station_distance_m: f64,
}

/// One part.
#[derive(Debug, Clone, Serialize)]
pub struct PartTruth {
    /// Part name.
    pub name: String,
    /// What it is.
    pub description: String,
    /// Reference scan file (canonical frame, with normals).
    pub reference_file: String,
    /// Its number of points.
    pub reference_points: usize,
    /// Partial scan file (scanner frame).
    pub scan_file: String,
    /// Its number of points.
    pub scan_points: usize,
    /// Maps the canonical (reference) frame into the partial scan's frame, millimetres.
    pub pose: TransformRecord,
    /// Rotations that map the part onto itself (besides the identity), in words.
    pub symmetry: String,
}

/// The defective copy.
#[derive(Debug, Clone, Serialize)]
pub struct DefectTruth {
    /// Which part.
    pub part: String,
    /// File of the defective partial scan.
    pub file: String,
    /// Number of points.
    pub points: usize,
    /// What is wrong, in words.
    pub defect: String,
    /// Centre of the defect on the part, canonical frame, mm.
    pub location_canonical: [f64; 3],
    /// Centre of the defect in the scan's frame, mm.
    pub location_in_scan: [f64; 3],
    /// Pose of the part in the defective scan (the same as the intact partial scan).
    pub pose: TransformRecord,
}

/// Everything true about the demo data.
#[derive(Debug, Clone, Serialize)]
pub struct Truth {
    /// A note on what this is.
    pub note: String,
    /// Transform convention.
    pub convention: String,
    /// Depot scans (metres).
    pub depot: DepotTruth,
    /// Parts (millimetres).
    pub parts: Vec<PartTruth>,
    /// The defective partial scan.
    pub defect: DefectTruth,
    /// Command that regenerates every file.
    pub regenerate: String,
}

fn mat(m: &[[f64; 4]; 4], decimals: usize) -> String {
    let mut s = String::from("```\n");
    for row in m {
        let cells: Vec<String> = row
            .iter()
            .map(|v| format!("{:>w$.d$}", v, w = decimals + 10, d = decimals))
            .collect();
        s.push_str(&cells.join(" "));
        s.push('\n');
    }
    s.push_str("```\n");
    s
}

fn v3(v: &[f64; 3], decimals: usize) -> String {
    format!("({:.d$}, {:.d$}, {:.d$})", v[0], v[1], v[2], d = decimals)
}

fn mib(bytes: u64) -> String {
    format!("{:.2} MB", bytes as f64 / 1e6)
}

/// The README text. `sizes` gives the size in bytes of each file, keyed by relative path.
pub fn readme(t: &Truth, sizes: &dyn Fn(&str) -> u64) -> String {
    let d = &t.depot;
    let (s1, s2) = (&d.station1, &d.station2);
    let r = &d.station2_to_station1;
    let mut o = String::new();
    o.push_str("# Demo scans\n\n");
    o.push_str(
        "Everything in this folder is **synthetic**: generated by a program in this repository from \
         an invented scene and invented parts. The depot yard, its coordinates and the parts do not \
         exist anywhere; no real site, company or person is depicted. The coordinate grid of the \
         depot is a made-up local grid, not a real map projection.\n\n",
    );
    o.push_str("Regenerate every file (same bytes on every run, any number of threads):\n\n");
    o.push_str(&format!(
        "```\n{}\n```\n\nA run takes a few seconds on two cores after the build. The generator \
         lives in `tools/make_demo_scans.rs` and `tools/make_demo_scans/`.\n\n",
        t.regenerate
    ));
    o.push_str("The true transforms are in `truth.json` as well (row-major 4×4, source → target, f64).\n\n");

    o.push_str("## Files\n\n| file | points | size | frame |\n|---|---:|---:|---|\n");
    for s in [s1, s2] {
        o.push_str(&format!(
            "| `{}` | {} | {} | {} |\n",
            s.file,
            s.points,
            mib(sizes(&s.file)),
            s.frame
        ));
    }
    for p in &t.parts {
        o.push_str(&format!(
            "| `{}` | {} | {} | canonical frame of the {}, with outward normals |\n",
            p.reference_file,
            p.reference_points,
            mib(sizes(&p.reference_file)),
            p.name
        ));
    }
    for p in &t.parts {
        o.push_str(&format!(
            "| `{}` | {} | {} | scanner frame |\n",
            p.scan_file,
            p.scan_points,
            mib(sizes(&p.scan_file)),
        ));
    }
    o.push_str(&format!(
        "| `{}` | {} | {} | scanner frame, defective {} |\n",
        t.defect.file,
        t.defect.points,
        mib(sizes(&t.defect.file)),
        t.defect.part
    ));
    o.push_str("| `truth.json` | | | every true pose and transform |\n\n");

    o.push_str("## Depot yard (metres)\n\n");
    o.push_str(
        "A small yard on gently sloping ground (1.2 % rising to the east, 0.6 % falling to the north) \
         with a kerb, four sheds with pitched roofs and a door recess each, a row of three \
         container-like boxes (two carry a second box) and one more standing apart, a pole line \
         of five poles with cross-arms and two sagging wires, six bollards and four drums.\n\n",
    );
    o.push_str(&format!(
        "Each station is a simulated terrestrial laser scan: {}. Beams return the nearest surface \
         (occluded areas stay empty), the point spacing grows with range, the intensity (u16) \
         follows the surface reflectivity and the incidence angle, with noise. Classification: 2 \
         ground and kerb, 6 sheds, 14 wires, 1 everything else. GPS time is seconds of the week \
         along the scan. LAS 1.4, point format 1, scale 0.001 m.\n\n",
        d.scanner
    ));
    o.push_str(&format!(
        "- `{}` is in the **project frame** (a made-up grid: easting, northing, height). Instrument \
         centre at {} in that frame, levelled.\n",
        s1.file,
        v3(&s1.instrument_in_project, 3)
    ));
    o.push_str(&format!(
        "- `{}` is in its **own instrument frame** (origin at the instrument centre, z along the \
         instrument's vertical axis, x towards the start of its turn): not levelled (tilt {:.2}° \
         about x, {:.2}° about y) and with heading {:.2}° about z. Its centre is at {} in the \
         project frame, {:.2} m from station 1.\n\n",
        s2.file,
        s2.tilt_x_deg,
        s2.tilt_y_deg,
        s2.heading_deg,
        v3(&s2.instrument_in_project, 3),
        d.station_distance_m
    ));
    o.push_str("True transform mapping station 2's file coordinates into station 1's file coordinates:\n\n");
    o.push_str(&mat(&r.matrix, 9));
    o.push_str(&format!(
        "\nIn words: rotate by {:.4}° about the axis {}, then translate by {} m.\n\n",
        r.rotation_angle_deg,
        v3(&r.rotation_axis, 6),
        v3(&r.translation, 3)
    ));
    o.push_str(&format!(
        "Bounds (file coordinates): station 1 {} – {}; station 2 {} – {}.\n\n",
        v3(&s1.bounds_min, 3),
        v3(&s1.bounds_max, 3),
        v3(&s2.bounds_min, 3),
        v3(&s2.bounds_max, 3)
    ));

    o.push_str("## Tray of parts (millimetres)\n\n");
    o.push_str(
        "Five machined parts of our own design. `parts/reference/` holds a full scan of each part in \
         its canonical frame: the whole closed surface sampled on a jittered grid (about uniform \
         density), with outward unit normals. `parts/tray/` holds a partial scan of each part as a \
         structured-light scanner sees it: the part under a uniformly random rotation and a \
         translation, camera at the origin looking along +z, projector 150 mm along +x; only \
         surfaces that face camera and projector and are seen by both are measured, one point per \
         camera pixel (0.6 mrad pitch), noise σ = 0.03 mm along the viewing ray, background \
         removed. Each part stands about 13 times its bounding radius from the camera, so that \
         it spans about 320 pixels. The flange's rotation was redrawn until one of its faces \
         looked at the camera within 50°, so that its defective copy shows the defect. \
         Binary little-endian PLY, x, y, z as double; the reference files also carry outward \
         unit normals (nx, ny, nz as float), the tray scans carry positions only (no normals).\n\n",
    );
    o.push_str("| part | description | symmetry |\n|---|---|---|\n");
    for p in &t.parts {
        o.push_str(&format!(
            "| {} | {} | {} |\n",
            p.name, p.description, p.symmetry
        ));
    }
    o.push_str(
        "\nTrue poses, mapping the canonical (reference) frame into the partial scan's frame:\n\n",
    );
    for p in &t.parts {
        o.push_str(&format!(
            "**{}** (`{}`): rotation {:.4}° about {}, translation {} mm.\n\n",
            p.name,
            p.scan_file,
            p.pose.rotation_angle_deg,
            v3(&p.pose.rotation_axis, 6),
            v3(&p.pose.translation, 3)
        ));
        o.push_str(&mat(&p.pose.matrix, 9));
        o.push('\n');
    }
    o.push_str(&format!(
        "## Defective copy\n\n`{}` is the {} scanned in the same pose, by the same scanner, with the \
         same noise as `{}`, but with a defect: {}. Its centre is at {} mm in the canonical frame, \
         {} mm in the scan frame. Away from the defect both files hold the same points.\n",
        t.defect.file,
        t.defect.part,
        t.parts
            .iter()
            .find(|p| p.name == t.defect.part)
            .map_or("", |p| p.scan_file.as_str()),
        t.defect.defect,
        v3(&t.defect.location_canonical, 2),
        v3(&t.defect.location_in_scan, 2)
    ));
    o
}
