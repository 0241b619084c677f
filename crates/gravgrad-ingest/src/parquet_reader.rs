//! Reader for raw flight logs in Apache Parquet (`docs/formats.md`, layout 1).
//!
//! Flat schema, one column per channel; numeric physical types (double, float, int32, int64) are
//! accepted and converted to f64; nulls are missing values (an error in a required column). The
//! first record is row 1. Columns are decoded in parallel, each by its own reader, with positional
//! reads so that the readers never share a file cursor.

use crate::columns::{self, Expectation};
use crate::csv::RawColumns;
use bytes::Bytes;
use gravgrad_core::{Location, Problem};
use parquet::basic::Type as PhysicalType;
use parquet::column::reader::{ColumnReader, ColumnReaderImpl};
use parquet::data_type::DataType;
use parquet::file::reader::{ChunkReader, FileReader, Length, SerializedFileReader};
use rayon::prelude::*;
use std::fs::File;
use std::io::Read;
use std::os::unix::fs::FileExt;
use std::path::Path;
use std::sync::Arc;

/// A file read by offset (pread), so that parallel column readers never race on a cursor.
struct PositionalFile(Arc<File>, u64);

/// A sequential reader over a [`PositionalFile`] with its own offset.
struct PositionalRead {
    file: Arc<File>,
    pos: u64,
}

impl Read for PositionalRead {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = self.file.read_at(buf, self.pos)?;
        self.pos += n as u64;
        Ok(n)
    }
}

impl Length for PositionalFile {
    fn len(&self) -> u64 {
        self.1
    }
}

impl ChunkReader for PositionalFile {
    type T = std::io::BufReader<PositionalRead>;

    fn get_read(&self, start: u64) -> parquet::errors::Result<Self::T> {
        Ok(std::io::BufReader::with_capacity(
            1 << 16,
            PositionalRead {
                file: self.0.clone(),
                pos: start,
            },
        ))
    }

    fn get_bytes(&self, start: u64, length: usize) -> parquet::errors::Result<Bytes> {
        let mut buf = vec![0u8; length];
        self.0
            .read_exact_at(&mut buf, start)
            .map_err(|e| parquet::errors::ParquetError::External(Box::new(e)))?;
        Ok(Bytes::from(buf))
    }
}

/// Reads a Parquet flight log into raw columns (file units, first record = row 1).
pub fn read_parquet(path: &Path, expect: &Expectation<'_>) -> (Option<RawColumns>, Vec<Problem>) {
    let loc = Location::file(path);
    let file = match File::open(path) {
        Ok(f) => f,
        Err(e) => return (None, vec![Problem::error(loc, format!("cannot open: {e}"))]),
    };
    let size = file.metadata().map(|m| m.len()).unwrap_or(0);
    let reader = match SerializedFileReader::new(PositionalFile(Arc::new(file), size)) {
        Ok(r) => r,
        Err(e) => {
            return (
                None,
                vec![
                    Problem::error(loc, format!("not a readable Parquet file: {e}"))
                        .with_hint("check that the file is complete"),
                ],
            );
        }
    };
    let schema = reader.metadata().file_metadata().schema_descr_ptr();
    let header: Vec<String> = (0..schema.num_columns())
        .map(|i| schema.column(i).path().string())
        .collect();
    let plan = match columns::plan(&header, expect, &loc) {
        Ok(p) => p,
        Err(problems) => return (None, problems),
    };
    let n_rows = reader.metadata().file_metadata().num_rows().max(0) as usize;
    if n_rows == 0 {
        return (
            None,
            vec![Problem::error(loc, "the file has columns but no rows")],
        );
    }
    let results: Vec<Result<Vec<f64>, Problem>> = plan
        .slots
        .par_iter()
        .map(|slot| {
            let col = schema.column(slot.index);
            let cloc = loc.clone().with_column(slot.name.clone());
            match col.physical_type() {
                PhysicalType::DOUBLE | PhysicalType::FLOAT | PhysicalType::INT32 | PhysicalType::INT64 => {}
                other => {
                    return Err(Problem::error(cloc, format!("numeric column stored as {other:?}, expected DOUBLE, FLOAT, INT32 or INT64"))
                        .with_hint("write the channel as a floating-point column"));
                }
            }
            read_column(&reader, slot.index, col.max_def_level(), n_rows)
                .map_err(|e| Problem::error(cloc, format!("cannot decode: {e}")))
        })
        .collect();
    let mut values = Vec::with_capacity(results.len());
    let mut problems = Vec::new();
    for r in results {
        match r {
            Ok(v) => values.push(v),
            Err(p) => problems.push(p),
        }
    }
    if !problems.is_empty() {
        return (None, problems);
    }
    (
        Some(RawColumns {
            plan,
            values,
            first_row: 1,
        }),
        problems,
    )
}

fn read_column(
    reader: &SerializedFileReader<PositionalFile>,
    index: usize,
    max_def: i16,
    n_rows: usize,
) -> parquet::errors::Result<Vec<f64>> {
    let mut out: Vec<f64> = Vec::with_capacity(n_rows);
    for rg in 0..reader.num_row_groups() {
        let group = reader.get_row_group(rg)?;
        let rows = group.metadata().num_rows().max(0) as usize;
        match group.get_column_reader(index)? {
            ColumnReader::DoubleColumnReader(r) => drain_f64(r, rows, max_def, &mut out)?,
            ColumnReader::FloatColumnReader(r) => drain(r, rows, max_def, &mut out, f64::from)?,
            ColumnReader::Int32ColumnReader(r) => drain(r, rows, max_def, &mut out, f64::from)?,
            ColumnReader::Int64ColumnReader(r) => drain(r, rows, max_def, &mut out, |v| v as f64)?,
            _ => {
                return Err(parquet::errors::ParquetError::General(
                    "not a numeric column".into(),
                ));
            }
        }
    }
    Ok(out)
}

/// Reads `rows` records of a DOUBLE column straight into `out` (no intermediate copy), nulls as NaN.
fn drain_f64(
    mut r: ColumnReaderImpl<parquet::data_type::DoubleType>,
    rows: usize,
    max_def: i16,
    out: &mut Vec<f64>,
) -> parquet::errors::Result<()> {
    let mut defs: Vec<i16> = Vec::new();
    let mut left = rows;
    while left > 0 {
        let start = out.len();
        defs.clear();
        let (recs, nvals, _) = if max_def > 0 {
            r.read_records(left, Some(&mut defs), None, out)?
        } else {
            r.read_records(left, None, None, out)?
        };
        if recs == 0 {
            return Err(parquet::errors::ParquetError::General(format!(
                "column ended {left} rows early"
            )));
        }
        if nvals < recs {
            // Spread the non-null values over their rows, from the back, NaN in the null rows.
            out.resize(start + recs, f64::NAN);
            let mut v = nvals;
            for k in (0..recs).rev() {
                if defs.get(k).copied().unwrap_or(0) == max_def && v > 0 {
                    v -= 1;
                    out[start + k] = out[start + v];
                } else {
                    out[start + k] = f64::NAN;
                }
            }
        }
        left -= recs;
    }
    Ok(())
}

/// Reads `rows` records of one row group into `out`, nulls as NaN.
fn drain<T: DataType>(
    mut r: ColumnReaderImpl<T>,
    rows: usize,
    max_def: i16,
    out: &mut Vec<f64>,
    conv: impl Fn(T::T) -> f64,
) -> parquet::errors::Result<()>
where
    T::T: Copy,
{
    let mut vals: Vec<T::T> = Vec::with_capacity(rows.min(1 << 16));
    let mut defs: Vec<i16> = Vec::new();
    let mut left = rows;
    while left > 0 {
        vals.clear();
        defs.clear();
        let want = left.min(1 << 16);
        let (recs, nvals, _) = if max_def > 0 {
            r.read_records(want, Some(&mut defs), None, &mut vals)?
        } else {
            r.read_records(want, None, None, &mut vals)?
        };
        if recs == 0 {
            return Err(parquet::errors::ParquetError::General(format!(
                "column ended {left} rows early"
            )));
        }
        if max_def > 0 {
            let mut k = 0;
            for d in defs.iter().take(recs) {
                if *d == max_def && k < nvals {
                    out.push(conv(vals[k]));
                    k += 1;
                } else {
                    out.push(f64::NAN);
                }
            }
        } else {
            out.extend(vals.iter().take(nvals).map(|v| conv(*v)));
        }
        left -= recs;
    }
    Ok(())
}
