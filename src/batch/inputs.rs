//! The inputs of a batch run: files, folders (their LAS, LAZ and PLY files, not recursive) and
//! glob patterns (`*`, `?`, `[...]`, for patterns quoted past the shell, e.g. in a job
//! script), expanded into one sorted list without duplicates.

use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

/// File extensions (without case) taken from a folder.
pub const POINT_EXTENSIONS: [&str; 3] = ["las", "laz", "ply"];

/// The expanded inputs and what was left out, in words.
#[derive(Debug, Clone, Default)]
pub struct Inputs {
    /// Point-cloud files, sorted by path, each once.
    pub files: Vec<PathBuf>,
    /// Notes for the user: files of a folder skipped because they are not point-cloud files.
    pub notes: Vec<String>,
}

fn is_point_file(p: &Path) -> bool {
    p.extension()
        .and_then(|e| e.to_str())
        .is_some_and(|e| POINT_EXTENSIONS.contains(&e.to_ascii_lowercase().as_str()))
}

fn hidden(p: &Path) -> bool {
    p.file_name()
        .and_then(|n| n.to_str())
        .is_some_and(|n| n.starts_with('.'))
}

fn has_wildcard(s: &str) -> bool {
    s.contains(['*', '?', '['])
}

/// Expands `given` into point-cloud files. Files are taken as given (the format is read from
/// their content later); a folder gives its files ending in `.las`, `.laz` or `.ply` (any
/// case), not hidden, not inside `skip` (the output folder), and a note naming the others; a
/// pattern that names no existing path is expanded as a glob. A missing path, a pattern that
/// matches nothing and an empty result are errors.
pub fn expand(given: &[PathBuf], skip: Option<&Path>) -> Result<Inputs> {
    let skip = skip.and_then(|s| s.canonicalize().ok());
    let inside_skip = |p: &Path| {
        skip.as_ref().is_some_and(|s| {
            p.parent()
                .and_then(|d| d.canonicalize().ok())
                .is_some_and(|d| d.starts_with(s))
        })
    };
    let mut out = Inputs::default();
    for g in given {
        let text = g.to_string_lossy();
        if g.is_dir() {
            let mut skipped = Vec::new();
            let entries = std::fs::read_dir(g).map_err(|e| Error::io(g, &e))?;
            for e in entries {
                let p = e.map_err(|e| Error::io(g, &e))?.path();
                if p.is_dir() || hidden(&p) {
                    continue;
                }
                if is_point_file(&p) && !inside_skip(&p) {
                    out.files.push(p);
                } else if !inside_skip(&p) {
                    skipped.push(
                        p.file_name()
                            .unwrap_or_default()
                            .to_string_lossy()
                            .into_owned(),
                    );
                }
            }
            if !skipped.is_empty() {
                skipped.sort();
                let shown: Vec<&str> = skipped.iter().take(5).map(String::as_str).collect();
                out.notes.push(format!(
                    "{}: skipped {} that {} not .las, .laz or .ply ({}{})",
                    g.display(),
                    if skipped.len() == 1 {
                        "1 file".to_string()
                    } else {
                        format!("{} files", skipped.len())
                    },
                    if skipped.len() == 1 { "is" } else { "are" },
                    shown.join(", "),
                    if skipped.len() > 5 { ", …" } else { "" }
                ));
            }
        } else if g.exists() {
            out.files.push(g.clone());
        } else if has_wildcard(&text) {
            let paths = glob::glob(&text).map_err(|e| {
                Error::invalid(
                    format!("{text}: not a valid pattern ({e})"),
                    "use * and ? in names, or quote a literal name",
                )
            })?;
            let mut n = 0;
            for p in paths.flatten() {
                if p.is_file() && !hidden(&p) && !inside_skip(&p) {
                    out.files.push(p);
                    n += 1;
                }
            }
            if n == 0 {
                return Err(Error::file(
                    g,
                    "the pattern matches no file",
                    "check the pattern and the folder it names",
                ));
            }
        } else {
            return Err(Error::file(
                g,
                "no such file or folder",
                "check the path (folders and quoted patterns such as 'tiles/*.laz' are accepted)",
            ));
        }
    }
    out.files.sort();
    out.files.dedup();
    // The same file through two spellings (a folder and a pattern, a link) counts once.
    let mut seen = std::collections::HashSet::new();
    out.files
        .retain(|p| seen.insert(p.canonicalize().unwrap_or_else(|_| p.clone())));
    if out.files.is_empty() {
        return Err(Error::invalid(
            "no LAS, LAZ or PLY file among the inputs",
            "give files, folders holding .las/.laz/.ply files, or patterns such as 'tiles/*.laz'",
        ));
    }
    Ok(out)
}
