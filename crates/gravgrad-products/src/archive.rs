//! `survey.h5` (layout `survey/1`): the archive of a run in one HDF5 file — the line data, the grids,
//! each flight's calibration, the recipe as run and the SHA-256 of every input. Written with the
//! pure-Rust `hdf5-pure` (chunked, deflated datasets), under a temporary name and renamed; no time
//! stamp, so the same inputs give the same bytes.
//!
//! Layout: root attributes `layout`, `title`, `crs`, `tool`; group `lines` with one 1-D dataset per
//! column of `lines.parquet` (units as there: E for tensors); group `grids` with 1-D `x` (easting, m,
//! cell centres, west to east) and `y` (northing, m, north to south) and one 2-D dataset (rows
//! north to south, columns west to east) per grid with attributes `units` and `long_name`; group
//! `calibration` with one string attribute per flight holding its `calibration/1` TOML; group
//! `inputs` with attributes `recipe` (the recipe's text) and `sha256` (one `hash  path` line per
//! input file).

use crate::tables::write_atomic;
use gravgrad_core::raster::Raster;
use gravgrad_survey::line_table::LinesTable;
use hdf5_pure::{AttrValue, FileBuilder};
use std::path::Path;

/// A grid to archive.
pub struct ArchivedGrid<'a> {
    pub name: &'a str,
    pub units: &'a str,
    pub long_name: &'a str,
    pub raster: &'a Raster,
}

/// What goes into the archive.
pub struct Archive<'a> {
    pub title: &'a str,
    pub epsg: u32,
    pub lines: &'a LinesTable,
    pub grids: Vec<ArchivedGrid<'a>>,
    /// (flight name, calibration TOML).
    pub calibrations: Vec<(String, String)>,
    pub recipe_text: String,
    /// `hash  path` lines.
    pub sha256: String,
}

fn chunk(n: usize) -> [u64; 1] {
    [(n as u64).clamp(1, 65_536)]
}

/// Writes `path`.
pub fn write(path: &Path, a: &Archive<'_>) -> Result<(), String> {
    let mut b = FileBuilder::new();
    b.set_attr("layout", AttrValue::String("survey/1".into()));
    b.set_attr("title", AttrValue::String(a.title.into()));
    b.set_attr("crs", AttrValue::String(format!("EPSG:{}", a.epsg)));
    b.set_attr(
        "tool",
        AttrValue::String(format!("gravgrad {}", env!("CARGO_PKG_VERSION"))),
    );
    let mut lines = b.create_group("lines");
    for (name, col) in a.lines.i64_names.iter().zip(&a.lines.i64_columns) {
        lines
            .create_dataset(name)
            .with_i64_data(col)
            .with_chunks(&chunk(col.len()))
            .with_deflate(4);
    }
    for (name, col) in a.lines.names.iter().zip(&a.lines.f64_columns) {
        lines
            .create_dataset(name)
            .with_f64_data(col)
            .with_chunks(&chunk(col.len()))
            .with_shuffle()
            .with_deflate(4);
    }
    b.add_group(lines.finish());
    if let Some(first) = a.grids.first() {
        let r = first.raster;
        let mut g = b.create_group("grids");
        let x: Vec<f64> = (0..r.nx).map(|c| r.cell_centre(c, 0).0).collect();
        let y: Vec<f64> = (0..r.ny).map(|row| r.cell_centre(0, row).1).collect();
        g.create_dataset("x")
            .with_f64_data(&x)
            .set_attr("units", AttrValue::String("m".into()));
        g.create_dataset("y")
            .with_f64_data(&y)
            .set_attr("units", AttrValue::String("m".into()));
        for grid in &a.grids {
            let r = grid.raster;
            g.create_dataset(grid.name)
                .with_f64_data(&r.values)
                .with_shape(&[r.ny as u64, r.nx as u64])
                .with_chunks(&[(r.ny as u64).clamp(1, 256), (r.nx as u64).clamp(1, 256)])
                .with_deflate(4)
                .set_attr("units", AttrValue::String(grid.units.into()))
                .set_attr("long_name", AttrValue::String(grid.long_name.into()));
        }
        b.add_group(g.finish());
    }
    let mut cal = b.create_group("calibration");
    for (name, text) in &a.calibrations {
        cal.set_attr(name, AttrValue::String(text.clone()));
    }
    b.add_group(cal.finish());
    let mut inputs = b.create_group("inputs");
    inputs.set_attr("recipe", AttrValue::String(a.recipe_text.clone()));
    inputs.set_attr("sha256", AttrValue::String(a.sha256.clone()));
    b.add_group(inputs.finish());
    write_atomic(path, |f| b.finish_to(f).map_err(|e| e.to_string())).map_err(|e| e.to_string())
}
