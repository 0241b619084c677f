//! The grids of a run written in the files `output.formats` selects: `grids.nc`,
//! `grids/<name>.tif`, `maps/<name>.png` (units: E for tensor grids, mGal for gz; the survey's UTM
//! frame). The grids themselves are `gravgrad_survey::grid_stage`.

use gravgrad_grid::{Formats, Product, Products, Ramp, write_formats};
use gravgrad_survey::grid_stage::{Grids, NAMES};
use gravgrad_survey::pipeline::FlightResult;
use std::path::Path;

/// Writes the grids in the files `formats` selects: measured components as `measured_g??`, the
/// full tensor as `g??`, and `gz`. The paths written.
pub fn write(
    dir: &Path,
    g: &Grids,
    results: &[FlightResult],
    title: &str,
    formats: Formats,
) -> Result<Vec<std::path::PathBuf>, String> {
    if !(formats.netcdf || formats.geotiff || formats.png) {
        return Ok(Vec::new());
    }
    let long: Vec<String> = NAMES
        .iter()
        .map(|n| {
            format!(
                "{} from all measured components, {}",
                n.to_uppercase(),
                g.stage.replace('_', " ")
            )
        })
        .collect();
    let measured_long: Vec<String> = NAMES
        .iter()
        .map(|n| {
            format!(
                "{} as measured, {}, gridded",
                n.to_uppercase(),
                g.stage.replace('_', " ")
            )
        })
        .collect();
    let measured_names: Vec<String> = NAMES.iter().map(|n| format!("measured_{n}")).collect();
    let mut grids = Vec::new();
    for c in 0..6 {
        if let Some(m) = &g.measured[c] {
            grids.push(Product {
                name: &measured_names[c],
                long_name: &measured_long[c],
                units: "E",
                raster: m,
                ramp: Ramp::Diverging,
            });
        }
    }
    for c in 0..6 {
        grids.push(Product {
            name: NAMES[c],
            long_name: &long[c],
            units: "E",
            raster: &g.tensor[c],
            ramp: Ramp::Diverging,
        });
    }
    grids.push(Product {
        name: "gz",
        long_name: "vertical gravity from the tensor, mean removed",
        units: "mGal",
        raster: &g.gz,
        ramp: Ramp::Diverging,
    });
    // Flight paths: each line as a polyline, at most about 500 vertices.
    let mut paths = Vec::new();
    for r in results {
        let mut i = 0;
        while i < r.line.len() {
            let l = r.line[i];
            let start = i;
            while i < r.line.len() && r.line[i] == l {
                i += 1;
            }
            if l > 0 {
                let step = ((i - start) / 500).max(1);
                paths.push(
                    (start..i)
                        .step_by(step)
                        .map(|k| (r.positions.easting_m[k], r.positions.northing_m[k]))
                        .collect(),
                );
            }
        }
    }
    let source = format!("gravgrad {}", env!("CARGO_PKG_VERSION"));
    write_formats(
        dir,
        &Products {
            title,
            source: &source,
            grids,
            paths,
        },
        formats,
    )
    .map_err(|e| e.to_string())
}
