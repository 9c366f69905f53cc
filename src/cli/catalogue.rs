//! `equiscan catalogue build DIR -o FILE` and `equiscan catalogue show FILE`: the part
//! catalogue that `identify` and `inspect --part` use (layout in `equiscan::parts::catalogue`).

use std::path::PathBuf;
use std::time::Instant;

use equiscan::Result;
use equiscan::io::guard::{check_extension, check_outputs};
use equiscan::parts::catalogue::{self, Header};

use super::common::{CommonArgs, group, print_stdout, seconds_text};

/// Arguments of `equiscan catalogue`.
#[derive(Debug, clap::Args)]
pub struct CatalogueArgs {
    /// What to do with the catalogue.
    #[command(subcommand)]
    pub action: Action,
}

/// `build` or `show`.
#[derive(Debug, clap::Subcommand)]
pub enum Action {
    /// Build a catalogue from a folder holding one folder per part (named after the part) with
    /// its reference scans (LAS/LAZ/PLY) or meshes (PLY with faces, STL, OBJ) in the part's
    /// frame; a file directly in the folder is a part named after the file.
    Build {
        /// The folder of parts.
        #[arg(value_name = "DIR")]
        dir: PathBuf,
        /// The catalogue file to write (.eqcat).
        #[arg(short, long, value_name = "FILE")]
        output: PathBuf,
        /// `-q`, `--json`, `--threads`.
        #[command(flatten)]
        common: CommonArgs,
    },
    /// List a catalogue's parts with their size, points and signature summary.
    Show {
        /// The catalogue file.
        #[arg(value_name = "FILE")]
        file: PathBuf,
        /// `-q`, `--json`, `--threads`.
        #[command(flatten)]
        common: CommonArgs,
    },
}

/// Runs `catalogue build` or `catalogue show`.
pub fn run(args: &CatalogueArgs) -> Result<u8> {
    match &args.action {
        Action::Build {
            dir,
            output,
            common,
        } => {
            check_extension(output, &["eqcat"], "a part catalogue")?;
            check_outputs(&[dir.as_path()], &[output.as_path()])?;
            let pool = common.pool()?;
            let start = Instant::now();
            let cat = pool.install(|| catalogue::build(dir))?;
            catalogue::write(&cat, output)?;
            let secs = start.elapsed().as_secs_f64();
            if common.json {
                common.print_json(&cat.header)?;
            } else if common.chatty() {
                print_stdout(&table(&cat.header));
            }
            common.note(&format!(
                "{} parts in {}",
                cat.header.parts.len(),
                seconds_text(secs)
            ));
            common.wrote(output);
            Ok(0)
        }
        Action::Show { file, common } => {
            let header = catalogue::read_header(file)?;
            if common.json {
                common.print_json(&header)?;
            } else {
                print_stdout(&table(&header));
            }
            Ok(0)
        }
    }
}

/// The parts as a text table: name, size, points, spacing, diameter, D2 peak.
fn table(h: &Header) -> String {
    let mut s = format!(
        "part catalogue, format version {}, {} parts (file units)\n",
        h.version,
        h.parts.len()
    );
    s += &format!(
        "{:<20} {:>26} {:>9} {:>8} {:>9} {:>8}  sources\n",
        "part", "size x × y × z", "points", "spacing", "diameter", "D2 peak"
    );
    for e in &h.parts {
        let sig = &e.signature;
        let peak = sig
            .d2
            .iter()
            .take(sig.d2.len().saturating_sub(1))
            .enumerate()
            .max_by(|a, b| a.1.total_cmp(b.1))
            .map_or(0.0, |(k, _)| {
                (k as f64 + 0.5) / (sig.d2.len() - 1) as f64 * sig.diameter
            });
        s += &format!(
            "{:<20} {:>26} {:>9} {:>8.3} {:>9.2} {:>8.2}  {}{}\n",
            e.name,
            format!("{:.2} × {:.2} × {:.2}", e.size[0], e.size[1], e.size[2]),
            group(e.points),
            e.spacing,
            sig.diameter,
            peak,
            e.sources.join(", "),
            if e.normals_estimated {
                " (normals estimated)"
            } else {
                ""
            }
        );
    }
    s
}
