//! Error type shared by the library.
//!
//! Every message reads `SUBJECT: what is wrong; what to do`, lowercase after the subject, on one
//! line, so the command line can print it as it is.
//!
//! Every error also has a [`Kind`] that a program running many files can act on without reading
//! the text: [`Kind::Input`] (this file is corrupt or unsupported: skip it), [`Kind::Io`] (the
//! operating system failed: retry later or fix the disk), [`Kind::Recipe`] (a parameter is not
//! acceptable: stop, every file would fail the same way) and [`Kind::Internal`] (a defect of
//! equiscan: report it). Where a lower-level error caused it, [`std::error::Error::source`]
//! gives that error.

use std::path::Path;
use std::sync::Arc;

/// Result alias used across the library.
pub type Result<T> = std::result::Result<T, Error>;

/// A lower-level error kept as the [`std::error::Error::source`] of an [`Error`].
pub type Source = Arc<dyn std::error::Error + Send + Sync + 'static>;

/// What kind of failure an [`Error`] is, and so what a caller running many files should do.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Kind {
    /// The input file is corrupt, truncated, malformed or in an unsupported variant: skip it;
    /// trying again gives the same result.
    Input,
    /// The operating system refused or failed (missing file, permissions, full disk, device
    /// error): the file may be fine; retry once the cause is fixed.
    Io,
    /// A parameter (recipe, option, in-memory argument) is not acceptable: stop, every file
    /// would fail the same way.
    Recipe,
    /// A defect of equiscan (a broken internal promise, a caught panic): report it.
    Internal,
}

impl Kind {
    /// Lowercase name (`input`, `io`, `recipe`, `internal`).
    pub fn name(self) -> &'static str {
        match self {
            Kind::Input => "input",
            Kind::Io => "io",
            Kind::Recipe => "recipe",
            Kind::Internal => "internal",
        }
    }
}

/// What can go wrong in equiscan.
#[derive(Debug, Clone, thiserror::Error)]
pub enum Error {
    /// A file could not be used: missing, unreadable, malformed, truncated, unsupported, or
    /// not writable.
    #[error("{path}: {what}; {fix}")]
    File {
        /// The file as the user named it.
        path: String,
        /// What is wrong with it.
        what: String,
        /// What the user can do about it.
        fix: String,
        /// What kind of failure this is.
        kind: Kind,
        /// The lower-level error behind it, when there is one.
        #[source]
        source: Option<Source>,
    },
    /// A parameter or an in-memory input is not acceptable.
    #[error("{what}; {fix}")]
    Invalid {
        /// What is wrong.
        what: String,
        /// What the user can do about it.
        fix: String,
        /// What kind of failure this is.
        kind: Kind,
    },
}

impl Error {
    /// A problem with the content of the file at `path` ([`Kind::Input`]).
    pub fn file(path: impl AsRef<Path>, what: impl Into<String>, fix: impl Into<String>) -> Self {
        Error::File {
            path: path.as_ref().display().to_string(),
            what: what.into(),
            fix: fix.into(),
            kind: Kind::Input,
            source: None,
        }
    }

    /// A problem with the content of the file at `path`: the same as [`Error::file`], named
    /// after its kind.
    pub fn input(path: impl AsRef<Path>, what: impl Into<String>, fix: impl Into<String>) -> Self {
        Error::file(path, what, fix)
    }

    /// An operating-system I/O failure on `path`, with a hint that fits its kind. A file that
    /// ends early or holds invalid data is [`Kind::Input`]; everything else [`Kind::Io`]. The
    /// source is a copy of `err` (kind and message).
    pub fn io(path: impl AsRef<Path>, err: &std::io::Error) -> Self {
        use std::io::ErrorKind as K;
        let (what, fix, kind) = match err.kind() {
            K::NotFound => (
                "no such file or folder".to_string(),
                "check the path",
                Kind::Io,
            ),
            K::PermissionDenied => (
                "permission denied".to_string(),
                "check the file's permissions",
                Kind::Io,
            ),
            K::UnexpectedEof => (
                "the file ends early (truncated)".to_string(),
                "copy or export the file again",
                Kind::Input,
            ),
            K::StorageFull => (
                "no space left on the device".to_string(),
                "free some space or write elsewhere",
                Kind::Io,
            ),
            K::InvalidData => (
                lowercase_first(&err.to_string()),
                "check that the file is complete or export it again",
                Kind::Input,
            ),
            _ => (
                lowercase_first(&err.to_string()),
                "check the path, the disk and the permissions",
                Kind::Io,
            ),
        };
        let copy = std::io::Error::new(err.kind(), err.to_string());
        Error::file(path, what, fix)
            .with_kind(kind)
            .with_source(copy)
    }

    /// A bad parameter ([`Kind::Recipe`]).
    pub fn invalid(what: impl Into<String>, fix: impl Into<String>) -> Self {
        Error::Invalid {
            what: what.into(),
            fix: fix.into(),
            kind: Kind::Recipe,
        }
    }

    /// A bad parameter: the same as [`Error::invalid`], named after its kind.
    pub fn recipe(what: impl Into<String>, fix: impl Into<String>) -> Self {
        Error::invalid(what, fix)
    }

    /// A defect of equiscan ([`Kind::Internal`]), e.g. a panic caught at a boundary.
    pub fn internal(what: impl Into<String>, fix: impl Into<String>) -> Self {
        Error::invalid(what, fix).with_kind(Kind::Internal)
    }

    /// What kind of failure this is.
    pub fn kind(&self) -> Kind {
        match self {
            Error::File { kind, .. } | Error::Invalid { kind, .. } => *kind,
        }
    }

    /// The same error with another kind.
    pub fn with_kind(mut self, new: Kind) -> Self {
        match &mut self {
            Error::File { kind, .. } | Error::Invalid { kind, .. } => *kind = new,
        }
        self
    }

    /// The same error with `err` as its source. An [`Error::Invalid`] has no file and keeps
    /// no source; use [`Error::about`] first.
    pub fn with_source(mut self, err: impl std::error::Error + Send + Sync + 'static) -> Self {
        if let Error::File { source, .. } = &mut self {
            *source = Some(Arc::new(err));
        }
        self
    }

    /// The file this error names, if any.
    pub fn path(&self) -> Option<&str> {
        match self {
            Error::File { path, .. } => Some(path),
            Error::Invalid { .. } => None,
        }
    }

    /// Puts `path` in front of an error about no file, keeping its text and kind; an error
    /// that already names a file is returned unchanged.
    pub fn about(self, path: impl AsRef<Path>) -> Self {
        match self {
            Error::Invalid { what, fix, kind } => Error::file(path, what, fix).with_kind(kind),
            other => other,
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

#[cfg(test)]
mod tests {
    use super::*;
    use std::error::Error as _;

    #[test]
    fn kinds_sources_and_messages() {
        let e = Error::file("a.las", "bad", "fix it");
        assert_eq!(
            (e.kind(), e.to_string().as_str()),
            (Kind::Input, "a.las: bad; fix it")
        );
        assert!(e.source().is_none());
        let io = std::io::Error::new(std::io::ErrorKind::PermissionDenied, "nope");
        let e = Error::io("a.las", &io);
        assert_eq!(e.kind(), Kind::Io);
        assert_eq!(
            e.to_string(),
            "a.las: permission denied; check the file's permissions"
        );
        assert_eq!(e.source().unwrap().to_string(), "nope");
        let eof = std::io::Error::from(std::io::ErrorKind::UnexpectedEof);
        assert_eq!(Error::io("a", &eof).kind(), Kind::Input);
        let e = Error::invalid("radius must be positive", "give one");
        assert_eq!((e.kind(), e.path()), (Kind::Recipe, None));
        let e = e.about("b.ply");
        assert_eq!(e.to_string(), "b.ply: radius must be positive; give one");
        assert_eq!((e.kind(), e.path()), (Kind::Recipe, Some("b.ply")));
        assert_eq!(Error::internal("x", "y").kind(), Kind::Internal);
    }
}
