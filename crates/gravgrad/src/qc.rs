//! `gravgrad qc` as a library call: the survey processed as a run does it, its line stages, and
//! per line a QC verdict against the recipe's `[qc]`, written to `<out>/qc/` (`lines.csv`,
//! `report.html`) whole beside it and switched in at once.

use crate::run::{CalibrationChoice, checked_qc_folder, output_folder, process};
use gravgrad_products::{qc_files, staging};
use gravgrad_survey::line_stages::{self, LineStages};
use gravgrad_survey::qc::{self, LineQc};
use gravgrad_survey::{Processed, RunError};
use std::path::{Path, PathBuf};

/// A survey's QC: what it was computed from, the verdicts, and where they were written.
pub struct Checked {
    /// The processed survey.
    pub processed: Processed,
    /// Its line stages (filtered and levelled lines, crossovers).
    pub stages: LineStages,
    /// One verdict per line.
    pub lines: Vec<LineQc>,
    /// The `qc/` folder written.
    pub dir: PathBuf,
}

/// Processes the survey of `recipe`, assesses every line and writes the QC files into
/// `<out>/qc/` (`out`: the recipe's `output.folder` when `None`). The output folder is checked
/// before any work, as a run's is. (The crate's documentation runs it on a simulated survey.)
///
/// ```
/// let e = gravgrad::qc::qc("no/such/recipe.toml".as_ref(), None).err().unwrap();
/// assert_eq!(e.exit_code(), 2);
/// ```
pub fn qc(recipe: &Path, out: Option<&Path>) -> Result<Checked, RunError> {
    let checked = checked_qc_folder(recipe, out)?;
    let p = process(recipe, CalibrationChoice::Recipe)?;
    let Some(r) = p.survey.recipe.as_ref() else {
        return Err(RunError::Refused(format!(
            "{}: the recipe could not be read",
            recipe.display()
        )));
    };
    let clock = std::time::Instant::now();
    let stages = line_stages::compute(&p.results, r, recipe).map_err(RunError::problem)?;
    for n in &stages.notes {
        tracing::info!("{n}");
    }
    let lines = qc::assess_survey(&p, &stages, r)?;
    let folder = checked.unwrap_or_else(|| output_folder(&p, out));
    let dir = folder.join("qc");
    // Written whole beside `qc/` and swapped in at once: a stopped run leaves the old `qc/`.
    let next = folder.join(format!("{}{}", staging::QC_NEXT_PREFIX, std::process::id()));
    std::fs::create_dir_all(&next).map_err(|e| {
        RunError::Failed(format!("{}: cannot make the folder: {e}", next.display()))
    })?;
    if let Err(e) = qc_files::write_qc(&next, &p, &stages, r, &lines) {
        let _ = std::fs::remove_dir_all(&next);
        return Err(e);
    }
    staging::replace_folder(&next, &dir).map_err(RunError::Failed)?;
    tracing::info!(
        "filter, levelling and QC of {} lines in {:.2} s",
        lines.len(),
        clock.elapsed().as_secs_f64()
    );
    Ok(Checked {
        processed: p,
        stages,
        lines,
        dir,
    })
}
