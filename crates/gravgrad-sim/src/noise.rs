//! Deterministic random numbers and noise processes. Same seed, same numbers, on every platform and
//! with any number of threads: every stream is derived from the scenario seed and a fixed stream id.

/// SplitMix64 (Steele, Lea & Flood 2014, "Fast splittable pseudorandom number generators", OOPSLA).
#[derive(Clone, Debug)]
pub struct Rng(u64);

impl Rng {
    /// A stream for `(seed, stream)`: independent streams for each channel and error term.
    pub fn new(seed: u64, stream: u64) -> Self {
        let mut r = Rng(seed ^ stream.wrapping_mul(0xD1B5_4A32_D192_ED03));
        r.next_u64();
        r
    }

    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in [0, 1).
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }

    /// Standard normal deviate (Box–Muller).
    pub fn normal(&mut self) -> f64 {
        let u1 = self.uniform().max(1e-300);
        let u2 = self.uniform();
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }
}

/// White noise with one-sided density `density` (unit/√Hz) sampled at `rate_hz`: per-sample standard
/// deviation density·√(rate/2).
pub fn white(rng: &mut Rng, n: usize, density: f64, rate_hz: f64) -> Vec<f64> {
    let sigma = density * (rate_hz / 2.0).sqrt();
    (0..n).map(|_| sigma * rng.normal()).collect()
}

/// A stationary first-order Gauss–Markov (Ornstein–Uhlenbeck) sequence of standard deviation
/// `sigma` and correlation time `tau_s`, sampled at `rate_hz`.
pub fn gauss_markov(rng: &mut Rng, n: usize, sigma: f64, tau_s: f64, rate_hz: f64) -> Vec<f64> {
    let a = (-1.0 / (tau_s * rate_hz)).exp();
    let k = sigma * (1.0 - a * a).sqrt();
    let mut x = sigma * rng.normal();
    (0..n)
        .map(|_| {
            let v = x;
            x = a * x + k * rng.normal();
            v
        })
        .collect()
}

/// 1/f ("flicker") noise whose one-sided density equals `white_density`·√(corner/f) below the
/// corner frequency, down to 1/duration: a sum of Gauss–Markov processes with corners an octave
/// apart and equal variance c. Between corners their Lorentzian spectra add up to
/// S(f) ≈ (2c/πf)·(r+1)/(r−1) with r = 2, i.e. 6c/(πf); setting that to S_w·f_c/f gives
/// c = π·S_w·f_c/6 (S_w the white one-sided PSD). Checked by a spectral test.
pub fn flicker(
    rng: &mut Rng,
    n: usize,
    white_density: f64,
    corner_hz: f64,
    rate_hz: f64,
) -> Vec<f64> {
    let mut out = vec![0.0; n];
    if corner_hz <= 0.0 || white_density <= 0.0 || n < 2 {
        return out;
    }
    let duration = n as f64 / rate_hz;
    let s_w = white_density * white_density;
    let c = std::f64::consts::PI * s_w * corner_hz / 6.0;
    let mut f = corner_hz;
    while f > 0.5 / duration {
        let tau = 1.0 / (2.0 * std::f64::consts::PI * f);
        let gm = gauss_markov(rng, n, c.sqrt(), tau, rate_hz);
        for (o, v) in out.iter_mut().zip(gm) {
            *o += v;
        }
        f /= 2.0;
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    /// One-sided PSD at frequency f by averaging periodograms of Hann-windowed segments (Welch 1967).
    fn psd_at(x: &[f64], rate: f64, seg: usize, f: f64) -> f64 {
        let w: Vec<f64> = (0..seg)
            .map(|i| 0.5 - 0.5 * (2.0 * std::f64::consts::PI * i as f64 / seg as f64).cos())
            .collect();
        let u: f64 = w.iter().map(|v| v * v).sum();
        let k = (f * seg as f64 / rate).round() as usize;
        let mut acc = 0.0;
        let mut count = 0;
        let mut start = 0;
        while start + seg <= x.len() {
            let (mut re, mut im) = (0.0, 0.0);
            for (i, (xv, wv)) in x[start..start + seg].iter().zip(&w).enumerate() {
                let ph = 2.0 * std::f64::consts::PI * (k * i) as f64 / seg as f64;
                re += xv * wv * ph.cos();
                im -= xv * wv * ph.sin();
            }
            acc += 2.0 * (re * re + im * im) / (rate * u);
            count += 1;
            start += seg / 2;
        }
        acc / count as f64
    }

    #[test]
    fn white_noise_has_the_density_asked_for() {
        // Definition of a one-sided density: σ² = S·(rate/2) for white noise.
        let mut r = Rng::new(7, 1);
        let x = white(&mut r, 200_000, 3.0, 20.0);
        let var = x.iter().map(|v| v * v).sum::<f64>() / x.len() as f64;
        assert_abs_diff_eq!(var.sqrt() / (3.0 * 10f64.sqrt()), 1.0, epsilon = 0.01);
        let s = psd_at(&x, 20.0, 512, 3.0).sqrt();
        assert_abs_diff_eq!(s / 3.0, 1.0, epsilon = 0.1);
    }

    #[test]
    fn flicker_noise_rises_as_one_over_f_below_the_corner() {
        // Design target: S(f) = S_w·f_c/f; at f_c/8 the density is √8 times the white one (±30%).
        let (rate, corner, dens) = (5.0, 0.2, 1.0);
        let mut r = Rng::new(11, 2);
        let x = flicker(&mut r, 400_000, dens, corner, rate);
        for f in [corner / 8.0, corner / 4.0] {
            let want = dens * (corner / f).sqrt();
            let got = psd_at(&x, rate, 4096, f).sqrt();
            assert!((got / want - 1.0).abs() < 0.3, "f = {f}: {got} vs {want}");
        }
    }

    #[test]
    fn streams_are_reproducible_and_distinct() {
        let a: Vec<u64> = (0..5)
            .map({
                let mut r = Rng::new(3, 9);
                move |_| r.next_u64()
            })
            .collect();
        let b: Vec<u64> = (0..5)
            .map({
                let mut r = Rng::new(3, 9);
                move |_| r.next_u64()
            })
            .collect();
        let c: Vec<u64> = (0..5)
            .map({
                let mut r = Rng::new(3, 10);
                move |_| r.next_u64()
            })
            .collect();
        assert_eq!(a, b);
        assert_ne!(a, c);
    }
}
