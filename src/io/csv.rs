//! CSV writer for named f32 columns: a header line of names, then one line per row, values
//! separated by commas and printed in the shortest form that reads back to the same f32
//! (Rust's `Display`; non-finite values as `NaN`, `inf`, `-inf`).

use std::io::Write;
use std::path::Path;

use crate::error::{Error, Result};

use super::Column;
use super::atomic::write_atomic;

/// Writes `columns` as CSV, one row per index, atomically. All columns must have the same
/// length; names must be plain (letters, digits, `_`) and distinct.
pub fn write_csv(path: &Path, columns: &[Column<'_>]) -> Result<()> {
    let rows = columns.first().map_or(0, |c| c.values.len());
    super::check_columns(path, rows, columns, &[])?;
    write_atomic(path, |w| {
        let io = |e: std::io::Error| Error::io(path, &e);
        let names: Vec<&str> = columns.iter().map(|c| c.name).collect();
        writeln!(w, "{}", names.join(",")).map_err(io)?;
        let mut line = String::new();
        for r in 0..rows {
            line.clear();
            for (k, c) in columns.iter().enumerate() {
                if k > 0 {
                    line.push(',');
                }
                use std::fmt::Write as _;
                let _ = write!(line, "{}", c.values[r]);
            }
            line.push('\n');
            w.write_all(line.as_bytes()).map_err(io)?;
        }
        Ok(())
    })
}
