//! Halos: the points of neighbouring tiles that take part in a tile's neighbourhoods.
//!
//! Rule: tile `i` with header bounds `B_i` (file coordinates) receives, from every tile `j` of
//! the same CRS whose bounds meet `E_i = B_i` grown by the halo width `h` (the largest support
//! radius, plus 1 % so that rounding never drops a point at exactly `r`), the points of `j`
//! inside `E_i`, in `j`'s file order, tiles in plan order. They are neighbours only, never
//! centres. Any point within `r` of a point of tile `i` lies in `E_i`, so a tile's rows are
//! those of the merged cloud, up to float rounding (a different local origin, and neighbour
//! sums in another index order).
//!
//! Neighbours are found from the header bounds alone. What a tile gives its neighbours, its
//! points inside the union of their `E` boxes (a strip along its edges when tiles do not
//! overlap), is kept in a process-wide cache bounded in points ([`HaloCache`]), so a tile read
//! once, as a neighbour or for itself, is not read again for the next neighbour while its
//! strip stays in the cache.
//!
//! A neighbour that this process runs later is read whole when it is first needed (one
//! decode instead of a streaming pass now and a whole read at its turn, which doubled the
//! cost of compressed tiles) and kept whole, within a memory bound, until its own turn takes
//! it ([`HaloCache::take_whole`]).

use std::path::Path;
use std::sync::Mutex;

use serde::{Deserialize, Serialize};

use crate::cloud::Cloud;
use crate::error::Result;
use crate::io::{FileInfo, PointSource, read_cloud};

use super::journal::Stamp;

/// An axis-aligned box in file coordinates.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Bbox {
    /// Smallest x, y, z.
    pub min: [f64; 3],
    /// Largest x, y, z.
    pub max: [f64; 3],
}

impl Bbox {
    /// The box grown by `d` on every side.
    pub fn grown(&self, d: f64) -> Bbox {
        Bbox {
            min: self.min.map(|v| v - d),
            max: self.max.map(|v| v + d),
        }
    }

    /// True when the two boxes share a point (touching counts).
    pub fn meets(&self, o: &Bbox) -> bool {
        (0..3).all(|k| self.min[k] <= o.max[k] && o.min[k] <= self.max[k])
    }

    /// True when `p` is inside or on the box.
    pub fn contains(&self, p: [f64; 3]) -> bool {
        (0..3).all(|k| self.min[k] <= p[k] && p[k] <= self.max[k])
    }

    /// The smallest box holding `cloud`'s points; `None` when empty.
    pub fn of_cloud(cloud: &Cloud) -> Option<Bbox> {
        cloud.global_bounds().map(|(min, max)| Bbox { min, max })
    }
}

/// The grown box of a tile: its bounds plus 1.01 × `width`.
pub fn reach(bounds: &Bbox, width: f64) -> Bbox {
    bounds.grown(1.01 * width)
}

/// Global coordinates of the points of `cloud` inside any of `boxes`, in point order.
pub fn points_in(cloud: &Cloud, boxes: &[Bbox], out: &mut Vec<[f64; 3]>) {
    if boxes.is_empty() {
        return;
    }
    for i in 0..cloud.len() {
        let g = cloud.global(i);
        if boxes.iter().any(|b| b.contains(g)) {
            out.push(g);
        }
    }
}

/// Reads `path` in chunks and keeps the points inside any of `boxes` (global coordinates).
pub fn read_points_in(path: &Path, boxes: &[Bbox]) -> Result<Vec<[f64; 3]>> {
    let mut src = PointSource::open(path)?;
    let mut out = Vec::new();
    while let Some(chunk) = src.next_chunk(1 << 20)? {
        points_in(&chunk, boxes, &mut out);
    }
    Ok(out)
}

/// What one tile gives its neighbours.
struct Share {
    path: std::path::PathBuf,
    stamp: Stamp,
    boxes: Vec<Bbox>,
    points: Vec<[f64; 3]>,
}

/// A tile read whole as a neighbour before its own turn.
struct Whole {
    path: std::path::PathBuf,
    stamp: Stamp,
    cloud: Cloud,
    info: FileInfo,
    bytes: usize,
}

/// Process-wide cache of tiles' shares, least recently used dropped first, at most
/// `limit` points in all; and of tiles read whole before their turn, oldest dropped first,
/// at most a given number of bytes in all.
pub struct HaloCache {
    shares: Vec<Share>,
    wholes: Vec<Whole>,
}

static CACHE: Mutex<HaloCache> = Mutex::new(HaloCache {
    shares: Vec::new(),
    wholes: Vec::new(),
});

/// Bytes a cloud holds in memory (positions, attributes, LAS records).
pub fn cloud_bytes(c: &Cloud) -> usize {
    fn sz<T>(v: &Option<Vec<T>>) -> usize {
        v.as_ref().map_or(0, |v| v.len() * std::mem::size_of::<T>())
    }
    c.positions.len() * 12
        + sz(&c.intensity)
        + sz(&c.color)
        + sz(&c.normals)
        + sz(&c.classification)
        + sz(&c.return_number)
        + sz(&c.gps_time)
        + c.records.as_ref().map_or(0, |r| r.bytes.len())
}

fn cache() -> std::sync::MutexGuard<'static, HaloCache> {
    CACHE.lock().unwrap_or_else(|p| p.into_inner())
}

impl HaloCache {
    /// Points of the cached share of `path` (with `stamp`) inside `want`, when the share was
    /// cut for a set of boxes that includes `want`.
    fn take(path: &Path, stamp: &Stamp, want: &Bbox) -> Option<Vec<[f64; 3]>> {
        let mut c = cache();
        let k = c
            .shares
            .iter()
            .position(|s| s.path == path && s.stamp == *stamp && s.boxes.contains(want))?;
        let s = c.shares.remove(k);
        let got = s
            .points
            .iter()
            .copied()
            .filter(|p| want.contains(*p))
            .collect();
        c.shares.push(s);
        Some(got)
    }

    /// Keeps `points` as the share of `path` cut for `boxes`, dropping the oldest shares
    /// beyond `limit` points.
    pub(super) fn keep(
        path: &Path,
        stamp: Stamp,
        boxes: Vec<Bbox>,
        points: Vec<[f64; 3]>,
        limit: usize,
    ) {
        if points.len() > limit {
            return;
        }
        let mut c = cache();
        c.shares.retain(|s| s.path != path);
        let mut total: usize =
            c.shares.iter().map(|s| s.points.len()).sum::<usize>() + points.len();
        while total > limit && !c.shares.is_empty() {
            total -= c.shares.remove(0).points.len();
        }
        c.shares.push(Share {
            path: path.to_path_buf(),
            stamp,
            boxes,
            points,
        });
    }

    /// Keeps what a tile just read in full (`cloud`) gives its neighbours (`boxes`).
    pub(super) fn keep_from_cloud(
        path: &Path,
        stamp: Stamp,
        cloud: &Cloud,
        boxes: Vec<Bbox>,
        limit: usize,
    ) {
        if boxes.is_empty() || limit == 0 {
            return;
        }
        let mut pts = Vec::new();
        points_in(cloud, &boxes, &mut pts);
        Self::keep(path, stamp, boxes, pts, limit);
    }

    /// The whole tile `path` (with `stamp`) if it was read as a neighbour before its turn;
    /// it leaves the cache.
    pub fn take_whole(path: &Path, stamp: &Stamp) -> Option<(Cloud, FileInfo)> {
        let mut c = cache();
        let k = c
            .wholes
            .iter()
            .position(|w| w.path == path && w.stamp == *stamp)?;
        let w = c.wholes.remove(k);
        Some((w.cloud, w.info))
    }

    /// Keeps a tile read whole, dropping the oldest beyond `limit` bytes.
    fn keep_whole(path: &Path, stamp: Stamp, cloud: Cloud, info: FileInfo, limit: usize) {
        let bytes = cloud_bytes(&cloud);
        if bytes > limit {
            return;
        }
        let mut c = cache();
        c.wholes.retain(|w| w.path != path);
        let mut total: usize = c.wholes.iter().map(|w| w.bytes).sum::<usize>() + bytes;
        while total > limit && !c.wholes.is_empty() {
            total -= c.wholes.remove(0).bytes;
        }
        c.wholes.push(Whole {
            path: path.to_path_buf(),
            stamp,
            cloud,
            info,
            bytes,
        });
    }

    /// The points of neighbour `path` inside `want`: from the cache, or by reading the file
    /// once and keeping its share for all of `boxes` (its neighbours' grown boxes). With
    /// `whole_limit` > 0 (a tile this process runs later, small enough) the file is read
    /// whole and kept whole too, within `whole_limit` bytes of whole tiles, for its turn.
    pub(super) fn points_for(
        path: &Path,
        stamp: Option<&Stamp>,
        want: &Bbox,
        boxes: Vec<Bbox>,
        limit: usize,
        whole_limit: usize,
    ) -> Result<Vec<[f64; 3]>> {
        if let Some(st) = stamp
            && let Some(p) = Self::take(path, st, want)
        {
            return Ok(p);
        }
        let pts = match stamp {
            Some(st) if whole_limit > 0 => {
                let (cloud, info) = read_cloud(path)?;
                let mut pts = Vec::new();
                points_in(&cloud, &boxes, &mut pts);
                Self::keep_whole(path, st.clone(), cloud, info, whole_limit);
                pts
            }
            _ => read_points_in(path, &boxes)?,
        };
        let got = pts.iter().copied().filter(|p| want.contains(*p)).collect();
        if let Some(st) = stamp
            && limit > 0
        {
            Self::keep(path, st.clone(), boxes, pts, limit);
        }
        Ok(got)
    }

    /// Empties the cache (tests and benchmarks).
    pub fn clear() {
        let mut c = cache();
        c.shares.clear();
        c.wholes.clear();
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn boxes_meet_when_touching_and_contain_their_faces() {
        let a = Bbox {
            min: [0.0; 3],
            max: [1.0; 3],
        };
        let b = Bbox {
            min: [1.0, 0.0, 0.0],
            max: [2.0, 1.0, 1.0],
        };
        let c = Bbox {
            min: [1.5, 0.0, 0.0],
            max: [2.0, 1.0, 1.0],
        };
        assert!(a.meets(&b));
        assert!(!a.meets(&c));
        assert!(a.grown(0.5).meets(&c));
        assert!(a.contains([1.0, 1.0, 0.0]));
        assert!(!a.contains([1.0, 1.0, -1e-9]));
    }
}
