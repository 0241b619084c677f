//! The least-squares estimates of one pair's calibration and their standard errors.

use crate::bandpass::band_pass;
use gravgrad_core::lstsq::PivotedCholesky;
use gravgrad_core::pairs::PairGeometry;
use gravgrad_core::stats::{dot, sum_of_squares};
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
    /// Also fit the six quadratic terms of the force (products of its deviations from the mean).
    pub quadratic: bool,
    /// A coefficient is applied only when its estimate exceeds this many standard errors; below,
    /// it is held at its prior (zero, or the calibration file's value).
    pub min_significance: f64,
    /// Also fit the gyros' bias from what it leaves in the centrifugal correction, over the whole
    /// instrument ([`crate::gyro_bias`], [`PairCalibration::gyro_rate`]; the instrument fit only).
    pub gyro_rate: bool,
    /// Also fit the pairs' axis errors against the rotation terms
    /// ([`PairCalibration::rotation_coupling`]), where the caller supplies those regressors.
    pub rotation_coupling: bool,
}

impl Settings {
    /// Default settings at `rate_hz`: band 0.05–1 Hz, linear drift, no quadratic terms, the gyro
    /// rate terms, four standard errors to apply a coefficient.
    pub fn at_rate(rate_hz: f64) -> Self {
        Self {
            band_hz: [0.05, 1.0],
            drift_order: 1,
            rate_hz,
            quadratic: false,
            min_significance: 4.0,
            gyro_rate: true,
            rotation_coupling: true,
        }
    }
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
    /// Quadratic coefficients, (m/s²)⁻¹, of the products (f_a − f0_a)(f_b − f0_b) of the force's
    /// deviations from `force_mean`, in the order of [`PRODUCT_NAMES`] (each product once), when
    /// fitted: the accelerometers' second-order terms and cross-axis coupling (IEEE Std 1293).
    pub quadratic: Option<[Coefficient; 6]>,
    /// Origin of the quadratic terms, sensor axes, m/s².
    pub force_mean: [f64; 3],
    /// Coefficients c of the angular rate ω (sensor axes, rad/s), m/s² per rad/s, when fitted: what
    /// a gyro bias β leaves in the centrifugal correction nᵀ·ΩΩ·b formed from the gyros. To first
    /// order in β that error is c·ω with c = (β·b) n + (n·β) b − 2(n·b) β, so for an in-line pair
    /// along x, c = −2|b|·(0, βy, βz). A bias of 1e-7 rad/s on a 0.2 m baseline at a yaw rate of
    /// 0.1 rad/s is 4e-9 m/s² (20 E); in a coordinated manoeuvre the yaw rate follows the lateral
    /// force, ωz ≈ fy/V, so left out the term biases κy by about −2|b|βz/V. A gyro's bias changes
    /// from one switch-on to the next: every flight fits its own.
    pub gyro_rate: Option<[Coefficient; 3]>,
    /// Coefficients D (m) of the rotation terms R = [αx αy αz, (ΩΩ)xx xy xz yy yz zz] (rad/s²,
    /// rad²/s², gyro rates, sensor axes), when fitted: the correction D·R. Each accelerometer senses
    /// (1 + s)(n + δ)·(f + M·r) at its position r, with M = Ω̇ + ΩΩ − G; the difference of a pair
    /// keeps, besides κ·f, the common part m̄ = s̄n + δ̄ of its two axes times the rotation terms,
    /// m̄ᵀ·(Ω̇ + ΩΩ)·b: the pair's axis is not quite the one the solve assumes (a misalignment of
    /// the pair as a whole, or of the sensor to the gyros). With m̄ of 1e-5 and rates of 0.1 rad/s
    /// on a 0.2 m baseline that is 2e-8 m/s² (100 E) in a manoeuvre, and, since the yaw rate follows
    /// the lateral force in a turn, left out it leaks into the quadratic terms. On a survey line it
    /// is far smaller. Linear in R, so the coefficients of the solve's unknowns combine into each
    /// pair's as κ's do. The instrument fit regresses on the block means of ΩΩ − G it forms anyway;
    /// the correction applies ΩΩ alone: D·G (1e-5 of the normal gradient, about 0.03 E, nearly
    /// constant along a line) is left to the bias.
    pub rotation_coupling: Option<[Coefficient; 9]>,
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

/// The normal equations of a set of regressor columns, scaled for conditioning, and their
/// rank-revealing factorisation: what every series regressed on the same columns shares.
pub(crate) struct Normal {
    /// RMS of each column.
    scale: Vec<f64>,
    /// Scaled XᵀX (unit-RMS columns).
    a: Vec<Vec<f64>>,
    /// Its Cholesky factorisation with pivoting: which columns the data resolve.
    chol: PivotedCholesky,
}

/// Columns whose part independent of the others has less than 1e-5 of their RMS are not resolved
/// (the remaining diagonal of the scaled normal matrix below 1e-10 of the column's own).
const COLLINEAR_TOLERANCE: f64 = 1e-10;

impl Normal {
    pub(crate) fn of(columns: &[Vec<f64>]) -> Self {
        let k = columns.len();
        let n = columns.first().map_or(0, Vec::len);
        let scale: Vec<f64> = columns
            .iter()
            .map(|c| (sum_of_squares(c) / n.max(1) as f64).sqrt())
            .collect();
        // The upper triangle, rows across threads (each entry one dot product in sample order,
        // whatever the thread count), then mirrored.
        let upper: Vec<Vec<f64>> = (0..k)
            .into_par_iter()
            .map(|i| {
                (i..k)
                    .map(|j| {
                        if scale[i] > 0.0 && scale[j] > 0.0 {
                            dot(&columns[i], &columns[j]) / (scale[i] * scale[j])
                        } else {
                            0.0
                        }
                    })
                    .collect()
            })
            .collect();
        let a: Vec<Vec<f64>> = (0..k)
            .map(|i| {
                (0..k)
                    .map(|j| {
                        if j >= i {
                            upper[i][j - i]
                        } else {
                            upper[j][i - j]
                        }
                    })
                    .collect()
            })
            .collect();
        Self {
            chol: PivotedCholesky::of(&a, COLLINEAR_TOLERANCE),
            a,
            scale,
        }
    }

    /// Condition number estimate of the scaled regressors.
    pub(crate) fn condition(&self) -> f64 {
        self.chol.condition
    }
}

/// Why a coefficient of the model was not applied: held at its prior (the calibration file in
/// force, else zero).
#[derive(Clone, Debug, PartialEq)]
pub struct HeldTerm {
    /// The term, e.g. `κx`, `fz²`, `drift`, `temperature`.
    pub term: String,
    /// What the data gave for it (value and standard error), when they gave anything.
    pub estimate: Option<Coefficient>,
    /// What one standard error of it does to the fitted series over the flight: the standard
    /// error times its regressor's RMS, in the series' unit (s⁻² for the tensor's unknowns, m/s²
    /// for a pair's own residual), when an estimate was made.
    pub effect_rms: Option<f64>,
    pub reason: String,
}

/// A regression's outcome: coefficients (zero where held), residual and what was held.
pub(crate) struct Fit {
    pub coefs: Vec<Coefficient>,
    pub resid: Vec<f64>,
    pub held: Vec<HeldTerm>,
}

/// Least squares y ≈ X·β, with the columns' normal equations formed already, which estimates only what the
/// data resolve: a column collinear with the others, or constant, is held at zero (reported); then,
/// one at a time, the coefficient of smallest |value/standard error| is held at zero and the rest
/// refitted while that ratio is below `min_z`, for the columns not listed in `always` (e.g. the
/// bias). Standard errors come from the residual variance and the inverse normal matrix, inflated
/// by n/n_eff (Bretherton et al. 1999), n_eff from the full model's residual. With `batch`, each
/// coefficient's variance is at least its cluster-robust one with consecutive batches of `batch`
/// samples as clusters ([`batch_variance_ratios`]), which also holds when the noise is larger where
/// the regressors are (a manoeuvre's rates put the gyros' noise into the centrifugal term).
pub(crate) fn regress_with(
    normal: &Normal,
    columns: &[Vec<f64>],
    y: &[f64],
    names: &[String],
    always: &[usize],
    min_z: f64,
    batch: Option<usize>,
) -> Fit {
    let n = y.len();
    let mut held = dependent_terms(normal, names);
    let mut active: Vec<usize> = normal.chol.kept_sorted().to_vec();
    let mut r = Regression::new(normal, columns, y);
    let (mut beta, mut diag) = r.solve(&active);
    let full_residual = r.residual(&active, &beta);
    r.set_variance_factors(&active, &full_residual, batch);
    let mut se = r.sigma(&active, &beta, &diag);
    // With fewer than three degrees of freedom the residual says nothing of the errors: every
    // tested term is held.
    if n < active.len() + 3 {
        let tested: Vec<usize> = active
            .iter()
            .copied()
            .filter(|c| !always.contains(c))
            .collect();
        for c in tested {
            held.push(HeldTerm {
                term: names[c].clone(),
                estimate: None,
                effect_rms: None,
                reason: format!(
                    "too few samples to test it ({n} for {} terms)",
                    active.len()
                ),
            });
            active.retain(|x| *x != c);
        }
        (beta, diag) = r.solve(&active);
        se = r.sigma(&active, &beta, &diag);
    }
    while let Some((a, c, z)) = weakest(&active, always, &beta, &se, min_z) {
        held.push(HeldTerm {
            term: names[c].clone(),
            estimate: Some(Coefficient {
                value: beta[a] / normal.scale[c],
                std_error: se[a] / normal.scale[c],
            }),
            // The scaled standard error is already σ times the column's RMS.
            effect_rms: Some(se[a]),
            reason: format!("not significant (|estimate| {z:.1} standard errors, {min_z} needed)"),
        });
        active.remove(a);
        (beta, diag) = r.solve(&active);
        se = r.sigma(&active, &beta, &diag);
    }
    let resid = r.residual(&active, &beta);
    let coefs = coefficients(normal, names, columns.len(), &active, (&beta, &se), &held);
    Fit { coefs, resid, held }
}

/// The columns the normal equations' pivoted Cholesky factor found dependent, as held terms: a
/// regressor zero on the lines, or one not resolved from the others.
fn dependent_terms(normal: &Normal, names: &[String]) -> Vec<HeldTerm> {
    normal
        .chol
        .dependent
        .iter()
        .map(|&c| HeldTerm {
            term: names[c].clone(),
            estimate: None,
            effect_rms: None,
            reason: if normal.scale[c] == 0.0 {
                "its regressor is zero on the lines".into()
            } else {
                "its regressor is not resolved from the others (collinear)".into()
            },
        })
        .collect()
}

/// The active column that is the least significant, as (position in `active`, column, |β/σ|),
/// when it is below `min_z` (or NaN) and not among the columns always kept.
fn weakest(
    active: &[usize],
    always: &[usize],
    beta: &[f64],
    se: &[f64],
    min_z: f64,
) -> Option<(usize, usize, f64)> {
    active
        .iter()
        .enumerate()
        .filter(|(_, c)| !always.contains(c))
        .map(|(a, &c)| (a, c, (beta[a] / se[a]).abs()))
        .filter(|x| x.2.is_nan() || x.2 < min_z)
        .min_by(|x, y| x.2.total_cmp(&y.2))
}

/// Each of the `k` columns' coefficient in the units of y per unit of its regressor: the `active` columns'
/// scaled estimates and standard errors (`beta`, `se`) unscaled, zero elsewhere; a held term's
/// standard error is the one it had when held, infinite when it had none.
fn coefficients(
    normal: &Normal,
    names: &[String],
    k: usize,
    active: &[usize],
    (beta, se): (&[f64], &[f64]),
    held: &[HeldTerm],
) -> Vec<Coefficient> {
    let scale = &normal.scale;
    let mut coefs: Vec<Coefficient> = (0..k)
        .map(|_| Coefficient {
            value: 0.0,
            std_error: 0.0,
        })
        .collect();
    for (a, &c) in active.iter().enumerate() {
        coefs[c] = Coefficient {
            value: beta[a] / scale[c],
            std_error: se[a] / scale[c],
        };
    }
    for h in held {
        if let Some(c) = names.iter().position(|x| *x == h.term) {
            coefs[c].std_error = h.estimate.map_or(f64::INFINITY, |e| e.std_error);
        }
    }
    coefs
}

/// One regression of y on the columns, on scaled columns X̃ = X/scale (the normal equations'
/// scale, each column's RMS), solved on any set of active columns.
struct Regression<'a> {
    normal: &'a Normal,
    columns: &'a [Vec<f64>],
    y: &'a [f64],
    /// X̃ᵀy per column (0 for a zero column).
    rhs: Vec<f64>,
    /// yᵀy.
    yy: f64,
    /// Per column, the factor the classical variance is raised by (1 until set).
    factor: Vec<f64>,
}

impl<'a> Regression<'a> {
    /// The regression of `y` on `columns` with their normal equations `normal`.
    fn new(normal: &'a Normal, columns: &'a [Vec<f64>], y: &'a [f64]) -> Self {
        let k = columns.len();
        let scale = &normal.scale;
        let rhs: Vec<f64> = (0..k)
            .map(|i| {
                if scale[i] > 0.0 {
                    dot(&columns[i], y) / scale[i]
                } else {
                    0.0
                }
            })
            .collect();
        Self {
            normal,
            columns,
            y,
            rhs,
            yy: sum_of_squares(y),
            factor: vec![1.0; k],
        }
    }

    /// Solves on the active columns `act`: the scaled β̃ and the inverse normal matrix's diagonal
    /// (infinite for a column the factor drops).
    fn solve(&self, act: &[usize]) -> (Vec<f64>, Vec<f64>) {
        let sub: Vec<Vec<f64>> = act
            .iter()
            .map(|&i| act.iter().map(|&j| self.normal.a[i][j]).collect())
            .collect();
        let f = PivotedCholesky::of(&sub, COLLINEAR_TOLERANCE);
        let ks = f.kept_sorted();
        let mut beta = vec![0.0; act.len()];
        let mut diag = vec![f64::INFINITY; act.len()];
        for (a, &ia) in ks.iter().enumerate() {
            beta[ia] = ks
                .iter()
                .enumerate()
                .map(|(b, &ib)| f.inverse_entry(a, b) * self.rhs[act[ib]])
                .sum();
            diag[ia] = f.inverse_entry(a, a);
        }
        (beta, diag)
    }

    /// y − X·β for the active columns `act` and their scaled coefficients `beta`, in y's unit.
    fn residual(&self, act: &[usize], beta: &[f64]) -> Vec<f64> {
        let scale = &self.normal.scale;
        let mut r = self.y.to_vec();
        for (b, &c) in beta.iter().zip(act) {
            let w = b / scale[c];
            for (rv, v) in r.iter_mut().zip(&self.columns[c]) {
                *rv -= w * v;
            }
        }
        r
    }

    /// Per column, the factor the classical variance is raised by: n/n_eff of the full model's
    /// residual `full_residual`, or with `batch` the cluster-robust variance's ratio to the
    /// classical where that is larger (for the `active` columns, from the full model too).
    fn set_variance_factors(
        &mut self,
        active: &[usize],
        full_residual: &[f64],
        batch: Option<usize>,
    ) {
        let inflation = self.y.len() as f64 / effective_size(full_residual);
        self.factor = vec![inflation; self.columns.len()];
        if let Some(b) = batch {
            let ratios = batch_variance_ratios(self.normal, self.columns, active, full_residual, b);
            for (&c, r) in active.iter().zip(ratios) {
                self.factor[c] = self.factor[c].max(r);
            }
        }
    }

    /// The scaled standard errors of the active columns `act` (scaled estimates `beta`, inverse
    /// diagonal `diag`): √(σ²·d·factor) with σ² = RSS/(n − active), RSS = yᵀy − β̃ᵀ·X̃ᵀy at the
    /// least-squares solution.
    fn sigma(&self, act: &[usize], beta: &[f64], diag: &[f64]) -> Vec<f64> {
        let n = self.y.len();
        let rss = (self.yy
            - beta
                .iter()
                .zip(act)
                .map(|(b, &c)| b * self.rhs[c])
                .sum::<f64>())
        .max(0.0);
        let var = rss / (n as f64 - act.len() as f64).max(1.0);
        diag.iter()
            .zip(act)
            .map(|(d, &c)| (var * d * self.factor[c]).sqrt())
            .collect()
    }
}

/// For each `active` column, the ratio of its coefficient's cluster-robust variance to its
/// classical one, σ²·(XᵀX)⁻¹: the clusters are consecutive batches of `batch` samples, long enough
/// that the band-limited residual's correlation seldom crosses from one to the next (Bester,
/// Conley & Hansen 2011, J. Econometrics 165:137–151). With hᵢ the row of (XᵀX)⁻¹Xᵀ giving
/// coefficient i, Var(β̂ᵢ) = Σ_B (Σ_{t∈B} h_it·r_t)²: neither white nor equal-variance noise is
/// assumed. O(n·k²); 1 where there are fewer than eight batches to estimate from.
fn batch_variance_ratios(
    normal: &Normal,
    columns: &[Vec<f64>],
    active: &[usize],
    r: &[f64],
    batch: usize,
) -> Vec<f64> {
    let n = r.len();
    let batch = batch.max(1);
    let q = active.len();
    if n < 8 * batch || q == 0 {
        return vec![1.0; q];
    }
    let sub: Vec<Vec<f64>> = active
        .iter()
        .map(|&i| active.iter().map(|&j| normal.a[i][j]).collect())
        .collect();
    let f = PivotedCholesky::of(&sub, COLLINEAR_TOLERANCE);
    if f.kept_sorted().len() < q {
        return vec![1.0; q];
    }
    let scale = &normal.scale;
    let var = sum_of_squares(r) / (n as f64 - q as f64).max(1.0);
    // Per batch, the scaled score sums g_B = Σ_t x̃_t·r_t, one per column.
    let scores: Vec<Vec<f64>> = (0..n.div_ceil(batch))
        .map(|bq| {
            let span = bq * batch..((bq + 1) * batch).min(n);
            active
                .iter()
                .map(|&c| dot(&columns[c][span.clone()], &r[span.clone()]) / scale[c])
                .collect()
        })
        .collect();
    (0..q)
        .map(|a| {
            // Coefficient a's share of each batch: (N⁻¹·g_B)_a.
            let robust: f64 = scores
                .iter()
                .map(|g| {
                    (0..q)
                        .map(|b| f.inverse_entry(a, b) * g[b])
                        .sum::<f64>()
                        .powi(2)
                })
                .sum();
            let classical = var * f.inverse_entry(a, a);
            if classical > 0.0 && robust.is_finite() {
                robust / classical
            } else {
                1.0
            }
        })
        .collect()
}

/// Effective number of independent samples of an autocorrelated series: n / (1 + 2 Σ ρ_k), the sum
/// over lags until the autocorrelation first drops below zero (Bretherton et al. 1999).
pub fn effective_size(r: &[f64]) -> f64 {
    let n = r.len();
    let var: f64 = sum_of_squares(r) / n.max(1) as f64;
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
        let rho = dot(&r[..n - lag], &r[lag..]) * norm;
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
    estimate_with_held(d, s).0
}

/// [`estimate`], with the terms held at zero and why.
pub fn estimate_with_held(d: &PairData<'_>, s: &Settings) -> (PairCalibration, Vec<HeldTerm>) {
    let diff: Vec<f64> = without_centrifugal(d)
        .iter()
        .enumerate()
        .map(|(i, v)| v - d.expected.map_or(0.0, |e| e[i]))
        .collect();
    fit_series(&diff, d, true, s)
}

/// Names of the rotation terms R of [`PairCalibration::rotation_coupling`], in its order.
pub const ROTATION_NAMES: [&str; 9] = [
    "αx", "αy", "αz", "ωω xx", "ωω xy", "ωω xz", "ωω yy", "ωω yz", "ωω zz",
];

/// The rotation terms R at one sample: α (rad/s²) and ΩΩ = ωωᵀ − |ω|²I (rad²/s²) in the order of
/// [`ROTATION_NAMES`].
#[inline]
pub fn rotation_terms(alpha: [f64; 3], w: [f64; 3]) -> [f64; 9] {
    let w2 = w[0] * w[0] + w[1] * w[1] + w[2] * w[2];
    [
        alpha[0],
        alpha[1],
        alpha[2],
        w[0] * w[0] - w2,
        w[0] * w[1],
        w[0] * w[2],
        w[1] * w[1] - w2,
        w[1] * w[2],
        w[2] * w[2] - w2,
    ]
}

/// Names of the six products of the force's deviations, in the order of
/// [`PairCalibration::quadratic`].
pub const PRODUCT_NAMES: [&str; 6] = ["fx²", "fy²", "fz²", "fx·fy", "fx·fz", "fy·fz"];

/// Index pairs (a, b) of the products f_a·f_b, in the order of [`PRODUCT_NAMES`].
pub const PRODUCTS: [(usize, usize); 6] = [(0, 0), (1, 1), (2, 2), (0, 1), (0, 2), (1, 2)];

/// The six products (f_a − f0_a)(f_b − f0_b) of a force series, m²/s⁴, sample by sample.
pub fn force_products(f: [&[f64]; 3], f0: [f64; 3]) -> [Vec<f64>; 6] {
    PRODUCTS.map(|(a, b)| {
        f[a].iter()
            .zip(f[b])
            .map(|(x, y)| (x - f0[a]) * (y - f0[b]))
            .collect()
    })
}

/// Mean of each force component over the `usable` samples (all when `None`), m/s²: the origin of
/// the quadratic terms.
pub fn force_mean(f: [&[f64]; 3], usable: Option<&[bool]>) -> [f64; 3] {
    std::array::from_fn(|k| {
        let (mut s, mut c) = (0.0, 0usize);
        for (i, v) in f[k].iter().enumerate() {
            if usable.is_none_or(|u| u[i]) {
                s += v;
                c += 1;
            }
        }
        if c > 0 { s / c as f64 } else { 0.0 }
    })
}

/// What every series fitted against one flight's regressors shares: the usable runs, the
/// band-passed regressors with their normal equations (step 1), and the whole-band regressors on
/// line samples with theirs (step 2). Formed once when many series are fitted against one flight.
pub(crate) struct Design {
    runs: Vec<std::ops::Range<usize>>,
    with_alpha: bool,
    /// Whether the six quadratic columns follow the force (and α) in step 1.
    quadratic: bool,
    /// The first of the nine rotation-term columns in step 1, when fitted, and those terms on the
    /// design's time base (step 2 takes their fitted part off).
    rotation_column: Option<usize>,
    rotation_raw: Option<[Vec<f64>; 9]>,
    /// The band (Hz) and sample rate (Hz) the band columns were formed at.
    band_hz: [f64; 2],
    rate_hz: f64,
    band_columns: Vec<Vec<f64>>,
    band_names: Vec<String>,
    band_normal: Normal,
    t_mid: f64,
    temperature_mean: f64,
    force_mean: [f64; 3],
    line_rows: Vec<usize>,
    /// Polynomial, temperature and self-gradient columns on the line rows.
    whole_columns: Vec<Vec<f64>>,
    whole_names: Vec<String>,
    whole_normal: Normal,
    n_poly: usize,
    has_temperature: bool,
    has_self_gradient: bool,
}

impl Design {
    /// The design of `d`'s regressors: the force band-passed line by line, with the gyro angular
    /// acceleration when `with_alpha`, and the six products of the force's deviations from
    /// `force_mean` (`products`, on `d`'s time base) when given.
    pub(crate) fn new(
        d: &PairData<'_>,
        with_alpha: bool,
        products: Option<(&[Vec<f64>; 6], [f64; 3])>,
        rotation: Option<[&[f64]; 9]>,
        s: &Settings,
    ) -> Self {
        let [lo, hi] = s.band_hz;
        let n = d.time.len();
        let runs = usable_runs(d.usable, n, (s.rate_hz / lo).ceil() as usize);
        let bp = |x: &[f64]| -> Vec<f64> { band_pass_runs(x, &runs, s.rate_hz, lo, hi) };
        let mut regressors: Vec<&[f64]> = d.f.to_vec();
        let mut band_names: Vec<String> = ["κx", "κy", "κz"].map(String::from).to_vec();
        if with_alpha {
            regressors.extend(d.alpha);
            band_names.extend(["αx", "αy", "αz"].map(String::from));
        }
        if let Some((p, _)) = products {
            regressors.extend(p.iter().map(|v| &v[..]));
            band_names.extend(PRODUCT_NAMES.map(String::from));
        }
        let rotation_column = rotation.map(|_| regressors.len());
        if let Some(r) = rotation {
            regressors.extend(r);
            band_names.extend(ROTATION_NAMES.map(|t| format!("axis error: {t}")));
        }
        let band_columns: Vec<Vec<f64>> = regressors.par_iter().map(|c| bp(c)).collect();
        let t_mid = 0.5 * (d.time[0] + d.time[n - 1]);
        let mut whole = polynomial_columns(d.time, t_mid, s.drift_order);
        let mut whole_names: Vec<String> = (0..whole.len())
            .map(|p| match p {
                0 => "bias".to_string(),
                1 => "drift".to_string(),
                _ => format!("drift t^{p}"),
            })
            .collect();
        let n_poly = whole.len();
        let temperature_mean = d
            .temperature
            .map_or(0.0, |t| t.iter().sum::<f64>() / t.len() as f64);
        if let Some(t) = d.temperature {
            whole.push(t.iter().map(|v| v - temperature_mean).collect());
            whole_names.push("temperature".into());
        }
        if let Some(rel) = d.relative_attitude {
            whole.extend(rel.iter().map(|c| c.to_vec()));
            whole_names.extend(["self-gradient roll", "self-gradient pitch"].map(String::from));
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
            quadratic: products.is_some(),
            rotation_column,
            rotation_raw: rotation.map(|r| r.map(<[f64]>::to_vec)),
            band_hz: s.band_hz,
            rate_hz: s.rate_hz,
            band_columns,
            band_names,
            t_mid,
            temperature_mean,
            force_mean: products.map_or([0.0; 3], |p| p.1),
            line_rows,
            whole_columns,
            whole_names,
            n_poly,
            has_temperature: d.temperature.is_some(),
            has_self_gradient: d.relative_attitude.is_some(),
        }
    }

    /// Series `x` (on the design's time base) band-passed run by run as the band fit reads it.
    pub(crate) fn band_pass(&self, x: &[f64]) -> Vec<f64> {
        let [lo, hi] = self.band_hz;
        band_pass_runs(x, &self.runs, self.rate_hz, lo, hi)
    }

    /// A band-passed series `y` less its least-squares projection on every resolved band column:
    /// what the band fit's regressors do not explain. Regressing on these residuals gives the
    /// coefficient a further regressor would get beside the band columns (Frisch–Waugh–Lovell), so
    /// a parameter shared by many series can be fitted without fitting every series' own
    /// coefficients jointly with it.
    pub(crate) fn project_out(&self, y: Vec<f64>) -> Vec<f64> {
        let nm = &self.band_normal;
        let kept = nm.chol.kept_sorted();
        let rhs: Vec<f64> = kept
            .iter()
            .map(|&c| {
                if nm.scale[c] > 0.0 {
                    dot(&self.band_columns[c], &y) / nm.scale[c]
                } else {
                    0.0
                }
            })
            .collect();
        let mut r = y;
        for (a, &c) in kept.iter().enumerate() {
            let beta: f64 = (0..kept.len())
                .map(|b| nm.chol.inverse_entry(a, b) * rhs[b])
                .sum();
            let w = beta / nm.scale[c];
            for (rv, v) in r.iter_mut().zip(&self.band_columns[c]) {
                *rv -= w * v;
            }
        }
        r
    }

    /// Samples per cluster of the band fit's cluster-robust standard errors: twice the band's
    /// longest period.
    pub(crate) fn batch_length(&self) -> usize {
        2 * (self.rate_hz / self.band_hz[0]).ceil() as usize
    }

    /// Condition number estimates of the band fit's and the whole-band fit's regressors.
    pub(crate) fn conditions(&self) -> [f64; 2] {
        [self.band_normal.condition(), self.whole_normal.condition()]
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
) -> (PairCalibration, Vec<HeldTerm>) {
    let f0 = force_mean(d.f, d.usable);
    let products = s.quadratic.then(|| force_products(d.f, f0));
    let design = Design::new(d, with_alpha, products.as_ref().map(|p| (p, f0)), None, s);
    fit_with(&design, y, d, products.as_ref(), s)
}

/// [`fit_series`] against a design formed already from the same `d` (and the same `products`).
/// Returns the calibration (held terms at zero) and the terms held, with why.
pub(crate) fn fit_with(
    design: &Design,
    y: &[f64],
    d: &PairData<'_>,
    products: Option<&[Vec<f64>; 6]>,
    s: &Settings,
) -> (PairCalibration, Vec<HeldTerm>) {
    // Step 1: κ (and the rotation and quadratic regressors) in the band where aircraft motion
    // dominates. Each line is filtered on its own, so that nothing of the turns (where rotation
    // terms are thousands of times larger) leaks into the line samples, and the ends of each line
    // are dropped. Only what the data resolve, and significantly, is kept.
    fit_with_band(design, y, &design.band_pass(y), d, products, s)
}

/// [`fit_with`] with `y` band-passed already ([`Design::band_pass`]) as `y_band`.
pub(crate) fn fit_with_band(
    design: &Design,
    y: &[f64],
    y_band: &[f64],
    d: &PairData<'_>,
    products: Option<&[Vec<f64>; 6]>,
    s: &Settings,
) -> (PairCalibration, Vec<HeldTerm>) {
    let fit1 = regress_with(
        &design.band_normal,
        &design.band_columns,
        y_band,
        &design.band_names,
        &[],
        s.min_significance,
        Some(design.batch_length()),
    );
    let c1 = &fit1.coefs;
    let band_residual_rms = (sum_of_squares(&fit1.resid) / fit1.resid.len().max(1) as f64).sqrt();
    let zero = Coefficient {
        value: 0.0,
        std_error: 0.0,
    };
    let rotation = if design.with_alpha {
        [c1[3], c1[4], c1[5]]
    } else {
        [zero; 3]
    };
    let q0 = if design.with_alpha { 6 } else { 3 };
    let quadratic: Option<[Coefficient; 6]> = design
        .quadratic
        .then(|| std::array::from_fn(|m| c1[q0 + m]));
    let rotation_coupling: Option<[Coefficient; 9]> = design
        .rotation_column
        .map(|w| std::array::from_fn(|m| c1[w + m]));
    // Step 2: bias, drift and temperature from what remains over the whole band, on line samples.
    // The band fit's terms taken off the whole series, one regressor at a time across it (each
    // sample's terms in the order force, α, quadratic, rotation), then the line rows picked.
    let mut whole = y.to_vec();
    let mut take_off = |c: f64, x: &[f64]| {
        if c != 0.0 {
            for (v, xv) in whole.iter_mut().zip(x) {
                *v -= c * xv;
            }
        }
    };
    for (c, x) in c1.iter().zip(d.f) {
        take_off(c.value, x);
    }
    if design.with_alpha {
        for (c, x) in rotation.iter().zip(d.alpha) {
            take_off(c.value, x);
        }
    }
    if let (Some(q), Some(p)) = (&quadratic, products) {
        for (c, x) in q.iter().zip(p) {
            take_off(c.value, x);
        }
    }
    if let (Some(c), Some(r)) = (&rotation_coupling, &design.rotation_raw) {
        for (c, x) in c.iter().zip(r) {
            take_off(c.value, x);
        }
    }
    let rest: Vec<f64> = design.line_rows.iter().map(|&i| whole[i]).collect();
    let fit2 = regress_with(
        &design.whole_normal,
        &design.whole_columns,
        &rest,
        &design.whole_names,
        &[0],
        s.min_significance,
        None,
    );
    let c2 = &fit2.coefs;
    let n_poly = design.n_poly;
    let polynomial = c2[..n_poly].to_vec();
    let temperature = design.has_temperature.then(|| c2[n_poly]);
    let self_gradient = design.has_self_gradient.then(|| {
        let k = c2.len();
        [c2[k - 2], c2[k - 1]]
    });
    let mut held = fit1.held;
    held.extend(fit2.held);
    (
        PairCalibration {
            kappa: [c1[0], c1[1], c1[2]],
            rotation,
            polynomial,
            temperature,
            self_gradient,
            quadratic,
            force_mean: design.force_mean,
            // The gyros' bias is the instrument's, fitted over all pairs at once
            // ([`crate::gyro_bias`]), not pair by pair.
            gyro_rate: None,
            rotation_coupling,
            t_mid: design.t_mid,
            temperature_mean: design.temperature_mean,
            band_residual_rms,
        },
        held,
    )
}

impl Design {
    /// The line samples (indices into the block or sample series) the whole-band fit uses.
    pub(crate) fn line_rows(&self) -> &[usize] {
        &self.line_rows
    }

    /// Bias and (with `self_gradient`) self-gradient refitted to `rest` (on [`Self::line_rows`])
    /// from which drift and temperature are already taken off: the bias always, the self-gradient
    /// where significant.
    pub(crate) fn refit_level(
        &self,
        rest: &[f64],
        self_gradient: bool,
        min_z: f64,
    ) -> (Coefficient, Option<[Coefficient; 2]>, Vec<HeldTerm>) {
        let pick: Vec<usize> = self
            .whole_names
            .iter()
            .enumerate()
            .filter(|(_, n)| *n == "bias" || (self_gradient && n.starts_with("self-gradient")))
            .map(|(i, _)| i)
            .collect();
        let columns: Vec<Vec<f64>> = pick
            .iter()
            .map(|&i| self.whole_columns[i].clone())
            .collect();
        let names: Vec<String> = pick.iter().map(|&i| self.whole_names[i].clone()).collect();
        let fit = regress_with(
            &Normal::of(&columns),
            &columns,
            rest,
            &names,
            &[0],
            min_z,
            None,
        );
        let sg = (self_gradient && self.has_self_gradient).then(|| {
            [
                fit.coefs[fit.coefs.len() - 2],
                fit.coefs[fit.coefs.len() - 1],
            ]
        });
        (fit.coefs[0], sg, fit.held)
    }
}

/// Columns (t − t_mid)^p, p = 0 … order.
pub(crate) fn polynomial_columns(time: &[f64], t_mid: f64, order: usize) -> Vec<Vec<f64>> {
    (0..=order)
        .map(|p| time.iter().map(|t| (t - t_mid).powi(p as i32)).collect())
        .collect()
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
        let s = Settings::at_rate(rate);
        let design = Design::new(&d, false, None, None, &s);
        let shared = fit_with(&design, &y, &d, None, &s).0;
        assert_eq!(shared, fit_series(&y, &d, false, &s).0);
        assert!((shared.kappa[0].value - 1e-5).abs() < 3.0 * shared.kappa[0].std_error + 1e-9);
        assert!((shared.kappa[2].value + 2e-5).abs() < 3.0 * shared.kappa[2].std_error + 1e-9);
    }
}
