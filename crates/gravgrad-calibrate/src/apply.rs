//! Applying a pair's calibration: the correction subtracted from its difference d = a − b.

use crate::estimate::{PairCalibration, PairData};
use rayon::prelude::*;

impl PairCalibration {
    /// The calibration part of pair difference `i`, m/s²: κ·f(O) + bias and drift (polynomial in
    /// t − t_mid) + temperature term + self-gradient term. The rotation terms (ΩΩ, α) are physics,
    /// not calibration: the solve removes them.
    pub fn correction_at(&self, d: &PairData<'_>, i: usize) -> f64 {
        let mut c = (0..3).map(|k| self.kappa[k].value * d.f[k][i]).sum::<f64>();
        let dt = d.time[i] - self.t_mid;
        let mut power = 1.0;
        for p in &self.polynomial {
            c += p.value * power;
            power *= dt;
        }
        if let (Some(coef), Some(t)) = (self.temperature, d.temperature) {
            c += coef.value * (t[i] - self.temperature_mean);
        }
        if let (Some(sg), Some(rel)) = (self.self_gradient, d.relative_attitude) {
            c += sg[0].value * rel[0][i] + sg[1].value * rel[1][i];
        }
        c
    }

    /// `x[i]` − the correction of sample `i` for every sample, m/s² (x: a pair output or difference,
    /// m/s²). See [`Self::subtract_into`].
    pub fn subtract_from(&self, d: &PairData<'_>, x: &[f64]) -> Vec<f64> {
        let mut out = vec![0.0; x.len()];
        self.subtract_into(d, x, &mut out);
        out
    }

    /// Writes `x[i]` − the correction of sample `i` into `out[i]` for every sample, m/s² (x: a pair
    /// output or difference, m/s²; `out` as long as `x`, e.g. a buffer no longer needed). The same
    /// arithmetic as [`Self::correction_at`] in the same order, with the coefficients and the
    /// optional terms settled once instead of per sample; spans of samples in parallel.
    pub fn subtract_into(&self, d: &PairData<'_>, x: &[f64], out: &mut [f64]) {
        let kappa = self.kappa.map(|k| k.value);
        let poly: Vec<f64> = self.polynomial.iter().map(|p| p.value).collect();
        let temperature = self
            .temperature
            .zip(d.temperature)
            .map(|(c, t)| (c.value, t));
        let self_gradient = self
            .self_gradient
            .zip(d.relative_attitude)
            .map(|(sg, rel)| ([sg[0].value, sg[1].value], rel));
        // Term by term across a span of samples (vectorised), each sample's terms added in the
        // order of `correction_at`.
        const SPAN: usize = 1024;
        out.par_chunks_mut(SPAN).enumerate().for_each_init(
            || (vec![0.0; SPAN], vec![0.0; SPAN], vec![0.0; SPAN]),
            |(cs, dts, powers), (q, o)| {
                let r = q * SPAN..q * SPAN + o.len();
                let m = o.len();
                let (c, dt, power) = (&mut cs[..m], &mut dts[..m], &mut powers[..m]);
                let f = [&d.f[0][r.clone()], &d.f[1][r.clone()], &d.f[2][r.clone()]];
                for (k, ck) in c.iter_mut().enumerate() {
                    *ck = -0.0 + kappa[0] * f[0][k] + kappa[1] * f[1][k] + kappa[2] * f[2][k];
                }
                for ((dtk, pk), t) in dt.iter_mut().zip(power.iter_mut()).zip(&d.time[r.clone()]) {
                    *dtk = t - self.t_mid;
                    *pk = 1.0;
                }
                for p in &poly {
                    for ((ck, pk), dtk) in c.iter_mut().zip(power.iter_mut()).zip(dt.iter()) {
                        *ck += p * *pk;
                        *pk *= dtk;
                    }
                }
                if let Some((coef, t)) = temperature {
                    for (ck, tk) in c.iter_mut().zip(&t[r.clone()]) {
                        *ck += coef * (tk - self.temperature_mean);
                    }
                }
                if let Some((sg, rel)) = self_gradient {
                    for ((ck, a), b) in c.iter_mut().zip(&rel[0][r.clone()]).zip(&rel[1][r.clone()])
                    {
                        *ck += sg[0] * a + sg[1] * b;
                    }
                }
                for ((v, xk), ck) in o.iter_mut().zip(&x[r]).zip(c.iter()) {
                    *v = xk - ck;
                }
            },
        );
    }

    /// The calibrated difference d − correction for every sample, m/s².
    pub fn corrected(&self, d: &PairData<'_>) -> Vec<f64> {
        (0..d.difference.len())
            .map(|i| d.difference[i] - self.correction_at(d, i))
            .collect()
    }
}
