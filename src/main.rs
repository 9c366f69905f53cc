//! The `equiscan` command: parse the arguments, run one subcommand, map the result to an exit
//! code (0 done, 1 ran but found no confident result, 2 error; clap's usage errors exit 2;
//! 130 when interrupted by SIGINT or SIGTERM, after removing the temporary files being
//! written).

mod cli;

use std::process::ExitCode;

use clap::Parser;

/// Exit code after SIGINT or SIGTERM (128 + 2, the shell's code for an interrupted command).
const INTERRUPTED: i32 = 130;

/// On SIGINT or SIGTERM: remove the temporary files being written, then exit 130. A thread
/// waits for the signal, so the cleanup runs outside the signal context.
#[cfg(unix)]
fn install_interrupt_cleanup() {
    use signal_hook::consts::{SIGINT, SIGTERM};
    match signal_hook::iterator::Signals::new([SIGINT, SIGTERM]) {
        Ok(mut signals) => {
            std::thread::spawn(move || {
                if signals.forever().next().is_some() {
                    equiscan::io::remove_live_temp_files();
                    std::process::exit(INTERRUPTED);
                }
            });
        }
        Err(e) => eprintln!(
            "equiscan: cannot watch for Ctrl-C ({e}); an interrupted run may leave *.equiscan-tmp files, removed by the next run"
        ),
    }
}

#[cfg(not(unix))]
fn install_interrupt_cleanup() {}

fn main() -> ExitCode {
    let args = cli::Cli::parse();
    install_interrupt_cleanup();
    match args.command.run() {
        Ok(code) => ExitCode::from(code),
        Err(e) => {
            eprintln!("{e}");
            ExitCode::from(2)
        }
    }
}
