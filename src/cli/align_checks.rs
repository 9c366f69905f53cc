//! What `align` adds to the shared machinery ([`super::common`], `io::guard`): the
//! keypoint and memory estimate before the heavy work, and a ticker for stages that report no
//! item counts (the shared [`super::common::Progress`] counts items).

use equiscan::{Cloud, Error, Result};

use super::common::{Size, plural};

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

/// Refuses a run whose estimated memory exceeds `budget` bytes, with the cost and the ways on.
pub fn check_cost(keypoints: usize, voxel: f64, budget: u64) -> Result<()> {
    let bytes = (keypoints as f64 * BYTES_PER_KEYPOINT) as u64;
    if bytes > budget {
        return Err(Error::invalid(
            format!(
                "--voxel {voxel} gives about {}, about {} of memory, more than allowed ({})",
                plural(keypoints, "keypoint", "keypoints"),
                Size(bytes),
                Size(budget)
            ),
            "give a larger --voxel or leave it out (the automatic size aims at about 5 000 keypoints), a larger --max-memory, or --force",
        ));
    }
    Ok(())
}

/// Runs `work`, showing that `what` is under way on standard error: a spinner with the
/// elapsed time on a terminal, otherwise a line every 5 seconds; nothing when `quiet`.
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
