//! The survey as data: a recipe's flights through every processing stage, in memory.
//!
//! - [`pipeline`]: one flight from its raw log to reduced tensors along the line (calibration,
//!   rotation removal, normal field, terrain);
//! - [`terrain_stage`]: the terrain model a run builds from the recipe's DEM window;
//! - [`line_table`]: every flight's results as the columns of the line table;
//! - [`line_stages`]: the along-line filter, crossovers and levelling;
//! - [`grid_stage`]: minimum-curvature grids and the Laplace-consistent full tensor;
//! - [`qc`]: per-line metrics and verdicts, per-flight calibration health;
//! - [`calibration_report`]: a calibration's figures as people read them;
//! - [`preflight`]: every check and size a run needs before any work.
//!
//! Nothing here writes a file or prints: products are written by `gravgrad-products`, and the
//! run is put together by the `gravgrad` crate. Messages go through `tracing`.
//!
//! Frames and units: tensors are SI (s⁻²) inside and Eötvös (E) in tables and grids; NED true
//! north along lines, grid north on grids; positions in the survey's UTM zone.

pub mod calibration_report;
pub mod error;
pub mod grid_stage;
#[cfg(feature = "polars")]
pub mod line_frame;
pub mod line_stages;
pub mod line_table;
pub mod pipeline;
pub mod preflight;
pub mod processed;
pub mod qc;
pub mod results;
pub mod terrain_stage;

pub use error::RunError;
pub use processed::Processed;
