//! Writers of plain tables (raw flight logs, truth tables) as Parquet and CSV. Every file is written
//! under a temporary name in its folder and renamed when complete, so an interrupted run never leaves
//! a half-written file under the final name; the same table always gives the same bytes.

use parquet::basic::{Compression, ZstdLevel};
use parquet::data_type::{DoubleType, Int64Type};
use parquet::file::metadata::KeyValue;
use parquet::file::properties::WriterProperties;
use parquet::file::writer::SerializedFileWriter;
use parquet::schema::parser::parse_message_type;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// One column of a table.
pub enum Column<'a> {
    F64(&'a [f64]),
    I64(&'a [i64]),
    /// Float64 whose NaN (a missing value) is an empty cell in CSV; in Parquet, NaN as in `F64`.
    F64Blank(&'a [f64]),
}

impl Column<'_> {
    fn len(&self) -> usize {
        match self {
            Column::F64(v) | Column::F64Blank(v) => v.len(),
            Column::I64(v) => v.len(),
        }
    }
}

/// A failed write, with the file it concerned.
#[derive(Debug)]
pub struct WriteError {
    pub path: PathBuf,
    pub what: String,
}

impl std::fmt::Display for WriteError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}: cannot write: {}", self.path.display(), self.what)
    }
}

fn err(path: &Path, e: impl std::fmt::Display) -> WriteError {
    WriteError {
        path: path.to_path_buf(),
        what: e.to_string(),
    }
}

/// The temporary name beside `path`.
fn temp_of(path: &Path) -> PathBuf {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    path.with_file_name(format!(".{name}.partial"))
}

/// Writes bytes produced by `fill` to `path` through a temporary file and a rename.
pub fn write_atomic(
    path: &Path,
    fill: impl FnOnce(&mut std::fs::File) -> Result<(), String>,
) -> Result<(), WriteError> {
    if let Some(dir) = path.parent() {
        std::fs::create_dir_all(dir).map_err(|e| err(path, e))?;
    }
    let tmp = temp_of(path);
    let mut f = std::fs::File::create(&tmp).map_err(|e| err(path, e))?;
    if let Err(e) = fill(&mut f).and_then(|_| f.sync_all().map_err(|e| e.to_string())) {
        let _ = std::fs::remove_file(&tmp);
        return Err(err(path, e));
    }
    std::fs::rename(&tmp, path).map_err(|e| err(path, e))
}

/// Writes `text` to `path` through a temporary file and a rename ([`write_atomic`]); the error
/// names the path.
pub fn write_text(path: &Path, text: &str) -> Result<(), String> {
    write_atomic(path, |f| {
        f.write_all(text.as_bytes()).map_err(|e| e.to_string())
    })
    .map_err(|e| e.to_string())
}

/// Parquet: REQUIRED DOUBLE / INT64 columns, zstd, row groups of 128k rows.
pub fn write_parquet(path: &Path, columns: &[(&str, Column<'_>)]) -> Result<(), WriteError> {
    write_parquet_with_metadata(path, columns, &[])
}

/// [`write_parquet`] with key–value metadata in the file footer (layout version, units, names).
pub fn write_parquet_with_metadata(
    path: &Path,
    columns: &[(&str, Column<'_>)],
    metadata: &[(String, String)],
) -> Result<(), WriteError> {
    let n = columns.first().map_or(0, |c| c.1.len());
    if let Some((name, _)) = columns.iter().find(|c| c.1.len() != n) {
        return Err(err(path, format!("column `{name}` has a different length")));
    }
    let fields: Vec<String> = columns
        .iter()
        .map(|(name, c)| match c {
            Column::F64(_) | Column::F64Blank(_) => format!("REQUIRED DOUBLE {name};"),
            Column::I64(_) => format!("REQUIRED INT64 {name};"),
        })
        .collect();
    write_atomic(path, |file| {
        let schema = Arc::new(
            parse_message_type(&format!("message table {{ {} }}", fields.join(" ")))
                .map_err(|e| e.to_string())?,
        );
        let props = parquet_properties(metadata)?;
        let mut w = SerializedFileWriter::new(file, schema, props).map_err(|e| e.to_string())?;
        let mut start = 0;
        while start < n.max(1) {
            let end = (start + 131_072).min(n);
            let mut rg = w.next_row_group().map_err(|e| e.to_string())?;
            for (_, c) in columns {
                if let Some(mut col) = rg.next_column().map_err(|e| e.to_string())? {
                    match c {
                        Column::F64(v) | Column::F64Blank(v) => col
                            .typed::<DoubleType>()
                            .write_batch(&v[start..end], None, None),
                        Column::I64(v) => {
                            col.typed::<Int64Type>()
                                .write_batch(&v[start..end], None, None)
                        }
                    }
                    .map_err(|e| e.to_string())?;
                    col.close().map_err(|e| e.to_string())?;
                }
            }
            rg.close().map_err(|e| e.to_string())?;
            start = end.max(start + 1);
        }
        w.close().map_err(|e| e.to_string())?;
        Ok(())
    })
}

/// The writer settings of every Parquet table: zstd level 3, no dictionary, `metadata` in the footer.
fn parquet_properties(metadata: &[(String, String)]) -> Result<Arc<WriterProperties>, String> {
    let level = ZstdLevel::try_new(3).map_err(|e| e.to_string())?;
    Ok(Arc::new(
        WriterProperties::builder()
            .set_compression(Compression::ZSTD(level))
            .set_created_by("gravgrad".into())
            // Measured values rarely repeat: a dictionary only costs time.
            .set_dictionary_enabled(false)
            .set_key_value_metadata((!metadata.is_empty()).then(|| {
                metadata
                    .iter()
                    .map(|(k, v)| KeyValue::new(k.clone(), v.clone()))
                    .collect()
            }))
            .build(),
    ))
}

/// A table of float64 columns `names` written a batch of rows at a time, so that only one batch is
/// ever held: `next` gives each batch (one `Vec` per column, of equal lengths) and `None` after the
/// last. Parquet (one row group a batch, as [`write_parquet`] writes them) unless `csv_comment`
/// is given, then CSV as [`write_csv`] writes it. Through a temporary file and a rename like the
/// others; an error of `next` stops the write and leaves no file.
pub fn write_f64_batches(
    path: &Path,
    csv_comment: Option<&str>,
    names: &[&str],
    mut next: impl FnMut() -> Result<Option<Vec<Vec<f64>>>, String>,
) -> Result<(), WriteError> {
    let mut batch = move || -> Result<Option<Vec<Vec<f64>>>, String> {
        let b = next()?;
        if let Some(cols) = &b {
            let n = cols.first().map_or(0, Vec::len);
            if cols.len() != names.len() || cols.iter().any(|c| c.len() != n) {
                return Err("a batch of rows has columns of different lengths".into());
            }
        }
        Ok(b)
    };
    if let Some(comment) = csv_comment {
        return write_atomic(path, |file| {
            let mut w = BufWriter::with_capacity(1 << 20, file);
            let mut text = format!("# {comment}\n{}\n", names.join(","));
            while let Some(cols) = batch()? {
                for i in 0..cols.first().map_or(0, Vec::len) {
                    for (k, c) in cols.iter().enumerate() {
                        if k > 0 {
                            text.push(',');
                        }
                        text.push_str(&format!("{}", c[i]));
                    }
                    text.push('\n');
                    if text.len() > 1 << 20 {
                        w.write_all(text.as_bytes()).map_err(|e| e.to_string())?;
                        text.clear();
                    }
                }
            }
            w.write_all(text.as_bytes()).map_err(|e| e.to_string())?;
            w.flush().map_err(|e| e.to_string())
        });
    }
    let fields: Vec<String> = names
        .iter()
        .map(|n| format!("REQUIRED DOUBLE {n};"))
        .collect();
    write_atomic(path, |file| {
        let schema = Arc::new(
            parse_message_type(&format!("message table {{ {} }}", fields.join(" ")))
                .map_err(|e| e.to_string())?,
        );
        let mut w = SerializedFileWriter::new(file, schema, parquet_properties(&[])?)
            .map_err(|e| e.to_string())?;
        while let Some(cols) = batch()? {
            let mut rg = w.next_row_group().map_err(|e| e.to_string())?;
            for c in &cols {
                if let Some(mut col) = rg.next_column().map_err(|e| e.to_string())? {
                    col.typed::<DoubleType>()
                        .write_batch(c, None, None)
                        .map_err(|e| e.to_string())?;
                    col.close().map_err(|e| e.to_string())?;
                }
            }
            rg.close().map_err(|e| e.to_string())?;
        }
        w.close().map_err(|e| e.to_string())?;
        Ok(())
    })
}

/// CSV with a `#` comment line, the header, and numbers in shortest round-trip form (exact).
pub fn write_csv(
    path: &Path,
    comment: &str,
    columns: &[(&str, Column<'_>)],
) -> Result<(), WriteError> {
    let n = columns.first().map_or(0, |c| c.1.len());
    write_atomic(path, |file| {
        let mut w = BufWriter::with_capacity(1 << 20, file);
        let head: Vec<&str> = columns.iter().map(|c| c.0).collect();
        let mut text = format!("# {comment}\n{}\n", head.join(","));
        for i in 0..n {
            for (k, (_, c)) in columns.iter().enumerate() {
                if k > 0 {
                    text.push(',');
                }
                match c {
                    Column::F64(v) => text.push_str(&format!("{}", v[i])),
                    Column::F64Blank(v) if v[i].is_nan() => {}
                    Column::F64Blank(v) => text.push_str(&format!("{}", v[i])),
                    Column::I64(v) => text.push_str(&format!("{}", v[i])),
                }
            }
            text.push('\n');
            if text.len() > 1 << 20 {
                w.write_all(text.as_bytes()).map_err(|e| e.to_string())?;
                text.clear();
            }
        }
        w.write_all(text.as_bytes()).map_err(|e| e.to_string())?;
        w.flush().map_err(|e| e.to_string())
    })
}

/// A column read back from one of our Parquet tables.
pub enum Owned {
    F64(Vec<f64>),
    I64(Vec<i64>),
}

/// Reads the named columns (REQUIRED DOUBLE or INT64, as [`write_parquet`] writes them) of a
/// Parquet file; an error names the file and the column.
pub fn read_parquet_columns(path: &Path, names: &[&str]) -> Result<Vec<Owned>, String> {
    use parquet::column::reader::ColumnReader;
    use parquet::file::reader::{FileReader, SerializedFileReader};
    let file = std::fs::File::open(path).map_err(|e| format!("{}: {e}", path.display()))?;
    let reader = SerializedFileReader::new(file).map_err(|e| format!("{}: {e}", path.display()))?;
    let schema = reader.metadata().file_metadata().schema_descr_ptr();
    let mut out = Vec::new();
    for name in names {
        let idx = (0..schema.num_columns())
            .find(|&i| schema.column(i).name() == *name)
            .ok_or_else(|| format!("{}: no column `{name}`", path.display()))?;
        let mut f = Vec::new();
        let mut g = Vec::new();
        let mut is_int = false;
        for rg in 0..reader.num_row_groups() {
            let group = reader
                .get_row_group(rg)
                .map_err(|e| format!("{}: {e}", path.display()))?;
            let rows = group.metadata().num_rows() as usize;
            let col = group
                .get_column_reader(idx)
                .map_err(|e| format!("{}: column `{name}`: {e}", path.display()))?;
            let err = |e: parquet::errors::ParquetError| {
                format!("{}: column `{name}`: {e}", path.display())
            };
            match col {
                ColumnReader::DoubleColumnReader(mut r) => {
                    let mut buf = Vec::with_capacity(rows);
                    r.read_records(rows, None, None, &mut buf).map_err(err)?;
                    f.extend(buf);
                }
                ColumnReader::Int64ColumnReader(mut r) => {
                    is_int = true;
                    let mut buf = Vec::with_capacity(rows);
                    r.read_records(rows, None, None, &mut buf).map_err(err)?;
                    g.extend(buf);
                }
                _ => {
                    return Err(format!(
                        "{}: column `{name}`: expected DOUBLE or INT64",
                        path.display()
                    ));
                }
            }
        }
        out.push(if is_int { Owned::I64(g) } else { Owned::F64(f) });
    }
    Ok(out)
}
