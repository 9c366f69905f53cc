//! Hostile files: every reader row of the hardening table, each with its recipe. Each file is
//! refused with one line `FILE: what is wrong; what to do` (exit 2 from `info`, nothing on
//! stdout), promptly, without a panic or a large allocation; or, where noted, accepted.
//! Header offsets are those of the ASPRS LAS 1.4 R15 specification, Table 3 (from memory):
//! point data offset 96 (u32), point format 104, legacy count 107 (u32), scale 131/139/147,
//! offset 155/163/171 (f64), 64-bit count 247 (u64); the LAZ chunk table offset is the i64 at
//! the start of the point data (LASzip convention, from memory).

use std::path::{Path, PathBuf};
use std::process::Command;

use equiscan::error::Kind;
use equiscan::io::{PointSource, read_cloud};

fn repo(rel: &str) -> Vec<u8> {
    std::fs::read(Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)).unwrap()
}

struct Dir(tempfile::TempDir);
impl Dir {
    fn new() -> Self {
        Dir(tempfile::tempdir().unwrap())
    }
    fn file(&self, name: &str, bytes: &[u8]) -> PathBuf {
        let p = self.0.path().join(name);
        std::fs::write(&p, bytes).unwrap();
        p
    }
}

/// The library's refusal of `path` (via `read_cloud` and the point source alike), checked for
/// the one-line form, the needle and the kind; then `equiscan info` prints exactly it.
fn refused(path: &Path, needle: &str) {
    let err = read_cloud(path).expect_err("must be refused");
    let msg = err.to_string();
    assert!(!msg.contains('\n'), "one line: {msg}");
    assert!(msg.starts_with(&format!("{}: ", path.display())), "{msg}");
    assert!(msg.contains("; "), "says what to do: {msg}");
    assert!(msg.contains(needle), "{msg:?} should mention {needle:?}");
    assert!(msg.len() < 400, "short: {msg}");
    assert_eq!(err.kind(), Kind::Input, "{msg}");
    // The point source refuses it too, at open or while reading.
    let streamed = PointSource::open(path).and_then(|mut s| {
        while s.next_chunk(1000)?.is_some() {}
        Ok(())
    });
    assert!(
        streamed.is_err(),
        "point source accepted {}",
        path.display()
    );
    let out = Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .arg("info")
        .arg(path)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(out.stdout.is_empty());
    assert_eq!(String::from_utf8(out.stderr).unwrap(), format!("{msg}\n"));
}

fn u32_at(b: &[u8], o: usize) -> u32 {
    u32::from_le_bytes(b[o..o + 4].try_into().unwrap())
}

const XYZ_ASCII: &str = "ply\nformat ascii 1.0\nelement vertex 3\nproperty float x\nproperty float y\nproperty float z\nend_header\n";

#[test]
fn ply_huge_element_before_the_vertices_does_not_hang() {
    let d = Dir::new();
    // The recipe of the report: an element with a 10^12 count and no properties.
    let t = std::time::Instant::now();
    refused(
        &d.file(
            "h.ply",
            b"ply\nformat ascii 1.0\nelement junk 1000000000000\nelement vertex 3\nproperty float x\nproperty float y\nproperty float z\nend_header\n0 0 0\n1 0 0\n0 1 0\n",
        ),
        "element junk declares 1000000000000 records but no properties",
    );
    // With a property, the count is checked against the bytes present (ascii and binary).
    refused(
        &d.file(
            "h2.ply",
            b"ply\nformat ascii 1.0\nelement junk 1000000000000\nproperty uchar a\nelement vertex 3\nproperty float x\nproperty float y\nproperty float z\nend_header\n0 0 0\n1 0 0\n0 1 0\n",
        ),
        "declares 1000000000000 junk records",
    );
    let mut b = b"ply\nformat binary_little_endian 1.0\nelement junk 100000000000\nproperty list uchar int a\nelement vertex 1\nproperty float x\nproperty float y\nproperty float z\nend_header\n".to_vec();
    b.extend_from_slice(&[0u8; 13]);
    refused(&d.file("h3.ply", &b), "declares 100000000000 junk records");
    // Well below a second for all of it (the report: hours); not a timed assertion of speed,
    // a hang detector with a wide margin.
    assert!(t.elapsed().as_secs() < 60);
}

fn depot() -> Vec<u8> {
    repo("scans/depot_station1.laz")
}

#[test]
fn laz_chunk_table_damage_is_refused_before_the_decoder() {
    let d = Dir::new();
    let laz = depot();
    let start = u32_at(&laz, 96) as usize; // 475 in this file
    let table = i64::from_le_bytes(laz[start..start + 8].try_into().unwrap()) as usize;
    // Every byte from the chunk table offset to the end set to 0xff (the report's recipe):
    // the offset becomes -1 and the file's last 8 bytes are no offset either.
    let mut b = laz.clone();
    b[start..].fill(0xff);
    refused(&d.file("ff.laz", &b), "chunk table offset is -1");
    // The table's entries all 0xff: its chunk count becomes 0xFFFFFFFF.
    let mut b = laz.clone();
    b[table..].fill(0xff);
    refused(&d.file("entries.laz", &b), "lists 4294967295 chunks");
    // Only the chunk count (u32 after the table's version) set to 0xFFFFFFFF: no 68 GB
    // allocation.
    let mut b = laz.clone();
    b[table + 4..table + 8].copy_from_slice(&u32::MAX.to_le_bytes());
    refused(&d.file("count.laz", &b), "lists 4294967295 chunks");
    // Offset -1 with the table still at its place: not "invalid argument (os error 22)".
    let mut b = laz.clone();
    b[start..start + 8].copy_from_slice(&(-1i64).to_le_bytes());
    refused(&d.file("neg.laz", &b), "LAZ chunk table offset");
    // An offset past the end.
    let mut b = laz.clone();
    b[start..start + 8].copy_from_slice(&(laz.len() as i64 + 100).to_le_bytes());
    refused(&d.file("past.laz", &b), "lies outside the");
}

#[test]
fn laz_bit_flips_say_corrupt_compressed_data() {
    let d = Dir::new();
    let laz = depot();
    let start = u32_at(&laz, 96) as usize;
    let mut b = laz.clone();
    for x in &mut b[start + 5000..start + 5100] {
        *x ^= 0x55;
    }
    refused(&d.file("flip.laz", &b), "corrupt compressed data");
}

#[test]
fn extents_beyond_f32_offsets_are_refused_at_read_time() {
    let d = Dir::new();
    // Double coordinates 1e30 apart.
    let mut b = b"ply\nformat binary_little_endian 1.0\nelement vertex 3\nproperty double x\nproperty double y\nproperty double z\nend_header\n".to_vec();
    for v in [0.0f64, 0.0, 0.0, 1e30, 0.0, 0.0, 0.0, 1.0, 0.0] {
        b.extend_from_slice(&v.to_le_bytes());
    }
    let far = d.file("far.ply", &b);
    refused(&far, "the points span 1e30 file units along x");
    // Floats spanning ±3e38.
    let mut b = b"ply\nformat binary_little_endian 1.0\nelement vertex 2\nproperty float x\nproperty float y\nproperty float z\nend_header\n".to_vec();
    for v in [-3e38f32, 0.0, 0.0, 3e38, 0.0, 0.0] {
        b.extend_from_slice(&v.to_le_bytes());
    }
    refused(
        &d.file("f32.ply", &b),
        "the points span 6e38 file units along x",
    );
    // `align` and `features` stop at reading, with the one line naming the file.
    for args in [
        vec![
            "align".to_string(),
            far.display().to_string(),
            far.display().to_string(),
        ],
        vec![
            "features".to_string(),
            far.display().to_string(),
            "-o".to_string(),
            d.0.path().join("o.npy").display().to_string(),
        ],
    ] {
        let out = Command::new(env!("CARGO_BIN_EXE_equiscan"))
            .args(&args)
            .output()
            .unwrap();
        let err = String::from_utf8(out.stderr).unwrap();
        assert_eq!(out.status.code(), Some(2), "{err}");
        assert_eq!(err.lines().count(), 1, "{err}");
        assert!(err.starts_with(&far.display().to_string()), "{err}");
        assert!(err.contains("span 1e30"), "{err}");
    }
    assert!(!d.0.path().join("o.npy").exists());
}

#[test]
fn lies_too_far_prints_compact_numbers() {
    let d = Dir::new();
    let mut b = b"ply\nformat binary_little_endian 1.0\nelement vertex 2\nproperty double x\nproperty double y\nproperty double z\nend_header\n".to_vec();
    for v in [0.0f64, 0.0, 0.0, 1e300, 0.0, 0.0] {
        b.extend_from_slice(&v.to_le_bytes());
    }
    refused(
        &d.file("far.ply", &b),
        "vertex 1 lies too far from the first vertex (x = 1e300)",
    );
}

fn autzen() -> Vec<u8> {
    repo("tests/data/las/autzen.las")
}

#[test]
fn las_non_finite_or_absurd_scale_and_offset_are_refused() {
    let d = Dir::new();
    for (at, v, needle) in [
        (155usize, f64::NAN, "the x offset is NaN"),
        (163, f64::INFINITY, "the y offset is inf"),
        (131, 1e300, "the x scale factor is 1e300"),
        (147, f64::NAN, "the z scale factor is NaN"),
        (139, 0.0, "the y scale factor is 0"),
    ] {
        let mut b = autzen();
        b[at..at + 8].copy_from_slice(&v.to_le_bytes());
        refused(&d.file("s.las", &b), needle);
    }
    // Non-finite header bounds (bytes 179–226) do not change the points: accepted, and the
    // summary leaves the bounds out instead of printing NaN.
    let mut b = autzen();
    b[179..187].copy_from_slice(&f64::NAN.to_le_bytes());
    let p = d.file("nanbounds.las", &b);
    let (cloud, info) = read_cloud(&p).unwrap();
    assert_eq!((cloud.len(), info.header_bounds), (106, None));
    assert!(cloud.positions.iter().flatten().all(|v| v.is_finite()));
}

/// A record may continue over lines (tests/io_ply.rs) but must end at a line's end.
#[test]
fn ascii_ply_records_must_fill_their_line() {
    let d = Dir::new();
    // 4 values per line for 3 properties: line 8 is the first vertex.
    let four = format!("{XYZ_ASCII}0 0 0 9\n1 0 0 9\n0 1 0 9\n");
    refused(
        &d.file("four.ply", four.as_bytes()),
        "line 8 has 1 more value than its record needs (vertex 0 of 3)",
    );
    // A short line.
    // (Long enough that the declared count alone is not what refuses it.)
    let short = format!("{XYZ_ASCII}10 10 10\n1 0\n10 10 10\n");
    refused(
        &d.file("short.ply", short.as_bytes()),
        "vertex 1 of 3 starts on line 9 and ends inside line 10, leaving 2 values (a short or long line)",
    );
    // An extra value on the last line.
    let last = format!("{XYZ_ASCII}0 0 0\n1 0 0\n0 1 0 5\n");
    refused(
        &d.file("last.ply", last.as_bytes()),
        "line 10 has 1 more value",
    );
    // Blank lines between records and trailing spaces are fine.
    let ok = format!("{XYZ_ASCII}0 0 0\n\n1 0 0 \r\n0 1 0\n");
    let (cloud, _) = read_cloud(&d.file("ok.ply", ok.as_bytes())).unwrap();
    assert_eq!(
        cloud.positions,
        vec![[0.0, 0.0, 0.0], [1.0, 0.0, 0.0], [0.0, 1.0, 0.0]]
    );
    // Bytes that are not UTF-8 in the body: the line is named, not the path or permissions.
    let mut bin = XYZ_ASCII.as_bytes().to_vec();
    bin.extend_from_slice(b"0 0 0\n1 \xff\xfe 0\n0 1 0\n");
    refused(&d.file("latin.ply", &bin), "line 9 is not text");
}

#[test]
fn ambiguous_ply_headers_are_refused() {
    let d = Dir::new();
    refused(
        &d.file(
            "dupx.ply",
            b"ply\nformat ascii 1.0\nelement vertex 1\nproperty float x\nproperty float x\nproperty float y\nproperty float z\nend_header\n1 2 3 4\n",
        ),
        "header line 5: property x appears twice in element vertex",
    );
    refused(
        &d.file(
            "twoformats.ply",
            b"ply\nformat ascii 1.0\nformat binary_little_endian 1.0\nelement vertex 1\nproperty float x\nproperty float y\nproperty float z\nend_header\n1 2 3\n",
        ),
        "header line 3: a second format line",
    );
    refused(
        &d.file(
            "twovertex.ply",
            b"ply\nformat ascii 1.0\nelement vertex 1\nproperty float x\nproperty float y\nproperty float z\nelement vertex 1\nproperty float x\nproperty float y\nproperty float z\nend_header\n1 2 3\n4 5 6\n",
        ),
        "header line 7: a second vertex element",
    );
}

/// Offset of the first VLR's data and its length field, for a file with VLRs.
fn first_vlr(b: &[u8]) -> (usize, usize) {
    let header_size = u16::from_le_bytes([b[94], b[95]]) as usize;
    // VLR header: reserved 2, user id 16, record id 2, record length 2 (at +20), description 32.
    (header_size + 54, header_size + 20)
}

#[test]
fn las_extra_bytes_and_counts_that_cannot_be_right_are_refused() {
    let d = Dir::new();
    let eb = repo("tests/data/las/equiscan_extra_bytes.las");
    let (data, len_at) = first_vlr(&eb);
    assert_eq!(
        &eb[len_at - 18..len_at - 9],
        b"LASF_Spec",
        "the first VLR is Extra Bytes"
    );
    let mut b = eb.clone();
    b[data + 2] = 99;
    refused(
        &d.file("type99.las", &b),
        "has data type 99 (0 to 30 are defined)",
    );
    // A record length that is not a multiple of 192: one byte less, the byte left over is
    // padding before the points.
    let mut b = eb.clone();
    let l = u16::from_le_bytes([b[len_at], b[len_at + 1]]);
    b[len_at..len_at + 2].copy_from_slice(&(l - 1).to_le_bytes());
    refused(
        &d.file("len.las", &b),
        "not a whole number of 192-byte descriptors",
    );
    // LAS 1.4: a 64-bit count of 10^12 beside a correct legacy count.
    assert_eq!((eb[24], eb[25]), (1, 4));
    let n = u64::from_le_bytes(eb[247..255].try_into().unwrap());
    let mut b = eb.clone();
    b[107..111].copy_from_slice(&(n as u32).to_le_bytes());
    b[247..255].copy_from_slice(&1_000_000_000_000u64.to_le_bytes());
    refused(
        &d.file("count.las", &b),
        &format!("({n} in the legacy field, 1000000000000 in the 64-bit field)"),
    );
    // The same legacy count beside an equal 64-bit count is fine.
    let mut b = eb.clone();
    b[107..111].copy_from_slice(&(n as u32).to_le_bytes());
    assert_eq!(
        read_cloud(&d.file("same.las", &b)).unwrap().0.len() as u64,
        n
    );
}

#[test]
fn point_format_99_is_named_as_stored() {
    let d = Dir::new();
    let mut b = autzen();
    b[104] = 99;
    refused(
        &d.file("f99.las", &b),
        "LAS point format 99 is not read here",
    );
}

/// Found by tests/io_fuzz.rs: a LAZ record (LASzip VLR) with a huge fixed chunk size made the
/// decoder allocate 130 GB for the last chunk and abort (0xFFFFFFFF itself means "variable-size
/// chunks", from memory, so 0x7FFFFFFF is used here). The VLR's data follows its
/// 54-byte header (user id "laszip encoded" at +2); the chunk size is the u32 at data + 12
/// (compressor, coder, version, revision, options before it; LASzip layout, from memory).
#[test]
fn laz_chunk_size_beyond_memory_is_refused() {
    let d = Dir::new();
    let mut b = depot();
    let at = b
        .windows(14)
        .position(|w| w == b"laszip encoded")
        .expect("LASzip VLR");
    let data = at - 2 + 54;
    assert_eq!(u32_at(&b, data + 12), 50_000, "the default chunk size");
    b[data + 12..data + 16].copy_from_slice(&0x7FFF_FFFFu32.to_le_bytes());
    refused(
        &d.file("chunk.laz", &b),
        "declares chunks of 2147483647 points",
    );
}
