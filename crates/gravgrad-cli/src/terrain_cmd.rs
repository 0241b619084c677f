//! `gravgrad terrain DEM (--points FILE | --height M | --clearance M) --out FILE`: the terrain's
//! gradient tensor at given points or on a surface over the DEM, from the fast engine (or the exact
//! prism sum with `--exact`). Tensors in Eötvös in the DEM's map frame: x grid north, y grid east,
//! z down.
//!
//! With `--points`, only the DEM window the points need is read: their extent plus `--margin`,
//! checked against the DEM's extent from its header before any cell is decoded (the same check
//! and wording as a run's, `gravgrad_ingest::dem::read_window`), holes filled as a run fills them.
//! With `--height` or `--clearance` every cell is a point, so the whole DEM is read.

use crate::logging::Log;
use crate::tables::{Column, write_csv, write_parquet};
use crate::terrain_stage::read_dem;
use crate::{EXIT_BAD_INPUT, EXIT_FAILURE};
use clap::Args;
use gravgrad_core::Location;
use gravgrad_core::raster::Raster;
use gravgrad_core::units::EOTVOS;
use gravgrad_ingest::dem::{WindowKeys, read_dem_header, read_window};
use gravgrad_reduce::terrain::{TerrainModel, TerrainSettings};
use std::path::{Path, PathBuf};

#[derive(Args, Debug)]
#[command(group(clap::ArgGroup::new("where").required(true).args(["points", "height", "clearance"])))]
pub struct TerrainArgs {
    /// Terrain model: GeoTIFF, or NetCDF-CF (.nc), in a projected frame (metres).
    #[arg(value_name = "DEM")]
    pub dem: PathBuf,
    /// CSV of points with columns `easting`, `northing`, `height` (m, the DEM's frame, heights
    /// above the ellipsoid).
    #[arg(long, value_name = "FILE")]
    pub points: Option<PathBuf>,
    /// Evaluate at every DEM cell centre (see --step) at this height above the ellipsoid, m.
    #[arg(long, value_name = "M")]
    pub height: Option<f64>,
    /// Evaluate at every DEM cell centre (see --step) this far above the DEM, m.
    #[arg(long, value_name = "M")]
    pub clearance: Option<f64>,
    /// With --height or --clearance: every N-th cell in each direction.
    #[arg(long, value_name = "N", default_value_t = 1)]
    pub step: usize,
    /// Terrain density, kg/m³.
    #[arg(long, value_name = "KG_M3", default_value_t = 2670.0)]
    pub density: f64,
    /// Water density for cells below sea level, kg/m³ (default: none).
    #[arg(long, value_name = "KG_M3")]
    pub water_density: Option<f64>,
    /// With --points: the DEM is read over the points' extent plus this distance on every side,
    /// m (the mass farther away is left out).
    #[arg(long, value_name = "M", default_value_t = 5000.0)]
    pub margin: f64,
    /// Reference level of the terrain mass, m above the ellipsoid (default: the mean of the DEM
    /// cells read).
    #[arg(long, value_name = "M")]
    pub reference: Option<f64>,
    /// Target accuracy of the fast engine, E.
    #[arg(long, value_name = "E", default_value_t = 0.1)]
    pub accuracy: f64,
    /// Sum every cell as an exact prism (slow).
    #[arg(long)]
    pub exact: bool,
    /// Output table: `.parquet` or `.csv`.
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
}

/// Reads `easting,northing,height` from a CSV file (other columns ignored; `#` lines skipped).
fn read_points(path: &Path) -> Result<Vec<[f64; 3]>, String> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| format!("{}: cannot read: {e}", path.display()))?;
    let mut rows = text
        .lines()
        .enumerate()
        .filter(|(_, l)| !l.starts_with('#') && !l.trim().is_empty());
    let (_, head) = rows.next().ok_or_else(|| {
        format!(
            "{}: empty; expected a header with easting,northing,height",
            path.display()
        )
    })?;
    let names: Vec<&str> = head
        .trim_start_matches('\u{feff}')
        .split(',')
        .map(str::trim)
        .collect();
    let idx = |n: &str| {
        names.iter().position(|h| *h == n).ok_or_else(|| {
            format!(
                "{}: row 1: no column `{n}`; expected easting, northing, height",
                path.display()
            )
        })
    };
    let cols = [idx("easting")?, idx("northing")?, idx("height")?];
    let mut out = Vec::new();
    for (line, row) in rows {
        let cells: Vec<&str> = row.split(',').map(str::trim).collect();
        let mut p = [0.0; 3];
        for (k, &c) in cols.iter().enumerate() {
            let name = names[c];
            let cell = cells.get(c).ok_or_else(|| {
                format!(
                    "{}: row {}, column `{name}`: missing",
                    path.display(),
                    line + 1
                )
            })?;
            p[k] = cell
                .parse::<f64>()
                .ok()
                .filter(|v| v.is_finite())
                .ok_or_else(|| {
                    format!(
                        "{}: row {}, column `{name}`: `{cell}` is not a finite number",
                        path.display(),
                        line + 1
                    )
                })?;
        }
        out.push(p);
    }
    Ok(out)
}

/// Prints `problems` and gives the exit code of bad input.
fn refuse(problems: Vec<gravgrad_core::Problem>) -> u8 {
    for p in problems {
        eprintln!("{p}");
    }
    EXIT_BAD_INPUT
}

/// The DEM window `points` need (their extent plus `margin` m on every side), read from `dem`
/// alone, checked and filled as a run's window is; warnings are logged.
fn points_window(
    dem: &Path,
    points: &[[f64; 3]],
    margin: f64,
    log: &Log,
) -> Result<Raster, Vec<gravgrad_core::Problem>> {
    let header = read_dem_header(dem, None)?;
    let need = points.iter().fold(
        [
            f64::INFINITY,
            f64::NEG_INFINITY,
            f64::INFINITY,
            f64::NEG_INFINITY,
        ],
        |e, p| {
            [
                e[0].min(p[0] - margin),
                e[1].max(p[0] + margin),
                e[2].min(p[1] - margin),
                e[3].max(p[1] + margin),
            ]
        },
    );
    let keys = WindowKeys {
        dem: Location::file(dem),
        margin: Location::file(dem),
        margin_name: "`--margin`".into(),
    };
    let w = read_window(dem, None, &header, need, &keys)?;
    for p in &w.warnings {
        log.info(&p.to_string());
    }
    Ok(w.raster)
}

pub fn run(args: &TerrainArgs, log: &Log) -> u8 {
    if !(args.margin.is_finite() && args.margin >= 0.0) {
        eprintln!(
            "error: --margin {}: expected a distance of 0 m or more",
            args.margin
        );
        return EXIT_BAD_INPUT;
    }
    let given = match args.points.as_deref().map(read_points) {
        None => None,
        Some(Ok(v)) if v.is_empty() => {
            eprintln!(
                "error: {}: no points; expected rows of easting,northing,height",
                args.points.as_deref().unwrap_or(Path::new("")).display()
            );
            return EXIT_BAD_INPUT;
        }
        Some(Ok(v)) => Some(v),
        Some(Err(e)) => {
            eprintln!("error: {e}");
            return EXIT_BAD_INPUT;
        }
    };
    let raster = match &given {
        Some(points) => points_window(&args.dem, points, args.margin, log),
        None => read_dem(&args.dem, None),
    };
    let raster = match raster {
        Ok(r) => r,
        Err(ps) => return refuse(ps),
    };
    let settings = TerrainSettings {
        density_kg_m3: args.density,
        water_density_kg_m3: args.water_density,
        reference_m: args.reference,
        accuracy_e: args.accuracy,
    };
    let model = match TerrainModel::new(&raster, &settings) {
        Ok(m) => m,
        Err(e) => {
            eprintln!("error: {}: {e}", args.dem.display());
            return EXIT_BAD_INPUT;
        }
    };
    let points: Vec<[f64; 3]> = if let Some(p) = given {
        p
    } else {
        let step = args.step.max(1);
        let mut v = Vec::new();
        for row in (0..raster.ny).step_by(step) {
            for col in (0..raster.nx).step_by(step) {
                let (x, y) = raster.cell_centre(col, row);
                let e = raster.values[row * raster.nx + col];
                let h = match (args.height, args.clearance) {
                    (Some(h), _) => h,
                    (None, Some(c)) if !raster.is_missing(e) && e.is_finite() => e + c,
                    _ => continue,
                };
                v.push([x, y, h]);
            }
        }
        v
    };
    log.info(&format!(
        "{} points, {} × {} cells, reference level {:.2} m{}",
        points.len(),
        raster.nx,
        raster.ny,
        model.reference_m(),
        if args.exact { ", exact sum" } else { "" }
    ));
    let cover = model.covers(&points, 0.0);
    if !cover.covered {
        log.info("warning: some points lie outside the DEM; their terrain effect lacks the mass beyond its edges");
    }
    let t = if args.exact {
        model.tensor_exact(&points)
    } else {
        model.tensor(&points)
    };
    let comp = |c: usize| -> Vec<f64> { t.iter().map(|x| x.to_array()[c] / EOTVOS).collect() };
    let cols: Vec<Vec<f64>> = (0..6).map(comp).collect();
    let xyz: Vec<Vec<f64>> = (0..3)
        .map(|k| points.iter().map(|p| p[k]).collect())
        .collect();
    let names = [
        "easting", "northing", "height", "gxx", "gxy", "gxz", "gyy", "gyz", "gzz",
    ];
    let table: Vec<(&str, Column<'_>)> = names
        .iter()
        .zip(xyz.iter().chain(cols.iter()))
        .map(|(n, v)| (*n, Column::F64(v)))
        .collect();
    let is_csv = args
        .out
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("csv"));
    let written = if is_csv {
        write_csv(
            &args.out,
            "gravgrad terrain effect: E, map frame (x grid north, y grid east, z down)",
            &table,
        )
    } else {
        write_parquet(&args.out, &table)
    };
    match written {
        Ok(()) => {
            log.info(&format!("written to {}", args.out.display()));
            0
        }
        Err(e) => {
            eprintln!("error: {e}");
            EXIT_FAILURE
        }
    }
}
