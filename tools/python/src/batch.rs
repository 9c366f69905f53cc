//! The batch run of `equiscan batch` split for a cluster: the plan is made in the client
//! process ([`BatchRun`]), each tile runs wherever a task lands ([`batch_run_tile`], the plan
//! travelling as JSON), and the outcomes come back to the client's summary.

use std::path::PathBuf;

use equiscan::batch::{BatchOptions, Plan, Shard, Summary, TileGrid, TileOutcome, plan, run_tile};
use equiscan::descriptor::output::Format;
use equiscan::error::Kind;
use equiscan::{Error, Result};
use pyo3::prelude::*;

use crate::errors::{detached, to_py};
use crate::features::Options;

fn json_error(what: &str, e: serde_json::Error) -> Error {
    Error::internal(format!("{what}: {e}"), "report this as a bug")
}

fn kind_named(name: &str) -> Kind {
    match name {
        "input" => Kind::Input,
        "io" => Kind::Io,
        "recipe" => Kind::Recipe,
        _ => Kind::Internal,
    }
}

/// A planned batch run and its running summary, held by the client.
#[pyclass(module = "equiscan._native")]
pub struct BatchRun {
    plan: Plan,
    summary: Summary,
}

#[pymethods]
impl BatchRun {
    /// Plans the run as `equiscan batch` does (inputs expanded, headers read, halos found,
    /// OUTDIR and the journal made, finished outputs checked); the summary's clock starts.
    #[new]
    #[pyo3(signature = (inputs, outdir, *, radius, degree=equiscan::descriptor::DEFAULT_DEGREE,
        shells=equiscan::descriptor::DEFAULT_SHELLS,
        descriptor_version=equiscan::descriptor::RECIPE_VERSION, max_neighbours=None,
        invariants="norms,power".to_string(), keep_coefficients=false, format="npy".to_string(),
        tile_grid="auto".to_string(), shard=None, restart=false, threads=None))]
    #[allow(clippy::too_many_arguments)]
    fn new(
        py: Python<'_>,
        inputs: Vec<PathBuf>,
        outdir: PathBuf,
        radius: Vec<f32>,
        degree: usize,
        shells: usize,
        descriptor_version: u32,
        max_neighbours: Option<usize>,
        invariants: String,
        keep_coefficients: bool,
        format: String,
        tile_grid: String,
        shard: Option<String>,
        restart: bool,
        threads: Option<usize>,
    ) -> PyResult<BatchRun> {
        let options = (|| -> Result<BatchOptions> {
            let recipe = Options {
                radii: None,
                degree,
                shells,
                version: descriptor_version,
                max_neighbours,
                invariants,
                keep_coefficients,
                voxel: None,
            }
            .recipe(radius)?;
            let mut opts = BatchOptions::new(recipe);
            opts.format = format
                .parse::<Format>()
                .map_err(|e| Error::invalid(format!("format={format:?}"), e))?;
            opts.tile_grid = tile_grid
                .parse::<TileGrid>()
                .map_err(|e| Error::invalid(format!("tile_grid={tile_grid:?}"), e))?;
            opts.shard = match shard {
                None => None,
                Some(s) => Some(
                    s.parse::<Shard>()
                        .map_err(|e| Error::invalid(format!("shard={s:?}"), e))?,
                ),
            };
            opts.restart = restart;
            // One task per tile, spread over workers: a neighbour kept whole for its turn
            // would mostly run in another process.
            opts.keep_neighbours_whole = false;
            Ok(opts)
        })()
        .map_err(|e| to_py(py, e))?;
        let plan = detached(py, threads, || plan(&inputs, &outdir, &options))?;
        let summary = Summary::new(&plan);
        Ok(BatchRun { plan, summary })
    }

    /// The plan as JSON text, to send to the processes that run the tiles.
    fn plan_json(&self, py: Python<'_>) -> PyResult<String> {
        serde_json::to_string(&self.plan).map_err(|e| to_py(py, json_error("batch plan", e)))
    }

    /// Indices of the tiles still to do (this shard), in order.
    #[getter]
    fn todo(&self) -> Vec<usize> {
        self.plan.todo.clone()
    }

    /// Indices of the tiles finished before (journal checked), skipped.
    #[getter]
    fn finished(&self) -> Vec<usize> {
        self.plan.finished.clone()
    }

    /// Notes for the user: skipped files, CRS differences, why tiles are redone.
    #[getter]
    fn notes(&self) -> Vec<String> {
        self.plan.notes.clone()
    }

    /// The input of tile `index`.
    fn input_of(&self, index: usize) -> Option<String> {
        self.plan
            .tiles
            .get(index)
            .map(|t| t.input.display().to_string())
    }

    /// Counts tile `index`: done (`outcome`, the JSON of [`batch_run_tile`]) or failed
    /// (`error`, its one-line message, and `kind`).
    #[pyo3(signature = (index, outcome=None, error=None, kind=None))]
    fn add(
        &mut self,
        py: Python<'_>,
        index: usize,
        outcome: Option<String>,
        error: Option<String>,
        kind: Option<String>,
    ) -> PyResult<()> {
        if index >= self.plan.tiles.len() {
            return Err(to_py(
                py,
                Error::invalid(
                    format!("tile {index} is not in the plan"),
                    "give an index of the plan's todo list",
                )
                .with_kind(Kind::Internal),
            ));
        }
        let result: Result<TileOutcome> = match (outcome, error) {
            (Some(text), None) => Ok(serde_json::from_str(&text)
                .map_err(|e| to_py(py, json_error("tile outcome", e)))?),
            (None, Some(message)) => {
                // The message is `WHAT; FIX`: rebuilt so that it prints the same line.
                let (what, fix) = message.rsplit_once("; ").unwrap_or((message.as_str(), ""));
                Err(Error::invalid(what, fix).with_kind(kind_named(kind.as_deref().unwrap_or(""))))
            }
            _ => {
                return Err(to_py(
                    py,
                    Error::invalid("give outcome= or error=, not both", "report this as a bug")
                        .with_kind(Kind::Internal),
                ));
            }
        };
        self.summary.add(&self.plan, index, &result);
        Ok(())
    }

    /// The summary as JSON text, the fields of `equiscan batch --json`.
    fn summary_json(&self, py: Python<'_>) -> PyResult<String> {
        serde_json::to_string(&self.summary).map_err(|e| to_py(py, json_error("summary", e)))
    }

    /// 0 when every tile of the shard is done (now or before), 1 otherwise.
    fn exit_code(&self) -> i32 {
        self.summary.exit_code()
    }
}

/// Runs tile `index` of the plan given as JSON text (see [`BatchRun::plan_json`]) on
/// `threads` worker threads (default: every core): reads the tile and its halo, writes its
/// output atomically and its journal record. Returns the outcome as JSON text; a failed tile
/// raises the error of its kind (its journal record says failed).
#[pyfunction]
#[pyo3(signature = (plan_json, index, threads=None))]
pub fn batch_run_tile(
    py: Python<'_>,
    plan_json: String,
    index: usize,
    threads: Option<usize>,
) -> PyResult<String> {
    detached(py, threads, move || {
        let plan: Plan =
            serde_json::from_str(&plan_json).map_err(|e| json_error("batch plan", e))?;
        let outcome = run_tile(&plan, index)?;
        serde_json::to_string(&outcome).map_err(|e| json_error("tile outcome", e))
    })
}
