//! Output safety end to end (the built binary in a temporary folder): an interrupted run
//! leaves no temporary file and exits 130, stale temporary files of dead runs are removed,
//! outputs never replace inputs, missing folders are found before any work.

use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

use equiscan::Cloud;
use equiscan::io::write_ply;

fn equiscan(args: &[&str], dir: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .args(args)
        .current_dir(dir)
        .output()
        .expect("run equiscan")
}

/// `n` points of a seeded noisy sphere of radius 10 (spacing ≈ 0.3 at 20 000 points).
fn sphere(dir: &Path, name: &str, n: usize) -> PathBuf {
    let mut rng = equiscan::so3::rng::SplitMix64::new(7);
    let pts: Vec<[f64; 3]> = (0..n)
        .map(|_| {
            let (u, v) = (
                2.0 * rng.next_f64() - 1.0,
                std::f64::consts::TAU * rng.next_f64(),
            );
            let r = (1.0 - u * u).sqrt() * 10.0;
            [r * v.cos(), r * v.sin(), 10.0 * u]
        })
        .collect();
    let path = dir.join(name);
    write_ply(&path, &Cloud::from_global(&pts), &[]).unwrap();
    path
}

fn temp_files(dir: &Path) -> Vec<String> {
    std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.ends_with(equiscan::io::TEMP_SUFFIX))
        .collect()
}

#[cfg(unix)]
#[test]
fn sigint_while_writing_removes_the_temporary_file_and_exits_130() {
    let dir = tempfile::tempdir().unwrap();
    sphere(dir.path(), "big.ply", 400_000);
    // CSV with the bispectrum: slow enough to be caught while writing.
    let mut child = Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .args([
            "features",
            "big.ply",
            "-o",
            "big.csv",
            "-r",
            "0.6",
            "--invariants",
            "norms,power,bispectrum",
            "--threads",
            "1",
            "-q",
        ])
        .current_dir(dir.path())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let t0 = Instant::now();
    while temp_files(dir.path()).is_empty() {
        assert!(
            t0.elapsed() < Duration::from_secs(120),
            "no temporary file appeared"
        );
        assert!(
            child.try_wait().unwrap().is_none(),
            "finished before the signal"
        );
        std::thread::sleep(Duration::from_millis(20));
    }
    let kill = Command::new("kill")
        .args(["-INT", &child.id().to_string()])
        .status()
        .unwrap();
    assert!(kill.success());
    let out = child.wait_with_output().unwrap();
    assert_eq!(
        out.status.code(),
        Some(130),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert_eq!(temp_files(dir.path()), Vec::<String>::new());
    assert!(!dir.path().join("big.csv").exists());
}

#[test]
fn stale_temporary_files_of_dead_runs_are_removed() {
    let dir = tempfile::tempdir().unwrap();
    sphere(dir.path(), "s.ply", 2_000);
    let host = equiscan::io::host_label();
    let suffix = equiscan::io::TEMP_SUFFIX;
    let stale = format!(".s.npy.{host}.{}.0{suffix}", u32::MAX - 1);
    std::fs::write(dir.path().join(&stale), b"left by a killed run").unwrap();
    // The same pid on another host sharing the folder: maybe still writing there, kept.
    let elsewhere = format!(".t.npy.{host}-b.{}.0{suffix}", u32::MAX - 1);
    std::fs::write(dir.path().join(&elsewhere), b"in flight on host b").unwrap();
    let out = equiscan(&["features", "s.ply", "-o", "s.npy", "-r", "2"], dir.path());
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert_eq!(temp_files(dir.path()), vec![elsewhere]);
}

#[test]
fn threads_beyond_the_cap_are_capped_with_a_note() {
    let dir = tempfile::tempdir().unwrap();
    sphere(dir.path(), "s.ply", 2_000);
    let out = equiscan(
        &[
            "features",
            "s.ply",
            "-o",
            "s.npy",
            "-r",
            "2",
            "--threads",
            "100000",
        ],
        dir.path(),
    );
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "{stderr}");
    assert!(
        stderr.contains("--threads 100000 is more than 4 per core"),
        "{stderr}"
    );
    let out = equiscan(
        &["info", "s.ply", "--threads", "100000", "--json", "-q"],
        dir.path(),
    );
    assert!(out.status.success());
    assert!(
        out.stderr.is_empty(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["points_read"], 2_000);
}
