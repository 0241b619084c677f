//! gravgrad's products as files: the line table (Parquet, CSV), grids (NetCDF-CF, GeoTIFF, PNG
//! maps), the QC files and report, `survey.h5`, `provenance.json`, the per-flight stored results,
//! and the output folder they go into, built beside it and switched in at once.
//!
//! Every writer writes through a temporary name and renames it into place, so an interrupted run
//! leaves no half-written product; the same data give the same bytes at any thread count.
//! The data come from `gravgrad-survey`; nothing here computes physics or prints.

pub mod archive;
pub mod flight_store;
pub mod grid_files;
pub mod lines_file;
pub mod output_folder;
pub mod product_formats;
pub mod provenance;
pub mod qc_files;
pub mod report_html;
pub mod staging;
pub mod tables;
