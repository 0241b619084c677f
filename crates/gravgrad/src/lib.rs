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
//!
//! From files, end to end: a small survey simulated with known truth, run from its recipe,
//! checked line by line, and scored against the truth.
//!
//! ```
//! # fn main() -> Result<(), Box<dyn std::error::Error>> {
//! let dir = tempfile::tempdir()?;
//! let scenario = dir.path().join("scenario.toml");
//! std::fs::write(&scenario, gravgrad::simulate::SMALL_SCENARIO)?;
//! let data = dir.path().join("survey");
//! let sim = gravgrad::simulate::simulate_to_folder(&scenario, &data)?;
//! assert!(sim.lines >= 3);
//!
//! let options = gravgrad::run::RunOptions {
//!     recipe: data.join("recipe.toml"),
//!     out: Some(dir.path().join("products")),
//!     ..Default::default()
//! };
//! let done = gravgrad::run::run(&options)?;
//! assert_eq!(done.samples, sim.samples);
//! assert!(done.out.join("lines.parquet").is_file());
//!
//! let qc = gravgrad::qc::qc(&options.recipe, options.out.as_deref())?;
//! assert!(qc.lines.iter().all(|l| l.verdict.pass));
//!
//! let score = gravgrad::score::score(&done.out, &data.join("truth"), 300.0)?;
//! assert_eq!(score.lines.len(), 2);
//! # Ok(())
//! # }
//! ```

pub mod batch_local;
pub mod batch_plan;
pub mod calibrate;
pub mod demo_data;
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
