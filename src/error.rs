//! Error type shared by the library.
//!
//! Every message reads `SUBJECT: what is wrong; what to do`, lowercase after the subject, on one
//! line, so the command line can print it as it is.

use std::path::Path;

/// Result alias used across the library.
pub type Result<T> = std::result::Result<T, Error>;

/// What can go wrong in equiscan.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// A file could not be used: missing, unreadable, malformed, truncated, unsupported.
    #[error("{path}: {what}; {fix}")]
    File {
        /// The file as the user named it.
        path: String,
        /// What is wrong with it.
        what: String,
        /// What the user can do about it.
        fix: String,
    },
    /// A parameter or an in-memory input is not acceptable.
    #[error("{what}; {fix}")]
    Invalid {
        /// What is wrong.
        what: String,
        /// What the user can do about it.
        fix: String,
    },
}

impl Error {
    /// A problem with the file at `path`.
    pub fn file(path: impl AsRef<Path>, what: impl Into<String>, fix: impl Into<String>) -> Self {
        Error::File {
            path: path.as_ref().display().to_string(),
            what: what.into(),
            fix: fix.into(),
        }
    }

    /// An operating-system I/O failure on `path`, with a hint that fits its kind.
    pub fn io(path: impl AsRef<Path>, err: &std::io::Error) -> Self {
        use std::io::ErrorKind as K;
        let (what, fix) = match err.kind() {
            K::NotFound => ("no such file or folder".to_string(), "check the path"),
            K::PermissionDenied => (
                "permission denied".to_string(),
                "check the file's permissions",
            ),
            K::UnexpectedEof => (
                "the file ends early (truncated)".to_string(),
                "copy or export the file again",
            ),
            _ => (
                lowercase_first(&err.to_string()),
                "check the path, the disk and the permissions",
            ),
        };
        Error::file(path, what, fix)
    }

    /// A bad parameter.
    pub fn invalid(what: impl Into<String>, fix: impl Into<String>) -> Self {
        Error::Invalid {
            what: what.into(),
            fix: fix.into(),
        }
    }
}

fn lowercase_first(s: &str) -> String {
    let mut c = s.chars();
    match c.next() {
        Some(f) => f.to_lowercase().collect::<String>() + c.as_str(),
        None => String::new(),
    }
}
