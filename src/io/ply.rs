//! PLY (Polygon File Format) reader and writer, hand-written and columnar.
//!
//! Reading: the header is parsed into elements and properties; the vertex element is decoded
//! per property with precomputed byte offsets from large binary chunks (ascii files are
//! tokenised line by line). Elements other than `vertex` — before or after it, with scalar or
//! list properties — are skipped exactly; `face` lists are read by [`read_ply_mesh`].
//!
//! Writing ([`write_ply`]): binary little-endian, `x y z` as double global coordinates with the
//! cloud's origin in a header comment; see [`write_ply`] for the exactness of the round trip.

use std::fs::File;
use std::io::{BufRead, BufReader, Read, Write};
use std::path::{Path, PathBuf};

use crate::cloud::Cloud;
use crate::error::{Error, Result};

use super::atomic::{put, write_atomic};
use super::{Column, FileInfo, check_columns, open_input};

/// The header comment keyword under which [`write_ply`] records the origin.
const ORIGIN_COMMENT: &str = "equiscan origin";
/// Longest header accepted, bytes.
const MAX_HEADER: usize = 1 << 20;
/// Binary vertices decoded per chunk.
const CHUNK: usize = 1 << 16;

/// A PLY scalar type.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Ty {
    I8,
    U8,
    I16,
    U16,
    I32,
    U32,
    F32,
    F64,
}

impl Ty {
    fn parse(s: &str) -> Option<Ty> {
        Some(match s {
            "char" | "int8" => Ty::I8,
            "uchar" | "uint8" => Ty::U8,
            "short" | "int16" => Ty::I16,
            "ushort" | "uint16" => Ty::U16,
            "int" | "int32" => Ty::I32,
            "uint" | "uint32" => Ty::U32,
            "float" | "float32" => Ty::F32,
            "double" | "float64" => Ty::F64,
            _ => return None,
        })
    }

    fn size(self) -> usize {
        match self {
            Ty::I8 | Ty::U8 => 1,
            Ty::I16 | Ty::U16 => 2,
            Ty::I32 | Ty::U32 | Ty::F32 => 4,
            Ty::F64 => 8,
        }
    }

    fn is_int(self) -> bool {
        !matches!(self, Ty::F32 | Ty::F64)
    }

    /// Decodes one value from the start of `b` (at least `size()` bytes).
    #[inline(always)]
    fn get(self, b: &[u8], big: bool) -> f64 {
        macro_rules! dec {
            ($t:ty, $n:expr) => {{
                let a: [u8; $n] = b[..$n].try_into().unwrap();
                (if big {
                    <$t>::from_be_bytes(a)
                } else {
                    <$t>::from_le_bytes(a)
                }) as f64
            }};
        }
        match self {
            Ty::I8 => b[0] as i8 as f64,
            Ty::U8 => b[0] as f64,
            Ty::I16 => dec!(i16, 2),
            Ty::U16 => dec!(u16, 2),
            Ty::I32 => dec!(i32, 4),
            Ty::U32 => dec!(u32, 4),
            Ty::F32 => dec!(f32, 4),
            Ty::F64 => dec!(f64, 8),
        }
    }

    /// Parses one ascii token as this type, exactly (f32 tokens are parsed as f32).
    fn parse_token(self, t: &str) -> Option<f64> {
        match self {
            Ty::F32 => t.parse::<f32>().ok().map(f64::from),
            Ty::F64 => t.parse::<f64>().ok(),
            _ => t
                .parse::<i64>()
                .ok()
                .map(|v| v as f64)
                .or_else(|| t.parse::<f64>().ok().filter(|v| v.fract() == 0.0)),
        }
    }
}

/// Calls `f(record, value)` for the property at byte `off` of every `stride`-byte record in
/// `buf`, with the type dispatch outside the loop.
#[inline(always)]
fn for_column(
    buf: &[u8],
    stride: usize,
    off: usize,
    ty: Ty,
    big: bool,
    mut f: impl FnMut(usize, f64),
) {
    macro_rules! run {
        ($t:ty, $n:expr) => {
            for (i, rec) in buf.chunks_exact(stride).enumerate() {
                let a: [u8; $n] = rec[off..off + $n].try_into().unwrap();
                let v = if big {
                    <$t>::from_be_bytes(a)
                } else {
                    <$t>::from_le_bytes(a)
                };
                f(i, v as f64);
            }
        };
    }
    match ty {
        Ty::I8 => run!(i8, 1),
        Ty::U8 => run!(u8, 1),
        Ty::I16 => run!(i16, 2),
        Ty::U16 => run!(u16, 2),
        Ty::I32 => run!(i32, 4),
        Ty::U32 => run!(u32, 4),
        Ty::F32 => run!(f32, 4),
        Ty::F64 => run!(f64, 8),
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum PropKind {
    Scalar(Ty),
    List(Ty, Ty),
}

#[derive(Debug, Clone)]
struct Prop {
    name: String,
    kind: PropKind,
}

#[derive(Debug, Clone)]
struct Element {
    name: String,
    count: u64,
    props: Vec<Prop>,
}

impl Element {
    /// Record length when every property is a scalar.
    fn fixed_stride(&self) -> Option<usize> {
        self.props
            .iter()
            .map(|p| match p.kind {
                PropKind::Scalar(t) => Some(t.size()),
                PropKind::List(..) => None,
            })
            .sum()
    }
    fn find(&self, name: &str) -> Option<usize> {
        self.props.iter().position(|p| p.name == name)
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Encoding {
    Ascii,
    Little,
    Big,
}

impl Encoding {
    fn name(self) -> &'static str {
        match self {
            Encoding::Ascii => "ascii",
            Encoding::Little => "binary_little_endian",
            Encoding::Big => "binary_big_endian",
        }
    }
}

struct Header {
    encoding: Encoding,
    version: String,
    elements: Vec<Element>,
    origin: Option<[f64; 3]>,
    /// Bytes before the data.
    len: u64,
    /// Header lines read.
    lines: usize,
}

fn bad(path: &Path, what: impl Into<String>) -> Error {
    Error::file(
        path,
        what,
        "check that the file is a complete PLY file or export it again",
    )
}

fn parse_header(path: &Path, r: &mut impl BufRead) -> Result<Header> {
    let mut len = 0usize;
    let mut line = Vec::new();
    let mut lineno = 0usize;
    let mut encoding = None;
    let mut version = String::new();
    let mut elements: Vec<Element> = Vec::new();
    let mut origin = None;
    loop {
        line.clear();
        let n = r
            .by_ref()
            .take((MAX_HEADER - len) as u64 + 1)
            .read_until(b'\n', &mut line)
            .map_err(|e| Error::io(path, &e))?;
        lineno += 1;
        len += n;
        if n == 0 || !line.ends_with(b"\n") {
            if len > MAX_HEADER {
                return Err(bad(path, "the PLY header is longer than 1 MiB"));
            }
            return Err(bad(
                path,
                "the PLY header ends before end_header (truncated header)",
            ));
        }
        let text = std::str::from_utf8(&line)
            .map_err(|_| bad(path, format!("header line {lineno} is not text")))?
            .trim_end_matches(['\n', '\r']);
        let words: Vec<&str> = text.split_ascii_whitespace().collect();
        if lineno == 1 {
            if text != "ply" {
                return Err(bad(path, "the first line is not \"ply\""));
            }
            continue;
        }
        match words.first().copied() {
            None => {}
            Some("format") => {
                if encoding.is_some() {
                    return Err(bad(
                        path,
                        format!("header line {lineno}: a second format line"),
                    ));
                }
                encoding = Some(match words.get(1).copied() {
                    Some("ascii") => Encoding::Ascii,
                    Some("binary_little_endian") => Encoding::Little,
                    Some("binary_big_endian") => Encoding::Big,
                    other => {
                        return Err(Error::file(
                            path,
                            format!(
                                "header line {lineno}: unknown PLY format {:?}",
                                other.unwrap_or("")
                            ),
                            "use ascii, binary_little_endian or binary_big_endian",
                        ));
                    }
                });
                version = words.get(2).unwrap_or(&"").to_string();
                if !version.starts_with('1') {
                    return Err(Error::file(
                        path,
                        format!("PLY version {version:?} is not read here"),
                        "export the file as PLY 1.0",
                    ));
                }
            }
            Some("comment") => {
                if let Some(rest) = text
                    .trim_start()
                    .strip_prefix("comment")
                    .map(str::trim)
                    .and_then(|t| t.strip_prefix(ORIGIN_COMMENT))
                {
                    let v: Vec<f64> = rest
                        .split_ascii_whitespace()
                        .filter_map(|t| t.parse().ok())
                        .collect();
                    if v.len() == 3 && v.iter().all(|x| x.is_finite()) {
                        origin = Some([v[0], v[1], v[2]]);
                    }
                }
            }
            Some("obj_info") => {}
            Some("element") => {
                let (Some(name), Some(count)) = (words.get(1), words.get(2)) else {
                    return Err(bad(
                        path,
                        format!("header line {lineno}: element needs a name and a count"),
                    ));
                };
                let count = count.parse::<u64>().map_err(|_| {
                    bad(
                        path,
                        format!(
                            "header line {lineno}: element count {count:?} is not a whole number"
                        ),
                    )
                })?;
                if *name == "vertex" && elements.iter().any(|e| e.name == "vertex") {
                    return Err(bad(
                        path,
                        format!("header line {lineno}: a second vertex element"),
                    ));
                }
                elements.push(Element {
                    name: name.to_string(),
                    count,
                    props: Vec::new(),
                });
            }
            Some("property") => {
                let Some(el) = elements.last_mut() else {
                    return Err(bad(
                        path,
                        format!("header line {lineno}: property before any element"),
                    ));
                };
                let ty = |s: &str| {
                    Ty::parse(s).ok_or_else(|| {
                        Error::file(
                            path,
                            format!("header line {lineno}: unknown property type {s:?}"),
                            "use char, uchar, short, ushort, int, uint, float or double",
                        )
                    })
                };
                let prop = if words.get(1) == Some(&"list") {
                    if words.len() != 5 {
                        return Err(bad(
                            path,
                            format!(
                                "header line {lineno}: a list property needs a count type, an item type and a name"
                            ),
                        ));
                    }
                    let ct = ty(words[2])?;
                    if !ct.is_int() {
                        return Err(bad(
                            path,
                            format!("header line {lineno}: a list count must have an integer type"),
                        ));
                    }
                    Prop {
                        name: words[4].to_string(),
                        kind: PropKind::List(ct, ty(words[3])?),
                    }
                } else {
                    if words.len() != 3 {
                        return Err(bad(
                            path,
                            format!("header line {lineno}: a property needs a type and a name"),
                        ));
                    }
                    Prop {
                        name: words[2].to_string(),
                        kind: PropKind::Scalar(ty(words[1])?),
                    }
                };
                if el.find(&prop.name).is_some() {
                    return Err(bad(
                        path,
                        format!(
                            "header line {lineno}: property {} appears twice in element {}",
                            prop.name, el.name
                        ),
                    ));
                }
                el.props.push(prop);
            }
            Some("end_header") => break,
            Some(other) => {
                return Err(bad(
                    path,
                    format!("header line {lineno}: unknown keyword {other:?}"),
                ));
            }
        }
    }
    let encoding = encoding.ok_or_else(|| bad(path, "the PLY header has no format line"))?;
    Ok(Header {
        encoding,
        version,
        elements,
        origin,
        len: len as u64,
        lines: lineno,
    })
}

/// Buffered input that counts its position, for binary data.
struct Src {
    r: BufReader<File>,
    pos: u64,
    len: u64,
    path: PathBuf,
}

impl Src {
    fn eof(&self, what: String) -> Error {
        Error::file(
            &self.path,
            format!(
                "the file ends early: {what} (truncated, or the header declares more than the data holds)"
            ),
            "copy or export the file again",
        )
    }

    fn read_exact(&mut self, buf: &mut [u8], what: impl FnOnce() -> String) -> Result<()> {
        match self.r.read_exact(buf) {
            Ok(()) => {
                self.pos += buf.len() as u64;
                Ok(())
            }
            Err(e) if e.kind() == std::io::ErrorKind::UnexpectedEof => Err(self.eof(what())),
            Err(e) => Err(Error::io(&self.path, &e)),
        }
    }

    fn skip(&mut self, n: u64, what: impl FnOnce() -> String) -> Result<()> {
        if self.pos.saturating_add(n) > self.len {
            return Err(self.eof(what()));
        }
        self.r
            .seek_relative(n as i64)
            .map_err(|e| Error::io(&self.path, &e))?;
        self.pos += n;
        Ok(())
    }

    fn remaining(&self) -> u64 {
        self.len.saturating_sub(self.pos)
    }
}

/// Ascii records. A record starts on a fresh line and must end at the end of a line; it may
/// continue over several lines, but never shares a line with another record, so a short or
/// long line is refused instead of shifting every value after it.
struct Tokens {
    r: BufReader<File>,
    line: String,
    raw: Vec<u8>,
    at: usize,
    lineno: usize,
    /// Line where the current record started.
    start: usize,
    path: PathBuf,
}

impl Tokens {
    /// Reads the next non-blank line.
    fn next_line(&mut self, what: &dyn Fn() -> String) -> Result<()> {
        loop {
            self.raw.clear();
            self.line.clear();
            self.at = 0;
            let n = self
                .r
                .read_until(b'\n', &mut self.raw)
                .map_err(|e| Error::io(&self.path, &e))?;
            self.lineno += 1;
            if n == 0 {
                return Err(Error::file(
                    &self.path,
                    format!(
                        "the file ends early: {} (truncated, or the header declares more than the data holds)",
                        what()
                    ),
                    "copy or export the file again",
                ));
            }
            match std::str::from_utf8(&self.raw) {
                Ok(t) => self.line.push_str(t),
                Err(_) => {
                    return Err(bad(
                        &self.path,
                        format!(
                            "line {} is not text (bytes that are not UTF-8 in an ascii PLY body)",
                            self.lineno
                        ),
                    ));
                }
            }
            if !self.line.trim().is_empty() {
                return Ok(());
            }
        }
    }

    /// Moves to a fresh line, where a record of `what()` starts.
    fn begin(&mut self, what: &dyn Fn() -> String) -> Result<()> {
        self.next_line(what)?;
        self.start = self.lineno;
        Ok(())
    }

    /// Refuses values left on the current line after a record.
    fn check_line_done(&self, what: &dyn Fn() -> String) -> Result<()> {
        let rest = self.line[self.at..].split_ascii_whitespace().count();
        if rest > 0 {
            let plural = if rest == 1 { "" } else { "s" };
            return Err(bad(
                &self.path,
                if self.start == self.lineno {
                    format!(
                        "line {} has {rest} more value{plural} than its record needs ({})",
                        self.lineno,
                        what()
                    )
                } else {
                    format!(
                        "{} starts on line {} and ends inside line {}, leaving {rest} value{plural} (a short or long line)",
                        what(),
                        self.start,
                        self.lineno
                    )
                },
            ));
        }
        Ok(())
    }

    fn next(&mut self, what: &dyn Fn() -> String) -> Result<&str> {
        while self.line[self.at..].trim_start().is_empty() {
            self.next_line(what)?;
        }
        let rest = &self.line[self.at..];
        let trimmed = rest.trim_start();
        let start = self.at + (rest.len() - trimmed.len());
        let end = trimmed
            .find(|c: char| c.is_ascii_whitespace())
            .map_or(self.line.len(), |k| start + k);
        self.at = end;
        Ok(&self.line[start..end])
    }

    fn value(&mut self, ty: Ty, what: &dyn Fn() -> String) -> Result<f64> {
        let t = self.next(what)?;
        match ty.parse_token(t) {
            Some(v) => Ok(v),
            None => {
                let t = t.to_string();
                Err(Error::file(
                    &self.path,
                    format!(
                        "line {}: {t:?} is not a valid {ty:?} value ({})",
                        self.lineno,
                        what()
                    ),
                    "repair the file or export it again",
                ))
            }
        }
    }
}

enum Input {
    Bin(Src, bool),
    Ascii(Tokens),
}

/// Where each kept vertex field sits.
#[derive(Default)]
struct VertexMap {
    xyz: [usize; 3],
    normals: Option<[usize; 3]>,
    color: Option<[usize; 3]>,
    intensity: Option<usize>,
    classification: Option<usize>,
    return_number: Option<usize>,
    gps_time: Option<usize>,
    kept: Vec<bool>,
}

fn map_vertex(path: &Path, el: &Element) -> Result<VertexMap> {
    let mut m = VertexMap {
        kept: vec![false; el.props.len()],
        ..Default::default()
    };
    let scalar = |name: &str| {
        el.find(name)
            .filter(|&i| matches!(el.props[i].kind, PropKind::Scalar(_)))
    };
    let ty_of = |i: usize| match el.props[i].kind {
        PropKind::Scalar(t) => t,
        PropKind::List(..) => unreachable!(),
    };
    match (scalar("x"), scalar("y"), scalar("z")) {
        (Some(x), Some(y), Some(z)) => m.xyz = [x, y, z],
        _ => {
            return Err(Error::file(
                path,
                "the vertex element has no x, y and z properties",
                "export the points with x, y and z coordinates",
            ));
        }
    }
    if let (Some(a), Some(b), Some(c)) = (scalar("nx"), scalar("ny"), scalar("nz")) {
        m.normals = Some([a, b, c]);
    }
    if let (Some(a), Some(b), Some(c)) = (scalar("red"), scalar("green"), scalar("blue"))
        && [a, b, c]
            .iter()
            .all(|&i| matches!(ty_of(i), Ty::U8 | Ty::U16))
    {
        m.color = Some([a, b, c]);
    }
    m.intensity = scalar("intensity").or_else(|| scalar("scalar_intensity"));
    m.classification = scalar("classification").filter(|&i| ty_of(i) == Ty::U8);
    m.return_number = scalar("return_number").filter(|&i| ty_of(i) == Ty::U8);
    m.gps_time = scalar("gps_time");
    let mut used: Vec<usize> = m.xyz.to_vec();
    used.extend(m.normals.iter().flatten());
    used.extend(m.color.iter().flatten());
    used.extend(m.intensity);
    used.extend(m.classification);
    used.extend(m.return_number);
    used.extend(m.gps_time);
    for i in used {
        m.kept[i] = true;
    }
    Ok(m)
}

/// Vertex columns being filled.
struct Sink {
    origin: Option<[f64; 3]>,
    float_xyz: bool,
    cloud: Cloud,
    xyz: [Vec<f64>; 3],
}

impl Sink {
    /// Moves the chunk's coordinates in `xyz` into the cloud, checking them.
    fn flush_xyz(&mut self, path: &Path, first_index: usize) -> Result<()> {
        let n = self.xyz[0].len();
        for i in 0..n {
            let p = [self.xyz[0][i], self.xyz[1][i], self.xyz[2][i]];
            if let Some(k) = (0..3).find(|&k| !p[k].is_finite()) {
                return Err(Error::file(
                    path,
                    format!(
                        "vertex {} has a non-finite coordinate ({} = {})",
                        first_index + i,
                        ["x", "y", "z"][k],
                        p[k]
                    ),
                    "drop or repair such points",
                ));
            }
            let o = *self.origin.get_or_insert_with(|| {
                if self.float_xyz {
                    [0.0; 3]
                } else {
                    p.map(f64::round)
                }
            });
            let local: [f32; 3] = std::array::from_fn(|k| (p[k] - o[k]) as f32);
            if let Some(k) = (0..3).find(|&k| !local[k].is_finite()) {
                return Err(Error::file(
                    path,
                    format!(
                        "vertex {} lies too far from the first vertex ({} = {})",
                        first_index + i,
                        ["x", "y", "z"][k],
                        super::compact(p[k])
                    ),
                    "drop or repair such points",
                ));
            }
            self.cloud.positions.push(local);
        }
        for c in &mut self.xyz {
            c.clear();
        }
        Ok(())
    }
}

fn new_sink(m: &VertexMap, el: &Element, origin: Option<[f64; 3]>, reserve: usize) -> Sink {
    let float_xyz = m
        .xyz
        .iter()
        .all(|&i| matches!(el.props[i].kind, PropKind::Scalar(Ty::F32)));
    let mut cloud = Cloud::new([0.0; 3], Vec::with_capacity(reserve));
    if m.normals.is_some() {
        cloud.normals = Some(Vec::with_capacity(reserve));
    }
    if m.color.is_some() {
        cloud.color = Some(Vec::with_capacity(reserve));
    }
    if m.intensity.is_some() {
        cloud.intensity = Some(Vec::with_capacity(reserve));
    }
    if m.classification.is_some() {
        cloud.classification = Some(Vec::with_capacity(reserve));
    }
    if m.return_number.is_some() {
        cloud.return_number = Some(Vec::with_capacity(reserve));
    }
    if m.gps_time.is_some() {
        cloud.gps_time = Some(Vec::with_capacity(reserve));
    }
    Sink {
        // Float coordinates are kept as they are: origin zero.
        origin: if float_xyz { Some([0.0; 3]) } else { origin },
        float_xyz,
        cloud,
        xyz: Default::default(),
    }
}

/// Appends one vertex given all its property values (ascii and variable-length records).
fn push_vertex(s: &mut Sink, m: &VertexMap, vals: &[f64]) {
    for k in 0..3 {
        s.xyz[k].push(vals[m.xyz[k]]);
    }
    let c = &mut s.cloud;
    if let (Some(v), Some(ix)) = (c.normals.as_mut(), m.normals) {
        v.push(ix.map(|i| vals[i] as f32));
    }
    if let (Some(v), Some(ix)) = (c.color.as_mut(), m.color) {
        v.push(ix.map(|i| vals[i] as u16));
    }
    if let (Some(v), Some(i)) = (c.intensity.as_mut(), m.intensity) {
        v.push(vals[i] as f32);
    }
    if let (Some(v), Some(i)) = (c.classification.as_mut(), m.classification) {
        v.push(vals[i] as u8);
    }
    if let (Some(v), Some(i)) = (c.return_number.as_mut(), m.return_number) {
        v.push(vals[i] as u8);
    }
    if let (Some(v), Some(i)) = (c.gps_time.as_mut(), m.gps_time) {
        v.push(vals[i]);
    }
}

/// Refuses a non-finite coordinate among `positions[from..]`, naming the vertex.
/// `positions[from]` is vertex `first` of the file.
fn check_float_positions(
    path: &Path,
    positions: &[[f32; 3]],
    from: usize,
    first: u64,
) -> Result<()> {
    for (i, p) in positions.iter().enumerate().skip(from) {
        if let Some(k) = (0..3).find(|&k| !p[k].is_finite()) {
            return Err(Error::file(
                path,
                format!(
                    "vertex {} has a non-finite coordinate ({} = {})",
                    first + (i - from) as u64,
                    ["x", "y", "z"][k],
                    p[k]
                ),
                "drop or repair such points",
            ));
        }
    }
    Ok(())
}

/// Decodes a chunk of fixed-stride binary vertex records column by column.
fn decode_chunk(
    s: &mut Sink,
    m: &VertexMap,
    offs: &[(usize, Ty)],
    buf: &[u8],
    stride: usize,
    big: bool,
) {
    let n = buf.len() / stride;
    let Sink {
        cloud,
        xyz,
        float_xyz,
        ..
    } = s;
    let Cloud {
        positions,
        normals,
        color,
        intensity,
        classification,
        return_number,
        gps_time,
        ..
    } = cloud;
    // Coordinates on one thread, the other attributes on another: the work (and the first
    // touch of the output memory) splits in about half.
    let coordinates = || {
        if *float_xyz {
            // Float coordinates with origin zero go straight into the positions (finiteness is
            // checked by the caller through `check_float_positions`).
            let base = positions.len();
            positions.resize(base + n, [0.0; 3]);
            for k in 0..3 {
                let (off, ty) = offs[m.xyz[k]];
                for_column(buf, stride, off, ty, big, |r, v| {
                    positions[base + r][k] = v as f32
                });
            }
        } else {
            for k in 0..3 {
                let (off, ty) = offs[m.xyz[k]];
                let col = &mut xyz[k];
                col.reserve(n);
                for_column(buf, stride, off, ty, big, |_, v| col.push(v));
            }
        }
    };
    let attributes = || {
        if let (Some(v), Some(ix)) = (normals.as_mut(), m.normals) {
            let base = v.len();
            v.resize(base + n, [0.0; 3]);
            for (k, &i) in ix.iter().enumerate() {
                let (off, ty) = offs[i];
                for_column(buf, stride, off, ty, big, |r, x| v[base + r][k] = x as f32);
            }
        }
        if let (Some(v), Some(ix)) = (color.as_mut(), m.color) {
            let base = v.len();
            v.resize(base + n, [0; 3]);
            for (k, &i) in ix.iter().enumerate() {
                let (off, ty) = offs[i];
                for_column(buf, stride, off, ty, big, |r, x| v[base + r][k] = x as u16);
            }
        }
        if let (Some(v), Some(i)) = (intensity.as_mut(), m.intensity) {
            let (off, ty) = offs[i];
            for_column(buf, stride, off, ty, big, |_, x| v.push(x as f32));
        }
        if let (Some(v), Some(i)) = (classification.as_mut(), m.classification) {
            let (off, ty) = offs[i];
            for_column(buf, stride, off, ty, big, |_, x| v.push(x as u8));
        }
        if let (Some(v), Some(i)) = (return_number.as_mut(), m.return_number) {
            let (off, ty) = offs[i];
            for_column(buf, stride, off, ty, big, |_, x| v.push(x as u8));
        }
        if let (Some(v), Some(i)) = (gps_time.as_mut(), m.gps_time) {
            let (off, ty) = offs[i];
            for_column(buf, stride, off, ty, big, |_, x| v.push(x));
        }
    };
    rayon::join(coordinates, attributes);
}

/// Reads (or skips, when `out` is `None`) one record of `el` with list properties, from
/// binary input. List items of the property named `want` go to `items`.
fn bin_record(
    src: &mut Src,
    big: bool,
    el: &Element,
    r: u64,
    vals: Option<&mut Vec<f64>>,
    want: Option<usize>,
    items: &mut Vec<f64>,
) -> Result<()> {
    let mut vals = vals;
    if let Some(v) = vals.as_deref_mut() {
        v.clear();
    }
    let mut b = [0u8; 8];
    let what = || format!("{} {} of {}", el.name, r, el.count);
    for (pi, p) in el.props.iter().enumerate() {
        match p.kind {
            PropKind::Scalar(t) => {
                src.read_exact(&mut b[..t.size()], what)?;
                if let Some(v) = vals.as_deref_mut() {
                    v.push(t.get(&b, big));
                }
            }
            PropKind::List(ct, it) => {
                src.read_exact(&mut b[..ct.size()], what)?;
                let n = ct.get(&b, big);
                if n < 0.0 {
                    return Err(bad(
                        &src.path,
                        format!("{} {r} has a negative list length", el.name),
                    ));
                }
                let n = n as u64;
                if Some(pi) == want {
                    items.clear();
                    for _ in 0..n {
                        src.read_exact(&mut b[..it.size()], what)?;
                        items.push(it.get(&b, big));
                    }
                } else {
                    src.skip(n * it.size() as u64, what)?;
                }
                if let Some(v) = vals.as_deref_mut() {
                    v.push(f64::NAN);
                }
            }
        }
    }
    Ok(())
}

/// Same as [`bin_record`] for ascii input.
fn ascii_record(
    tok: &mut Tokens,
    el: &Element,
    r: u64,
    vals: &mut Vec<f64>,
    want: Option<usize>,
    items: &mut Vec<f64>,
) -> Result<()> {
    vals.clear();
    let name = el.name.clone();
    let count = el.count;
    let what = move || format!("{name} {r} of {count}");
    tok.begin(&what)?;
    for (pi, p) in el.props.iter().enumerate() {
        match p.kind {
            PropKind::Scalar(t) => {
                let v = tok.value(t, &what)?;
                vals.push(v);
            }
            PropKind::List(ct, it) => {
                let n = tok.value(ct, &what)?;
                if n < 0.0 {
                    return Err(bad(
                        &tok.path,
                        format!("line {}: negative list length", tok.lineno),
                    ));
                }
                if Some(pi) == want {
                    items.clear();
                }
                for _ in 0..n as u64 {
                    let v = tok.value(it, &what)?;
                    if Some(pi) == want {
                        items.push(v);
                    }
                }
                vals.push(f64::NAN);
            }
        }
    }
    tok.check_line_done(&what)
}

/// Smallest number of bytes one record of `el` can take: ascii, one character and one
/// separator per value; binary, the scalar sizes plus the list counts (empty lists).
fn min_record_bytes(el: &Element, enc: Encoding) -> u64 {
    match enc {
        Encoding::Ascii => 2 * el.props.len() as u64,
        _ => el
            .props
            .iter()
            .map(|p| match p.kind {
                PropKind::Scalar(t) | PropKind::List(t, _) => t.size() as u64,
            })
            .sum(),
    }
}

/// Refuses element counts that the data cannot hold, before anything is skipped or
/// allocated: a header claiming 10¹² records is refused at once instead of being skipped
/// record by record.
fn check_counts(path: &Path, h: &Header, data: u64) -> Result<()> {
    let mut need = 0u64;
    for el in &h.elements {
        if el.props.is_empty() {
            if el.count > 0 {
                return Err(bad(
                    path,
                    format!(
                        "element {} declares {} records but no properties",
                        el.name, el.count
                    ),
                ));
            }
            continue;
        }
        let min = min_record_bytes(el, h.encoding);
        need = need.saturating_add(el.count.saturating_mul(min));
        // Ascii: the last value of the file may lack its separator.
        if need > data.saturating_add(1) {
            return Err(Error::file(
                path,
                format!(
                    "the header declares {} {} records, which need at least {} bytes, but the data holds {data} (truncated, or a wrong count)",
                    el.count, el.name, need
                ),
                "copy or export the file again",
            ));
        }
    }
    Ok(())
}

/// A PLY file opened for reading: header parsed and checked, elements before the vertex
/// element read (faces kept when asked) or skipped; vertices are then read in chunks with
/// [`PlyReader::read_into`].
pub(crate) struct PlyReader {
    path: PathBuf,
    h: Header,
    vi: usize,
    map: VertexMap,
    input: Input,
    sink: Sink,
    info: FileInfo,
    done: u64,
    faces: bool,
    offs: Vec<(usize, Ty)>,
    stride: Option<usize>,
    buf: Vec<u8>,
    vals: Vec<f64>,
    items: Vec<f64>,
    triangles: Vec<[u32; 3]>,
}

impl PlyReader {
    /// Opens `path` (the caller has seen the `ply` signature); `faces` keeps `face` lists.
    pub(crate) fn open(path: &Path, faces: bool) -> Result<PlyReader> {
        let (file, file_len) = open_input(path)?;
        let mut r = BufReader::with_capacity(1 << 20, file);
        let h = parse_header(path, &mut r)?;
        let vi = h
            .elements
            .iter()
            .position(|e| e.name == "vertex")
            .ok_or_else(|| {
                Error::file(
                    path,
                    "the PLY file has no vertex element",
                    "export the points as a vertex element with x, y and z",
                )
            })?;
        check_counts(path, &h, file_len.saturating_sub(h.len))?;
        let vel = &h.elements[vi];
        let map = map_vertex(path, vel)?;

        let mut info = FileInfo::new(path, "PLY", h.version.clone());
        info.encoding = Some(h.encoding.name().to_string());
        info.point_count = vel.count;
        info.other_fields = vel
            .props
            .iter()
            .zip(&map.kept)
            .filter(|(_, k)| !**k)
            .map(|(p, _)| p.name.clone())
            .collect();
        info.other_elements = h
            .elements
            .iter()
            .filter(|e| e.name != "vertex")
            .map(|e| format!("{} {}", e.name, e.count))
            .collect();

        let input = match h.encoding {
            Encoding::Ascii => Input::Ascii(Tokens {
                r,
                line: String::new(),
                raw: Vec::new(),
                at: 0,
                lineno: h.lines,
                start: h.lines,
                path: path.to_path_buf(),
            }),
            enc => Input::Bin(
                Src {
                    r,
                    pos: h.len,
                    len: file_len,
                    path: path.to_path_buf(),
                },
                enc == Encoding::Big,
            ),
        };
        let sink = new_sink(&map, vel, h.origin, 0);
        info.attributes = sink
            .cloud
            .attribute_names()
            .into_iter()
            .map(String::from)
            .collect();
        let stride = match h.encoding {
            Encoding::Ascii => None,
            _ => vel.fixed_stride(),
        };
        let mut offs = Vec::with_capacity(vel.props.len());
        let mut o = 0;
        for p in &vel.props {
            if let PropKind::Scalar(t) = p.kind {
                offs.push((o, t));
                o += t.size();
            }
        }
        let mut me = PlyReader {
            path: path.to_path_buf(),
            h,
            vi,
            map,
            input,
            sink,
            info,
            done: 0,
            faces,
            offs,
            stride,
            buf: Vec::new(),
            vals: Vec::new(),
            items: Vec::new(),
            triangles: Vec::new(),
        };
        for ei in 0..vi {
            me.other_element(ei)?;
        }
        Ok(me)
    }

    /// The header summary.
    pub(crate) fn info(&self) -> &FileInfo {
        &self.info
    }

    /// Vertices not read yet.
    pub(crate) fn remaining(&self) -> u64 {
        self.h.elements[self.vi].count - self.done
    }

    /// An empty cloud with the attributes this file carries, room for `reserve` points (no
    /// more than the bytes left can hold).
    pub(crate) fn empty_cloud(&self, reserve: u64) -> Cloud {
        let vel = &self.h.elements[self.vi];
        let left = match &self.input {
            Input::Bin(s, _) => s.remaining(),
            Input::Ascii(_) => u64::MAX,
        };
        let min = min_record_bytes(vel, self.h.encoding).max(1);
        let reserve = reserve.min(self.remaining()).min(left / min) as usize;
        new_sink(&self.map, vel, None, reserve).cloud
    }

    /// Reads or skips element `ei` (not the vertex element); face lists become triangles when
    /// faces were asked for.
    fn other_element(&mut self, ei: usize) -> Result<()> {
        let el = &self.h.elements[ei];
        let nv = self.h.elements[self.vi].count;
        let is_face = self.faces && el.name == "face";
        let want = if is_face {
            el.find("vertex_indices")
                .or_else(|| el.find("vertex_index"))
                .filter(|&i| matches!(el.props[i].kind, PropKind::List(..)))
        } else {
            None
        };
        match &mut self.input {
            Input::Bin(src, big) => {
                let big = *big;
                match el.fixed_stride() {
                    Some(stride) if !is_face => {
                        let count = el.count;
                        let name = el.name.clone();
                        src.skip(count.saturating_mul(stride as u64), || {
                            format!("element {name} ({count} records) is incomplete")
                        })?;
                    }
                    _ => {
                        for rec in 0..el.count {
                            bin_record(src, big, el, rec, None, want, &mut self.items)?;
                            if want.is_some() {
                                fan(&self.path, rec, &self.items, nv, &mut self.triangles)?;
                            }
                        }
                    }
                }
            }
            Input::Ascii(tok) => {
                for rec in 0..el.count {
                    ascii_record(tok, el, rec, &mut self.vals, want, &mut self.items)?;
                    if want.is_some() {
                        fan(&self.path, rec, &self.items, nv, &mut self.triangles)?;
                    }
                }
            }
        }
        Ok(())
    }

    /// Appends up to `max` vertices to `out` (a cloud from [`PlyReader::empty_cloud`]) and
    /// sets its origin; returns how many were read (0 at the end).
    pub(crate) fn read_into(&mut self, out: &mut Cloud, max: usize) -> Result<usize> {
        let want = (max as u64).min(self.remaining());
        if want == 0 {
            out.origin = self.sink.origin.unwrap_or([0.0; 3]);
            return Ok(0);
        }
        std::mem::swap(&mut self.sink.cloud, out);
        let r = self.read_vertices(want);
        std::mem::swap(&mut self.sink.cloud, out);
        r?;
        out.origin = self.sink.origin.unwrap_or([0.0; 3]);
        Ok(want as usize)
    }

    fn read_vertices(&mut self, want: u64) -> Result<()> {
        let path = self.path.clone();
        let path = path.as_path();
        let vel = &self.h.elements[self.vi];
        let count = vel.count;
        let end = self.done + want;
        match (&mut self.input, self.stride) {
            (Input::Bin(src, big), Some(stride)) => {
                let big = *big;
                while self.done < end {
                    let n = (end - self.done).min(CHUNK as u64) as usize;
                    self.buf.resize(n * stride, 0);
                    let d = self.done;
                    // Report how far whole records go when the data stops early.
                    if src.remaining() < self.buf.len() as u64 {
                        let whole = d + src.remaining() / stride as u64;
                        return Err(src.eof(format!("{whole} of {count} vertices present")));
                    }
                    src.read_exact(&mut self.buf, || format!("vertex {d} of {count}"))?;
                    let before = self.sink.cloud.positions.len();
                    decode_chunk(
                        &mut self.sink,
                        &self.map,
                        &self.offs,
                        &self.buf,
                        stride,
                        big,
                    );
                    check_float_positions(path, &self.sink.cloud.positions, before, d)?;
                    self.sink.flush_xyz(path, d as usize)?;
                    self.done += n as u64;
                }
            }
            (input, _) => {
                let mut first = self.done;
                while self.done < end {
                    let rec = self.done;
                    match input {
                        Input::Bin(src, big) => bin_record(
                            src,
                            *big,
                            vel,
                            rec,
                            Some(&mut self.vals),
                            None,
                            &mut self.items,
                        )?,
                        Input::Ascii(tok) => {
                            ascii_record(tok, vel, rec, &mut self.vals, None, &mut self.items)?
                        }
                    }
                    push_vertex(&mut self.sink, &self.map, &self.vals);
                    self.done += 1;
                    if self.sink.xyz[0].len() >= CHUNK {
                        self.sink.flush_xyz(path, first as usize)?;
                        first = self.done;
                    }
                }
                self.sink.flush_xyz(path, first as usize)?;
            }
        }
        Ok(())
    }

    /// Reads what follows the vertices when faces were asked for; returns the triangles.
    pub(crate) fn finish(mut self) -> Result<Vec<[u32; 3]>> {
        if self.faces {
            for ei in self.vi + 1..self.h.elements.len() {
                self.other_element(ei)?;
            }
        }
        Ok(self.triangles)
    }
}

/// Reads a PLY file: the cloud, the triangles when `faces` is true, and the header summary.
pub(crate) fn read_ply(path: &Path, faces: bool) -> Result<(Cloud, Vec<[u32; 3]>, FileInfo)> {
    let mut r = PlyReader::open(path, faces)?;
    let mut cloud = r.empty_cloud(u64::MAX);
    let n = r.remaining().min(usize::MAX as u64) as usize;
    r.read_into(&mut cloud, n)?;
    super::check_extent(path, &cloud)?;
    let info = r.info().clone();
    let triangles = r.finish()?;
    Ok((cloud, triangles, info))
}

/// Splits polygon `items` (vertex indices) of face `rec` into a triangle fan.
fn fan(path: &Path, rec: u64, items: &[f64], nv: u64, out: &mut Vec<[u32; 3]>) -> Result<()> {
    for &v in items {
        if !(v >= 0.0 && (v as u64) < nv) {
            return Err(Error::file(
                path,
                format!("face {rec} refers to vertex {v}, but there are {nv} vertices"),
                "repair the mesh or export it again",
            ));
        }
    }
    for k in 1..items.len().saturating_sub(1) {
        out.push([items[0] as u32, items[k] as u32, items[k + 1] as u32]);
    }
    Ok(())
}

/// Reads a PLY mesh: the vertices as a [`Cloud`] (as [`super::read_cloud`] does) and the
/// faces of the `face` element (`vertex_indices` or `vertex_index` list) as triangles.
///
/// Polygons with more than three corners are split into a fan `(v0, vk, vk+1)`; indices
/// refer to the cloud's points in file order. A file without faces gives no triangles.
pub fn read_ply_mesh(path: &Path) -> Result<(Cloud, Vec<[u32; 3]>)> {
    if super::sniff(path)? != super::Kind::Ply {
        return Err(Error::file(path, "is not a PLY file", "give a .ply mesh"));
    }
    read_ply(path, true).map(|(c, t, _)| (c, t))
}

/// Writes `cloud` and `columns` as a binary little-endian PLY file, atomically.
///
/// Vertex properties in this order: `x y z` (double, global coordinates), then when present
/// `nx ny nz` (float), `red green blue` (uchar when every value is ≤ 255, ushort otherwise),
/// `intensity` (float), `classification`, `return_number` (uchar), `gps_time` (double), then
/// one float property per column. Column names must be plain (letters, digits, `_`) and must
/// not repeat a name above.
///
/// `x y z` are global coordinates (`origin + position`), so other programs see file
/// coordinates; the origin is recorded as `comment equiscan origin X Y Z` and used again by
/// [`super::read_cloud`], which gives back the same origin, attributes and columns. Positions
/// come back bit for bit when the origin is zero, and otherwise whenever each offset is 0 or
/// larger in magnitude than about 2⁻²⁹ × |origin| (for an origin of 5 × 10⁶, above 1 cm);
/// closer to the origin an f32 offset may change by one unit in the last place (below
/// 10⁻⁹ file units there).
pub fn write_ply(path: &Path, cloud: &Cloud, columns: &[Column<'_>]) -> Result<()> {
    write_ply_with_comments(path, cloud, columns, &[])
}

/// [`write_ply`] with extra header comment lines (one per entry, without the `comment`
/// keyword; line breaks are replaced by spaces), written after the origin comment.
pub fn write_ply_with_comments(
    path: &Path,
    cloud: &Cloud,
    columns: &[Column<'_>],
    comments: &[String],
) -> Result<()> {
    cloud.validate().map_err(|e| super::about(path, e))?;
    check_columns(path, cloud.len(), columns, &PLY_TAKEN)?;
    let names: Vec<&str> = columns.iter().map(|c| c.name).collect();
    let layout = PlyLayout::new(cloud, None, &names, cloud.len());
    let mut header = layout.header();
    if !comments.is_empty() {
        // Right after the origin comment.
        let at = header
            .find(&format!("comment {ORIGIN_COMMENT}"))
            .and_then(|i| header[i..].find('\n').map(|j| i + j + 1))
            .unwrap_or(0);
        let extra: String = comments
            .iter()
            .map(|c| format!("comment {}\n", c.replace(['\n', '\r'], " ")))
            .collect();
        header.insert_str(at, &extra);
    }
    write_atomic(path, |w| {
        put(w, path, header.as_bytes())?;
        let mut rec = Vec::with_capacity(64 + 4 * columns.len());
        for i in 0..cloud.len() {
            rec.clear();
            layout.point(cloud.positions[i], Some((cloud, i)), &mut rec);
            for c in columns {
                rec.extend_from_slice(&c.values[i].to_le_bytes());
            }
            w.write_all(&rec).map_err(|e| Error::io(path, &e))?;
        }
        Ok(())
    })
}

/// Property names [`write_ply`] uses for coordinates and attributes; columns may not reuse them.
pub const PLY_TAKEN: [&str; 13] = [
    "x",
    "y",
    "z",
    "nx",
    "ny",
    "nz",
    "red",
    "green",
    "blue",
    "intensity",
    "classification",
    "return_number",
    "gps_time",
];

/// The vertex layout of a binary PLY written by [`write_ply`], for writers that produce rows in
/// chunks: [`PlyLayout::header`] first, then per row [`PlyLayout::point`] followed by the row's
/// column values as little-endian f32.
#[derive(Debug, Clone)]
pub struct PlyLayout {
    origin: [f64; 3],
    normals: bool,
    /// `Some(wide)` when colour is written; wide = ushort.
    color: Option<bool>,
    intensity: bool,
    classification: bool,
    return_number: bool,
    gps_time: bool,
    columns: Vec<String>,
    rows: usize,
}

impl PlyLayout {
    /// The layout for `rows` vertices with the attributes present in `like` (its origin too)
    /// and float `columns`. `wide_color`: ushort colour; `None` decides from `like`'s colours
    /// (ushort when any value is above 255).
    pub fn new(like: &Cloud, wide_color: Option<bool>, columns: &[&str], rows: usize) -> Self {
        let wide = wide_color.unwrap_or_else(|| {
            like.color
                .as_ref()
                .is_some_and(|c| c.iter().flatten().any(|&v| v > 255))
        });
        PlyLayout {
            origin: like.origin,
            normals: like.normals.is_some(),
            color: like.color.is_some().then_some(wide),
            intensity: like.intensity.is_some(),
            classification: like.classification.is_some(),
            return_number: like.return_number.is_some(),
            gps_time: like.gps_time.is_some(),
            columns: columns.iter().map(|c| c.to_string()).collect(),
            rows,
        }
    }

    /// The header text, `ply` to `end_header` and its newline.
    pub fn header(&self) -> String {
        let mut h = String::from("ply\nformat binary_little_endian 1.0\n");
        let o = self.origin;
        h += &format!("comment {ORIGIN_COMMENT} {} {} {}\n", o[0], o[1], o[2]);
        h += &format!("element vertex {}\n", self.rows);
        h += "property double x\nproperty double y\nproperty double z\n";
        if self.normals {
            h += "property float nx\nproperty float ny\nproperty float nz\n";
        }
        if let Some(wide) = self.color {
            let t = if wide { "ushort" } else { "uchar" };
            h += &format!("property {t} red\nproperty {t} green\nproperty {t} blue\n");
        }
        if self.intensity {
            h += "property float intensity\n";
        }
        if self.classification {
            h += "property uchar classification\n";
        }
        if self.return_number {
            h += "property uchar return_number\n";
        }
        if self.gps_time {
            h += "property double gps_time\n";
        }
        for c in &self.columns {
            h += &format!("property float {c}\n");
        }
        h += "end_header\n";
        h
    }

    /// Appends the coordinates (`position` in the layout's local frame) and the attributes of
    /// point `i` of `attrs` (a cloud with the attributes the layout was made with; `None` only
    /// for a layout without attributes) to `rec`. The column values follow.
    pub fn point(&self, position: [f32; 3], attrs: Option<(&Cloud, usize)>, rec: &mut Vec<u8>) {
        for (o, l) in self.origin.iter().zip(position) {
            // With a zero origin the f32 value itself is written (keeps -0.0).
            let g = if *o == 0.0 { l as f64 } else { o + l as f64 };
            rec.extend_from_slice(&g.to_le_bytes());
        }
        let Some((cloud, i)) = attrs else {
            return;
        };
        if self.normals
            && let Some(n) = &cloud.normals
        {
            for v in n[i] {
                rec.extend_from_slice(&v.to_le_bytes());
            }
        }
        if let (Some(wide), Some(c)) = (self.color, &cloud.color) {
            for v in c[i] {
                if wide {
                    rec.extend_from_slice(&v.to_le_bytes());
                } else {
                    rec.push(v as u8);
                }
            }
        }
        if self.intensity
            && let Some(v) = &cloud.intensity
        {
            rec.extend_from_slice(&v[i].to_le_bytes());
        }
        if self.classification
            && let Some(v) = &cloud.classification
        {
            rec.push(v[i]);
        }
        if self.return_number
            && let Some(v) = &cloud.return_number
        {
            rec.push(v[i]);
        }
        if self.gps_time
            && let Some(v) = &cloud.gps_time
        {
            rec.extend_from_slice(&v[i].to_le_bytes());
        }
    }
}
