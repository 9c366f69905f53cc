//! Writes the committed malformed-input corpus: small LAS 1.0–1.4, LAZ and PLY (ascii, binary
//! little- and big-endian) files, each valid base file and a family of damaged variants, with
//! `expected.csv` stating the outcome each file must have (`accepted` with its point count, or
//! `refused` with a fragment of the message). tests/io_corpus.rs walks the table.
//!
//! `cargo run --release --example make_malformed_corpus -- tests/data/malformed`
//!
//! The expectations are written here from the damage done (which header field, which line),
//! not by running the readers. Header offsets: ASPRS LAS 1.4 R15, Table 3 (from memory):
//! header size 94 (u16), point data offset 96 (u32), point format 104, record length 105
//! (u16), legacy count 107 (u32), scale 131/139/147, offset 155/163/171, bounds 179–226
//! (f64). The base files are written by the `las` crate (LAS, LAZ) and by hand (PLY).

use std::io::Cursor;
use std::path::Path;

use las::{Builder, Point, Transform, Vector, Version, Writer};

const N: usize = 40;

fn points() -> Vec<[f64; 3]> {
    (0..N)
        .map(|i| {
            let (a, b) = ((i % 8) as f64, (i / 8) as f64);
            [
                1000.0 + 0.25 * a,
                2000.0 + 0.5 * b,
                10.0 + 0.125 * ((i * 7) % 5) as f64,
            ]
        })
        .collect()
}

fn las_bytes(minor: u8, format: u8, compressed: bool) -> Vec<u8> {
    let mut b = Builder::default();
    b.version = Version::new(1, minor);
    let mut f = las::point::Format::new(format).unwrap();
    f.is_compressed = compressed;
    b.point_format = f;
    let t = Transform {
        scale: 0.001,
        offset: 1000.0,
    };
    b.transforms = Vector { x: t, y: t, z: t };
    let header = b.into_header().unwrap();
    let mut w = Writer::new(Cursor::new(Vec::new()), header).unwrap();
    for p in points() {
        let mut pt = Point {
            x: p[0],
            y: p[1],
            z: p[2],
            intensity: 7,
            return_number: 1,
            number_of_returns: 1,
            ..Default::default()
        };
        if w.header().point_format().has_gps_time {
            pt.gps_time = Some(1.5);
        }
        if w.header().point_format().has_color {
            pt.color = Some(las::Color::new(1, 2, 3));
        }
        w.write_point(pt).unwrap();
    }
    w.into_inner().unwrap().into_inner()
}

fn put<const K: usize>(b: &mut [u8], at: usize, v: [u8; K]) {
    b[at..at + K].copy_from_slice(&v);
}

fn u32_at(b: &[u8], o: usize) -> u32 {
    u32::from_le_bytes(b[o..o + 4].try_into().unwrap())
}

enum Outcome {
    Accepted(usize),
    Refused(&'static str),
}
use Outcome::{Accepted, Refused};

struct Corpus {
    rows: Vec<(String, Vec<u8>, Outcome)>,
}

impl Corpus {
    fn add(&mut self, name: String, bytes: Vec<u8>, o: Outcome) {
        self.rows.push((name, bytes, o));
    }
}

fn las_family(c: &mut Corpus, minor: u8, format: u8) {
    let base = las_bytes(minor, format, false);
    let tag = format!("las1{minor}_f{format}");
    let v = |c: &mut Corpus, what: &str, b: Vec<u8>, o: Outcome| {
        c.add(format!("{tag}_{what}.las"), b, o)
    };
    v(c, "ok", base.clone(), Accepted(N));
    v(
        c,
        "cut_header",
        base[..100].to_vec(),
        Refused("LAS header is truncated"),
    );
    v(
        c,
        "cut_points",
        base[..base.len() - 10].to_vec(),
        Refused("but the data holds only"),
    );
    let mut b = base.clone();
    put(&mut b, 107, 1_000_000_000u32.to_le_bytes());
    let o = if minor == 4 {
        Refused("the header's two point counts disagree")
    } else {
        Refused("declares 1000000000 points but the data holds only 40")
    };
    v(c, "count_1e9", b, o);
    let mut b = base.clone();
    put(&mut b, 24, [2, 0]);
    v(
        c,
        "version_2_0",
        b,
        Refused("LAS version 2.0 is not read here"),
    );
    let mut b = base.clone();
    b[104] = 99;
    v(
        c,
        "format_99",
        b,
        Refused("LAS point format 99 is not read here"),
    );
    let mut b = base.clone();
    put(&mut b, 131, f64::NAN.to_le_bytes());
    v(c, "scale_nan", b, Refused("the x scale factor is NaN"));
    let mut b = base.clone();
    put(&mut b, 139, 1e300f64.to_le_bytes());
    v(c, "scale_1e300", b, Refused("the y scale factor is 1e300"));
    let mut b = base.clone();
    put(&mut b, 171, f64::INFINITY.to_le_bytes());
    v(c, "offset_inf", b, Refused("the z offset is inf"));
    let mut b = base.clone();
    put(&mut b, 94, 10u16.to_le_bytes());
    v(c, "header_size_10", b, Refused("declares 10 header bytes"));
    let mut b = base.clone();
    let len = b.len() as u32;
    put(&mut b, 96, (len + 5).to_le_bytes());
    v(
        c,
        "points_past_end",
        b,
        Refused("the point data should start at byte"),
    );
    let mut b = base.clone();
    put(&mut b, 105, 5u16.to_le_bytes());
    v(
        c,
        "record_5_bytes",
        b,
        Refused("too short for point format"),
    );
    let mut b = base.clone();
    put(&mut b, 179, f64::NAN.to_le_bytes());
    v(c, "bounds_nan", b, Accepted(N));
    let mut b = base.clone();
    b[3] = b'X';
    v(c, "magic", b, Refused("not a LAS, LAZ, PLY or E57 file"));
    v(c, "empty", Vec::new(), Refused("the file is empty"));
    // One point's X integer at i32::MAX with a 1000-unit x scale: 2.1e12 units away.
    let mut b = base.clone();
    put(&mut b, 131, 1000f64.to_le_bytes());
    let first = u32_at(&b, 96) as usize;
    put(&mut b, first, i32::MAX.to_le_bytes());
    v(c, "extent_2e12", b, Refused("the points span"));
}

fn laz_family(c: &mut Corpus, minor: u8, format: u8) {
    let base = las_bytes(minor, format, true);
    let tag = format!("laz1{minor}_f{format}");
    let v = |c: &mut Corpus, what: &str, b: Vec<u8>, o: Outcome| {
        c.add(format!("{tag}_{what}.laz"), b, o)
    };
    let otp = u32_at(&base, 96) as usize;
    let table = i64::from_le_bytes(base[otp..otp + 8].try_into().unwrap()) as usize;
    v(c, "ok", base.clone(), Accepted(N));
    let mut b = base.clone();
    put(&mut b, table + 4, u32::MAX.to_le_bytes());
    v(c, "chunk_count_ff", b, Refused("lists 4294967295 chunks"));
    let mut b = base.clone();
    b[otp..].fill(0xff);
    v(c, "tail_ff", b, Refused("chunk table offset is -1"));
    let mut b = base.clone();
    put(&mut b, otp, (base.len() as i64 + 100).to_le_bytes());
    v(c, "table_past_end", b, Refused("lies outside the"));
    v(
        c,
        "cut",
        base[..table - 4].to_vec(),
        Refused("lies outside the"),
    );
    let mut b = base.clone();
    put(&mut b, 107, 1_000_000_000u32.to_le_bytes());
    let o = if minor == 4 {
        Refused("the header's two point counts disagree")
    } else {
        Refused("but the compressed data holds at most")
    };
    v(c, "count_1e9", b, o);
    let mut b = base.clone();
    let at = b.windows(14).position(|w| w == b"laszip encoded").unwrap();
    put(&mut b, at - 2 + 54 + 12, 0x7FFF_FFFFu32.to_le_bytes());
    v(
        c,
        "chunk_size_huge",
        b,
        Refused("declares chunks of 2147483647 points"),
    );
    let mut b = base.clone();
    b[104] = 99;
    v(
        c,
        "format_99",
        b,
        Refused("LAS point format 99 is not read here"),
    );
}

fn ply_header(enc: &str, n: &str, extra: &str) -> String {
    format!(
        "ply\nformat {enc} 1.0\ncomment malformed corpus\n{extra}element vertex {n}\nproperty float x\nproperty float y\nproperty float z\nend_header\n"
    )
}

fn ply_body(enc: &str, pts: &[[f32; 3]]) -> Vec<u8> {
    let mut b = Vec::new();
    for p in pts {
        match enc {
            "ascii" => b.extend_from_slice(format!("{} {} {}\n", p[0], p[1], p[2]).as_bytes()),
            "binary_little_endian" => p.iter().for_each(|v| b.extend_from_slice(&v.to_le_bytes())),
            _ => p.iter().for_each(|v| b.extend_from_slice(&v.to_be_bytes())),
        }
    }
    b
}

fn ply_family(c: &mut Corpus, enc: &'static str, short: &str) {
    let pts: Vec<[f32; 3]> = points()
        .iter()
        .map(|p| [(p[0] - 1000.0) as f32, (p[1] - 2000.0) as f32, p[2] as f32])
        .collect();
    let body = ply_body(enc, &pts);
    let file = |head: String, body: &[u8]| {
        let mut b = head.into_bytes();
        b.extend_from_slice(body);
        b
    };
    let h = |extra: &str| ply_header(enc, &N.to_string(), extra);
    let tag = format!("ply_{short}");
    let v = |c: &mut Corpus, what: &str, b: Vec<u8>, o: Outcome| {
        c.add(format!("{tag}_{what}.ply"), b, o)
    };
    v(c, "ok", file(h(""), &body), Accepted(N));
    v(
        c,
        "junk_1e12",
        file(h("element junk 1000000000000\n"), &body),
        Refused("declares 1000000000000 records but no properties"),
    );
    let dup = h("").replace("property float x\n", "property float x\nproperty float x\n");
    v(
        c,
        "duplicate_x",
        file(dup, &body),
        Refused("property x appears twice"),
    );
    let two = h("").replace("comment", &format!("format {enc} 1.0\ncomment"));
    v(
        c,
        "two_formats",
        file(two, &body),
        Refused("a second format line"),
    );
    let twov = h("").replace(
        "end_header\n",
        "element vertex 1\nproperty float x\nproperty float y\nproperty float z\nend_header\n",
    );
    v(
        c,
        "two_vertex",
        file(twov, &body),
        Refused("a second vertex element"),
    );
    let ty = h("").replace("property float y", "property float128 y");
    v(
        c,
        "type_float128",
        file(ty, &body),
        Refused("unknown property type"),
    );
    let noz = h("").replace("property float z\n", "");
    v(
        c,
        "no_z",
        file(noz, &body),
        Refused("no x, y and z properties"),
    );
    let head = h("");
    v(
        c,
        "cut_header",
        head.as_bytes()[..head.len() - 15].to_vec(),
        Refused("truncated header"),
    );
    v(
        c,
        "count_4e9",
        file(ply_header(enc, "4000000000", ""), &body),
        Refused("declares 4000000000 vertex records"),
    );
    let mut nan = pts.clone();
    nan[0][1] = f32::NAN;
    v(
        c,
        "nan",
        file(h(""), &ply_body(enc, &nan)),
        Refused("vertex 0 has a non-finite coordinate (y = NaN)"),
    );
    let half = &body[..body.len() / 2];
    let o = if enc == "ascii" {
        Refused("the file ends early")
    } else {
        Refused("declares 40 vertex records")
    };
    v(c, "cut_body", file(h(""), half), o);
    let mut far = pts.clone();
    far[0][0] = -3e38;
    far[1][0] = 3e38;
    v(
        c,
        "extent_6e38",
        file(h(""), &ply_body(enc, &far)),
        Refused("the points span 6e38"),
    );
    if enc == "ascii" {
        let four: String = String::from_utf8(body.clone())
            .unwrap()
            .lines()
            .map(|l| format!("{l} 9\n"))
            .collect();
        v(
            c,
            "four_values",
            file(h(""), four.as_bytes()),
            Refused("has 1 more value than its record needs"),
        );
        let mut latin = body.clone();
        let at = latin.iter().position(|&b| b == b' ').unwrap();
        latin[at] = 0xE9;
        v(c, "not_utf8", file(h(""), &latin), Refused("is not text"));
    }
}

fn main() {
    let out = std::env::args()
        .nth(1)
        .unwrap_or_else(|| "tests/data/malformed".into());
    let out = Path::new(&out);
    std::fs::create_dir_all(out).unwrap();
    let mut c = Corpus { rows: Vec::new() };
    for (minor, format) in [(0, 1), (1, 1), (2, 3), (3, 1), (4, 6)] {
        las_family(&mut c, minor, format);
    }
    laz_family(&mut c, 2, 3);
    laz_family(&mut c, 4, 6);
    ply_family(&mut c, "ascii", "ascii");
    ply_family(&mut c, "binary_little_endian", "le");
    ply_family(&mut c, "binary_big_endian", "be");
    let mut csv = String::from("file,outcome,detail\n");
    let mut total = 0;
    for (name, bytes, o) in &c.rows {
        std::fs::write(out.join(name), bytes).unwrap();
        total += bytes.len();
        match o {
            Accepted(n) => csv += &format!("{name},accepted,{n}\n"),
            Refused(f) => {
                // The detail is the rest of the line after the second comma (it may hold commas).
                assert!(!f.contains('\n'), "{f}");
                csv += &format!("{name},refused,{f}\n")
            }
        }
    }
    std::fs::write(out.join("expected.csv"), csv).unwrap();
    println!(
        "{} files, {total} bytes, in {}",
        c.rows.len(),
        out.display()
    );
}
