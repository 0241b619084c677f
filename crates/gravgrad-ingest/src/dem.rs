//! Terrain models (DEMs) by file type: NetCDF-CF (`.nc`, `.nc4`, `.cdf`, `.netcdf`) through
//! `gravgrad-netcdf`, anything else as GeoTIFF. Both give the same north-up [`Raster`] of heights in
//! metres (docs/formats.md, section 4).

use crate::geotiff_reader::read_geotiff;
use gravgrad_core::Problem;
use gravgrad_core::raster::Raster;
use std::path::Path;

/// Whether `path` names a NetCDF file by its extension.
pub fn is_netcdf(path: &Path) -> bool {
    path.extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase)
        .is_some_and(|e| matches!(e.as_str(), "nc" | "nc4" | "cdf" | "netcdf"))
}

/// Reads a DEM; `variable` names the elevation variable of a NetCDF file (default: found).
pub fn read_dem(path: &Path, variable: Option<&str>) -> Result<Raster, Vec<Problem>> {
    if is_netcdf(path) {
        gravgrad_netcdf::read_dem(path, variable)
    } else {
        read_geotiff(path)
    }
}
