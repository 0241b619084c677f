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
    /// output or difference, m/s²; `out` as long as `x`, e.g. a buffer no longer needed). Spans of
    /// samples in parallel, each as [`Self::subtract_span`].
    pub fn subtract_into(&self, d: &PairData<'_>, x: &[f64], out: &mut [f64]) {
        const SPAN: usize = 1024;
        out.par_chunks_mut(SPAN)
            .zip(x.par_chunks(SPAN))
            .enumerate()
            .for_each(|(q, (o, xs))| self.subtract_span(d, q * SPAN, xs, o));
    }

    /// `out[k]` = `x[k]` − the correction of sample `first + k`, m/s², for a span of samples: `x` the
    /// span of a pair output or difference (m/s²), `d`'s series indexed from the flight's first
    /// sample. The same arithmetic as [`Self::correction_at`] in the same order, with the
    /// coefficients and the optional terms settled once instead of per sample, term by term across
    /// the samples (vectorised). Reads only `d`'s force, time, temperature and relative attitude, so
    /// a caller can apply the calibration as it reads the samples instead of keeping a corrected
    /// series.
    pub fn subtract_span(&self, d: &PairData<'_>, first: usize, x: &[f64], out: &mut [f64]) {
        const CHUNK: usize = 256;
        let kappa = self.kappa.map(|k| k.value);
        let temperature = self
            .temperature
            .zip(d.temperature)
            .map(|(c, t)| (c.value, t));
        let self_gradient = self
            .self_gradient
            .zip(d.relative_attitude)
            .map(|(sg, rel)| ([sg[0].value, sg[1].value], rel));
        let (mut cs, mut dts, mut powers) = ([0.0; CHUNK], [0.0; CHUNK], [0.0; CHUNK]);
        for (q, (o, xs)) in out.chunks_mut(CHUNK).zip(x.chunks(CHUNK)).enumerate() {
            let r = first + q * CHUNK..first + q * CHUNK + o.len();
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
            for p in self.polynomial.iter().map(|p| p.value) {
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
                for ((ck, a), b) in c.iter_mut().zip(&rel[0][r.clone()]).zip(&rel[1][r.clone()]) {
                    *ck += sg[0] * a + sg[1] * b;
                }
            }
            for ((v, xk), ck) in o.iter_mut().zip(xs).zip(c.iter()) {
                *v = xk - ck;
            }
        }
    }

    /// The calibrated difference d − correction for every sample, m/s².
    pub fn corrected(&self, d: &PairData<'_>) -> Vec<f64> {
        (0..d.difference.len())
            .map(|i| d.difference[i] - self.correction_at(d, i))
            .collect()
    }
}
