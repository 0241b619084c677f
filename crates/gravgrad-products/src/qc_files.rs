//! The QC files of a run: `qc/lines.csv` (one row per line and component: metrics, verdict,
//! reasons, the flight's calibration health) and the self-contained `qc/report.html`
//! (`report_html.rs`). The verdicts themselves are `gravgrad_survey::qc`.

use crate::report_html;
use crate::tables::write_text;
use gravgrad_survey::RunError;
use gravgrad_survey::calibration_report::{baseline_of, baselines, figures};
use gravgrad_survey::line_stages::LineStages;
use gravgrad_survey::processed::Processed;
use gravgrad_survey::qc::{CalibrationHealth, LineQc, NAMES, calibration_health, settings};
use std::path::Path;

/// `v` with `digits` decimals; empty when absent or not finite (a CSV cell, a table cell).
pub fn fixed_or_empty(v: Option<f64>, digits: usize) -> String {
    match v {
        Some(x) if x.is_finite() => format!("{x:.digits$}"),
        _ => String::new(),
    }
}

fn csv_quote(s: &str) -> String {
    if s.contains([',', '"', '\n']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

/// `qc/lines.csv` (layout `qc-lines/3`, docs/formats.md). `health`: per flight, in the order of
/// the processed flights.
pub fn lines_csv(st: &LineStages, qcs: &[LineQc], health: &[CalibrationHealth]) -> String {
    let comps: Vec<usize> = (0..6).filter(|c| st.observed[*c]).collect();
    let mut head: Vec<String> = [
        "flight",
        "line",
        "role",
        "samples",
        "duration_s",
        "median_speed_m_s",
    ]
    .map(String::from)
    .to_vec();
    for c in &comps {
        let n = NAMES[*c].to_lowercase();
        head.push(format!("noise_density_{n}_e_rt_hz"));
        head.push(format!("noise_{n}_e"));
        head.push(format!("residual_{n}_e"));
        head.push(format!("spikes_{n}"));
        head.push(format!("motion_{n}_e"));
        head.push(format!("motion_se_{n}_e"));
        head.push(format!("motion_f_{n}"));
        head.push(format!("motion_p_{n}"));
        head.push(format!("motion_regressor_{n}"));
    }
    for h in [
        "trace_rms_e",
        "alpha_difference_rms_rad_s2",
        "turbulence_m_s2",
        "clearance_departure_m",
        "line_deviation_m",
        "longest_gap_s",
        "crossings",
    ] {
        head.push(h.into());
    }
    for c in &comps {
        let n = NAMES[*c].to_lowercase();
        head.push(format!("level_offset_{n}_e"));
        head.push(format!("level_trend_{n}_e_s"));
    }
    for h in [
        "calibration_terms_held",
        "calibration_warnings",
        "calibration_mode",
    ] {
        head.push(h.into());
    }
    head.push("verdict".into());
    head.push("reasons".into());
    let mut out = format!(
        "# gravgrad qc-lines/3: one row per line; {} stage; E = 1e-9 s^-2\n{}\n",
        st.reduced_stage,
        head.join(",")
    );
    for q in qcs {
        let s = &st.segments[q.segment];
        let mut row: Vec<String> = vec![
            csv_quote(&q.flight_name),
            s.line.to_string(),
            if s.tie { "tie" } else { "survey" }.into(),
        ];
        match &q.metrics {
            Some(m) => {
                row.push(m.samples.to_string());
                row.push(format!("{:.3}", m.duration_s));
                row.push(format!("{:.3}", m.median_speed_m_s));
                for c in &comps {
                    match m.components.iter().find(|x| x.name == NAMES[*c]) {
                        Some(x) => {
                            row.push(fixed_or_empty(x.noise_density_e_rt_hz, 4));
                            row.push(fixed_or_empty(x.noise_after_filter_e, 4));
                            row.push(fixed_or_empty(x.residual_rms_e, 4));
                            row.push(x.spikes.to_string());
                            match &x.motion {
                                Some(f) => {
                                    row.push(format!("{:.4}", f.motion_rms_e));
                                    row.push(format!("{:.4}", f.motion_rms_se_e));
                                    row.push(fixed_or_empty(Some(f.f_statistic), 4));
                                    row.push(match f.p_value {
                                        v if v.is_finite() => format!("{v:.3e}"),
                                        _ => String::new(),
                                    });
                                    row.push(csv_quote(f.strongest().map_or("", |r| r.name)));
                                }
                                None => row.extend(std::iter::repeat_n(String::new(), 5)),
                            }
                        }
                        None => row.extend(std::iter::repeat_n(String::new(), 9)),
                    }
                }
                row.push(fixed_or_empty(m.trace_rms_e, 4));
                row.push(fixed_or_empty(m.alpha_difference_rms_rad_s2, 9));
                row.push(fixed_or_empty(m.turbulence_m_s2, 4));
                row.push(fixed_or_empty(m.clearance_departure_m, 2));
                row.push(fixed_or_empty(m.line_deviation_m, 2));
                row.push(format!("{:.3}", m.longest_gap_s));
            }
            None => {
                row.push((s.end - s.start).to_string());
                row.extend(std::iter::repeat_n(String::new(), 2 + 9 * comps.len() + 6));
            }
        }
        let crossings = st.levelling[5]
            .as_ref()
            .or(st.levelling.iter().flatten().next())
            .and_then(|l| l.correction_of(q.segment))
            .map_or(0, |c| c.crossings);
        row.push(crossings.to_string());
        for c in &comps {
            match st.levelling[*c]
                .as_ref()
                .and_then(|l| l.correction_of(q.segment))
            {
                Some(co) => {
                    row.push(format!("{:.4}", co.offset));
                    row.push(format!("{:.6}", co.trend_per_s));
                }
                None => row.extend([String::new(), String::new()]),
            }
        }
        match health.get(s.flight) {
            Some(h) => {
                row.push(h.terms_held().to_string());
                row.push(h.warnings.len().to_string());
                row.push(h.mode.into());
            }
            None => row.extend(std::iter::repeat_n(String::new(), 3)),
        }
        row.push(if q.verdict.pass { "pass" } else { "fail" }.into());
        row.push(csv_quote(&q.verdict.reasons.join("; ")));
        out.push_str(&row.join(","));
        out.push('\n');
    }
    out
}

/// Writes the QC of every line, `qcs` (`gravgrad_survey::qc::assess_survey`), as
/// `<qc_dir>/lines.csv` and `<qc_dir>/report.html`.
pub fn write_qc(
    qc_dir: &Path,
    p: &Processed,
    stages: &LineStages,
    recipe: &gravgrad_ingest::recipe::Recipe,
    qcs: &[LineQc],
) -> Result<(), RunError> {
    let settings = settings(recipe);
    let health = calibration_health(p, recipe);
    let csv = lines_csv(stages, qcs, &health);
    let html = report_html::render(p, stages, qcs, &settings, &health);
    for (name, text) in [("lines.csv", &csv), ("report.html", &html)] {
        write_text(&qc_dir.join(name), text).map_err(RunError::Failed)?;
    }
    Ok(())
}

/// Per flight: the calibration mode, the counts, the notes as logged, the held terms per series
/// with their reasons, and every pair's coefficients in the report's units.
pub fn flights_json(p: &Processed, health: &[CalibrationHealth]) -> Vec<serde_json::Value> {
    use gravgrad_calibrate::file::PairEntry;
    use serde_json::json;
    let num = |v: Option<f64>| v.filter(|x| x.is_finite());
    let baselines = baselines(p);
    p.names
        .iter()
        .zip(&p.results)
        .zip(health)
        .map(|((name, r), h)| {
            let pairs: Vec<serde_json::Value> = r
                .calibration
                .iter()
                .map(|(id, c)| {
                    let f = figures(
                        &PairEntry::from_calibration(id, c),
                        baseline_of(&baselines, id),
                    );
                    json!({
                        "pair": id,
                        "kappa": f.kappa.map(|k| num(Some(k.0))),
                        "kappa_se": f.kappa.map(|k| num(Some(k.1))),
                        "drift_e_h": num(f.drift_e_h),
                        "temperature_e_c": num(f.temperature_e_c),
                        "band_residual_e": num(Some(f.band_residual_e)),
                    })
                })
                .collect();
            json!({
                "flight": name,
                "calibration": {
                    "mode": h.mode,
                    "terms_held": h.terms_held(),
                    "warnings": h.warnings.len(),
                    "notes": r.calibration_notes,
                    "held": h.held.iter().map(|(series, terms)| json!({
                        "series": series,
                        "terms": terms,
                    })).collect::<Vec<_>>(),
                    "held_reasons": h.held_reasons,
                    "pairs": pairs,
                },
            })
        })
        .collect()
}

pub fn json(
    survey: &str,
    st: &LineStages,
    qcs: &[LineQc],
    flights: Vec<serde_json::Value>,
) -> serde_json::Value {
    use serde_json::json;
    let num = |v: Option<f64>| v.filter(|x| x.is_finite());
    let lines: Vec<serde_json::Value> = qcs
        .iter()
        .map(|q| {
            let s = &st.segments[q.segment];
            let m = q.metrics.as_ref();
            let levelling: Vec<serde_json::Value> = (0..6)
                .filter_map(|c| {
                    let co = st.levelling[c].as_ref()?.correction_of(q.segment)?;
                    Some(json!({
                        "component": NAMES[c],
                        "offset_e": co.offset,
                        "trend_e_s": co.trend_per_s,
                        "crossings": co.crossings,
                        "solved": co.solved,
                    }))
                })
                .collect();
            json!({
                "flight": q.flight_name,
                "line": s.line,
                "role": if s.tie { "tie" } else { "survey" },
                "samples": m.map_or(s.end - s.start, |m| m.samples),
                "duration_s": m.map(|m| m.duration_s),
                "median_speed_m_s": m.map(|m| m.median_speed_m_s),
                "components": m.map(|m| m.components.iter().map(|c| json!({
                    "component": c.name,
                    "noise_density_e_rt_hz": num(c.noise_density_e_rt_hz),
                    "noise_after_filter_e": num(c.noise_after_filter_e),
                    "residual_rms_e": num(c.residual_rms_e),
                    "spikes": c.spikes,
                    "motion": c.motion.as_ref().map(|f| json!({
                        "band_hz": f.band_hz,
                        "samples": f.samples,
                        "effective_samples": f.effective_samples,
                        "motion_rms_e": f.motion_rms_e,
                        "motion_rms_se_e": f.motion_rms_se_e,
                        "fitted_rms_e": f.fitted_rms_e,
                        "band_rms_e": f.band_rms_e,
                        "residual_rms_e": f.residual_rms_e,
                        "f_statistic": num(Some(f.f_statistic)),
                        "dof": f.dof,
                        "p_value": num(Some(f.p_value)),
                        "strongest": f.strongest().map(|r| r.name),
                        "regressors": f.regressors.iter().map(|r| json!({
                            "name": r.name,
                            "coefficient_e": num(Some(r.coefficient_e)),
                            "std_error_e": num(Some(r.std_error_e)),
                            "t": num(Some(r.t)),
                        })).collect::<Vec<_>>(),
                        "dropped": f.dropped.iter().map(|(n, why)| json!({
                            "name": n,
                            "why": why.as_str(),
                        })).collect::<Vec<_>>(),
                    })),
                })).collect::<Vec<_>>()),
                "trace_rms_e": num(m.and_then(|m| m.trace_rms_e)),
                "alpha_difference_rms_rad_s2": num(m.and_then(|m| m.alpha_difference_rms_rad_s2)),
                "turbulence_m_s2": num(m.and_then(|m| m.turbulence_m_s2)),
                "clearance_departure_m": num(m.and_then(|m| m.clearance_departure_m)),
                "line_deviation_m": num(m.and_then(|m| m.line_deviation_m)),
                "longest_gap_s": m.map(|m| m.longest_gap_s),
                "levelling": levelling,
                "verdict": if q.verdict.pass { "pass" } else { "fail" },
                "reasons": q.verdict.reasons,
            })
        })
        .collect();
    let crossovers: Vec<serde_json::Value> = (0..6)
        .filter_map(|c| {
            let l = st.levelling[c].as_ref()?;
            let stats = |s: &gravgrad_lines::level::CrossoverStats| {
                json!({ "count": s.count, "mean_e": s.mean, "rms_e": s.rms, "max_abs_e": s.max_abs })
            };
            Some(json!({
                "component": NAMES[c],
                "before": stats(&l.result.before),
                "after": stats(&l.result.after),
            }))
        })
        .collect();
    json!({
        "survey": survey,
        "reduced_stage": st.reduced_stage,
        "lines": lines,
        "flights": flights,
        "crossovers": crossovers,
        "notes": st.notes,
    })
}
