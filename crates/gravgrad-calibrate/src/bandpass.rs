//! Zero-phase band-pass: the series is mirrored (even extension, so the periodic continuation has no
//! jump), its spectrum multiplied by a pass band with raised-cosine edges 20% of each edge frequency
//! wide, transformed back and cropped. The mirrored series' spectrum is the series' discrete cosine
//! transform (DCT-II), and the cropped inverse its DCT-III, so both are formed by Makhoul's
//! algorithm from one real transform of the series' own length instead of one of twice its length:
//! half the work, the same result to rounding. Frequencies in Hz, sample rate in Hz.
//!
//! Makhoul, J. (1980). A fast cosine transform in one and two dimensions. *IEEE Transactions on
//! Acoustics, Speech, and Signal Processing* 28(1), 27–34.

use realfft::{ComplexToReal, RealFftPlanner, RealToComplex};
use rustfft::num_complex::Complex64;
use std::collections::HashMap;
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

/// Per bin k = 0…n/2 of Makhoul's algorithm for length n: the twiddle factor e^(iπk/2n) and the
/// gains g_k and g_(n−k) at the even extension's frequencies k·rate/2n (g_n is never read: its
/// coefficient is zero). Kept for the process per length, rate and band, as the plans are: the
/// factors are the same whoever forms them.
type BinFactors = Vec<(Complex64, f64, f64)>;

static BIN_FACTORS: LazyLock<Mutex<HashMap<[u64; 4], Arc<BinFactors>>>> =
    LazyLock::new(|| Mutex::new(HashMap::new()));

fn bin_factors(n: usize, rate_hz: f64, lo: f64, hi: f64) -> Arc<BinFactors> {
    let key = [n as u64, rate_hz.to_bits(), lo.to_bits(), hi.to_bits()];
    let mut t = BIN_FACTORS.lock().unwrap_or_else(|e| e.into_inner());
    t.entry(key)
        .or_insert_with(|| {
            let g = |k: usize| gain(k as f64 * rate_hz / (2 * n) as f64, lo, hi);
            Arc::new(
                (0..=n / 2)
                    .map(|k| {
                        let (s, c) = (std::f64::consts::PI * k as f64 / (2 * n) as f64).sin_cos();
                        let upper = if k == 0 { 0.0 } else { g(n - k) };
                        (Complex64::new(c, s), g(k), upper)
                    })
                    .collect(),
            )
        })
        .clone()
}

/// Band-passes `x` sampled at `rate_hz` to [lo, hi] Hz: the series' even extension (length 2n)
/// filtered by [`gain`] at its frequencies k·rate/2n, cropped to the first n samples.
///
/// By Makhoul (1980): with v the series reordered (even samples, then odd ones backwards) and V its
/// transform, the DCT-II is C_k = Re P_k and C_(n−k) = −Im P_k, P_k = e^(−iπk/2n)·V_k (k ≤ n/2); the
/// filtered coefficients D_k = g_k·C_k go back through W_k = e^(iπk/2n)·(D_k − i·D_(n−k)), whose
/// inverse transform w holds the output reordered the same way (y_2j = w_j, y_2j+1 = w_(n−1−j)).
/// The even extension's bins are X_k = 2·e^(iπk/2n)·C_k, so this equals the transform of length 2n.
pub fn band_pass(x: &[f64], rate_hz: f64, lo: f64, hi: f64) -> Vec<f64> {
    let n = x.len();
    if n < 2 {
        return vec![0.0; n];
    }
    let mut v: Vec<f64> = Vec::with_capacity(n);
    v.extend(x.iter().step_by(2));
    v.extend(x.iter().skip(1).step_by(2).rev());
    let mut spectrum = forward(&mut v);
    for (c, (t, g_k, g_nk)) in spectrum
        .iter_mut()
        .zip(bin_factors(n, rate_hz, lo, hi).iter())
    {
        let p = *c * t.conj();
        // D_k − i·D_(n−k) = g_k·Re P_k + i·g_(n−k)·Im P_k (D_n = 0: k = 0's partner has gain 0).
        *c = Complex64::new(g_k * p.re, g_nk * p.im) * t;
    }
    let w = inverse(&mut spectrum, n);
    let scale = 1.0 / n as f64;
    let mut y = vec![0.0; n];
    for (j, yv) in y.iter_mut().step_by(2).enumerate() {
        *yv = w[j] * scale;
    }
    for (j, yv) in y.iter_mut().skip(1).step_by(2).enumerate() {
        *yv = w[n - 1 - j] * scale;
    }
    y
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

    /// The filtered even extension written out term by term (O(n²)): the DCT-II of the series,
    /// each coefficient times the gain at its frequency k·rate/2n, and the DCT-III back.
    fn band_pass_by_definition(x: &[f64], rate: f64, lo: f64, hi: f64) -> Vec<f64> {
        let n = x.len();
        let arg =
            |k: usize, j: usize| std::f64::consts::PI * (k * (2 * j + 1)) as f64 / (2 * n) as f64;
        let d: Vec<f64> = (0..n)
            .map(|k| {
                let c: f64 = x.iter().enumerate().map(|(j, v)| v * arg(k, j).cos()).sum();
                c * gain(k as f64 * rate / (2 * n) as f64, lo, hi)
            })
            .collect();
        (0..n)
            .map(|j| (d[0] + 2.0 * (1..n).map(|k| d[k] * arg(k, j).cos()).sum::<f64>()) / n as f64)
            .collect()
    }

    #[test]
    fn equals_the_filtered_even_extension_term_by_term_at_odd_and_even_lengths() {
        for n in [2, 3, 4, 5, 16, 17, 250, 251, 375] {
            let x: Vec<f64> = (0..n)
                .map(|i| ((i * 7919 + 13) % 101) as f64 * 0.02 - 1.0 + (i as f64 * 0.05).sin())
                .collect();
            let (rate, lo, hi) = (4.0, 0.05, 1.0);
            let got = band_pass(&x, rate, lo, hi);
            let want = band_pass_by_definition(&x, rate, lo, hi);
            let scale = want.iter().fold(0.0f64, |a, v| a.max(v.abs()));
            let err = got
                .iter()
                .zip(&want)
                .fold(0.0f64, |a, (g, w)| a.max((g - w).abs()));
            assert!(err <= 1e-12 * scale.max(1.0), "n = {n}: {err:e}");
        }
    }
}
