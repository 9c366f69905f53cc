//! `align`: registration of two scan files, returning the CLI's JSON report.

use std::path::PathBuf;
use std::time::Instant;

use equiscan::align::report::{Input, PairReport, RunContext, Timing, Units, fingerprint};
use equiscan::align::truth::{TruthCheck, read_truth};
use equiscan::align::{AlignParams, Method, align_named};
use equiscan::io::read_cloud;
use equiscan::{Error, Result};
use pyo3::prelude::*;

use crate::errors::detached;

/// What a call asks for.
struct Request {
    source: PathBuf,
    target: PathBuf,
    method: Method,
    voxel: Option<f64>,
    radius: Option<f64>,
    seed: u64,
    descriptor_version: u32,
    units: Option<Units>,
    truth: Option<(PathBuf, Option<String>)>,
}

fn positive(v: Option<f64>, name: &str) -> Result<()> {
    match v {
        Some(x) if !(x > 0.0 && x.is_finite()) => Err(Error::invalid(
            format!("{name}={x} is not a size greater than 0"),
            format!(
                "give {name} in file units, or leave it out to choose it from the point spacing"
            ),
        )),
        _ => Ok(()),
    }
}

/// Reads both scans, registers SOURCE onto TARGET and builds the report as `equiscan align
/// --json` prints it.
fn run(r: &Request) -> Result<String> {
    positive(r.voxel, "voxel")?;
    positive(r.radius, "radius")?;
    let truth = match &r.truth {
        Some((path, key)) => Some(read_truth(path, key.as_deref())?),
        None => None,
    };
    let t = Instant::now();
    let (a, ai) = read_cloud(&r.source)?;
    let (b, bi) = read_cloud(&r.target)?;
    let (a_bytes, a_sum) = fingerprint(&r.source)?;
    let (b_bytes, b_sum) = fingerprint(&r.target)?;
    let read_seconds = t.elapsed().as_secs_f64();
    let params = AlignParams {
        method: r.method,
        voxel: r.voxel,
        radius: r.radius,
        seed: r.seed,
        descriptor_version: r.descriptor_version,
        ..AlignParams::default()
    };
    let ctx = RunContext::new(
        r.seed,
        r.voxel.is_some(),
        r.radius.is_some(),
        r.units,
        &[(&r.source, &a, &ai), (&r.target, &b, &bi)],
    );
    let source = Input {
        path: &r.source,
        cloud: &a,
        bytes: a_bytes,
        checksum: a_sum,
    };
    let target = Input {
        path: &r.target,
        cloud: &b,
        bytes: b_bytes,
        checksum: b_sum,
    };
    // Named as the CLI names them, so that messages match `equiscan align`'s wording.
    let (a_name, b_name) = (
        r.source.display().to_string(),
        r.target.display().to_string(),
    );
    let found = align_named((&a_name, &a), (&b_name, &b), &params)?;
    let check = truth.map(|t| TruthCheck::new(&found.transform, &t, &a.centroid()));
    let mut report = PairReport::new(source, target, r.method, &found, check, &ctx);
    if !ctx.reproducible {
        report.timings.insert(
            0,
            Timing {
                stage: "reading".into(),
                seconds: read_seconds,
            },
        );
    }
    serde_json::to_string(&report)
        .map_err(|e| Error::internal(format!("report: {e}"), "report this as a bug"))
}

/// See `equiscan.align` (python/equiscan/__init__.py). Returns the report as JSON text.
#[pyfunction]
#[pyo3(signature = (source, target, *, method="equivariant".to_string(), voxel=None,
    radius=None, seed=1, descriptor_version=AlignParams::default().descriptor_version,
    units=None, truth=None, truth_key=None, threads=None))]
#[allow(clippy::too_many_arguments)]
pub fn align(
    py: Python<'_>,
    source: PathBuf,
    target: PathBuf,
    method: String,
    voxel: Option<f64>,
    radius: Option<f64>,
    seed: u64,
    descriptor_version: u32,
    units: Option<String>,
    truth: Option<PathBuf>,
    truth_key: Option<String>,
    threads: Option<usize>,
) -> PyResult<String> {
    let checked = (|| -> Result<Request> {
        let method = match method.as_str() {
            "equivariant" => Method::Equivariant,
            "fpfh" => Method::Fpfh,
            other => {
                return Err(Error::invalid(
                    format!("method={other:?} is not a registration method"),
                    "give method=\"equivariant\" or method=\"fpfh\"",
                ));
            }
        };
        let units = match units.as_deref() {
            None => None,
            Some("m") => Some(Units::Metre),
            Some("mm") => Some(Units::Millimetre),
            Some("ft") => Some(Units::Foot),
            Some("us-ft") => Some(Units::UsSurveyFoot),
            Some(other) => {
                return Err(Error::invalid(
                    format!("units={other:?} is not a unit"),
                    "give units=\"m\", \"mm\", \"ft\" or \"us-ft\", or leave it out",
                ));
            }
        };
        if truth_key.is_some() && truth.is_none() {
            return Err(Error::invalid(
                "truth_key= needs truth=",
                "give truth= (a JSON file with the true transform) too, or drop truth_key=",
            ));
        }
        Ok(Request {
            source,
            target,
            method,
            voxel,
            radius,
            seed,
            descriptor_version,
            units,
            truth: truth.map(|t| (t, truth_key)),
        })
    })();
    let request = checked.map_err(|e| crate::errors::to_py(py, e))?;
    detached(py, threads, || run(&request))
}
