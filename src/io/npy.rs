//! NumPy `.npy` writer (format version 1.0), float32, C order, hand-written.
//!
//! Layout: the magic `\x93NUMPY`, version bytes `1 0`, a little-endian u16 header length, then
//! an ASCII dict `{'descr': '<f4', 'fortran_order': False, 'shape': (ROWS, COLS), }` padded
//! with spaces and ended by `\n` so that the data starts at a multiple of 64 bytes, then the
//! values row by row (row-major), little-endian.

use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

use super::atomic::{put, write_atomic};

/// The complete `.npy` v1.0 header for a `rows × cols` little-endian float32 matrix,
/// including magic and padding; its length is a multiple of 64.
pub fn npy_header(rows: usize, cols: usize) -> Vec<u8> {
    let dict = format!("{{'descr': '<f4', 'fortran_order': False, 'shape': ({rows}, {cols}), }}");
    // 6 magic + 2 version + 2 length bytes, the dict, padding, and one newline.
    let unpadded = 10 + dict.len() + 1;
    let total = unpadded.div_ceil(64) * 64;
    let header_len = total - 10;
    let mut out = Vec::with_capacity(total);
    out.extend_from_slice(b"\x93NUMPY\x01\x00");
    out.extend_from_slice(&(header_len as u16).to_le_bytes());
    out.extend_from_slice(dict.as_bytes());
    out.resize(total - 1, b' ');
    out.push(b'\n');
    out
}

/// Writes a `rows × cols` float32 matrix, `data` in row-major order (`data[r * cols + c]`),
/// as a `.npy` file, atomically.
pub fn write_npy(path: &Path, rows: usize, cols: usize, data: &[f32]) -> Result<()> {
    if rows.checked_mul(cols) != Some(data.len()) {
        return Err(Error::file(
            path,
            format!("{} values do not make a {rows} × {cols} matrix", data.len()),
            "give rows × cols values in row-major order",
        ));
    }
    write_atomic(path, |w| {
        put(w, path, &npy_header(rows, cols))?;
        let mut buf = Vec::with_capacity(1 << 16);
        for chunk in data.chunks(1 << 14) {
            buf.clear();
            for v in chunk {
                buf.extend_from_slice(&v.to_le_bytes());
            }
            put(w, path, &buf)?;
        }
        Ok(())
    })
}

/// The sidecar path of an `.npy` file: the same name with the extension `json`.
pub(crate) fn sidecar_path(path: &Path) -> PathBuf {
    path.with_extension("json")
}

/// Writes a `.npy` matrix (as [`write_npy`]) whose columns are named by `names`, and beside it
/// `<name>.json` (the `.npy` path with the extension `json`):
/// `{"file": NPY_FILE_NAME, "dtype": "float32", "order": "C", "rows": ROWS, "columns":
/// [NAMES], "metadata": METADATA}`. Both files are written atomically, the matrix first.
pub fn write_npy_with_sidecar(
    path: &Path,
    rows: usize,
    names: &[&str],
    data: &[f32],
    metadata: serde_json::Value,
) -> Result<()> {
    let sidecar = sidecar_path(path);
    if sidecar == path {
        return Err(Error::file(
            path,
            "the matrix and its JSON sidecar would have the same name",
            "name the matrix file with the extension .npy",
        ));
    }
    write_npy(path, rows, names.len(), data)?;
    let doc = serde_json::json!({
        "file": path.file_name().map(|f| f.to_string_lossy().into_owned()),
        "dtype": "float32",
        "order": "C",
        "rows": rows,
        "columns": names,
        "metadata": metadata,
    });
    let text = serde_json::to_string_pretty(&doc)
        .map_err(|e| Error::file(&sidecar, e.to_string(), "report this as a bug"))?;
    write_atomic(&sidecar, |w| {
        put(w, &sidecar, text.as_bytes())?;
        put(w, &sidecar, b"\n")
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn header_is_aligned_and_readable() {
        for (r, c) in [(0, 0), (3, 5), (123_456_789, 1000)] {
            let h = npy_header(r, c);
            assert_eq!(h.len() % 64, 0);
            assert_eq!(&h[..8], b"\x93NUMPY\x01\x00");
            let len = u16::from_le_bytes([h[8], h[9]]) as usize;
            assert_eq!(10 + len, h.len());
            let dict = std::str::from_utf8(&h[10..]).unwrap();
            assert!(dict.ends_with('\n'));
            assert!(dict.contains(&format!("'shape': ({r}, {c})")));
        }
    }
}
