//! One sink per feature-file format, fed chunks of rows in order.

use std::io::Write;

use rayon::prelude::*;

use crate::cloud::Cloud;
use crate::descriptor::Features;
use crate::error::{Error, Result};
use crate::io::{DirectAppend, Finished, LasRowWriter, PlyLayout, TempFile, npy_header};

use super::parquet::ParquetSink;
use super::{CentreList, FileSpec, Format, las_options, push_row, row_parts};

/// A data file being written.
pub(super) enum Sink {
    Npy(Hashed),
    Csv(Hashed),
    Ply {
        file: TempFile,
        layout: PlyLayout,
        points: bool,
    },
    Las {
        writer: Box<LasRowWriter>,
        points: bool,
    },
    Parquet(Box<ParquetSink>),
}

/// A data file that is complete under its temporary name.
pub(super) enum Done {
    /// No sidecar.
    Alone(Finished),
    /// With a sidecar still to write: the data file's size and CRC-32.
    WithSidecar {
        file: Finished,
        bytes: u64,
        crc32: u32,
    },
}

/// A temporary file that counts and checksums what is written to it.
pub(super) struct Hashed {
    file: TempFile,
    crc: crc32fast::Hasher,
    bytes: u64,
    /// NPY: the bytes go to the file in aligned blocks past the page cache
    /// ([`DirectAppend`]) instead of through the file's buffered writer.
    direct: Option<DirectAppend>,
}

impl Hashed {
    fn new(file: TempFile) -> Self {
        Hashed {
            file,
            crc: crc32fast::Hasher::new(),
            bytes: 0,
            direct: None,
        }
    }

    /// A [`Hashed`] whose bytes are appended in blocks past the page cache.
    fn direct(file: TempFile) -> Result<Self> {
        let direct = DirectAppend::open(file.temp_path(), file.target())?;
        Ok(Hashed {
            direct: Some(direct),
            ..Hashed::new(file)
        })
    }

    fn put(&mut self, b: &[u8]) -> Result<()> {
        self.crc.update(b);
        self.bytes += b.len() as u64;
        if let Some(d) = self.direct.as_mut() {
            return d.append(b);
        }
        let target = self.file.target().to_path_buf();
        self.file
            .writer()
            .write_all(b)
            .map_err(|e| Error::io(&target, &e))
    }

    /// [`Hashed::put`] of the `<f4` bytes of `v`.
    fn put_f32(&mut self, v: &[f32]) -> Result<()> {
        #[cfg(target_endian = "little")]
        {
            // SAFETY: any f32 is four initialised bytes, u8 has alignment 1, and the length
            // is the slice's size in bytes; on a little-endian target these are the `<f4`
            // bytes.
            self.put(unsafe {
                std::slice::from_raw_parts(v.as_ptr().cast::<u8>(), std::mem::size_of_val(v))
            })
        }
        #[cfg(not(target_endian = "little"))]
        {
            let bytes: Vec<u8> = v.iter().flat_map(|x| x.to_le_bytes()).collect();
            self.put(&bytes)
        }
    }

    fn done(self) -> Result<Done> {
        if let Some(d) = self.direct {
            d.finish()?;
        }
        Ok(Done::WithSidecar {
            bytes: self.bytes,
            crc32: self.crc.finalize(),
            file: self.file.finish()?,
        })
    }
}

impl Sink {
    /// `wide`: whether a PLY colour exceeds 255, when the caller knows it (`cloud` is then a
    /// frame without points); `None`: found from `cloud`'s colours.
    pub(super) fn create(
        cloud: &Cloud,
        spec: &FileSpec,
        names: &[String],
        centres: &CentreList,
        wide: Option<bool>,
    ) -> Result<Sink> {
        let path = &spec.path;
        let points = centres.are_points();
        Ok(match spec.format {
            Format::Npy => {
                let mut h = Hashed::direct(TempFile::create(path)?)?;
                h.put(&npy_header(centres.len(), names.len()))?;
                Sink::Npy(h)
            }
            Format::Csv => {
                let mut h = Hashed::new(TempFile::create(path)?);
                h.put(format!("{}\n", names.join(",")).as_bytes())?;
                Sink::Csv(h)
            }
            Format::Ply => {
                // The colour is written as ushort when a centre's colour exceeds 255.
                let any_wide = |c: &[[u16; 3]]| match centres {
                    CentreList::All(_) => c.iter().flatten().any(|&v| v > 255),
                    CentreList::Points(ix) => ix.iter().any(|&i| c[i].iter().any(|&v| v > 255)),
                    CentreList::Positions(_) => false,
                };
                let wide = wide.unwrap_or_else(|| cloud.color.as_deref().is_some_and(any_wide));
                let like = if points {
                    attribute_presence(cloud)
                } else {
                    Cloud::new(cloud.origin, Vec::new())
                };
                let cols: Vec<&str> = names.iter().map(String::as_str).collect();
                let layout = PlyLayout::new(&like, Some(wide), &cols, centres.len());
                let mut file = TempFile::create(path)?;
                file.writer()
                    .write_all(layout.header().as_bytes())
                    .map_err(|e| Error::io(path, &e))?;
                Sink::Ply {
                    file,
                    layout,
                    points,
                }
            }
            Format::Las | Format::Laz => {
                let like = if points {
                    attribute_presence(cloud)
                } else {
                    Cloud::new(cloud.origin, Vec::new())
                };
                let writer = LasRowWriter::create(path, &like, names, &las_options(&spec.input))?;
                Sink::Las {
                    writer: Box::new(writer),
                    points,
                }
            }
            Format::Parquet => {
                Sink::Parquet(Box::new(ParquetSink::create(cloud, spec, names, points)?))
            }
        })
    }

    pub(super) fn push(&mut self, cloud: &Cloud, f: &Features, names: &[String]) -> Result<()> {
        let nc = names.len();
        let point_of = |i: usize| f.indices.as_ref().map(|ix| ix[i]);
        match self {
            Sink::Npy(h) => {
                // Each row goes straight from the chunk into the file's block ([`row_parts`],
                // [`DirectAppend`]).
                let mut head = Vec::with_capacity(3 + 2 * f.recipe.scales());
                for i in 0..f.len() {
                    head.clear();
                    let rest = row_parts(f, i, true, &mut head);
                    h.put_f32(&head)?;
                    for part in rest {
                        h.put_f32(part)?;
                    }
                }
                Ok(())
            }
            Sink::Csv(h) => {
                // Lines are formatted in parallel and written in order.
                let lines: Vec<String> = (0..f.len())
                    .into_par_iter()
                    .map(|i| {
                        use std::fmt::Write as _;
                        let mut vals = Vec::with_capacity(nc);
                        push_row(f, i, true, &mut vals);
                        let mut line = String::with_capacity(12 * nc);
                        for (k, v) in vals.iter().enumerate() {
                            if k > 0 {
                                line.push(',');
                            }
                            let _ = write!(line, "{v}");
                        }
                        line.push('\n');
                        line
                    })
                    .collect();
                for l in lines {
                    h.put(l.as_bytes())?;
                }
                Ok(())
            }
            Sink::Ply {
                file,
                layout,
                points,
            } => {
                let path = file.target().to_path_buf();
                let mut vals = Vec::with_capacity(nc);
                let mut rec = Vec::with_capacity(64 + 4 * nc);
                for i in 0..f.len() {
                    vals.clear();
                    rec.clear();
                    push_row(f, i, false, &mut vals);
                    let attrs = if *points {
                        point_of(i).map(|p| (cloud, p))
                    } else {
                        None
                    };
                    layout.point(f.positions[i], attrs, &mut rec);
                    for v in &vals {
                        rec.extend_from_slice(&v.to_le_bytes());
                    }
                    file.writer()
                        .write_all(&rec)
                        .map_err(|e| Error::io(&path, &e))?;
                }
                Ok(())
            }
            Sink::Las { writer, points } => {
                let mut vals = Vec::with_capacity(nc * f.len());
                let mut rows = Vec::with_capacity(f.len());
                for i in 0..f.len() {
                    push_row(f, i, false, &mut vals);
                    rows.push((point_of(i).unwrap_or(0), f.positions[i]));
                }
                writer.write_rows(points.then_some(cloud), &rows, &vals)
            }
            Sink::Parquet(p) => p.push(cloud, f),
        }
    }

    pub(super) fn finish(self) -> Result<Done> {
        match self {
            Sink::Npy(h) | Sink::Csv(h) => h.done(),
            Sink::Ply { file, .. } => Ok(Done::Alone(file.finish()?)),
            Sink::Las { writer, .. } => Ok(Done::Alone(writer.finish()?)),
            Sink::Parquet(p) => Ok(Done::Alone(p.finish()?)),
        }
    }
}

/// A cloud without points that has the same attributes present as `cloud` (empty vectors):
/// enough to choose a layout.
fn attribute_presence(cloud: &Cloud) -> Cloud {
    let mut c = Cloud::new(cloud.origin, Vec::new());
    c.normals = cloud.normals.as_ref().map(|_| Vec::new());
    c.color = cloud.color.as_ref().map(|_| Vec::new());
    c.intensity = cloud.intensity.as_ref().map(|_| Vec::new());
    c.classification = cloud.classification.as_ref().map(|_| Vec::new());
    c.return_number = cloud.return_number.as_ref().map(|_| Vec::new());
    c.gps_time = cloud.gps_time.as_ref().map(|_| Vec::new());
    c
}
