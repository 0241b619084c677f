//! `gravgrad run RECIPE`: every stage the recipe asks for, into one output folder (the run itself
//! is `gravgrad::run`): calibration, rotation-term removal and rotation to NED, normal-field and
//! terrain reduction, the along-track filter and the levelling, QC, grids, `survey.h5` and
//! provenance.

use crate::logging::Log;
use clap::Args;
use gravgrad::RunError;
use gravgrad::run::{self, RunOptions};
use std::path::PathBuf;

#[derive(Args, Debug)]
pub struct RunArgs {
    /// Processing recipe (layout `recipe/1`, TOML).
    #[arg(value_name = "RECIPE")]
    pub recipe: PathBuf,
    /// Output folder (default: the recipe's `output.folder`, relative to the recipe).
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Run only the per-flight stages (calibration, rotation, normal and terrain) of this flight
    /// and store the result as `<out>/flights/<NAME>.h5`, for a later plain run to reuse. NAME: the
    /// flight's name as the log shows it, or its file name without extension.
    #[arg(long, value_name = "NAME")]
    pub flight: Option<String>,
    /// Apply this calibration file (layout `calibration/1`, e.g. what `gravgrad calibrate` made
    /// from a calibration flight) instead of what the recipe's `[calibration]` says: as
    /// `calibration.mode = "file"` with `calibration.file = FILE`, the recipe's other calibration
    /// keys unchanged.
    #[arg(long, value_name = "FILE")]
    pub calibration: Option<PathBuf>,
}

impl RunArgs {
    /// The library's options for this command line.
    pub fn options(&self) -> RunOptions {
        RunOptions {
            recipe: self.recipe.clone(),
            out: self.out.clone(),
            flight: self.flight.clone(),
            calibration: self.calibration.clone(),
        }
    }
}

/// Prints a run's error (each problem with its place) and gives its exit code.
pub fn report_error(e: &RunError, log: &Log) -> u8 {
    log.clear_progress();
    eprintln!("{e}");
    e.exit_code()
}

pub fn run(args: &RunArgs, log: &Log) -> u8 {
    match run::run(&args.options()) {
        Ok(_) => 0,
        Err(e) => report_error(&e, log),
    }
}
