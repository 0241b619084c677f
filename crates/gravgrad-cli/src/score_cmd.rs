//! `gravgrad score RUN_DIR TRUTH_DIR`: how far a run's products are from the truth of the simulated
//! survey they came from, per component, beside the noise floor the simulation implies.

use crate::EXIT_FAILURE;
use crate::logging::Log;
use crate::run_cmd::report_error;
use clap::Args;
use gravgrad_sim::score::StageScore;
use std::fmt::Write as _;
use std::path::PathBuf;

#[derive(Args, Debug)]
pub struct ScoreArgs {
    /// Output folder of `gravgrad run` (holds lines.parquet).
    #[arg(value_name = "RUN_DIR")]
    pub run: PathBuf,
    /// Truth folder written by `gravgrad simulate` (holds lines.parquet and scenario.toml).
    #[arg(value_name = "TRUTH_DIR")]
    pub truth: PathBuf,
    /// Cutoff wavelength of the along-track low-pass applied to the errors, m.
    #[arg(long, value_name = "M", default_value_t = 300.0)]
    pub wavelength: f64,
}

fn render(scores: &[StageScore]) -> String {
    let mut s = String::new();
    for st in scores {
        let _ = writeln!(
            s,
            "{} against truth {} ({} line samples; low-pass {} m at {:.1} m/s)",
            st.stage, st.against, st.samples, st.cutoff_wavelength_m, st.median_speed_m_s
        );
        let _ = writeln!(
            s,
            "  {:<4} {:>10} {:>10} {:>13} {:>16} {:>13}",
            "", "mean E", "RMS E", "filtered E", "per line E", "noise floor E"
        );
        for c in &st.components {
            let _ = writeln!(
                s,
                "  {:<4} {:>10.3} {:>10.3} {:>13.3} {:>16.3} {:>13.3}",
                c.component,
                c.mean_error_e,
                c.rms_error_e,
                c.filtered_rms_error_e,
                c.filtered_line_rms_error_e,
                c.filtered_noise_floor_e
            );
        }
    }
    s
}

pub fn run(args: &ScoreArgs, log: &Log, json: bool) -> u8 {
    let scored = match gravgrad::score::score(&args.run, &args.truth, args.wavelength) {
        Ok(s) => s,
        Err(e) => return report_error(&e, log),
    };
    let (scores, grid_scores) = (&scored.lines, &scored.grids);
    if json {
        let v = serde_json::json!({ "lines": scores, "grids": grid_scores });
        match serde_json::to_string_pretty(&v) {
            Ok(s) => println!("{s}"),
            Err(e) => {
                eprintln!("error: {e}");
                return EXIT_FAILURE;
            }
        }
    } else {
        print!("{}", render(scores));
        if !grid_scores.is_empty() {
            println!(
                "grids against the geology at their nodes (flight surface; RMS about the mean, E)"
            );
            println!(
                "  {:<14} {:>7} {:>9} {:>10} {:>8} {:>8}  within",
                "grid", "cells", "error", "gridding", "floor", "limit"
            );
            for g in grid_scores {
                println!(
                    "  {:<14} {:>7} {:>9.3} {:>10.3} {:>8.3} {:>8.3}  {}",
                    g.grid,
                    g.cells,
                    g.rms_error_e,
                    g.gridding_error_e,
                    g.noise_floor_e,
                    g.limit_e,
                    if g.rms_error_e <= g.limit_e {
                        "yes"
                    } else {
                        "no"
                    }
                );
            }
            println!(
                "limit: 1.2 × floor + gridding; a component gridded alone from few lines can exceed \
                 it where the full tensor, built from every component together, does not"
            );
        }
    }
    log.info("noise floor: the scenario's white pair noise through the same low-pass (1/f noise not included)");
    0
}
