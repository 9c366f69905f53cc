//! Output safety, checked before any work: an output never replaces an input, every output's
//! folder exists, and an output's extension matches what is written into it.
//!
//! Identity is the file's identity, not the spelling of its path: on Unix the device and inode
//! numbers (so hard links, symbolic links, `./a.ply` and `../dir/a.ply` are all seen as the
//! same file), elsewhere the canonical path. An output that does not exist yet is compared by
//! its canonical folder plus its name. Every command calls [`check_outputs`] with all its
//! inputs and every file it will write (sidecars included) before reading the first point.

use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

/// What is wrong when an output's folder is missing: the one wording every command uses.
pub const FOLDER_MISSING: &str = "the folder does not exist";
/// What to do about a missing output folder.
pub const FOLDER_MISSING_FIX: &str =
    "create the folder first, or give an output in an existing folder";

/// The folder an output path is written into (`.` for a bare file name).
pub fn folder_of(path: &Path) -> PathBuf {
    match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

/// Checks that the folder `dir` exists and is a folder, with the shared wording.
pub fn check_folder(dir: &Path) -> Result<()> {
    match std::fs::metadata(dir) {
        Ok(m) if m.is_dir() => Ok(()),
        Ok(_) => Err(Error::file(
            dir,
            "is a file, not a folder",
            "give an output in an existing folder",
        )),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
            Err(Error::file(dir, FOLDER_MISSING, FOLDER_MISSING_FIX))
        }
        Err(e) => Err(Error::io(dir, &e)),
    }
}

/// The identity of an existing file: device and inode on Unix, the canonical path elsewhere.
#[derive(Debug, Clone, PartialEq, Eq)]
enum Identity {
    #[cfg(unix)]
    Inode(u64, u64),
    #[cfg(not(unix))]
    Canonical(PathBuf),
}

fn identity_of_existing(path: &Path) -> Option<Identity> {
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        if let Ok(m) = std::fs::metadata(path) {
            return Some(Identity::Inode(m.dev(), m.ino()));
        }
        None
    }
    #[cfg(not(unix))]
    {
        std::fs::canonicalize(path).ok().map(Identity::Canonical)
    }
}

/// The canonical path an output will have: its own when it exists, else the canonical folder
/// joined with its name. `None` when the folder cannot be resolved.
fn canonical_target(path: &Path) -> Option<PathBuf> {
    if let Ok(c) = std::fs::canonicalize(path) {
        return Some(c);
    }
    let name = path.file_name()?;
    Some(std::fs::canonicalize(folder_of(path)).ok()?.join(name))
}

/// True when `output` is, or would be written onto, the same file as `input`.
pub fn same_file(output: &Path, input: &Path) -> bool {
    if let (Some(a), Some(b)) = (identity_of_existing(output), identity_of_existing(input)) {
        return a == b;
    }
    match (canonical_target(output), canonical_target(input)) {
        (Some(a), Some(b)) => a == b,
        _ => false,
    }
}

/// Refuses, with one line and before any work, an output that is the same file as an input
/// (an input `FILE.e57#SCAN` is the file FILE) or as another output, an output that is a folder, and an output whose folder is missing.
pub fn check_outputs(inputs: &[&Path], outputs: &[&Path]) -> Result<()> {
    for (k, out) in outputs.iter().enumerate() {
        check_folder(&folder_of(out))?;
        if out.is_dir() {
            return Err(Error::file(
                out,
                "is a folder",
                "give the path of a file to write",
            ));
        }
        // `FILE.e57#NAME` is the file FILE.
        if let Some(input) = inputs
            .iter()
            .find(|i| same_file(out, &super::split_scan(i).0))
        {
            return Err(Error::file(
                out,
                format!(
                    "is the same file as the input {}, which would be replaced",
                    input.display()
                ),
                "give another output name so that the input is kept",
            ));
        }
        if let Some(other) = outputs[..k].iter().find(|o| same_file(out, o)) {
            return Err(Error::file(
                out,
                format!("is also written as {}", other.display()),
                "give each output its own name",
            ));
        }
    }
    Ok(())
}

/// Refuses an output whose extension is not one of `allowed` (compared without case), with
/// advice naming the first allowed extension: e.g. a `.jpg` name for a file written as PNG.
/// `kind` names what is written, e.g. `"a PNG picture"`.
pub fn check_extension(path: &Path, allowed: &[&str], kind: &str) -> Result<()> {
    let ext = path
        .extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase);
    if let Some(e) = &ext
        && allowed.iter().any(|a| a.eq_ignore_ascii_case(e))
    {
        return Ok(());
    }
    let want = allowed.first().copied().unwrap_or("");
    let what = match &ext {
        Some(e) => format!("ends in .{e}, but it is written as {kind}"),
        None => format!("has no extension, but it is written as {kind}"),
    };
    Err(Error::file(
        path,
        what,
        format!("name it {}", path.with_extension(want).display()),
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn same_file_by_identity_not_spelling() {
        let dir = tempfile::tempdir().unwrap();
        let a = dir.path().join("a.ply");
        std::fs::write(&a, b"ply\n").unwrap();
        let sub = dir.path().join("sub");
        std::fs::create_dir(&sub).unwrap();
        let spelled = sub.join("..").join("a.ply");
        assert!(same_file(&spelled, &a));
        #[cfg(unix)]
        {
            let link = dir.path().join("link.ply");
            std::os::unix::fs::symlink(&a, &link).unwrap();
            assert!(same_file(&link, &a));
            let hard = dir.path().join("hard.ply");
            std::fs::hard_link(&a, &hard).unwrap();
            assert!(same_file(&hard, &a));
        }
        assert!(!same_file(&dir.path().join("b.ply"), &a));
        let err = check_outputs(&[&a], &[&spelled]).unwrap_err().to_string();
        assert!(err.contains("is the same file as the input"), "{err}");
        assert!(check_outputs(&[&a], &[&dir.path().join("b.ply")]).is_ok());
    }

    #[test]
    fn missing_folder_has_one_wording() {
        let err = check_outputs(&[], &[Path::new("/no/such/dir/x.npy")])
            .unwrap_err()
            .to_string();
        assert_eq!(
            err,
            format!("/no/such/dir: {FOLDER_MISSING}; {FOLDER_MISSING_FIX}")
        );
    }

    #[test]
    fn two_outputs_on_one_file_are_refused() {
        let dir = tempfile::tempdir().unwrap();
        let x = dir.path().join("x.json");
        let err = check_outputs(&[], &[&x, &dir.path().join(".").join("x.json")])
            .unwrap_err()
            .to_string();
        assert!(err.contains("is also written as"), "{err}");
    }

    #[test]
    fn extension_check_gives_advice() {
        assert!(check_extension(Path::new("p.PNG"), &["png"], "a PNG picture").is_ok());
        let err = check_extension(Path::new("p.jpg"), &["png"], "a PNG picture")
            .unwrap_err()
            .to_string();
        assert_eq!(
            err,
            "p.jpg: ends in .jpg, but it is written as a PNG picture; name it p.png"
        );
    }
}
