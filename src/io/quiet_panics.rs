//! The last resort around third-party decoders: a panic inside them becomes `None` (the caller
//! turns it into its one-line error) and its message is kept off the terminal.
//!
//! The standard panic hook would print the message and a backtrace note to stderr even when
//! the panic is caught, breaking the one-line error promise. A hook installed once wraps the
//! previous one and stays silent only for panics raised inside the `las`, `laz` or `e57` crates'
//! source while a guarded call is running; every other panic is reported as before.

use std::panic::{AssertUnwindSafe, catch_unwind};
use std::sync::Once;
use std::sync::atomic::{AtomicUsize, Ordering};

/// Guarded calls running now (any thread).
static ACTIVE: AtomicUsize = AtomicUsize::new(0);
static INSTALL: Once = Once::new();

fn from_decoder(file: &str) -> bool {
    let f = file.replace('\\', "/");
    ["/laz-", "/las-", "/laz/", "/las/", "/e57-", "/e57/"]
        .iter()
        .any(|d| f.contains(d))
}

/// Runs `f`; returns `None` when it panics.
pub(crate) fn run<T>(f: impl FnOnce() -> T) -> Option<T> {
    INSTALL.call_once(|| {
        let previous = std::panic::take_hook();
        std::panic::set_hook(Box::new(move |info| {
            let quiet = ACTIVE.load(Ordering::SeqCst) > 0
                && info.location().is_some_and(|l| from_decoder(l.file()));
            if !quiet {
                previous(info);
            }
        }));
    });
    ACTIVE.fetch_add(1, Ordering::SeqCst);
    let r = catch_unwind(AssertUnwindSafe(f));
    ACTIVE.fetch_sub(1, Ordering::SeqCst);
    r.ok()
}
