//! The line table written: `lines.parquet` (layout `lines/1`, with layout, units, frame, CRS and
//! flight names in its key-value metadata) and `lines.csv`. The table itself is
//! `gravgrad_survey::line_table`; docs/formats.md describes the columns.

use crate::tables::{
    Column, WriteError, write_csv as write_table_csv, write_parquet_with_metadata,
};
use gravgrad_survey::line_table::{LAYOUT, LinesTable};
use std::path::Path;

fn columns(table: &LinesTable) -> Vec<(&str, Column<'_>)> {
    let mut out: Vec<(&str, Column<'_>)> =
        vec![(&table.names[0], Column::F64(&table.f64_columns[0]))];
    for (n, c) in table.i64_names.iter().zip(&table.i64_columns) {
        out.push((n, Column::I64(c)));
    }
    for (n, c) in table.names.iter().zip(&table.f64_columns).skip(1) {
        out.push((n, Column::F64(c)));
    }
    out
}

/// Writes `lines.parquet` with the layout, units and flight names in its metadata.
pub fn write_parquet(
    table: &LinesTable,
    path: &Path,
    flights: &[String],
    epsg: u32,
) -> Result<(), WriteError> {
    let meta = vec![
        ("gravgrad_layout".to_string(), LAYOUT.to_string()),
        ("tensor_units".to_string(), "E".to_string()),
        (
            "tensor_frame".to_string(),
            "NED true north (measured: sensor frame)".to_string(),
        ),
        ("crs".to_string(), format!("EPSG:{epsg}")),
        ("flights".to_string(), flights.join("\n")),
    ];
    write_parquet_with_metadata(path, &columns(table), &meta)
}

/// Writes `lines.csv`.
pub fn write_csv(table: &LinesTable, path: &Path) -> Result<(), WriteError> {
    write_table_csv(
        path,
        &format!("gravgrad {LAYOUT}: tensors in E, NED true north (measured: sensor frame)"),
        &columns(table),
    )
}
