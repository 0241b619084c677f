//! Which products a run writes: the recipe's `output.formats` (docs/recipe.md). `parquet` is
//! `lines.parquet`, `csv` is `lines.csv` (also written when `output.lines_csv` is true), `netcdf` is
//! `grids.nc`, `geotiff` is `grids/<name>.tif`, `hdf5` is `survey.h5` and `png` is `maps/<name>.png`.
//! `provenance.json`, the QC (`qc/`) and the calibration files (`calibration/<flight>.toml`) are
//! always written.

use gravgrad_grid::Formats;
use gravgrad_ingest::recipe::Output;

/// The products selected by `output.formats`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ProductFormats {
    pub parquet: bool,
    pub csv: bool,
    pub hdf5: bool,
    pub grids: Formats,
}

impl ProductFormats {
    /// The selection of the recipe's `[output]`.
    pub fn of(output: &Output) -> Self {
        let has = |f: &str| output.formats.iter().any(|x| x == f);
        Self {
            parquet: has("parquet"),
            csv: has("csv") || output.lines_csv,
            hdf5: has("hdf5"),
            grids: Formats {
                netcdf: has("netcdf"),
                geotiff: has("geotiff"),
                png: has("png"),
            },
        }
    }

    /// Whether any product needs the grids (the grid files, or `survey.h5`, which holds them).
    pub fn needs_grids(&self) -> bool {
        self.hdf5 || self.grids.netcdf || self.grids.geotiff || self.grids.png
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parquet_alone_selects_only_the_line_table_and_lines_csv_adds_csv() {
        let mut o = Output {
            formats: vec!["parquet".into()],
            ..Output::default()
        };
        let f = ProductFormats::of(&o);
        assert!(f.parquet && !f.csv && !f.hdf5 && !f.needs_grids());
        o.lines_csv = true;
        assert!(ProductFormats::of(&o).csv);
        // The documented default (docs/recipe.md): every format but csv.
        let d = ProductFormats::of(&Output::default());
        assert!(d.parquet && !d.csv && d.hdf5 && d.grids == Formats::ALL);
    }
}
