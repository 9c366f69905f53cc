//! [`PointSource`]: a point-cloud file read in chunks, header first.
//!
//! Opening reads and checks the header only (point count, attributes, CRS, LAS header bounds
//! in [`FileInfo`]); points then come in chunks of at most a requested size, each a [`Cloud`]
//! with the same origin, so a file larger than memory can be processed piece by piece. LAS
//! and LAZ decode through `las::Reader::fill_points` into one reused buffer; PLY reads binary
//! vertices in blocks of whole records and ascii vertices line by line. The chunks, joined in
//! order, equal what [`super::read_cloud`] returns (which is built on the same readers).

use std::path::Path;

use crate::cloud::Cloud;
use crate::error::Result;

use super::e57::E57Reader;
use super::las::LasReader;
use super::ply::PlyReader;
use super::{Extent, FileInfo, Kind, no_scans, sniff, split_scan};

enum Reader {
    Las(Box<LasReader>),
    Ply(Box<PlyReader>),
    E57(Box<E57Reader>),
}

/// A LAS, LAZ, PLY or E57 file opened for chunked reading (format chosen by content, as
/// [`super::read_cloud`] does; `FILE.e57#NAME` selects one scan). E57 scans are decoded on
/// the first chunk and handed out from memory.
///
/// ```
/// use equiscan::io::PointSource;
/// # fn main() -> equiscan::Result<()> {
/// let mut src = PointSource::open("tests/data/las/autzen.laz".as_ref())?;
/// let total = src.info().point_count;
/// let mut seen = 0;
/// while let Some(chunk) = src.next_chunk(50)? {
///     assert!(chunk.len() <= 50);
///     seen += chunk.len() as u64;
/// }
/// assert_eq!(seen, total);
/// # Ok(())
/// # }
/// ```
pub struct PointSource {
    path: std::path::PathBuf,
    reader: Reader,
    extent: Extent,
}

impl PointSource {
    /// Opens `path` and reads its header; no point is decoded yet.
    pub fn open(path: &Path) -> Result<PointSource> {
        let (file, sel) = split_scan(path);
        let reader = match (sniff(&file)?, sel) {
            (Kind::E57, sel) => {
                Reader::E57(Box::new(E57Reader::open(path, &file, sel.as_deref())?))
            }
            (_, Some(sel)) => return Err(no_scans(&file, &sel)),
            (Kind::Las, None) => Reader::Las(Box::new(LasReader::open(path)?)),
            (Kind::Ply, None) => Reader::Ply(Box::new(PlyReader::open(path, false)?)),
        };
        Ok(PointSource {
            path: path.to_path_buf(),
            reader,
            extent: Extent::default(),
        })
    }

    /// What the header declares: point count, attributes kept, CRS, LAS scale, offset and
    /// bounds, other fields and elements.
    pub fn info(&self) -> &FileInfo {
        match &self.reader {
            Reader::Las(r) => r.info(),
            Reader::Ply(r) => r.info(),
            Reader::E57(r) => r.info(),
        }
    }

    /// Points not read yet.
    pub fn remaining(&self) -> u64 {
        match &self.reader {
            Reader::Las(r) => r.remaining(),
            Reader::Ply(r) => r.remaining(),
            Reader::E57(r) => r.remaining(),
        }
    }

    /// An empty cloud with this file's attributes, ready for [`PointSource::read_into`], with
    /// room for `reserve` points (never more than the file can hold).
    pub fn empty_cloud(&self, reserve: usize) -> Cloud {
        match &self.reader {
            Reader::Las(r) => r.empty_cloud(reserve as u64),
            Reader::Ply(r) => r.empty_cloud(reserve as u64),
            Reader::E57(r) => r.empty_cloud(reserve as u64),
        }
    }

    /// Appends up to `max` points to `out` (made by [`PointSource::empty_cloud`], or a chunk
    /// of this source) and sets its origin; returns the number appended, 0 at the end. The
    /// extent of all points read so far is checked as [`super::read_cloud`] checks it.
    pub fn read_into(&mut self, out: &mut Cloud, max: usize) -> Result<usize> {
        let before = out.len();
        let n = match &mut self.reader {
            Reader::Las(r) => r.read_into(out, max)?,
            Reader::Ply(r) => r.read_into(out, max)?,
            Reader::E57(r) => r.read_into(out, max)?,
        };
        self.extent.add(&self.path, &out.positions[before..])?;
        Ok(n)
    }

    /// The next chunk of at most `max` points (at least one), or `None` when every point has
    /// been read.
    pub fn next_chunk(&mut self, max: usize) -> Result<Option<Cloud>> {
        let max = max.max(1);
        let mut c = self.empty_cloud(max);
        Ok(match self.read_into(&mut c, max)? {
            0 => None,
            _ => Some(c),
        })
    }
}
