//! Writers of sample logs in the three raw-log containers (CSV, Parquet, HDF5), layout
//! `raw-flight/1`.

use crate::synthlog::{SampleLog, decimals};
use parquet::basic::{Compression, ZstdLevel};
use parquet::data_type::{DoubleType, Int64Type};
use parquet::file::properties::WriterProperties;
use parquet::file::writer::SerializedFileWriter;
use parquet::schema::parser::parse_message_type;
use std::io::{BufWriter, Write};
use std::path::Path;
use std::sync::Arc;

type Res = Result<(), Box<dyn std::error::Error>>;

/// CSV with a `#` layout comment, fixed decimals per column.
pub fn write_csv(log: &SampleLog, path: &Path) -> Res {
    let mut w = BufWriter::with_capacity(1 << 20, std::fs::File::create(path)?);
    writeln!(w, "# layout: raw-flight/1")?;
    let mut head: Vec<&str> = log.columns.iter().map(|c| c.0.as_str()).collect();
    if log.line.is_some() {
        head.push("line");
    }
    writeln!(w, "{}", head.join(","))?;
    let dec: Vec<usize> = log.columns.iter().map(|c| decimals(&c.0)).collect();
    let n = log.columns[0].1.len();
    let mut row = String::with_capacity(1024);
    for i in 0..n {
        row.clear();
        for (k, (_, v)) in log.columns.iter().enumerate() {
            if k > 0 {
                row.push(',');
            }
            use std::fmt::Write as _;
            let _ = write!(row, "{:.*}", dec[k], v[i]);
        }
        if let Some(l) = &log.line {
            use std::fmt::Write as _;
            let _ = write!(row, ",{}", l[i]);
        }
        row.push('\n');
        w.write_all(row.as_bytes())?;
    }
    w.flush()?;
    Ok(())
}

/// Parquet, one REQUIRED DOUBLE column per channel (INT64 for `line`), zstd, 128k-row groups.
pub fn write_parquet(log: &SampleLog, path: &Path) -> Res {
    let mut fields: Vec<String> = log
        .columns
        .iter()
        .map(|c| format!("REQUIRED DOUBLE {};", c.0))
        .collect();
    if log.line.is_some() {
        fields.push("REQUIRED INT64 line;".into());
    }
    let schema = Arc::new(parse_message_type(&format!(
        "message flight {{ {} }}",
        fields.join(" ")
    ))?);
    let props = Arc::new(
        WriterProperties::builder()
            .set_compression(Compression::ZSTD(ZstdLevel::try_new(3)?))
            .build(),
    );
    let file = std::fs::File::create(path)?;
    let mut writer = SerializedFileWriter::new(file, schema, props)?;
    let n = log.columns[0].1.len();
    let group = 131_072;
    let mut start = 0;
    while start < n {
        let end = (start + group).min(n);
        let mut rg = writer.next_row_group()?;
        for (_, v) in &log.columns {
            if let Some(mut col) = rg.next_column()? {
                col.typed::<DoubleType>()
                    .write_batch(&v[start..end], None, None)?;
                col.close()?;
            }
        }
        if let Some(l) = &log.line
            && let Some(mut col) = rg.next_column()?
        {
            col.typed::<Int64Type>()
                .write_batch(&l[start..end], None, None)?;
            col.close()?;
        }
        rg.close()?;
        start = end;
    }
    writer.close()?;
    Ok(())
}

/// HDF5: one group `flight` with attribute layout = "raw-flight/1" and one chunked, deflated 1-D
/// dataset per column.
pub fn write_hdf5(log: &SampleLog, path: &Path, group: &str) -> Res {
    let mut b = hdf5_pure::FileBuilder::new();
    let mut g = b.create_group(group);
    g.set_attr(
        "layout",
        hdf5_pure::AttrValue::String("raw-flight/1".into()),
    );
    let n = log.columns[0].1.len() as u64;
    let chunk = [n.clamp(1, 65_536)];
    for (name, v) in &log.columns {
        g.create_dataset(name)
            .with_f64_data(v)
            .with_chunks(&chunk)
            .with_shuffle()
            .with_deflate(4);
    }
    if let Some(l) = &log.line {
        g.create_dataset("line")
            .with_i64_data(l)
            .with_chunks(&chunk)
            .with_deflate(4);
    }
    b.add_group(g.finish());
    b.write(path)?;
    Ok(())
}
