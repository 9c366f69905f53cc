//! Atomic file writing: write into a temporary file beside the target, then rename.
//!
//! A crash, a full disk or a bad input therefore never leaves a half-written output under the
//! target name, and an existing file at the target is replaced only once the new content is
//! complete. The temporary file lives in the target's folder (a rename across file systems
//! would not be atomic) and is removed when writing fails.
//!
//! Temporary files are named `.NAME.HOST.PID.N.equiscan-tmp` (`HOST` the first label of this
//! machine's host name, with anything but letters, digits and `-` replaced by `-`; `N` counts
//! within the process), so that a later run recognises its own stale ones: before the first
//! temporary file in a folder, [`TempFile::create`] removes every `*.equiscan-tmp` there that
//! was made on this host by a process that is gone (Linux: no `/proc/PID`). Files of other
//! hosts are never removed: a folder shared by several machines (shards of one run writing
//! into one network OUTDIR) holds their in-flight files, whose process ids mean nothing here.
//! Live temporary paths are kept in a process-wide registry; [`remove_live_temp_files`]
//! deletes them, for a signal handler that then exits.

use std::collections::HashSet;
use std::fs::{self, File};
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Mutex, MutexGuard};

use crate::error::{Error, Result};

/// Buffer size of the writer handed to the closure, bytes.
const BUFFER: usize = 1 << 20;

/// Suffix of every temporary file the library writes.
pub const TEMP_SUFFIX: &str = ".equiscan-tmp";

/// Temporary files of this process not yet renamed or removed.
static LIVE: Mutex<Vec<PathBuf>> = Mutex::new(Vec::new());
/// Folders already swept for stale temporary files by this process.
static SWEPT: Mutex<Option<HashSet<PathBuf>>> = Mutex::new(None);

fn lock<T>(m: &Mutex<T>) -> MutexGuard<'_, T> {
    m.lock().unwrap_or_else(|e| e.into_inner())
}

/// Removes every temporary file this process is still writing; returns how many were removed.
/// Meant for a SIGINT/SIGTERM handler that exits right after (writers still running may fail).
pub fn remove_live_temp_files() -> usize {
    let mut live = lock(&LIVE);
    let n = live.iter().filter(|p| fs::remove_file(p).is_ok()).count();
    live.clear();
    n
}

fn unregister(path: &Path) {
    let mut live = lock(&LIVE);
    if let Some(k) = live.iter().position(|p| p == path) {
        live.swap_remove(k);
    }
}

/// This machine's host name as temporary names carry it: the first label of the kernel's
/// host name (Linux `/proc/sys/kernel/hostname`, else the `HOSTNAME` variable), letters,
/// digits and `-` kept, anything else replaced by `-`, at most 63 bytes; `unknown-host` when
/// neither gives one.
pub fn host_label() -> &'static str {
    static HOST: std::sync::OnceLock<String> = std::sync::OnceLock::new();
    HOST.get_or_init(|| {
        let raw = fs::read_to_string("/proc/sys/kernel/hostname")
            .ok()
            .or_else(|| std::env::var("HOSTNAME").ok())
            .unwrap_or_default();
        let label = sanitize_host(&raw);
        if label.is_empty() {
            "unknown-host".to_string()
        } else {
            label
        }
    })
}

/// The first label of `raw` (up to the first `.`), trimmed, with characters other than ASCII
/// letters, digits and `-` replaced by `-`, at most 63 bytes.
fn sanitize_host(raw: &str) -> String {
    let first = raw.trim().split('.').next().unwrap_or("");
    first
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' {
                c
            } else {
                '-'
            }
        })
        .take(63)
        .collect()
}

/// Who made a temporary file: the host label and the process id its name carries.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TempOwner {
    /// [`host_label`] of the machine that made it.
    pub host: String,
    /// Its process id on that machine.
    pub pid: u32,
}

/// The host and process encoded in a temporary file name of ours
/// (`.NAME.HOST.PID.N.equiscan-tmp`), if `name` is one.
pub fn temp_owner(name: &str) -> Option<TempOwner> {
    let stem = name.strip_prefix('.')?.strip_suffix(TEMP_SUFFIX)?;
    let mut parts = stem.rsplitn(4, '.');
    let _counter: u64 = parts.next()?.parse().ok()?;
    let pid: u32 = parts.next()?.parse().ok()?;
    let host = parts.next().filter(|h| !h.is_empty())?;
    parts.next().filter(|n| !n.is_empty())?;
    Some(TempOwner {
        host: host.to_string(),
        pid,
    })
}

/// True when process `pid` of this host is known to be gone (Linux: `/proc` is mounted and
/// has no entry for it). Where that cannot be told, the process is taken to be alive and its
/// files kept.
pub fn process_gone(pid: u32) -> bool {
    Path::new("/proc/self").exists() && !Path::new(&format!("/proc/{pid}")).exists()
}

/// True when a file or folder made by `owner` may be removed as stale by this process: it was
/// made on this host, by another process, which is gone.
pub fn owner_is_stale(owner: &TempOwner) -> bool {
    owner.host == host_label() && owner.pid != std::process::id() && process_gone(owner.pid)
}

/// Removes the stale temporary files in `dir` (made on this host by equiscan processes that
/// are gone; files of other hosts are kept); returns their number. Errors (unreadable folder,
/// a file removed meanwhile) are ignored.
pub fn remove_stale_temp_files(dir: &Path) -> usize {
    remove_stale_entries(dir, temp_owner, |p| fs::remove_file(p))
}

/// Removes the entries of `dir` whose name `owner_of` reads as made by a stale owner
/// ([`owner_is_stale`]), each with `remove`; returns how many were removed. Errors (unreadable
/// folder, an entry removed meanwhile) are ignored.
pub fn remove_stale_entries(
    dir: &Path,
    owner_of: impl Fn(&str) -> Option<TempOwner>,
    remove: impl Fn(&Path) -> std::io::Result<()>,
) -> usize {
    let Ok(entries) = fs::read_dir(dir) else {
        return 0;
    };
    entries
        .flatten()
        .filter(|e| {
            e.file_name()
                .to_str()
                .and_then(&owner_of)
                .is_some_and(|o| owner_is_stale(&o))
        })
        .filter(|e| remove(&e.path()).is_ok())
        .count()
}

fn sweep_once(dir: &Path) {
    let key = fs::canonicalize(dir).unwrap_or_else(|_| dir.to_path_buf());
    let first = lock(&SWEPT).get_or_insert_with(HashSet::new).insert(key);
    if first {
        remove_stale_temp_files(dir);
    }
}

/// A temporary path in the folder of `path`: `.NAME.HOST.PID.N.equiscan-tmp`.
fn temp_path_for(path: &Path) -> Result<PathBuf> {
    static COUNTER: AtomicU64 = AtomicU64::new(0);
    let name = path.file_name().ok_or_else(|| {
        Error::file(
            path,
            "is not a file name",
            "give the path of a file to write",
        )
    })?;
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    let tmp_name = format!(
        ".{}.{}.{}.{}{TEMP_SUFFIX}",
        name.to_string_lossy(),
        host_label(),
        std::process::id(),
        n
    );
    Ok(super::guard::folder_of(path).join(tmp_name))
}

/// A file being written under a temporary name beside its target; removed on drop unless
/// committed. Registered for [`remove_live_temp_files`] while it exists.
#[derive(Debug)]
pub struct TempFile {
    target: PathBuf,
    tmp: PathBuf,
    writer: Option<BufWriter<File>>,
}

impl TempFile {
    /// Creates the temporary file for `target` (after sweeping the folder's stale ones once
    /// per process). `target` must not be a folder.
    pub fn create(target: &Path) -> Result<TempFile> {
        if target.is_dir() {
            return Err(Error::file(
                target,
                "is a folder",
                "give the path of a file to write",
            ));
        }
        let tmp = temp_path_for(target)?;
        sweep_once(&super::guard::folder_of(target));
        // Created and registered under the lock, so a signal handler sees every file created.
        let file = {
            let mut live = lock(&LIVE);
            // Readable too: the LAS writer patches its header after the points.
            let file = fs::OpenOptions::new()
                .read(true)
                .write(true)
                .create(true)
                .truncate(true)
                .open(&tmp)
                .map_err(|e| Error::io(target, &e))?;
            live.push(tmp.clone());
            file
        };
        Ok(TempFile {
            target: target.to_path_buf(),
            tmp,
            writer: Some(BufWriter::with_capacity(BUFFER, file)),
        })
    }

    /// The target path.
    pub fn target(&self) -> &Path {
        &self.target
    }

    /// The temporary path.
    pub fn temp_path(&self) -> &Path {
        &self.tmp
    }

    /// The buffered writer.
    pub fn writer(&mut self) -> &mut BufWriter<File> {
        self.writer
            .as_mut()
            .expect("the writer exists until finish")
    }

    /// Flushes and syncs the content; the file stays under its temporary name until
    /// [`Finished::commit`].
    pub fn finish(mut self) -> Result<Finished> {
        let w = self.writer.take().expect("the writer exists until finish");
        let file = w
            .into_inner()
            .map_err(|e| Error::io(&self.target, e.error()))?;
        file.sync_all().map_err(|e| Error::io(&self.target, &e))?;
        drop(file);
        Ok(Finished {
            target: std::mem::take(&mut self.target),
            tmp: std::mem::take(&mut self.tmp),
        })
    }
}

impl Drop for TempFile {
    fn drop(&mut self) {
        if !self.tmp.as_os_str().is_empty() {
            self.writer.take();
            let _ = fs::remove_file(&self.tmp);
            unregister(&self.tmp);
        }
    }
}

/// A complete, synced temporary file waiting to be renamed onto its target; removed on drop
/// unless committed.
#[derive(Debug)]
pub struct Finished {
    target: PathBuf,
    tmp: PathBuf,
}

impl Finished {
    /// Renames the file onto its target (replacing an existing file at once).
    pub fn commit(mut self) -> Result<()> {
        let tmp = std::mem::take(&mut self.tmp);
        let res = fs::rename(&tmp, &self.target).map_err(|e| Error::io(&self.target, &e));
        if res.is_err() {
            let _ = fs::remove_file(&tmp);
        }
        unregister(&tmp);
        res
    }
}

impl Drop for Finished {
    fn drop(&mut self) {
        if !self.tmp.as_os_str().is_empty() {
            let _ = fs::remove_file(&self.tmp);
            unregister(&self.tmp);
        }
    }
}

/// Writes `path` atomically: `body` fills a buffered temporary file in the same folder, which
/// is flushed, synced and renamed onto `path` when `body` succeeds, and removed otherwise.
///
/// Errors of `body` are returned unchanged; I/O failures name `path`.
pub fn write_atomic<F>(path: &Path, body: F) -> Result<()>
where
    F: FnOnce(&mut BufWriter<File>) -> Result<()>,
{
    let mut t = TempFile::create(path)?;
    body(t.writer())?;
    t.finish()?.commit()
}

/// Convenience: `write_all` with the error naming `path`.
pub(crate) fn put(w: &mut impl Write, path: &Path, bytes: &[u8]) -> Result<()> {
    w.write_all(bytes).map_err(|e| Error::io(path, &e))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn names(dir: &Path) -> Vec<String> {
        let mut v: Vec<String> = fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    }

    #[test]
    fn success_renames_and_failure_leaves_nothing() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("out.bin");
        write_atomic(&target, |w| put(w, &target, b"first")).unwrap();
        assert_eq!(fs::read(&target).unwrap(), b"first");

        let err = write_atomic(&target, |w| {
            put(w, &target, b"half of it")?;
            Err(Error::invalid("stopped on purpose", "nothing"))
        })
        .unwrap_err();
        assert!(err.to_string().contains("stopped on purpose"));
        // The old content is untouched and no temporary file is left behind.
        assert_eq!(fs::read(&target).unwrap(), b"first");
        assert_eq!(names(dir.path()), ["out.bin"]);
    }

    #[test]
    fn refuses_a_folder_as_target() {
        let dir = tempfile::tempdir().unwrap();
        let err = write_atomic(dir.path(), |_| Ok(())).unwrap_err();
        assert!(err.to_string().contains("is a folder"));
    }

    #[test]
    fn temp_names_are_recognised() {
        let t = temp_path_for(Path::new("a/b.x.npy")).unwrap();
        let name = t.file_name().unwrap().to_str().unwrap();
        assert_eq!(
            temp_owner(name),
            Some(TempOwner {
                host: host_label().to_string(),
                pid: std::process::id()
            })
        );
        assert_eq!(
            temp_owner(".b.npy.node-7.12.3.equiscan-tmp"),
            Some(TempOwner {
                host: "node-7".into(),
                pid: 12
            })
        );
        assert_eq!(temp_owner(".b.npy.12.3.tmp"), None);
        assert_eq!(temp_owner("b.npy"), None);
        assert_eq!(temp_owner("..h.12.3.equiscan-tmp"), None);
        assert_eq!(temp_owner(".x..12.3.equiscan-tmp"), None);
    }

    #[test]
    fn host_labels_are_one_safe_label() {
        assert_eq!(sanitize_host("node7.cluster.example\n"), "node7");
        assert_eq!(sanitize_host(" rack_2 host\n"), "rack-2-host");
        assert_eq!(sanitize_host(""), "");
        let h = host_label();
        assert!(!h.is_empty() && !h.contains('.'), "{h}");
    }

    #[test]
    fn stale_files_of_dead_processes_are_removed() {
        if !Path::new("/proc/self").exists() {
            return;
        }
        let dir = tempfile::tempdir().unwrap();
        let here = host_label();
        // No process has the pid u32::MAX - 1 (Linux caps pids at 2^22).
        let dead = dir
            .path()
            .join(format!(".x.npy.{here}.{}.0{TEMP_SUFFIX}", u32::MAX - 1));
        let alive = dir.path().join(format!(".x.npy.{here}.1.0{TEMP_SUFFIX}"));
        let foreign = dir.path().join(".x.npy.99999999.0.tmp");
        // The same dead pid on another host sharing the folder: its process may well be
        // running there, so the file is kept.
        let other_host = format!("{here}-other");
        let elsewhere = dir.path().join(format!(
            ".x.npy.{other_host}.{}.0{TEMP_SUFFIX}",
            u32::MAX - 1
        ));
        // A name of the earlier form without host (`.NAME.PID.N`) reads as host `npy`: kept.
        let old_form = dir
            .path()
            .join(format!(".x.npy.{}.0{TEMP_SUFFIX}", u32::MAX - 1));
        for p in [&dead, &alive, &foreign, &elsewhere, &old_form] {
            fs::write(p, b"left over").unwrap();
        }
        assert_eq!(remove_stale_temp_files(dir.path()), 1);
        assert!(!dead.exists() && alive.exists() && foreign.exists());
        assert!(elsewhere.exists() && old_form.exists());
    }

    #[test]
    fn a_live_file_of_another_host_survives_this_hosts_first_write() {
        if !Path::new("/proc/self").exists() {
            return;
        }
        // Two hosts share an output folder: host B is writing `.t.npy.B.PID.0.equiscan-tmp`
        // with a pid that does not exist here; this host's first atomic write in the folder
        // sweeps it and must leave B's file alone.
        let dir = tempfile::tempdir().unwrap();
        let b = format!("{}-b", host_label());
        let inflight = dir
            .path()
            .join(format!(".t.npy.{b}.{}.0{TEMP_SUFFIX}", u32::MAX - 2));
        fs::write(&inflight, b"rows of host b").unwrap();
        let target = dir.path().join("mine.npy");
        write_atomic(&target, |w| put(w, &target, b"rows of this host")).unwrap();
        assert_eq!(fs::read(&inflight).unwrap(), b"rows of host b");
    }

    #[test]
    fn live_files_are_registered_until_committed() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("y.bin");
        let t = TempFile::create(&target).unwrap();
        let tmp = t.temp_path().to_path_buf();
        assert!(lock(&LIVE).contains(&tmp));
        t.finish().unwrap().commit().unwrap();
        assert!(!lock(&LIVE).contains(&tmp));
        assert!(target.exists() && !tmp.exists());
    }
}
