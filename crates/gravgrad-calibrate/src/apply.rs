//! Applying a pair's calibration: the correction subtracted from its difference d = a − b.

use crate::estimate::{PRODUCTS, PairCalibration, PairData, rotation_terms};

impl PairCalibration {
    /// The calibration part of pair difference `i`, m/s²: κ·f(O) + bias and drift (polynomial in
    /// t − t_mid, by Horner's rule) + temperature term + self-gradient term + quadratic terms + the
    /// gyro bias's trace c·ω + the axis errors' D·R. The rotation terms (ΩΩ, α) are physics, not calibration: the solve
    /// removes them.
    pub fn correction_at(&self, d: &PairData<'_>, i: usize) -> f64 {
        let mut c = (0..3).map(|k| self.kappa[k].value * d.f[k][i]).sum::<f64>();
        let dt = d.time[i] - self.t_mid;
        let poly: Vec<f64> = self.polynomial.iter().rev().map(|p| p.value).collect();
        c += horner(&poly, dt);
        if let (Some(coef), Some(t)) = (self.temperature, d.temperature) {
            c += coef.value * (t[i] - self.temperature_mean);
        }
        if let (Some(sg), Some(rel)) = (self.self_gradient, d.relative_attitude) {
            c += sg[0].value * rel[0][i] + sg[1].value * rel[1][i];
        }
        if let Some(q) = self.quadratic {
            let df: [f64; 3] = std::array::from_fn(|k| d.f[k][i] - self.force_mean[k]);
            c += PRODUCTS
                .iter()
                .zip(q)
                .map(|((a, b), qm)| qm.value * df[*a] * df[*b])
                .sum::<f64>();
        }
        if let Some(g) = self.gyro_rate {
            c += (0..3).map(|k| g[k].value * d.omega[k][i]).sum::<f64>();
        }
        if let Some(dc) = self.rotation_coupling {
            let r = rotation_terms(
                std::array::from_fn(|k| d.alpha[k][i]),
                std::array::from_fn(|k| d.omega[k][i]),
            );
            c += dc.iter().zip(r).map(|(x, v)| x.value * v).sum::<f64>();
        }
        c
    }

    /// `out[k]` = `x[k]` − the correction of sample `first + k`, m/s², for a span of samples: `x` the
    /// span of a pair output or difference (m/s²), `d`'s series indexed from the flight's first
    /// sample. The terms of [`Self::correction_at`], with the coefficients and the optional terms
    /// settled once instead of per sample, in passes across the samples (vectorised); the optional
    /// terms are subtracted one after the other, so the result may differ from x − correction_at in
    /// the last bit. Reads only `d`'s force, time, temperature, relative attitude and angular rate, so a caller
    /// can apply the calibration as it reads the samples instead of keeping a corrected series.
    pub fn subtract_span(&self, d: &PairData<'_>, first: usize, x: &[f64], out: &mut [f64]) {
        let kappa = self.kappa.map(|k| k.value);
        let poly: Vec<f64> = self.polynomial.iter().rev().map(|p| p.value).collect();
        let r = first..first + x.len();
        let f = [&d.f[0][r.clone()], &d.f[1][r.clone()], &d.f[2][r.clone()]];
        let time = &d.time[r.clone()];
        // One pass for κ·f and the polynomial (its usual orders unrolled), then the optional terms.
        match poly[..] {
            [p1, p0] => {
                for (k, (o, xk)) in out.iter_mut().zip(x).enumerate() {
                    let dt = time[k] - self.t_mid;
                    let c = -0.0 + kappa[0] * f[0][k] + kappa[1] * f[1][k] + kappa[2] * f[2][k];
                    *o = xk - (c + (p1 * dt + p0));
                }
            }
            _ => {
                for (k, (o, xk)) in out.iter_mut().zip(x).enumerate() {
                    let dt = time[k] - self.t_mid;
                    let c = -0.0 + kappa[0] * f[0][k] + kappa[1] * f[1][k] + kappa[2] * f[2][k];
                    *o = xk - (c + horner(&poly, dt));
                }
            }
        }
        // o = x − c so far; each further term t makes it x − (c + t), taken as (x − c) − t.
        if let Some((coef, t)) = self.temperature.zip(d.temperature) {
            let (coef, mean) = (coef.value, self.temperature_mean);
            for (o, tk) in out.iter_mut().zip(&t[r.clone()]) {
                *o -= coef * (tk - mean);
            }
        }
        if let Some((sg, rel)) = self.self_gradient.zip(d.relative_attitude) {
            let (s0, s1) = (sg[0].value, sg[1].value);
            for ((o, a), b) in out
                .iter_mut()
                .zip(&rel[0][r.clone()])
                .zip(&rel[1][r.clone()])
            {
                *o -= s0 * a + s1 * b;
            }
        }
        // Quadratic terms: only those applied (non-zero), each across the span.
        if let Some(q) = self.quadratic {
            let f0 = self.force_mean;
            for ((a, b), qm) in PRODUCTS.iter().zip(q) {
                if qm.value == 0.0 {
                    continue;
                }
                let (fa, fb) = (&d.f[*a][r.clone()], &d.f[*b][r.clone()]);
                let (ma, mb) = (f0[*a], f0[*b]);
                for ((o, x), y) in out.iter_mut().zip(fa).zip(fb) {
                    *o -= qm.value * ((x - ma) * (y - mb));
                }
            }
        }
        self.subtract_rotation_terms(d, r, out);
    }

    /// Subtracts the axis errors' D·R and the gyro bias's c·ω (the terms applied, each across the
    /// span `r` of `d`'s series) from `out`, m/s²; the diagonal of ΩΩ as −(ω_b² + ω_c²), the
    /// off-diagonal as ω_a·ω_b (rad²/s²), α in rad/s², ω in rad/s.
    fn subtract_rotation_terms(
        &self,
        d: &PairData<'_>,
        r: std::ops::Range<usize>,
        out: &mut [f64],
    ) {
        // The axis errors' rotation terms: only those applied, each across the span (the
        // diagonal of ΩΩ as −(ω_b² + ω_c²), the off-diagonal as ω_a·ω_b).
        if let Some(dc) = self.rotation_coupling {
            for (c, dv) in dc.iter().map(|x| x.value).enumerate() {
                if dv == 0.0 {
                    continue;
                }
                let w = |k: usize| &d.omega[k][r.clone()];
                match c {
                    0..=2 => {
                        for (o, a) in out.iter_mut().zip(&d.alpha[c][r.clone()]) {
                            *o -= dv * a;
                        }
                    }
                    3 | 6 | 8 => {
                        let (p, q) = match c {
                            3 => (1, 2),
                            6 => (0, 2),
                            _ => (0, 1),
                        };
                        for ((o, a), b) in out.iter_mut().zip(w(p)).zip(w(q)) {
                            *o += dv * (a * a + b * b);
                        }
                    }
                    _ => {
                        let (p, q) = match c {
                            4 => (0, 1),
                            5 => (0, 2),
                            _ => (1, 2),
                        };
                        for ((o, a), b) in out.iter_mut().zip(w(p)).zip(w(q)) {
                            *o -= dv * (a * b);
                        }
                    }
                }
            }
        }
        // The gyro bias's trace: only the terms applied, each across the span.
        if let Some(g) = self.gyro_rate {
            for (k, gk) in g.iter().enumerate() {
                if gk.value == 0.0 {
                    continue;
                }
                for (o, w) in out.iter_mut().zip(&d.omega[k][r.clone()]) {
                    *o -= gk.value * w;
                }
            }
        }
    }
}

/// Σ c_k·x^k by Horner's rule, the coefficients from the highest power down; 0 for none.
#[inline]
fn horner(highest_first: &[f64], x: f64) -> f64 {
    match highest_first.split_first() {
        Some((top, rest)) => rest.iter().fold(*top, |acc, c| acc * x + c),
        None => 0.0,
    }
}
