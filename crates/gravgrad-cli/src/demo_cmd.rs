//! `gravgrad demo`: the bundled demo survey end to end, as far as gravgrad processes it today: the
//! check of raw logs, instrument and recipe; the run (calibration, rotation removal, normal and
//! terrain reduction) into an output folder; and the score of the result against the demo's truth.

use crate::EXIT_BAD_INPUT;
use crate::check_cmd::{self, CheckArgs};
use crate::logging::Log;
use crate::run_cmd::{self, RunArgs};
use crate::score_cmd::{self, ScoreArgs};
use std::path::PathBuf;

/// The demo folder inside the source tree.
fn default_demo_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../data/demo")
}

pub fn run(data: Option<PathBuf>, out: Option<PathBuf>, log: &Log, json: bool) -> u8 {
    let dir = data.unwrap_or_else(default_demo_dir);
    let dir = std::fs::canonicalize(&dir).unwrap_or(dir);
    let recipe = dir.join("recipe.toml");
    if !recipe.is_file() {
        eprintln!(
            "error: {}: no demo recipe here; give the demo folder with --data DIR",
            recipe.display()
        );
        return EXIT_BAD_INPUT;
    }
    log.info(&format!("demo survey: {}", dir.display()));
    let args = CheckArgs {
        files: vec![recipe.clone()],
        instrument: None,
        navigation: None,
        navigation_max_gap: 1.0,
        jitter_tolerance: 0.01,
    };
    let code = check_cmd::run(&args, log, json);
    if code != 0 {
        return code;
    }
    let out = out.unwrap_or_else(|| PathBuf::from("gravgrad-demo"));
    let code = run_cmd::run(
        &RunArgs {
            recipe,
            out: Some(out.clone()),
            flight: None,
        },
        log,
    );
    if code != 0 {
        return code;
    }
    log.info(&format!(
        "products in {}: lines.parquet, grids.nc, grids/*.tif, maps/*.png, qc/report.html, \
         survey.h5, calibration/, provenance.json; the result against the demo's truth:",
        out.display()
    ));
    score_cmd::run(
        &ScoreArgs {
            run: out,
            truth: dir.join("truth"),
            wavelength: 300.0,
        },
        log,
        json,
    )
}
