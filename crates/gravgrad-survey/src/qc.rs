//! Per-line QC of a processed survey: the metrics of `gravgrad_lines::qc` (the motion-correlation
//! test among them, fed with the logged specific force and angular rate and the gyro angular
//! acceleration) and a verdict per line against the recipe's `[qc]` tolerances; per flight the
//! calibration's health (mode, terms held, warnings) from the notes the pipeline gives.
//! Written to files by `gravgrad_products::qc_files`.

use crate::RunError;
use crate::line_stages::{self, LineStages, Segment};
use crate::processed::Processed;
use gravgrad_core::units::EOTVOS;
use gravgrad_ingest::plan::{Plan, read_plan};
use gravgrad_ingest::recipe::Recipe;
use gravgrad_lines::qc::{Component, LineMetrics, PlannedLine};
use gravgrad_lines::{
    LineInputs, LowPass, MotionSeries, MotionSettings, QcSettings, Tolerances, Verdict, assess_line,
};
use gravgrad_rotation::gyro::angular_acceleration3;
use rayon::prelude::*;

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

/// Every line of the processed survey `p` assessed against the recipe's `[qc]`, with the recipe's
/// `qc.plan` (the planned lines, read from its file) when it names one.
pub fn assess_survey(
    p: &Processed,
    stages: &LineStages,
    recipe: &Recipe,
) -> Result<Vec<LineQc>, RunError> {
    let plan = match &recipe.qc.plan {
        Some(rel) => Some(read_plan(&recipe.resolve(rel)).map_err(RunError::Input)?),
        None => None,
    };
    Ok(assess_all(p, stages, &settings(recipe), plan.as_ref()))
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

/// The series and terms of the calibration's summary note "calibration terms held at \<prior\>
/// (…): Gxx [fz², drift]; pair xy \[κx\]"; `None` when `note` is not that summary.
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
