//! Draws the two report pictures for a synthetic scene: a box and a cylinder on a ground patch,
//! and a rotated, shifted copy of it registered back.
//!
//! Usage: `cargo run --example report_views -- OUTPUT_FOLDER`

use std::path::PathBuf;

use equiscan::Cloud;
use equiscan::geometry::Rigid;
use equiscan::report::{
    ColourMap, FigureText, LAYER_PALETTE, Layer, ScalarField, render_alignment_views,
    render_cloud_views,
};

/// A small seeded generator (xorshift64*), so the pictures are the same every run.
struct Rng(u64);

impl Rng {
    fn unit(&mut self) -> f64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        (self.0.wrapping_mul(0x2545_f491_4f6c_dd1d) >> 11) as f64 / (1u64 << 53) as f64
    }
    fn range(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.unit()
    }
}

/// Ground 12 x 9 m, a 4 x 3 x 2 m box, a cylinder of radius 1 m and height 3 m; local metres.
fn scene(rng: &mut Rng) -> Vec<[f64; 3]> {
    let mut pts = Vec::new();
    for _ in 0..40_000 {
        pts.push([rng.range(-6.0, 6.0), rng.range(-4.5, 4.5), 0.0]);
    }
    for _ in 0..25_000 {
        // Box faces (not the bottom), area-weighted by picking a face at random.
        let (x, y, z) = (
            rng.range(-5.0, -1.0),
            rng.range(-3.5, -0.5),
            rng.range(0.0, 2.0),
        );
        let p = match (rng.unit() * 5.0) as u32 {
            0 => [x, y, 2.0],
            1 => [-5.0, y, z],
            2 => [-1.0, y, z],
            3 => [x, -3.5, z],
            _ => [x, -0.5, z],
        };
        pts.push(p);
    }
    for _ in 0..20_000 {
        let a = rng.range(0.0, std::f64::consts::TAU);
        pts.push([2.5 + a.cos(), 1.5 + a.sin(), rng.range(0.0, 3.0)]);
    }
    for p in &mut pts {
        for v in p.iter_mut() {
            *v += rng.range(-0.01, 0.01);
        }
    }
    pts
}

/// Rotation by `deg` degrees about the unit `axis` (Rodrigues).
fn rotation(axis: [f64; 3], deg: f64) -> [[f64; 3]; 3] {
    let n = (axis[0] * axis[0] + axis[1] * axis[1] + axis[2] * axis[2]).sqrt();
    let [x, y, z] = axis.map(|v| v / n);
    let (s, c) = deg.to_radians().sin_cos();
    let t = 1.0 - c;
    [
        [t * x * x + c, t * x * y - s * z, t * x * z + s * y],
        [t * x * y + s * z, t * y * y + c, t * y * z - s * x],
        [t * x * z - s * y, t * y * z + s * x, t * z * z + c],
    ]
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let folder = PathBuf::from(
        std::env::args()
            .nth(1)
            .ok_or("give the output folder as the first argument")?,
    );
    let mut rng = Rng(0x5eed_1234_abcd_0042);
    let offset = [638_850.0, 4_853_120.0, 120.0];
    let local = scene(&mut rng);
    let target: Vec<[f64; 3]> = local
        .iter()
        .map(|p| std::array::from_fn(|k| p[k] + offset[k]))
        .collect();

    // The source is the scene rotated about its own centre and shifted: p_s = R p + t.
    let r = rotation([0.12, -0.80, 0.58], 37.21);
    let shift = [3.0, -2.0, 0.5];
    let source: Vec<[f64; 3]> = local
        .iter()
        .step_by(2)
        .map(|p| {
            std::array::from_fn(|i| {
                r[i][0] * p[0] + r[i][1] * p[1] + r[i][2] * p[2] + shift[i] + offset[i]
            })
        })
        .collect();
    // Source to target, in global coordinates: p = R^T (p_s - offset - t) + offset.
    let mut transform = [[0.0; 4]; 4];
    for i in 0..3 {
        let mut tr = offset[i];
        for j in 0..3 {
            transform[i][j] = r[j][i];
            tr -= r[j][i] * (shift[j] + offset[j]);
        }
        transform[i][3] = tr;
    }
    transform[3][3] = 1.0;

    let source = Cloud::from_global(&source);
    let target = Cloud::from_global(&target);
    let layers = [
        Layer::from_cloud("source", LAYER_PALETTE[0], &source).moved_after(Rigid::new(
            nalgebra::Matrix3::from_fn(|i, j| transform[i][j]),
            nalgebra::Vector3::new(transform[0][3], transform[1][3], transform[2][3]),
        )),
        Layer::from_cloud("target", LAYER_PALETTE[1], &target),
    ];
    let text = FigureText {
        title: "Registration of source.ply onto target.ply".into(),
        lines: vec![
            "rotation 37.21\u{b0} about (0.12, -0.80, 0.58)".into(),
            "translation (3.000, -2.000, 0.500) m".into(),
            "inlier RMSE 0.0042 m".into(),
            "overlap 63 %".into(),
            "inliers 1834 of 5120 correspondences".into(),
            "verdict: confident".into(),
        ],
        footer: "Synthetic scene. Check the after row: the layers should overlap everywhere."
            .into(),
        unit: "m".into(),
        warning: String::new(),
    };
    let path = folder.join("alignment.png");
    render_alignment_views(&layers, &text, &path)?;
    println!("wrote {}", path.display());

    let height: Vec<f32> = target.positions.iter().map(|p| p[2]).collect();
    let field = ScalarField {
        values: &height,
        name: "height above origin (m)".into(),
        range: None,
        map: ColourMap::Sequential,
    };
    let text = FigureText {
        title: "target.ply coloured by height".into(),
        lines: vec![format!("{} points", target.len())],
        footer: "Colours clamp at the 1st and 99th percentiles.".into(),
        unit: "m".into(),
        warning: String::new(),
    };
    let path = folder.join("cloud.png");
    render_cloud_views(&target, Some(&field), &text, &path)?;
    println!("wrote {}", path.display());

    // A made-up signed deviation (a gentle bulge around the cylinder), on a diverging map
    // with a range symmetric about zero.
    let deviation: Vec<f32> = target
        .positions
        .iter()
        .map(|p| {
            let d = ((p[0] - 2.5).powi(2) + (p[1] - 1.5).powi(2)).sqrt();
            0.004 * (1.5 - d).clamp(-1.0, 1.0)
        })
        .collect();
    let field = ScalarField {
        values: &deviation,
        name: "deviation (m)".into(),
        range: Some([-0.004, 0.004]),
        map: ColourMap::Diverging,
    };
    let text = FigureText {
        title: "target.ply against its reference".into(),
        lines: vec!["tolerance +/-0.004 m".into()],
        footer: "Blue: below the reference; red: above.".into(),
        unit: "m".into(),
        warning: String::new(),
    };
    let path = folder.join("deviation.png");
    render_cloud_views(&target, Some(&field), &text, &path)?;
    println!("wrote {}", path.display());
    Ok(())
}
