//! LAS and LAZ: reading through the `las` crate, checked header first; writing LAS 1.4 with
//! named f32 columns as Extra Bytes.
//!
//! Reading streams points with `Reader::fill_points` into one reused buffer and converts each
//! chunk straight to f32 offsets from the cloud's origin (the centre of the header bounds,
//! rounded to whole units; the first point rounded when the bounds are missing or do not hold
//! it), so no f64 copy of the whole file is made.
//!
//! Writing ([`write_las`]): LAS 1.4, point format 6 (7 when the cloud has colour) unless
//! [`LasOptions`] says otherwise, scale 0.001 and the cloud's origin as offset by default. Each
//! column becomes 4 bytes of Extra Bytes per point, described in a `LASF_Spec` record 4 VLR
//! with one 192-byte descriptor per column (data type 9 = float). Descriptor layout, from the
//! ASPRS LAS 1.4 R15 specification (Table 24), byte offsets: reserved `[0, 2)`, data type
//! `2`, options `3`, name `[4, 36)`, unused `[36, 40)`, no data `[40, 48)`, deprecated
//! `[48, 64)`, min `[64, 72)`, deprecated `[72, 88)`, max `[88, 96)`, deprecated `[96, 112)`,
//! scale `[112, 120)`, deprecated `[120, 136)`, offset `[136, 144)`, deprecated `[144, 160)`,
//! description `[160, 192)`. The "any type" fields hold an f64 for float data. We set options
//! bits 1 (min) and 2 (max) when a column has finite values. This layout is recalled from the
//! specification, not copied from it; it adds up to the specified 192 bytes, and laspy decodes
//! files written with it to the same values (tests/io_las_spec.rs).

use std::io::{BufWriter, Read, Seek, SeekFrom, Write};
use std::path::Path;

use las::{Builder, Color, PointDataBuilder, Transform, Vector, Version, Vlr};

use crate::cloud::Cloud;
use crate::error::{Error, Result};

use super::{Bounds, Column, FileInfo, check_columns, open_input};

/// Points per `fill_points` call for LAS; LAZ uses more so that parallel decompression has
/// several compressed chunks to share between threads.
const CHUNK_LAS: u64 = 1 << 16;
const CHUNK_LAZ: u64 = 1 << 20;
/// Bytes of one Extra Bytes descriptor (LAS 1.4 R15, Table 24).
pub(crate) const EXTRA_BYTES_DESCRIPTOR: usize = 192;

fn bad(path: &Path, what: impl Into<String>) -> Error {
    Error::file(
        path,
        what,
        "check that the file is a complete LAS or LAZ file or export it again",
    )
}

fn las_err(path: &Path, e: las::Error) -> Error {
    // An I/O error anywhere in the chain (also inside LAZ decompression) names its kind.
    let mut source: Option<&(dyn std::error::Error + 'static)> = Some(&e);
    while let Some(s) = source {
        if let Some(io) = s.downcast_ref::<std::io::Error>() {
            return Error::io(path, io);
        }
        source = s.source();
    }
    if let las::Error::LasZipError(laz::LasZipError::IoError(io)) = &e {
        return Error::io(path, io);
    }
    if let las::Error::LasZipVlrNotFound = &e {
        return bad(path, "the LAZ compression record (LASzip VLR) is missing");
    }
    let text = e.to_string();
    let mut c = text.chars();
    let text = match c.next() {
        Some(f) => f.to_lowercase().collect::<String>() + c.as_str(),
        None => text,
    };
    bad(path, text)
}

fn u16_at(b: &[u8], o: usize) -> u16 {
    u16::from_le_bytes([b[o], b[o + 1]])
}
fn u32_at(b: &[u8], o: usize) -> u32 {
    u32::from_le_bytes(b[o..o + 4].try_into().unwrap())
}
fn u64_at(b: &[u8], o: usize) -> u64 {
    u64::from_le_bytes(b[o..o + 8].try_into().unwrap())
}
fn f64_at(b: &[u8], o: usize) -> f64 {
    f64::from_le_bytes(b[o..o + 8].try_into().unwrap())
}

/// Base record length of point formats 0–10 (LAS 1.4 R15, Tables 7–17).
const BASE_LEN: [u16; 11] = [20, 28, 26, 34, 57, 63, 30, 36, 38, 59, 67];

/// What the raw header check found.
struct RawHeader {
    compressed: bool,
    format: u8,
    /// Version as stored at bytes 24–25 (the `las` crate may report a later one).
    version: (u8, u8),
    offset_to_points: u64,
}

/// Checks the public header block against the file size before the `las` crate sees it, so
/// that every problem gets a precise message and a huge declared count allocates nothing.
/// Offsets are those of the LAS 1.4 R15 specification, Table 3.
fn check_header(path: &Path, file: &mut std::fs::File, len: u64) -> Result<RawHeader> {
    let mut b = vec![0u8; len.min(375) as usize];
    file.read_exact(&mut b).map_err(|e| Error::io(path, &e))?;
    if b.len() < 227 {
        return Err(bad(
            path,
            format!(
                "the LAS header is truncated ({} bytes, at least 227 needed)",
                b.len()
            ),
        ));
    }
    let (major, minor) = (b[24], b[25]);
    if major != 1 || minor > 4 {
        return Err(Error::file(
            path,
            format!("LAS version {major}.{minor} is not read here (1.0 to 1.4 are)"),
            "convert the file to LAS 1.4 or 1.2",
        ));
    }
    let header_size = u16_at(&b, 94) as u64;
    let offset_to_points = u32_at(&b, 96) as u64;
    let raw_format = b[104];
    let record_len = u16_at(&b, 105);
    let legacy_count = u32_at(&b, 107) as u64;
    if header_size < 227 || header_size > len {
        return Err(bad(
            path,
            format!(
                "the LAS header declares {header_size} header bytes in a {len}-byte file (truncated header)"
            ),
        ));
    }
    if offset_to_points < header_size || offset_to_points > len {
        return Err(bad(
            path,
            format!(
                "the point data should start at byte {offset_to_points} of a {len}-byte file (truncated)"
            ),
        ));
    }
    let compressed = raw_format & 0xC0 != 0;
    let format = raw_format & 0x3F;
    if format > 10 {
        return Err(Error::file(
            path,
            format!("LAS point format {format} is not read here (0 to 10 are)"),
            "convert the file to a standard point format",
        ));
    }
    if record_len < BASE_LEN[format as usize] {
        return Err(bad(
            path,
            format!(
                "point records of {record_len} bytes are too short for point format {format} ({} bytes)",
                BASE_LEN[format as usize]
            ),
        ));
    }
    let count = if minor >= 4 && header_size >= 375 && b.len() >= 255 {
        let c = u64_at(&b, 247);
        if c == 0 { legacy_count } else { c }
    } else {
        legacy_count
    };
    for (k, o) in [131usize, 139, 147].into_iter().enumerate() {
        let s = f64_at(&b, o);
        if !s.is_finite() || s == 0.0 {
            return Err(bad(
                path,
                format!("the {} scale factor is {s}", ["x", "y", "z"][k]),
            ));
        }
    }
    if !compressed {
        let room = (len - offset_to_points) / record_len as u64;
        if count > room {
            return Err(Error::file(
                path,
                format!(
                    "the header declares {count} points but the data holds only {room} (truncated)"
                ),
                "copy or export the file again",
            ));
        }
    }
    file.seek(SeekFrom::Start(0))
        .map_err(|e| Error::io(path, &e))?;
    Ok(RawHeader {
        compressed,
        format,
        version: (major, minor),
        offset_to_points,
    })
}

/// Refuses a LAZ file whose chunk table holds fewer points than the header declares (the
/// decompressor would otherwise be asked for points that do not exist).
fn check_laz_chunks(
    path: &Path,
    header: &las::Header,
    offset_to_points: u64,
    file_len: u64,
) -> Result<()> {
    let vlr = header.laz_vlr().map_err(|e| las_err(path, e))?;
    let record_len = header.point_format().len() as u64;
    if vlr.items_size() != record_len {
        return Err(bad(
            path,
            format!(
                "the LAZ compression record describes {}-byte points but the header {record_len}-byte ones",
                vlr.items_size()
            ),
        ));
    }
    let mut f =
        std::io::BufReader::new(std::fs::File::open(path).map_err(|e| Error::io(path, &e))?);
    f.seek(SeekFrom::Start(offset_to_points))
        .map_err(|e| Error::io(path, &e))?;
    let table = laz::laszip::ChunkTable::read_from(&mut f, &vlr)
        .map_err(|e| las_err(path, las::Error::LasZipError(e)))?;
    // The compressed chunks must fit in the file (a damaged table would otherwise make the
    // decompressor allocate what the table says).
    let bytes = table
        .as_ref()
        .iter()
        .fold(0u64, |s, c| s.saturating_add(c.byte_count));
    if bytes > file_len.saturating_sub(offset_to_points) {
        return Err(bad(
            path,
            format!("the LAZ chunk table lists {bytes} compressed bytes, more than the file holds"),
        ));
    }
    // With fixed-size chunks every entry counts a full chunk, so this is an upper bound.
    let room: u64 = table
        .as_ref()
        .iter()
        .fold(0u64, |s, c| s.saturating_add(c.point_count));
    let n = header.number_of_points();
    if n > room {
        return Err(Error::file(
            path,
            format!(
                "the header declares {n} points but the compressed data holds at most {room} (truncated)"
            ),
            "copy or export the file again",
        ));
    }
    Ok(())
}

/// Names in an Extra Bytes VLR.
fn extra_bytes_names(vlr: &Vlr) -> Vec<String> {
    vlr.data
        .chunks_exact(EXTRA_BYTES_DESCRIPTOR)
        .map(|d| {
            let name = &d[4..36];
            let end = name.iter().position(|&c| c == 0).unwrap_or(32);
            String::from_utf8_lossy(&name[..end]).into_owned()
        })
        .collect()
}

fn is_extra_bytes_vlr(v: &Vlr) -> bool {
    v.user_id == "LASF_Spec" && v.record_id == 4
}

fn crs_text(header: &las::Header) -> Option<String> {
    if let Some(wkt) = header.get_wkt_crs_bytes() {
        let end = wkt.iter().position(|&c| c == 0).unwrap_or(wkt.len());
        let s = String::from_utf8_lossy(&wkt[..end]).trim().to_string();
        if !s.is_empty() {
            return Some(s);
        }
    }
    match header.get_geotiff_crs() {
        Ok(Some(g)) if !g.entries.is_empty() => {
            let keys: Vec<String> = g
                .entries
                .iter()
                .map(|e| {
                    let v = match &e.data {
                        las::crs::GeoTiffData::U16(v) => v.to_string(),
                        las::crs::GeoTiffData::Doubles(v) => format!("{v:?}"),
                        las::crs::GeoTiffData::String(s) => {
                            format!("{:?}", s.trim_end_matches(['|', '\0']))
                        }
                    };
                    format!("{}={}", e.id, v)
                })
                .collect();
            Some(format!("GeoTIFF keys {}", keys.join(", ")))
        }
        _ => None,
    }
}

/// Reads a LAS or LAZ file (the caller has seen the `LASF` signature).
pub(crate) fn read_las(path: &Path) -> Result<(Cloud, FileInfo)> {
    let (mut file, len) = open_input(path)?;
    let raw = check_header(path, &mut file, len)?;
    let mut reader = las::Reader::new(std::io::BufReader::with_capacity(1 << 20, file))
        .map_err(|e| las_err(path, e))?;
    let header = reader.header().clone();
    if raw.compressed {
        check_laz_chunks(path, &header, raw.offset_to_points, len)?;
    }
    let fmt = *header.point_format();
    let n = header.number_of_points();
    let t = *header.transforms();
    let hb = header.bounds();

    let mut info = FileInfo::new(
        path,
        if raw.compressed { "LAZ" } else { "LAS" },
        format!("{}.{}", raw.version.0, raw.version.1),
    );
    info.point_count = n;
    info.point_format = Some(raw.format);
    info.record_length = Some(fmt.len());
    info.scale = Some([t.x.scale, t.y.scale, t.z.scale]);
    info.offset = Some([t.x.offset, t.y.offset, t.z.offset]);
    let bounds = Bounds {
        min: [hb.min.x, hb.min.y, hb.min.z],
        max: [hb.max.x, hb.max.y, hb.max.z],
    };
    info.header_bounds = Some(bounds);
    info.crs = crs_text(&header);
    info.crs_records = header.all_vlrs().filter(|v| v.is_crs()).cloned().collect();
    let described: Vec<String> = header
        .all_vlrs()
        .filter(|v| is_extra_bytes_vlr(v))
        .flat_map(extra_bytes_names)
        .collect();
    info.other_fields = described;
    if fmt.extra_bytes > 0 && info.other_fields.is_empty() {
        info.other_fields
            .push(format!("{} undescribed extra bytes", fmt.extra_bytes));
    }

    let header_origin_ok = (0..3).all(|k| {
        bounds.min[k].is_finite() && bounds.max[k].is_finite() && bounds.min[k] <= bounds.max[k]
    });
    // Decided at the first chunk: the centre of the header bounds when they hold the first
    // point (within a unit), else that point rounded (bounds missing or wrong).
    let mut origin: Option<[f64; 3]> = None;

    // Reserve for every point only when the file size has proven they exist (uncompressed);
    // for LAZ never more than a chunk ahead of the data.
    let chunk = if raw.compressed { CHUNK_LAZ } else { CHUNK_LAS };
    let reserve = if raw.compressed { n.min(chunk) } else { n } as usize;
    let layout = Layout::new(raw.format, fmt.len() as usize);
    let mut cloud = Cloud::new([0.0; 3], Vec::with_capacity(reserve));
    let mut intensity = Vec::with_capacity(reserve);
    let mut classification = Vec::with_capacity(reserve);
    let mut return_number = Vec::with_capacity(reserve);
    let mut color = fmt.has_color.then(|| Vec::with_capacity(reserve));
    let mut gps = fmt.has_gps_time.then(|| Vec::with_capacity(reserve));

    let mut pd = PointDataBuilder::new().for_header(&header).build();
    let mut done = 0u64;
    while done < n {
        let got = reader
            .fill_points(chunk.min(n - done), &mut pd)
            .map_err(|e| las_err(path, e))?;
        if got == 0 {
            return Err(Error::file(
                path,
                format!("the point data ends after {done} of {n} points (truncated)"),
                "copy or export the file again",
            ));
        }
        let o = *origin.get_or_insert_with(|| {
            let first = [
                pd.x().next().unwrap_or(0.0),
                pd.y().next().unwrap_or(0.0),
                pd.z().next().unwrap_or(0.0),
            ];
            let inside =
                (0..3).all(|k| first[k] >= bounds.min[k] - 1.0 && first[k] <= bounds.max[k] + 1.0);
            if header_origin_ok && inside {
                std::array::from_fn(|k| ((bounds.min[k] + bounds.max[k]) * 0.5).round())
            } else {
                first.map(f64::round)
            }
        });
        decode_records(
            pd.raw_bytes(),
            &layout,
            [t.x, t.y, t.z],
            o,
            &mut Columns {
                positions: &mut cloud.positions,
                intensity: &mut intensity,
                classification: &mut classification,
                return_number: &mut return_number,
                color: color.as_mut(),
                gps: gps.as_mut(),
            },
        );
        done += got;
    }
    cloud.origin = origin.unwrap_or([0.0; 3]);
    cloud.intensity = Some(intensity);
    cloud.classification = Some(classification);
    cloud.return_number = Some(return_number);
    cloud.color = color;
    cloud.gps_time = gps;
    info.attributes = cloud
        .attribute_names()
        .into_iter()
        .map(String::from)
        .collect();
    Ok((cloud, info))
}

/// Byte offsets inside a point record (LAS 1.4 R15, Tables 7–17).
struct Layout {
    record_len: usize,
    extended: bool,
    gps: Option<usize>,
    rgb: Option<usize>,
}

impl Layout {
    fn new(format: u8, record_len: usize) -> Self {
        let extended = format >= 6;
        let gps = match format {
            1 | 3 | 4 | 5 => Some(20),
            6..=10 => Some(22),
            _ => None,
        };
        let rgb = match format {
            2 => Some(20),
            3 | 5 => Some(28),
            7 | 8 | 10 => Some(30),
            _ => None,
        };
        Layout {
            record_len,
            extended,
            gps,
            rgb,
        }
    }
}

/// Output columns of the LAS reader.
struct Columns<'a> {
    positions: &'a mut Vec<[f32; 3]>,
    intensity: &'a mut Vec<f32>,
    classification: &'a mut Vec<u8>,
    return_number: &'a mut Vec<u8>,
    color: Option<&'a mut Vec<[u16; 3]>>,
    gps: Option<&'a mut Vec<f64>>,
}

/// Decodes raw point records: positions relative to `origin` on one thread, the attributes on
/// another.
fn decode_records(
    bytes: &[u8],
    l: &Layout,
    t: [Transform; 3],
    origin: [f64; 3],
    out: &mut Columns<'_>,
) {
    let shift: [f64; 3] = std::array::from_fn(|k| t[k].offset - origin[k]);
    let scale: [f64; 3] = std::array::from_fn(|k| t[k].scale);
    let i32le = |r: &[u8], o: usize| i32::from_le_bytes(r[o..o + 4].try_into().unwrap());
    let u16le = |r: &[u8], o: usize| u16::from_le_bytes([r[o], r[o + 1]]);
    let Columns {
        positions,
        intensity,
        classification,
        return_number,
        color,
        gps,
    } = out;
    let records = || bytes.chunks_exact(l.record_len);
    let coordinates = || {
        for r in records() {
            positions.push(std::array::from_fn(|k| {
                (shift[k] + scale[k] * i32le(r, 4 * k) as f64) as f32
            }));
        }
    };
    let attributes = || {
        for r in records() {
            intensity.push(u16le(r, 12) as f32);
            if l.extended {
                return_number.push(r[14] & 0x0F);
                classification.push(r[16]);
            } else {
                return_number.push(r[14] & 0x07);
                classification.push(r[15] & 0x1F);
            }
            if let (Some(c), Some(o)) = (color.as_deref_mut(), l.rgb) {
                c.push([u16le(r, o), u16le(r, o + 2), u16le(r, o + 4)]);
            }
            if let (Some(g), Some(o)) = (gps.as_deref_mut(), l.gps) {
                g.push(f64::from_le_bytes(r[o..o + 8].try_into().unwrap()));
            }
        }
    };
    rayon::join(coordinates, attributes);
}

/// How [`write_las_with`] lays out the file. `Default` gives LAS 1.4 point format 6 (7 with
/// colour), scale 0.001 on every axis and the cloud's origin as offset.
#[derive(Debug, Clone, Default)]
pub struct LasOptions {
    /// Point data record format 0–10; waveform formats (4, 5, 9, 10) are written as the same
    /// format without waveform (1, 3, 6, 8).
    pub point_format: Option<u8>,
    /// Scale factors x, y, z (file units per stored integer step).
    pub scale: Option<[f64; 3]>,
    /// Offsets x, y, z, file units.
    pub offset: Option<[f64; 3]>,
    crs_records: Vec<Vlr>,
    own_records: Vec<Vlr>,
}

impl LasOptions {
    /// The layout of a LAS/LAZ input: its point format, scale, offset and CRS records, so
    /// that an output of the same cloud keeps the file's precision and reference system.
    /// For a non-LAS input this is the default.
    pub fn like(info: &FileInfo) -> Self {
        LasOptions {
            point_format: info.point_format,
            scale: info.scale,
            offset: info.offset,
            crs_records: info.crs_records.clone(),
            own_records: Vec::new(),
        }
    }

    /// The same layout with the CRS records of `info` instead (an output moved into another
    /// file's frame takes that file's reference system).
    pub fn with_crs_of(mut self, info: &FileInfo) -> Self {
        self.crs_records = info.crs_records.clone();
        self
    }

    /// Adds a variable-length record of our own to the header: `user_id` (at most 16 bytes),
    /// `record_id`, a description (at most 32 bytes) and the payload.
    pub fn with_record(
        mut self,
        user_id: &str,
        record_id: u16,
        description: &str,
        data: Vec<u8>,
    ) -> Self {
        self.own_records.push(Vlr {
            user_id: user_id.to_string(),
            record_id,
            description: description.to_string(),
            data,
        });
        self
    }
}

/// Most f32 columns whose Extra Bytes descriptors fit one VLR (its length is a u16:
/// 341 × 192 = 65 472 bytes).
pub const MAX_LAS_COLUMNS: usize = u16::MAX as usize / EXTRA_BYTES_DESCRIPTOR;

/// Running smallest and largest finite value of each column, for the Extra Bytes descriptors.
#[derive(Debug, Clone)]
struct Ranges(Vec<(f64, f64)>);

impl Ranges {
    fn new(n: usize) -> Self {
        Ranges(vec![(f64::INFINITY, f64::NEG_INFINITY); n])
    }

    fn add(&mut self, values: &[f32]) {
        for ((lo, hi), &v) in self.0.iter_mut().zip(values) {
            if v.is_finite() {
                *lo = lo.min(v as f64);
                *hi = hi.max(v as f64);
            }
        }
    }
}

/// The Extra Bytes VLR (`LASF_Spec`, record 4) describing `names` as f32 values with the
/// given ranges (options bits 1 and 2 set where a column has a finite value).
fn extra_bytes_vlr(names: &[String], ranges: &Ranges) -> Vlr {
    let mut data = Vec::with_capacity(names.len() * EXTRA_BYTES_DESCRIPTOR);
    for (name, &(lo, hi)) in names.iter().zip(&ranges.0) {
        let mut d = [0u8; EXTRA_BYTES_DESCRIPTOR];
        d[2] = 9; // data type: float
        if lo <= hi {
            d[3] = 0b0000_0110; // min and max are valid
            d[64..72].copy_from_slice(&lo.to_le_bytes());
            d[88..96].copy_from_slice(&hi.to_le_bytes());
        }
        d[4..4 + name.len()].copy_from_slice(name.as_bytes());
        let desc = b"per-point feature";
        d[160..160 + desc.len()].copy_from_slice(desc);
        data.extend_from_slice(&d);
    }
    Vlr {
        user_id: "LASF_Spec".to_string(),
        record_id: 4,
        description: "Extra Bytes".to_string(),
        data,
    }
}

/// Writes `cloud` as LAS 1.4 (LAZ when `path` ends in `.laz`) with `columns` as f32 Extra
/// Bytes, with the default [`LasOptions`]. Atomic.
pub fn write_las(path: &Path, cloud: &Cloud, columns: &[Column<'_>]) -> Result<()> {
    write_las_with(path, cloud, columns, &LasOptions::default())
}

/// Writes `cloud` as LAS 1.4 (LAZ when `path` ends in `.laz`) with `columns` as f32 Extra
/// Bytes in column order, laid out by `options`. Atomic.
///
/// Each column becomes 4 bytes (little-endian f32) at the end of every point record, in
/// column order, described by one 192-byte descriptor in a `LASF_Spec` record 4 VLR (Extra
/// Bytes, ASPRS LAS 1.4 R15 Table 24: data type 9 = float at byte 2, options at 3, name at
/// 4–35, min at 64 and max at 88 as f64 with options bits 1 and 2 set). For formats 6–10 the
/// legacy point counts are zero, as the specification requires.
///
/// Intensity is rounded and clamped to 0..=65535; classification 12 (overlap) is written
/// with the overlap flag in formats 6–10. Column names: at most 32 bytes, letters, digits and
/// `_`; at most [`MAX_LAS_COLUMNS`] columns. Every coordinate must fit the 32-bit integer range
/// at the chosen scale and offset.
pub fn write_las_with(
    path: &Path,
    cloud: &Cloud,
    columns: &[Column<'_>],
    options: &LasOptions,
) -> Result<()> {
    cloud.validate().map_err(|e| super::about(path, e))?;
    check_columns(path, cloud.len(), columns, &[])?;
    let names: Vec<String> = columns.iter().map(|c| c.name.to_string()).collect();
    let mut w = LasRowWriter::create(path, cloud, &names, options)?;
    let step = 1 << 16;
    let mut values = Vec::with_capacity(step * columns.len());
    let mut start = 0;
    while start < cloud.len() {
        let end = (start + step).min(cloud.len());
        values.clear();
        for i in start..end {
            values.extend(columns.iter().map(|c| c.values[i]));
        }
        let rows: Vec<(usize, [f32; 3])> = (start..end).map(|i| (i, cloud.positions[i])).collect();
        w.write_rows(Some(cloud), &rows, &values)?;
        start = end;
    }
    w.finish()?.commit()
}

/// A LAS/LAZ file written in chunks of rows, in the layout of [`write_las_with`]: the header
/// and VLRs first (the Extra Bytes ranges are filled in by [`LasRowWriter::finish`]), then
/// the points as they come. The file stays under a temporary name until the
/// [`Finished`](super::Finished) it returns is committed.
pub struct LasRowWriter {
    path: std::path::PathBuf,
    temp: super::TempFile,
    writer: las::Writer<BufWriter<std::fs::File>>,
    format: las::point::Format,
    fmt_no: u8,
    names: Vec<String>,
    ranges: Ranges,
    origin: [f64; 3],
}

impl LasRowWriter {
    /// Starts `path` for points with the attributes present in `like` (its origin is the
    /// local frame of the rows) and f32 columns `names`.
    pub fn create(
        path: &Path,
        like: &Cloud,
        names: &[String],
        options: &LasOptions,
    ) -> Result<LasRowWriter> {
        if let Some(c) = names.iter().find(|c| c.len() > 32) {
            return Err(Error::file(
                path,
                format!("column name {c} is longer than 32 bytes"),
                "use a shorter name for LAS extra bytes",
            ));
        }
        if names.len() > MAX_LAS_COLUMNS {
            return Err(Error::file(
                path,
                format!(
                    "{} feature columns are more than the {MAX_LAS_COLUMNS} whose descriptions fit a LAS Extra Bytes record",
                    names.len()
                ),
                "write NPY or CSV (a .npy or .csv output), or ask for fewer invariants or scales",
            ));
        }
        let compress = path
            .extension()
            .is_some_and(|e| e.eq_ignore_ascii_case("laz"));
        let fmt_no = match options
            .point_format
            .unwrap_or(if like.color.is_some() { 7 } else { 6 })
        {
            4 => 1,
            5 => 3,
            9 => 6,
            10 => 8,
            f if f <= 10 => f,
            f => {
                return Err(Error::file(
                    path,
                    format!("point format {f} does not exist"),
                    "choose a point format from 0 to 10",
                ));
            }
        };
        let mut format = las::point::Format::new(fmt_no).map_err(|e| las_err(path, e))?;
        format.extra_bytes = (names.len() * 4) as u16;
        format.is_compressed = compress;
        let scale = options.scale.unwrap_or([0.001; 3]);
        let offset = options.offset.unwrap_or(like.origin);
        if !scale.iter().all(|s| s.is_finite() && *s > 0.0) || !offset.iter().all(|o| o.is_finite())
        {
            return Err(Error::file(
                path,
                "the LAS scale must be positive and the offset finite",
                "give other scale factors or offsets",
            ));
        }
        let t = |k: usize| Transform {
            scale: scale[k],
            offset: offset[k],
        };
        let mut builder = Builder::default();
        builder.version = Version::new(1, 4);
        builder.point_format = format;
        builder.transforms = Vector {
            x: t(0),
            y: t(1),
            z: t(2),
        };
        builder.generating_software = "equiscan".to_string();
        // LAS 1.4 R15 system identifier, from memory: "OTHER" when the points do not come
        // straight from one instrument (the spec also names MERGE, MODIFICATION, EXTRACTION, …).
        builder.system_identifier = "OTHER".to_string();
        builder.vlrs = options.crs_records.clone();
        builder.vlrs.extend(options.own_records.iter().cloned());
        let ranges = Ranges::new(names.len());
        if !names.is_empty() {
            // Same length as the final record; the ranges are written by `finish`.
            builder.vlrs.push(extra_bytes_vlr(names, &ranges));
        }
        let header = builder.into_header().map_err(|e| las_err(path, e))?;
        let mut temp = super::TempFile::create(path)?;
        let file = temp
            .writer()
            .get_ref()
            .try_clone()
            .map_err(|e| Error::io(path, &e))?;
        let writer = las::Writer::new(BufWriter::with_capacity(1 << 20, file), header)
            .map_err(|e| las_err(path, e))?;
        Ok(LasRowWriter {
            path: path.to_path_buf(),
            temp,
            writer,
            format,
            fmt_no,
            names: names.to_vec(),
            ranges,
            origin: like.origin,
        })
    }

    /// Writes one point per entry of `rows`, `(point index in attrs, local position)`, with
    /// the column values `values` (row-major, `rows.len() × names.len()`). `attrs`: the cloud
    /// whose attributes the points carry; `None` writes defaults (class 1, first return).
    pub fn write_rows(
        &mut self,
        attrs: Option<&Cloud>,
        rows: &[(usize, [f32; 3])],
        values: &[f32],
    ) -> Result<()> {
        let nc = self.names.len();
        let path = &self.path;
        let points = rows.iter().enumerate().map(|(r, &(i, p))| {
            let v = &values[r * nc..(r + 1) * nc];
            let g: [f64; 3] = std::array::from_fn(|k| self.origin[k] + p[k] as f64);
            las_point(attrs.map(|c| (c, i)), g, v, &self.format)
        });
        let pd = PointDataBuilder::new()
            .for_header(self.writer.header())
            .build_from_points(points)
            .map_err(|e| match e {
                las::Error::InvalidInverseTransform { .. } => Error::file(
                    path,
                    "a coordinate does not fit the LAS integer range at this scale and offset",
                    "choose a larger scale or an offset near the points",
                ),
                e => las_err(path, e),
            })?;
        self.writer
            .write_points(&pd)
            .map_err(|e| las_err(path, e))?;
        for r in 0..rows.len() {
            self.ranges.add(&values[r * nc..(r + 1) * nc]);
        }
        Ok(())
    }

    /// Closes the point data, writes the column ranges into the Extra Bytes record and, for
    /// formats 6–10, zeroes the legacy counts; returns the complete, synced temporary file.
    pub fn finish(self) -> Result<super::Finished> {
        let path = &self.path;
        let inner = self.writer.into_inner().map_err(|e| las_err(path, e))?;
        let mut file = inner.into_inner().map_err(|e| Error::io(path, e.error()))?;
        if self.fmt_no >= 6 {
            // LAS 1.4 R15, Table 3: the legacy point count (byte 107, u32) and legacy counts
            // by return (bytes 111–130, 5 × u32) must be zero for point formats 6–10; the las
            // crate fills them in, so clear them here.
            file.seek(SeekFrom::Start(107))
                .and_then(|_| file.write_all(&[0u8; 24]))
                .map_err(|e| Error::io(path, &e))?;
        }
        if !self.names.is_empty() {
            let vlr = extra_bytes_vlr(&self.names, &self.ranges);
            let at = find_vlr_data(&mut file, "LASF_Spec", 4).map_err(|e| Error::io(path, &e))?;
            let at = at.ok_or_else(|| {
                Error::file(
                    path,
                    "the Extra Bytes record is missing from the file just written",
                    "report this as a bug",
                )
            })?;
            file.seek(SeekFrom::Start(at))
                .and_then(|_| file.write_all(&vlr.data))
                .map_err(|e| Error::io(path, &e))?;
        }
        file.seek(SeekFrom::End(0))
            .map_err(|e| Error::io(path, &e))?;
        drop(file);
        self.temp.finish()
    }
}

/// Offset of the data of the first VLR with `user_id` and `record_id` in a LAS file (header
/// size at byte 94, VLR count at 100; each VLR header is 54 bytes: user id at 2–17, record id
/// at 18, length after the header at 20).
fn find_vlr_data(
    file: &mut std::fs::File,
    user_id: &str,
    record_id: u16,
) -> std::io::Result<Option<u64>> {
    let mut head = [0u8; 104];
    file.seek(SeekFrom::Start(0))?;
    file.read_exact(&mut head)?;
    let mut at = u16_at(&head, 94) as u64;
    for _ in 0..u32_at(&head, 100) {
        let mut v = [0u8; 54];
        file.seek(SeekFrom::Start(at))?;
        file.read_exact(&mut v)?;
        let len = u16_at(&v, 20) as u64;
        let id = &v[2..18];
        let name_len = id.iter().position(|&b| b == 0).unwrap_or(16);
        if &id[..name_len] == user_id.as_bytes() && u16_at(&v, 18) == record_id {
            return Ok(Some(at + 54));
        }
        at += 54 + len;
    }
    Ok(None)
}

fn las_point(
    attrs: Option<(&Cloud, usize)>,
    g: [f64; 3],
    values: &[f32],
    format: &las::point::Format,
) -> las::Point {
    let cloud = attrs.map(|(c, _)| c);
    let i = attrs.map_or(0, |(_, i)| i);
    let class = cloud
        .and_then(|c| c.classification.as_ref())
        .map_or(1, |c| c[i]);
    let ret = cloud
        .and_then(|c| c.return_number.as_ref())
        .map_or(1, |r| r[i]);
    let max_ret = if format.is_extended { 15 } else { 7 };
    let ret = ret.min(max_ret);
    let mut extra = Vec::with_capacity(values.len() * 4);
    for v in values {
        extra.extend_from_slice(&v.to_le_bytes());
    }
    las::Point {
        x: g[0],
        y: g[1],
        z: g[2],
        intensity: cloud
            .and_then(|c| c.intensity.as_ref())
            .map_or(0, |v| v[i].round().clamp(0.0, 65535.0) as u16),
        return_number: ret,
        number_of_returns: ret,
        classification: las::point::Classification::new(class)
            .unwrap_or(las::point::Classification::CreatedNeverClassified),
        is_overlap: class == 12,
        gps_time: format.has_gps_time.then(|| {
            cloud
                .and_then(|c| c.gps_time.as_ref())
                .map_or(0.0, |v| v[i])
        }),
        color: format.has_color.then(|| {
            cloud
                .and_then(|c| c.color.as_ref())
                .map_or(Color::default(), |c| {
                    let [red, green, blue] = c[i];
                    Color { red, green, blue }
                })
        }),
        nir: format.has_nir.then_some(0),
        extra_bytes: extra,
        ..Default::default()
    }
}
