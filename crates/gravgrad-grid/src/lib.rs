//! Gridded products: for now the GeoTIFF writer of single-band rasters (DEMs and grids).

pub mod geotiff;
