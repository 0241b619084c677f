//! Zero-phase along-track low-pass by cutoff wavelength.
//!
//! Method: a Butterworth low-pass (bilinear transform of the analog prototype with a pre-warped
//! cutoff; Butterworth 1930, "On the theory of filter amplifiers", Wireless Engineer 7:536–541) run
//! forward and then backward over the line, as second-order sections. Running it both ways cancels
//! the phase, so features stay where they are, and squares the amplitude response:
//!
//! G(k) = 1 / (1 + (tan(π·k·Δs) / tan(π·Δs/λc))^(2N))
//!
//! for wavenumber k (cycles/m), grid spacing Δs (m), cutoff wavelength λc (m) and order N per pass.
//! At the cutoff wavelength the gain is exactly ½; a constant and a straight line pass unchanged.
//!
//! Lines are filtered in distance, not in time: the along-track distance is accumulated from the
//! projected positions, the values are interpolated linearly onto a uniform distance grid, filtered,
//! and interpolated back to the samples. The grid spacing is the 10th percentile of the positive
//! sample spacings, so the grid is at least as dense as the data over nine tenths of the line (a slow
//! stretch is not aliased), and at most four grid points per sample are used.
//!
//! End effects: before filtering, the line is extended at each end by its point reflection (odd
//! extension: value and slope continue) over eight cutoff wavelengths (or the whole line if shorter),
//! and each pass starts from the steady state for the first value it meets — the scheme of
//! `scipy.signal.sosfiltfilt` with `padtype="odd"` ([`forward_backward`] is exactly that). Two
//! changes along the line:
//! - the least-squares straight line of the whole line (against distance) is removed before and
//!   added back after filtering. A straight line passes the filter unchanged, so this changes only
//!   the start-up transient, which would otherwise carry the line's overall slope: a straight line
//!   then passes exactly, and a line much shorter than the cutoff comes out close to its straight fit;
//! - the reflection is about the end value of a least-squares straight line fitted to the last cutoff
//!   wavelength of the line, not about the end sample, which would pin the filtered end to a single
//!   noisy sample (the whole raw noise there instead of the filtered noise). The fitted end value
//!   carries noise σ·2/√W for W samples in the fit, comparable to the filtered noise.
//!
//! What remains of the start-up transient decays as exp(−2π·sin(π/2N)·d/λc) over a distance d of
//! padding (the least damped Butterworth pole): eight cutoff wavelengths leave 4e-9 of it for N = 4.
//! Curvature near the ends is not preserved: within about one cutoff wavelength of each end the
//! result follows the reflected continuation rather than data that were never flown, and is less
//! reliable there. A line shorter than eight cutoff wavelengths keeps more of the transient.

use crate::error::{LinesError, check_finite, check_len, check_positive};

/// Padding at each end, in cutoff wavelengths (module doc).
pub const PAD_WAVELENGTHS: f64 = 8.0;

/// One second-order section [b0, b1, b2, a0, a1, a2] with a0 = 1 (the layout of scipy's `sos`).
pub type Section = [f64; 6];

/// The along-track low-pass.
#[derive(Clone, Debug, PartialEq)]
pub struct LowPass {
    /// Cutoff wavelength λc, m: the wavelength passed at half amplitude.
    pub cutoff_wavelength_m: f64,
    /// Butterworth order N of each pass (the forward–backward response has order 2N).
    pub order: usize,
}

impl Default for LowPass {
    /// The recipe's default cutoff (`filter.cutoff_wavelength_m` = 400 m), fourth order per pass.
    fn default() -> Self {
        Self {
            cutoff_wavelength_m: 400.0,
            order: 4,
        }
    }
}

impl LowPass {
    /// Amplitude gain of the forward–backward filter at `wavelength_m` on a grid of spacing
    /// `spacing_m` (the formula in the module doc; 0 at and beyond the grid's Nyquist wavelength).
    pub fn gain(&self, spacing_m: f64, wavelength_m: f64) -> f64 {
        let nyquist = 2.0 * spacing_m;
        if wavelength_m <= nyquist {
            return 0.0;
        }
        let w = (std::f64::consts::PI * spacing_m / wavelength_m).tan();
        let wc = (std::f64::consts::PI * spacing_m / self.cutoff_wavelength_m).tan();
        1.0 / (1.0 + (w / wc).powi(2 * self.order as i32))
    }

    /// Equivalent noise bandwidth of the forward–backward filter at cutoff frequency `fc` (Hz) in the
    /// analog limit (fc well below the sample rate): ∫₀^∞ G(f)² df = fc·(1 − 1/m)·(π/m)/sin(π/m) with
    /// m = 2N (from ∫₀^∞ x^(s−1)/(1 + x^m)² dx = (1/m)(1 − s/m)·π/sin(πs/m) at s = 1). White noise of
    /// one-sided density ρ leaves ρ·√(bandwidth) RMS after the filter.
    pub fn noise_bandwidth(&self, fc: f64) -> f64 {
        let m = 2.0 * self.order as f64;
        let pi = std::f64::consts::PI;
        fc * (1.0 - 1.0 / m) * (pi / m) / (pi / m).sin()
    }

    fn check(&self) -> Result<(), LinesError> {
        check_positive("filter.cutoff_wavelength_m", self.cutoff_wavelength_m)?;
        if !(1..=12).contains(&self.order) {
            return Err(LinesError::Setting {
                name: "filter.order".into(),
                value: self.order as f64,
                why: "must be 1 to 12".into(),
            });
        }
        Ok(())
    }
}

/// Digital Butterworth low-pass of order `order` with cutoff `wn` as a fraction of the Nyquist
/// frequency (0 < wn < 1), as second-order sections each normalised to unit gain at zero frequency.
/// Same response as `scipy.signal.butter(order, wn, output="sos")` (the sections may be ordered and
/// scaled differently; the product is the same).
pub fn butterworth_sections(order: usize, wn: f64) -> Result<Vec<Section>, LinesError> {
    if !(wn > 0.0 && wn < 1.0) {
        return Err(LinesError::Setting {
            name: "normalised cutoff".into(),
            value: wn,
            why: "must lie strictly between 0 and 1 (the Nyquist frequency)".into(),
        });
    }
    if order == 0 {
        return Err(LinesError::Setting {
            name: "filter.order".into(),
            value: 0.0,
            why: "must be at least 1".into(),
        });
    }
    let pi = std::f64::consts::PI;
    // Pre-warped analog cutoff for the bilinear transform s = 2·fs·(z − 1)/(z + 1) with fs = 2.
    let warped = 4.0 * (pi * wn / 2.0).tan();
    let mut sections = Vec::with_capacity(order.div_ceil(2));
    // Analog prototype poles −exp(iπm/(2N)), m = −N+1, −N+3, …, N−1; one of each conjugate pair (m > 0)
    // and, for odd N, the real pole (m = 0).
    let n = order as i64;
    let mut m = n - 1;
    while m >= 0 {
        let angle = pi * m as f64 / (2.0 * order as f64);
        let (pr, pi_) = (-angle.cos() * warped, -angle.sin() * warped);
        // Bilinear map z = (4 + p)/(4 − p).
        let (nr, ni) = (4.0 + pr, pi_);
        let (dr, di) = (4.0 - pr, -pi_);
        let d2 = dr * dr + di * di;
        let (zr, zi) = ((nr * dr + ni * di) / d2, (ni * dr - nr * di) / d2);
        if m == 0 {
            // Real pole: first-order section (1 + z⁻¹)·g / (1 − p·z⁻¹), unit DC gain.
            let a1 = -zr;
            let g = (1.0 + a1) / 2.0;
            sections.push([g, g, 0.0, 1.0, a1, 0.0]);
        } else {
            let a1 = -2.0 * zr;
            let a2 = zr * zr + zi * zi;
            let g = (1.0 + a1 + a2) / 4.0;
            sections.push([g, 2.0 * g, g, 1.0, a1, a2]);
        }
        m -= 2;
    }
    Ok(sections)
}

/// Runs the sections over `x` (transposed direct form II) from the states `z`, in place.
fn run(sections: &[Section], x: &mut [f64], z: &mut [[f64; 2]]) {
    for v in x.iter_mut() {
        let mut s = *v;
        for (sec, st) in sections.iter().zip(z.iter_mut()) {
            let y = sec[0] * s + st[0];
            st[0] = sec[1] * s - sec[4] * y + st[1];
            st[1] = sec[2] * s - sec[5] * y;
            s = y;
        }
        *v = s;
    }
}

/// Steady-state section states for a constant input `level` (as `scipy.signal.sosfilt_zi`·level).
fn steady_state(sections: &[Section], level: f64) -> Vec<[f64; 2]> {
    let mut input = level;
    sections
        .iter()
        .map(|s| {
            let dc = (s[0] + s[1] + s[2]) / (s[3] + s[4] + s[5]);
            let y = dc * input;
            let z2 = s[2] * input - s[5] * y;
            let z1 = s[1] * input - s[4] * y + z2;
            input = y;
            [z1, z2]
        })
        .collect()
}

/// Forward–backward filtering of uniformly sampled `x` with odd extension of `pad` samples at each
/// end (clamped to `x.len() − 1`) and steady-state starts: the scheme of
/// `scipy.signal.sosfiltfilt(sos, x, padtype="odd", padlen=pad)`. Fewer than two samples come back
/// unchanged.
pub fn forward_backward(sections: &[Section], x: &[f64], pad: usize) -> Vec<f64> {
    match (x.first(), x.last()) {
        (Some(&a), Some(&b)) => forward_backward_about(sections, x, pad, [a, b]),
        _ => Vec::new(),
    }
}

/// [`forward_backward`] with the odd extension made about the given values at the two ends
/// (`pivots[0]` before the first sample, `pivots[1]` after the last) instead of the end samples.
pub fn forward_backward_about(
    sections: &[Section],
    x: &[f64],
    pad: usize,
    pivots: [f64; 2],
) -> Vec<f64> {
    let n = x.len();
    if n < 2 {
        return x.to_vec();
    }
    let pad = pad.min(n - 1);
    let mut ext = Vec::with_capacity(n + 2 * pad);
    ext.extend((1..=pad).rev().map(|i| 2.0 * pivots[0] - x[i]));
    ext.extend_from_slice(x);
    ext.extend((1..=pad).map(|i| 2.0 * pivots[1] - x[n - 1 - i]));
    let mut z = steady_state(sections, ext[0]);
    run(sections, &mut ext, &mut z);
    ext.reverse();
    let mut z = steady_state(sections, ext[0]);
    run(sections, &mut ext, &mut z);
    ext.reverse();
    ext[pad..pad + n].to_vec()
}

/// Least-squares straight line through `x` against sample index: (mean, slope per sample), the line
/// being mean + slope·(i − (n − 1)/2).
fn straight_fit(x: &[f64]) -> (f64, f64) {
    let n = x.len() as f64;
    let im = (n - 1.0) / 2.0;
    let xm = x.iter().sum::<f64>() / n;
    let (mut sxy, mut sxx) = (0.0, 0.0);
    for (i, v) in x.iter().enumerate() {
        let d = i as f64 - im;
        sxy += d * (v - xm);
        sxx += d * d;
    }
    (xm, if sxx > 0.0 { sxy / sxx } else { 0.0 })
}

/// Cumulative along-track distance (m) of a track given in projected metres; starts at 0.
pub fn along_track_distance(x_m: &[f64], y_m: &[f64]) -> Vec<f64> {
    let mut s = Vec::with_capacity(x_m.len());
    let mut acc = 0.0;
    for i in 0..x_m.len().min(y_m.len()) {
        if i > 0 {
            acc += (x_m[i] - x_m[i - 1]).hypot(y_m[i] - y_m[i - 1]);
        }
        s.push(acc);
    }
    s
}

/// Linear interpolation of (xs, ys) at `at`, with xs non-decreasing; flat beyond the ends.
/// Repeated abscissae take the later sample.
pub(crate) fn interpolate(xs: &[f64], ys: &[f64], at: &[f64]) -> Vec<f64> {
    let n = xs.len();
    let mut out = Vec::with_capacity(at.len());
    let mut j = 0usize;
    for &a in at {
        if n == 0 {
            out.push(f64::NAN);
            continue;
        }
        // `at` is usually increasing: walk forward, else search.
        if j >= n || xs[j] > a {
            j = xs.partition_point(|&v| v <= a).saturating_sub(1);
        }
        while j + 1 < n && xs[j + 1] <= a {
            j += 1;
        }
        if a <= xs[0] {
            out.push(ys[0]);
        } else if j + 1 >= n {
            out.push(ys[n - 1]);
        } else {
            let span = xs[j + 1] - xs[j];
            let t = if span > 0.0 { (a - xs[j]) / span } else { 1.0 };
            out.push(ys[j] + t * (ys[j + 1] - ys[j]));
        }
    }
    out
}

/// Spacing of the uniform distance grid for samples at along-track distances `s` (the module doc).
pub fn grid_spacing(distance_m: &[f64]) -> Option<f64> {
    let mut steps: Vec<f64> = distance_m
        .windows(2)
        .map(|w| w[1] - w[0])
        .filter(|d| *d > 0.0 && d.is_finite())
        .collect();
    if steps.is_empty() {
        return None;
    }
    steps.sort_by(f64::total_cmp);
    let p10 = steps[(steps.len() - 1) / 10];
    let length = distance_m[distance_m.len() - 1] - distance_m[0];
    let floor = length / (4.0 * distance_m.len() as f64);
    Some(p10.max(floor))
}

/// Low-passes one line's `values` along its track (`x_m`, `y_m`: projected positions, m; `time_s`,
/// s) piece by piece: a piece is a run of consecutive samples whose value and position are finite,
/// cut wherever the interval exceeds 1.5 times the line's median interval — a gap, as the ingest
/// stage marks them (`docs/formats.md`: a gap splits the line). Each piece is filtered on its own
/// by [`low_pass_along_track`], so the filter never bridges a gap. Pieces the filter cannot take
/// (fewer than 3 samples, no length) stay NaN. Returns one value per sample, in the unit of
/// `values`, and the number of pieces filtered.
///
/// Errors: lengths differ, or the cutoff is too short for a piece's sampling.
pub fn low_pass_line(
    time_s: &[f64],
    x_m: &[f64],
    y_m: &[f64],
    values: &[f64],
    lp: &LowPass,
) -> Result<(Vec<f64>, usize), LinesError> {
    let n = values.len();
    check_len("time", time_s, n)?;
    check_len("x", x_m, n)?;
    check_len("y", y_m, n)?;
    let mut intervals: Vec<f64> = time_s
        .windows(2)
        .map(|w| w[1] - w[0])
        .filter(|d| *d > 0.0 && d.is_finite())
        .collect();
    let dt = gravgrad_core::stats::median(&mut intervals).unwrap_or(f64::INFINITY);
    let usable: Vec<bool> = (0..n)
        .map(|i| values[i].is_finite() && x_m[i].is_finite() && y_m[i].is_finite())
        .collect();
    let mut out = vec![f64::NAN; n];
    let mut pieces = 0;
    for r in crate::qc::runs(&usable, time_s, dt) {
        let d = along_track_distance(&x_m[r.clone()], &y_m[r.clone()]);
        match low_pass_along_track(&d, &values[r.clone()], lp) {
            Ok(f) => {
                out[r].copy_from_slice(&f);
                pieces += 1;
            }
            Err(e @ LinesError::CutoffTooShort { .. }) => return Err(e),
            Err(_) => {}
        }
    }
    Ok((out, pieces))
}

/// Low-passes `values` sampled at along-track distances `distance_m` (m, non-decreasing, e.g. from
/// [`along_track_distance`]) with cutoff wavelength `lp.cutoff_wavelength_m`. Returns one filtered
/// value per sample, in the unit of `values`.
///
/// Errors: lengths differ, a value or distance is not finite, distance decreases, the line has fewer
/// than 3 samples or no length, or the cutoff is not longer than two grid spacings.
pub fn low_pass_along_track(
    distance_m: &[f64],
    values: &[f64],
    lp: &LowPass,
) -> Result<Vec<f64>, LinesError> {
    lp.check()?;
    let n = values.len();
    check_len("distance", distance_m, n)?;
    check_finite("distance", distance_m)?;
    check_finite("values", values)?;
    if n < 3 {
        return Err(LinesError::TooShort {
            what: "the along-track filter".into(),
            got: n,
            need: 3,
        });
    }
    if let Some(i) = distance_m.windows(2).position(|w| w[1] < w[0]) {
        return Err(LinesError::Setting {
            name: "distance".into(),
            value: distance_m[i + 1],
            why: format!("along-track distance decreases after sample {i}"),
        });
    }
    let Some(ds) = grid_spacing(distance_m) else {
        return Err(LinesError::TooShort {
            what: "the along-track filter (a line of positive length)".into(),
            got: 1,
            need: 2,
        });
    };
    let lc = lp.cutoff_wavelength_m;
    if lc <= 2.0 * ds {
        return Err(LinesError::CutoffTooShort {
            cutoff_m: lc,
            spacing_m: ds,
        });
    }
    // The grid runs from the first to the last sample exactly (spacing shrunk to fit), so nothing is
    // extrapolated before the padding.
    if ds / lc < 1e-6 {
        return Err(LinesError::Setting {
            name: "filter.cutoff_wavelength_m".into(),
            value: lc,
            why: format!(
                "more than a million grid spacings ({ds:.3} m); the filter's coefficients lose their precision"
            ),
        });
    }
    let s0 = distance_m[0];
    let length = distance_m[n - 1] - s0;
    let m = (length / ds).ceil() as usize + 1;
    let ds = length / (m - 1) as f64;
    let grid: Vec<f64> = (0..m).map(|i| s0 + i as f64 * ds).collect();
    let on_grid = interpolate(distance_m, values, &grid);
    let sections = butterworth_sections(lp.order, 2.0 * ds / lc)?;
    let pad = (PAD_WAVELENGTHS * lc / ds).ceil() as usize;
    // The least-squares straight line of the whole line is taken out first and put back after: it
    // passes the filter unchanged, and without it the start-up transient would carry the line's
    // overall slope.
    let (mean, slope) = straight_fit(&on_grid);
    let centre = (m - 1) as f64 / 2.0;
    let trend = |i: usize| mean + slope * (i as f64 - centre);
    let rest: Vec<f64> = on_grid
        .iter()
        .enumerate()
        .map(|(i, v)| v - trend(i))
        .collect();
    // Pivots: the end values of straight lines fitted over one cutoff wavelength at each end.
    let w = ((lc / ds).ceil() as usize).saturating_add(1).min(m);
    let (lm, ls) = straight_fit(&rest[..w]);
    let left = lm - ls * (w - 1) as f64 / 2.0;
    let (rm, rs) = straight_fit(&rest[m - w..]);
    let right = rm + rs * (w - 1) as f64 / 2.0;
    let mut filtered = forward_backward_about(&sections, &rest, pad, [left, right]);
    for (i, v) in filtered.iter_mut().enumerate() {
        *v += trend(i);
    }
    Ok(interpolate(&grid, &filtered, distance_m))
}

/// Zero-phase band-pass of a series sampled uniformly in time at `rate_hz`, passing `band_hz`
/// ([low, high], Hz): the difference of two forward–backward Butterworth low-passes of order
/// `order` per pass (the scheme of [`forward_backward`]) at the high and at the low edge, so its gain
/// is
///
/// G(f) = 1/(1 + (tan(π·f/fs)/tan(π·f_hi/fs))^(2N)) − 1/(1 + (tan(π·f/fs)/tan(π·f_lo/fs))^(2N)),
///
/// zero at zero frequency, ½ − 1/(1 + (f_hi/f_lo)^(2N)) at each edge in the analog limit. The
/// least-squares straight line (against sample index) is removed first: it would pass both low-passes
/// alike and only feed their start-up transients. Ends: odd extension over [`PAD_WAVELENGTHS`]
/// periods of each edge (clamped to the series), each pass started from its steady state, never
/// wrap-around; the reflection is about the end value of a least-squares straight line fitted over
/// one period of the low edge at that end, as in [`low_pass_along_track`], not about the end sample:
/// an end sample carries the whole unfiltered noise, and reflected about it that noise comes out as
/// a transient a low-edge period long (on white noise of 5 E/√Hz at 20 Hz with 0.1–1 Hz, it raised the
/// motion-correlation test's rejections at a nominal 5 % to 11 %; about a fitted end, 3.7 %). Every
/// step is linear in the input, so a series that is a linear combination of others comes out the
/// same combination of theirs, ends included. Returns the band-passed series in the unit of `x`.
///
/// Errors: fewer than 3 samples, a non-finite value or rate, or a band that does not satisfy
/// 0 < low < high < rate/2.
pub fn band_pass(
    x: &[f64],
    rate_hz: f64,
    band_hz: [f64; 2],
    order: usize,
) -> Result<Vec<f64>, LinesError> {
    check_positive("sample rate", rate_hz)?;
    check_finite("values", x)?;
    let n = x.len();
    if n < 3 {
        return Err(LinesError::TooShort {
            what: "the band-pass".into(),
            got: n,
            need: 3,
        });
    }
    let [lo, hi] = band_hz;
    let nyquist = rate_hz / 2.0;
    if !(lo > 0.0 && hi > lo && hi < nyquist) {
        return Err(LinesError::Setting {
            name: "band_hz".into(),
            value: hi,
            why: format!(
                "the band [{lo}, {hi}] Hz must satisfy 0 < low < high < {nyquist} Hz (half the sample rate)"
            ),
        });
    }
    let high = butterworth_sections(order, hi / nyquist)?;
    let low = butterworth_sections(order, lo / nyquist)?;
    let (mean, slope) = straight_fit(x);
    let centre = (n - 1) as f64 / 2.0;
    let rest: Vec<f64> = x
        .iter()
        .enumerate()
        .map(|(i, v)| v - (mean + slope * (i as f64 - centre)))
        .collect();
    // Pivots: the end values of straight lines fitted over one period of the low edge at each end.
    let w = ((rate_hz / lo).ceil() as usize).saturating_add(1).min(n);
    let (lm, ls) = straight_fit(&rest[..w]);
    let left = lm - ls * (w - 1) as f64 / 2.0;
    let (rm, rs) = straight_fit(&rest[n - w..]);
    let right = rm + rs * (w - 1) as f64 / 2.0;
    let pad = |f: f64| (PAD_WAVELENGTHS * rate_hz / f).ceil() as usize;
    let a = forward_backward_about(&high, &rest, pad(hi), [left, right]);
    let b = forward_backward_about(&low, &rest, pad(lo), [left, right]);
    Ok(a.iter().zip(&b).map(|(p, q)| p - q).collect())
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn sections_have_the_butterworth_magnitude() {
        // |H(e^{iω})|² = 1/(1 + (tan(ω/2)/tan(ωc/2))^(2N)) for the bilinear Butterworth (textbook:
        // Oppenheim & Schafer, Discrete-Time Signal Processing, §7.1).
        for order in [1usize, 2, 3, 4, 5] {
            let wn = 0.13;
            let sec = butterworth_sections(order, wn).unwrap();
            for f in [0.0, 0.05, 0.13, 0.3, 0.7] {
                let w = std::f64::consts::PI * f;
                let mut h = (1.0f64, 0.0f64);
                for s in &sec {
                    let e1 = (w.cos(), -w.sin());
                    let e2 = ((2.0 * w).cos(), -(2.0 * w).sin());
                    let num = (s[0] + s[1] * e1.0 + s[2] * e2.0, s[1] * e1.1 + s[2] * e2.1);
                    let den = (s[3] + s[4] * e1.0 + s[5] * e2.0, s[4] * e1.1 + s[5] * e2.1);
                    let d2 = den.0 * den.0 + den.1 * den.1;
                    let q = (
                        (num.0 * den.0 + num.1 * den.1) / d2,
                        (num.1 * den.0 - num.0 * den.1) / d2,
                    );
                    h = (h.0 * q.0 - h.1 * q.1, h.0 * q.1 + h.1 * q.0);
                }
                let mag2 = h.0 * h.0 + h.1 * h.1;
                let want = 1.0
                    / (1.0
                        + ((w / 2.0).tan() / (std::f64::consts::PI * wn / 2.0).tan())
                            .powi(2 * order as i32));
                assert!(
                    (mag2 - want).abs() < 1e-12,
                    "N={order} f={f}: {mag2} vs {want}"
                );
            }
        }
    }

    #[test]
    fn a_straight_line_passes_to_the_ends() {
        // A straight line passes the forward–backward filter (unit gain and zero slope of the gain
        // at zero frequency); the line's own straight fit is taken out first, so nothing is left
        // to filter but rounding.
        let s: Vec<f64> = (0..3000)
            .map(|i| i as f64 * 3.0 + (i as f64 * 0.7).sin())
            .collect();
        let v: Vec<f64> = s.iter().map(|d| 12.0 - 0.02 * d).collect();
        let out = low_pass_along_track(&s, &v, &LowPass::default()).unwrap();
        for (a, b) in out.iter().zip(&v) {
            assert_abs_diff_eq!(*a, *b, epsilon = 1e-9);
        }
    }

    #[test]
    fn bad_input_is_refused() {
        let lp = LowPass::default();
        let s = [0.0, 1.0, 2.0, 3.0];
        assert!(matches!(
            low_pass_along_track(&s, &[1.0, 2.0, f64::NAN, 0.0], &lp),
            Err(LinesError::NotFinite { index: 2, .. })
        ));
        assert!(matches!(
            low_pass_along_track(&s, &[1.0, 2.0], &lp),
            Err(LinesError::Length { .. })
        ));
        assert!(matches!(
            low_pass_along_track(&[0.0, 300.0, 600.0], &[1.0, 2.0, 3.0], &lp),
            Err(LinesError::CutoffTooShort { .. })
        ));
        assert!(low_pass_along_track(&[0.0, 0.0, 0.0], &[1.0, 2.0, 3.0], &lp).is_err());
    }
}
