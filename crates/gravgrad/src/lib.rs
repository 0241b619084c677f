//! gravgrad as a library: airborne gravity-gradiometer logs to calibrated, rotation-corrected,
//! normal- and terrain-reduced gradient tensors along every line, levelled and gridded, with a QC
//! verdict per line.
//!
//! Three layers, each depending only on the ones below it:
//! - [`survey`] (`gravgrad-survey`): the stages in memory, arrays in and arrays out;
//! - [`products`] (`gravgrad-products`): the files those stages' results are written to;
//! - this crate: a run from a recipe end to end ([`run`]), `calibrate` and `qc` as calls, flights as
//!   units of work ([`flight_units`]) and batches of them ([`batch_plan`], [`slurm`]), and a
//!   survey from arrays in memory ([`memory`]), stage by stage or end to end.
//!
//! Products are for geological interpretation only: never for navigation or flight safety,
//! terrain clearance included.

pub mod batch_plan;
pub mod calibrate;
pub mod flight_units;
pub mod memory;
pub mod qc;
pub mod run;
pub mod score;
pub mod simulate;
pub mod slurm;
pub mod terrain;

pub use gravgrad_core::raster::Raster;
pub use gravgrad_ingest::instrument::{Instrument, parse_instrument};
pub use gravgrad_ingest::recipe::{Recipe, parse_recipe};
pub use gravgrad_products as products;
pub use gravgrad_survey as survey;
pub use gravgrad_survey::{Processed, RunError};
