//! Power spectral density by Welch's method: the series is cut into segments of `segment` samples
//! overlapping by half, each segment has its least-squares straight line removed and is multiplied by
//! a periodic Hann window, and the periodograms are averaged (Welch 1967, "The use of fast Fourier
//! transform for the estimation of power spectra: a method based on time averaging over short,
//! modified periodograms", IEEE Trans. Audio Electroacoust. 15:70–73).
//!
//! Scaling is the one-sided density: P(f) = 2·|X(f)|² / (fs·Σw²) (not doubled at 0 and at the Nyquist
//! frequency), so white noise of standard deviation σ sampled at fs has P = 2σ²/fs and amplitude
//! spectral density √P = σ·√(2/fs), in (unit)/√Hz. Same conventions as
//! `scipy.signal.welch(x, fs, window="hann", nperseg=segment, detrend="linear")`.

use rustfft::FftPlanner;
use rustfft::num_complex::Complex64;

/// Averaged periodogram: frequencies (Hz) and one-sided PSD ((unit)²/Hz).
#[derive(Clone, Debug, PartialEq)]
pub struct Spectrum {
    pub frequency_hz: Vec<f64>,
    pub psd: Vec<f64>,
    /// Number of segments averaged.
    pub segments: usize,
}

impl Spectrum {
    /// Amplitude spectral density averaged over [lo, hi] Hz: √(mean of the PSD over the bins in the
    /// band), in (unit)/√Hz; `None` when no bin falls in the band or no segment was averaged.
    pub fn band_density(&self, lo_hz: f64, hi_hz: f64) -> Option<f64> {
        if self.segments == 0 {
            return None;
        }
        let (sum, count) = self
            .frequency_hz
            .iter()
            .zip(&self.psd)
            .filter(|(f, _)| **f >= lo_hz && **f <= hi_hz)
            .fold((0.0, 0usize), |(s, c), (_, p)| (s + p, c + 1));
        (count > 0).then(|| (sum / count as f64).sqrt())
    }
}

/// Removes the least-squares straight line (in sample index) from `x`.
fn detrend_linear(x: &mut [f64]) {
    let n = x.len() as f64;
    let tm = (n - 1.0) / 2.0;
    let xm = x.iter().sum::<f64>() / n;
    let (mut sxy, mut sxx) = (0.0, 0.0);
    for (i, v) in x.iter().enumerate() {
        let dt = i as f64 - tm;
        sxy += dt * (v - xm);
        sxx += dt * dt;
    }
    let slope = if sxx > 0.0 { sxy / sxx } else { 0.0 };
    for (i, v) in x.iter_mut().enumerate() {
        *v -= xm + slope * (i as f64 - tm);
    }
}

/// Welch spectrum of several uniformly sampled stretches of one series (sample rate `rate_hz`),
/// averaging every full segment of every stretch; stretches shorter than a segment add nothing.
/// `segment` below 2, or longer than every stretch, gives an empty spectrum.
pub fn welch(stretches: &[&[f64]], rate_hz: f64, segment: usize) -> Spectrum {
    // A segment longer than every stretch gives nothing (and is not allocated).
    if stretches.iter().all(|x| x.len() < segment) {
        return Spectrum {
            frequency_hz: Vec::new(),
            psd: Vec::new(),
            segments: 0,
        };
    }
    let bins = segment / 2 + 1;
    let frequency_hz: Vec<f64> = (0..bins)
        .map(|k| k as f64 * rate_hz / segment as f64)
        .collect();
    let mut psd = vec![0.0; bins];
    if segment < 2 || rate_hz.is_nan() || rate_hz <= 0.0 {
        return Spectrum {
            frequency_hz,
            psd,
            segments: 0,
        };
    }
    let window: Vec<f64> = (0..segment)
        .map(|i| 0.5 - 0.5 * (2.0 * std::f64::consts::PI * i as f64 / segment as f64).cos())
        .collect();
    let scale = 1.0 / (rate_hz * window.iter().map(|w| w * w).sum::<f64>());
    let fft = FftPlanner::<f64>::new().plan_fft_forward(segment);
    let step = segment - segment / 2;
    let mut segments = 0usize;
    let mut work = vec![0.0; segment];
    let mut buf = vec![Complex64::new(0.0, 0.0); segment];
    for x in stretches {
        let mut start = 0;
        while start + segment <= x.len() {
            work.copy_from_slice(&x[start..start + segment]);
            detrend_linear(&mut work);
            for ((b, v), w) in buf.iter_mut().zip(&work).zip(&window) {
                *b = Complex64::new(v * w, 0.0);
            }
            fft.process(&mut buf);
            for (k, p) in psd.iter_mut().enumerate() {
                let edge = k == 0 || (segment.is_multiple_of(2) && k == segment / 2);
                let factor = if edge { 1.0 } else { 2.0 };
                *p += factor * scale * buf[k].norm_sqr();
            }
            segments += 1;
            start += step;
        }
    }
    if segments > 0 {
        for p in psd.iter_mut() {
            *p /= segments as f64;
        }
    }
    Spectrum {
        frequency_hz,
        psd,
        segments,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn a_sinusoid_carries_its_power() {
        // Parseval: a sinusoid of amplitude A has mean power A²/2; with the density scaling the PSD
        // summed over bins times the bin width gives the power (the Hann window spreads it over three
        // bins; it is centred on a bin here so nothing leaks further). 75 cycles per segment, so the
        // straight-line fit of the detrend takes out only ~1e-4 of the power.
        let fs = 20.0;
        let seg = 200;
        let f0 = 7.5; // bin 75
        let a = 3.0;
        let x: Vec<f64> = (0..4000)
            .map(|i| a * (2.0 * std::f64::consts::PI * f0 * i as f64 / fs).sin())
            .collect();
        let sp = welch(&[&x], fs, seg);
        let power: f64 = sp.psd.iter().sum::<f64>() * fs / seg as f64;
        assert_abs_diff_eq!(power, a * a / 2.0, epsilon = 1e-3 * a * a);
        assert_eq!(sp.segments, (4000 - 100) / 100);
    }
}
