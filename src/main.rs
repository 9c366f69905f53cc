//! The `equiscan` command: parse the arguments, run one subcommand, map the result to an exit
//! code (0 done, 1 ran but found no confident result, 2 error; clap's usage errors exit 2).

mod cli;

use std::process::ExitCode;

use clap::Parser;

fn main() -> ExitCode {
    let args = cli::Cli::parse();
    match args.command.run() {
        Ok(code) => ExitCode::from(code),
        Err(e) => {
            eprintln!("{e}");
            ExitCode::from(2)
        }
    }
}
