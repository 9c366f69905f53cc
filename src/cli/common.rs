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

/// `"1 centre"`, `"2 centres"`, `"1 234 567 centres"` (thin grouping for readability).
pub fn plural(n: usize, one: &str, many: &str) -> String {
    format!("{} {}", group(n), if n == 1 { one } else { many })
}

/// `n` with a space every three digits: `1 234 567`.
pub fn group(n: usize) -> String {
    let s = n.to_string();
    let mut out = String::with_capacity(s.len() + s.len() / 3);
    for (k, ch) in s.chars().enumerate() {
        if k > 0 && (s.len() - k).is_multiple_of(3) {
            out.push(' ');
        }
        out.push(ch);
    }
    out
}

/// A duration in words for people: `0.42 s`, `3.4 s`, `12 s`, `25 minutes`, `5.2 hours`,
/// `2.1 days`.
pub fn seconds_text(s: f64) -> String {
    if !s.is_finite() {
        return "an unbounded time".to_string();
    }
    if s < 1.0 {
        format!("{s:.2} s")
    } else if s < 10.0 {
        format!("{s:.1} s")
    } else if s < 90.0 {
        format!("{s:.0} s")
    } else if s < 90.0 * 60.0 {
        format!("{:.0} minutes", s / 60.0)
    } else if s < 48.0 * 3600.0 {
        format!("{:.1} hours", s / 3600.0)
    } else {
        format!("{:.1} days", s / 86400.0)
    }
}

/// A memory size in bytes; parsed from `2G`, `500M`, `1.5GiB`, `64k` (binary multiples) or a
/// plain number of bytes, shown as `512 MiB`, `1.5 GiB`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Size(pub u64);

impl std::str::FromStr for Size {
    type Err = String;

    fn from_str(t: &str) -> std::result::Result<Size, String> {
        let low = t.trim().to_ascii_lowercase();
        let body = low.trim_end_matches("ib").trim_end_matches('b');
        let (num, mult) = match body.chars().last() {
            Some('k') => (&body[..body.len() - 1], 1u64 << 10),
            Some('m') => (&body[..body.len() - 1], 1 << 20),
            Some('g') => (&body[..body.len() - 1], 1 << 30),
            Some('t') => (&body[..body.len() - 1], 1 << 40),
            _ => (body, 1),
        };
        match num.trim().parse::<f64>() {
            Ok(v) if v.is_finite() && v > 0.0 => Ok(Size((v * mult as f64) as u64)),
            _ => Err(format!(
                "{t} is not a memory size; give e.g. 2G, 500M or 1.5GiB"
            )),
        }
    }
}

impl std::fmt::Display for Size {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let b = self.0 as f64;
        let (v, unit) = if b >= (1u64 << 30) as f64 {
            (b / (1u64 << 30) as f64, "GiB")
        } else if b >= (1 << 20) as f64 {
            (b / (1 << 20) as f64, "MiB")
        } else {
            (b / 1024.0, "KiB")
        };
        if v < 10.0 {
            write!(f, "{v:.1} {unit}")
        } else {
            write!(f, "{v:.0} {unit}")
        }
    }
}

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
    fn wording_helpers() {
        assert_eq!(plural(1, "centre", "centres"), "1 centre");
        assert_eq!(plural(0, "centre", "centres"), "0 centres");
        assert_eq!(plural(1_234_567, "point", "points"), "1 234 567 points");
        assert_eq!(group(999), "999");
        assert_eq!(group(1000), "1 000");
    }

    #[test]
    fn sizes_and_durations() {
        assert_eq!("2G".parse::<Size>().unwrap(), Size(2 << 30));
        assert_eq!("500m".parse::<Size>().unwrap(), Size(500 << 20));
        assert_eq!("1.5GiB".parse::<Size>().unwrap(), Size(3 << 29));
        assert!("-1G".parse::<Size>().is_err() && "lots".parse::<Size>().is_err());
        assert_eq!(Size(3 << 29).to_string(), "1.5 GiB");
        assert_eq!(Size(300 << 20).to_string(), "300 MiB");
        assert_eq!(seconds_text(0.123), "0.12 s");
        assert_eq!(seconds_text(200.0), "3 minutes");
        assert_eq!(seconds_text(2.5 * 86400.0), "2.5 days");
    }

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
