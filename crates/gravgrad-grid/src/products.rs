//! Writing a run's gridded products: `grids.nc` (CF-1.8, via `gravgrad_netcdf::write_grids`),
//! one GeoTIFF per grid under `grids/` (via [`crate::geotiff::write_geotiff`], float32, the frame
//! by EPSG code, NaN as no-data) and one PNG map per grid under `maps/` ([`crate::png_map`]).
//!
//! Frame and units: every grid shares one north-up geometry in a projected frame (eastings and
//! northings in metres, EPSG code required by `grids.nc`); tensor grids in E, gz in mGal, as the
//! caller labels them. Every file is written under a temporary name in its folder and renamed when
//! complete; the same products give the same bytes.

use crate::geotiff::{GeoTiffError, WriteOptions, write_geotiff};
use crate::png_map::{MapError, MapOptions, Ramp, write_map};
use gravgrad_core::Raster;
use gravgrad_netcdf::{GridError, GridFile, write_grids};
use std::path::{Path, PathBuf};
use thiserror::Error;

/// One gridded product.
#[derive(Clone, Copy, Debug)]
pub struct Product<'a> {
    /// Variable and file name: lower-case ASCII letters, digits and `_`, e.g. `gzz`.
    pub name: &'a str,
    /// Description, e.g. `vertical gravity gradient, terrain corrected`.
    pub long_name: &'a str,
    /// Unit as held and labelled: `E` or `mGal`.
    pub units: &'a str,
    /// North-up raster; missing cells NaN.
    pub raster: &'a Raster,
    /// Colour ramp of its map.
    pub ramp: Ramp,
}

/// The products of a run.
#[derive(Clone, Debug)]
pub struct Products<'a> {
    /// `grids.nc` global `title`.
    pub title: &'a str,
    /// `grids.nc` global `source`, e.g. `gravgrad 0.1.0, recipe survey.toml`.
    pub source: &'a str,
    pub grids: Vec<Product<'a>>,
    /// Flight paths drawn on every map: polylines of (easting m, northing m).
    pub paths: Vec<Vec<(f64, f64)>>,
}

/// The files written.
#[derive(Clone, Debug, PartialEq)]
pub struct Written {
    pub netcdf: PathBuf,
    pub geotiffs: Vec<PathBuf>,
    pub maps: Vec<PathBuf>,
}

/// Why the products could not be written; each names the file.
#[derive(Debug, Error)]
pub enum ProductError {
    #[error("product name `{0}`: use lower-case letters, digits and `_` only")]
    Name(String),
    #[error("no product to write")]
    Empty,
    #[error("{}: cannot create the folder: {source}", .path.display())]
    Folder {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error(transparent)]
    NetCdf(#[from] GridError),
    #[error(transparent)]
    GeoTiff(#[from] GeoTiffError),
    #[error("{}: {source}", .path.display())]
    Map { path: PathBuf, source: MapError },
}

/// Which of the product files to write.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Formats {
    /// `grids.nc`.
    pub netcdf: bool,
    /// `grids/<name>.tif`.
    pub geotiff: bool,
    /// `maps/<name>.png`.
    pub png: bool,
}

impl Formats {
    /// Every file.
    pub const ALL: Self = Self {
        netcdf: true,
        geotiff: true,
        png: true,
    };
}

/// Writes `dir/grids.nc`, `dir/grids/<name>.tif` and `dir/maps/<name>.png` for every product.
pub fn write_products(dir: &Path, products: &Products<'_>) -> Result<Written, ProductError> {
    let files = write_formats(dir, products, Formats::ALL)?;
    let (tifs, rest): (Vec<PathBuf>, Vec<PathBuf>) = files
        .into_iter()
        .partition(|f| f.extension().is_some_and(|e| e == "tif"));
    let (maps, nc): (Vec<PathBuf>, Vec<PathBuf>) = rest
        .into_iter()
        .partition(|f| f.extension().is_some_and(|e| e == "png"));
    Ok(Written {
        netcdf: nc
            .into_iter()
            .next()
            .unwrap_or_else(|| dir.join("grids.nc")),
        geotiffs: tifs,
        maps,
    })
}

/// Writes the files `formats` selects, as [`write_products`] does (a folder only when a file goes
/// into it); the paths written, `grids.nc` first, then per product its GeoTIFF and its map.
pub fn write_formats(
    dir: &Path,
    products: &Products<'_>,
    formats: Formats,
) -> Result<Vec<PathBuf>, ProductError> {
    if products.grids.is_empty() {
        return Err(ProductError::Empty);
    }
    for p in &products.grids {
        let ok = !p.name.is_empty()
            && p.name
                .bytes()
                .all(|b| b.is_ascii_lowercase() || b.is_ascii_digit() || b == b'_');
        if !ok {
            return Err(ProductError::Name(p.name.to_string()));
        }
    }
    let folder = |path: PathBuf| -> Result<PathBuf, ProductError> {
        std::fs::create_dir_all(&path).map_err(|source| ProductError::Folder {
            path: path.clone(),
            source,
        })?;
        Ok(path)
    };
    let dir = folder(dir.to_path_buf())?;
    let rasters: Vec<Raster> = products
        .grids
        .iter()
        .map(|p| {
            let mut r = p.raster.clone();
            if r.nodata.is_none() {
                r.nodata = Some(f64::NAN);
            }
            r
        })
        .collect();
    let mut written = Vec::new();
    if formats.netcdf {
        let mut file = GridFile::new(products.title, products.source);
        for (p, r) in products.grids.iter().zip(&rasters) {
            file = file.with_variable(p.name, p.long_name, p.units, r);
        }
        let netcdf = dir.join("grids.nc");
        write_grids(&netcdf, &file)?;
        written.push(netcdf);
    }
    let tif_dir = if formats.geotiff {
        Some(folder(dir.join("grids"))?)
    } else {
        None
    };
    let map_dir = if formats.png {
        Some(folder(dir.join("maps"))?)
    } else {
        None
    };
    for (p, r) in products.grids.iter().zip(&rasters) {
        if let Some(tif_dir) = &tif_dir {
            let tif = tif_dir.join(format!("{}.tif", p.name));
            write_geotiff(r, &tif, &WriteOptions::default())?;
            written.push(tif);
        }
        if let Some(map_dir) = &map_dir {
            let png = map_dir.join(format!("{}.png", p.name));
            let opts = MapOptions {
                title: p.name.to_string(),
                units: p.units.to_string(),
                ramp: p.ramp,
                paths: products.paths.clone(),
                ..MapOptions::default()
            };
            write_map(&png, r, &opts).map_err(|source| ProductError::Map {
                path: png.clone(),
                source,
            })?;
            written.push(png);
        }
    }
    Ok(written)
}
