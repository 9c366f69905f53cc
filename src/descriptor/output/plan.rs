//! Where each input's feature file goes, checked before any work.

use std::collections::HashSet;
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};
use crate::io::guard::{FOLDER_MISSING, FOLDER_MISSING_FIX, check_outputs, folder_of};

use super::Format;

/// One input and its feature file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Job {
    /// The point-cloud file to read.
    pub input: PathBuf,
    /// The feature file to write.
    pub output: PathBuf,
    /// Its format.
    pub format: Format,
}

/// Plans the feature files of `inputs`: one input and `output` not a folder → `output` in
/// `format` or the format of its extension; otherwise `output` is a folder (made when missing,
/// inside an existing folder) holding `<input stem>.<ext>` per input, in `format` or NPY.
///
/// Refused before any point is read: an unknown format, a file name for several inputs, two
/// inputs of one stem, a missing folder, and any output (sidecars included) that is the same
/// file as an input or as `also_read` (e.g. a keypoint file).
pub fn plan(
    inputs: &[PathBuf],
    output: &Path,
    format: Option<Format>,
    also_read: Option<&Path>,
) -> Result<Vec<Job>> {
    let out = output;
    let jobs = if inputs.len() == 1 && !out.is_dir() {
        let format = format.or_else(|| Format::from_path(out)).ok_or_else(|| {
            Error::file(
                out,
                "cannot tell the output format from the name",
                "end the output name in .npy, .ply, .csv, .las or .laz, or give --format",
            )
        })?;
        vec![Job {
            input: inputs[0].clone(),
            output: out.to_path_buf(),
            format,
        }]
    } else {
        if out.exists() && !out.is_dir() || !out.exists() && Format::from_path(out).is_some() {
            return Err(Error::file(
                out,
                format!(
                    "names a file, but {} inputs need an output folder",
                    inputs.len()
                ),
                "give a folder for -o (one file per input is written there), or run one input at a time",
            ));
        }
        let format = format.unwrap_or(Format::Npy);
        let mut seen = HashSet::new();
        let mut jobs = Vec::new();
        for input in inputs {
            let stem = input
                .file_stem()
                .map_or("features".to_string(), |s| s.to_string_lossy().into_owned());
            if !seen.insert(stem.clone()) {
                return Err(Error::file(
                    input,
                    format!(
                        "another input also has the name {stem}, so their outputs would collide"
                    ),
                    "run them separately or rename one",
                ));
            }
            jobs.push(Job {
                input: input.clone(),
                output: out.join(format!("{stem}.{}", format.ext())),
                format,
            });
        }
        if !out.exists() {
            // The folder for several inputs is made, but only inside an existing one.
            if !folder_of(out).is_dir() {
                return Err(Error::file(
                    folder_of(out),
                    FOLDER_MISSING,
                    FOLDER_MISSING_FIX,
                ));
            }
            std::fs::create_dir(out).map_err(|e| Error::io(out, &e))?;
        }
        jobs
    };
    let read: Vec<&Path> = inputs
        .iter()
        .map(PathBuf::as_path)
        .chain(also_read)
        .collect();
    let files: Vec<PathBuf> = jobs
        .iter()
        .flat_map(|j| j.format.files(&j.output))
        .collect();
    let files: Vec<&Path> = files.iter().map(PathBuf::as_path).collect();
    check_outputs(&read, &files)?;
    Ok(jobs)
}
