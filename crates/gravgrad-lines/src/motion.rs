//! Motion-correlation test: does a line's gradient still carry the aircraft's motion?
//!
//! A pair whose coupling to the specific force (κ, `docs/physics.md`) or to the angular acceleration
//! is wrongly calibrated leaves κ_err·f(t) and its like in the tensor; so do uncorrected second-order
//! terms (products of the force's components) and errors of the rotation term (ω, α). Geology does not
//! move with the aircraft. So the component's along-track series is regressed, by least squares, on
//! the aircraft's motion, both band-passed to the band where the motion lives and geology is weak
//! (default 0.1–1 Hz; at 50–80 m/s these are wavelengths of 50–800 m, where the field at a clearance
//! of 60 m or more is small beside its longer wavelengths, and the noise is white):
//!
//! - regressors, each band-passed: specific force f (sensor axes x y z, m/s²); the six products
//!   f'_i·f'_j (i ≤ j) of its deviations from the line mean, (m/s²)²; angular rate ω (sensor axes,
//!   rad/s); angular acceleration α (sensor axes, rad/s²). The sensor frame is turned to NED by the
//!   attitude, which along a line flown on a stabilised platform is close to one fixed rotation
//!   (the heading), so a coupling in sensor axes reaches each NED component as a fixed linear
//!   combination of the same regressors: for a correlation test the sensor-frame regressors serve as
//!   they are;
//! - the band-pass is [`crate::filter::band_pass`] (forward–backward Butterworth, detrended, odd
//!   extension at the ends, never wrap-around), run on each run of usable samples of the line on its
//!   own; it is linear, so y = X·β + e before it means the same relation after it, ends included;
//! - a regressor whose band-passed RMS is zero or below 1e-9 of its RMS about zero before the filter
//!   (for a product, of the product of its factors' RMS about zero) is dropped as constant; the others are scaled to unit RMS and solved by Householder QR with
//!   column pivoting (Businger & Golub 1965, "Linear least squares solutions by Householder
//!   transformations", Numer. Math. 7:269–276); a column whose part orthogonal to the columns already
//!   taken is below 1e-8 of its norm is dropped as collinear. Nothing is solved through normal
//!   equations;
//! - the residual is autocorrelated (band-limited), so its effective sample size
//!   n_eff = n / (1 + 2·Σρ_k), summed over lags until the autocorrelation first drops to zero or
//!   below, at most n/4 lags, products never across a gap (Bretherton, Widmann, Dymnikov, Wallace &
//!   Bladé 1999, "The effective number of spatial degrees of freedom of a time-varying field",
//!   J. Climate 12:1990–2009, eq. 31 with the series' own autocorrelation), at most 2·B·T, what white
//!   noise through the band-pass gives (B its noise bandwidth ∫G² df, T = n/fs), inflates the
//!   coefficients' covariance by n/n_eff: Cov(b) = σ̂²·(n/n_eff)·(XᵀX)⁻¹ with
//!   σ̂² = RSS/(n − p·n/n_eff). The cap matters on short lines: there the estimate from the residual
//!   runs high (the fit has removed p in-band dimensions from it, and a short series' sample
//!   autocorrelation is biased towards zero) — on 23 s lines of white noise at 20 Hz it gave 44 where
//!   2·B·T is 36, and the test rejected 0.7 % of them at a nominal 0.1 %; capped, none of 1000, and
//!   1.3 % at a nominal 5 % (the test is conservative: a regressor's band-passed power lies partly
//!   where the band's gain is below one);
//! - the test: the Wald statistic of all p kept coefficients over p, F = bᵀXᵀXb / (p·σ̂²·n/n_eff),
//!   against Fisher's F with (p, n_eff − p) degrees of freedom; its p-value from
//!   `crate::special`. Each coefficient's t = b_k / SE(b_k); the regressor with the largest |t|
//!   (the one whose removal would lose the most of the fit) is reported as the one that explains most;
//! - the RMS of the motion part: the fitted part's mean square less its expected noise share
//!   (σ̂²·p/n_eff), square-rooted (0 when negative); standard error σ̂/√n_eff (delta method, for a
//!   motion part large beside its noise share).
//!
//! Units: gradients in s⁻² in, Eötvös (E = 1e-9 s⁻²) out; coefficients in E per unit of their
//! regressor (`REGRESSOR_UNITS`). Sums run in sample order on one thread: the same input gives the
//! same bits whatever the thread count.

use crate::error::LinesError;
use crate::filter::band_pass;
use crate::special::f_survival;
use gravgrad_core::stats::median;
use gravgrad_core::units::to_eotvos;

/// Names of the regressors, in the order they are formed.
pub const REGRESSORS: [&str; 15] = [
    "fx", "fy", "fz", "fx·fx", "fx·fy", "fx·fz", "fy·fy", "fy·fz", "fz·fz", "ωx", "ωy", "ωz", "αx",
    "αy", "αz",
];

/// Unit of each regressor (a coefficient is in E per this unit).
pub const REGRESSOR_UNITS: [&str; 15] = [
    "m/s²",
    "m/s²",
    "m/s²",
    "(m/s²)²",
    "(m/s²)²",
    "(m/s²)²",
    "(m/s²)²",
    "(m/s²)²",
    "(m/s²)²",
    "rad/s",
    "rad/s",
    "rad/s",
    "rad/s²",
    "rad/s²",
    "rad/s²",
];

/// Index pairs (i, j) of the products f'_i·f'_j, i ≤ j, in `REGRESSORS` order.
const PRODUCTS: [(usize, usize); 6] = [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)];

/// Relative band-passed RMS below which a regressor is constant in the band.
const CONSTANT: f64 = 1e-9;
/// Relative norm below which a column is collinear with those taken before it.
const COLLINEAR: f64 = 1e-8;

/// The aircraft's motion at every sample of a line, sensor axes.
#[derive(Clone, Copy, Debug)]
pub struct MotionSeries<'a> {
    /// Specific force at the sensor origin, m/s².
    pub specific_force_m_s2: [&'a [f64]; 3],
    /// Inertial angular rate, rad/s.
    pub angular_rate_rad_s: [&'a [f64]; 3],
    /// Angular acceleration, rad/s².
    pub angular_acceleration_rad_s2: [&'a [f64]; 3],
}

impl MotionSeries<'_> {
    fn series(&self) -> [&[f64]; 9] {
        let [f, w, a] = [
            self.specific_force_m_s2,
            self.angular_rate_rad_s,
            self.angular_acceleration_rad_s2,
        ];
        [f[0], f[1], f[2], w[0], w[1], w[2], a[0], a[1], a[2]]
    }
}

/// How the test is made.
#[derive(Clone, Debug, PartialEq)]
pub struct MotionSettings {
    /// Band, Hz; the upper edge is clipped to 0.9 of the Nyquist frequency.
    pub band_hz: [f64; 2],
    /// Butterworth order per pass of the band-pass's two low-passes.
    pub order: usize,
}

impl Default for MotionSettings {
    /// 0.1–1 Hz (module doc), fourth order per pass.
    fn default() -> Self {
        Self {
            band_hz: [0.1, 1.0],
            order: 4,
        }
    }
}

/// Why a regressor took no part in the fit.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Dropped {
    /// Zero, or constant, in the band.
    Constant,
    /// A linear combination of the regressors kept.
    Collinear,
}

impl Dropped {
    pub fn as_str(self) -> &'static str {
        match self {
            Dropped::Constant => "constant in the band",
            Dropped::Collinear => "collinear with the others",
        }
    }
}

/// One kept regressor's coefficient.
#[derive(Clone, Debug, PartialEq)]
pub struct RegressorFit {
    pub name: &'static str,
    /// E per unit of the regressor (`REGRESSOR_UNITS`).
    pub coefficient_e: f64,
    /// Standard error, same unit, with the effective sample size.
    pub std_error_e: f64,
    /// coefficient / standard error.
    pub t: f64,
}

/// The motion-correlation test of one component of one line.
#[derive(Clone, Debug, PartialEq)]
pub struct MotionFit {
    /// Band used, Hz (after clipping).
    pub band_hz: [f64; 2],
    /// Samples in the regression, and their effective number (residual's autocorrelation).
    pub samples: usize,
    pub effective_samples: f64,
    /// Kept regressors in `REGRESSORS` order.
    pub regressors: Vec<RegressorFit>,
    /// Regressors left out, and why.
    pub dropped: Vec<(&'static str, Dropped)>,
    /// RMS of the fitted part, E (noise share included).
    pub fitted_rms_e: f64,
    /// RMS of the motion part, noise share removed, E; and its standard error.
    pub motion_rms_e: f64,
    pub motion_rms_se_e: f64,
    /// RMS of the band-passed component and of the residual, E.
    pub band_rms_e: f64,
    pub residual_rms_e: f64,
    /// F statistic, its degrees of freedom (p, n_eff − p) and P(F > observed) under no motion.
    pub f_statistic: f64,
    pub dof: [f64; 2],
    pub p_value: f64,
}

impl MotionFit {
    /// The kept regressor with the largest |t|: the one that explains most.
    pub fn strongest(&self) -> Option<&RegressorFit> {
        self.regressors
            .iter()
            .filter(|r| r.t.is_finite())
            .reduce(|a, b| if b.t.abs() > a.t.abs() { b } else { a })
    }
}

/// The band-passed regressors of one set of usable samples.
#[derive(Clone, Debug)]
pub(crate) struct Design {
    /// Usable runs kept (sample ranges of the line).
    runs: Vec<std::ops::Range<usize>>,
    band_hz: [f64; 2],
    rate_hz: f64,
    order: usize,
    /// Noise bandwidth of the band-pass, Hz.
    bandwidth_hz: f64,
    /// Band-passed regressors over the kept runs, concatenated; `None` for a dropped one.
    columns: Vec<Option<Vec<f64>>>,
    dropped: Vec<(&'static str, Dropped)>,
}

/// Runs of consecutive usable samples cut where the interval exceeds 1.5·`dt`, keeping those of at
/// least `min_len` samples.
fn usable_runs(
    usable: &[bool],
    time_s: &[f64],
    dt: f64,
    min_len: usize,
) -> Vec<std::ops::Range<usize>> {
    let mut out = Vec::new();
    let mut start: Option<usize> = None;
    let push = |r: std::ops::Range<usize>, out: &mut Vec<_>| {
        if r.len() >= min_len {
            out.push(r);
        }
    };
    for i in 0..usable.len() {
        if !usable[i] {
            if let Some(s) = start.take() {
                push(s..i, &mut out);
            }
            continue;
        }
        match start {
            None => start = Some(i),
            Some(s) if time_s[i] - time_s[i - 1] > 1.5 * dt => {
                push(s..i, &mut out);
                start = Some(i);
            }
            Some(_) => {}
        }
    }
    if let Some(s) = start {
        push(s..usable.len(), &mut out);
    }
    out
}

impl Design {
    /// Band-passes the regressors over the usable samples. `None` when the band does not fit
    /// below the Nyquist frequency or no run is long enough (one period of the band's low edge, and
    /// at least 3 samples).
    pub(crate) fn build(
        time_s: &[f64],
        dt: f64,
        usable: &[bool],
        motion: &MotionSeries<'_>,
        s: &MotionSettings,
    ) -> Result<Option<Self>, LinesError> {
        let rate = 1.0 / dt;
        let band = [s.band_hz[0], s.band_hz[1].min(0.45 * rate)];
        if !(dt.is_finite() && dt > 0.0 && band[0] < band[1]) {
            return Ok(None);
        }
        let min_len = ((rate / band[0]).ceil() as usize).max(3);
        let runs = usable_runs(usable, time_s, dt, min_len);
        if runs.is_empty() {
            return Ok(None);
        }
        let series = motion.series();
        // Line means of the force over the samples used, for the products' deviations.
        let n: usize = runs.iter().map(|r| r.len()).sum();
        let mean: [f64; 3] = std::array::from_fn(|k| {
            runs.iter()
                .flat_map(|r| series[k][r.clone()].iter())
                .sum::<f64>()
                / n as f64
        });
        let raw = |k: usize, i: usize| -> f64 {
            match k {
                0..3 => series[k][i],
                3..9 => {
                    let (a, b) = PRODUCTS[k - 3];
                    (series[a][i] - mean[a]) * (series[b][i] - mean[b])
                }
                _ => series[k - 6][i],
            }
        };
        // Each series' RMS about zero over the samples used: the scale a regressor is constant
        // against (a product's is the product of its factors' scales, so that a product with a
        // constant factor — whose deviations are rounding — counts as constant too).
        let scale: [f64; 9] = std::array::from_fn(|k| {
            (runs
                .iter()
                .flat_map(|r| series[k][r.clone()].iter())
                .map(|v| v * v)
                .sum::<f64>()
                / n as f64)
                .sqrt()
        });
        let mut columns = Vec::with_capacity(15);
        let mut dropped = Vec::new();
        for (k, name) in REGRESSORS.iter().enumerate() {
            let reference = match k {
                0..3 => scale[k],
                3..9 => {
                    let (a, b) = PRODUCTS[k - 3];
                    scale[a] * scale[b]
                }
                _ => scale[k - 6],
            };
            let mut col = Vec::with_capacity(n);
            for r in &runs {
                let x: Vec<f64> = r.clone().map(|i| raw(k, i)).collect();
                col.extend(band_pass(&x, rate, band, s.order)?);
            }
            let rms = (col.iter().map(|v| v * v).sum::<f64>() / n as f64).sqrt();
            if rms == 0.0 || rms <= CONSTANT * reference {
                dropped.push((*name, Dropped::Constant));
                columns.push(None);
            } else {
                columns.push(Some(col));
            }
        }
        Ok(Some(Self {
            runs,
            band_hz: band,
            rate_hz: rate,
            order: s.order,
            bandwidth_hz: noise_bandwidth(band, rate, s.order),
            columns,
            dropped,
        }))
    }

    /// Regresses `values` (s⁻², the line's samples) on the design. `None` when fewer effective
    /// samples remain than regressors plus one.
    pub(crate) fn fit(&self, values: &[f64]) -> Result<Option<MotionFit>, LinesError> {
        let mut y = Vec::new();
        for r in &self.runs {
            let v: Vec<f64> = values[r.clone()].iter().map(|v| to_eotvos(*v)).collect();
            y.extend(band_pass(&v, self.rate_hz, self.band_hz, self.order)?);
        }
        let n = y.len();
        let kept: Vec<usize> = (0..15).filter(|k| self.columns[*k].is_some()).collect();
        // Unit-RMS columns.
        let scale: Vec<f64> = kept
            .iter()
            .map(|k| {
                let c = self.columns[*k].as_deref().unwrap_or(&[]);
                (c.iter().map(|v| v * v).sum::<f64>() / n as f64).sqrt()
            })
            .collect();
        let z: Vec<Vec<f64>> = kept
            .iter()
            .zip(&scale)
            .map(|(k, s)| {
                self.columns[*k]
                    .as_deref()
                    .unwrap_or(&[])
                    .iter()
                    .map(|v| v / s)
                    .collect()
            })
            .collect();
        let qr = pivoted_qr(z.clone(), y.clone());
        let p = qr.rank;
        let mut dropped = self.dropped.clone();
        for &j in &qr.order[p..] {
            dropped.push((REGRESSORS[kept[j]], Dropped::Collinear));
        }
        dropped.sort_by_key(|(name, _)| REGRESSORS.iter().position(|r| r == name));
        // Coefficients of the unit-RMS columns, in pivot order.
        let c = qr.solve();
        let ssf: f64 = qr.qty[..p].iter().map(|v| v * v).sum();
        let mut residual = y.clone();
        for (m, &j) in qr.order[..p].iter().enumerate() {
            for (r, zv) in residual.iter_mut().zip(&z[j]) {
                *r -= c[m] * zv;
            }
        }
        let ssr: f64 = residual.iter().map(|v| v * v).sum();
        let lengths: Vec<usize> = self.runs.iter().map(|r| r.len()).collect();
        let white = 2.0 * self.bandwidth_hz * n as f64 / self.rate_hz;
        let n_eff = effective_size(&residual, &lengths).min(white);
        let pf = p as f64;
        let inflation = n as f64 / n_eff;
        let dof2 = n_eff - pf;
        if dof2 < 1.0 {
            return Ok(None);
        }
        let sigma2 = ssr / (n as f64 - pf * inflation);
        let inv_diag = qr.inverse_diagonal();
        let mut regressors: Vec<(usize, RegressorFit)> = qr.order[..p]
            .iter()
            .enumerate()
            .map(|(m, &j)| {
                let se = (sigma2 * inflation * inv_diag[m]).sqrt();
                let k = kept[j];
                (
                    k,
                    RegressorFit {
                        name: REGRESSORS[k],
                        coefficient_e: c[m] / scale[j],
                        std_error_e: se / scale[j],
                        t: c[m] / se,
                    },
                )
            })
            .collect();
        regressors.sort_by_key(|(k, _)| *k);
        let (f_statistic, p_value) = if p == 0 {
            (0.0, 1.0)
        } else {
            let f = ssf / (pf * sigma2 * inflation);
            (f, f_survival(f, pf, dof2))
        };
        let nf = n as f64;
        Ok(Some(MotionFit {
            band_hz: self.band_hz,
            samples: n,
            effective_samples: n_eff,
            regressors: regressors.into_iter().map(|(_, r)| r).collect(),
            dropped,
            fitted_rms_e: (ssf / nf).sqrt(),
            motion_rms_e: (ssf / nf - sigma2 * pf / n_eff).max(0.0).sqrt(),
            motion_rms_se_e: (sigma2 / n_eff).sqrt(),
            band_rms_e: (y.iter().map(|v| v * v).sum::<f64>() / nf).sqrt(),
            residual_rms_e: (ssr / nf).sqrt(),
            f_statistic,
            dof: [pf, dof2],
            p_value,
        }))
    }
}

/// The motion-correlation test of one component of one line (module doc).
///
/// `time_s` s, `values` s⁻² (NaN where missing), the motion series per sample (sensor axes). Samples
/// are used where time, the value and every motion series are finite, in runs cut where the interval
/// exceeds 1.5 times the median interval; runs shorter than one period of the band's low edge are
/// left out. `Ok(None)` when nothing can be tested: no run long enough, a band above the Nyquist
/// frequency, or fewer effective samples than regressors plus one.
///
/// Errors: series of different lengths, or a band that does not satisfy 0 < low < high.
pub fn motion_correlation(
    time_s: &[f64],
    values: &[f64],
    motion: &MotionSeries<'_>,
    s: &MotionSettings,
) -> Result<Option<MotionFit>, LinesError> {
    check_settings(s)?;
    let n = time_s.len();
    crate::error::check_len("values", values, n)?;
    check_motion_lengths(motion, n)?;
    let mut intervals: Vec<f64> = time_s
        .windows(2)
        .map(|w| w[1] - w[0])
        .filter(|d| d.is_finite() && *d > 0.0)
        .collect();
    let Some(dt) = median(&mut intervals) else {
        return Ok(None);
    };
    let series = motion.series();
    let usable: Vec<bool> = (0..n)
        .map(|i| {
            time_s[i].is_finite()
                && values[i].is_finite()
                && series.iter().all(|s| s[i].is_finite())
        })
        .collect();
    match Design::build(time_s, dt, &usable, motion, s)? {
        Some(d) => d.fit(values),
        None => Ok(None),
    }
}

/// Checks the band and the order.
pub(crate) fn check_settings(s: &MotionSettings) -> Result<(), LinesError> {
    let [lo, hi] = s.band_hz;
    if !(lo > 0.0 && hi > lo && hi.is_finite()) {
        return Err(LinesError::Setting {
            name: "qc.motion_band_hz".into(),
            value: hi,
            why: format!("the band [{lo}, {hi}] Hz must satisfy 0 < low < high"),
        });
    }
    if !(1..=12).contains(&s.order) {
        return Err(LinesError::Setting {
            name: "motion band-pass order".into(),
            value: s.order as f64,
            why: "must be 1 to 12".into(),
        });
    }
    Ok(())
}

/// Checks that every motion series has `n` samples.
pub(crate) fn check_motion_lengths(m: &MotionSeries<'_>, n: usize) -> Result<(), LinesError> {
    for (name, v) in [
        "fx", "fy", "fz", "wx", "wy", "wz", "alpha x", "alpha y", "alpha z",
    ]
    .iter()
    .zip(m.series())
    {
        crate::error::check_len(name, v, n)?;
    }
    Ok(())
}

/// Noise bandwidth of the band-pass, Hz: ∫₀^{fs/2} G(f)² df with G the zero-phase gain of
/// [`crate::filter::band_pass`] (its doc), by the midpoint rule over 20 000 intervals.
pub(crate) fn noise_bandwidth(band_hz: [f64; 2], rate_hz: f64, order: usize) -> f64 {
    let pi = std::f64::consts::PI;
    let steps = 20_000;
    let h = rate_hz / 2.0 / steps as f64;
    let g = |f: f64, fc: f64| {
        1.0 / (1.0 + ((pi * f / rate_hz).tan() / (pi * fc / rate_hz).tan()).powi(2 * order as i32))
    };
    (0..steps)
        .map(|i| {
            let f = (i as f64 + 0.5) * h;
            let v = g(f, band_hz[1]) - g(f, band_hz[0]);
            v * v * h
        })
        .sum()
}

/// Effective number of independent samples of a residual made of runs of the given lengths laid end
/// to end: n / (1 + 2·Σρ_k), the lag-k autocorrelation ρ_k summed over pairs within each run, up to
/// the lag before it first drops to zero or below and at most n/4 (Bretherton et al. 1999; the idea
/// of the calibration's own `effective_size`). Clamped to [1, n].
pub(crate) fn effective_size(r: &[f64], lengths: &[usize]) -> f64 {
    let n = r.len();
    let var: f64 = r.iter().map(|v| v * v).sum::<f64>();
    if var <= 0.0 || n < 4 {
        return n as f64;
    }
    let mut sum = 0.0;
    for lag in 1..n / 4 {
        let mut acc = 0.0;
        let mut start = 0;
        for &len in lengths {
            if len > lag {
                let run = &r[start..start + len];
                acc += run[..len - lag]
                    .iter()
                    .zip(&run[lag..])
                    .map(|(a, b)| a * b)
                    .sum::<f64>();
            }
            start += len;
        }
        let rho = acc / var;
        if rho <= 0.0 {
            break;
        }
        sum += rho;
    }
    (n as f64 / (1.0 + 2.0 * sum)).clamp(1.0, n as f64)
}

/// A column-pivoted Householder QR of unit-scaled columns, with Qᵀy.
struct PivotedQr {
    /// Columns after the reflections: column m holds R's column m in rows 0..=m.
    cols: Vec<Vec<f64>>,
    /// Original column index of each position.
    order: Vec<usize>,
    rank: usize,
    qty: Vec<f64>,
}

/// Householder QR with column pivoting (Businger & Golub 1965): at each step the column with the
/// largest norm below the rows already reduced is taken; the factorisation stops when that norm is
/// below `COLLINEAR` of the column's full norm (√n for unit-RMS columns).
fn pivoted_qr(mut cols: Vec<Vec<f64>>, mut y: Vec<f64>) -> PivotedQr {
    let m = cols.len();
    let n = y.len();
    let mut order: Vec<usize> = (0..m).collect();
    let full: Vec<f64> = cols
        .iter()
        .map(|c| c.iter().map(|v| v * v).sum::<f64>().sqrt())
        .collect();
    let mut rank = 0;
    for j in 0..m.min(n) {
        // Pivot: the largest remaining norm (rows j..n), relative to the column's own norm.
        let mut best = None;
        for (q, c) in cols.iter().enumerate().skip(j) {
            let norm = c[j..].iter().map(|v| v * v).sum::<f64>().sqrt();
            let rel = norm / full[order[q]];
            if best.is_none_or(|(_, b, _)| rel > b) {
                best = Some((q, rel, norm));
            }
        }
        let Some((q, rel, norm)) = best else { break };
        if rel.is_nan() || rel <= COLLINEAR {
            break;
        }
        cols.swap(j, q);
        order.swap(j, q);
        // Reflector v = x − α·e_j, α = −sign(x_j)·‖x‖.
        let alpha = if cols[j][j] >= 0.0 { -norm } else { norm };
        let mut v: Vec<f64> = cols[j][j..].to_vec();
        v[0] -= alpha;
        let vv: f64 = v.iter().map(|x| x * x).sum();
        if vv > 0.0 {
            let apply = |x: &mut [f64]| {
                let d: f64 = v.iter().zip(x.iter()).map(|(a, b)| a * b).sum::<f64>();
                let k = 2.0 * d / vv;
                for (xi, vi) in x.iter_mut().zip(&v) {
                    *xi -= k * vi;
                }
            };
            for c in cols.iter_mut().skip(j + 1) {
                apply(&mut c[j..]);
            }
            apply(&mut y[j..]);
        }
        cols[j][j] = alpha;
        for x in cols[j][j + 1..].iter_mut() {
            *x = 0.0;
        }
        rank = j + 1;
    }
    PivotedQr {
        cols,
        order,
        rank,
        qty: y,
    }
}

impl PivotedQr {
    fn r(&self, i: usize, j: usize) -> f64 {
        self.cols[j][i]
    }

    /// Solves R₁₁·c = (Qᵀy)₁ (the kept columns, pivot order).
    fn solve(&self) -> Vec<f64> {
        let p = self.rank;
        let mut c = vec![0.0; p];
        for i in (0..p).rev() {
            let mut s = self.qty[i];
            for (j, cj) in c.iter().enumerate().skip(i + 1) {
                s -= self.r(i, j) * cj;
            }
            c[i] = s / self.r(i, i);
        }
        c
    }

    /// Diagonal of (R₁₁ᵀR₁₁)⁻¹ = R₁₁⁻¹R₁₁⁻ᵀ: the row sums of squares of R₁₁⁻¹.
    fn inverse_diagonal(&self) -> Vec<f64> {
        let p = self.rank;
        // R⁻¹ column by column (upper triangular), row-major in `inv`.
        let mut inv = vec![0.0; p * p];
        for k in 0..p {
            for i in (0..=k).rev() {
                let mut s = if i == k { 1.0 } else { 0.0 };
                for j in i + 1..=k {
                    s -= self.r(i, j) * inv[j * p + k];
                }
                inv[i * p + k] = s / self.r(i, i);
            }
        }
        inv.chunks(p.max(1))
            .take(p)
            .map(|row| row.iter().map(|v| v * v).sum())
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn pivoted_qr_solves_a_known_system_and_finds_the_collinear_column() {
        // y = 2·a − 3·b exactly, c = a + b: the fit is exact with two columns; the third is
        // collinear and left out, whichever two are taken.
        let n = 50;
        let a: Vec<f64> = (0..n).map(|i| (0.3 * i as f64).sin()).collect();
        let b: Vec<f64> = (0..n).map(|i| (0.11 * i as f64).cos()).collect();
        let c: Vec<f64> = a.iter().zip(&b).map(|(x, y)| x + y).collect();
        let y: Vec<f64> = a.iter().zip(&b).map(|(x, y)| 2.0 * x - 3.0 * y).collect();
        let cols = vec![a, b, c];
        let qr = pivoted_qr(cols.clone(), y.clone());
        assert_eq!(qr.rank, 2);
        let coef = qr.solve();
        for (i, want) in y.iter().enumerate() {
            let fitted: f64 = qr.order[..2]
                .iter()
                .zip(&coef)
                .map(|(&j, k)| k * cols[j][i])
                .sum();
            assert_abs_diff_eq!(fitted, *want, epsilon = 1e-12);
        }
        let resid: f64 = qr.qty[2..].iter().map(|v| v * v).sum();
        assert!(resid < 1e-24);
    }

    #[test]
    fn effective_size_of_white_noise_is_close_to_n_and_of_a_moving_average_is_half() {
        // White noise: n, less what the estimated ρ_k (standard deviation 1/√n each) add before the
        // first one at or below zero — a run of geometric length, mean 1 — so a few times
        // 2/√n = 0.014 at most. MA(1) x_t = e_t + e_{t−1}: ρ_1 = ½, ρ_k = 0 beyond, so
        // n_eff = n/(1 + 2·½) = n/2 (plus the same small tail).
        let mut state: u64 = 99;
        let mut next = || {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            (state >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        let n = 20000;
        let tail = 1.0 + 5.0 * 2.0 / (n as f64).sqrt();
        let white: Vec<f64> = (0..n + 1).map(|_| next()).collect();
        let e = effective_size(&white[..n], &[n]);
        assert!(e > n as f64 / tail && e <= n as f64, "{e}");
        let ma: Vec<f64> = white.windows(2).map(|w| w[0] + w[1]).collect();
        let e = effective_size(&ma, &[n]);
        let want = n as f64 / 2.0;
        assert!(
            e <= want * 1.02 && e > n as f64 / (2.0 * tail),
            "{e} vs {want}"
        );
        let ar = ma;
        // Two runs: no product across the join (the second run's sign flipped changes nothing).
        let mut flipped = ar.clone();
        for v in &mut flipped[n / 2..] {
            *v = -*v;
        }
        let a = effective_size(&ar, &[n / 2, n / 2]);
        let b = effective_size(&flipped, &[n / 2, n / 2]);
        assert_abs_diff_eq!(a, b, epsilon = 1e-9 * a);
    }

    #[test]
    fn noise_bandwidth_is_the_variance_white_noise_keeps() {
        // White noise of variance σ² has one-sided density 2σ²/fs; through a filter of noise
        // bandwidth B it keeps variance 2σ²·B/fs. Measured on 200 000 samples (the variance
        // estimate of the band-passed noise, with ~2·B·T = 15 600 independent samples, is good to
        // about 1 %).
        let mut state: u64 = 0x1234_5678;
        let mut uniform = || {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            ((state >> 11) as f64 + 0.5) / (1u64 << 53) as f64
        };
        let (rate, n) = (20.0, 200_000);
        let x: Vec<f64> = (0..n)
            .map(|_| {
                let (u, v) = (uniform(), uniform());
                (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
            })
            .collect();
        let y = band_pass(&x, rate, [0.1, 1.0], 4).unwrap();
        let kept = y[n / 10..9 * n / 10].iter().map(|v| v * v).sum::<f64>() / (0.8 * n as f64);
        let b = noise_bandwidth([0.1, 1.0], rate, 4);
        let want = 2.0 * b / rate;
        println!("band-passed white noise keeps {kept:.5}, 2B/fs = {want:.5} (B = {b:.4} Hz)");
        assert_abs_diff_eq!(kept / want, 1.0, epsilon = 0.03);
        // And the analog limit of a single low-pass, fc(1 − 1/m)(π/m)/sin(π/m) with m = 8, for
        // a band whose low edge is far below: 0.8978 Hz at fc = 1 Hz (the bilinear warping at
        // 1 Hz of 20 Hz shifts it by well under 1 %).
        let analog = 1.0 * (1.0 - 1.0 / 8.0) * (std::f64::consts::PI / 8.0)
            / (std::f64::consts::PI / 8.0).sin();
        let b = noise_bandwidth([1e-4, 1.0], rate, 4);
        println!("low edge 1e-4 Hz: B = {b:.4} Hz, analog low-pass {analog:.4} Hz");
        assert_abs_diff_eq!(b / analog, 1.0, epsilon = 0.01);
    }
}
