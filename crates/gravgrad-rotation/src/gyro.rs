//! Angular acceleration from gyro rates: a zero-phase low-pass (a first-order recursive filter run
//! forward and backward, so its amplitude response is 1/(1 + (f/fc)²) and its phase zero; common
//! practice) followed by central differences. Units: rad/s in, rad/s² out, sensor axes.

/// Low-passes `rate` (rad/s, sampled at `rate_hz`) with cutoff `cutoff_hz` and differentiates it.
pub fn angular_acceleration(rate: &[f64], rate_hz: f64, cutoff_hz: f64) -> Vec<f64> {
    let n = rate.len();
    if n < 3 {
        return vec![0.0; n];
    }
    let dt = 1.0 / rate_hz;
    let a = (-2.0 * std::f64::consts::PI * cutoff_hz * dt).exp();
    let mut y = rate.to_vec();
    for i in 1..n {
        y[i] = a * y[i - 1] + (1.0 - a) * y[i];
    }
    for i in (0..n - 1).rev() {
        y[i] = a * y[i + 1] + (1.0 - a) * y[i];
    }
    // Central differences in place (one-sided at the ends), keeping the previous filtered value.
    let mut prev = y[0];
    y[0] = (y[1] - y[0]) / dt;
    for i in 1..n - 1 {
        let here = y[i];
        y[i] = (y[i + 1] - prev) / (2.0 * dt);
        prev = here;
    }
    y[n - 1] = (y[n - 1] - prev) / dt;
    y
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn derivative_of_a_slow_sine() {
        // d/dt sin(2πft) = 2πf cos(2πft); well below the cutoff the filter passes it (gain
        // 1/(1 + (f/fc)²) = 0.9901 for f/fc = 0.1).
        let (rate, f, fc) = (50.0, 0.2, 2.0);
        let w: Vec<f64> = (0..5000)
            .map(|i| (2.0 * std::f64::consts::PI * f * i as f64 / rate).sin())
            .collect();
        let a = angular_acceleration(&w, rate, fc);
        let gain = 1.0 / (1.0 + (f / fc) * (f / fc));
        for (i, ai) in a.iter().enumerate().take(4000).skip(1000) {
            let want = gain
                * 2.0
                * std::f64::consts::PI
                * f
                * (2.0 * std::f64::consts::PI * f * i as f64 / rate).cos();
            assert!((ai - want).abs() < 2e-3, "{ai} vs {want}");
        }
    }
}
