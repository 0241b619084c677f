//! `gravgrad calibrate RECIPE`: estimate every pair's calibration from the recipe's flights, write the
//! calibration file (one per flight when there are several) and a short report
//! (`gravgrad::calibrate`).

use crate::logging::Log;
use crate::run_cmd::report_error;
use clap::Args;
use std::path::PathBuf;

#[derive(Args, Debug)]
pub struct CalibrateArgs {
    /// Processing recipe (layout `recipe/1`, TOML).
    #[arg(value_name = "RECIPE")]
    pub recipe: PathBuf,
    /// Calibration file to write (default: the recipe's `calibration.file`, else
    /// `calibration.toml` beside the recipe). With several flights, each gets its own file named
    /// after the flight.
    #[arg(long, value_name = "FILE")]
    pub out: Option<PathBuf>,
}

pub fn run(args: &CalibrateArgs, log: &Log) -> u8 {
    let made = match gravgrad::calibrate::calibrate(&args.recipe, args.out.as_deref()) {
        Ok(m) => m,
        Err(e) => return report_error(&e, log),
    };
    for (path, text) in &made.files {
        if !log.quiet {
            print!("{text}");
        }
        log.info(&format!("calibration written to {}", path.display()));
    }
    if let Some((path, text)) = &made.stability {
        if !log.quiet {
            print!("\n{text}");
        }
        log.info(&format!("stability report written to {}", path.display()));
    }
    0
}
