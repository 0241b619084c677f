//! Angular acceleration from gyro rates: a zero-phase low-pass (a first-order recursive filter run
//! forward and backward, so its amplitude response is 1/(1 + (f/fc)²) and its phase zero; common
//! practice) followed by central differences. Units: rad/s in, rad/s² out, sensor axes.

use crate::first_touch::filled;

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
    differentiate_in_place(&mut y, dt);
    y
}

/// Central differences of `y` (sampled every `dt` s) in place, one-sided at the ends, keeping the
/// previous value as it goes; `y` has at least 3 samples.
fn differentiate_in_place(y: &mut [f64], dt: f64) {
    let n = y.len();
    let mut prev = y[0];
    y[0] = (y[1] - y[0]) / dt;
    for i in 1..n - 1 {
        let here = y[i];
        y[i] = (y[i + 1] - prev) / (2.0 * dt);
        prev = here;
    }
    y[n - 1] = (y[n - 1] - prev) / dt;
}

/// [`angular_acceleration`] of the three axes at once, the same arithmetic per axis: the three
/// recursions run interleaved in one loop, so that one core keeps three independent chains in flight
/// where each alone waits on its previous sample. All three series must be equally long.
pub fn angular_acceleration3(rates: [&[f64]; 3], rate_hz: f64, cutoff_hz: f64) -> [Vec<f64>; 3] {
    let n = rates[0].len();
    if n < 3 || rates.iter().any(|r| r.len() != n) {
        return rates.map(|r| angular_acceleration(r, rate_hz, cutoff_hz));
    }
    let dt = 1.0 / rate_hz;
    let a = (-2.0 * std::f64::consts::PI * cutoff_hz * dt).exp();
    let [x0, x1, x2] = rates;
    // The outputs' pages are first touched (and mapped by the kernel, a cost comparable to the
    // recursions) on every core, before the recursions run on one.
    let (mut y0, mut y1, mut y2) = (filled(n, 0.0), filled(n, 0.0), filled(n, 0.0));
    let (mut p0, mut p1, mut p2) = (x0[0], x1[0], x2[0]);
    y0[0] = p0;
    y1[0] = p1;
    y2[0] = p2;
    for i in 1..n {
        p0 = a * p0 + (1.0 - a) * x0[i];
        p1 = a * p1 + (1.0 - a) * x1[i];
        p2 = a * p2 + (1.0 - a) * x2[i];
        y0[i] = p0;
        y1[i] = p1;
        y2[i] = p2;
    }
    let (mut p0, mut p1, mut p2) = (y0[n - 1], y1[n - 1], y2[n - 1]);
    for i in (0..n - 1).rev() {
        p0 = a * p0 + (1.0 - a) * y0[i];
        p1 = a * p1 + (1.0 - a) * y1[i];
        p2 = a * p2 + (1.0 - a) * y2[i];
        y0[i] = p0;
        y1[i] = p1;
        y2[i] = p2;
    }
    for y in [&mut y0, &mut y1, &mut y2] {
        differentiate_in_place(y, dt);
    }
    [y0, y1, y2]
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

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
            assert_abs_diff_eq!(*ai, want, epsilon = 2e-3);
        }
    }

    #[test]
    fn three_axes_at_once_give_each_axis_bit_for_bit() {
        let w: Vec<Vec<f64>> = (0..3)
            .map(|k| {
                (0..3001)
                    .map(|i| ((i * (k + 2)) as f64 * 0.013).sin() + 0.1 * k as f64)
                    .collect()
            })
            .collect();
        let all = angular_acceleration3([&w[0], &w[1], &w[2]], 50.0, 2.0);
        for k in 0..3 {
            let one = angular_acceleration(&w[k], 50.0, 2.0);
            assert!(
                one.iter()
                    .zip(&all[k])
                    .all(|(a, b)| a.to_bits() == b.to_bits())
            );
        }
    }
}
