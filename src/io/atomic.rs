//! Atomic file writing: write into a temporary file beside the target, then rename.
//!
//! A crash, a full disk or a bad input therefore never leaves a half-written output under the
//! target name, and an existing file at the target is replaced only once the new content is
//! complete. The temporary file lives in the target's folder (a rename across file systems
//! would not be atomic) and is removed when writing fails.

use std::fs::{self, File};
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

use crate::error::{Error, Result};

/// Buffer size of the writer handed to the closure, bytes.
const BUFFER: usize = 1 << 20;

/// Removes the temporary file on drop unless `keep` was called.
struct TempGuard {
    path: PathBuf,
    armed: bool,
}

impl Drop for TempGuard {
    fn drop(&mut self) {
        if self.armed {
            let _ = fs::remove_file(&self.path);
        }
    }
}

/// A temporary path in the folder of `path`: `.NAME.PID.N.tmp`.
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
        ".{}.{}.{}.tmp",
        name.to_string_lossy(),
        std::process::id(),
        n
    );
    Ok(match path.parent() {
        Some(dir) if !dir.as_os_str().is_empty() => dir.join(tmp_name),
        _ => PathBuf::from(tmp_name),
    })
}

/// Writes `path` atomically: `body` fills a buffered temporary file in the same folder, which
/// is flushed, synced and renamed onto `path` when `body` succeeds, and removed otherwise.
///
/// Errors of `body` are returned unchanged; I/O failures name `path`.
pub fn write_atomic<F>(path: &Path, body: F) -> Result<()>
where
    F: FnOnce(&mut BufWriter<File>) -> Result<()>,
{
    if path.is_dir() {
        return Err(Error::file(
            path,
            "is a folder",
            "give the path of a file to write",
        ));
    }
    let tmp = temp_path_for(path)?;
    let file = File::create(&tmp).map_err(|e| Error::io(path, &e))?;
    let mut guard = TempGuard {
        path: tmp.clone(),
        armed: true,
    };
    let mut w = BufWriter::with_capacity(BUFFER, file);
    body(&mut w)?;
    let file = w.into_inner().map_err(|e| Error::io(path, e.error()))?;
    file.sync_all().map_err(|e| Error::io(path, &e))?;
    drop(file);
    fs::rename(&tmp, path).map_err(|e| Error::io(path, &e))?;
    guard.armed = false;
    Ok(())
}

/// Convenience: `write_all` with the error naming `path`.
pub(crate) fn put(w: &mut impl Write, path: &Path, bytes: &[u8]) -> Result<()> {
    w.write_all(bytes).map_err(|e| Error::io(path, &e))
}

#[cfg(test)]
mod tests {
    use super::*;

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
        let names: Vec<_> = fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(names.len(), 1, "{names:?}");
    }

    #[test]
    fn refuses_a_folder_as_target() {
        let dir = tempfile::tempdir().unwrap();
        let err = write_atomic(dir.path(), |_| Ok(())).unwrap_err();
        assert!(err.to_string().contains("is a folder"));
    }
}
