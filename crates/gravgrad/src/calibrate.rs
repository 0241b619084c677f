//! `gravgrad calibrate` as a library call: every pair's calibration estimated from the recipe's
//! flights, written as calibration files (one per flight when there are several) with a report
//! each, and the stability of the instrument's coefficients against the file the recipe named.

use crate::run::{CalibrationChoice, process};
use gravgrad_calibrate::file::CalibrationFile;
use gravgrad_products::tables::write_text;
use gravgrad_survey::calibration_report::{baselines, previous_file, report, stability_report};
use gravgrad_survey::{Processed, RunError};
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

/// What a calibration wrote.
#[derive(Clone, Debug)]
pub struct Calibrated {
    /// Per flight: the calibration file written and its report's text (also written beside it
    /// as `<file>.report.txt`).
    pub files: Vec<(PathBuf, String)>,
    /// The stability report (`stability.txt` beside the first file), when there was something
    /// to compare.
    pub stability: Option<(PathBuf, String)>,
}

/// The files to write: `out`, else the recipe's `calibration.file`, else `calibration.toml` beside
/// the recipe; with several flights, one per flight named after it.
fn target_paths(p: &Processed, out: Option<&Path>) -> Vec<PathBuf> {
    let base = match (out, p.survey.recipe.as_ref()) {
        (Some(o), _) => o.to_path_buf(),
        (None, Some(r)) => r.resolve(r.calibration.file.as_deref().unwrap_or("calibration.toml")),
        (None, None) => PathBuf::from("calibration.toml"),
    };
    if p.names.len() == 1 {
        return vec![base];
    }
    let stem = base
        .file_stem()
        .map_or("calibration".into(), |s| s.to_string_lossy().into_owned());
    p.names
        .iter()
        .map(|n| base.with_file_name(format!("{stem}-{n}.toml")))
        .collect()
}

/// Estimates every pair's calibration from the flights of `recipe` (whatever its
/// `calibration.mode`) and writes the files, reports and stability report.
///
/// ```
/// # fn main() -> Result<(), Box<dyn std::error::Error>> {
/// let dir = tempfile::tempdir()?;
/// let scenario = dir.path().join("scenario.toml");
/// std::fs::write(&scenario, gravgrad::simulate::SMALL_SCENARIO)?;
/// let data = dir.path().join("survey");
/// gravgrad::simulate::simulate_to_folder(&scenario, &data)?;
/// let out = dir.path().join("calibration.toml");
/// let made = gravgrad::calibrate::calibrate(&data.join("recipe.toml"), Some(&out))?;
/// assert_eq!(made.files[0].0, out);
/// assert!(made.files[0].1.contains("κx ± SE"));
/// # Ok(())
/// # }
/// ```
pub fn calibrate(recipe: &Path, out: Option<&Path>) -> Result<Calibrated, RunError> {
    let p = process(recipe, CalibrationChoice::Estimate)?;
    if p.results.is_empty() {
        return Err(RunError::Refused(format!(
            "{}: no flights to calibrate from",
            recipe.display()
        )));
    }
    let band = p
        .survey
        .recipe
        .as_ref()
        .map_or([0.05, 1.0], |r| r.calibration.band_hz);
    let baselines = baselines(&p);
    let previous = previous_file(&p);
    let mut made: Vec<(String, CalibrationFile)> = Vec::new();
    let paths = target_paths(&p, out);
    let mut files = Vec::new();
    for ((name, r), path) in p.names.iter().zip(&p.results).zip(&paths) {
        let file = CalibrationFile::new(name, band, &r.calibration);
        made.push((name.clone(), file.clone()));
        let mut text = report(name, &file, &baselines);
        if !r.calibration_notes.is_empty() || !r.calibration_held.is_empty() {
            text.push_str(
                "\nwhat the flight could not determine (applied at the prior instead):\n",
            );
            for line in r.calibration_held.iter().chain(&r.calibration_notes) {
                let _ = writeln!(text, "  {line}");
            }
        }
        let report_path = path.with_extension("report.txt");
        write_text(path, &file.to_toml())
            .and_then(|_| write_text(&report_path, &text))
            .map_err(RunError::Failed)?;
        files.push((path.clone(), text));
    }
    let text = stability_report(&made, previous.as_ref());
    let stability = if text.is_empty() {
        None
    } else {
        let path = paths[0].with_file_name("stability.txt");
        write_text(&path, &text).map_err(RunError::Failed)?;
        Some((path, text))
    };
    Ok(Calibrated { files, stability })
}
