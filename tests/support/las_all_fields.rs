//! A LAS 1.4 file of any point format 0–10 with every field varied, described Extra Bytes and
//! a WKT CRS, written by the `las` crate's own writer (an independent encoder). Shared by the
//! attribute round-trip and `apply` tests (`#[path]`-included).

use std::io::Cursor;
use std::path::Path;

use las::point::{Classification, Format, ScanDirection};
use las::raw::point::Waveform;
use las::{Builder, Color, Point, Transform, Vector, Version, Vlr, Writer};

/// A small seeded generator (SplitMix64), so that every field gets varied values.
pub struct Mix(pub u64);
impl Mix {
    pub fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    pub fn unit(&mut self) -> f64 {
        (self.next() >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// An Extra Bytes record describing a u16 `tree_id` and an f64 `height_above` (LAS 1.4 R15
/// Table 24: data type at byte 2, name at 4..36; types 3 = u16, 10 = f64; from memory).
pub fn extra_bytes_vlr() -> Vlr {
    let mut data = Vec::new();
    for (t, name) in [(3u8, "tree_id"), (10u8, "height_above")] {
        let mut d = [0u8; 192];
        d[2] = t;
        d[4..4 + name.len()].copy_from_slice(name.as_bytes());
        data.extend_from_slice(&d);
    }
    Vlr {
        user_id: "LASF_Spec".into(),
        record_id: 4,
        description: "Extra Bytes".into(),
        data,
    }
}

pub const WKT: &str =
    r#"PROJCS["ETRS89 / UTM zone 32N",GEOGCS["ETRS89"],UNIT["metre",1],AUTHORITY["EPSG","25832"]]"#;

/// A LAS 1.4 file of point format `f` with every field varied, 10 extra bytes per point
/// (described), and a WKT CRS.
pub fn write_format(path: &Path, f: u8, n: usize) {
    let mut format = Format::new(f).unwrap();
    format.extra_bytes = 10;
    let mut b = Builder::from((1, 4));
    b.version = Version::new(1, 4);
    b.point_format = format;
    let t = |o: f64| Transform {
        scale: 0.001,
        offset: o,
    };
    b.transforms = Vector {
        x: t(512_000.0),
        y: t(5_403_000.0),
        z: t(0.0),
    };
    b.vlrs.push(extra_bytes_vlr());
    let mut header = b.into_header().unwrap();
    header.set_wkt_crs(WKT.as_bytes().to_vec()).unwrap();
    let mut w = Writer::new(Cursor::new(Vec::new()), header).unwrap();
    let mut r = Mix(f as u64 + 1);
    for i in 0..n {
        let ext = format.is_extended;
        let nret = 1 + (r.next() % if ext { 15 } else { 7 }) as u8;
        let mut extra = ((i % 60000) as u16).to_le_bytes().to_vec();
        extra.extend_from_slice(&(r.unit() * 30.0).to_le_bytes());
        let p = Point {
            // Whole steps of the scale, so the stored values are the ones given.
            x: 512_340.0 + (r.next() % 200_000) as f64 * 0.001,
            y: 5_403_210.0 + (r.next() % 150_000) as f64 * 0.001,
            z: 40.0 + (r.next() % 20_000) as f64 * 0.001,
            intensity: r.next() as u16,
            return_number: 1 + (r.next() % nret as u64) as u8,
            number_of_returns: nret,
            scan_direction: if r.next().is_multiple_of(2) {
                ScanDirection::LeftToRight
            } else {
                ScanDirection::RightToLeft
            },
            is_edge_of_flight_line: r.next().is_multiple_of(2),
            classification: Classification::new((r.next() % if ext { 64 } else { 32 }) as u8)
                .unwrap_or(Classification::Ground),
            is_synthetic: r.next().is_multiple_of(2),
            is_key_point: r.next().is_multiple_of(2),
            is_withheld: r.next().is_multiple_of(2),
            is_overlap: ext && r.next().is_multiple_of(2),
            scanner_channel: if ext { (r.next() % 4) as u8 } else { 0 },
            scan_angle: if ext {
                (r.next() % 2000) as f32 * 0.006 - 6.0
            } else {
                (r.next() % 180) as f32 - 90.0
            },
            user_data: r.next() as u8,
            point_source_id: r.next() as u16,
            gps_time: format.has_gps_time.then(|| 1e8 + r.unit() * 1e5),
            color: format
                .has_color
                .then(|| Color::new(r.next() as u16, r.next() as u16, r.next() as u16)),
            nir: format.has_nir.then(|| r.next() as u16),
            waveform: format.has_waveform.then(|| Waveform {
                wave_packet_descriptor_index: 1,
                byte_offset_to_waveform_data: r.next() % 100_000,
                waveform_packet_size_in_bytes: 256,
                return_point_waveform_location: r.unit() as f32,
                x_t: 0.6,
                y_t: 0.0,
                z_t: -0.8,
            }),
            extra_bytes: extra,
        };
        w.write_point(p).unwrap();
    }
    std::fs::write(path, w.into_inner().unwrap().into_inner()).unwrap();
}
