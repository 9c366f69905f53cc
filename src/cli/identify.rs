//! `equiscan identify SCAN... --catalogue FILE [--json]`: which catalogued part each scan
//! shows (or none), with its pose. Exit 0 when every scan is identified, 1 when any is
//! ambiguous or unknown, 2 on an error (a failing scan is reported and the others go on).

use std::path::PathBuf;

use equiscan::Result;
use equiscan::io::read_cloud;
use equiscan::parts::catalogue;
use equiscan::parts::identify::{IdentifyParams, Verdict, identify};
use equiscan::parts::report::IdentifyRecord;
use equiscan::parts::scan::PreparedScan;

use super::common::{CommonArgs, print_stdout};

/// Arguments of `equiscan identify`.
#[derive(Debug, clap::Args)]
pub struct IdentifyArgs {
    /// Scans of single parts (LAS, LAZ, PLY), in any pose.
    #[arg(required = true, value_name = "SCAN")]
    pub scans: Vec<PathBuf>,
    /// The part catalogue (`equiscan catalogue build`).
    #[arg(long, value_name = "FILE")]
    pub catalogue: PathBuf,
    /// Parts registered after the signature shortlist.
    #[arg(long, default_value_t = 4, value_name = "N")]
    pub shortlist: usize,
    /// `-q`, `--json` (one object per scan, one per line), `--threads`.
    #[command(flatten)]
    pub common: CommonArgs,
}

/// Runs `identify`.
pub fn run(args: &IdentifyArgs) -> Result<u8> {
    if args.shortlist == 0 {
        return Err(equiscan::Error::invalid(
            "--shortlist 0 registers no part",
            "give at least 1",
        ));
    }
    let pool = args.common.pool()?;
    let cat = pool.install(|| catalogue::read(&args.catalogue))?;
    let names: Vec<String> = cat.header.parts.iter().map(|e| e.name.clone()).collect();
    let params = IdentifyParams {
        shortlist: args.shortlist,
        ..IdentifyParams::default()
    };
    let mut code = 0u8;
    for scan in &args.scans {
        let shown = scan.display().to_string();
        let result = read_cloud(scan).and_then(|(cloud, _)| {
            let prepared = PreparedScan::new(&cloud, &shown)?;
            Ok(pool.install(|| identify(&prepared, &cat, &params)))
        });
        match result {
            Ok(id) => {
                let rec = IdentifyRecord::new(&shown, &id, &names);
                if id.verdict != Verdict::Identified {
                    code = code.max(1);
                }
                if args.common.json {
                    if !args.common.print_json(&rec)? {
                        return Ok(code);
                    }
                } else if !args.common.quiet && !print_stdout(&format!("{}\n", rec.summary())) {
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
