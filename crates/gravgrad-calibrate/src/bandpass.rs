//! Zero-phase band-pass by FFT: the series is mirrored (even extension, so the periodic continuation
//! has no jump), transformed, multiplied by a pass band with raised-cosine edges 20% of each edge
//! frequency wide, transformed back and cropped. The series are real, so the transforms are the
//! real-input ones (half the work of a complex transform of the same length). Frequencies in Hz,
//! sample rate in Hz.

use realfft::{ComplexToReal, RealFftPlanner, RealToComplex};
use rustfft::num_complex::Complex64;
use std::sync::{Arc, LazyLock, Mutex};

/// Gain of the pass band at frequency f (Hz).
pub fn gain(f: f64, lo: f64, hi: f64) -> f64 {
    let edge = |f: f64, c: f64, rising: bool| -> f64 {
        let w = 0.2 * c;
        let x = ((f - (c - w / 2.0)) / w).clamp(0.0, 1.0);
        let g = if x == 0.0 || x == 1.0 {
            x
        } else {
            0.5 - 0.5 * (std::f64::consts::PI * x).cos()
        };
        if rising { g } else { 1.0 - g }
    };
    let up = if lo > 0.0 { edge(f, lo, true) } else { 1.0 };
    up * edge(f, hi, false)
}

/// One planner for the process: it keeps the plans (and their twiddle factors) of every length
/// already used, which a fresh planner, or one per thread, would compute again. A plan depends only
/// on its length, so which thread made it changes no result.
static PLANNER: LazyLock<Mutex<RealFftPlanner<f64>>> =
    LazyLock::new(|| Mutex::new(RealFftPlanner::new()));

/// Forward (real to half spectrum) and inverse plans of length `m`, from the process's planner.
pub(crate) fn plans(m: usize) -> (Arc<dyn RealToComplex<f64>>, Arc<dyn ComplexToReal<f64>>) {
    // A planner left by a panicking thread is still a valid cache.
    let mut p = PLANNER.lock().unwrap_or_else(|e| e.into_inner());
    (p.plan_fft_forward(m), p.plan_fft_inverse(m))
}

/// The half spectrum (m/2 + 1 bins) of the real series `x` (length m, overwritten).
pub(crate) fn forward(x: &mut [f64]) -> Vec<Complex64> {
    let (fwd, _) = plans(x.len());
    let mut spectrum = fwd.make_output_vec();
    fwd.process(x, &mut spectrum)
        .expect("buffer lengths come from the plan");
    spectrum
}

/// The real series of length `m` whose half spectrum is `spectrum` (overwritten), unnormalised (m
/// times the series). The imaginary parts of the zero-frequency bin and, for even m, of the Nyquist
/// bin are set to zero: a real series has none there, and rounding would otherwise leave a trace.
pub(crate) fn inverse(spectrum: &mut [Complex64], m: usize) -> Vec<f64> {
    let (_, inv) = plans(m);
    spectrum[0].im = 0.0;
    if m.is_multiple_of(2) {
        spectrum[m / 2].im = 0.0;
    }
    let mut out = inv.make_output_vec();
    inv.process(spectrum, &mut out)
        .expect("buffer lengths come from the plan; edge bins are real");
    out
}

/// Band-passes `x` sampled at `rate_hz` to [lo, hi] Hz.
pub fn band_pass(x: &[f64], rate_hz: f64, lo: f64, hi: f64) -> Vec<f64> {
    let n = x.len();
    if n < 2 {
        return vec![0.0; n];
    }
    let m = 2 * n;
    let mut buf: Vec<f64> = (0..m)
        .map(|i| if i < n { x[i] } else { x[m - 1 - i] })
        .collect();
    let mut spectrum = forward(&mut buf);
    for (k, c) in spectrum.iter_mut().enumerate() {
        let f = k as f64 * rate_hz / m as f64;
        *c *= gain(f, lo, hi);
    }
    let y = inverse(&mut spectrum, m);
    y[..n].iter().map(|v| v / m as f64).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn passes_the_band_and_stops_the_rest() {
        // Sines at 0.01, 0.3 and 4 Hz through a 0.05–1 Hz band: only the middle one stays, at gain 1.
        let rate = 20.0;
        let t: Vec<f64> = (0..20_000).map(|i| i as f64 / rate).collect();
        let s = |f: f64| {
            t.iter()
                .map(|t| (2.0 * std::f64::consts::PI * f * t).sin())
                .collect::<Vec<f64>>()
        };
        let (a, b, c) = (s(0.01), s(0.3), s(4.0));
        let x: Vec<f64> = (0..t.len()).map(|i| a[i] + b[i] + c[i]).collect();
        let y = band_pass(&x, rate, 0.05, 1.0);
        let err = (2000..18_000)
            .map(|i| (y[i] - b[i]).abs())
            .fold(0.0, f64::max);
        assert!(err < 0.01, "{err}");
        assert_eq!(gain(0.3, 0.05, 1.0), 1.0);
        assert_eq!(gain(2.0, 0.05, 1.0), 0.0);
    }
}
