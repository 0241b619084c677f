//! `gravgrad qc RECIPE`: the survey processed as `gravgrad run` does it, then per line the QC
//! metrics and a verdict against the recipe's `[qc]` tolerances, and per flight the calibration's
//! health (`gravgrad::qc`). Writes `qc/lines.csv` and the self-contained `qc/report.html`, prints a
//! table (or JSON with `--json`). Exit 0 when it ran, whatever the verdicts (they are data); 2 on
//! bad input.

use crate::logging::Log;
use crate::run_cmd::report_error;
use clap::Args;
use gravgrad::products::qc_files::{self, fixed_or_empty};
use gravgrad::survey::line_stages::LineStages;
use gravgrad::survey::qc::{
    CalibrationHealth, LineQc, NAMES, calibration_health, health_counts, settings, worst_motion,
    worst_noise,
};
use std::path::PathBuf;

#[derive(Args, Debug)]
pub struct QcArgs {
    /// Processing recipe (layout `recipe/1`, TOML).
    #[arg(value_name = "RECIPE")]
    pub recipe: PathBuf,
    /// Output folder; the QC files go to its `qc/` (default: the recipe's `output.folder`).
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
}

/// The terminal table. `motion E`: the largest motion part of a component whose fit is significant
/// at `level` (0 when none is).
/// Then one line per flight: its calibration mode, the terms held and the warnings.
fn table(
    st: &LineStages,
    qcs: &[LineQc],
    level: f64,
    names: &[String],
    health: &[CalibrationHealth],
) -> String {
    let fw = qcs
        .iter()
        .map(|q| q.flight_name.chars().count())
        .max()
        .unwrap_or(0)
        .max(6);
    let mut out = format!(
        "{:>6}  {:<fw$} {:<6} {:>8} {:>8} {:>10} {:>9} {:>9} {:>9}  {:<7} reasons\n",
        "line",
        "flight",
        "role",
        "samples",
        "noise E",
        "turb m/s²",
        "clear m",
        "dev m",
        "motion E",
        "verdict"
    );
    for q in qcs {
        let s = &st.segments[q.segment];
        let m = q.metrics.as_ref();
        let dash = |v: Option<f64>, d: usize| {
            let t = fixed_or_empty(v, d);
            if t.is_empty() { "-".into() } else { t }
        };
        out.push_str(&format!(
            "{:>6}  {:<fw$} {:<6} {:>8} {:>8} {:>10} {:>9} {:>9} {:>9}  {:<7} {}\n",
            s.line,
            q.flight_name,
            if s.tie { "tie" } else { "survey" },
            m.map_or(s.end - s.start, |m| m.samples),
            dash(m.and_then(worst_noise), 2),
            dash(m.and_then(|m| m.turbulence_m_s2), 2),
            dash(m.and_then(|m| m.clearance_departure_m), 1),
            dash(m.and_then(|m| m.line_deviation_m), 1),
            dash(m.and_then(|m| worst_motion(m, level)), 2),
            if q.verdict.pass { "pass" } else { "FAIL" },
            q.verdict.reasons.join("; ")
        ));
    }
    for (c, l) in st.levelling.iter().enumerate() {
        if let Some(l) = l {
            out.push_str(&format!(
                "crossovers {}: {} · RMS {:.2} E before levelling, {:.2} E after\n",
                NAMES[c], l.result.before.count, l.result.before.rms, l.result.after.rms
            ));
        }
    }
    for (name, h) in names.iter().zip(health) {
        out.push_str(&format!(
            "calibration {name}: {}, {}\n",
            h.mode,
            health_counts(h)
        ));
    }
    out
}

pub fn run(args: &QcArgs, log: &Log, json_out: bool) -> u8 {
    let checked = match gravgrad::qc::qc(&args.recipe, args.out.as_deref()) {
        Ok(c) => c,
        Err(e) => return report_error(&e, log),
    };
    let (p, stages, qcs, dir) = (
        &checked.processed,
        &checked.stages,
        &checked.lines,
        &checked.dir,
    );
    let Some(recipe) = p.survey.recipe.as_ref() else {
        return 2;
    };
    let survey = recipe.survey.name.as_str();
    let health = calibration_health(p, recipe);
    if json_out {
        let flights = qc_files::flights_json(p, &health);
        println!("{}", qc_files::json(survey, stages, qcs, flights));
    } else {
        let level = settings(recipe).tolerances.motion_significance;
        print!("{}", table(stages, qcs, level, &p.names, &health));
    }
    let failed = qcs.iter().filter(|q| !q.verdict.pass).count();
    log.info(&format!(
        "{} lines: {} pass, {failed} fail; written {} and {}",
        qcs.len(),
        qcs.len() - failed,
        dir.join("lines.csv").display(),
        dir.join("report.html").display()
    ));
    0
}
