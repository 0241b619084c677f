//! NetCDF for gravgrad: terrain models read from NetCDF-CF grids, and gridded products written as
//! CF-1.8 NetCDF (`grids.nc`).
//!
//! - [`read_dem`]: a terrain model from a NetCDF-CF grid — classic CDF-1, CDF-2 and CDF-5 files
//!   through this crate's own parser (after Unidata's NetCDF Classic Format Specification),
//!   NetCDF-4 files through the pure-Rust `hdf5-pure` crate — into a north-up
//!   [`gravgrad_core::Raster`] of heights in metres.
//! - [`dem_header`] and [`read_dem_block`]: the same, in two steps: where the grid lies (before
//!   any cell is decoded), then only the block of cells a run needs.
//! - [`NcFile`]: the general reader underneath (dimensions, attributes, variables, values as f64).
//! - [`NcWriter`]: a general writer of the 64-bit offset format (CDF-2): dimensions, variables of
//!   f32, f64, i32, i16, i8 and char, attributes. [`write_grids`] builds a CF-1.8 grid file on
//!   it: coordinates `x`, `y`, one float32 variable per product, a `crs` grid mapping.
//!
//! Layouts in `docs/formats.md` (sections "NetCDF terrain models" and "grids.nc"). No I/O other
//! than the named file; nothing prints; malformed files give errors naming the file and what was
//! expected, never panics.

pub mod cf;
mod classic;
pub mod dem;
pub mod model;
mod nc4;
pub mod read;
pub mod write;

pub use cf::{
    GRIDS_LAYOUT, GridError, GridFile, GridProblem, GridVariable, build_grids, frame_wkt,
    write_grids,
};
pub use dem::{CellBlock, GridHeader, dem_header, read_dem, read_dem_block, read_grid};
pub use model::{AttrValue, Attribute, Dimension, Format, NcType, Variable};
pub use read::{NcFile, ReadError};
pub use write::{DimId, NcWriter, VarData, VarId, WriteError};
