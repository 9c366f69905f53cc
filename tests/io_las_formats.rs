//! Every LAS version 1.0–1.4 and point format 0–10 that the version allows, written by the
//! `las` crate's own writer (an independent encoder), then read by ours.

use std::io::Cursor;

use equiscan::io::read_cloud;
use las::{Builder, Color, Point, Transform, Vector, Version, Writer, point::Format};

fn points(format: &Format) -> Vec<Point> {
    (0..50)
        .map(|i| {
            let f = i as f64;
            Point {
                x: 440_000.0 + f * 0.25,
                y: 3_750_000.0 - f * 0.5,
                z: 12.0 + f * 0.01,
                intensity: 100 + i as u16,
                return_number: 1 + (i % 3) as u8,
                number_of_returns: 3,
                classification: las::point::Classification::new((i % 10) as u8).unwrap(),
                gps_time: format.has_gps_time.then_some(1000.0 + f),
                color: format
                    .has_color
                    .then_some(Color::new(i as u16, 2 * i as u16, 60000)),
                nir: format.has_nir.then_some(7),
                waveform: format.has_waveform.then(Default::default),
                ..Default::default()
            }
        })
        .collect()
}

#[test]
fn all_versions_and_point_formats_read_back() {
    let dir = tempfile::tempdir().unwrap();
    let mut tried = 0;
    for minor in 0..=4u8 {
        for f in 0..=10u8 {
            let format = Format::new(f).unwrap();
            let mut b = Builder::from((1, minor));
            b.version = Version::new(1, minor);
            b.point_format = format;
            b.transforms = Vector {
                x: Transform {
                    scale: 0.01,
                    offset: 440_000.0,
                },
                y: Transform {
                    scale: 0.01,
                    offset: 3_750_000.0,
                },
                z: Transform {
                    scale: 0.01,
                    offset: 0.0,
                },
            };
            let Ok(header) = b.into_header() else {
                continue; // the version does not allow this format
            };
            let pts = points(&format);
            let mut w = Writer::new(Cursor::new(Vec::new()), header).unwrap();
            for p in &pts {
                w.write_point(p.clone()).unwrap();
            }
            let bytes = w.into_inner().unwrap().into_inner();
            let path = dir.path().join(format!("v1{minor}_f{f}.las"));
            std::fs::write(&path, &bytes).unwrap();

            let (cloud, info) =
                read_cloud(&path).unwrap_or_else(|e| panic!("1.{minor} format {f}: {e}"));
            let ctx = format!("LAS 1.{minor} format {f}");
            assert_eq!(info.version, format!("1.{minor}"), "{ctx}");
            assert_eq!(info.point_format, Some(f), "{ctx}");
            assert_eq!(cloud.len(), pts.len(), "{ctx}");
            for (i, p) in pts.iter().enumerate() {
                let g = cloud.global(i);
                assert!(
                    (g[0] - p.x).abs() < 1e-6
                        && (g[1] - p.y).abs() < 1e-6
                        && (g[2] - p.z).abs() < 1e-6,
                    "{ctx} point {i}: {g:?}"
                );
                assert_eq!(
                    cloud.intensity.as_ref().unwrap()[i],
                    p.intensity as f32,
                    "{ctx}"
                );
                assert_eq!(
                    cloud.return_number.as_ref().unwrap()[i],
                    p.return_number,
                    "{ctx}"
                );
                assert_eq!(
                    cloud.classification.as_ref().unwrap()[i],
                    u8::from(p.classification),
                    "{ctx}"
                );
                assert_eq!(cloud.gps_time.as_ref().map(|v| v[i]), p.gps_time, "{ctx}");
                assert_eq!(
                    cloud.color.as_ref().map(|v| v[i]),
                    p.color.map(|c| [c.red, c.green, c.blue]),
                    "{ctx}"
                );
            }
            tried += 1;
        }
    }
    // 1.0/1.1: formats 0-1; 1.2: 0-3; 1.3: 0-5; 1.4: 0-10.
    assert_eq!(tried, 2 + 2 + 4 + 6 + 11);
}
