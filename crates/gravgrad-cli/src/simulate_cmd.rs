//! `gravgrad simulate SCENARIO --out DIR`: a synthetic survey with its truth, written as the files a
//! real survey would bring (raw log, instrument file, DEM, recipe) plus the truth tables.

use crate::logging::Log;
use crate::run_cmd::report_error;
use clap::Args;
use std::path::PathBuf;

#[derive(Args, Debug)]
pub struct SimulateArgs {
    /// Scenario file (layout `scenario/1`, TOML).
    #[arg(value_name = "SCENARIO")]
    pub scenario: PathBuf,
    /// Output folder (created; files in it are replaced).
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
}

pub fn run(args: &SimulateArgs, log: &Log) -> u8 {
    match gravgrad::simulate::simulate_to_folder(&args.scenario, &args.out) {
        Ok(s) => {
            log.info(&format!(
                "{} samples, {} lines; written to {}",
                s.samples,
                s.lines,
                args.out.display()
            ));
            0
        }
        Err(e) => report_error(&e, log),
    }
}
