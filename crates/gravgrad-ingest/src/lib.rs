//! Getting raw gradiometer data into memory, and knowing exactly what is wrong with it when it
//! cannot be trusted.
//!
//! Reads raw flight logs (layout `raw-flight/1`, `docs/formats.md`) from CSV, Parquet and HDF5 into
//! [`gravgrad_core::table::FlightTable`]s in layout units; reads instrument and recipe files; merges
//! a slower navigation table onto the gradiometer's time base; validates values and time stamps
//! with exact locations (file, row, column, key); estimates the sample rate, finds gaps and cuts
//! flights into lines. Reads single-band GeoTIFF rasters (terrain models) into
//! [`gravgrad_core::Raster`]s.
//!
//! This crate reads files but writes none and prints nothing: it returns data and
//! [`gravgrad_core::Problem`]s, and the binary decides what to show.

pub mod check;
pub mod columns;
pub mod csv;
pub mod dem;
pub mod geotiff_reader;
pub mod hdf5_reader;
pub mod input_file;
pub mod instrument;
pub mod layout;
pub mod memory;
pub mod mutate;
pub mod navmerge;
mod parquet_footer;
mod parquet_page_guard;
mod parquet_pages;
pub mod parquet_reader;
pub mod plan;
pub mod read;
pub mod recipe;
pub mod segment;
mod sink;
pub mod tomlfile;
pub mod validate;
