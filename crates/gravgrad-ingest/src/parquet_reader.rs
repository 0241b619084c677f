//! Reader for raw flight logs in Apache Parquet (`docs/formats.md`, layout 1).
//!
//! Flat schema, one column per channel; numeric physical types (double, float, int32, int64) are
//! accepted and converted to f64; nulls are missing values (an error in a required column). The
//! first record is row 1. Columns are decoded in parallel, each by its own reader, with positional
//! reads so that the readers never share a file cursor.

use crate::columns::{self, Expectation, ReadPlan};
use crate::csv::RawColumns;
use crate::input_file::open_regular;
use crate::parquet_page_guard::GuardedPages;
use crate::parquet_pages::{self, ColumnShape};
use bytes::Bytes;
use gravgrad_core::limits::{
    MAX_FLIGHT_ROWS, MAX_FLIGHT_VALUES, MAX_LOG_EXPANSION, MAX_PARQUET_FOOTER_BYTES,
    SMALL_FILE_ALLOWANCE, decoded_bound, decoded_fits,
};
use gravgrad_core::{Location, Problem};
use parquet::basic::Type as PhysicalType;
use parquet::column::reader::ColumnReaderImpl;
use parquet::data_type::{DataType, DoubleType, FloatType, Int32Type, Int64Type};
use parquet::file::metadata::ParquetStatisticsPolicy;
use parquet::file::reader::{ChunkReader, FileReader, Length, SerializedFileReader};
use parquet::file::serialized_reader::ReadOptionsBuilder;
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
        // The range comes from the file's own metadata: check it lies inside the file before
        // reserving memory for it.
        let end = start.checked_add(length as u64);
        if end.is_none_or(|e| e > self.1) {
            return Err(parquet::errors::ParquetError::General(format!(
                "the file's metadata points at {length} bytes from byte {start}, past its end at \
                 byte {}",
                self.1
            )));
        }
        let mut buf = vec![0u8; length];
        self.0
            .read_exact_at(&mut buf, start)
            .map_err(|e| parquet::errors::ParquetError::External(Box::new(e)))?;
        Ok(Bytes::from(buf))
    }
}

thread_local! {
    /// Whether this thread is inside `contained`: a panic hook reads it to stay silent about a
    /// panic that is caught and reported as a located problem.
    static CONTAINED: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// Whether the current thread is decoding inside `contained` (for a panic hook: the panic is
/// caught there and reported as the column's error, so the default message is noise).
pub fn in_contained_decode() -> bool {
    CONTAINED.with(std::cell::Cell::get)
}

/// Runs `f`, catching a panic of the `parquet` crate's decoders as `Err(())`.
fn contained<T>(f: impl FnOnce() -> T) -> Result<T, ()> {
    CONTAINED.with(|c| c.set(true));
    let r = std::panic::catch_unwind(std::panic::AssertUnwindSafe(f)).map_err(|_| ());
    CONTAINED.with(|c| c.set(false));
    r
}

/// Reads a Parquet flight log into raw columns (file units, first record = row 1).
pub fn read_parquet(path: &Path, expect: &Expectation<'_>) -> (Option<RawColumns>, Vec<Problem>) {
    let loc = Location::file(path);
    let input = match open_regular(path) {
        Ok(f) => f,
        Err(p) => return (None, vec![p]),
    };
    let size = input.len;
    if let Err(p) = check_footer_length(&input.file, size, &loc) {
        return (None, vec![p]);
    }
    // Statistics are not used: skipping them keeps the footer's decoded size near its stored
    // size (a file of 20,000 row groups: docs/reliability.md).
    let options = ReadOptionsBuilder::new()
        .with_column_stats_policy(ParquetStatisticsPolicy::SkipAll)
        .with_size_stats_policy(ParquetStatisticsPolicy::SkipAll)
        .with_encoding_stats_policy(ParquetStatisticsPolicy::SkipAll)
        .with_encoding_stats_as_mask(true)
        .build();
    let file = Arc::new(input.file);
    let reader =
        match SerializedFileReader::new_with_options(PositionalFile(file.clone(), size), options) {
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
    let n_rows = match declared_rows(&reader, &plan, size, &loc) {
        Ok(n) => n,
        Err(p) => return (None, vec![p]),
    };
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
            // The page headers are checked before the crate reads the chunks, the pages' levels
            // and BYTE_STREAM_SPLIT values as it decodes them ([`GuardedPages`]): the panics of its
            // decoders on damaged pages (docs/reliability.md) are prevented. One the checks missed
            // would still be contained here and reported as this column's error.
            let shape = ColumnShape::new(col.physical_type(), col.max_def_level(), col.max_rep_level());
            if let Err(fault) = parquet_pages::check_column(&file, reader.metadata(), slot.index, shape) {
                return Err(Problem::error(cloc, format!("cannot decode: {fault}"))
                    .with_hint("the file is damaged or was not fully written"));
            }
            let decoded = contained(|| read_column(&reader, slot.index, n_rows));
            match decoded {
                Ok(r) => r.map_err(|e| Problem::error(cloc, format!("cannot decode: {e}"))),
                Err(_) => Err(Problem::error(
                    cloc,
                    "cannot decode: the Parquet decoder panicked on this column's damaged data",
                )
                .with_hint("the file is damaged; write it again")),
            }
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

/// Refuses a footer (the file's metadata) longer than [`MAX_PARQUET_FOOTER_BYTES`] before it is
/// decoded (its decoded form takes a few times its stored size), or one whose declared counts the
/// footer cannot hold ([`crate::parquet_footer`]).
fn check_footer_length(file: &File, size: u64, loc: &Location) -> Result<(), Problem> {
    let mut tail = [0u8; 8];
    if size < 8 || file.read_exact_at(&mut tail, size - 8).is_err() || &tail[4..] != b"PAR1" {
        return Ok(()); // too short or no Parquet magic: the parquet crate says what is wrong
    }
    let footer = u64::from(u32::from_le_bytes([tail[0], tail[1], tail[2], tail[3]]));
    if footer > MAX_PARQUET_FOOTER_BYTES {
        return Err(Problem::error(
            loc.clone(),
            format!(
                "the footer (the file's metadata) declares {footer} bytes; at most \
                 {MAX_PARQUET_FOOTER_BYTES} are read"
            ),
        )
        .with_hint("write the log with fewer, larger row groups"));
    }
    if footer + 8 > size {
        return Ok(()); // the parquet crate says the file is too short for its footer
    }
    let mut bytes = vec![0u8; footer as usize];
    if file.read_exact_at(&mut bytes, size - 8 - footer).is_err() {
        return Ok(());
    }
    crate::parquet_footer::check(&bytes).map_err(|e| {
        Problem::error(loc.clone(), format!("not a readable Parquet file: {e}"))
            .with_hint("check that the file is complete")
    })
}

/// The number of rows the footer declares, once it agrees with every row group and column chunk
/// read, every chunk lies inside the file, and the table fits the stated limits
/// ([`gravgrad_core::limits`]): rows, values, and decoded bytes against the file's size.
fn declared_rows(
    reader: &SerializedFileReader<PositionalFile>,
    plan: &ReadPlan,
    file_len: u64,
    loc: &Location,
) -> Result<usize, Problem> {
    let refuse = |msg: String| {
        Problem::error(loc.clone(), msg).with_hint("the file is damaged or was not fully written")
    };
    let meta = reader.metadata();
    let footer_rows = meta.file_metadata().num_rows();
    let footer_rows = u64::try_from(footer_rows)
        .map_err(|_| refuse(format!("the footer declares {footer_rows} rows")))?;
    let mut sum: u64 = 0;
    for (g, rg) in meta.row_groups().iter().enumerate() {
        let rows = rg.num_rows();
        let rows = u64::try_from(rows)
            .map_err(|_| refuse(format!("row group {g} declares {rows} rows")))?;
        sum = sum.saturating_add(rows);
        for slot in &plan.slots {
            let Some(cc) = rg.columns().get(slot.index) else {
                return Err(refuse(format!(
                    "row group {g} has {} column chunks, the schema {} columns",
                    rg.num_columns(),
                    meta.file_metadata().schema_descr().num_columns()
                )));
            };
            let values = cc.num_values();
            if u64::try_from(values).ok() != Some(rows) {
                return Err(refuse(format!(
                    "column `{}`: its chunk in row group {g} declares {values} values, the row \
                     group {rows} rows",
                    slot.source
                )));
            }
            // Not `byte_range()`: it asserts (panics) on negative values, which a damaged footer
            // may hold.
            let start = cc.dictionary_page_offset().unwrap_or(cc.data_page_offset());
            let len = cc.compressed_size();
            let end = u64::try_from(start)
                .ok()
                .zip(u64::try_from(len).ok())
                .and_then(|(s, l)| s.checked_add(l));
            if end.is_none_or(|end| end > file_len) {
                return Err(refuse(format!(
                    "column `{}`: its chunk in row group {g} declares {len} bytes from byte \
                     {start}, the file holds {file_len}",
                    slot.source,
                )));
            }
        }
    }
    if sum != footer_rows {
        return Err(refuse(format!(
            "the footer declares {footer_rows} rows, its {} row groups hold {sum}",
            meta.num_row_groups()
        )));
    }
    let n_values = footer_rows.saturating_mul(plan.slots.len() as u64);
    if footer_rows > MAX_FLIGHT_ROWS || n_values > MAX_FLIGHT_VALUES {
        return Err(Problem::error(
            loc.clone(),
            format!(
                "the file declares {footer_rows} rows × {} columns read; one flight log holds at \
                 most {MAX_FLIGHT_ROWS} rows and {MAX_FLIGHT_VALUES} values",
                plan.slots.len()
            ),
        )
        .with_hint("split the flight into several logs"));
    }
    let decoded = n_values.saturating_mul(8);
    if !decoded_fits(decoded, file_len, MAX_LOG_EXPANSION) {
        return Err(refuse(format!(
            "the file declares {footer_rows} rows × {} columns ({decoded} bytes as f64), more \
             than a file of {file_len} bytes can hold (at most {} bytes, {MAX_LOG_EXPANSION} \
             times its size plus {SMALL_FILE_ALLOWANCE})",
            plan.slots.len(),
            decoded_bound(file_len, MAX_LOG_EXPANSION)
        )));
    }
    usize::try_from(footer_rows).map_err(|_| refuse(format!("{footer_rows} rows")))
}

/// Reads column `index` of every row group, its data pages checked as the crate decodes them.
fn read_column(
    reader: &SerializedFileReader<PositionalFile>,
    index: usize,
    n_rows: usize,
) -> parquet::errors::Result<Vec<f64>> {
    let descr = reader
        .metadata()
        .file_metadata()
        .schema_descr()
        .column(index);
    let max_def = descr.max_def_level();
    let mut out: Vec<f64> = Vec::with_capacity(n_rows);
    for rg in 0..reader.num_row_groups() {
        let group = reader.get_row_group(rg)?;
        let rows = group.metadata().num_rows().max(0) as usize;
        let pages = |width: usize| -> parquet::errors::Result<Box<GuardedPages>> {
            Ok(Box::new(GuardedPages::new(
                group.get_column_page_reader(index)?,
                width,
                max_def,
                descr.max_rep_level(),
                rg,
            )))
        };
        let d = descr.clone();
        match descr.physical_type() {
            PhysicalType::DOUBLE => {
                let r = ColumnReaderImpl::<DoubleType>::new(d, pages(8)?);
                drain_f64(r, rows, max_def, &mut out)?
            }
            PhysicalType::FLOAT => {
                let r = ColumnReaderImpl::<FloatType>::new(d, pages(4)?);
                drain(r, rows, max_def, &mut out, f64::from)?
            }
            PhysicalType::INT32 => {
                let r = ColumnReaderImpl::<Int32Type>::new(d, pages(4)?);
                drain(r, rows, max_def, &mut out, f64::from)?
            }
            PhysicalType::INT64 => {
                let r = ColumnReaderImpl::<Int64Type>::new(d, pages(8)?);
                drain(r, rows, max_def, &mut out, |v| v as f64)?
            }
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
