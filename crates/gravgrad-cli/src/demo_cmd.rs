//! `gravgrad demo`: the bundled demo survey end to end: the check of raw logs, instrument and
//! recipe; the calibration flight's calibration (`gravgrad calibrate`, into a temporary folder);
//! the survey's run with that calibration file (rotation removal, normal and terrain reduction,
//! levelling, grids, QC) into an output folder; and the score of the result against the demo's
//! truth.

use crate::calibrate_cmd::{self, CalibrateArgs};
use crate::check_cmd::{self, CheckArgs};
use crate::logging::Log;
use crate::run_cmd::{self, RunArgs};
use crate::score_cmd::{self, ScoreArgs};
use crate::{EXIT_BAD_INPUT, EXIT_FAILURE};
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
    // The calibration flight first: its calibration file, in a folder beside the products, is what
    // the survey's run applies (and refines with what the survey's own data see).
    let cal_recipe = dir.join("recipe-calibration.toml");
    let cal_dir = calibration_folder(&out);
    let has_calibration_flight = cal_recipe.is_file();
    let calibration = if has_calibration_flight {
        log.info("the calibration flight: estimating every pair's calibration from its manoeuvres");
        if let Err(e) = std::fs::create_dir_all(&cal_dir) {
            eprintln!("error: {}: cannot make the folder: {e}", cal_dir.display());
            return EXIT_FAILURE;
        }
        let file = cal_dir.join("calibration.toml");
        let code = calibrate_cmd::run(
            &CalibrateArgs {
                recipe: cal_recipe,
                out: Some(file.clone()),
            },
            log,
        );
        if code != 0 {
            return code;
        }
        Some(file)
    } else {
        None
    };
    log.info("the survey flights, with the calibration flight's calibration");
    let code = run_cmd::run(
        &RunArgs {
            recipe,
            out: Some(out.clone()),
            flight: None,
            calibration,
        },
        log,
    );
    if code != 0 {
        return code;
    }
    let cal_note = if has_calibration_flight {
        format!(
            "; the calibration flight's calibration in {}",
            cal_dir.display()
        )
    } else {
        String::new()
    };
    log.info(&format!(
        "products in {}: lines.parquet, grids.nc, grids/*.tif, maps/*.png, qc/report.html, \
         survey.h5, calibration/, provenance.json{cal_note}; the result against the demo's truth:",
        out.display(),
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

/// The folder of the calibration flight's calibration: beside the products, named after them
/// (`gravgrad-demo` → `gravgrad-demo-calibration-flight`).
fn calibration_folder(out: &std::path::Path) -> PathBuf {
    let name = out
        .file_name()
        .map_or("gravgrad-demo".into(), |n| n.to_string_lossy().into_owned());
    out.with_file_name(format!("{name}-calibration-flight"))
}
