//! A calibration as people read it: each pair's coefficients in E, E/h and E/°C with their
//! standard errors (`gravgrad calibrate`'s report, the QC report's calibration section), and the
//! stability of the instrument's coefficients between calibrations.

use crate::processed::Processed;
use gravgrad_calibrate::file::{CalibrationFile, PairEntry};
use gravgrad_calibrate::stability;
use gravgrad_core::units::EOTVOS;
use std::fmt::Write as _;
use std::path::PathBuf;

/// A pair's calibration in the units a report shows: κ with standard errors, the first drift
/// coefficient in E/h, the temperature term in E/°C and the band residual in E (each m/s² figure
/// divided by the pair's baseline length, then by 1 E).
#[derive(Clone, Debug, PartialEq)]
pub struct PairFigures {
    /// (value, standard error) of κx κy κz.
    pub kappa: [(f64, f64); 3],
    /// `None` when the drift polynomial has no term in t (`calibration.drift_order = 0`).
    pub drift_e_h: Option<f64>,
    /// `None` when the flight had no usable temperature log.
    pub temperature_e_c: Option<f64>,
    pub band_residual_e: f64,
}

/// The figures of one stored pair entry, its baseline `baseline_m` long.
pub fn figures(p: &PairEntry, baseline_m: f64) -> PairFigures {
    let to_e = |v: f64| v / baseline_m / EOTVOS;
    PairFigures {
        kappa: std::array::from_fn(|i| (p.kappa[i], p.kappa_se[i])),
        drift_e_h: p.drift.first().map(|d| to_e(*d) * 3600.0),
        temperature_e_c: p.temperature_m_s2_per_c.map(to_e),
        band_residual_e: to_e(p.band_residual_m_s2),
    }
}

/// The baseline length of every pair of the survey's instrument, m.
pub fn baselines(p: &Processed) -> Vec<(String, f64)> {
    p.survey
        .instrument
        .as_ref()
        .map(|i| {
            i.pairs
                .iter()
                .map(|g| (g.id.clone(), gravgrad_core::mat3::norm(&g.baseline)))
                .collect()
        })
        .unwrap_or_default()
}

/// The baseline of pair `id` in `baselines`, m (1 when the instrument lacks it).
pub fn baseline_of(baselines: &[(String, f64)], id: &str) -> f64 {
    baselines.iter().find(|(b, _)| b == id).map_or(1.0, |x| x.1)
}

/// The report: one row per pair with its coefficients and standard errors.
pub fn report(name: &str, file: &CalibrationFile, baselines: &[(String, f64)]) -> String {
    let mut s = format!(
        "calibration of {name} (band {}–{} Hz)\n{:<6} {:>24} {:>24} {:>24} {:>14} {:>12} {:>10}\n",
        file.band_hz[0],
        file.band_hz[1],
        "pair",
        "κx ± SE",
        "κy ± SE",
        "κz ± SE",
        "drift E/h",
        "temp E/°C",
        "resid E"
    );
    for p in &file.pair {
        let f = figures(p, baseline_of(baselines, &p.id));
        let k = |i: usize| format!("{:+.3e} ± {:.1e}", f.kappa[i].0, f.kappa[i].1);
        let _ = writeln!(
            s,
            "{:<6} {:>24} {:>24} {:>24} {:>14} {:>12} {:>10.3}",
            p.id,
            k(0),
            k(1),
            k(2),
            f.drift_e_h.map_or("—".into(), |d| format!("{d:+.3}")),
            f.temperature_e_c.map_or("—".into(), |t| format!("{t:+.3}")),
            f.band_residual_e
        );
    }
    s
}

/// Standard errors beyond which a coefficient's change between calibrations is flagged: the same
/// limit as a flight's change from its calibration file in QC.
pub const STABILITY_LIMIT: f64 = crate::pipeline::FILE_CHANGE_LIMIT;

/// The calibration file the recipe names, as it was before this run writes over it (`None` when
/// absent or unreadable).
pub fn previous_file(p: &Processed) -> Option<(PathBuf, CalibrationFile)> {
    let r = p.survey.recipe.as_ref()?;
    let path = r.resolve(r.calibration.file.as_deref()?);
    let file: CalibrationFile = gravgrad_ingest::tomlfile::read(&path).ok()?;
    Some((path, file))
}

/// One comparison's lines: what was compared, the largest change, and every change beyond
/// [`STABILITY_LIMIT`].
fn stability_lines(what: &str, reference: &CalibrationFile, other: &CalibrationFile) -> String {
    let changes = stability::compare(reference, other);
    let s = stability::summarise(&changes, STABILITY_LIMIT);
    let mut text = format!("  {what}: {} coefficients compared", s.compared);
    match &s.largest {
        Some(c) => {
            let _ = write!(
                text,
                ", largest change {:.1} SE (pair {} {})",
                c.z.abs(),
                c.pair,
                c.term
            );
        }
        None => text.push_str(" (none with standard errors in both)"),
    }
    if s.beyond.is_empty() {
        let _ = writeln!(text, "; none beyond {STABILITY_LIMIT} SE");
    } else {
        let _ = writeln!(text, "; {} beyond {STABILITY_LIMIT} SE:", s.beyond.len());
        for c in &s.beyond {
            let _ = writeln!(
                text,
                "    pair {:<6} {:<26} {:>12.4e} -> {:>12.4e}  ({:+.1} SE)",
                c.pair, c.term, c.from, c.to, c.z
            );
        }
    }
    text
}

/// Stability of the instrument's coefficients (κ, angular-acceleration terms, temperature and
/// quadratic coefficients; bias and drift left out): every flight against the first, and every
/// flight against the calibration file the recipe names, when one was there before. Empty when
/// there is nothing to compare.
pub fn stability_report(
    made: &[(String, CalibrationFile)],
    previous: Option<&(PathBuf, CalibrationFile)>,
) -> String {
    let mut body = String::new();
    if let Some((first, reference)) = made.first() {
        for (name, file) in &made[1..] {
            body.push_str(&stability_lines(
                &format!("{name} against {first}"),
                reference,
                file,
            ));
        }
    }
    if let Some((path, old)) = previous {
        for (name, file) in made {
            body.push_str(&stability_lines(
                &format!("{name} against the previous {}", path.display()),
                old,
                file,
            ));
        }
    }
    if body.is_empty() {
        return body;
    }
    format!(
        "stability of the instrument's coefficients (change in standard errors of the difference; \
         bias and drift are expected to change and are not compared):\n{body}"
    )
}
