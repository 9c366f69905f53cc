//! LAZ output for the depot stations (the parts' PLY files go through `equiscan::io::write_ply`).

use las::point::Format;
use las::{Builder, Point, Transform, Vector, Writer};
use std::fs::File;
use std::io::BufWriter;
use std::path::Path;

/// Text for the LAS header's generating-software field (at most 32 bytes).
pub const SOFTWARE: &str = "equiscan demo generator";
/// Text for the LAS header's system-identifier field (at most 32 bytes).
pub const SYSTEM: &str = "synthetic scan, invented site";

/// One point of a station file, in file coordinates.
#[derive(Debug, Clone, Copy)]
pub struct LasPoint {
    /// Coordinates in the file's frame, metres.
    pub xyz: [f64; 3],
    /// Intensity.
    pub intensity: u16,
    /// ASPRS class.
    pub class: u8,
    /// GPS time.
    pub time: f64,
    /// Beam elevation, degrees (written as the scan angle).
    pub angle: f32,
}

/// Writes a LAZ file (LAS 1.4, point format 1, scale 1 mm) with the given coordinate offset.
pub fn write_laz(
    path: &Path,
    points: &[LasPoint],
    offset: [f64; 3],
    source_id: u16,
) -> Result<(), Box<dyn std::error::Error>> {
    let mut builder = Builder::from((1, 4));
    let mut format = Format::new(1)?;
    format.is_compressed = true;
    builder.point_format = format;
    builder.generating_software = SOFTWARE.to_string();
    builder.system_identifier = SYSTEM.to_string();
    builder.file_source_id = source_id;
    builder.transforms = Vector {
        x: Transform {
            scale: 0.001,
            offset: offset[0],
        },
        y: Transform {
            scale: 0.001,
            offset: offset[1],
        },
        z: Transform {
            scale: 0.001,
            offset: offset[2],
        },
    };
    let header = builder.into_header()?;
    let file = File::create(path)?;
    let mut writer = Writer::new(BufWriter::new(file), header)?;
    for p in points {
        writer.write_point(Point {
            x: p.xyz[0],
            y: p.xyz[1],
            z: p.xyz[2],
            intensity: p.intensity,
            return_number: 1,
            number_of_returns: 1,
            classification: las::point::Classification::new(p.class)?,
            scan_angle: p.angle,
            point_source_id: source_id,
            gps_time: Some(p.time),
            ..Default::default()
        })?;
    }
    writer.close()?;
    Ok(())
}
