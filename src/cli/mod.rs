//! Command-line definitions: the clap [`Cli`] and one module per subcommand.
//!
//! Each subcommand has a `#[derive(clap::Args)]` struct and a `run(&Args) -> Result<u8>`
//! returning the exit code (0 done, 1 ran but found no confident result, 2 error). To add a
//! subcommand: a module here, a variant in [`Command`], a line in [`Command::run`]; flatten
//! [`common::CommonArgs`] into its arguments (`-q`, `--json`, `--threads`) and check its outputs
//! with `equiscan::io::guard::check_outputs` before reading any point.

pub mod align;
pub mod align_checks;
pub mod apply;
pub mod batch;
pub mod catalogue;
pub mod common;
pub mod features;
pub mod identify;
pub mod info;
pub mod inspect;
pub mod recipe_args;

use clap::{Parser, Subcommand};
use equiscan::Result;

/// SO(3)-equivariant local descriptors for 3D scans.
#[derive(Debug, Parser)]
#[command(name = "equiscan", version, about, long_about = None)]
pub struct Cli {
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// The subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Describe point-cloud files: format, points, bounds, attributes, CRS, point spacing and a
    /// suggested support radius.
    Info(info::InfoArgs),
    /// Compute rotation-invariant local descriptors (spherical harmonics × radial shells) at
    /// every point, a voxel subsample or keypoints, and write them as NPY, PLY, CSV, LAS/LAZ or Parquet.
    Features(features::FeaturesArgs),
    /// Register scans with no initial guess: the rigid transform carrying SOURCE onto TARGET
    /// (or every scan onto the first), with quality figures and a verdict.
    Align(align::AlignArgs),
    /// Build or list a part catalogue: reference scans or meshes of each part, with
    /// whole-shape signatures, for `identify` and `inspect --part`.
    Catalogue(catalogue::CatalogueArgs),
    /// Name the part each scan shows (or none of the catalogue's), with its pose in the
    /// part's frame.
    Identify(identify::IdentifyArgs),
    /// Register a scan onto its part's reference and measure every point's signed deviation
    /// against a tolerance, with clusters of out-of-tolerance points.
    Inspect(inspect::InspectArgs),
    /// Descriptors of every point of many tiles: one feature file per input in OUTDIR, with
    /// points of neighbouring tiles as neighbours (halo), a journal to resume an interrupted
    /// run, and shards to split a run over processes or hosts.
    Batch(batch::BatchArgs),
    /// Move whole files by a transform from an align or inspect report, or given as 16
    /// numbers: every attribute and the CRS kept, LAS precision kept.
    Apply(apply::ApplyArgs),
}

impl Command {
    /// Runs the subcommand and returns the process exit code.
    pub fn run(&self) -> Result<u8> {
        match self {
            Command::Info(args) => info::run(args),
            Command::Features(args) => features::run(args),
            Command::Align(args) => align::run(args),
            Command::Catalogue(args) => catalogue::run(args),
            Command::Identify(args) => identify::run(args),
            Command::Inspect(args) => inspect::run(args),
            Command::Batch(args) => batch::run(args),
            Command::Apply(args) => apply::run(args),
        }
    }
}
