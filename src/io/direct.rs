//! Appending a large output file in aligned blocks that bypass the page cache.
//!
//! [`DirectAppend`] collects bytes in a 1 MiB block aligned to 4 096 bytes and writes each full
//! block at the next file offset through a second handle of the file opened with Linux's
//! `O_DIRECT`: the data goes from the block to the device, without the kernel first copying it
//! into page-cache pages that a synced, renamed output never reads again (and that an output
//! replacing an earlier one would make the kernel free at the rename). The last, partial block
//! is written padded with zeros to 4 096 bytes and the file is then cut to its length.
//!
//! Where direct I/O is not available (another system, or a file system refusing `O_DIRECT`,
//! such as a RAM-backed one) the same blocks go through an ordinary handle: the bytes of the
//! file are the same either way. The caller still syncs the file (the size and the block
//! allocation are metadata, and the device may cache writes): [`super::TempFile::finish`].

use std::fs::{File, OpenOptions};
use std::io::{Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

/// Alignment of the block's memory, of file offsets and of write lengths under direct I/O
/// (the largest logical block size of common devices).
const ALIGN: usize = 4096;

/// Bytes per write. 1 MiB: on the development machine 28 MB written in 1 MiB direct writes
/// took half the CPU time of buffered writes plus `fsync`, 256 KiB writes about as much as the
/// buffered ones (each direct write waits for the device).
const BLOCK: usize = 1 << 20;

/// An appender of bytes to a file just created (empty) at `path`: see the module's text.
#[derive(Debug)]
pub struct DirectAppend {
    file: File,
    /// True while `file` has `O_DIRECT`.
    direct: bool,
    /// The file written (a temporary path) and the path that errors name.
    path: PathBuf,
    target: PathBuf,
    /// `BLOCK + ALIGN` bytes; the block is `buf[start..start + BLOCK]`, aligned to `ALIGN`.
    buf: Vec<u8>,
    start: usize,
    /// Bytes held in the block.
    held: usize,
    /// Bytes written to the file so far (a multiple of `BLOCK`).
    offset: u64,
}

impl DirectAppend {
    /// Opens `path` (an empty file this process has just created, for example
    /// [`super::TempFile::temp_path`]) for appending; errors name `target`.
    pub fn open(path: &Path, target: &Path) -> Result<DirectAppend> {
        DirectAppend::open_as(path, target, true)
    }

    /// [`DirectAppend::open`], trying direct I/O only when `try_direct`.
    fn open_as(path: &Path, target: &Path, try_direct: bool) -> Result<DirectAppend> {
        let (file, direct) = match try_direct.then(|| open(path, true).ok()).flatten() {
            Some(f) => (f, true),
            None => (open(path, false).map_err(|e| Error::io(target, &e))?, false),
        };
        let buf = vec![0u8; BLOCK + ALIGN];
        let start = buf.as_ptr().align_offset(ALIGN);
        Ok(DirectAppend {
            file,
            direct,
            path: path.to_path_buf(),
            target: target.to_path_buf(),
            buf,
            start,
            held: 0,
            offset: 0,
        })
    }

    /// Appends `bytes`.
    pub fn append(&mut self, mut bytes: &[u8]) -> Result<()> {
        while !bytes.is_empty() {
            let take = (BLOCK - self.held).min(bytes.len());
            let at = self.start + self.held;
            self.buf[at..at + take].copy_from_slice(&bytes[..take]);
            self.held += take;
            bytes = &bytes[take..];
            if self.held == BLOCK {
                self.write_block(BLOCK)?;
                self.held = 0;
            }
        }
        Ok(())
    }

    /// Writes what is held (padded to `ALIGN`), cuts the file to the bytes appended and
    /// returns their number. The file is not synced.
    pub fn finish(mut self) -> Result<u64> {
        let len = self.offset + self.held as u64;
        if self.held > 0 {
            let padded = self.held.next_multiple_of(ALIGN);
            let at = self.start;
            self.buf[at + self.held..at + padded].fill(0);
            self.write_block(padded)?;
            self.file
                .set_len(len)
                .map_err(|e| Error::io(&self.target, &e))?;
        }
        Ok(len)
    }

    /// Writes the first `n` bytes of the block (`n` a multiple of `ALIGN`) at `offset` (the
    /// handle's position) and advances it. A file system that refuses the direct write (`EINVAL`: alignment or
    /// `O_DIRECT` not supported) gets this and every later block through an ordinary handle.
    fn write_block(&mut self, n: usize) -> Result<()> {
        let data = &self.buf[self.start..self.start + n];
        let mut res = self.file.write_all(data);
        if self.direct
            && res
                .as_ref()
                .is_err_and(|e| e.kind() == std::io::ErrorKind::InvalidInput)
        {
            let offset = self.offset;
            self.file = open(&self.path, false)
                .and_then(|mut f| f.seek(SeekFrom::Start(offset)).map(|_| f))
                .map_err(|e| Error::io(&self.target, &e))?;
            self.direct = false;
            res = self.file.write_all(data);
        }
        res.map_err(|e| Error::io(&self.target, &e))?;
        self.offset += n as u64;
        Ok(())
    }
}

/// `path` opened for writing, with `O_DIRECT` when `direct` (Linux only; elsewhere an
/// error, so that the caller falls back to an ordinary handle).
fn open(path: &Path, direct: bool) -> std::io::Result<File> {
    let mut o = OpenOptions::new();
    o.write(true);
    if direct {
        #[cfg(target_os = "linux")]
        {
            use std::os::unix::fs::OpenOptionsExt;
            o.custom_flags(libc::O_DIRECT);
        }
        #[cfg(not(target_os = "linux"))]
        return Err(std::io::ErrorKind::Unsupported.into());
    }
    o.open(path)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The file holds exactly the bytes appended, in pieces of every size around the block
    /// and alignment boundaries, with direct writes where the file system takes them and
    /// through an ordinary handle.
    #[test]
    fn the_file_holds_the_bytes_appended() {
        let dir = tempfile::tempdir().unwrap();
        let mut s = 0x9e37_79b9_7f4a_7c15u64;
        for (total, try_direct) in [true, false].into_iter().flat_map(|d| {
            [
                0usize,
                1,
                4095,
                4096,
                4097,
                BLOCK - 1,
                BLOCK,
                BLOCK + 129,
                3 * BLOCK + 7,
            ]
            .map(|t| (t, d))
        }) {
            let want: Vec<u8> = (0..total)
                .map(|_| {
                    s ^= s << 13;
                    s ^= s >> 7;
                    s ^= s << 17;
                    s as u8
                })
                .collect();
            let path = dir.path().join(format!("f{total}{try_direct}"));
            File::create(&path).unwrap();
            let mut a = DirectAppend::open_as(&path, &path, try_direct).unwrap();
            assert!(try_direct || !a.direct);
            let mut rest = &want[..];
            let mut piece = 1;
            while !rest.is_empty() {
                let k = piece.min(rest.len());
                a.append(&rest[..k]).unwrap();
                rest = &rest[k..];
                piece = piece * 7 % 300_007 + 1;
            }
            assert_eq!(a.finish().unwrap(), total as u64);
            assert_eq!(
                std::fs::read(&path).unwrap(),
                want,
                "{total} bytes, {try_direct}"
            );
        }
    }
}
