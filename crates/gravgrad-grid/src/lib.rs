//! Gridded products: minimum-curvature gridding with tension and blanking ([`mincurv`]), the
//! Laplace-consistent full tensor from whichever components were measured ([`tensor_grid`]), PNG
//! maps ([`png_map`]), and the writers of `grids.nc`, GeoTIFFs and maps ([`products`], [`geotiff`]).

pub mod geotiff;
pub mod mincurv;
pub mod tensor_grid;

pub use mincurv::{GridSpec, Gridded, grid_points};
