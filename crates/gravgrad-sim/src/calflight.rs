//! The path of a calibration flight: straight legs around the survey area, each carrying one
//! manoeuvre, joined by turns, flown at a constant height above the mean ground.
//!
//! Leg k at heading ψ_k lies on the side of a polygon about the survey centre: its middle is
//! D = v·leg_s/2 + R to the left of the centre (R = v / turn rate), so that consecutive headings
//! 90° apart make a box flown clockwise with turns of about radius R. Turns between legs are the
//! quintic Hermite curves of the survey path (`path.rs`), flown at constant speed.
//!
//! On a leg of duration L, with τ the time since its start, the aircraft is at
//! p(τ) = p₀ + (v·τ + x(τ))·d + y(τ)·r and height H + z(τ), d the leg's direction and r the
//! direction to its right; velocity and acceleration are the exact first and second derivatives,
//! so the kinematics are consistent by construction. The manoeuvres:
//! - roll: y = A·q(τ), A = g·tan(φ)/ω², the lateral acceleration of a coordinated bank φ;
//! - pitch: z = A·q(τ), A = v·sin(θ)/ω, the vertical speed of a flight-path angle θ;
//! - surge: x = A·q(τ), A = a/ω², along-track acceleration amplitude a;
//! - yaw: the heading leaves the ground track by β = B·q(τ) (sideslip), the path straight;
//! - climb: z = Z·sin⁴(πτ/L), one climb and descent, highest rate of climb Z·(π/L)·3√3/4.
//!
//! q(τ) = sin(ωτ)·w(τ), ω = 2πN/L with N = round(L/period) ≥ 2 whole periods, and w a Tukey window
//! (a sin² taper over the first and the last period, 1 between). With whole periods q, q′ and q″
//! vanish at both ends of the leg and q″ is continuous where the taper meets the flat part, so the
//! acceleration is continuous from the turn into the leg and out again.
//!
//! Frame: local north/east metres from the area origin (grid), heights above the ellipsoid,
//! NED velocity and acceleration, m/s and m/s².

use crate::path::{self, Piece, Track};
use crate::scenario::{CalibrationFlight, Manoeuvre, Plan};
use std::f64::consts::PI;

/// Gravity used to turn a bank angle into a lateral acceleration, m/s².
const G: f64 = 9.81;

/// One manoeuvre leg.
#[derive(Clone, Debug)]
pub struct CalibrationLeg {
    /// Position at the start, north and east, m.
    pub start: [f64; 2],
    /// Direction of flight, radians clockwise from grid north.
    pub heading: f64,
    pub manoeuvre: Manoeuvre,
    pub line: i64,
}

/// Whole periods of the oscillating manoeuvres on a leg (at least two: one taper at each end).
pub fn periods_per_leg(cf: &CalibrationFlight) -> usize {
    ((cf.leg_s / cf.period_s).round() as usize).max(2)
}

/// The legs in flying order: for each manoeuvre, one leg at each heading.
pub fn legs(cf: &CalibrationFlight, plan: &Plan, centre: [f64; 2]) -> Vec<CalibrationLeg> {
    let v = plan.speed_m_s;
    let half = 0.5 * v * cf.leg_s;
    let radius = v / plan.turn_rate_deg_s.to_radians();
    let offset = half + radius;
    let mut out = Vec::new();
    for m in &cf.manoeuvres {
        for h in &cf.headings_deg {
            let heading = h.to_radians();
            let (s, c) = heading.sin_cos();
            // Middle of the leg to the left of the centre; the leg runs through it along d.
            let mid = [centre[0] + offset * s, centre[1] - offset * c];
            out.push(CalibrationLeg {
                start: [mid[0] - half * c, mid[1] - half * s],
                heading,
                manoeuvre: *m,
                line: cf.first_line + out.len() as i64,
            });
        }
    }
    out
}

/// The Tukey window with a sin² taper of length `taper` at both ends of [0, len]: w, w′, w″.
fn window(tau: f64, len: f64, taper: f64) -> [f64; 3] {
    let k = PI / taper;
    if tau < taper {
        let (sn, cs) = (k * tau).sin_cos();
        [0.5 * (1.0 - cs), 0.5 * k * sn, 0.5 * k * k * cs]
    } else if tau > len - taper {
        let (sn, cs) = (k * (len - tau)).sin_cos();
        [0.5 * (1.0 - cs), -0.5 * k * sn, 0.5 * k * k * cs]
    } else {
        [1.0, 0.0, 0.0]
    }
}

/// The oscillation q = sin(ωτ)·w(τ) of N whole periods over [0, len]: q, q′, q″.
pub fn oscillation(tau: f64, len: f64, periods: usize) -> [f64; 3] {
    let omega = 2.0 * PI * periods as f64 / len;
    let (s, c) = (omega * tau).sin_cos();
    let [w, dw, ddw] = window(tau, len, len / periods as f64);
    [
        s * w,
        omega * c * w + s * dw,
        -omega * omega * s * w + 2.0 * omega * c * dw + s * ddw,
    ]
}

/// One climb and descent over [0, len], sin⁴(πτ/len), peak 1: value, first and second derivative.
pub fn climb_profile(tau: f64, len: f64) -> [f64; 3] {
    let k = PI / len;
    let (s, c) = (k * tau).sin_cos();
    let (s2, s3) = (s * s, s * s * s);
    [
        s2 * s2,
        4.0 * k * s3 * c,
        k * k * (12.0 * s2 * c * c - 4.0 * s2 * s2),
    ]
}

/// Largest value of d/dx sin⁴x: 4·sin³x·cos x at x = 60°, i.e. 3√3/4.
const CLIMB_PEAK_SLOPE: f64 = 1.299_038_105_676_658;

/// Displacements of a leg's manoeuvre at leg time τ: along track x, to the right y, up z (m) and
/// the sideslip β (rad), each with its first and second time derivatives.
fn displacement(
    cf: &CalibrationFlight,
    v: f64,
    m: Manoeuvre,
    tau: f64,
) -> ([f64; 3], [f64; 3], [f64; 3], [f64; 3]) {
    let len = cf.leg_s;
    let n = periods_per_leg(cf);
    let omega = 2.0 * PI * n as f64 / len;
    let scaled = |a: f64, q: [f64; 3]| q.map(|x| a * x);
    let zero = [0.0; 3];
    match m {
        Manoeuvre::Roll => {
            let a = G * cf.roll_amplitude_deg.to_radians().tan() / (omega * omega);
            (zero, scaled(a, oscillation(tau, len, n)), zero, zero)
        }
        Manoeuvre::Pitch => {
            let a = v * cf.pitch_amplitude_deg.to_radians().sin() / omega;
            (zero, zero, scaled(a, oscillation(tau, len, n)), zero)
        }
        Manoeuvre::Surge => {
            let a = cf.surge_amplitude_m_s2 / (omega * omega);
            (scaled(a, oscillation(tau, len, n)), zero, zero, zero)
        }
        Manoeuvre::Yaw => {
            let b = cf.yaw_amplitude_deg.to_radians();
            (zero, zero, zero, scaled(b, oscillation(tau, len, n)))
        }
        Manoeuvre::Climb => {
            let z = cf.climb_rate_m_s * len / (PI * CLIMB_PEAK_SLOPE);
            (zero, zero, scaled(z, climb_profile(tau, len)), zero)
        }
    }
}

enum Segment {
    Leg(CalibrationLeg),
    Turn(Piece),
}

/// Samples the calibration flight at the plan's rate and speed: legs around `centre` (north, east,
/// m) at `height_m` above the ellipsoid, the first sample at `start_s` (GPS s).
pub fn fly(
    cf: &CalibrationFlight,
    plan: &Plan,
    centre: [f64; 2],
    height_m: f64,
    start_s: f64,
) -> Track {
    let v = plan.speed_m_s;
    let legs = legs(cf, plan, centre);
    let mut segments: Vec<(Segment, f64)> = Vec::new();
    for (k, leg) in legs.iter().enumerate() {
        if k > 0 {
            let prev = &legs[k - 1];
            let d0 = [prev.heading.cos(), prev.heading.sin()];
            let d1 = [leg.heading.cos(), leg.heading.sin()];
            let end = [
                prev.start[0] + v * cf.leg_s * d0[0],
                prev.start[1] + v * cf.leg_s * d0[1],
            ];
            let dist = path::norm([leg.start[0] - end[0], leg.start[1] - end[1]]);
            let k_len = 1.5 * dist;
            let piece = Piece::hermite(
                end,
                [k_len * d0[0], k_len * d0[1]],
                leg.start,
                [k_len * d1[0], k_len * d1[1]],
            );
            let duration = piece.length() / v;
            segments.push((Segment::Turn(piece), duration));
        }
        segments.push((Segment::Leg(leg.clone()), cf.leg_s));
    }
    let total: f64 = segments.iter().map(|s| s.1).sum();
    let dt = 1.0 / plan.sample_rate_hz;
    let n = (total / dt).floor() as usize + 1;
    let mut tr = Track::default();
    let (mut seg, mut base) = (0usize, 0.0);
    for i in 0..n {
        let t = i as f64 * dt;
        while seg + 1 < segments.len() && t > base + segments[seg].1 {
            base += segments[seg].1;
            seg += 1;
        }
        let local = (t - base).clamp(0.0, segments[seg].1);
        let (pos, vel, acc, h, line, slip) = match &segments[seg].0 {
            Segment::Turn(pc) => {
                let u = pc.u_at(local * v);
                let (p, d1, d2) = pc.eval(u);
                let speed_u = path::norm(d1).max(1e-12);
                let tv = [d1[0] / speed_u, d1[1] / speed_u];
                let kappa = (d1[0] * d2[1] - d1[1] * d2[0]) / speed_u.powi(3);
                let normal = [-tv[1], tv[0]];
                (
                    p,
                    [v * tv[0], v * tv[1], 0.0],
                    [v * v * kappa * normal[0], v * v * kappa * normal[1], 0.0],
                    height_m,
                    0,
                    [0.0, 0.0],
                )
            }
            Segment::Leg(leg) => {
                let (x, y, z, b) = displacement(cf, v, leg.manoeuvre, local);
                let (s, c) = leg.heading.sin_cos();
                let (d, r) = ([c, s], [-s, c]);
                let along = v * local + x[0];
                (
                    [
                        leg.start[0] + along * d[0] + y[0] * r[0],
                        leg.start[1] + along * d[1] + y[0] * r[1],
                    ],
                    [
                        (v + x[1]) * d[0] + y[1] * r[0],
                        (v + x[1]) * d[1] + y[1] * r[1],
                        -z[1],
                    ],
                    [x[2] * d[0] + y[2] * r[0], x[2] * d[1] + y[2] * r[1], -z[2]],
                    height_m + z[0],
                    leg.line,
                    [b[0], b[1]],
                )
            }
        };
        let h2 = vel[0] * vel[0] + vel[1] * vel[1];
        tr.time_s.push(start_s + t);
        tr.north.push(pos[0]);
        tr.east.push(pos[1]);
        tr.height.push(h);
        tr.track_deg
            .push(vel[1].atan2(vel[0]).to_degrees().rem_euclid(360.0));
        tr.track_rate
            .push((vel[0] * acc[1] - vel[1] * acc[0]) / h2.max(1e-12));
        tr.accel.push(acc);
        tr.velocity.push(vel);
        tr.line.push(line);
        tr.drape.push(height_m);
        tr.sideslip.push(slip[0]);
        tr.sideslip_rate.push(slip[1]);
    }
    tr
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    /// Second differences against the stated second derivative, first against the first (central
    /// differences, truncation h²/6·f‴ and h²/12·f⁗; the bounds below are those with f‴ and f⁗
    /// bounded by (1.5ω)³ and (1.5ω)⁴: q is a sum of sinusoids of frequency ω and ω ± ω/2 whose
    /// amplitudes add up to at most 1).
    #[test]
    fn oscillation_derivatives_are_its_derivatives_and_vanish_at_the_ends() {
        let (len, n) = (60.0, 8usize);
        let omega = 2.0 * PI * n as f64 / len;
        let h = 1e-3;
        let b = 1.5 * omega;
        for k in 1..600 {
            let tau = k as f64 * 0.1 - 0.0371;
            let [q0, q1, q2] = oscillation(tau, len, n);
            let (qm, qp) = (
                oscillation(tau - h, len, n)[0],
                oscillation(tau + h, len, n)[0],
            );
            let d1 = (qp - qm) / (2.0 * h);
            let d2 = (qp - 2.0 * q0 + qm) / (h * h);
            assert!((d1 - q1).abs() < h * h / 6.0 * b.powi(3) + 1e-9, "{tau}");
            // Rounding of the second difference: about 4ε/h² ≈ 1e-9.
            assert!((d2 - q2).abs() < h * h / 12.0 * b.powi(4) + 1e-8, "{tau}");
        }
        for tau in [0.0, len] {
            let q = oscillation(tau, len, n);
            assert_abs_diff_eq!(q[..], [0.0; 3][..], epsilon = 1e-12);
        }
        // Continuous second derivative where the taper ends (τ = one period).
        let t = len / n as f64;
        let (a, c) = (
            oscillation(t - 1e-9, len, n)[2],
            oscillation(t + 1e-9, len, n)[2],
        );
        assert_abs_diff_eq!(a, c, epsilon = 1e-6);
    }

    #[test]
    fn climb_profile_peaks_at_one_with_the_stated_slope() {
        let len = 60.0;
        assert_abs_diff_eq!(climb_profile(30.0, len)[0], 1.0, epsilon = 1e-15);
        let steepest = (0..6000)
            .map(|k| climb_profile(k as f64 * 0.01, len)[1])
            .fold(0.0f64, f64::max);
        // d/dτ sin⁴(πτ/L) peaks at (π/L)·3√3/4 (x = 60°).
        let want = PI / len * 3.0 * 3f64.sqrt() / 4.0;
        assert_abs_diff_eq!(steepest / want, 1.0, epsilon = 1e-6);
        assert_abs_diff_eq!(CLIMB_PEAK_SLOPE, 3.0 * 3f64.sqrt() / 4.0, epsilon = 1e-15);
    }
}
