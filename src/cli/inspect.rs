//! `equiscan inspect SCAN --reference REF [--part NAME --catalogue FILE] [--tolerance T |
//! --tolerance-class f|m|c|v] -o OUT [--picture PNG] [--report JSON] [--json]`: register a
//! scan onto its reference and measure every point's signed deviation (positive outside the
//! material). Exit 0 within tolerance, 1 outside, 2 on an error (nothing written).

use std::path::{Path, PathBuf};

use equiscan::io::guard::{check_extension, check_outputs};
use equiscan::io::{read_cloud, write_atomic};
use equiscan::parts::catalogue;
use equiscan::parts::inspect::inspect;
use equiscan::parts::reference::{Prepared, Reference};
use equiscan::parts::register::{FitParams, PoseVerdict};
use equiscan::parts::report::{InspectReport, ToleranceSource, write_deviations};
use equiscan::parts::tolerance::general_tolerance;
use equiscan::parts::triangles::TriangleIndex;
use equiscan::report::inspection::{InspectionPicture, draw_inspection};
use equiscan::{Error, Result};

use super::common::{CommonArgs, print_stdout};

/// Arguments of `equiscan inspect`.
#[derive(Debug, clap::Args)]
pub struct InspectArgs {
    /// The scan of the part (LAS, LAZ, PLY), in any pose.
    #[arg(value_name = "SCAN")]
    pub scan: PathBuf,
    /// The part's reference: a mesh (PLY with faces, STL, OBJ) or a cloud (LAS, LAZ, PLY) in
    /// the part's frame.
    #[arg(
        long,
        value_name = "REF",
        required_unless_present = "part",
        conflicts_with = "part"
    )]
    pub reference: Option<PathBuf>,
    /// Take the reference of this part from --catalogue instead.
    #[arg(long, value_name = "NAME", requires = "catalogue")]
    pub part: Option<String>,
    /// The part catalogue for --part.
    #[arg(long, value_name = "FILE")]
    pub catalogue: Option<PathBuf>,
    /// Permissible deviation ± in file units.
    #[arg(
        long,
        value_name = "T",
        required_unless_present = "tolerance_class",
        conflicts_with = "tolerance_class"
    )]
    pub tolerance: Option<f64>,
    /// ISO 2768-1 general tolerance class for linear dimensions (f, m, c, v), looked up by the
    /// part's largest dimension taken in millimetres.
    #[arg(long, value_name = "CLASS")]
    pub tolerance_class: Option<char>,
    /// The scan's points with a `deviation` property (PLY, LAS, LAZ or CSV by extension).
    #[arg(short, long, value_name = "OUT")]
    pub output: PathBuf,
    /// A PNG picture: deviation colour map in three views, colour bar, histogram.
    #[arg(long, value_name = "PNG")]
    pub picture: Option<PathBuf>,
    /// The JSON report.
    #[arg(long, value_name = "JSON")]
    pub report: Option<PathBuf>,
    /// `-q`, `--json` (the report on stdout), `--threads`.
    #[command(flatten)]
    pub common: CommonArgs,
}

fn load_reference(args: &InspectArgs) -> Result<(String, Prepared, Option<TriangleIndex>)> {
    if let Some(path) = &args.reference {
        let r = Reference::read(&[path.as_path()])?;
        let tri = r.mesh.as_ref().map(TriangleIndex::new);
        return Ok((path.display().to_string(), Prepared::new(r)?, tri));
    }
    let (Some(name), Some(file)) = (&args.part, &args.catalogue) else {
        return Err(Error::invalid(
            "no reference given",
            "give --reference REF, or --part NAME with --catalogue FILE",
        ));
    };
    let mut cat = catalogue::read(file)?;
    let Some(i) = cat.find(name) else {
        let names: Vec<&str> = cat.header.parts.iter().map(|e| e.name.as_str()).collect();
        return Err(Error::file(
            file,
            format!("has no part named {name}"),
            format!("give one of: {}", names.join(", ")),
        ));
    };
    let p = cat.parts.swap_remove(i);
    Ok((format!("{} (part {name})", file.display()), p, None))
}

/// Runs `inspect`.
pub fn run(args: &InspectArgs) -> Result<u8> {
    check_extension(
        &args.output,
        &["ply", "las", "laz", "csv"],
        "points with deviations",
    )?;
    if let Some(p) = &args.picture {
        check_extension(p, &["png"], "a PNG picture")?;
    }
    if let Some(p) = &args.report {
        check_extension(p, &["json"], "a JSON report")?;
    }
    let mut inputs: Vec<&Path> = vec![args.scan.as_path()];
    inputs.extend(args.reference.as_deref());
    inputs.extend(args.catalogue.as_deref());
    let mut outputs: Vec<&Path> = vec![args.output.as_path()];
    outputs.extend(args.picture.as_deref());
    outputs.extend(args.report.as_deref());
    check_outputs(&inputs, &outputs)?;
    let pool = args.common.pool()?;
    pool.install(|| run_in_pool(args))
}

fn run_in_pool(args: &InspectArgs) -> Result<u8> {
    let (cloud, _) = read_cloud(&args.scan)?;
    let (ref_name, prepared, triangles) = load_reference(args)?;
    let size = prepared
        .reference
        .size()
        .iter()
        .cloned()
        .fold(0.0, f64::max);
    let tolerance = match (args.tolerance, args.tolerance_class) {
        (Some(t), _) => ToleranceSource {
            value: t,
            from: "given".into(),
            class_size_mm: None,
            class_range_mm: None,
        },
        (None, Some(c)) => {
            let g = general_tolerance(c.to_ascii_lowercase(), size)
                .map_err(|e| Error::invalid(e, "give --tolerance T in file units instead"))?;
            ToleranceSource {
                value: g.tolerance_mm,
                from: format!("ISO 2768-1 class {}", g.class),
                class_size_mm: Some(g.size_mm),
                class_range_mm: Some(g.range_mm),
            }
        }
        (None, None) => {
            return Err(Error::invalid(
                "no tolerance given",
                "give --tolerance T in file units or --tolerance-class f|m|c|v",
            ));
        }
    };
    let shown = args.scan.display().to_string();
    let ins = inspect(
        &cloud,
        &shown,
        &prepared,
        triangles.as_ref(),
        tolerance.value,
        &FitParams::default(),
    )?;
    let mut notes = Vec::new();
    if prepared.reference.normals_estimated {
        notes.push("the reference's normals were estimated (PCA, turned away from its centroid): the sign of deviations in hollows may be wrong".to_string());
    }
    if ins.fit.pose_verdict == PoseVerdict::Ambiguous {
        notes.push("other poses fit the scan as well (a symmetric part, or the scan does not show what fixes the pose): deviations are those of the reported pose".to_string());
    }
    let report = InspectReport::new(
        &shown,
        &ref_name,
        &ins,
        tolerance,
        triangles.is_some(),
        notes,
    );
    let json = serde_json::to_vec_pretty(&report).map_err(|e| {
        Error::invalid(
            format!("cannot encode the report: {e}"),
            "report this as a defect",
        )
    })?;
    let png = match &args.picture {
        Some(_) => Some(
            draw_inspection(&InspectionPicture {
                cloud: &cloud,
                deviations: &ins.deviations,
                tolerance: ins.tolerance,
                report: &report,
                unit: "",
            })?
            .encode_png()?,
        ),
        None => None,
    };
    // Everything is computed; now write, point file first.
    write_deviations(&args.output, &cloud, &ins.deviations)?;
    args.common.wrote(&args.output);
    if let (Some(path), Some(bytes)) = (&args.picture, png) {
        write_atomic(path, |w| {
            std::io::Write::write_all(w, &bytes).map_err(|e| Error::io(path, &e))
        })?;
        args.common.wrote(path);
    }
    if let Some(path) = &args.report {
        write_atomic(path, |w| {
            std::io::Write::write_all(w, &json).map_err(|e| Error::io(path, &e))
        })?;
        args.common.wrote(path);
    }
    if args.common.json {
        args.common.print_json(&report)?;
    } else if !args.common.quiet {
        print_stdout(&summary(&report));
    }
    Ok(if ins.passed() { 0 } else { 1 })
}

fn summary(r: &InspectReport) -> String {
    let d = &r.deviation;
    let mut s = format!(
        "{}: {} (± {} from {}); deviation mean {:.4}, std {:.4}, min {:.4}, max {:.4}; {:.2} % of points outside; pose {}\n",
        r.scan,
        r.outcome.replace('_', " "),
        r.tolerance.value,
        r.tolerance.from,
        d.mean,
        d.std,
        d.min,
        d.max,
        100.0 * r.outside_share,
        match r.registration.pose_verdict {
            PoseVerdict::Confident => "confident",
            PoseVerdict::Ambiguous => "ambiguous (equivalent poses listed in the report)",
        }
    );
    for (k, c) in r.clusters.iter().enumerate() {
        s += &format!(
            "  cluster {}: {} points {} the surface, centre ({:.2}, {:.2}, {:.2}) in the part's frame, size {:.1} × {:.1} × {:.1}, mean deviation {:.3}, extreme {:.3}\n",
            k + 1,
            c.points,
            c.side,
            c.centre_part[0],
            c.centre_part[1],
            c.centre_part[2],
            c.size_part[0],
            c.size_part[1],
            c.size_part[2],
            c.mean_deviation,
            c.extreme_deviation
        );
    }
    s += &format!("{}\n", r.caution);
    s
}
