//! `gravgrad qc RECIPE`: the survey processed as `gravgrad run` does it, then per line the QC metrics
//! of `gravgrad_lines::qc` (the motion-correlation test among them, fed with the logged specific force
//! and angular rate and the gyro angular acceleration) and a verdict against the recipe's `[qc]`
//! tolerances, and per flight the calibration's health (mode, terms held, warnings) from the notes
//! the pipeline gives. Writes `qc/lines.csv` and the self-contained `qc/report.html`
//! (`report_html.rs`), prints a table (or JSON with `--json`). Exit 0 when it ran, whatever the
//! verdicts (they are data); 2 on bad input.

use crate::EXIT_FAILURE;
use crate::line_stages::{self, LineStages, Segment};
use crate::logging::Log;
use crate::report_html;
use crate::run_cmd::{self, Processed, bad_input};
use crate::tables::write_atomic;
use clap::Args;
use gravgrad_core::units::EOTVOS;
use gravgrad_ingest::plan::{Plan, read_plan};
use gravgrad_lines::qc::{Component, LineMetrics, PlannedLine};
use gravgrad_lines::{
    LineInputs, LowPass, MotionSeries, MotionSettings, QcSettings, Tolerances, Verdict, assess_line,
};
use gravgrad_rotation::gyro::angular_acceleration3;
use rayon::prelude::*;
use std::io::Write;
use std::path::{Path, PathBuf};

#[derive(Args, Debug)]
pub struct QcArgs {
    /// Processing recipe (layout `recipe/1`, TOML).
    #[arg(value_name = "RECIPE")]
    pub recipe: PathBuf,
    /// Output folder; the QC files go to its `qc/` (default: the recipe's `output.folder`).
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
}

/// Component names as the QC reasons and the report spell them.
pub const NAMES: [&str; 6] = ["Gxx", "Gxy", "Gxz", "Gyy", "Gyz", "Gzz"];

/// The QC of one line.
pub struct LineQc {
    /// Index into the stages' segments.
    pub segment: usize,
    pub flight_name: String,
    /// `None` when the line could not be assessed (the verdict says why).
    pub metrics: Option<LineMetrics>,
    pub verdict: Verdict,
}

/// The recipe's `[qc]` and `[filter]` as QC settings.
pub fn settings(recipe: &gravgrad_ingest::recipe::Recipe) -> QcSettings {
    let q = &recipe.qc;
    QcSettings {
        tolerances: Tolerances {
            max_line_deviation_m: q.max_line_deviation_m,
            clearance_tolerance_m: q.clearance_tolerance_m,
            max_turbulence_m_s2: q.max_turbulence_m_s2,
            max_noise_e: q.max_noise_e,
            max_gap_s: q.max_gap_s,
            max_motion_e: q.max_motion_e,
            ..Tolerances::default()
        },
        low_pass: LowPass {
            cutoff_wavelength_m: recipe.filter.cutoff_wavelength_m,
            ..LowPass::default()
        },
        motion: MotionSettings {
            band_hz: q.motion_band_hz,
            ..MotionSettings::default()
        },
        ..QcSettings::default()
    }
}

/// The angular acceleration of a flight's sensor frame, rad/s², sensor axes: the logged `wx wy wz`
/// differentiated after the recipe's `rotation.gyro_lowpass_hz` low-pass, the same function and
/// settings the solve's gyro α comes from. `None` when the flight lacks a column or a time base, or
/// its table does not match the processed samples.
pub struct FlightMotion {
    alpha: [Vec<f64>; 3],
}

fn flight_motion(p: &Processed, k: usize, cutoff_hz: f64) -> Option<FlightMotion> {
    let f = p.survey.flights.get(k)?;
    let n = p.results.get(k)?.time.len();
    let rate = f.time_base.as_ref()?.rate_hz;
    let w = [
        f.flight.table.get("wx")?,
        f.flight.table.get("wy")?,
        f.flight.table.get("wz")?,
    ];
    if w.iter().any(|c| c.len() != n) || rate.is_nan() || rate <= 0.0 {
        return None;
    }
    Some(FlightMotion {
        alpha: angular_acceleration3(w, rate, cutoff_hz),
    })
}

/// The motion series of samples `range` of flight `k`: logged specific force `fx fy fz` and
/// angular rate `wx wy wz` (sensor axes) and the flight's gyro angular acceleration. The tensor
/// judged is in NED and these are in sensor axes: along a line the attitude is close to one fixed
/// rotation, so for a correlation test they serve as they are (docs/methods/lines.md).
fn motion_series<'a>(
    p: &'a Processed,
    k: usize,
    m: Option<&'a FlightMotion>,
    range: std::ops::Range<usize>,
) -> Option<MotionSeries<'a>> {
    let m = m?;
    let t = &p.survey.flights.get(k)?.flight.table;
    let n = m.alpha[0].len();
    let col = |name: &str| -> Option<&'a [f64]> {
        let c = t.get(name)?;
        (c.len() == n).then(|| &c[range.clone()])
    };
    Some(MotionSeries {
        specific_force_m_s2: [col("fx")?, col("fy")?, col("fz")?],
        angular_rate_rad_s: [col("wx")?, col("wy")?, col("wz")?],
        angular_acceleration_rad_s2: [
            &m.alpha[0][range.clone()],
            &m.alpha[1][range.clone()],
            &m.alpha[2][range.clone()],
        ],
    })
}

/// The vertical acceleration on a line: the logged `fz` less its mean over the line's finite
/// samples (the platform is stabilised, so `fz` is along the vertical; its mean is gravity).
fn vertical_acceleration(fz: &[f64]) -> Vec<f64> {
    let (s, n) = fz
        .iter()
        .filter(|v| v.is_finite())
        .fold((0.0, 0usize), |(s, n), v| (s + v, n + 1));
    let mean = if n > 0 { s / n as f64 } else { f64::NAN };
    fz.iter().map(|v| v - mean).collect()
}

/// The straight chord of the line's first and last located samples: the planned line when no plan
/// is given.
fn chord(x: &[f64], y: &[f64]) -> Option<PlannedLine> {
    let ok = |i: &usize| x[*i].is_finite() && y[*i].is_finite();
    let a = (0..x.len()).find(ok)?;
    let b = (0..x.len()).rev().find(ok)?;
    Some(PlannedLine {
        start_m: [x[a], y[a]],
        end_m: [x[b], y[b]],
    })
}

/// Assesses one line.
fn assess(
    p: &Processed,
    st: &LineStages,
    k: usize,
    settings: &QcSettings,
    plan: Option<&Plan>,
    motion: &[Option<FlightMotion>],
) -> LineQc {
    let s: &Segment = &st.segments[k];
    let r = &p.results[s.flight];
    let range = s.range();
    let reduced: Vec<(usize, Vec<f64>)> = (0..6)
        .filter(|c| st.observed[*c])
        .map(|c| {
            (
                c,
                range
                    .clone()
                    .map(|i| line_stages::reduced(r, c, i) * EOTVOS)
                    .collect(),
            )
        })
        .collect();
    let fz = p
        .survey
        .flights
        .get(s.flight)
        .and_then(|f| f.flight.table.get("fz"))
        .filter(|f| f.len() == r.time.len())
        .map(|f| vertical_acceleration(&f[range.clone()]));
    let zeros = vec![[0.0; 3]; range.len()];
    let planned: Option<Vec<f64>> = p
        .survey
        .recipe
        .as_ref()
        .and_then(|rc| rc.qc.planned_clearance_m)
        .map(|c| vec![c; range.len()]);
    let x = &r.positions.easting_m[range.clone()];
    let y = &r.positions.northing_m[range.clone()];
    let inputs = LineInputs {
        time_s: &r.time[range.clone()],
        x_m: x,
        y_m: y,
        components: reduced
            .iter()
            .map(|(c, v)| Component {
                name: NAMES[*c],
                values: v,
            })
            .collect(),
        trace: Some(&r.trace[range.clone()]),
        alpha_pairs: r.alpha_difference.as_ref().map(|a| &a[range.clone()]),
        alpha_gyro: r.alpha_difference.as_ref().map(|_| &zeros[..]),
        vertical_acceleration_m_s2: fz.as_deref(),
        clearance_m: r.clearance.as_ref().map(|c| &c[range.clone()]),
        planned_clearance_m: planned.as_deref(),
        plan: plan
            .and_then(|pl| pl.get(&s.line))
            .map(|v| PlannedLine {
                start_m: [v[0], v[1]],
                end_m: [v[2], v[3]],
            })
            .or_else(|| chord(x, y)),
        motion: motion_series(
            p,
            s.flight,
            motion.get(s.flight).and_then(Option::as_ref),
            range.clone(),
        ),
    };
    let flight_name = p.names.get(s.flight).cloned().unwrap_or_default();
    match assess_line(&inputs, settings) {
        Ok((m, v)) => LineQc {
            segment: k,
            flight_name,
            metrics: Some(m),
            verdict: v,
        },
        Err(e) => LineQc {
            segment: k,
            flight_name,
            metrics: None,
            verdict: Verdict {
                pass: false,
                reasons: vec![format!("could not be assessed: {e}")],
            },
        },
    }
}

/// Every line's QC, in the order of the segments.
pub fn assess_all(
    p: &Processed,
    st: &LineStages,
    settings: &QcSettings,
    plan: Option<&Plan>,
) -> Vec<LineQc> {
    let cutoff = p
        .survey
        .recipe
        .as_ref()
        .map_or(2.0, |r| r.rotation.gyro_lowpass_hz);
    let motion: Vec<Option<FlightMotion>> = (0..p.results.len())
        .into_par_iter()
        .map(|k| flight_motion(p, k, cutoff))
        .collect();
    (0..st.segments.len())
        .into_par_iter()
        .map(|k| assess(p, st, k, settings, plan, &motion))
        .collect()
}

/// What one flight's calibration could not determine, as QC reports it: per line in
/// `qc/lines.csv`, per flight in the table, the JSON and the report's Calibration section.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct CalibrationHealth {
    /// The recipe's `calibration.mode`: `estimate`, `file` or `none`.
    pub mode: &'static str,
    /// The terms held at their prior, per fitted series (`Gxx` … `αz`, `pair xy`), in the
    /// calibration's order: (series, terms).
    pub held: Vec<(String, Vec<String>)>,
    /// One line per held term with its reason and estimate (empty for a flight reused from the
    /// flight store, which keeps only the summary).
    pub held_reasons: Vec<String>,
    /// Every other note: dropped or bridged channels, drift fitted against time, the band.
    pub warnings: Vec<String>,
}

impl CalibrationHealth {
    /// The number of terms held.
    pub fn terms_held(&self) -> usize {
        self.held.iter().map(|(_, t)| t.len()).sum()
    }

    /// The reasons of the terms of `series`, each without the series' name.
    pub fn reasons_of<'a>(&'a self, series: &'a str) -> impl Iterator<Item = &'a str> + 'a {
        self.held_reasons
            .iter()
            .filter_map(move |l| l.strip_prefix(series)?.strip_prefix(": "))
    }
}

/// The series and terms of the calibration's summary note "calibration terms held at <prior>
/// (…): Gxx [fz², drift]; pair xy [κx]"; `None` when `note` is not that summary.
pub fn held_terms(note: &str) -> Option<Vec<(String, Vec<String>)>> {
    let rest = note.strip_prefix(crate::pipeline::HELD_SUMMARY)?;
    let (_, list) = rest.split_once("): ")?;
    Some(
        list.split("; ")
            .filter_map(|group| {
                let (series, terms) = group.split_once(" [")?;
                let terms = terms.strip_suffix(']')?;
                Some((
                    series.to_string(),
                    terms.split(", ").map(String::from).collect(),
                ))
            })
            .collect(),
    )
}

/// The calibration health of a flight processed with calibration mode `mode`.
pub fn flight_health(
    mode: gravgrad_ingest::recipe::CalibrationMode,
    notes: &[String],
    held_reasons: &[String],
) -> CalibrationHealth {
    use gravgrad_ingest::recipe::CalibrationMode;
    let mut h = CalibrationHealth {
        mode: match mode {
            CalibrationMode::Estimate => "estimate",
            CalibrationMode::File => "file",
            CalibrationMode::None => "none",
        },
        held_reasons: held_reasons.to_vec(),
        ..CalibrationHealth::default()
    };
    for n in notes {
        match held_terms(n) {
            Some(groups) => h.held.extend(groups),
            None => h.warnings.push(n.clone()),
        }
    }
    h
}

/// The calibration health of every flight of `p`, in the order of `p.results`.
pub fn calibration_health(
    p: &Processed,
    recipe: &gravgrad_ingest::recipe::Recipe,
) -> Vec<CalibrationHealth> {
    p.results
        .iter()
        .map(|r| {
            flight_health(
                recipe.calibration.mode,
                &r.calibration_notes,
                &r.calibration_held,
            )
        })
        .collect()
}

fn plural(n: usize, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
}

/// "N terms held, M warnings".
pub fn health_counts(h: &CalibrationHealth) -> String {
    format!(
        "{}, {}",
        plural(h.terms_held(), "term held", "terms held"),
        plural(h.warnings.len(), "warning", "warnings")
    )
}

fn opt(v: Option<f64>, digits: usize) -> String {
    match v {
        Some(x) if x.is_finite() => format!("{x:.digits$}"),
        _ => String::new(),
    }
}

/// The largest noise after filtering over the components, E.
pub fn worst_noise(m: &LineMetrics) -> Option<f64> {
    m.components
        .iter()
        .filter_map(|c| c.noise_after_filter_e)
        .reduce(f64::max)
}

/// The largest motion part over the components whose fit is significant at `level`, E (0 when
/// none is); `None` when no component was tested.
pub fn worst_motion(m: &LineMetrics, level: f64) -> Option<f64> {
    m.components
        .iter()
        .filter_map(|c| c.motion.as_ref())
        .map(|f| {
            if f.p_value < level {
                f.motion_rms_e
            } else {
                0.0
            }
        })
        .reduce(f64::max)
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
                            row.push(opt(x.noise_density_e_rt_hz, 4));
                            row.push(opt(x.noise_after_filter_e, 4));
                            row.push(opt(x.residual_rms_e, 4));
                            row.push(x.spikes.to_string());
                            match &x.motion {
                                Some(f) => {
                                    row.push(format!("{:.4}", f.motion_rms_e));
                                    row.push(format!("{:.4}", f.motion_rms_se_e));
                                    row.push(opt(Some(f.f_statistic), 4));
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
                row.push(opt(m.trace_rms_e, 4));
                row.push(opt(m.alpha_difference_rms_rad_s2, 9));
                row.push(opt(m.turbulence_m_s2, 4));
                row.push(opt(m.clearance_departure_m, 2));
                row.push(opt(m.line_deviation_m, 2));
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
            let t = opt(v, d);
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

/// Per flight: the calibration mode, the counts, the notes as logged, the held terms per series
/// with their reasons, and every pair's coefficients in the report's units.
fn flights_json(p: &Processed, health: &[CalibrationHealth]) -> Vec<serde_json::Value> {
    use crate::calibrate_cmd::{baseline_of, baselines, figures};
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

fn json(
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

fn write_text(path: &Path, text: &str) -> Result<(), String> {
    write_atomic(path, |f| {
        f.write_all(text.as_bytes()).map_err(|e| e.to_string())
    })
    .map_err(|e| e.to_string())
}

/// Assesses every line against the recipe's `[qc]` and writes `<qc_dir>/lines.csv` and
/// `<qc_dir>/report.html`. `Err(code)` after printing what was wrong.
pub fn write_qc(
    qc_dir: &Path,
    p: &Processed,
    stages: &LineStages,
    recipe: &gravgrad_ingest::recipe::Recipe,
) -> Result<Vec<LineQc>, u8> {
    let settings = settings(recipe);
    let plan = match &recipe.qc.plan {
        Some(rel) => {
            Some(read_plan(&recipe.resolve(rel)).map_err(|problems| bad_input(&problems))?)
        }
        None => None,
    };
    let qcs = assess_all(p, stages, &settings, plan.as_ref());
    let health = calibration_health(p, recipe);
    let csv = lines_csv(stages, &qcs, &health);
    let html = report_html::render(p, stages, &qcs, &settings, &health);
    for (name, text) in [("lines.csv", &csv), ("report.html", &html)] {
        if let Err(e) = write_text(&qc_dir.join(name), text) {
            eprintln!("error: {e}");
            return Err(EXIT_FAILURE);
        }
    }
    Ok(qcs)
}

pub fn run(args: &QcArgs, log: &Log, json_out: bool) -> u8 {
    // The folder is checked before any work, as a run's is.
    let checked = match run_cmd::checked_qc_folder(&args.recipe, args.out.as_deref()) {
        Ok(c) => c,
        Err(code) => return code,
    };
    let p = match run_cmd::process(&args.recipe, log, run_cmd::CalibrationChoice::Recipe) {
        Ok(p) => p,
        Err(code) => return code,
    };
    let Some(recipe) = p.survey.recipe.as_ref() else {
        return crate::EXIT_BAD_INPUT;
    };
    let clock = std::time::Instant::now();
    let stages = match line_stages::compute(&p.results, recipe, &args.recipe) {
        Ok(s) => s,
        Err(problem) => return bad_input(&[problem]),
    };
    for n in &stages.notes {
        log.info(n);
    }
    let folder = checked.unwrap_or_else(|| run_cmd::output_folder(&p, args.out.as_deref()));
    let dir = folder.join("qc");
    // Written whole beside `qc/` and swapped in at once: a stopped run leaves the old `qc/`.
    let next = folder.join(format!(
        "{}{}",
        crate::staging::QC_NEXT_PREFIX,
        std::process::id()
    ));
    if let Err(e) = std::fs::create_dir_all(&next) {
        eprintln!("error: {}: cannot make the folder: {e}", next.display());
        return crate::EXIT_FAILURE;
    }
    let qcs = match write_qc(&next, &p, &stages, recipe) {
        Ok(q) => q,
        Err(code) => {
            let _ = std::fs::remove_dir_all(&next);
            return code;
        }
    };
    if let Err(e) = crate::staging::replace_folder(&next, &dir) {
        eprintln!("error: {e}");
        return crate::EXIT_FAILURE;
    }
    log.info(&format!(
        "filter, levelling and QC of {} lines in {:.2} s",
        qcs.len(),
        clock.elapsed().as_secs_f64()
    ));
    let survey = recipe.survey.name.as_str();
    let health = calibration_health(&p, recipe);
    if json_out {
        let flights = flights_json(&p, &health);
        println!("{}", json(survey, &stages, &qcs, flights));
    } else {
        let level = settings(recipe).tolerances.motion_significance;
        print!("{}", table(&stages, &qcs, level, &p.names, &health));
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

#[cfg(test)]
mod tests {
    use super::*;
    use gravgrad_ingest::recipe::CalibrationMode;

    /// The summary the demo's first flight logs (`gravgrad qc data/demo/recipe.toml`), whose
    /// `gravgrad calibrate` report lists 74 held terms, one line each.
    const DEMO_F01: &str = "calibration terms held at zero (not resolved, or below 4 standard errors): Gxx [fx², fx·fy, fy·fz, fy², fz², fx·fz, temperature, drift]; Gxy [fz², fx·fy, fy², fx·fz, fy·fz, fx², drift, temperature]; Gxz [fx·fz, fx², fz², fx·fy, fy·fz, fy², drift, temperature]; Gyy [fy², fx², fx·fz, fx·fy, fy·fz, fz², temperature]; Gyz [fy², fz², fy·fz, fx², fx·fz, fx·fy, temperature, drift]; Gzz [fz², fx·fz, fx², fy², fx·fy, fy·fz, drift, temperature]; αx [fz², fx·fy, fx·fz, fx², fy·fz, fy², drift, temperature]; αy [fx·fz, fx², fz², fx·fy, fy², fy·fz, κx, drift, temperature]; αz [fx·fy, fx·fz, fx², fz², fy·fz, fy², κy, κx, drift, temperature]";

    #[test]
    fn the_demo_summary_gives_its_series_and_74_terms() {
        let h = flight_health(CalibrationMode::Estimate, &[DEMO_F01.to_string()], &[]);
        let series: Vec<&str> = h.held.iter().map(|(s, _)| s.as_str()).collect();
        assert_eq!(
            series,
            ["Gxx", "Gxy", "Gxz", "Gyy", "Gyz", "Gzz", "αx", "αy", "αz"]
        );
        let counts: Vec<usize> = h.held.iter().map(|(_, t)| t.len()).collect();
        assert_eq!(counts, [8, 8, 8, 7, 8, 8, 8, 9, 10]);
        assert_eq!(h.terms_held(), 74);
        assert_eq!(h.held[8].1[6..8], ["κy", "κx"]);
        assert!(h.warnings.is_empty());
        assert_eq!(health_counts(&h), "74 terms held, 0 warnings");
    }

    #[test]
    fn a_file_prior_and_pair_series_are_read_and_other_notes_are_warnings() {
        let notes = [
            "`temp` is constant over the lines (standard deviation 0.00e0, at least 1e-3 needed): its term is dropped".to_string(),
            "calibration terms held at the file's value (not resolved, or below 3 standard errors): pair xy [drift (crossings)]; pair x [κz, drift t^2]".to_string(),
        ];
        let reasons = [
            "pair xy: drift (crossings) held at the file's value — too few crossings".to_string(),
            "pair x: κz held at the file's value — not significant".to_string(),
            "pair x: drift t^2 held at the file's value — not significant".to_string(),
        ];
        let h = flight_health(CalibrationMode::File, &notes, &reasons);
        assert_eq!(h.mode, "file");
        assert_eq!(
            h.held,
            [
                ("pair xy".to_string(), vec!["drift (crossings)".to_string()]),
                (
                    "pair x".to_string(),
                    vec!["κz".to_string(), "drift t^2".to_string()]
                ),
            ]
        );
        assert_eq!(h.warnings, notes[..1]);
        assert_eq!(health_counts(&h), "3 terms held, 1 warning");
        // `pair x` does not take the reasons of `pair xy`.
        assert_eq!(
            h.reasons_of("pair x").collect::<Vec<_>>(),
            [
                "κz held at the file's value — not significant",
                "drift t^2 held at the file's value — not significant"
            ]
        );
        assert_eq!(h.reasons_of("pair xy").count(), 1);
        assert!(held_terms(&notes[0]).is_none());
    }

    #[test]
    fn no_calibration_is_mode_none_with_nothing_held() {
        let h = flight_health(CalibrationMode::None, &[], &[]);
        assert_eq!((h.mode, h.terms_held(), h.warnings.len()), ("none", 0, 0));
    }
}
