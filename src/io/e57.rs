//! E57 (ASTM E2807, "Standard Specification for 3D Imaging Data Exchange"): reading through
//! the `e57` crate, every scan with its pose.
//!
//! An E57 file holds one or more scans ("data3D" entries), each with its own points and a
//! pose: a unit quaternion `w x y z` and a translation that carry the scan's own coordinates
//! into the file's frame (`p_file = R p_scan + t`; the scanner stands at `t`). Points are
//! Cartesian, spherical (range, azimuth, elevation in radians, converted as
//! `x = r cos(el) cos(az), y = r cos(el) sin(az), z = r sin(el)`) or both; the standard marks
//! points whose coordinates are not meaningful with an invalid state (1 = direction only,
//! 2 = invalid), and such points are dropped here.
//!
//! Reading gives every selected scan in the file's frame (pose applied, f64 until the local
//! f32 offsets are formed), one after another in file order. `FILE.e57#NAME` or
//! `FILE.e57#INDEX` (from 0, in file order) selects one scan; without a selection every scan
//! is read. Intensity is kept as stored; colour as stored when the file gives it as integers of
//! at most 16 bits (8-bit colour stays 0..=255, as for LAS), else scaled from the file's colour
//! limits into 0..=65535. A scan without intensity or colour in a file where another scan has
//! it gets 0. The file's `coordinateMetadata` (a WKT string by the standard) is the CRS; each
//! scan's position becomes [`FileInfo::viewpoint`] when one scan is read.
//!
//! The points of the selected scans are decoded when the first chunk is asked for and then
//! handed out from memory ([`super::PointSource`] reads E57 this way).

use std::fs::File;
use std::io::{BufReader, Read};
use std::path::{Path, PathBuf};

use e57::{CartesianCoordinate, PointCloud, RecordDataType, RecordName};
use nalgebra::{Quaternion, UnitQuaternion, Vector3};

use crate::cloud::Cloud;
use crate::error::{Error, Result};

use super::{FileInfo, ScanInfo, open_input};

/// The first 8 bytes of every E57 file (ASTM E2807, file header).
pub(crate) const SIGNATURE: &[u8; 8] = b"ASTM-E57";

fn bad(path: &Path, what: impl Into<String>) -> Error {
    Error::file(
        path,
        what,
        "check that the file is a complete E57 file or export it again",
    )
}

/// One line from an `e57` crate error: its text lowercased at the start, line breaks removed.
fn e57_err(path: &Path, e: e57::Error) -> Error {
    let mut text = e.to_string().replace(['\n', '\r'], " ");
    if let Some(f) = text.get(..1) {
        text = f.to_lowercase() + &text[1..];
    }
    let io = std::error::Error::source(&e)
        .and_then(|s| s.downcast_ref::<std::io::Error>())
        .filter(|io| io.kind() != std::io::ErrorKind::UnexpectedEof);
    match io {
        Some(io) if io.to_string().contains("invalid checksum") => {
            // "detected invalid checksum (…) for page N": name the page and the check.
            let page = io
                .to_string()
                .rsplit_once("for page ")
                .map(|(_, p)| p.trim().to_string());
            bad(
                path,
                format!(
                    "page {} of the file is damaged (its CRC-32C checksum does not match the data)",
                    page.unwrap_or_else(|| "?".into())
                ),
            )
        }
        Some(io) => Error::io(path, io),
        None => bad(path, text),
    }
}

/// Runs a call into the E57 decoder; a panic inside it becomes the one-line error of a corrupt
/// file (the last resort: the header is checked first).
fn guard<T>(path: &Path, f: impl FnOnce() -> Result<T>) -> Result<T> {
    super::quiet_panics::run(f)
        .unwrap_or_else(|| Err(bad(path, "corrupt E57 data (the decoder gave up on it)")))
}

/// Checks the 48-byte file header against the file before the decoder sees it (ASTM E2807
/// file header, from memory: signature `[0, 8)`, major `[8, 12)`, minor `[12, 16)`, physical
/// length `[16, 24)`, XML offset `[24, 32)`, XML length `[32, 40)`, page size `[40, 48)`; all
/// little-endian).
fn check_header(path: &Path, file: &mut File, len: u64) -> Result<()> {
    let mut b = [0u8; 48];
    let mut got = 0;
    while got < b.len() {
        match file.read(&mut b[got..]) {
            Ok(0) => break,
            Ok(k) => got += k,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => return Err(Error::io(path, &e)),
        }
    }
    if got < 48 {
        return Err(bad(
            path,
            format!("the E57 file header is truncated ({got} of 48 bytes)"),
        ));
    }
    let u64_at = |o: usize| u64::from_le_bytes(b[o..o + 8].try_into().unwrap_or([0; 8]));
    let major = u32::from_le_bytes([b[8], b[9], b[10], b[11]]);
    if major != 1 {
        return Err(Error::file(
            path,
            format!("E57 version {major} is not read here (version 1 is)"),
            "export the file as E57 version 1.0",
        ));
    }
    let physical = u64_at(16);
    if physical != len {
        return Err(bad(
            path,
            format!(
                "the E57 header declares {physical} bytes but the file has {len} ({})",
                if physical > len {
                    "truncated"
                } else {
                    "extra bytes at the end"
                }
            ),
        ));
    }
    let (xml_at, xml_len) = (u64_at(24), u64_at(32));
    if xml_at.saturating_add(xml_len) > len || xml_len == 0 {
        return Err(bad(
            path,
            format!(
                "the E57 XML section ({xml_len} bytes at byte {xml_at}) is missing or lies outside the {len}-byte file"
            ),
        ));
    }
    Ok(())
}

/// Splits `a.e57#NAME` into the file and the scan selection. A path that exists as given has
/// no selection (a `#` may be part of a file name); otherwise the text after the last `#` is the
/// selection when the part before it exists.
pub fn split_scan(path: &Path) -> (PathBuf, Option<String>) {
    if path.exists() {
        return (path.to_path_buf(), None);
    }
    let text = path.to_string_lossy();
    if let Some((file, sel)) = text.rsplit_once('#') {
        let file = PathBuf::from(file);
        if file.exists() {
            return (file, Some(sel.to_string()));
        }
    }
    (path.to_path_buf(), None)
}

/// The selected scans' indices: `sel` is a scan name (exact), else an index from 0.
fn select(path: &Path, clouds: &[PointCloud], sel: Option<&str>) -> Result<Vec<usize>> {
    let Some(sel) = sel else {
        return Ok((0..clouds.len()).collect());
    };
    if let Some(i) = clouds.iter().position(|c| c.name.as_deref() == Some(sel)) {
        return Ok(vec![i]);
    }
    if let Ok(i) = sel.trim().parse::<usize>()
        && i < clouds.len()
    {
        return Ok(vec![i]);
    }
    let names: Vec<String> = clouds
        .iter()
        .enumerate()
        .map(|(i, c)| format!("{i} {:?}", c.name.as_deref().unwrap_or("")))
        .collect();
    Err(Error::file(
        path,
        format!(
            "has no scan named or numbered {sel:?} (its scans: {})",
            names.join(", ")
        ),
        format!(
            "give a scan's name or its index from 0 to {} after #",
            clouds.len().saturating_sub(1)
        ),
    ))
}

/// The scan's pose as a rotation and translation; the identity when the file gives none.
/// The quaternion is normalised; a zero or non-finite one is refused.
fn pose(path: &Path, index: usize, pc: &PointCloud) -> Result<(UnitQuaternion<f64>, Vector3<f64>)> {
    let Some(t) = &pc.transform else {
        return Ok((UnitQuaternion::identity(), Vector3::zeros()));
    };
    let q = Quaternion::new(t.rotation.w, t.rotation.x, t.rotation.y, t.rotation.z);
    let tr = Vector3::new(t.translation.x, t.translation.y, t.translation.z);
    let n = q.norm();
    if !(n.is_finite() && n > 1e-9 && tr.iter().all(|v| v.is_finite())) {
        return Err(bad(
            path,
            format!("scan {index} has a pose that is not a rotation and translation"),
        ));
    }
    Ok((UnitQuaternion::from_quaternion(q), tr))
}

/// A row-major 4×4 of a rotation and translation.
fn rows(r: &UnitQuaternion<f64>, t: &Vector3<f64>) -> [[f64; 4]; 4] {
    let m = r.to_rotation_matrix();
    let m = m.matrix();
    [
        [m[(0, 0)], m[(0, 1)], m[(0, 2)], t.x],
        [m[(1, 0)], m[(1, 1)], m[(1, 2)], t.y],
        [m[(2, 0)], m[(2, 1)], m[(2, 2)], t.z],
        [0.0, 0.0, 0.0, 1.0],
    ]
}

fn has(pc: &PointCloud, name: RecordName) -> bool {
    pc.prototype.iter().any(|r| r.name == name)
}

/// True when the scan's red channel is an integer of at most 16 bits (kept as stored).
fn integer_colour(pc: &PointCloud) -> bool {
    pc.prototype.iter().any(|r| {
        r.name == RecordName::ColorRed
            && matches!(r.data_type, RecordDataType::Integer { min, max } if min >= 0 && max <= 65535)
    })
}

/// The record names in a scan's prototype, as the standard spells them.
fn field_names(pc: &PointCloud) -> Vec<String> {
    pc.prototype
        .iter()
        .map(|r| {
            let s = format!("{:?}", r.name);
            // CartesianX -> cartesianX, the standard's spelling.
            match s.get(..1) {
                Some(f) => f.to_lowercase() + &s[1..],
                None => s,
            }
        })
        .collect()
}

/// An E57 file opened for reading: header and XML read, scans selected; points are decoded
/// on the first [`E57Reader::read_into`].
pub(crate) struct E57Reader {
    path: PathBuf,
    reader: e57::E57Reader<BufReader<File>>,
    clouds: Vec<PointCloud>,
    selected: Vec<usize>,
    poses: Vec<(UnitQuaternion<f64>, Vector3<f64>)>,
    origin: [f64; 3],
    decoded: Option<Cloud>,
    handed: usize,
    info: FileInfo,
}

impl E57Reader {
    /// Opens `file` (the caller has seen the signature); `shown` is the path as the caller
    /// named it (with its `#` selection), used in messages and [`FileInfo::path`].
    pub(crate) fn open(shown: &Path, file: &Path, sel: Option<&str>) -> Result<E57Reader> {
        let (mut f, len) = open_input(file)?;
        check_header(shown, &mut f, len)?;
        drop(f);
        let reader = guard(shown, || {
            let f = File::open(file).map_err(|e| Error::io(shown, &e))?;
            // The default 8 KiB buffer: the page reader seeks often, and a seek empties the buffer.
            e57::E57Reader::new(BufReader::new(f)).map_err(|e| e57_err(shown, e))
        })?;
        let clouds = reader.pointclouds();
        if clouds.is_empty() {
            return Err(Error::file(
                shown,
                "the E57 file holds no scan (no data3D entry)",
                "export the scans again with their points",
            ));
        }
        let selected = select(shown, &clouds, sel)?;
        let h = reader.header();
        let mut info = FileInfo::new(shown, "E57", format!("{}.{}", h.major, h.minor));
        info.crs = reader
            .coordinate_metadata()
            .map(|s| s.trim().to_string())
            .filter(|s| !s.is_empty());
        let mut poses = Vec::new();
        for (i, pc) in clouds.iter().enumerate() {
            let (r, t) = pose(shown, i, pc)?;
            let is_selected = selected.contains(&i);
            if is_selected {
                poses.push((r, t));
                info.point_count += pc.records;
            }
            info.scans.push(ScanInfo {
                index: i,
                name: pc.name.clone().unwrap_or_default(),
                points: pc.records,
                pose: rows(&r, &t),
                has_pose: pc.transform.is_some(),
                scanner_position: [t.x, t.y, t.z],
                coordinates: match (
                    has(pc, RecordName::CartesianX),
                    has(pc, RecordName::SphericalRange),
                ) {
                    (true, true) => "cartesian+spherical",
                    (true, false) => "cartesian",
                    (false, true) => "spherical",
                    (false, false) => "none",
                }
                .to_string(),
                fields: field_names(pc),
                selected: is_selected,
            });
        }
        let sel_clouds: Vec<&PointCloud> = selected.iter().map(|&i| &clouds[i]).collect();
        if sel_clouds
            .iter()
            .any(|pc| !has(pc, RecordName::CartesianX) && !has(pc, RecordName::SphericalRange))
        {
            return Err(bad(
                shown,
                "a selected scan has neither Cartesian nor spherical coordinates",
            ));
        }
        if sel_clouds.iter().any(|pc| pc.has_intensity()) {
            info.attributes.push("intensity".into());
        }
        if sel_clouds.iter().any(|pc| pc.has_color()) {
            info.attributes.push("color".into());
        }
        let mut other: Vec<String> = Vec::new();
        for pc in &sel_clouds {
            for f in field_names(pc) {
                let kept = f.starts_with("cartesian")
                    || f.starts_with("spherical")
                    || f.starts_with("color")
                    || f == "intensity"
                    || f == "isIntensityInvalid"
                    || f == "isColorInvalid";
                if !kept && !other.contains(&f) {
                    other.push(f);
                }
            }
        }
        info.other_fields = other;
        if selected.len() == 1 {
            info.viewpoint = Some(info.scans[selected[0]].scanner_position);
        }
        // The local frame's zero: the first selected scanner position rounded to whole units;
        // the scans of one file lie within a few hundred metres of their scanners.
        let origin = poses
            .first()
            .map(|(_, t)| [t.x.round(), t.y.round(), t.z.round()])
            .unwrap_or([0.0; 3]);
        Ok(E57Reader {
            path: shown.to_path_buf(),
            reader,
            clouds,
            selected,
            poses,
            origin,
            decoded: None,
            handed: 0,
            info,
        })
    }

    /// The header summary.
    pub(crate) fn info(&self) -> &FileInfo {
        &self.info
    }

    /// Points not handed out yet: before decoding, the declared count (invalid points
    /// included); after, the valid points left.
    pub(crate) fn remaining(&self) -> u64 {
        match &self.decoded {
            Some(c) => (c.len() - self.handed) as u64,
            None => self.info.point_count,
        }
    }

    /// An empty cloud with this file's attributes.
    pub(crate) fn empty_cloud(&self, reserve: u64) -> Cloud {
        let cap = reserve.min(self.remaining()).min(1 << 20) as usize;
        let mut c = Cloud::new(self.origin, Vec::with_capacity(cap));
        if self.info.attributes.iter().any(|a| a == "intensity") {
            c.intensity = Some(Vec::with_capacity(cap));
        }
        if self.info.attributes.iter().any(|a| a == "color") {
            c.color = Some(Vec::with_capacity(cap));
        }
        c
    }

    /// Decodes every selected scan into one cloud about the origin.
    fn decode(&mut self) -> Result<Cloud> {
        let path = self.path.clone();
        let mut out = self.empty_cloud(0);
        for (k, &i) in self.selected.clone().iter().enumerate() {
            let pc = self.clouds[i].clone();
            let (r, t) = self.poses[k];
            let raw_colour = integer_colour(&pc);
            let origin = Vector3::from(self.origin);
            let shift = t - origin;
            let reader = &mut self.reader;
            guard(&path, || {
                let mut it = reader
                    .pointcloud_simple(&pc)
                    .map_err(|e| e57_err(&path, e))?;
                it.apply_pose(false);
                it.spherical_to_cartesian(true);
                it.intensity_to_color(false);
                it.normalize_intensity(false);
                it.normalize_color(!raw_colour);
                for (n, p) in it.enumerate() {
                    let p = p.map_err(|e| e57_err(&path, e))?;
                    let CartesianCoordinate::Valid { x, y, z } = p.cartesian else {
                        continue;
                    };
                    let local = r * Vector3::new(x, y, z) + shift;
                    if !local.iter().all(|v| v.is_finite()) {
                        return Err(Error::file(
                            &path,
                            format!("point {n} of scan {i} has a non-finite coordinate"),
                            "drop or repair such points",
                        ));
                    }
                    out.positions
                        .push([local.x as f32, local.y as f32, local.z as f32]);
                    if let Some(v) = out.intensity.as_mut() {
                        v.push(p.intensity.filter(|v| v.is_finite()).unwrap_or(0.0));
                    }
                    if let Some(v) = out.color.as_mut() {
                        let scale = if raw_colour { 1.0 } else { 65535.0 };
                        let c = p.color.as_ref().map_or([0; 3], |c| {
                            [c.red, c.green, c.blue]
                                .map(|v| (v * scale).round().clamp(0.0, 65535.0) as u16)
                        });
                        v.push(c);
                    }
                }
                Ok(())
            })?;
        }
        Ok(out)
    }

    /// Appends up to `max` points to `out`; returns how many (0 at the end).
    pub(crate) fn read_into(&mut self, out: &mut Cloud, max: usize) -> Result<usize> {
        if self.decoded.is_none() {
            self.decoded = Some(self.decode()?);
        }
        let Some(all) = &self.decoded else {
            return Ok(0);
        };
        let end = (self.handed + max).min(all.len());
        let range = self.handed..end;
        out.origin = all.origin;
        out.positions
            .extend_from_slice(&all.positions[range.clone()]);
        if let (Some(o), Some(a)) = (out.intensity.as_mut(), all.intensity.as_ref()) {
            o.extend_from_slice(&a[range.clone()]);
        }
        if let (Some(o), Some(a)) = (out.color.as_mut(), all.color.as_ref()) {
            o.extend_from_slice(&a[range.clone()]);
        }
        let n = end - self.handed;
        self.handed = end;
        Ok(n)
    }
}

/// Reads the selected scans of an E57 file into one cloud.
pub(crate) fn read_e57(shown: &Path, file: &Path, sel: Option<&str>) -> Result<(Cloud, FileInfo)> {
    let mut r = E57Reader::open(shown, file, sel)?;
    let cloud = r.decode()?;
    super::check_extent(shown, &cloud)?;
    Ok((cloud, r.info().clone()))
}
