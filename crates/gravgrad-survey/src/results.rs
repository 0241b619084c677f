//! What a processed survey gives after its survey-wide stages, in memory: the line table with
//! the filtered and levelled stages appended, the line stages themselves, a QC verdict per line,
//! and the grids. `gravgrad run` writes exactly these; a program can take them as arrays.

use crate::grid_stage::{self, Grids};
use crate::line_stages::{self, LineStages};
use crate::line_table::{self, LinesTable};
use crate::pipeline::PROGRESS;
use crate::qc::{self, LineQc};
use crate::{Processed, RunError};
use std::path::Path;

/// The survey-wide stages of a run, in order: each reports its start as progress under the target
/// [`PROGRESS`] (`done` = its index, `total` = their count, `stage` = its name), the line stages
/// and grids here, the writing by the caller ([`survey_stage_started`]). Writing a million-sample
/// survey's archive is the longest of them (about 10 s).
pub const SURVEY_STAGES: [&str; 6] = [
    "filter, levelling and QC",
    "grids",
    "writing the QC files and the line table",
    "writing grids and maps",
    "writing calibration files, checking the inputs",
    "writing survey.h5 and provenance",
];

/// Reports the start of the survey-wide stage `k` of [`SURVEY_STAGES`]; `k` = their count reports
/// that all are done.
pub fn survey_stage_started(k: usize) {
    let stage = SURVEY_STAGES.get(k).copied().unwrap_or("products written");
    tracing::info!(target: PROGRESS, done = k, total = SURVEY_STAGES.len(), stage, "{stage}");
}

/// The survey-wide results of a processed survey.
pub struct SurveyResults {
    /// One row per sample of every flight (`lines.parquet`'s columns), E for tensors.
    pub table: LinesTable,
    /// The filter, crossovers and levelling (`None` without a recipe).
    pub stages: Option<LineStages>,
    /// One verdict per line (empty without a recipe).
    pub qc: Vec<LineQc>,
    /// The grids (`None` when not asked for, or without a recipe).
    pub grids: Option<Grids>,
}

/// The line table, line stages, QC and (with `with_grids`) the grids of `p`; `recipe_path` names
/// the recipe in messages.
pub fn survey_results(
    p: &Processed,
    recipe_path: &Path,
    with_grids: bool,
) -> Result<SurveyResults, RunError> {
    let mut table = line_table::build(&p.results);
    let Some(recipe) = p.survey.recipe.as_ref() else {
        return Ok(SurveyResults {
            table,
            stages: None,
            qc: Vec::new(),
            grids: None,
        });
    };
    survey_stage_started(0);
    let clock = std::time::Instant::now();
    let stages =
        line_stages::compute(&p.results, recipe, recipe_path).map_err(RunError::problem)?;
    for n in &stages.notes {
        tracing::info!("{n}");
    }
    let qcs = qc::assess_survey(p, &stages, recipe)?;
    let failed = qcs.iter().filter(|q| !q.verdict.pass).count();
    tracing::info!(
        "filter, levelling and QC of {} lines in {:.2} s: {} pass, {failed} fail",
        qcs.len(),
        clock.elapsed().as_secs_f64(),
        qcs.len() - failed
    );
    stages.append_to(&mut table);
    let grids = if with_grids {
        survey_stage_started(1);
        let clock = std::time::Instant::now();
        let g = grid_stage::grid_survey(recipe, &p.results, Some(&stages.levelled), p.frame.epsg)
            .map_err(RunError::Failed)?;
        tracing::info!(
            "grids of the {} tensor built in {:.2} s: {}",
            g.stage,
            clock.elapsed().as_secs_f64(),
            g.settings()
        );
        Some(g)
    } else {
        None
    };
    Ok(SurveyResults {
        table,
        stages: Some(stages),
        qc: qcs,
        grids,
    })
}
