//! Stability of a calibration between flights: how far each coefficient an instrument should keep
//! (κ, the angular-acceleration terms, the temperature coefficient, the quadratic terms, the axis
//! errors' rotation terms) moved from
//! one calibration to another, measured in standard errors of the difference,
//!
//! ```text
//!     z = (x₂ − x₁) / √(σ₁² + σ₂²),
//! ```
//!
//! which is N(0, 1) when both estimates are unbiased, independent and the coefficient did not change.
//! Bias and drift are left out: they are expected to change from flight to flight. A coefficient
//! without a finite, positive standard error in either file (held at its prior, or not estimated) is
//! not compared. Units as in [`crate::file`]; no I/O.

use crate::file::{CalibrationFile, PairEntry};

/// One coefficient of one pair in two calibrations.
#[derive(Clone, Debug, PartialEq)]
pub struct Change {
    /// Pair identifier.
    pub pair: String,
    /// Coefficient name as the calibration file spells it, with its index (`kappa[2]`).
    pub term: String,
    /// Value in the first calibration (the reference), file units.
    pub from: f64,
    /// Value in the second calibration, file units.
    pub to: f64,
    /// Change in standard errors of the difference.
    pub z: f64,
}

/// The coefficients an instrument keeps between flights, with their standard errors, by file name.
fn stable_terms(p: &PairEntry) -> Vec<(String, f64, f64)> {
    let mut out = Vec::new();
    for k in 0..3 {
        out.push((format!("kappa[{k}]"), p.kappa[k], p.kappa_se[k]));
    }
    for k in 0..3 {
        out.push((
            format!("rotation_m[{k}]"),
            p.rotation_m[k],
            p.rotation_se[k],
        ));
    }
    if let (Some(v), Some(e)) = (p.temperature_m_s2_per_c, p.temperature_se) {
        out.push(("temperature_m_s2_per_c".into(), v, e));
    }
    if let (Some(v), Some(e)) = (p.quadratic_per_m_s2, p.quadratic_se) {
        for k in 0..6 {
            out.push((format!("quadratic_per_m_s2[{k}]"), v[k], e[k]));
        }
    }
    if let (Some(v), Some(e)) = (p.rotation_coupling_m, p.rotation_coupling_se) {
        for k in 0..9 {
            out.push((format!("rotation_coupling_m[{k}]"), v[k], e[k]));
        }
    }
    out
}

fn usable(se: f64) -> bool {
    se.is_finite() && se > 0.0
}

/// Every coefficient that both calibrations estimated with a standard error, pair by pair (pairs
/// matched by identifier, in the order of `reference`).
pub fn compare(reference: &CalibrationFile, other: &CalibrationFile) -> Vec<Change> {
    let mut out = Vec::new();
    for a in &reference.pair {
        let Some(b) = other.pair.iter().find(|b| b.id == a.id) else {
            continue;
        };
        let terms_b = stable_terms(b);
        for (term, from, se_a) in stable_terms(a) {
            let Some((_, to, se_b)) = terms_b.iter().find(|(t, _, _)| *t == term) else {
                continue;
            };
            if !(usable(se_a) && usable(*se_b) && from.is_finite() && to.is_finite()) {
                continue;
            }
            out.push(Change {
                pair: a.id.clone(),
                z: (to - from) / se_a.hypot(*se_b),
                term,
                from,
                to: *to,
            });
        }
    }
    out
}

/// Summary of a comparison: how many coefficients were compared, the largest |z| and where, and
/// every change beyond `limit` standard errors, largest first.
#[derive(Clone, Debug, PartialEq)]
pub struct Summary {
    pub compared: usize,
    pub largest: Option<Change>,
    pub beyond: Vec<Change>,
}

/// Summarises `changes` against `limit` standard errors.
pub fn summarise(changes: &[Change], limit: f64) -> Summary {
    let mut beyond: Vec<Change> = changes
        .iter()
        .filter(|c| c.z.abs() > limit)
        .cloned()
        .collect();
    beyond.sort_by(|a, b| b.z.abs().total_cmp(&a.z.abs()));
    let largest = changes
        .iter()
        .max_by(|a, b| a.z.abs().total_cmp(&b.z.abs()))
        .cloned();
    Summary {
        compared: changes.len(),
        largest,
        beyond,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn entry(id: &str, kappa: [f64; 3], se: [f64; 3]) -> PairEntry {
        PairEntry {
            id: id.into(),
            kappa,
            kappa_se: se,
            rotation_m: [0.0; 3],
            rotation_se: [0.0; 3],
            bias_m_s2: 1.0,
            bias_se: 1e-9,
            drift: vec![],
            drift_se: vec![],
            t_mid_s: 0.0,
            temperature_m_s2_per_c: None,
            temperature_se: None,
            temperature_mean_c: 0.0,
            self_gradient_m_s2_per_rad: None,
            self_gradient_se: None,
            quadratic_per_m_s2: None,
            quadratic_se: None,
            force_mean_m_s2: None,
            gyro_rate_m_s2_per_rad_s: None,
            gyro_rate_se: None,
            rotation_coupling_m: None,
            rotation_coupling_se: None,
            band_residual_m_s2: 0.0,
        }
    }

    fn file(pairs: Vec<PairEntry>) -> CalibrationFile {
        CalibrationFile {
            layout: crate::file::LAYOUT.into(),
            source: String::new(),
            band_hz: [0.05, 1.0],
            pair: pairs,
        }
    }

    #[test]
    fn a_change_is_measured_in_standard_errors_of_the_difference_and_held_terms_are_skipped() {
        // κx moves by 5e-6 with standard errors 3e-6 and 4e-6: z = 1; κy by 5e-5: z = 10; κz is held
        // (standard error 0) in the second file; rotation terms have no standard error at all.
        let a = file(vec![entry("xx", [1e-5, 2e-5, 3e-5], [3e-6, 3e-6, 3e-6])]);
        let b = file(vec![entry("xx", [1.5e-5, 7e-5, 3e-5], [4e-6, 4e-6, 0.0])]);
        let c = compare(&a, &b);
        assert_eq!(c.len(), 2, "{c:?}");
        assert!((c[0].z - 1.0).abs() < 1e-12, "{c:?}");
        assert!((c[1].z - 10.0).abs() < 1e-11, "{c:?}");
        let s = summarise(&c, 3.0);
        assert_eq!(s.compared, 2);
        assert_eq!(s.beyond.len(), 1);
        assert_eq!(s.beyond[0].term, "kappa[1]");
        assert_eq!(s.largest.unwrap().term, "kappa[1]");
    }

    #[test]
    fn pairs_are_matched_by_identifier_and_bias_is_not_compared() {
        let a = file(vec![
            entry("xx", [0.0; 3], [1e-6; 3]),
            entry("yy", [0.0; 3], [1e-6; 3]),
        ]);
        let mut moved = entry("xx", [0.0; 3], [1e-6; 3]);
        moved.bias_m_s2 = 1e3;
        let b = file(vec![entry("yy", [2e-6, 0.0, 0.0], [1e-6; 3]), moved]);
        let c = compare(&a, &b);
        assert_eq!(c.len(), 6);
        assert!(c.iter().filter(|x| x.pair == "xx").all(|x| x.z == 0.0));
        let yy: Vec<_> = c.iter().filter(|x| x.pair == "yy").collect();
        assert!((yy[0].z - 2f64.sqrt()).abs() < 1e-12, "{yy:?}");
    }
}
