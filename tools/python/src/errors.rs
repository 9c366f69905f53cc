//! Library errors as Python exceptions, and the worker pool of a call.

use equiscan::error::Kind;
use pyo3::prelude::*;

/// The `equiscan.errors` class of an error kind.
fn class_name(kind: Kind) -> &'static str {
    match kind {
        Kind::Input => "InputError",
        Kind::Io => "IoError",
        Kind::Recipe => "RecipeError",
        Kind::Internal => "InternalError",
    }
}

/// `e` as an instance of the `equiscan.errors` class of its kind, carrying the one-line
/// message, `kind` (`input`, `io`, `recipe`, `internal`) and `path` (the file named, or
/// `None`).
pub fn to_py(py: Python<'_>, e: equiscan::Error) -> PyErr {
    let made = (|| -> PyResult<PyErr> {
        let class = py
            .import("equiscan.errors")?
            .getattr(class_name(e.kind()))?;
        let value = class.call1((e.to_string(), e.kind().name(), e.path()))?;
        Ok(PyErr::from_value(value))
    })();
    made.unwrap_or_else(|failed| failed)
}

/// Runs `work` without the GIL, on a pool of `threads` worker threads when given (else on
/// the process's shared pool), and converts its error.
pub fn detached<T, F>(py: Python<'_>, threads: Option<usize>, work: F) -> PyResult<T>
where
    T: Send,
    F: FnOnce() -> equiscan::Result<T> + Send,
{
    let out = py.detach(|| match threads {
        None => work(),
        Some(n) => {
            if n == 0 {
                return Err(equiscan::Error::invalid(
                    "threads=0 is not a number of threads",
                    "give threads=1 or more, or leave it out to use every core",
                ));
            }
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(n)
                .build()
                .map_err(|e| {
                    equiscan::Error::invalid(
                        format!("cannot start {n} worker threads ({e})"),
                        "give fewer threads",
                    )
                    .with_kind(Kind::Io)
                })?;
            pool.install(work)
        }
    });
    out.map_err(|e| to_py(py, e))
}
