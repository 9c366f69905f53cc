//! Checks `align` makes before reading the first point: outputs in existing folders, with
//! the right extension, never the same file as an input (by file identity, not spelling), and
//! a keypoint/memory estimate before the heavy work.
//!
//! Written so that the shared output guard of the other commands can replace
//! [`check_outputs`] without changing its callers.

use std::path::{Path, PathBuf};

use equiscan::{Cloud, Error, Result};

/// The identity of an existing file: device and inode on Unix, the canonical path elsewhere.
fn identity(path: &Path) -> Option<(u64, u64, PathBuf)> {
    let meta = std::fs::metadata(path).ok()?;
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        let _ = &meta;
        Some((meta.dev(), meta.ino(), PathBuf::new()))
    }
    #[cfg(not(unix))]
    {
        let _ = meta;
        Some((0, 0, std::fs::canonicalize(path).ok()?))
    }
}

/// One output to check: the option that names it, its path and the extensions allowed
/// (empty: any).
pub struct Output<'a> {
    /// The option, e.g. `--picture`.
    pub option: &'static str,
    /// The path given.
    pub path: &'a Path,
    /// Lower-case extensions allowed, with the advice when another is given.
    pub extensions: &'static [&'static str],
    /// What to do about a wrong extension.
    pub advice: &'static str,
}

/// Refuses an output whose folder does not exist, whose extension is not allowed, or that is
/// the same file as one of `inputs` (or as another output).
pub fn check_outputs(inputs: &[&Path], outputs: &[Output<'_>]) -> Result<()> {
    let inputs: Vec<_> = inputs.iter().filter_map(|p| identity(p)).collect();
    let mut seen = Vec::new();
    for o in outputs {
        let folder = match o.path.parent() {
            Some(p) if !p.as_os_str().is_empty() => p,
            _ => Path::new("."),
        };
        if !folder.is_dir() {
            return Err(Error::file(
                o.path,
                format!(
                    "cannot write here: the folder {} does not exist",
                    folder.display()
                ),
                "create the folder first or choose another output path",
            ));
        }
        let ext = o
            .path
            .extension()
            .and_then(|e| e.to_str())
            .map(str::to_ascii_lowercase)
            .unwrap_or_default();
        if !o.extensions.is_empty() && !o.extensions.contains(&ext.as_str()) {
            return Err(Error::file(
                o.path,
                format!("{} cannot write a .{ext} file", o.option),
                o.advice,
            ));
        }
        if let Some(id) = identity(o.path) {
            if inputs.contains(&id) {
                return Err(Error::file(
                    o.path,
                    format!("{} would replace an input of this run", o.option),
                    "give the output another name; inputs are never overwritten",
                ));
            }
            if seen.contains(&id) {
                return Err(Error::file(
                    o.path,
                    format!("{} names the same file as another output", o.option),
                    "give each output its own name",
                ));
            }
            seen.push(id);
        }
    }
    Ok(())
}

/// Bytes of memory per keypoint (both clouds counted), from the depot stations: peak resident
/// size 271 MB at 34 673 keypoints (`--voxel 0.4`) and 581 MB at 84 341 (`--voxel 0.2`), i.e.
/// 6.2 kB per added keypoint; 7 kB also covers the clouds themselves at these sizes.
pub const BYTES_PER_KEYPOINT: f64 = 7000.0;

/// Number of occupied voxels of edge `voxel` (the keypoint count of the voxel grid).
pub fn occupied_voxels(cloud: &Cloud, voxel: f64) -> usize {
    let mut keys: Vec<[i64; 3]> = cloud
        .positions
        .iter()
        .map(|p| std::array::from_fn(|k| (p[k] as f64 / voxel).floor() as i64))
        .collect();
    keys.sort_unstable();
    keys.dedup();
    keys.len()
}

/// Bytes in words: `36 MB`, `7.2 GB`.
fn size_words(bytes: f64) -> String {
    if bytes >= 1e9 {
        format!("{:.1} GB", bytes / 1e9)
    } else {
        format!("{:.0} MB", (bytes / 1e6).max(1.0))
    }
}

/// Refuses a run whose estimated memory exceeds `budget_gb`, with the cost and the ways on.
pub fn check_cost(keypoints: usize, voxel: f64, budget_gb: f64) -> Result<()> {
    let bytes = keypoints as f64 * BYTES_PER_KEYPOINT;
    if bytes > budget_gb * 1e9 {
        return Err(Error::invalid(
            format!(
                "--voxel {voxel} gives about {keypoints} keypoints, about {} of memory (budget {})",
                size_words(bytes),
                size_words(budget_gb * 1e9)
            ),
            "give a larger --voxel or leave it out (the automatic size aims at about 5000 keypoints), raise --max-memory GB, or add --force",
        ));
    }
    Ok(())
}

/// Runs `work`, showing that `what` is under way on standard error: a spinner with the
/// elapsed time on a terminal, otherwise a line every 5 seconds; nothing when `quiet`.
/// (Stands in until a shared progress reporter serves every command.)
pub fn busy<T>(quiet: bool, what: &str, work: impl FnOnce() -> T) -> T {
    use std::io::IsTerminal;
    use std::sync::mpsc;
    use std::time::{Duration, Instant};
    if quiet {
        return work();
    }
    if std::io::stderr().is_terminal() {
        let bar = indicatif::ProgressBar::new_spinner().with_message(format!("align: {what}"));
        bar.enable_steady_tick(Duration::from_millis(120));
        let out = work();
        bar.finish_and_clear();
        return out;
    }
    eprintln!("align: {what}");
    let (done, wait) = mpsc::channel::<()>();
    let start = Instant::now();
    let label = what.to_string();
    let ticker = std::thread::spawn(move || {
        while let Err(mpsc::RecvTimeoutError::Timeout) = wait.recv_timeout(Duration::from_secs(5)) {
            eprintln!("align: {label}, {} s", start.elapsed().as_secs());
        }
    });
    let out = work();
    let _ = done.send(());
    let _ = ticker.join();
    out
}
