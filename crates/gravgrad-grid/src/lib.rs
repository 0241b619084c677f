//! Gridded products: minimum-curvature gridding with tension and blanking ([`mincurv`]), the
//! Laplace-consistent full tensor from whichever components were measured ([`tensor_grid`]), PNG
//! maps ([`png_map`]), the default cell and blanking from the line spacing ([`spacing`]), and the
//! writers of `grids.nc`, GeoTIFFs and maps ([`products`],
//! [`geotiff`]).

pub mod geotiff;
pub mod mincurv;
pub mod png_map;
pub mod products;
pub mod spacing;
pub mod tensor_grid;

pub use mincurv::{GridSpec, Gridded, blank, block_means, grid_points};
pub use png_map::{MapOptions, Ramp, render_map, write_map};
pub use products::{Formats, Product, Products, Written, write_formats, write_products};
pub use spacing::{default_blanking, default_cell, line_spacing};
pub use tensor_grid::{GzReference, TensorGrids, TensorOptions, full_tensor};
