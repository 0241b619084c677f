//! The least-squares estimates of one pair's calibration and their standard errors.

use crate::bandpass::band_pass;
use gravgrad_core::pairs::PairGeometry;

/// An estimate and its standard error.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Coefficient {
    pub value: f64,
    pub std_error: f64,
}

/// Settings of the estimate.
#[derive(Clone, Debug, PartialEq)]
pub struct Settings {
    /// Band where aircraft motion dominates, Hz.
    pub band_hz: [f64; 2],
    /// Polynomial order of the drift in time (0: bias only).
    pub drift_order: usize,
    pub rate_hz: f64,
}

/// What is known of one pair's difference over a flight.
pub struct PairData<'a> {
    /// The pair's axis and baseline (sensor frame).
    pub geometry: &'a PairGeometry,
    /// d = a − b, m/s².
    pub difference: &'a [f64],
    /// Angular rate from the gyros, sensor axes, rad/s: the known centrifugal term nᵀ·ΩΩ·b is
    /// removed from d before the fit (in turns it is far larger than κ·f).
    pub omega: [&'a [f64]; 3],
    /// Specific force at the sensor origin, sensor axes, m/s².
    pub f: [&'a [f64]; 3],
    /// Angular acceleration from the gyros, sensor axes, rad/s².
    pub alpha: [&'a [f64]; 3],
    /// Time, s.
    pub time: &'a [f64],
    /// Sensor temperature, °C, when logged.
    pub temperature: Option<&'a [f64]>,
    /// Samples the fit may use (survey lines): turns carry second-order terms (scale and
    /// misalignment times the centripetal ΩΩ·r, 1e-8 m/s² at 6°/s) that the first-order model leaves
    /// out. `None`: all samples.
    pub usable: Option<&'a [bool]>,
}

/// One pair's calibration.
#[derive(Clone, Debug, PartialEq)]
pub struct PairCalibration {
    /// Coupling κ to f(O), sensor axes, dimensionless.
    pub kappa: [Coefficient; 3],
    /// Coefficients of the gyro angular acceleration (for cross pairs ≈ b × n), m.
    pub rotation: [Coefficient; 3],
    /// Bias (m/s²) at the flight's mid time, then drift coefficients of ((t − t_mid)/s)^k, m/s²/s^k.
    pub polynomial: Vec<Coefficient>,
    /// Temperature coefficient, m/s² per °C, when temperature was logged.
    pub temperature: Option<Coefficient>,
    /// Mid time of the flight, s (the polynomial's origin).
    pub t_mid: f64,
    /// Mean temperature, °C (the temperature term's origin).
    pub temperature_mean: f64,
    /// RMS of the band-limited residual, m/s².
    pub band_residual_rms: f64,
}

/// The usable samples, less `margin` samples at either side of every unusable one (the band-pass
/// spreads a turn's content over about one period of the band's low edge).
fn erode(usable: &[bool], margin: usize) -> Vec<usize> {
    let n = usable.len();
    let mut last_bad: Option<usize> = None;
    let mut dist_left = vec![usize::MAX; n];
    for i in 0..n {
        if !usable[i] {
            last_bad = Some(i);
        }
        dist_left[i] = last_bad.map_or(usize::MAX, |b| i - b);
    }
    let mut next_bad: Option<usize> = None;
    let mut keep = Vec::new();
    let mut dist_right = vec![usize::MAX; n];
    for i in (0..n).rev() {
        if !usable[i] {
            next_bad = Some(i);
        }
        dist_right[i] = next_bad.map_or(usize::MAX, |b| b - i);
    }
    for i in 0..n {
        if usable[i] && dist_left[i] > margin && dist_right[i] > margin {
            keep.push(i);
        }
    }
    keep
}

/// Least squares y ≈ X·β with standard errors inflated for autocorrelated residuals.
fn regress(columns: &[Vec<f64>], y: &[f64]) -> (Vec<Coefficient>, Vec<f64>) {
    let k = columns.len();
    let n = y.len();
    // Normal equations, scaled columns for conditioning.
    let scale: Vec<f64> = columns
        .iter()
        .map(|c| {
            (c.iter().map(|v| v * v).sum::<f64>() / n as f64)
                .sqrt()
                .max(1e-300)
        })
        .collect();
    let mut a = vec![vec![0.0; k + 1]; k];
    for i in 0..k {
        for j in 0..k {
            a[i][j] = columns[i]
                .iter()
                .zip(&columns[j])
                .map(|(p, q)| p * q)
                .sum::<f64>()
                / (scale[i] * scale[j]);
        }
        a[i][k] = columns[i].iter().zip(y).map(|(p, q)| p * q).sum::<f64>() / scale[i];
    }
    let inv = invert(&a.iter().map(|r| r[..k].to_vec()).collect::<Vec<_>>());
    let beta: Vec<f64> = (0..k)
        .map(|i| (0..k).map(|j| inv[i][j] * a[j][k]).sum::<f64>() / scale[i])
        .collect();
    let resid: Vec<f64> = (0..n)
        .map(|t| y[t] - (0..k).map(|i| beta[i] * columns[i][t]).sum::<f64>())
        .collect();
    let dof = (n as f64 - k as f64).max(1.0);
    let var = resid.iter().map(|r| r * r).sum::<f64>() / dof;
    let inflation = n as f64 / effective_size(&resid);
    let coefs = (0..k)
        .map(|i| Coefficient {
            value: beta[i],
            std_error: (var * inv[i][i] * inflation).sqrt() / scale[i],
        })
        .collect();
    (coefs, resid)
}

/// Effective number of independent samples of an autocorrelated series: n / (1 + 2 Σ ρ_k), the sum
/// over lags until the autocorrelation first drops below zero (Bretherton et al. 1999).
pub fn effective_size(r: &[f64]) -> f64 {
    let n = r.len();
    let var: f64 = r.iter().map(|v| v * v).sum::<f64>() / n as f64;
    if var <= 0.0 || n < 4 {
        return n as f64;
    }
    let mut sum = 0.0;
    for lag in 1..n / 4 {
        let rho = r[..n - lag]
            .iter()
            .zip(&r[lag..])
            .map(|(a, b)| a * b)
            .sum::<f64>()
            / (n as f64 * var);
        if rho <= 0.0 {
            break;
        }
        sum += rho;
    }
    (n as f64 / (1.0 + 2.0 * sum)).clamp(1.0, n as f64)
}

/// Gauss–Jordan inverse with partial pivoting of a small, well-conditioned matrix.
fn invert(m: &[Vec<f64>]) -> Vec<Vec<f64>> {
    let k = m.len();
    let mut a: Vec<Vec<f64>> = m
        .iter()
        .enumerate()
        .map(|(i, r)| {
            r.iter()
                .cloned()
                .chain((0..k).map(|j| if i == j { 1.0 } else { 0.0 }))
                .collect()
        })
        .collect();
    for c in 0..k {
        let p = (c..k)
            .max_by(|&i, &j| a[i][c].abs().total_cmp(&a[j][c].abs()))
            .unwrap_or(c);
        a.swap(c, p);
        let piv = a[c][c];
        if piv == 0.0 {
            continue;
        }
        let row = a[c].clone();
        for (r, other) in a.iter_mut().enumerate() {
            if r != c {
                let f = other[c] / piv;
                for (x, y) in other.iter_mut().zip(&row) {
                    *x -= f * y;
                }
            }
        }
    }
    (0..k)
        .map(|i| (0..k).map(|j| a[i][k + j] / a[i][i]).collect())
        .collect()
}

/// Estimates one pair's calibration.
pub fn estimate(d: &PairData<'_>, s: &Settings) -> PairCalibration {
    let [lo, hi] = s.band_hz;
    let bp = |x: &[f64]| band_pass(x, s.rate_hz, lo, hi);
    // d − nᵀ·ΩΩ·b, with ΩΩ·b = ω(ω·b) − |ω|²b.
    let (nv, b) = (d.geometry.axis, d.geometry.baseline);
    let diff: Vec<f64> = (0..d.difference.len())
        .map(|i| {
            let w = [d.omega[0][i], d.omega[1][i], d.omega[2][i]];
            let wb = w[0] * b[0] + w[1] * b[1] + w[2] * b[2];
            let w2 = w[0] * w[0] + w[1] * w[1] + w[2] * w[2];
            let wwb = [
                w[0] * wb - w2 * b[0],
                w[1] * wb - w2 * b[1],
                w[2] * wb - w2 * b[2],
            ];
            d.difference[i] - (nv[0] * wwb[0] + nv[1] * wwb[1] + nv[2] * wwb[2])
        })
        .collect();
    // Step 1: κ (and the rotation regressors) in the band where aircraft motion dominates.
    let mut cols: Vec<Vec<f64>> = d.f.iter().map(|c| bp(c)).collect();
    cols.extend(d.alpha.iter().map(|c| bp(c)));
    let ybp = bp(&diff);
    let rows: Vec<usize> = match d.usable {
        Some(u) => erode(u, (s.rate_hz / lo).ceil() as usize),
        None => (0..diff.len()).collect(),
    };
    let pick = |v: &[f64]| -> Vec<f64> { rows.iter().map(|&i| v[i]).collect() };
    let (c1, resid) = regress(
        &cols.iter().map(|c| pick(c)).collect::<Vec<_>>(),
        &pick(&ybp),
    );
    let band_residual_rms =
        (resid.iter().map(|r| r * r).sum::<f64>() / resid.len().max(1) as f64).sqrt();
    // Step 2: bias, drift and temperature from what remains over the whole band.
    let n = diff.len();
    let t_mid = 0.5 * (d.time[0] + d.time[n - 1]);
    let rest: Vec<f64> = (0..n)
        .map(|i| {
            diff[i]
                - (0..3)
                    .map(|k| c1[k].value * d.f[k][i] + c1[3 + k].value * d.alpha[k][i])
                    .sum::<f64>()
        })
        .collect();
    let mut cols2: Vec<Vec<f64>> = (0..=s.drift_order)
        .map(|p| d.time.iter().map(|t| (t - t_mid).powi(p as i32)).collect())
        .collect();
    let temperature_mean = d
        .temperature
        .map_or(0.0, |t| t.iter().sum::<f64>() / t.len() as f64);
    if let Some(t) = d.temperature {
        cols2.push(t.iter().map(|v| v - temperature_mean).collect());
    }
    let (c2, _) = regress(&cols2, &rest);
    let (polynomial, temperature) = if d.temperature.is_some() {
        (c2[..c2.len() - 1].to_vec(), c2.last().copied())
    } else {
        (c2, None)
    };
    PairCalibration {
        kappa: [c1[0], c1[1], c1[2]],
        rotation: [c1[3], c1[4], c1[5]],
        polynomial,
        temperature,
        t_mid,
        temperature_mean,
        band_residual_rms,
    }
}
