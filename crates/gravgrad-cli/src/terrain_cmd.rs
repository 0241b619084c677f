//! `gravgrad terrain DEM (--points FILE | --height M | --clearance M) --out FILE`: the terrain's
//! gradient tensor at given points or on a surface over the DEM (`gravgrad::terrain`, which states
//! and bounds the work before the DEM is read). Tensors in Eötvös in the DEM's map frame: x grid
//! north, y grid east, z down; positions in metres of that frame, heights above the ellipsoid.

use crate::logging::Log;
use crate::run_cmd::report_error;
use clap::Args;
use gravgrad::terrain::TerrainRequest;
use std::path::PathBuf;

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
    /// With --height or --clearance: only the cells whose centres lie in this rectangle (m, the
    /// DEM's frame); the DEM is then read over it plus --margin only.
    #[arg(
        long,
        value_name = "WEST,EAST,SOUTH,NORTH",
        value_delimiter = ',',
        allow_negative_numbers = true,
        conflicts_with = "points"
    )]
    pub extent: Option<Vec<f64>>,
    /// Terrain density, kg/m³.
    #[arg(long, value_name = "KG_M3", default_value_t = 2670.0)]
    pub density: f64,
    /// Water density for cells below sea level, kg/m³ (default: none).
    #[arg(long, value_name = "KG_M3")]
    pub water_density: Option<f64>,
    /// With --points or --extent: the DEM is read over the points' extent (or --extent) plus this
    /// distance on every side, m (the mass farther away is left out).
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

impl TerrainArgs {
    /// The library's request for this command line.
    fn request(&self) -> TerrainRequest {
        TerrainRequest {
            dem: self.dem.clone(),
            points: self.points.clone(),
            height: self.height,
            clearance: self.clearance,
            step: self.step,
            extent: self.extent.clone(),
            density: self.density,
            water_density: self.water_density,
            margin: self.margin,
            reference: self.reference,
            accuracy: self.accuracy,
            exact: self.exact,
            out: self.out.clone(),
        }
    }
}

pub fn run(args: &TerrainArgs, log: &Log) -> u8 {
    match gravgrad::terrain::terrain(&args.request()) {
        Ok(()) => 0,
        Err(e) => report_error(&e, log),
    }
}
