//! The calibration file (`calibration/1`, TOML): what a calibration flight learned, for later flights.
//!
//! Units: κ dimensionless (sensor axes x, y, z), rotation coefficients in m, bias in m/s², drift
//! coefficients in m/s²/sᵏ, temperature in m/s² per °C, self-gradient in m/s² per radian of the
//! aircraft's attitude relative to the platform. Every value carries its standard error. Reading
//! goes through the ingest crate's TOML reader (which names the key and line of a problem); this
//! module turns the file to and from [`PairCalibration`]s and says what is wrong with one.

use crate::estimate::{Coefficient, PairCalibration};
use serde::{Deserialize, Serialize};

/// The layout string of the file.
pub const LAYOUT: &str = "calibration/1";

/// A calibration file as stored.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CalibrationFile {
    pub layout: String,
    /// Free text: the flights the calibration was estimated from.
    #[serde(default)]
    pub source: String,
    /// Band of the coupling fit, Hz.
    pub band_hz: [f64; 2],
    pub pair: Vec<PairEntry>,
}

/// One pair's calibration as stored.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PairEntry {
    pub id: String,
    pub kappa: [f64; 3],
    pub kappa_se: [f64; 3],
    /// Coefficients of the angular acceleration (sensor axes), m.
    pub rotation_m: [f64; 3],
    pub rotation_se: [f64; 3],
    /// Bias at `t_mid_s`, m/s².
    pub bias_m_s2: f64,
    pub bias_se: f64,
    /// Drift coefficients of (t − t_mid)ᵏ, k = 1, 2, …, m/s²/sᵏ.
    #[serde(default)]
    pub drift: Vec<f64>,
    #[serde(default)]
    pub drift_se: Vec<f64>,
    /// Origin of the drift polynomial, GPS seconds.
    pub t_mid_s: f64,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub temperature_m_s2_per_c: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub temperature_se: Option<f64>,
    /// Origin of the temperature term, °C.
    #[serde(default)]
    pub temperature_mean_c: f64,
    /// m/s² per radian of relative roll and of relative pitch.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub self_gradient_m_s2_per_rad: Option<[f64; 2]>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub self_gradient_se: Option<[f64; 2]>,
    /// Quadratic coefficients, (m/s²)⁻¹, of (f_a − f0_a)(f_b − f0_b) in the order fx², fy², fz²,
    /// fx·fy, fx·fz, fy·fz, with f0 = `force_mean_m_s2`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub quadratic_per_m_s2: Option<[f64; 6]>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub quadratic_se: Option<[f64; 6]>,
    /// Origin of the quadratic terms, sensor axes, m/s².
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub force_mean_m_s2: Option<[f64; 3]>,
    /// Coefficients of the angular rate ωx ωy ωz, m/s² per rad/s: the trace the flight's gyro bias
    /// left in the centrifugal correction. A record of the flight, never applied to another: a gyro's
    /// bias changes from one switch-on to the next, so every flight fits its own.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gyro_rate_m_s2_per_rad_s: Option<[f64; 3]>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gyro_rate_se: Option<[f64; 3]>,
    /// Coefficients, m, of the rotation terms αx αy αz (rad/s²) and (ΩΩ)xx xy xz yy yz zz
    /// (rad²/s², ΩΩ = ωωᵀ − |ω|²I from the gyros): the pair's axis error against the gyros' frame,
    /// times its baseline. An instrument's own, like κ.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub rotation_coupling_m: Option<[f64; 9]>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub rotation_coupling_se: Option<[f64; 9]>,
    /// RMS of the band-limited residual of the fit, m/s².
    #[serde(default)]
    pub band_residual_m_s2: f64,
}

/// What is wrong with a calibration file: the dotted key and the message.
#[derive(Clone, Debug, PartialEq)]
pub struct FileProblem {
    pub key: String,
    pub message: String,
}

fn coef(value: f64, std_error: f64) -> Coefficient {
    Coefficient { value, std_error }
}

impl PairEntry {
    /// The stored entry of a calibration.
    pub fn from_calibration(id: &str, c: &PairCalibration) -> Self {
        let v = |x: &[Coefficient; 3]| std::array::from_fn(|k| x[k].value);
        let e = |x: &[Coefficient; 3]| std::array::from_fn(|k| x[k].std_error);
        Self {
            id: id.to_string(),
            kappa: v(&c.kappa),
            kappa_se: e(&c.kappa),
            rotation_m: v(&c.rotation),
            rotation_se: e(&c.rotation),
            bias_m_s2: c.polynomial.first().map_or(0.0, |p| p.value),
            bias_se: c.polynomial.first().map_or(0.0, |p| p.std_error),
            drift: c.polynomial.iter().skip(1).map(|p| p.value).collect(),
            drift_se: c.polynomial.iter().skip(1).map(|p| p.std_error).collect(),
            t_mid_s: c.t_mid,
            temperature_m_s2_per_c: c.temperature.map(|t| t.value),
            temperature_se: c.temperature.map(|t| t.std_error),
            temperature_mean_c: c.temperature_mean,
            self_gradient_m_s2_per_rad: c.self_gradient.map(|s| [s[0].value, s[1].value]),
            self_gradient_se: c.self_gradient.map(|s| [s[0].std_error, s[1].std_error]),
            quadratic_per_m_s2: c.quadratic.map(|q| q.map(|x| x.value)),
            quadratic_se: c.quadratic.map(|q| q.map(|x| x.std_error)),
            force_mean_m_s2: c.quadratic.map(|_| c.force_mean),
            gyro_rate_m_s2_per_rad_s: c.gyro_rate.map(|w| v(&w)),
            gyro_rate_se: c.gyro_rate.map(|w| e(&w)),
            rotation_coupling_m: c.rotation_coupling.map(|r| r.map(|x| x.value)),
            rotation_coupling_se: c.rotation_coupling.map(|r| r.map(|x| x.std_error)),
            band_residual_m_s2: c.band_residual_rms,
        }
    }

    /// The calibration this entry stores.
    pub fn to_calibration(&self) -> PairCalibration {
        let three = |v: &[f64; 3], e: &[f64; 3]| std::array::from_fn(|k| coef(v[k], e[k]));
        let mut polynomial = vec![coef(self.bias_m_s2, self.bias_se)];
        polynomial.extend(
            self.drift
                .iter()
                .enumerate()
                .map(|(k, v)| coef(*v, self.drift_se.get(k).copied().unwrap_or(f64::NAN))),
        );
        PairCalibration {
            kappa: three(&self.kappa, &self.kappa_se),
            rotation: three(&self.rotation_m, &self.rotation_se),
            polynomial,
            temperature: self
                .temperature_m_s2_per_c
                .map(|t| coef(t, self.temperature_se.unwrap_or(f64::NAN))),
            self_gradient: self.self_gradient_m_s2_per_rad.map(|s| {
                let e = self.self_gradient_se.unwrap_or([f64::NAN; 2]);
                [coef(s[0], e[0]), coef(s[1], e[1])]
            }),
            quadratic: self.quadratic_per_m_s2.map(|q| {
                let e = self.quadratic_se.unwrap_or([f64::NAN; 6]);
                std::array::from_fn(|m| coef(q[m], e[m]))
            }),
            force_mean: self.force_mean_m_s2.unwrap_or([0.0; 3]),
            // The file's flight's gyro bias is not this flight's (see the field).
            gyro_rate: None,
            rotation_coupling: self.rotation_coupling_m.map(|r| {
                let e = self.rotation_coupling_se.unwrap_or([f64::NAN; 9]);
                std::array::from_fn(|m| coef(r[m], e[m]))
            }),
            t_mid: self.t_mid_s,
            temperature_mean: self.temperature_mean_c,
            band_residual_rms: self.band_residual_m_s2,
        }
    }
}

impl CalibrationFile {
    /// A file holding these calibrations.
    pub fn new(source: &str, band_hz: [f64; 2], pairs: &[(String, PairCalibration)]) -> Self {
        Self {
            layout: LAYOUT.to_string(),
            source: source.to_string(),
            band_hz,
            pair: pairs
                .iter()
                .map(|(id, c)| PairEntry::from_calibration(id, c))
                .collect(),
        }
    }

    /// The TOML text of the file (same calibration, same bytes).
    pub fn to_toml(&self) -> String {
        let body = toml::to_string(self).unwrap_or_default();
        format!(
            "# gravgrad calibration: coefficients with their standard errors (docs/formats.md)\n{body}"
        )
    }

    /// Checks the file against the pairs an instrument has: layout, finite values, every pair
    /// present once, drift and standard-error lists of equal length.
    pub fn validate(&self, pair_ids: &[&str]) -> Vec<FileProblem> {
        let mut out = Vec::new();
        let mut push = |key: String, message: String| out.push(FileProblem { key, message });
        if self.layout != LAYOUT {
            push(
                "layout".into(),
                format!("layout is `{}`, expected `{LAYOUT}`", self.layout),
            );
        }
        for (i, p) in self.pair.iter().enumerate() {
            let key = |k: &str| format!("pair[{i}].{k}");
            let mut values: Vec<(&str, f64)> = vec![
                ("bias_m_s2", p.bias_m_s2),
                ("t_mid_s", p.t_mid_s),
                ("temperature_mean_c", p.temperature_mean_c),
            ];
            values.extend(p.kappa.iter().map(|v| ("kappa", *v)));
            values.extend(p.rotation_m.iter().map(|v| ("rotation_m", *v)));
            values.extend(p.drift.iter().map(|v| ("drift", *v)));
            if let Some(t) = p.temperature_m_s2_per_c {
                values.push(("temperature_m_s2_per_c", t));
            }
            if let Some(s) = p.self_gradient_m_s2_per_rad {
                values.extend(s.iter().map(|v| ("self_gradient_m_s2_per_rad", *v)));
            }
            if let Some(q) = p.quadratic_per_m_s2 {
                values.extend(q.iter().map(|v| ("quadratic_per_m_s2", *v)));
            }
            if let Some(f) = p.force_mean_m_s2 {
                values.extend(f.iter().map(|v| ("force_mean_m_s2", *v)));
            }
            if p.quadratic_per_m_s2.is_some() != p.force_mean_m_s2.is_some() {
                push(
                    key("force_mean_m_s2"),
                    "`quadratic_per_m_s2` and `force_mean_m_s2` go together".into(),
                );
            }
            if let Some((k, v)) = values.iter().find(|(_, v)| !v.is_finite()) {
                push(key(k), format!("{v} is not a finite number"));
            }
            if p.drift.len() != p.drift_se.len() {
                push(
                    key("drift_se"),
                    format!(
                        "{} standard errors for {} drift coefficients",
                        p.drift_se.len(),
                        p.drift.len()
                    ),
                );
            }
            if !pair_ids.contains(&p.id.as_str()) {
                push(
                    key("id"),
                    format!(
                        "pair `{}` is not in the instrument (it has {})",
                        p.id,
                        pair_ids.join(", ")
                    ),
                );
            }
            if self.pair[..i].iter().any(|q| q.id == p.id) {
                push(key("id"), format!("pair `{}` appears twice", p.id));
            }
        }
        for id in pair_ids {
            if !self.pair.iter().any(|p| p.id == *id) {
                push(
                    "pair".into(),
                    format!("no calibration for pair `{id}` of the instrument"),
                );
            }
        }
        out
    }

    /// The stored calibration of pair `id`.
    pub fn get(&self, id: &str) -> Option<PairCalibration> {
        self.pair
            .iter()
            .find(|p| p.id == id)
            .map(PairEntry::to_calibration)
    }
}
