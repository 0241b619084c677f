//! The least-squares estimates of one pair's calibration and their standard errors.

use crate::bandpass::band_pass;
use gravgrad_core::pairs::PairGeometry;
use rayon::prelude::*;
use rustfft::num_complex::Complex64;

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
    /// The pair difference the known field predicts (normal field and terrain turned into the sensor
    /// frame, nᵀ·G·b), m/s²: removed before bias and drift are fitted, so that they do not absorb
    /// the normal gradient's thousands of Eötvös. `None`: nothing removed.
    pub expected: Option<&'a [f64]>,
    /// Aircraft attitude relative to the platform, radians: [roll, pitch] (aircraft minus sensor),
    /// when the aircraft's attitude is logged; the self-gradient regressors.
    pub relative_attitude: Option<[&'a [f64]; 2]>,
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
    /// Self-gradient coefficients, m/s² per radian of relative roll and of relative pitch, when the
    /// aircraft attitude was logged.
    pub self_gradient: Option<[Coefficient; 2]>,
    /// Mid time of the flight, s (the polynomial's origin).
    pub t_mid: f64,
    /// Mean temperature, °C (the temperature term's origin).
    pub temperature_mean: f64,
    /// RMS of the band-limited residual, m/s².
    pub band_residual_rms: f64,
}

/// True when `m` ≥ 1 has no prime factor but 2, 3 and 5 (a length transforms run fast at).
fn is_5_smooth(mut m: usize) -> bool {
    for p in [2, 3, 5] {
        while m > 1 && m.is_multiple_of(p) {
            m /= p;
        }
    }
    m == 1
}

/// The largest n' ≤ n whose only prime factors are 2, 3 and 5 (n ≥ 1).
fn smooth_below(n: usize) -> usize {
    (1..=n.max(1)).rev().find(|&m| is_5_smooth(m)).unwrap_or(1)
}

/// The smallest m ≥ n whose only prime factors are 2, 3 and 5.
fn smooth_above(n: usize) -> usize {
    (n.max(1)..).find(|&m| is_5_smooth(m)).unwrap_or(n)
}

/// The runs of usable samples at least `min_len` long (all samples when `usable` is `None`), as
/// index ranges.
fn usable_runs(usable: Option<&[bool]>, n: usize, min_len: usize) -> Vec<std::ops::Range<usize>> {
    let Some(u) = usable else {
        return std::iter::once(0..n).collect();
    };
    let mut out = Vec::new();
    let mut i = 0;
    while i < n {
        if !u[i] {
            i += 1;
            continue;
        }
        let start = i;
        while i < n && u[i] {
            i += 1;
        }
        if i - start >= min_len {
            out.push(start..i);
        }
    }
    out
}

/// Band-passes each run of `x` on its own and concatenates the runs less a quarter of the longest
/// period (`rate/lo/4` samples) at either end, where the mirrored extension still shows.
fn band_pass_runs(
    x: &[f64],
    runs: &[std::ops::Range<usize>],
    rate: f64,
    lo: f64,
    hi: f64,
) -> Vec<f64> {
    let margin = (rate / lo / 4.0).ceil() as usize;
    let mut out = Vec::new();
    for r in runs {
        // The run cut to the longest 5-smooth length: transforms of such lengths are planned and run
        // fast, where a length with a large prime factor costs several times more.
        let n = smooth_below(r.len());
        let y = band_pass(&x[r.start..r.start + n], rate, lo, hi);
        if y.len() > 2 * margin {
            out.extend_from_slice(&y[margin..y.len() - margin]);
        }
    }
    out
}

/// The normal equations of a set of regressor columns, scaled for conditioning: what every series
/// regressed on the same columns shares.
pub(crate) struct Normal {
    /// RMS of each column.
    scale: Vec<f64>,
    /// Inverse of the scaled XᵀX.
    inv: Vec<Vec<f64>>,
}

impl Normal {
    pub(crate) fn of(columns: &[Vec<f64>]) -> Self {
        let k = columns.len();
        let n = columns.first().map_or(0, Vec::len);
        let scale: Vec<f64> = columns
            .iter()
            .map(|c| {
                (c.iter().map(|v| v * v).sum::<f64>() / n as f64)
                    .sqrt()
                    .max(1e-300)
            })
            .collect();
        let a: Vec<Vec<f64>> = (0..k)
            .map(|i| {
                (0..k)
                    .map(|j| {
                        columns[i]
                            .iter()
                            .zip(&columns[j])
                            .map(|(p, q)| p * q)
                            .sum::<f64>()
                            / (scale[i] * scale[j])
                    })
                    .collect()
            })
            .collect();
        Self {
            inv: invert(&a),
            scale,
        }
    }
}

/// Least squares y ≈ X·β with standard errors inflated for autocorrelated residuals.
fn regress(columns: &[Vec<f64>], y: &[f64]) -> (Vec<Coefficient>, Vec<f64>) {
    regress_with(&Normal::of(columns), columns, y)
}

/// [`regress`] with the columns' normal equations formed already.
fn regress_with(normal: &Normal, columns: &[Vec<f64>], y: &[f64]) -> (Vec<Coefficient>, Vec<f64>) {
    let k = columns.len();
    let n = y.len();
    let (scale, inv) = (&normal.scale, &normal.inv);
    let rhs: Vec<f64> = (0..k)
        .map(|i| columns[i].iter().zip(y).map(|(p, q)| p * q).sum::<f64>() / scale[i])
        .collect();
    let beta: Vec<f64> = (0..k)
        .map(|i| (0..k).map(|j| inv[i][j] * rhs[j]).sum::<f64>() / scale[i])
        .collect();
    let mut resid = y.to_vec();
    for (b, c) in beta.iter().zip(columns) {
        for (r, v) in resid.iter_mut().zip(c) {
            *r -= b * v;
        }
    }
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
    let var: f64 = r.iter().map(|v| v * v).sum::<f64>() / n.max(1) as f64;
    if var <= 0.0 || n < 4 {
        return n as f64;
    }
    // A residual's autocorrelation usually drops to zero within a few lags: those are summed
    // directly, and only a residual still correlated after `DIRECT_LAGS` lags goes to the transform.
    const DIRECT_LAGS: usize = 32;
    let last = n / 4;
    let norm = 1.0 / (n as f64 * var);
    let mut sum = 0.0;
    for lag in 1..last.min(DIRECT_LAGS + 1) {
        let rho = r[..n - lag]
            .iter()
            .zip(&r[lag..])
            .map(|(a, b)| a * b)
            .sum::<f64>()
            * norm;
        if rho <= 0.0 {
            return (n as f64 / (1.0 + 2.0 * sum)).clamp(1.0, n as f64);
        }
        sum += rho;
    }
    if last <= DIRECT_LAGS + 1 {
        return (n as f64 / (1.0 + 2.0 * sum)).clamp(1.0, n as f64);
    }
    // All further lags at once: the autocovariance is the inverse transform of |FFT|² of the series padded
    // with at least n zeros (so no lag wraps round; Wiener–Khinchin), O(n log n) where the
    // lag-by-lag sum is O(n²) for smooth residuals. The padded length is the smallest with no prime
    // factor above 5, where transforms run fast.
    let m = smooth_above(2 * n);
    let mut buf: Vec<f64> = (0..m).map(|i| if i < n { r[i] } else { 0.0 }).collect();
    let mut spectrum = crate::bandpass::forward(&mut buf);
    for c in spectrum.iter_mut() {
        *c = Complex64::new(c.norm_sqr(), 0.0);
    }
    let acov = crate::bandpass::inverse(&mut spectrum, m);
    let scale = 1.0 / (m as f64 * n as f64 * var);
    for c in acov.iter().take(last).skip(DIRECT_LAGS + 1) {
        let rho = c * scale;
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

/// d − nᵀ·ΩΩ·b, m/s², with ΩΩ·b = ω(ω·b) − |ω|²b: the known centrifugal term removed.
pub(crate) fn without_centrifugal(d: &PairData<'_>) -> Vec<f64> {
    (0..d.difference.len())
        .map(|i| centrifugal_removed(d, i))
        .collect()
}

/// Sample `i` of [`without_centrifugal`], m/s².
#[inline]
pub(crate) fn centrifugal_removed(d: &PairData<'_>, i: usize) -> f64 {
    let w = [d.omega[0][i], d.omega[1][i], d.omega[2][i]];
    d.difference[i] - centrifugal_along(d.geometry.axis, d.geometry.baseline, w)
}

/// The centrifugal part of a pair's difference, n·(ω × (ω × b)) = n·(ω(ω·b) − |ω|²b), m/s²: sensing
/// axis `nv` (unit), baseline `b` (m) and rotation rate `w` (rad/s), all in the sensor frame.
#[inline]
pub(crate) fn centrifugal_along(nv: [f64; 3], b: [f64; 3], w: [f64; 3]) -> f64 {
    let wb = w[0] * b[0] + w[1] * b[1] + w[2] * b[2];
    let w2 = w[0] * w[0] + w[1] * w[1] + w[2] * w[2];
    let wwb = [
        w[0] * wb - w2 * b[0],
        w[1] * wb - w2 * b[1],
        w[2] * wb - w2 * b[2],
    ];
    nv[0] * wwb[0] + nv[1] * wwb[1] + nv[2] * wwb[2]
}

/// Estimates one pair's calibration on its own, with the gyro angular acceleration as regressors of
/// the rotation term. [`crate::joint::estimate_flight`] does better for a whole instrument: it fits
/// in the space of the solved unknowns, where the angular acceleration drops out.
pub fn estimate(d: &PairData<'_>, s: &Settings) -> PairCalibration {
    let diff: Vec<f64> = without_centrifugal(d)
        .iter()
        .enumerate()
        .map(|(i, v)| v - d.expected.map_or(0.0, |e| e[i]))
        .collect();
    fit_series(&diff, d, true, s)
}

/// What every series fitted against one flight's regressors shares: the usable runs, the
/// band-passed regressors with their normal equations (step 1), and the whole-band regressors on
/// line samples with theirs (step 2). Formed once when many series are fitted against one flight.
pub(crate) struct Design {
    runs: Vec<std::ops::Range<usize>>,
    with_alpha: bool,
    band_columns: Vec<Vec<f64>>,
    band_normal: Normal,
    t_mid: f64,
    temperature_mean: f64,
    line_rows: Vec<usize>,
    /// Polynomial, temperature and self-gradient columns on the line rows.
    whole_columns: Vec<Vec<f64>>,
    whole_normal: Normal,
    n_poly: usize,
}

impl Design {
    /// The design of `d`'s regressors: the force band-passed line by line, with the gyro angular
    /// acceleration when `with_alpha`.
    pub(crate) fn new(d: &PairData<'_>, with_alpha: bool, s: &Settings) -> Self {
        let [lo, hi] = s.band_hz;
        let n = d.time.len();
        let runs = usable_runs(d.usable, n, (s.rate_hz / lo).ceil() as usize);
        let bp = |x: &[f64]| -> Vec<f64> { band_pass_runs(x, &runs, s.rate_hz, lo, hi) };
        let mut regressors: Vec<&[f64]> = d.f.to_vec();
        if with_alpha {
            regressors.extend(d.alpha);
        }
        let band_columns: Vec<Vec<f64>> = regressors.par_iter().map(|c| bp(c)).collect();
        let t_mid = 0.5 * (d.time[0] + d.time[n - 1]);
        let mut whole = polynomial_columns(d.time, t_mid, s.drift_order);
        let n_poly = whole.len();
        let temperature_mean = d
            .temperature
            .map_or(0.0, |t| t.iter().sum::<f64>() / t.len() as f64);
        if let Some(t) = d.temperature {
            whole.push(t.iter().map(|v| v - temperature_mean).collect());
        }
        if let Some(rel) = d.relative_attitude {
            whole.extend(rel.iter().map(|c| c.to_vec()));
        }
        // Over line samples only: in turns the rotation terms are thousands of times larger and
        // carry second-order terms the model leaves out.
        let line_rows: Vec<usize> = match d.usable {
            Some(u) => (0..n).filter(|&i| u[i]).collect(),
            None => (0..n).collect(),
        };
        let whole_columns: Vec<Vec<f64>> = whole
            .iter()
            .map(|c| line_rows.iter().map(|&i| c[i]).collect())
            .collect();
        Self {
            band_normal: Normal::of(&band_columns),
            whole_normal: Normal::of(&whole_columns),
            runs,
            with_alpha,
            band_columns,
            t_mid,
            temperature_mean,
            line_rows,
            whole_columns,
            n_poly,
        }
    }
}

/// The calibration model fitted to one series `y` (m/s²) whose known field is already removed: κ
/// (with the gyro angular acceleration as extra regressors when `with_alpha`) in the band where
/// aircraft motion dominates, then bias, drift, temperature and self-gradient over the whole band.
/// The known field must come off first: the terrain's signal along track is strong in the band and
/// would otherwise leak into κ through chance correlation with f.
pub(crate) fn fit_series(
    y: &[f64],
    d: &PairData<'_>,
    with_alpha: bool,
    s: &Settings,
) -> PairCalibration {
    fit_with(&Design::new(d, with_alpha, s), y, d, s)
}

/// [`fit_series`] against a design formed already from the same `d`.
pub(crate) fn fit_with(
    design: &Design,
    y: &[f64],
    d: &PairData<'_>,
    s: &Settings,
) -> PairCalibration {
    let [lo, hi] = s.band_hz;
    // Step 1: κ (and the rotation regressors) in the band where aircraft motion dominates. Each line
    // is filtered on its own, so that nothing of the turns (where rotation terms are thousands of
    // times larger) leaks into the line samples, and the ends of each line are dropped.
    let y_band = band_pass_runs(y, &design.runs, s.rate_hz, lo, hi);
    let (c1, resid) = regress_with(&design.band_normal, &design.band_columns, &y_band);
    let band_residual_rms =
        (resid.iter().map(|r| r * r).sum::<f64>() / resid.len().max(1) as f64).sqrt();
    let zero = Coefficient {
        value: 0.0,
        std_error: 0.0,
    };
    let rotation = if design.with_alpha {
        [c1[3], c1[4], c1[5]]
    } else {
        [zero; 3]
    };
    // Step 2: bias, drift and temperature from what remains over the whole band, on line samples.
    let rest: Vec<f64> = design
        .line_rows
        .iter()
        .map(|&i| {
            y[i] - (0..3)
                .map(|k| c1[k].value * d.f[k][i] + rotation[k].value * d.alpha[k][i])
                .sum::<f64>()
        })
        .collect();
    let (c2, _) = regress_with(&design.whole_normal, &design.whole_columns, &rest);
    let n_poly = design.n_poly;
    let polynomial = c2[..n_poly].to_vec();
    let temperature = d.temperature.map(|_| c2[n_poly]);
    let self_gradient = d.relative_attitude.map(|_| {
        let k = c2.len();
        [c2[k - 2], c2[k - 1]]
    });
    PairCalibration {
        kappa: [c1[0], c1[1], c1[2]],
        rotation,
        polynomial,
        temperature,
        self_gradient,
        t_mid: design.t_mid,
        temperature_mean: design.temperature_mean,
        band_residual_rms,
    }
}

/// Columns (t − t_mid)^p, p = 0 … order.
pub(crate) fn polynomial_columns(time: &[f64], t_mid: f64, order: usize) -> Vec<Vec<f64>> {
    (0..=order)
        .map(|p| time.iter().map(|t| (t - t_mid).powi(p as i32)).collect())
        .collect()
}

/// Bias and drift of a series `y` (m/s²) from which everything else is removed, fitted over the
/// `usable` samples (all when `None`).
pub(crate) fn fit_polynomial(
    y: &[f64],
    time: &[f64],
    order: usize,
    usable: Option<&[bool]>,
) -> (Vec<Coefficient>, f64) {
    let t_mid = 0.5 * (time[0] + time[time.len() - 1]);
    let rows: Vec<usize> = (0..y.len())
        .filter(|&i| usable.is_none_or(|u| u[i]))
        .collect();
    let pick = |v: &[f64]| -> Vec<f64> { rows.iter().map(|&i| v[i]).collect() };
    let cols: Vec<Vec<f64>> = polynomial_columns(time, t_mid, order)
        .iter()
        .map(|c| pick(c))
        .collect();
    let (c, _) = regress(&cols, &pick(y));
    (c, t_mid)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// n / (1 + 2 Σ ρ_k) with every lag summed directly (O(n²)), the definition the fast path must
    /// match.
    fn effective_size_direct(r: &[f64]) -> f64 {
        let n = r.len();
        let var = r.iter().map(|v| v * v).sum::<f64>() / n as f64;
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

    /// AR(1) series x_t = φ·x_{t−1} + e_t from a fixed linear congruential generator.
    fn ar1(n: usize, phi: f64) -> Vec<f64> {
        let mut state: u64 = 12345;
        let mut x = 0.0;
        (0..n)
            .map(|_| {
                state = state
                    .wrapping_mul(6_364_136_223_846_793_005)
                    .wrapping_add(1_442_695_040_888_963_407);
                let e = (state >> 11) as f64 / (1u64 << 53) as f64 - 0.5;
                x = phi * x + e;
                x
            })
            .collect()
    }

    #[test]
    fn effective_size_matches_the_direct_sum_over_short_and_long_correlations() {
        // φ = 0.2: the correlation dies within a few lags (direct sums only); φ = 0.995: it lasts
        // hundreds of lags (the transform takes over after 32).
        for phi in [0.2, 0.995] {
            let r = ar1(6000, phi);
            let (fast, direct) = (effective_size(&r), effective_size_direct(&r));
            assert!(
                ((fast - direct) / direct).abs() < 1e-9,
                "φ {phi}: {fast} vs {direct}"
            );
            assert!(direct < 6000.0 * (1.0 - phi) / (1.0 + phi) * 3.0);
        }
    }

    #[test]
    fn shared_design_gives_the_same_fit_as_a_fresh_one() {
        let n = 4000;
        let rate = 10.0;
        let time: Vec<f64> = (0..n).map(|i| i as f64 / rate).collect();
        let f: Vec<Vec<f64>> = (0..3).map(|k| ar1(n, 0.5 + 0.1 * k as f64)).collect();
        let zero = vec![0.0; n];
        let geometry = PairGeometry {
            id: "xx".into(),
            center: [0.0; 3],
            baseline: [0.2, 0.0, 0.0],
            axis: [1.0, 0.0, 0.0],
        };
        let y: Vec<f64> = (0..n)
            .map(|i| 1e-5 * f[0][i] - 2e-5 * f[2][i] + 1e-9 * time[i] + 3e-8)
            .collect();
        let d = PairData {
            geometry: &geometry,
            difference: &y,
            omega: [&zero, &zero, &zero],
            f: [&f[0], &f[1], &f[2]],
            alpha: [&zero, &zero, &zero],
            time: &time,
            temperature: None,
            usable: None,
            expected: None,
            relative_attitude: None,
        };
        let s = Settings {
            band_hz: [0.05, 1.0],
            drift_order: 1,
            rate_hz: rate,
        };
        let design = Design::new(&d, false, &s);
        let shared = fit_with(&design, &y, &d, &s);
        assert_eq!(shared, fit_series(&y, &d, false, &s));
        assert!((shared.kappa[0].value - 1e-5).abs() < 3.0 * shared.kappa[0].std_error + 1e-9);
        assert!((shared.kappa[2].value + 2e-5).abs() < 3.0 * shared.kappa[2].std_error + 1e-9);
    }
}
