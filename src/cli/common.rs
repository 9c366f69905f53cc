//! What every subcommand shares: the flags `-q/--quiet`, `--json` and `--threads` with one
//! meaning everywhere ([`CommonArgs`], flattened into each command's arguments), the worker
//! pool, progress reporting, "wrote FILE" lines and message wording helpers.
//!
//! Output streams: results (text summaries and JSON) go to stdout; notes, progress and
//! "wrote FILE" go to stderr. `--quiet` silences everything but errors and, with `--json`, the
//! JSON itself.

use std::io::{IsTerminal, Write};
use std::path::Path;
use std::sync::Mutex;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::time::{Duration, Instant};

use equiscan::{Error, Result};
use serde::Serialize;

/// Most worker threads per core that `--threads` may ask for; more only adds overhead.
pub const MAX_THREADS_PER_CORE: usize = 4;

/// Seconds between two plain progress lines when stderr is not a terminal.
const PLAIN_EVERY: Duration = Duration::from_secs(5);

/// Flags shared by every subcommand.
#[derive(Debug, Clone, Default, clap::Args)]
pub struct CommonArgs {
    /// Print nothing but errors (and the JSON, with --json).
    #[arg(short, long)]
    pub quiet: bool,
    /// Print JSON on stdout (one object per line) instead of text.
    #[arg(long)]
    pub json: bool,
    /// Worker threads (default: all cores; at most 4 per core).
    #[arg(long, value_name = "N")]
    pub threads: Option<usize>,
}

impl CommonArgs {
    /// The worker count: `--threads` capped at [`MAX_THREADS_PER_CORE`] × the cores (with a
    /// note), or every core when not given. `--threads 0` is an error.
    pub fn threads(&self) -> Result<Option<usize>> {
        let Some(t) = self.threads else {
            return Ok(None);
        };
        if t == 0 {
            return Err(Error::invalid(
                "--threads 0 leaves no worker",
                "give at least 1 thread, or leave it out",
            ));
        }
        let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
        let cap = MAX_THREADS_PER_CORE * cores;
        if t > cap {
            self.note(&format!(
                "--threads {t} is more than {MAX_THREADS_PER_CORE} per core on {}; using {cap}",
                plural(cores, "core", "cores")
            ));
            return Ok(Some(cap));
        }
        Ok(Some(t))
    }

    /// A rayon pool with [`CommonArgs::threads`] workers.
    pub fn pool(&self) -> Result<rayon::ThreadPool> {
        let mut b = rayon::ThreadPoolBuilder::new();
        if let Some(t) = self.threads()? {
            b = b.num_threads(t);
        }
        b.build().map_err(|e| {
            Error::invalid(
                format!("cannot start worker threads: {e}"),
                "give fewer --threads",
            )
        })
    }

    /// True when notes go to stderr (not `--quiet`).
    pub fn chatty(&self) -> bool {
        !self.quiet
    }

    /// A note on stderr unless `--quiet`.
    pub fn note(&self, text: &str) {
        if self.chatty() {
            eprintln!("{text}");
        }
    }

    /// `wrote FILE` on stderr unless `--quiet`.
    pub fn wrote(&self, path: &Path) {
        self.note(&format!("wrote {}", path.display()));
    }

    /// Prints `value` as one line of JSON on stdout. Returns false when stdout is closed (a
    /// pipe into `head`), so the caller can stop quietly.
    pub fn print_json(&self, value: &impl Serialize) -> Result<bool> {
        let text = serde_json::to_string(value).map_err(|e| {
            Error::invalid(
                format!("cannot encode the JSON output: {e}"),
                "report this as a bug",
            )
        })?;
        Ok(print_stdout(&format!("{text}\n")))
    }

    /// A progress reporter for `total` items of `unit` (plural), labelled `label`.
    pub fn progress(&self, label: &str, total: usize, unit: &str) -> Progress {
        Progress::new(self.chatty() && total > 0, label, total, unit)
    }
}

/// Writes `text` to stdout; false when stdout is closed.
pub fn print_stdout(text: &str) -> bool {
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())
        .and_then(|_| out.flush())
        .is_ok()
}

/// Wording helpers live in the library ([`equiscan::text`]); re-exported for the commands.
#[allow(unused_imports)] // `seconds_text` words durations for the commands that print them
pub use equiscan::text::{Size, group, plural, seconds_text};

/// Half of the machine's memory (Linux: `MemTotal` of `/proc/meminfo`), else 4 GiB.
pub fn default_memory_budget() -> u64 {
    let total = std::fs::read_to_string("/proc/meminfo").ok().and_then(|t| {
        t.lines()
            .find_map(|l| l.strip_prefix("MemTotal:"))
            .and_then(|v| v.trim().trim_end_matches("kB").trim().parse::<u64>().ok())
            .map(|kb| kb * 1024)
    });
    total.map_or(4 << 30, |t| t / 2)
}

/// Progress of a long step: a bar when stderr is a terminal, a plain line every few seconds
/// otherwise, nothing when hidden. [`Progress::inc`] may be called from worker threads.
pub struct Progress {
    bar: Option<indicatif::ProgressBar>,
    plain: Option<Plain>,
}

struct Plain {
    label: String,
    unit: String,
    total: usize,
    done: AtomicUsize,
    last: Mutex<Instant>,
}

impl Progress {
    fn new(show: bool, label: &str, total: usize, unit: &str) -> Progress {
        if !show {
            return Progress {
                bar: None,
                plain: None,
            };
        }
        if std::io::stderr().is_terminal() {
            let b = indicatif::ProgressBar::new(total as u64);
            let template = format!("{label} {{bar:40}} {{pos}}/{{len}} {unit}, {{eta}} left");
            b.set_style(
                indicatif::ProgressStyle::with_template(&template)
                    .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
            );
            return Progress {
                bar: Some(b),
                plain: None,
            };
        }
        Progress {
            bar: None,
            plain: Some(Plain {
                label: label.to_string(),
                unit: unit.to_string(),
                total,
                done: AtomicUsize::new(0),
                last: Mutex::new(Instant::now()),
            }),
        }
    }

    /// Counts `n` more items done.
    pub fn inc(&self, n: usize) {
        if let Some(b) = &self.bar {
            b.inc(n as u64);
        }
        if let Some(p) = &self.plain {
            let done = p.done.fetch_add(n, Ordering::Relaxed) + n;
            let Ok(mut last) = p.last.try_lock() else {
                return;
            };
            if last.elapsed() >= PLAIN_EVERY && done < p.total {
                *last = Instant::now();
                eprintln!(
                    "{}: {} of {} {} ({:.0} %)",
                    p.label,
                    group(done),
                    group(p.total),
                    p.unit,
                    100.0 * done as f64 / p.total as f64
                );
            }
        }
    }

    /// Removes the bar.
    pub fn finish(&self) {
        if let Some(b) = &self.bar {
            b.finish_and_clear();
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn threads_are_capped() {
        let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
        let a = CommonArgs {
            quiet: true,
            threads: Some(100_000),
            ..Default::default()
        };
        assert_eq!(a.threads().unwrap(), Some(MAX_THREADS_PER_CORE * cores));
        let z = CommonArgs {
            threads: Some(0),
            ..Default::default()
        };
        assert!(z.threads().is_err());
    }
}
