//! `equiscan._native`: the Rust side of the Python package `equiscan`.
//!
//! Thin bindings over the equiscan library; the algorithms stay there. Every call copies
//! what it needs out of the Python objects, releases the GIL for the Rust work
//! ([`Python::detach`]) and converts an [`equiscan::Error`] into the Python exception of its
//! kind (`equiscan.errors`), with the library's one-line message. The Python modules
//! (`python/equiscan/`) hold the signatures users see, their documentation and the Dask
//! driver.

use pyo3::prelude::*;

mod align;
mod arrays;
mod batch;
mod errors;
mod features;
mod read;
mod write;

/// The native module.
#[pymodule]
fn _native(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(features::features, m)?)?;
    m.add_function(wrap_pyfunction!(read::read, m)?)?;
    m.add_function(wrap_pyfunction!(align::align, m)?)?;
    m.add_function(wrap_pyfunction!(write::write, m)?)?;
    m.add_function(wrap_pyfunction!(batch::batch_run_tile, m)?)?;
    m.add_class::<batch::BatchRun>()?;
    m.add("__version__", env!("CARGO_PKG_VERSION"))?;
    m.add("DEFAULT_DEGREE", equiscan::descriptor::DEFAULT_DEGREE)?;
    m.add("DEFAULT_SHELLS", equiscan::descriptor::DEFAULT_SHELLS)?;
    m.add("DESCRIPTOR_VERSION", equiscan::descriptor::RECIPE_VERSION)?;
    m.add(
        "ALIGN_DESCRIPTOR_VERSION",
        equiscan::align::AlignParams::default().descriptor_version,
    )?;
    Ok(())
}
