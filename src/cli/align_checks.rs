//! What `align` adds to the shared machinery ([`super::common`], `io::guard`): the checks of
//! --voxel and --radius, the keypoint and memory estimate before the heavy work, the run
//! context from the arguments, and a ticker for stages that report no item counts (the shared
//! [`super::common::Progress`] counts items).

use equiscan::align::Viewpoints;
use equiscan::align::report::{RunContext, Units};
use equiscan::io::FileInfo;
use equiscan::{Cloud, Error, Result};

use super::align::{AlignArgs, UnitsArg};
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
/// elapsed time on a terminal, otherwise a line every 5 seconds (from 5 s on); nothing when
/// `quiet`.
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
    // Plain mode: the first line after 5 s, so a quick run or an early error prints nothing
    // but its own lines.
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

/// Refuses a size option (`--voxel`, `--radius`) that is not a positive number.
pub fn positive(v: Option<f64>, option: &str, example: &str) -> Result<()> {
    match v {
        Some(x) if !(x > 0.0 && x.is_finite()) => Err(Error::invalid(
            format!("{option} {x} is not a size greater than 0"),
            format!(
                "give a size such as {option} {example} (file units), or leave it out to choose it from the point spacing"
            ),
        )),
        _ => Ok(()),
    }
}

/// The run's settings, units (flag, else a CRS), job and clock.
pub fn context(args: &AlignArgs, read: &[(Cloud, FileInfo)]) -> RunContext {
    let units = args.units.map(|u| match u {
        UnitsArg::M => Units::Metre,
        UnitsArg::Mm => Units::Millimetre,
        UnitsArg::Ft => Units::Foot,
        UnitsArg::UsFt => Units::UsSurveyFoot,
    });
    let scans: Vec<_> = args
        .scans
        .iter()
        .zip(read)
        .map(|(p, (c, i))| (p.as_path(), c, i))
        .collect();
    RunContext::new(
        args.seed,
        args.voxel.is_some(),
        args.radius.is_some(),
        units,
        &scans,
    )
}

/// Parses a sensor position `X,Y,Z` (three finite numbers, file coordinates).
pub fn viewpoint(text: &str) -> std::result::Result<[f64; 3], String> {
    let parts: Vec<Option<f64>> = text
        .split(',')
        .map(|t| t.trim().parse::<f64>().ok().filter(|v| v.is_finite()))
        .collect();
    match parts.as_slice() {
        [Some(x), Some(y), Some(z)] => Ok([*x, *y, *z]),
        _ => Err(format!(
            "{text:?} is not a position; give three numbers separated by commas, X,Y,Z in the scan's file coordinates, e.g. 12.5,-3,1.6"
        )),
    }
}

/// The sensor positions of SOURCE and TARGET for the free-space test and where each came
/// from ([`Viewpoints::pick`]: the options, else an E57 scan's recorded pose).
pub fn viewpoints(
    args: &AlignArgs,
    read: &[(Cloud, FileInfo)],
) -> (Viewpoints, [Option<String>; 2]) {
    let recorded = |k: usize| read.get(k).and_then(|(_, info)| info.viewpoint);
    let file = |k: usize| {
        args.scans
            .get(k)
            .map(|p| p.display().to_string())
            .unwrap_or_default()
    };
    let files = [file(0), file(1)];
    Viewpoints::pick(
        [args.source_viewpoint, args.target_viewpoint],
        [recorded(0), recorded(1)],
        ["--source-viewpoint", "--target-viewpoint"],
        [&files[0], &files[1]],
    )
}
