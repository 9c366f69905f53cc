//! The Parquet sink of feature files.
//!
//! Format: Apache Parquet, as specified by the Apache Parquet format specification
//! (`parquet-format`, the Thrift definition `parquet.thrift` and its documentation; files start
//! and end with the magic `PAR1`, the footer holds the schema, row groups and key-value
//! metadata). Written with the `parquet` crate's low-level `SerializedFileWriter`, without
//! arrow.
//!
//! Columns, in order, all `REQUIRED` (no nulls):
//! - `x`, `y`, `z`: `DOUBLE`, file coordinates: the cloud's origin plus the f32 offset, added
//!   in f64, and for a LAS/LAZ input put back on the file's grid (`offset + k × scale`, the
//!   nearest `k`), so a LAS coordinate comes out as the file stores it;
//! - the point attributes present in the input, when the rows are points of the cloud:
//!   `intensity` (`FLOAT`), `red`, `green`, `blue` (`INT32` annotated `UINT_16`), `nx`, `ny`,
//!   `nz` (`FLOAT`), `classification`, `return_number` (`INT32` annotated `UINT_8`),
//!   `gps_time` (`DOUBLE`);
//! - the feature columns of [`super::column_names`] (counts, flags, invariants, coefficients),
//!   `FLOAT`, the same values as in an NPY file.
//!
//! Key-value metadata: `equiscan.recipe` (the recipe's JSON), `equiscan.crs` (the input's CRS
//! text, when it has one), `equiscan.input` (the input as named by the caller) and
//! `equiscan.columns` (the layout in words). Snappy compression, dictionary encoding off
//! (float columns gain nothing from it), row groups of about [`ROW_GROUP_BYTES`] of
//! uncompressed values.

use std::io::Write;
use std::sync::Arc;

use parquet::basic::{Compression, ConvertedType, Repetition, Type as Physical};
use parquet::data_type::{DoubleType, FloatType, Int32Type};
use parquet::file::metadata::KeyValue;
use parquet::file::properties::WriterProperties;
use parquet::file::writer::SerializedFileWriter;
use parquet::schema::types::Type;

use crate::cloud::Cloud;
use crate::descriptor::Features;
use crate::error::{Error, Result};
use crate::io::{Finished, TempFile};

use super::{FileSpec, push_row};

/// Uncompressed bytes of values per row group (about 64 MiB; common practice puts row groups
/// between tens and hundreds of MiB, and a row group is held in memory while it is filled).
pub const ROW_GROUP_BYTES: usize = 64 << 20;

/// Rows per row group for rows of `row_bytes` bytes: [`ROW_GROUP_BYTES`] / `row_bytes`, from
/// 8 192 to 1 048 576 rows.
pub fn row_group_rows(row_bytes: usize) -> usize {
    (ROW_GROUP_BYTES / row_bytes.max(1)).clamp(1 << 13, 1 << 20)
}

/// The temporary file as the writer's sink (the parquet writer owns its sink).
struct Out(TempFile);

impl Write for Out {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        self.0.writer().write(buf)
    }
    fn write_all(&mut self, buf: &[u8]) -> std::io::Result<()> {
        self.0.writer().write_all(buf)
    }
    fn flush(&mut self) -> std::io::Result<()> {
        self.0.writer().flush()
    }
}

/// One column's values of the row group being filled.
enum Values {
    Double(Vec<f64>),
    Float(Vec<f32>),
    Int(Vec<i32>),
}

/// A point attribute written as Parquet columns.
#[derive(Clone, Copy, PartialEq)]
enum Attr {
    Intensity,
    Colour,
    Normals,
    Classification,
    ReturnNumber,
    GpsTime,
}

/// A Parquet feature file being written.
pub(super) struct ParquetSink {
    writer: SerializedFileWriter<Out>,
    path: std::path::PathBuf,
    /// LAS scale and offset: coordinates are put back on this grid.
    grid: Option<([f64; 3], [f64; 3])>,
    attrs: Vec<Attr>,
    columns: Vec<Values>,
    buffered: usize,
    group_rows: usize,
}

fn column(name: &str, physical: Physical, converted: ConvertedType) -> Result<Arc<Type>> {
    Type::primitive_type_builder(name, physical)
        .with_repetition(Repetition::REQUIRED)
        .with_converted_type(converted)
        .build()
        .map(Arc::new)
        .map_err(|e| {
            Error::internal(
                format!("Parquet column {name}: {e}"),
                "report this as a bug",
            )
        })
}

fn failed(path: &std::path::Path, e: parquet::errors::ParquetError) -> Error {
    match e {
        parquet::errors::ParquetError::External(inner) => {
            match inner.downcast::<std::io::Error>() {
                Ok(io) => Error::io(path, &io),
                Err(other) => {
                    Error::file(path, other.to_string(), "check the disk and write again")
                }
            }
        }
        other => Error::file(
            path,
            format!("cannot write the Parquet file: {other}"),
            "check the disk and write again",
        ),
    }
}

impl ParquetSink {
    /// Starts the file: schema from the attributes present in `cloud` (when `points`) and the
    /// feature column `names`.
    pub(super) fn create(
        cloud: &Cloud,
        spec: &FileSpec,
        names: &[String],
        points: bool,
    ) -> Result<ParquetSink> {
        let path = spec.path.clone();
        let mut attrs = Vec::new();
        if points {
            let present = [
                (cloud.intensity.is_some(), Attr::Intensity),
                (cloud.color.is_some(), Attr::Colour),
                (cloud.normals.is_some(), Attr::Normals),
                (cloud.classification.is_some(), Attr::Classification),
                (cloud.return_number.is_some(), Attr::ReturnNumber),
                (cloud.gps_time.is_some(), Attr::GpsTime),
            ];
            attrs.extend(present.iter().filter(|p| p.0).map(|p| p.1));
        }
        let none = ConvertedType::NONE;
        let mut fields = Vec::new();
        let mut columns = Vec::new();
        for n in ["x", "y", "z"] {
            fields.push(column(n, Physical::DOUBLE, none)?);
            columns.push(Values::Double(Vec::new()));
        }
        for a in &attrs {
            let (names, physical, converted): (&[&str], _, _) = match a {
                Attr::Intensity => (&["intensity"], Physical::FLOAT, none),
                Attr::Colour => (
                    &["red", "green", "blue"],
                    Physical::INT32,
                    ConvertedType::UINT_16,
                ),
                Attr::Normals => (&["nx", "ny", "nz"], Physical::FLOAT, none),
                Attr::Classification => {
                    (&["classification"], Physical::INT32, ConvertedType::UINT_8)
                }
                Attr::ReturnNumber => (&["return_number"], Physical::INT32, ConvertedType::UINT_8),
                Attr::GpsTime => (&["gps_time"], Physical::DOUBLE, none),
            };
            for n in names {
                fields.push(column(n, physical, converted)?);
                columns.push(match physical {
                    Physical::DOUBLE => Values::Double(Vec::new()),
                    Physical::FLOAT => Values::Float(Vec::new()),
                    _ => Values::Int(Vec::new()),
                });
            }
        }
        for n in names {
            fields.push(column(n, Physical::FLOAT, none)?);
            columns.push(Values::Float(Vec::new()));
        }
        let schema = Type::group_type_builder("equiscan_features")
            .with_fields(fields)
            .build()
            .map_err(|e| Error::internal(format!("Parquet schema: {e}"), "report this as a bug"))?;
        let mut meta = vec![
            KeyValue::new(
                "equiscan.recipe".to_string(),
                serde_json::to_string(&spec.recipe).unwrap_or_else(|_| spec.recipe.to_json()),
            ),
            KeyValue::new("equiscan.input".to_string(), spec.input.path.clone()),
            KeyValue::new(
                "equiscan.columns".to_string(),
                "x, y, z: file coordinates (f64); then the point attributes present; then per \
                 scale count and flags, invariants (norms l outer n inner; power spectrum l, n, \
                 n' >= n; bispectrum n, l1 <= l2, l), coefficients [scale][n][l^2 + l + m] (f32)"
                    .to_string(),
            ),
        ];
        if let Some(crs) = &spec.input.crs {
            meta.push(KeyValue::new("equiscan.crs".to_string(), crs.clone()));
        }
        let row_bytes = 24 + 4 * names.len() + 8 * attrs.len();
        // Unit tests use small groups so that several are written.
        let group_rows = if cfg!(test) {
            1000
        } else {
            row_group_rows(row_bytes)
        };
        let props = WriterProperties::builder()
            .set_compression(Compression::SNAPPY)
            .set_dictionary_enabled(false)
            .set_created_by(format!("equiscan {}", env!("CARGO_PKG_VERSION")))
            .set_key_value_metadata(Some(meta))
            .build();
        let file = TempFile::create(&path)?;
        let writer = SerializedFileWriter::new(Out(file), Arc::new(schema), Arc::new(props))
            .map_err(|e| failed(&path, e))?;
        let grid = match (spec.input.scale, spec.input.offset) {
            (Some(s), Some(o)) if s.iter().all(|v| v.is_finite() && *v > 0.0) => Some((s, o)),
            _ => None,
        };
        Ok(ParquetSink {
            writer,
            path,
            grid,
            attrs,
            columns,
            buffered: 0,
            group_rows,
        })
    }

    /// Appends the rows of `f` (row group written whenever full).
    pub(super) fn push(&mut self, cloud: &Cloud, f: &Features) -> Result<()> {
        let mut vals = Vec::new();
        for i in 0..f.len() {
            let p = f.positions[i];
            let mut c = 0;
            for k in 0..3 {
                let mut g = cloud.origin[k] + p[k] as f64;
                if let Some((scale, offset)) = self.grid {
                    g = offset[k] + ((g - offset[k]) / scale[k]).round() * scale[k];
                }
                if let Values::Double(v) = &mut self.columns[c] {
                    v.push(g);
                }
                c += 1;
            }
            let point = f.indices.as_ref().map(|ix| ix[i]);
            if let Some(j) = point {
                for a in &self.attrs {
                    c = push_attr(&mut self.columns, c, cloud, *a, j);
                }
            }
            vals.clear();
            push_row(f, i, false, &mut vals);
            for v in &vals {
                if let Values::Float(col) = &mut self.columns[c] {
                    col.push(*v);
                }
                c += 1;
            }
            self.buffered += 1;
            if self.buffered == self.group_rows {
                self.flush_group()?;
            }
        }
        Ok(())
    }

    fn flush_group(&mut self) -> Result<()> {
        if self.buffered == 0 {
            return Ok(());
        }
        let path = self.path.clone();
        let mut group = self.writer.next_row_group().map_err(|e| failed(&path, e))?;
        for values in &mut self.columns {
            let mut col = group
                .next_column()
                .map_err(|e| failed(&path, e))?
                .ok_or_else(|| {
                    Error::internal("Parquet: fewer columns than values", "report this as a bug")
                })?;
            let res = match values {
                Values::Double(v) => col.typed::<DoubleType>().write_batch(v, None, None),
                Values::Float(v) => col.typed::<FloatType>().write_batch(v, None, None),
                Values::Int(v) => col.typed::<Int32Type>().write_batch(v, None, None),
            };
            res.map_err(|e| failed(&path, e))?;
            col.close().map_err(|e| failed(&path, e))?;
            match values {
                Values::Double(v) => v.clear(),
                Values::Float(v) => v.clear(),
                Values::Int(v) => v.clear(),
            }
        }
        group.close().map_err(|e| failed(&path, e))?;
        self.buffered = 0;
        Ok(())
    }

    /// Writes the last row group and the footer; the file stays under its temporary name.
    pub(super) fn finish(mut self) -> Result<Finished> {
        self.flush_group()?;
        let path = self.path.clone();
        let out = self.writer.into_inner().map_err(|e| failed(&path, e))?;
        out.0.finish()
    }
}

/// Pushes point `j`'s attribute `a` into the columns from `c`; returns the next column.
fn push_attr(columns: &mut [Values], c: usize, cloud: &Cloud, a: Attr, j: usize) -> usize {
    let mut put_f = |c: usize, x: f32| {
        if let Values::Float(v) = &mut columns[c] {
            v.push(x);
        }
    };
    match a {
        Attr::Intensity => {
            put_f(c, cloud.intensity.as_ref().map_or(0.0, |v| v[j]));
            c + 1
        }
        Attr::Normals => {
            let n = cloud.normals.as_ref().map_or([0.0; 3], |v| v[j]);
            for (k, x) in n.iter().enumerate() {
                put_f(c + k, *x);
            }
            c + 3
        }
        Attr::Colour => {
            let rgb = cloud.color.as_ref().map_or([0; 3], |v| v[j]);
            for (k, x) in rgb.iter().enumerate() {
                if let Values::Int(v) = &mut columns[c + k] {
                    v.push(*x as i32);
                }
            }
            c + 3
        }
        Attr::Classification | Attr::ReturnNumber => {
            let src = if a == Attr::Classification {
                &cloud.classification
            } else {
                &cloud.return_number
            };
            if let Values::Int(v) = &mut columns[c] {
                v.push(src.as_ref().map_or(0, |s| s[j] as i32));
            }
            c + 1
        }
        Attr::GpsTime => {
            if let Values::Double(v) = &mut columns[c] {
                v.push(cloud.gps_time.as_ref().map_or(0.0, |s| s[j]));
            }
            c + 1
        }
    }
}

#[cfg(test)]
mod tests {
    use std::path::Path;

    use parquet::file::reader::{FileReader, SerializedFileReader};
    use parquet::record::RowAccessor;

    use crate::descriptor::output::{
        CentreList, CentresInfo, FeatureWriter, FileSpec, Format, write_features,
    };
    use crate::descriptor::{Centres, Engine, Recipe};
    use crate::io::read_cloud;
    use crate::spatial::KdIndex;

    #[test]
    fn rows_read_back_with_the_parquet_reader_in_several_row_groups() {
        let (cloud, info) = read_cloud(Path::new("tests/data/bunny/bunny.ply")).unwrap();
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("b.parquet");
        let recipe = Recipe::builder().radius(1.5).build().unwrap();
        let engine = Engine::new(recipe.clone());
        let index = KdIndex::new(&cloud.positions).unwrap();
        let centres = CentreList::All(cloud.len());
        let spec = FileSpec {
            path: path.clone(),
            format: Format::Parquet,
            recipe: recipe.clone(),
            input: info,
            centres: CentresInfo::All,
            radius_suggested: false,
        };
        let mut w = FeatureWriter::create(&cloud, spec, &centres).unwrap();
        write_features(&engine, &cloud.positions, &index, &centres, &mut w, None).unwrap();
        w.finish().unwrap();
        let want = engine.compute(&cloud, &Centres::All).unwrap();

        let r = SerializedFileReader::new(std::fs::File::open(&path).unwrap()).unwrap();
        let meta = r.metadata();
        assert_eq!(meta.file_metadata().num_rows() as usize, cloud.len());
        assert_eq!(meta.num_row_groups(), cloud.len().div_ceil(1000));
        let kv = meta.file_metadata().key_value_metadata().unwrap();
        let recipe_text = kv
            .iter()
            .find(|k| k.key == "equiscan.recipe")
            .and_then(|k| k.value.clone())
            .unwrap();
        assert_eq!(Recipe::from_json(&recipe_text).unwrap(), recipe);
        let schema = meta.file_metadata().schema_descr();
        let names: Vec<&str> = schema.columns().iter().map(|c| c.name()).collect();
        assert_eq!(&names[..3], ["x", "y", "z"]);
        assert_eq!(names.len(), 3 + 2 + want.columns.len());
        assert_eq!(names[5], want.columns[0]);
        for (i, row) in r.get_row_iter(None).unwrap().enumerate() {
            let row = row.unwrap();
            let g = cloud.global(i);
            for (k, v) in g.iter().enumerate() {
                assert_eq!(row.get_double(k).unwrap(), *v, "row {i}");
            }
            assert_eq!(row.get_float(3).unwrap(), want.count(i, 0) as f32);
            for (c, v) in want.row(i).iter().enumerate() {
                assert_eq!(row.get_float(5 + c).unwrap(), *v, "row {i} column {c}");
            }
        }
    }
}
