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
use std::path::{Path, PathBuf};

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
    // An I/O error anywhere in the chain (also inside LAZ decompression) names its kind. The
    // `las` crate's `Io` variant is transparent: its source is the I/O error's own source.
    if let las::Error::Io(io) = &e {
        return Error::io(path, io);
    }
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

/// Largest decoded size of one LAZ chunk accepted, bytes.
const MAX_CHUNK_BYTES: u64 = 1 << 28;
/// Largest scale factor accepted, file units per stored step: above it a 32-bit coordinate
/// no longer describes a scan (common practice is 0.01 to 0.0001).
const MAX_SCALE: f64 = 1e4;
/// Largest offset accepted, file units (far beyond any planetary coordinate system).
const MAX_OFFSET: f64 = 1e12;

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
        // Name the byte as stored: bits 6 and 7 mark LAZ compression, so 99 would otherwise
        // be reported as 35.
        return Err(Error::file(
            path,
            format!("LAS point format {raw_format} is not read here (0 to 10 are, LAZ adds 128)"),
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
        // LAS 1.4 R15, Table 3: the legacy count (byte 107) is zero or equals the 64-bit
        // count (byte 247). Two different non-zero counts cannot both be right.
        if c != 0 && legacy_count != 0 && c != legacy_count {
            return Err(bad(
                path,
                format!(
                    "the header's two point counts disagree ({legacy_count} in the legacy field, {c} in the 64-bit field)"
                ),
            ));
        }
        if c == 0 { legacy_count } else { c }
    } else {
        legacy_count
    };
    // Scale factors at bytes 131, 139, 147 and offsets at 155, 163, 171 (Table 3).
    for (k, o) in [131usize, 139, 147].into_iter().enumerate() {
        let s = f64_at(&b, o);
        if !s.is_finite() || s == 0.0 || s.abs() > MAX_SCALE {
            return Err(bad(
                path,
                format!(
                    "the {} scale factor is {} (expected a finite step between 0 and {MAX_SCALE:e} file units; 0.001 to 0.01 is common practice)",
                    ["x", "y", "z"][k],
                    super::compact(s)
                ),
            ));
        }
    }
    for (k, o) in [155usize, 163, 171].into_iter().enumerate() {
        let v = f64_at(&b, o);
        if !v.is_finite() || v.abs() > MAX_OFFSET {
            return Err(bad(
                path,
                format!(
                    "the {} offset is {} (expected a finite value within {MAX_OFFSET:e})",
                    ["x", "y", "z"][k],
                    super::compact(v)
                ),
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

/// Checks where the LAZ chunk table lies and how many entries it claims, before the `laz`
/// crate reads it: the 8 bytes at the start of the point data give its offset (LASzip
/// convention, from memory: an offset not past that position means "look in the file's last 8
/// bytes"), the table starts with a version (u32) and a chunk count (u32). Every chunk takes at
/// least one byte of compressed data, so the count cannot exceed the bytes between the points'
/// start and the table; a larger count would make the decoder allocate for it.
fn check_laz_table_location(
    path: &Path,
    file: &mut std::fs::File,
    len: u64,
    offset_to_points: u64,
) -> Result<()> {
    let mut at = |pos: u64, buf: &mut [u8]| -> Result<()> {
        file.seek(SeekFrom::Start(pos))
            .and_then(|_| file.read_exact(buf))
            .map_err(|e| Error::io(path, &e))
    };
    if offset_to_points + 8 > len {
        return Err(bad(
            path,
            "the LAZ point data is truncated before its chunk table offset",
        ));
    }
    let mut w = [0u8; 8];
    at(offset_to_points, &mut w)?;
    let mut table = i64::from_le_bytes(w);
    if table <= offset_to_points as i64 {
        at(len - 8, &mut w)?;
        let end = i64::from_le_bytes(w);
        if end <= offset_to_points as i64 {
            return Err(bad(
                path,
                format!(
                    "the LAZ chunk table offset is {} and the file's last 8 bytes give none either (damaged or cut file)",
                    table
                ),
            ));
        }
        table = end;
    }
    let table = table as u64;
    if table.saturating_add(8) > len {
        return Err(bad(
            path,
            format!("the LAZ chunk table offset {table} lies outside the {len}-byte file"),
        ));
    }
    at(table, &mut w)?;
    let chunks = u32_at(&w, 4) as u64;
    let data = table - offset_to_points - 8;
    if chunks > data {
        return Err(bad(
            path,
            format!(
                "the LAZ chunk table lists {chunks} chunks, more than its {data} bytes of compressed data can hold"
            ),
        ));
    }
    file.seek(SeekFrom::Start(0))
        .map_err(|e| Error::io(path, &e))?;
    Ok(())
}

/// Bytes per value of Extra Bytes data types 1–10 (LAS 1.4 R15, Table 25, from memory:
/// u8, i8, u16, i16, u32, i32, u64, i64, f32, f64); types 11–20 and 21–30 are the deprecated
/// two- and three-value arrays of the same.
fn extra_bytes_type_size(t: u8, options: u8) -> Option<u64> {
    const SIZE: [u64; 10] = [1, 1, 2, 2, 4, 4, 8, 8, 4, 8];
    match t {
        0 => Some(options as u64),
        1..=10 => Some(SIZE[t as usize - 1]),
        11..=20 => Some(2 * SIZE[t as usize - 11]),
        21..=30 => Some(3 * SIZE[t as usize - 21]),
        _ => None,
    }
}

/// Refuses an Extra Bytes record that cannot describe the records' extra bytes: a length that
/// is not a whole number of 192-byte descriptors, an undefined data type, or more bytes
/// described than each point record carries.
fn check_extra_bytes(path: &Path, header: &las::Header) -> Result<()> {
    let carried = header.point_format().extra_bytes as u64;
    for v in header.all_vlrs().filter(|v| is_extra_bytes_vlr(v)) {
        if v.data.len() % EXTRA_BYTES_DESCRIPTOR != 0 {
            return Err(bad(
                path,
                format!(
                    "the Extra Bytes record holds {} bytes, not a whole number of {EXTRA_BYTES_DESCRIPTOR}-byte descriptors",
                    v.data.len()
                ),
            ));
        }
        let mut described = 0u64;
        for (d, name) in v
            .data
            .chunks_exact(EXTRA_BYTES_DESCRIPTOR)
            .zip(extra_bytes_names(v))
        {
            let Some(size) = extra_bytes_type_size(d[2], d[3]) else {
                return Err(bad(
                    path,
                    format!(
                        "Extra Bytes field {name:?} has data type {} (0 to 30 are defined)",
                        d[2]
                    ),
                ));
            };
            described += size;
        }
        if described > carried {
            return Err(bad(
                path,
                format!(
                    "the Extra Bytes record describes {described} bytes per point but the records carry {carried}"
                ),
            ));
        }
    }
    Ok(())
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
    // The decoder allocates a whole chunk's points at once (for the last fixed-size chunk, as
    // many as the record says): a chunk size no real file uses (LASzip writes 50 000 points,
    // from memory) would make it allocate what the damaged record says.
    let largest = if vlr.uses_variable_size_chunks() {
        table
            .as_ref()
            .iter()
            .map(|c| c.point_count)
            .max()
            .unwrap_or(0)
    } else {
        vlr.chunk_size() as u64
    };
    if largest.saturating_mul(record_len) > MAX_CHUNK_BYTES {
        return Err(bad(
            path,
            format!(
                "the LAZ data declares chunks of {largest} points ({} bytes decoded), more than {} MiB",
                largest.saturating_mul(record_len),
                MAX_CHUNK_BYTES >> 20
            ),
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

/// A LAS or LAZ file opened for reading: header checked and summarised; points are then
/// decoded in chunks with [`LasReader::read_into`].
pub(crate) struct LasReader {
    path: PathBuf,
    reader: las::Reader,
    pd: las::PointData,
    layout: Layout,
    layout_format: u8,
    extra_bytes: usize,
    extra_descriptors: Vec<u8>,
    transforms: [Transform; 3],
    compressed: bool,
    n: u64,
    done: u64,
    bounds: Bounds,
    header_origin_ok: bool,
    origin: Option<[f64; 3]>,
    has_color: bool,
    has_gps: bool,
    info: FileInfo,
}

impl LasReader {
    /// Opens `path` (the caller has seen the `LASF` signature) and checks everything the
    /// decoder will rely on before it reads anything.
    pub(crate) fn open(path: &Path) -> Result<LasReader> {
        let (mut file, len) = open_input(path)?;
        let raw = check_header(path, &mut file, len)?;
        if raw.compressed {
            check_laz_table_location(path, &mut file, len, raw.offset_to_points)?;
        }
        let reader = guard(path, raw.compressed, || {
            las::Reader::new(std::io::BufReader::with_capacity(1 << 20, file))
                .map_err(|e| las_err(path, e))
        })?;
        let header = reader.header().clone();
        check_extra_bytes(path, &header)?;
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
        // Non-finite header bounds are informational only: kept out of the summary, and the
        // origin then comes from the first point.
        let finite = bounds.min.iter().chain(&bounds.max).all(|v| v.is_finite());
        info.header_bounds = finite.then_some(bounds);
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
        let mut me = LasReader {
            path: path.to_path_buf(),
            pd: PointDataBuilder::new().for_header(&header).build(),
            reader,
            layout: Layout::new(raw.format, fmt.len() as usize),
            layout_format: raw.format,
            extra_bytes: fmt.extra_bytes as usize,
            extra_descriptors: header
                .all_vlrs()
                .filter(|v| is_extra_bytes_vlr(v))
                .flat_map(|v| v.data.iter().copied())
                .collect(),
            transforms: [t.x, t.y, t.z],
            compressed: raw.compressed,
            n,
            done: 0,
            bounds,
            header_origin_ok,
            origin: None,
            has_color: fmt.has_color,
            has_gps: fmt.has_gps_time,
            info,
        };
        me.info.attributes = me
            .empty_cloud(0)
            .attribute_names()
            .into_iter()
            .map(String::from)
            .collect();
        Ok(me)
    }

    /// The header summary.
    pub(crate) fn info(&self) -> &FileInfo {
        &self.info
    }

    /// Points not read yet.
    pub(crate) fn remaining(&self) -> u64 {
        self.n - self.done
    }

    /// Points decoded per call to the `las` crate: LAZ uses more so that parallel
    /// decompression has several compressed chunks to share between threads.
    pub(crate) fn natural_chunk(&self) -> u64 {
        if self.compressed {
            CHUNK_LAZ
        } else {
            CHUNK_LAS
        }
    }

    /// An empty cloud with this file's attributes and room for `reserve` points (for LAZ
    /// never more than a chunk ahead of the data; for LAS the file size proved they exist).
    pub(crate) fn empty_cloud(&self, reserve: u64) -> Cloud {
        let cap = if self.compressed {
            reserve.min(self.remaining()).min(CHUNK_LAZ)
        } else {
            reserve.min(self.remaining())
        } as usize;
        let mut c = Cloud::new([0.0; 3], Vec::with_capacity(cap));
        c.intensity = Some(Vec::with_capacity(cap));
        c.classification = Some(Vec::with_capacity(cap));
        c.return_number = Some(Vec::with_capacity(cap));
        c.color = self.has_color.then(|| Vec::with_capacity(cap));
        c.gps_time = self.has_gps.then(|| Vec::with_capacity(cap));
        c.records = Some(crate::cloud::SourceRecords {
            format: self.layout_format,
            record_len: self.layout.record_len,
            extra_bytes: self.extra_bytes,
            extra_descriptors: self.extra_descriptors.clone(),
            bytes: Vec::with_capacity(cap * self.layout.record_len),
        });
        c
    }

    /// Appends up to `max` points to `out` (a cloud from [`LasReader::empty_cloud`]) and sets
    /// its origin; returns how many were read (0 at the end).
    pub(crate) fn read_into(&mut self, out: &mut Cloud, max: usize) -> Result<usize> {
        let end = self.done + (max as u64).min(self.remaining());
        let start = self.done;
        let path = self.path.clone();
        while self.done < end {
            let want = self.natural_chunk().min(end - self.done);
            let (reader, pd) = (&mut self.reader, &mut self.pd);
            let compressed = self.compressed;
            let got = guard(&path, compressed, || {
                reader.fill_points(want, pd).map_err(|e| {
                    if compressed {
                        laz_data_err(&path, e)
                    } else {
                        las_err(&path, e)
                    }
                })
            })?;
            if got == 0 {
                return Err(Error::file(
                    &path,
                    format!(
                        "the point data ends after {} of {} points (truncated)",
                        self.done, self.n
                    ),
                    "copy or export the file again",
                ));
            }
            let bounds = self.bounds;
            let ok = self.header_origin_ok;
            let pd = &self.pd;
            let o = *self.origin.get_or_insert_with(|| {
                let first = [
                    pd.x().next().unwrap_or(0.0),
                    pd.y().next().unwrap_or(0.0),
                    pd.z().next().unwrap_or(0.0),
                ];
                let inside = (0..3)
                    .all(|k| first[k] >= bounds.min[k] - 1.0 && first[k] <= bounds.max[k] + 1.0);
                if ok && inside {
                    std::array::from_fn(|k| ((bounds.min[k] + bounds.max[k]) * 0.5).round())
                } else {
                    first.map(f64::round)
                }
            });
            let Cloud {
                positions,
                intensity,
                classification,
                return_number,
                color,
                gps_time,
                ..
            } = out;
            let (Some(intensity), Some(classification), Some(return_number)) = (
                intensity.as_mut(),
                classification.as_mut(),
                return_number.as_mut(),
            ) else {
                return Err(Error::internal(
                    "LasReader::read_into was given a cloud without its attributes",
                    "make the cloud with empty_cloud",
                ));
            };
            decode_records(
                self.pd.raw_bytes(),
                &self.layout,
                self.transforms,
                o,
                &mut Columns {
                    positions,
                    intensity,
                    classification,
                    return_number,
                    color: color.as_mut(),
                    gps: gps_time.as_mut(),
                },
            );
            if let Some(r) = out.records.as_mut() {
                r.bytes.extend_from_slice(self.pd.raw_bytes());
            }
            self.done += got;
        }
        out.origin = self.origin.unwrap_or([0.0; 3]);
        Ok((self.done - start) as usize)
    }
}

/// Reads a LAS or LAZ file (the caller has seen the `LASF` signature).
pub(crate) fn read_las(path: &Path) -> Result<(Cloud, FileInfo)> {
    let mut r = LasReader::open(path)?;
    let mut cloud = r.empty_cloud(u64::MAX);
    let n = r.remaining().min(usize::MAX as u64) as usize;
    r.read_into(&mut cloud, n)?;
    super::check_extent(path, &cloud)?;
    Ok((cloud, r.info().clone()))
}

/// Runs a call into the `las`/`laz` decoders, turning a panic inside them into the one-line
/// error of a corrupt file. This is the last resort: everything the decoders read is checked
/// first ([`check_header`], [`check_laz_table_location`], [`check_laz_chunks`]).
fn guard<T>(path: &Path, compressed: bool, f: impl FnOnce() -> Result<T>) -> Result<T> {
    super::quiet_panics::run(f).unwrap_or_else(|| {
        Err(Error::file(
            path,
            if compressed {
                "corrupt compressed data (the LAZ decoder gave up on it)"
            } else {
                "corrupt point data (the LAS decoder gave up on it)"
            },
            "copy or export the file again",
        ))
    })
}

/// A decoding error inside LAZ point data: the chunk table was checked against the file, so an
/// early end inside a chunk means damaged compressed bytes rather than a cut file.
fn laz_data_err(path: &Path, e: las::Error) -> Error {
    let mapped = las_err(path, e);
    let corrupt = match &mapped {
        Error::File { source, .. } => source
            .as_ref()
            .and_then(|s| s.downcast_ref::<std::io::Error>())
            .is_some_and(|io| {
                matches!(
                    io.kind(),
                    std::io::ErrorKind::UnexpectedEof | std::io::ErrorKind::InvalidData
                )
            }),
        Error::Invalid { .. } => false,
    };
    if corrupt {
        bad(
            path,
            "corrupt compressed data (a LAZ chunk does not decode; damaged bytes or a cut file)",
        )
    } else {
        mapped
    }
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
            crs_records: crs_records_of(info),
            own_records: Vec::new(),
        }
    }

    /// The same layout with the CRS records of `info` instead (an output moved into another
    /// file's frame takes that file's reference system).
    pub fn with_crs_of(mut self, info: &FileInfo) -> Self {
        self.crs_records = crs_records_of(info);
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

/// The CRS records a LAS output of `info`'s points carries: a LAS input's own CRS records;
/// for another input whose CRS is WKT text (E57 `coordinateMetadata`), a WKT record
/// (`LASF_Projection`, record 2112, the text and a closing NUL; LAS 1.4 R15, from memory).
fn crs_records_of(info: &FileInfo) -> Vec<Vlr> {
    if !info.crs_records.is_empty() {
        return info.crs_records.clone();
    }
    match info.crs.as_deref().map(str::trim) {
        Some(wkt) if !wkt.is_empty() && !wkt.starts_with("GeoTIFF keys") => {
            let mut data = wkt.as_bytes().to_vec();
            data.push(0);
            vec![Vlr {
                user_id: "LASF_Projection".to_string(),
                record_id: 2112,
                description: "OGC WKT coordinate system".to_string(),
                data,
            }]
        }
        _ => Vec::new(),
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

/// The descriptors of a source's Extra Bytes for an output that appends `names` after them:
/// the source's own, then, when they describe fewer bytes than each record carries, data type
/// 0 ("undocumented", its options byte giving the length; LAS 1.4 R15 Table 24, from memory)
/// for the rest, so that the appended columns stay where their descriptors say. A source name
/// equal to one of `names` gets `_input` appended (cut to 32 bytes), so names stay distinct.
fn source_descriptors(r: &crate::cloud::SourceRecords, names: &[String]) -> Vec<u8> {
    let mut out = Vec::new();
    let mut described = 0usize;
    for d in r.extra_descriptors.chunks_exact(EXTRA_BYTES_DESCRIPTOR) {
        let size = extra_bytes_type_size(d[2], d[3]).unwrap_or(0) as usize;
        if described + size > r.extra_bytes {
            break;
        }
        described += size;
        let mut d: [u8; EXTRA_BYTES_DESCRIPTOR] =
            d.try_into().unwrap_or([0; EXTRA_BYTES_DESCRIPTOR]);
        let end = d[4..36].iter().position(|&c| c == 0).unwrap_or(32);
        let name = String::from_utf8_lossy(&d[4..4 + end]).into_owned();
        if names.contains(&name) {
            let renamed: String = format!("{name}_input").chars().take(32).collect();
            d[4..36].fill(0);
            let b = renamed.as_bytes();
            d[4..4 + b.len().min(32)].copy_from_slice(&b[..b.len().min(32)]);
        }
        out.extend_from_slice(&d);
    }
    let mut left = r.extra_bytes - described;
    let mut k = 0;
    while left > 0 {
        let n = left.min(255);
        let mut d = [0u8; EXTRA_BYTES_DESCRIPTOR];
        d[2] = 0;
        d[3] = n as u8;
        let name = format!("input_extra_bytes_{k}");
        d[4..4 + name.len()].copy_from_slice(name.as_bytes());
        out.extend_from_slice(&d);
        left -= n;
        k += 1;
    }
    out
}

/// The Extra Bytes VLR (`LASF_Spec`, record 4): the `source` descriptors, then `names` as f32
/// values with the given ranges (options bits 1 and 2 set where a column has a finite value).
fn extra_bytes_vlr(source: &[u8], names: &[String], ranges: &Ranges) -> Vlr {
    let mut data = Vec::with_capacity(source.len() + names.len() * EXTRA_BYTES_DESCRIPTOR);
    data.extend_from_slice(source);
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
    writer: NoPanicWriter<BufWriter<std::fs::File>>,
    format: las::point::Format,
    fmt_no: u8,
    names: Vec<String>,
    ranges: Ranges,
    origin: [f64; 3],
    /// Extra Bytes of the source records copied in front of the columns.
    source_extra: usize,
    /// Their descriptors (whole, padded to cover `source_extra`).
    source_desc: Vec<u8>,
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
        // The source's Extra Bytes come first, described as the source described them.
        let (source_extra, source_desc) = match &like.records {
            Some(r) => (r.extra_bytes, source_descriptors(r, names)),
            None => (0, Vec::new()),
        };
        let described = source_desc.len() / EXTRA_BYTES_DESCRIPTOR;
        if names.len() + described > MAX_LAS_COLUMNS {
            return Err(Error::file(
                path,
                format!(
                    "{} feature columns{} are more than the {MAX_LAS_COLUMNS} whose descriptions fit a LAS Extra Bytes record",
                    names.len(),
                    if described > 0 {
                        format!(" after the input's {described} Extra Bytes fields")
                    } else {
                        String::new()
                    }
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
            f if f <= 10 => without_waveform(f),
            f => {
                return Err(Error::file(
                    path,
                    format!("point format {f} does not exist"),
                    "choose a point format from 0 to 10",
                ));
            }
        };
        let mut format = las::point::Format::new(fmt_no).map_err(|e| las_err(path, e))?;
        format.extra_bytes = (source_extra + names.len() * 4) as u16;
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
        // LAS 1.4 R15, Table 4: global encoding bit 4 marks a WKT CRS (required with one).
        builder.has_wkt_crs = options
            .crs_records
            .iter()
            .any(|v| v.user_id == "LASF_Projection" && v.record_id == 2112);
        builder.vlrs.extend(options.own_records.iter().cloned());
        let ranges = Ranges::new(names.len());
        if !names.is_empty() || !source_desc.is_empty() {
            // Same length as the final record; the ranges are written by `finish`.
            builder
                .vlrs
                .push(extra_bytes_vlr(&source_desc, names, &ranges));
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
            writer: NoPanicWriter(Some(writer)),
            format,
            fmt_no,
            names: names.to_vec(),
            ranges,
            origin: like.origin,
            source_extra,
            source_desc,
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
        let same = attrs.filter(|c| {
            c.records.as_ref().is_some_and(|r| {
                without_waveform(r.format) == self.fmt_no
                    && r.extra_bytes == self.source_extra
                    && r.len() == c.len()
            })
        });
        if let Some(cloud) = same {
            let bytes = self.copied_records(cloud, rows, values)?;
            let pd = PointDataBuilder::new()
                .for_header(self.writer.get().header())
                .build_from_bytes(bytes)
                .map_err(|e| las_err(path, e))?;
            self.writer
                .get()
                .write_points(&pd)
                .map_err(|e| las_err(path, e))?;
            for r in 0..rows.len() {
                self.ranges.add(&values[r * nc..(r + 1) * nc]);
            }
            return Ok(());
        }
        let points = rows.iter().enumerate().map(|(r, &(i, p))| {
            let v = &values[r * nc..(r + 1) * nc];
            let g: [f64; 3] = std::array::from_fn(|k| self.origin[k] + p[k] as f64);
            las_point(attrs.map(|c| (c, i)), g, v, &self.format, self.source_extra)
        });
        let pd = PointDataBuilder::new()
            .for_header(self.writer.get().header())
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
            .get()
            .write_points(&pd)
            .map_err(|e| las_err(path, e))?;
        for r in 0..rows.len() {
            self.ranges.add(&values[r * nc..(r + 1) * nc]);
        }
        Ok(())
    }

    /// The rows as records of the cloud's own point format: each source record copied byte
    /// for byte (every field, the source's Extra Bytes), its coordinates stored anew at this
    /// file's scale and offset, the fields the cloud holds as columns (intensity, return
    /// number, classification, GPS time, colour) written over it (flag bits kept), and the
    /// column values appended as f32.
    fn copied_records(
        &self,
        cloud: &Cloud,
        rows: &[(usize, [f32; 3])],
        values: &[f32],
    ) -> Result<Vec<u8>> {
        let Some(src) = cloud.records.as_ref() else {
            return Ok(Vec::new());
        };
        let nc = self.names.len();
        let t = *self
            .writer
            .0
            .as_ref()
            .map_or(&Default::default(), |w| w.header().transforms());
        let t = [t.x, t.y, t.z];
        // A waveform format written as its format without waveform: the 29-byte packet
        // description follows the base record (LAS 1.4 R15, Tables 11, 12, 16, 17), so it is
        // cut out and everything else kept.
        let base = BASE_LEN[self.fmt_no as usize] as usize;
        let cut = if src.format != self.fmt_no { 29 } else { 0 };
        let layout = Layout::new(self.fmt_no, src.record_len - cut);
        let mut out = Vec::with_capacity(rows.len() * (src.record_len - cut + 4 * nc));
        for (r, &(i, p)) in rows.iter().enumerate() {
            let start = out.len();
            let record = src.record(i);
            out.extend_from_slice(&record[..base]);
            out.extend_from_slice(&record[base + cut..]);
            let rec = &mut out[start..];
            for k in 0..3 {
                let g = self.origin[k] + p[k] as f64;
                let stored = ((g - t[k].offset) / t[k].scale).round();
                if !(stored >= i32::MIN as f64 && stored <= i32::MAX as f64) {
                    return Err(Error::file(
                        &self.path,
                        "a coordinate does not fit the LAS integer range at this scale and offset",
                        "choose a larger scale or an offset near the points",
                    ));
                }
                rec[4 * k..4 * k + 4].copy_from_slice(&(stored as i32).to_le_bytes());
            }
            if let Some(v) = &cloud.intensity {
                let v = v[i].round().clamp(0.0, 65535.0) as u16;
                rec[12..14].copy_from_slice(&v.to_le_bytes());
            }
            if let Some(v) = &cloud.return_number {
                if layout.extended {
                    rec[14] = (rec[14] & 0xF0) | (v[i].min(15) & 0x0F);
                } else {
                    rec[14] = (rec[14] & 0xF8) | (v[i].min(7) & 0x07);
                }
            }
            if let Some(v) = &cloud.classification {
                if layout.extended {
                    rec[16] = v[i];
                } else if v[i] <= 31 {
                    rec[15] = (rec[15] & 0xE0) | v[i];
                }
            }
            if let (Some(v), Some(o)) = (&cloud.gps_time, layout.gps) {
                rec[o..o + 8].copy_from_slice(&v[i].to_le_bytes());
            }
            if let (Some(v), Some(o)) = (&cloud.color, layout.rgb) {
                for (k, c) in v[i].iter().enumerate() {
                    rec[o + 2 * k..o + 2 * k + 2].copy_from_slice(&c.to_le_bytes());
                }
            }
            for v in &values[r * nc..(r + 1) * nc] {
                out.extend_from_slice(&v.to_le_bytes());
            }
        }
        Ok(out)
    }

    /// Closes the point data, writes the column ranges into the Extra Bytes record and, for
    /// formats 6–10, zeroes the legacy counts; returns the complete, synced temporary file.
    pub fn finish(self) -> Result<super::Finished> {
        let path = &self.path;
        let inner = self.writer.into_inner(path)?;
        let mut file = inner.into_inner().map_err(|e| Error::io(path, e.error()))?;
        if self.fmt_no >= 6 {
            // LAS 1.4 R15, Table 3: the legacy point count (byte 107, u32) and legacy counts
            // by return (bytes 111–130, 5 × u32) must be zero for point formats 6–10; the las
            // crate fills them in, so clear them here.
            file.seek(SeekFrom::Start(107))
                .and_then(|_| file.write_all(&[0u8; 24]))
                .map_err(|e| Error::io(path, &e))?;
        }
        if !self.names.is_empty() || !self.source_desc.is_empty() {
            let vlr = extra_bytes_vlr(&self.source_desc, &self.names, &self.ranges);
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

/// A `las::Writer` that never panics. The `las` writer closes itself when dropped and panics
/// when that fails (a full disk: "Error when dropping the writer"); this wrapper closes it
/// explicitly, and after a failed close tries once more and, if that fails too, forgets the
/// writer instead of dropping it (the temporary file is removed by its own guard).
struct NoPanicWriter<W: Write + Seek + Send + Sync + std::fmt::Debug + 'static>(
    Option<las::Writer<W>>,
);

impl<W: Write + Seek + Send + Sync + std::fmt::Debug + 'static> NoPanicWriter<W> {
    /// The writer; present until [`NoPanicWriter::into_inner`].
    fn get(&mut self) -> &mut las::Writer<W> {
        self.0
            .as_mut()
            .expect("the LAS writer is present until into_inner")
    }

    /// Closes the writer (header counts, bounds) and gives back the sink; every failure is an
    /// error naming `path`.
    fn into_inner(mut self, path: &Path) -> Result<W> {
        let mut w = self
            .0
            .take()
            .expect("the LAS writer is present until into_inner");
        if let Err(e) = w.close() {
            if w.close().is_err() {
                std::mem::forget(w);
            }
            return Err(las_err(path, e));
        }
        w.into_inner().map_err(|e| las_err(path, e))
    }
}

impl<W: Write + Seek + Send + Sync + std::fmt::Debug + 'static> Drop for NoPanicWriter<W> {
    fn drop(&mut self) {
        if let Some(mut w) = self.0.take()
            && w.close().is_err()
            && w.close().is_err()
        {
            std::mem::forget(w);
        }
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

/// The point format a writer uses for `f`: waveform formats without their waveform.
fn without_waveform(f: u8) -> u8 {
    match f {
        4 => 1,
        5 => 3,
        9 => 6,
        10 => 8,
        f => f,
    }
}

/// The source record of point `i` of `cloud` decoded by the `las` crate, when the cloud
/// carries its LAS records (its coordinates are replaced by the caller).
fn source_point(cloud: &Cloud, i: usize) -> Option<las::Point> {
    let r = cloud.records.as_ref()?;
    if r.len() != cloud.len() {
        return None;
    }
    let mut format = las::point::Format::new(r.format).ok()?;
    format.extra_bytes = r.extra_bytes as u16;
    let raw = las::raw::Point::read_from(r.record(i), &format).ok()?;
    let mut p = las::Point::new(raw, &Default::default());
    if !format.is_extended {
        // Formats 0–5 mark overlap with class 12 in the 5-bit class field (LAS 1.4 R15,
        // Table 8); the `las` crate tests 4 bits and so also takes class 28 for overlap.
        let class = r.record(i)[15] & 0x1F;
        p.is_overlap = class == 12;
        if class != 12 {
            p.classification = las::point::Classification::new(class).unwrap_or(p.classification);
        }
    }
    Some(p)
}

/// A point for a record of `format` at global `g`: every field of the source record when
/// `attrs` carries LAS records ([`crate::cloud::SourceRecords`]), the cloud's columns over it
/// (intensity, classification, return number, colour, GPS time), then the source's Extra Bytes
/// (`source_extra` bytes: zeros when there is no source record) and `values` as f32.
fn las_point(
    attrs: Option<(&Cloud, usize)>,
    g: [f64; 3],
    values: &[f32],
    format: &las::point::Format,
    source_extra: usize,
) -> las::Point {
    let cloud = attrs.map(|(c, _)| c);
    let i = attrs.map_or(0, |(_, i)| i);
    let source = attrs.and_then(|(c, i)| source_point(c, i));
    let max_ret = if format.is_extended { 15 } else { 7 };
    let mut p = source.unwrap_or(las::Point {
        return_number: 1,
        number_of_returns: 1,
        classification: las::point::Classification::CreatedNeverClassified,
        ..Default::default()
    });
    let mut extra = Vec::with_capacity(source_extra + values.len() * 4);
    let kept = p.extra_bytes.len().min(source_extra);
    extra.extend_from_slice(&p.extra_bytes[..kept]);
    extra.resize(source_extra, 0);
    for v in values {
        extra.extend_from_slice(&v.to_le_bytes());
    }
    p.extra_bytes = extra;
    p.x = g[0];
    p.y = g[1];
    p.z = g[2];
    if let Some(v) = cloud.and_then(|c| c.intensity.as_ref()) {
        p.intensity = v[i].round().clamp(0.0, 65535.0) as u16;
    }
    if let Some(c) = cloud.and_then(|c| c.classification.as_ref()) {
        let class = c[i];
        p.classification = las::point::Classification::new(class)
            .unwrap_or(las::point::Classification::CreatedNeverClassified);
        p.is_overlap |= class == 12;
    }
    if let Some(r) = cloud.and_then(|c| c.return_number.as_ref()) {
        p.return_number = r[i];
        if cloud.is_some_and(|c| c.records.is_none()) {
            p.number_of_returns = r[i];
        }
    }
    p.return_number = p.return_number.min(max_ret);
    p.number_of_returns = p.number_of_returns.clamp(p.return_number, max_ret);
    if !format.is_extended {
        p.scanner_channel = 0;
        if u8::from(p.classification) > 31 {
            p.classification = las::point::Classification::CreatedNeverClassified;
        }
    }
    p.gps_time = format.has_gps_time.then(|| {
        cloud
            .and_then(|c| c.gps_time.as_ref())
            .map(|v| v[i])
            .or(p.gps_time)
            .unwrap_or(0.0)
    });
    p.color = format.has_color.then(|| {
        cloud
            .and_then(|c| c.color.as_ref())
            .map(|c| {
                let [red, green, blue] = c[i];
                Color { red, green, blue }
            })
            .or(p.color)
            .unwrap_or_default()
    });
    p.nir = format.has_nir.then(|| p.nir.unwrap_or(0));
    // Waveform packets point into data the writer does not copy: formats with waveforms are
    // written without them (4 → 1, 5 → 3, 9 → 6, 10 → 8).
    p.waveform = None;
    p
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Cursor;

    /// A sink that takes `left` bytes and then fails as a full disk does.
    #[derive(Debug)]
    struct FullAfter {
        inner: Cursor<Vec<u8>>,
        left: usize,
    }

    impl Write for FullAfter {
        fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
            if self.left == 0 && !buf.is_empty() {
                return Err(std::io::Error::from(std::io::ErrorKind::StorageFull));
            }
            let n = buf.len().min(self.left);
            self.left -= n;
            self.inner.write(&buf[..n])
        }
        fn flush(&mut self) -> std::io::Result<()> {
            Ok(())
        }
    }

    impl Seek for FullAfter {
        fn seek(&mut self, pos: SeekFrom) -> std::io::Result<u64> {
            self.inner.seek(pos)
        }
    }

    /// Writes every point of `cloud` with `columns` through a [`NoPanicWriter`] over `sink`.
    fn write_points_to<W: Write + Seek + Send + Sync + std::fmt::Debug + 'static>(
        sink: W,
        header: las::Header,
        path: &Path,
        cloud: &Cloud,
        columns: &[Column<'_>],
        format: &las::point::Format,
    ) -> Result<W> {
        let w = las::Writer::new(sink, header).map_err(|e| las_err(path, e))?;
        let mut w = NoPanicWriter(Some(w));
        let points = (0..cloud.len()).map(|i| {
            let v: Vec<f32> = columns.iter().map(|c| c.values[i]).collect();
            let g: [f64; 3] =
                std::array::from_fn(|k| cloud.origin[k] + cloud.positions[i][k] as f64);
            las_point(Some((cloud, i)), g, &v, format, 0)
        });
        let pd = PointDataBuilder::new()
            .for_header(w.get().header())
            .build_from_points(points)
            .map_err(|e| las_err(path, e))?;
        w.get().write_points(&pd).map_err(|e| las_err(path, e))?;
        w.into_inner(path)
    }

    /// The report's "Error when dropping the writer" panic on a full disk: for LAS and LAZ and
    /// a disk filling up at any of several points, the writer gives the one-line error.
    #[test]
    fn a_full_disk_is_an_error_not_a_panic() {
        let cloud = Cloud::new(
            [100.0, 200.0, 10.0],
            (0..5000)
                .map(|i| [(i % 70) as f32 * 0.1, (i / 70) as f32 * 0.1, 0.5])
                .collect(),
        );
        let vals: Vec<f32> = (0..5000).map(|i| i as f32).collect();
        let columns = [Column::new("a", &vals)];
        let path = Path::new("out.laz");
        for compressed in [false, true] {
            let mut format = las::point::Format::new(6).unwrap();
            format.extra_bytes = 4;
            format.is_compressed = compressed;
            let header = || {
                let mut b = Builder::default();
                b.version = Version::new(1, 4);
                b.point_format = format;
                b.vlrs
                    .push(extra_bytes_vlr(&[], &["a".to_string()], &Ranges::new(1)));
                b.into_header().unwrap()
            };
            // Enough room: written whole.
            let big = FullAfter {
                inner: Cursor::new(Vec::new()),
                left: usize::MAX,
            };
            let done = write_points_to(big, header(), path, &cloud, &columns, &format).unwrap();
            let total = done.inner.get_ref().len();
            assert!(total > 1000);
            for left in [0, 10, 300, 700, total / 3, total - 1] {
                let sink = FullAfter {
                    inner: Cursor::new(Vec::new()),
                    left,
                };
                let err = write_points_to(sink, header(), path, &cloud, &columns, &format)
                    .expect_err("a full disk must fail");
                let msg = err.to_string();
                assert!(
                    msg.starts_with("out.laz: ") && !msg.contains('\n'),
                    "{left}: {msg}"
                );
                assert_eq!(err.kind(), crate::error::Kind::Io, "{left}: {msg}");
            }
        }
    }
}

/// What [`move_las`] wrote.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct MovedLas {
    /// Points written.
    pub points: u64,
    /// Scale factors of the output (the input's).
    pub scale: [f64; 3],
    /// Offsets of the output (chosen near the moved points).
    pub offset: [f64; 3],
}

/// Largest stored integer used for a coordinate; one step short of the i32 limits.
const MAX_STORED: f64 = (i32::MAX - 1) as f64;

/// Offsets for points within `lo..=hi` stored at `scale`: the centre rounded to whole units.
/// Refuses, naming `output`, a span the 32-bit integers cannot hold at that scale.
fn offsets_for(output: &Path, lo: [f64; 3], hi: [f64; 3], scale: [f64; 3]) -> Result<[f64; 3]> {
    let mut offset = [0.0; 3];
    for k in 0..3 {
        let o = ((lo[k] + hi[k]) * 0.5).round();
        let reach = (hi[k] - o).max(o - lo[k]) / scale[k];
        // NaN fails too.
        if reach.is_nan() || reach > MAX_STORED {
            return Err(Error::file(
                output,
                format!(
                    "the moved points span {} file units along {}, more than 32-bit integers hold at the input's scale {} (at most {} units)",
                    super::compact(hi[k] - lo[k]),
                    ["x", "y", "z"][k],
                    scale[k],
                    super::compact(2.0 * MAX_STORED * scale[k])
                ),
                "write a PLY output instead, or check the transform (its translation may be in other units)",
            ));
        }
        offset[k] = o;
    }
    Ok(offset)
}

/// Writes the LAS/LAZ file `input` moved by `tf` to `output` (LAZ when it ends in `.laz`),
/// record by record: coordinates are decoded to f64 (`offset + scale × stored`), moved in
/// f64 and stored again at the input's scale about new offsets (the moved bounds' centre
/// rounded to whole units), so each coordinate is within half a scale step of the exact moved
/// value; every other byte of every record (every field of the point format and the Extra
/// Bytes) is copied unchanged, and so are the header's records (CRS, Extra Bytes
/// descriptions, others), with `extra` added. A span the input's scale cannot hold in 32-bit
/// integers is refused before anything is written.
pub(crate) fn move_las(
    input: &Path,
    output: &Path,
    tf: &crate::geometry::Rigid,
    extra: Option<Vlr>,
) -> Result<MovedLas> {
    use nalgebra::Vector3;
    let moved_bounds = |lo: [f64; 3], hi: [f64; 3]| {
        let mut a = [f64::INFINITY; 3];
        let mut b = [f64::NEG_INFINITY; 3];
        for c in 0..8 {
            let p = Vector3::new(
                if c & 1 == 0 { lo[0] } else { hi[0] },
                if c & 2 == 0 { lo[1] } else { hi[1] },
                if c & 4 == 0 { lo[2] } else { hi[2] },
            );
            let q = tf.apply(&p);
            for k in 0..3 {
                a[k] = a[k].min(q[k]);
                b[k] = b[k].max(q[k]);
            }
        }
        (a, b)
    };
    let mut r = LasReader::open(input)?;
    let header = r.reader.header().clone();
    let t_in = r.transforms;
    let scale = [t_in[0].scale, t_in[1].scale, t_in[2].scale];
    // Bounds of the input: the header's when usable, else a first pass over the points.
    let (lo, hi) = if r.header_origin_ok {
        (r.bounds.min, r.bounds.max)
    } else {
        let mut first = LasReader::open(input)?;
        let mut lo = [f64::INFINITY; 3];
        let mut hi = [f64::NEG_INFINITY; 3];
        let mut c = first.empty_cloud(0);
        loop {
            c.positions.clear();
            c.intensity.as_mut().map(Vec::clear);
            c.classification.as_mut().map(Vec::clear);
            c.return_number.as_mut().map(Vec::clear);
            c.color.as_mut().map(Vec::clear);
            c.gps_time.as_mut().map(Vec::clear);
            if first.read_into(&mut c, 1 << 16)? == 0 {
                break;
            }
            for i in 0..c.len() {
                let g = c.global(i);
                for k in 0..3 {
                    lo[k] = lo[k].min(g[k]);
                    hi[k] = hi[k].max(g[k]);
                }
            }
        }
        if lo[0] > hi[0] {
            lo = [0.0; 3];
            hi = [0.0; 3];
        }
        (lo, hi)
    };
    let (mlo, mhi) = moved_bounds(lo, hi);
    let offset = offsets_for(output, mlo, mhi, scale)?;
    let compress = output
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("laz"));
    let mut builder = Builder::from(header.clone());
    builder.point_format.is_compressed = compress;
    let t = |k: usize| Transform {
        scale: scale[k],
        offset: offset[k],
    };
    builder.transforms = Vector {
        x: t(0),
        y: t(1),
        z: t(2),
    };
    builder.generating_software = "equiscan".to_string();
    builder.vlrs.retain(|v| !v.user_id.starts_with("laszip"));
    builder.vlrs.extend(extra);
    let out_header = builder.into_header().map_err(|e| las_err(output, e))?;
    let out_format = *out_header.point_format();
    let out_transforms = *out_header.transforms();
    let mut temp = super::TempFile::create(output)?;
    let file = temp
        .writer()
        .get_ref()
        .try_clone()
        .map_err(|e| Error::io(output, &e))?;
    let writer = las::Writer::new(BufWriter::with_capacity(1 << 20, file), out_header)
        .map_err(|e| las_err(output, e))?;
    let mut writer = NoPanicWriter(Some(writer));
    let record_len = header.point_format().len() as usize;
    // Byte offset of the waveform's X(t) in formats 4, 5, 9, 10 (LAS 1.4 R15, Tables 11, 12,
    // 16, 17: after the packet index u8, offset u64, size u32 and location f32).
    let waveform_direction = match r.layout_format {
        4 => Some(45),
        5 => Some(51),
        9 => Some(47),
        10 => Some(55),
        _ => None,
    };
    let mut points = 0u64;
    while r.remaining() > 0 {
        let want = r.natural_chunk().min(r.remaining());
        let (reader, pd) = (&mut r.reader, &mut r.pd);
        let compressed = r.compressed;
        let got = guard(input, compressed, || {
            reader.fill_points(want, pd).map_err(|e| {
                if compressed {
                    laz_data_err(input, e)
                } else {
                    las_err(input, e)
                }
            })
        })?;
        if got == 0 {
            return Err(Error::file(
                input,
                format!(
                    "the point data ends after {} of {} points (truncated)",
                    r.done, r.n
                ),
                "copy or export the file again",
            ));
        }
        r.done += got;
        let mut bytes = r.pd.raw_bytes().to_vec();
        for rec in bytes.chunks_exact_mut(record_len) {
            let p = Vector3::from_fn(|k, _| {
                let v = i32::from_le_bytes(rec[4 * k..4 * k + 4].try_into().unwrap_or([0; 4]));
                t_in[k].offset + t_in[k].scale * v as f64
            });
            let q = tf.apply(&p);
            for k in 0..3 {
                let stored = ((q[k] - offset[k]) / scale[k]).round();
                if stored.is_nan() || stored.abs() > MAX_STORED {
                    return Err(Error::file(
                        output,
                        format!(
                            "point {} moves to {} along {}, outside what 32-bit integers hold at scale {} about offset {} (the input's header bounds do not hold its points)",
                            points,
                            super::compact(q[k]),
                            ["x", "y", "z"][k],
                            scale[k],
                            offset[k]
                        ),
                        "repair the input's header bounds, or write a PLY output instead",
                    ));
                }
                rec[4 * k..4 * k + 4].copy_from_slice(&(stored as i32).to_le_bytes());
            }
            if let Some(o) = waveform_direction {
                // The waveform's parametric line direction (X(t), Y(t), Z(t)) turns with
                // the points.
                let d = Vector3::from_fn(|k, _| {
                    f32::from_le_bytes(rec[o + 4 * k..o + 4 * k + 4].try_into().unwrap_or([0; 4]))
                        as f64
                });
                let d = tf.rotate(&d);
                for k in 0..3 {
                    rec[o + 4 * k..o + 4 * k + 4].copy_from_slice(&(d[k] as f32).to_le_bytes());
                }
            }
            points += 1;
        }
        let pd = PointDataBuilder::new()
            .with_format(out_format)
            .with_transforms(out_transforms)
            .build_from_bytes(bytes)
            .map_err(|e| las_err(output, e))?;
        writer
            .get()
            .write_points(&pd)
            .map_err(|e| las_err(output, e))?;
    }
    let mut file = writer
        .into_inner(output)?
        .into_inner()
        .map_err(|e| Error::io(output, e.error()))?;
    if out_format.is_extended {
        // Formats 6–10: legacy counts zero (LAS 1.4 R15, Table 3), as `LasRowWriter::finish`.
        file.seek(SeekFrom::Start(107))
            .and_then(|_| file.write_all(&[0u8; 24]))
            .and_then(|_| file.seek(SeekFrom::End(0)).map(|_| ()))
            .map_err(|e| Error::io(output, &e))?;
    }
    drop(file);
    temp.finish()?.commit()?;
    Ok(MovedLas {
        points,
        scale,
        offset,
    })
}
