//! Applying a pair's calibration: the correction subtracted from its difference d = a − b.

use crate::estimate::{PairCalibration, PairData};

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

    /// The calibrated difference d − correction for every sample, m/s².
    pub fn corrected(&self, d: &PairData<'_>) -> Vec<f64> {
        (0..d.difference.len())
            .map(|i| d.difference[i] - self.correction_at(d, i))
            .collect()
    }
}
