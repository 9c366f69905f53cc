//! `equiscan info FILE...`: what a point-cloud file holds, and a suggested support radius
//! (the report and its text are `equiscan::io::describe`).

use std::path::PathBuf;

use equiscan::Result;
use equiscan::io::describe::{describe, render};

use super::common::{CommonArgs, print_stdout};

/// Arguments of `equiscan info`.
#[derive(Debug, clap::Args)]
pub struct InfoArgs {
    /// LAS, LAZ, PLY or E57 files (the format is recognised from the content). An E57 file
    /// lists every scan; `FILE.e57#NAME` or `FILE.e57#INDEX` (from 0) reads one of them.
    #[arg(required = true, value_name = "FILE")]
    pub files: Vec<PathBuf>,
    /// `-q`, `--json` (one object per file, one per line), `--threads`.
    #[command(flatten)]
    pub common: CommonArgs,
}

/// Runs `info` on every file; a failing file prints its one-line error on stderr and the run
/// goes on. Exit code 0 when every file was read, 2 otherwise.
pub fn run(args: &InfoArgs) -> Result<u8> {
    let c = &args.common;
    let pool = c.pool()?;
    let mut code = 0;
    for (i, path) in args.files.iter().enumerate() {
        match pool.install(|| describe(path)) {
            Ok(r) => {
                // A closed pipe (e.g. `| head`) ends the run quietly.
                let open = if c.json {
                    c.print_json(&r)?
                } else if c.quiet {
                    true
                } else if i > 0 {
                    print_stdout(&format!("\n{}", render(&r)))
                } else {
                    print_stdout(&render(&r))
                };
                if !open {
                    return Ok(code);
                }
            }
            Err(e) => {
                eprintln!("{e}");
                code = 2;
            }
        }
    }
    Ok(code)
}
