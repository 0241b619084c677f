//! `gravgrad demo`: the bundled demo survey end to end: the check of raw logs, instrument and
//! recipe; the calibration flight's calibration (`gravgrad calibrate`, into a folder beside the
//! products); the survey's run with that calibration file (rotation removal, normal and terrain
//! reduction, levelling, grids, QC) into an output folder; and the score of the result against the
//! demo's truth.
//!
//! The survey is the one `--data DIR` names; else, at the top of a source checkout, `data/demo`
//! (when its scenario is the built-in one); else the one the binary carries, regenerated from its
//! built-in scenario into a folder beside the products (`gravgrad::demo_data`), so that an
//! installed binary needs no source tree.

use crate::calibrate_cmd::{self, CalibrateArgs};
use crate::check_cmd::{self, CheckArgs};
use crate::logging::Log;
use crate::run_cmd::{self, RunArgs};
use crate::score_cmd::{self, ScoreArgs};
use crate::{EXIT_BAD_INPUT, EXIT_FAILURE};
use gravgrad::demo_data::{self, Prepared};
use gravgrad::products::output_folder;
use std::path::{Path, PathBuf};

/// `./data/demo` when the command runs at the top of a source checkout (`cargo run --release --
/// demo`) and that folder holds the built-in scenario's survey: then nothing is regenerated.
fn checkout_demo() -> Option<PathBuf> {
    let dir = PathBuf::from("data/demo");
    let scenario = std::fs::read_to_string(dir.join("scenario.toml")).ok()?;
    (scenario == demo_data::SCENARIO && dir.join("recipe.toml").is_file()).then_some(dir)
}

pub fn run(data: Option<PathBuf>, out: Option<PathBuf>, log: &Log, json: bool) -> u8 {
    let data = data.or_else(checkout_demo);
    let out = out.unwrap_or_else(|| PathBuf::from("gravgrad-demo"));
    // The output folder is checked before anything is written beside it.
    let resolved = match output_folder::check(&out, "--out", &[]) {
        Ok(r) => r,
        Err(e) => {
            eprintln!("error: {e}");
            return EXIT_BAD_INPUT;
        }
    };
    let dir = match data {
        Some(dir) => {
            let dir = std::fs::canonicalize(&dir).unwrap_or(dir);
            if !dir.join("recipe.toml").is_file() {
                eprintln!(
                    "error: {}: no demo recipe here (--data); expected the folder of a demo \
                     survey, or leave --data out to use the survey built into gravgrad",
                    dir.join("recipe.toml").display()
                );
                return EXIT_BAD_INPUT;
            }
            log.info(&format!("demo survey: {}", dir.display()));
            dir
        }
        None => {
            let dir = sibling(&resolved, "data");
            match demo_data::prepare(&dir) {
                Ok(Prepared::Reused) => log.info(&format!(
                    "demo survey: {} (regenerated earlier; every file matches its checksum)",
                    dir.display()
                )),
                Ok(Prepared::Regenerated) => {
                    log.info(&format!("demo survey: {} (regenerated)", dir.display()))
                }
                Err(e) => return crate::run_cmd::report_error(&e, log),
            }
            dir
        }
    };
    let recipe = dir.join("recipe.toml");
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
    // The calibration flight first: its calibration file, in a folder beside the products, is what
    // the survey's run applies (and refines with what the survey's own data see).
    let cal_recipe = dir.join("recipe-calibration.toml");
    let cal_dir = sibling(&resolved, "calibration-flight");
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
         survey.h5, calibration/, provenance.json{cal_note}; the survey in {}; the result \
         against the demo's truth:",
        out.display(),
        dir.display(),
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

/// A folder beside the output folder `out` (absolute, as `output_folder::check` returns it),
/// named after it: `/x/gravgrad-demo` → `/x/gravgrad-demo-<suffix>` (the calibration flight's
/// calibration in `-calibration-flight`, the survey regenerated from the built-in scenario in
/// `-data`).
fn sibling(out: &Path, suffix: &str) -> PathBuf {
    let name = out
        .file_name()
        .map_or("gravgrad-demo".into(), |n| n.to_string_lossy().into_owned());
    out.with_file_name(format!("{name}-{suffix}"))
}
