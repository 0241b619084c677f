//! The flight path of a survey plan: survey lines flown in alternate directions, tie lines across
//! them, and smooth transits between (quintic Hermite curves), sampled at the sample rate at constant
//! ground speed, with the drape height following the terrain.
//!
//! Frame: local north/east metres from the area origin; heights above the ellipsoid; accelerations
//! in NED, m/s²; track angles in degrees clockwise from north.

use crate::scenario::{Dynamics, Plan};
use crate::terrain::Surface;

/// The sampled path.
#[derive(Clone, Debug, Default)]
pub struct Track {
    pub time_s: Vec<f64>,
    pub north: Vec<f64>,
    pub east: Vec<f64>,
    pub height: Vec<f64>,
    /// Ground track, degrees from north.
    pub track_deg: Vec<f64>,
    /// Rate of change of the track, rad/s (positive turning clockwise seen from above).
    pub track_rate: Vec<f64>,
    /// Kinematic acceleration, NED, m/s² (turns and drape; no turbulence).
    pub accel: Vec<[f64; 3]>,
    /// Velocity, NED, m/s.
    pub velocity: Vec<[f64; 3]>,
    /// Line number; 0 in transits.
    pub line: Vec<i64>,
    /// Planned drape height (terrain + clearance), m.
    pub drape: Vec<f64>,
    /// Heading of the aircraft (and of the platform that follows it) minus the ground track, rad,
    /// from a yaw manoeuvre (sideslip); empty on survey paths (no sideslip).
    pub sideslip: Vec<f64>,
    /// Its rate of change, rad/s; empty with `sideslip`.
    pub sideslip_rate: Vec<f64>,
}

impl Track {
    /// The samples `range`, their times shifted by `dt_s`.
    pub fn slice(&self, range: std::ops::Range<usize>, dt_s: f64) -> Track {
        let r = range;
        Track {
            time_s: self.time_s[r.clone()].iter().map(|t| t + dt_s).collect(),
            north: self.north[r.clone()].to_vec(),
            east: self.east[r.clone()].to_vec(),
            height: self.height[r.clone()].to_vec(),
            track_deg: self.track_deg[r.clone()].to_vec(),
            track_rate: self.track_rate[r.clone()].to_vec(),
            accel: self.accel[r.clone()].to_vec(),
            velocity: self.velocity[r.clone()].to_vec(),
            line: self.line[r.clone()].to_vec(),
            drape: self.drape[r.clone()].to_vec(),
            sideslip: optional(&self.sideslip, r.clone()),
            sideslip_rate: optional(&self.sideslip_rate, r),
        }
    }
}

/// The samples `r` of a series that may be empty (empty stays empty).
fn optional(v: &[f64], r: std::ops::Range<usize>) -> Vec<f64> {
    if v.is_empty() {
        Vec::new()
    } else {
        v[r].to_vec()
    }
}

/// One straight leg of the plan.
#[derive(Clone, Debug)]
pub struct Leg {
    pub start: [f64; 2],
    pub end: [f64; 2],
    pub line: i64,
}

/// The legs of the plan in flying order: survey lines alternating direction, then the ties.
pub fn legs(plan: &Plan) -> Vec<Leg> {
    let (s, c) = plan.line_azimuth_deg.to_radians().sin_cos();
    let d = [c, s];
    let p = [-s, c];
    let mut out = Vec::new();
    for k in 0..plan.lines {
        let off = k as f64 * plan.line_spacing_m;
        let a = [off * p[0], off * p[1]];
        let b = [
            a[0] + plan.line_length_m * d[0],
            a[1] + plan.line_length_m * d[1],
        ];
        let (start, end) = if k % 2 == 0 { (a, b) } else { (b, a) };
        out.push(Leg {
            start,
            end,
            line: plan.first_line + k as i64,
        });
    }
    let across = (plan.lines.max(1) - 1) as f64 * plan.line_spacing_m;
    for j in 0..plan.ties {
        let along = plan.line_length_m * (j as f64 + 1.0) / (plan.ties as f64 + 1.0);
        let o = [along * d[0], along * d[1]];
        let a = [
            o[0] - plan.line_spacing_m * p[0],
            o[1] - plan.line_spacing_m * p[1],
        ];
        let b = [
            o[0] + (across + plan.line_spacing_m) * p[0],
            o[1] + (across + plan.line_spacing_m) * p[1],
        ];
        let (start, end) = if j % 2 == 0 { (b, a) } else { (a, b) };
        out.push(Leg {
            start,
            end,
            line: plan.first_tie + j as i64,
        });
    }
    out
}

/// A curve segment of the path, parametrised by u ∈ [0, 1].
pub(crate) enum Piece {
    Straight {
        a: [f64; 2],
        b: [f64; 2],
        line: i64,
    },
    Hermite {
        p0: [f64; 2],
        t0: [f64; 2],
        p1: [f64; 2],
        t1: [f64; 2],
        table: Vec<(f64, f64)>,
    },
}

impl Piece {
    pub(crate) fn hermite(p0: [f64; 2], t0: [f64; 2], p1: [f64; 2], t1: [f64; 2]) -> Self {
        let mut piece = Piece::Hermite {
            p0,
            t0,
            p1,
            t1,
            table: vec![],
        };
        // Arc length table (u, s) by the trapezoid rule on 4000 steps.
        let n = 4000;
        let mut table = Vec::with_capacity(n + 1);
        let mut s = 0.0;
        let mut last = piece.eval(0.0).1;
        table.push((0.0, 0.0));
        for i in 1..=n {
            let u = i as f64 / n as f64;
            let d = piece.eval(u).1;
            s += 0.5 * (norm(d) + norm(last)) / n as f64;
            last = d;
            table.push((u, s));
        }
        if let Piece::Hermite { table: t, .. } = &mut piece {
            *t = table;
        }
        piece
    }

    pub(crate) fn length(&self) -> f64 {
        match self {
            Piece::Straight { a, b, .. } => norm([b[0] - a[0], b[1] - a[1]]),
            Piece::Hermite { table, .. } => table.last().map_or(0.0, |x| x.1),
        }
    }

    /// Position, first and second derivative with respect to u.
    pub(crate) fn eval(&self, u: f64) -> ([f64; 2], [f64; 2], [f64; 2]) {
        match self {
            Piece::Straight { a, b, .. } => {
                let d = [b[0] - a[0], b[1] - a[1]];
                ([a[0] + u * d[0], a[1] + u * d[1]], d, [0.0, 0.0])
            }
            Piece::Hermite { p0, t0, p1, t1, .. } => {
                // Quintic Hermite with zero second derivative at both ends: the curvature, hence the
                // turn rate and the angular rate, is continuous where transits meet lines.
                let (u2, u3, u4, u5) = (u * u, u * u * u, u.powi(4), u.powi(5));
                let h = [
                    1.0 - 10.0 * u3 + 15.0 * u4 - 6.0 * u5,
                    u - 6.0 * u3 + 8.0 * u4 - 3.0 * u5,
                    10.0 * u3 - 15.0 * u4 + 6.0 * u5,
                    -4.0 * u3 + 7.0 * u4 - 3.0 * u5,
                ];
                let dh = [
                    -30.0 * u2 + 60.0 * u3 - 30.0 * u4,
                    1.0 - 18.0 * u2 + 32.0 * u3 - 15.0 * u4,
                    30.0 * u2 - 60.0 * u3 + 30.0 * u4,
                    -12.0 * u2 + 28.0 * u3 - 15.0 * u4,
                ];
                let ddh = [
                    -60.0 * u + 180.0 * u2 - 120.0 * u3,
                    -36.0 * u + 96.0 * u2 - 60.0 * u3,
                    60.0 * u - 180.0 * u2 + 120.0 * u3,
                    -24.0 * u + 84.0 * u2 - 60.0 * u3,
                ];
                let comb = |w: [f64; 4]| -> [f64; 2] {
                    std::array::from_fn(|k| {
                        w[0] * p0[k] + w[1] * t0[k] + w[2] * p1[k] + w[3] * t1[k]
                    })
                };
                (comb(h), comb(dh), comb(ddh))
            }
        }
    }

    /// The parameter u at arc length s.
    pub(crate) fn u_at(&self, s: f64) -> f64 {
        match self {
            Piece::Straight { .. } => (s / self.length().max(1e-12)).clamp(0.0, 1.0),
            Piece::Hermite { table, .. } => {
                let k = table.partition_point(|x| x.1 < s).clamp(1, table.len() - 1);
                let (a, b) = (table[k - 1], table[k]);
                let f = if b.1 > a.1 {
                    (s - a.1) / (b.1 - a.1)
                } else {
                    0.0
                };
                a.0 + f * (b.0 - a.0)
            }
        }
    }

    fn line(&self) -> i64 {
        match self {
            Piece::Straight { line, .. } => *line,
            Piece::Hermite { .. } => 0,
        }
    }
}

pub(crate) fn norm(v: [f64; 2]) -> f64 {
    (v[0] * v[0] + v[1] * v[1]).sqrt()
}

/// The pieces of the plan's path in flying order: each leg, with a transit before every leg but
/// the first.
fn pieces(plan: &Plan) -> Vec<Piece> {
    let legs = legs(plan);
    let radius = plan.speed_m_s / plan.turn_rate_deg_s.to_radians();
    let mut pieces = Vec::new();
    for (k, leg) in legs.iter().enumerate() {
        if k > 0 {
            let prev = &legs[k - 1];
            let d0 = unit([prev.end[0] - prev.start[0], prev.end[1] - prev.start[1]]);
            let d1 = unit([leg.end[0] - leg.start[0], leg.end[1] - leg.start[1]]);
            let dist = norm([leg.start[0] - prev.end[0], leg.start[1] - prev.end[1]]);
            // Tangent length: the loop of a reversal reaches out about a quarter of it, so 4R gives
            // a turn of about the planned radius.
            let k_len = (4.0 * radius).max(1.5 * dist);
            pieces.push(Piece::hermite(
                prev.end,
                [k_len * d0[0], k_len * d0[1]],
                leg.start,
                [k_len * d1[0], k_len * d1[1]],
            ));
        }
        pieces.push(Piece::Straight {
            a: leg.start,
            b: leg.end,
            line: leg.line,
        });
    }
    pieces
}

/// Samples of a path `total` m long flown at the plan's speed and rate.
fn samples(total: f64, plan: &Plan) -> usize {
    let dt = 1.0 / plan.sample_rate_hz;
    (total / plan.speed_m_s / dt).floor() as usize + 1
}

/// How many samples [`fly`] takes of the plan and the extent of its path (north min, north max,
/// east min, east max; local m), known without flying it: the same legs and transits, each transit
/// evaluated at 512 points for the extent.
pub fn outline(plan: &Plan) -> (usize, [f64; 4]) {
    let pieces = pieces(plan);
    let total: f64 = pieces.iter().map(Piece::length).sum();
    let mut ext = [
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
    ];
    for pc in &pieces {
        let steps = match pc {
            Piece::Straight { .. } => 1,
            Piece::Hermite { .. } => 512,
        };
        for k in 0..=steps {
            let p = pc.eval(k as f64 / steps as f64).0;
            ext = [
                ext[0].min(p[0]),
                ext[1].max(p[0]),
                ext[2].min(p[1]),
                ext[3].max(p[1]),
            ];
        }
    }
    (samples(total, plan), ext)
}

/// Samples the plan at the sample rate, `start_s` the time of the first sample.
pub fn fly(plan: &Plan, dynamics: &Dynamics, surface: &Surface, start_s: f64) -> Track {
    let pieces = pieces(plan);
    let total: f64 = pieces.iter().map(Piece::length).sum();
    let dt = 1.0 / plan.sample_rate_hz;
    let v = plan.speed_m_s;
    let n = samples(total, plan);
    let mut tr = Track::default();
    let (mut piece, mut base) = (0usize, 0.0);
    for i in 0..n {
        let s = i as f64 * dt * v;
        while piece + 1 < pieces.len() && s > base + pieces[piece].length() {
            base += pieces[piece].length();
            piece += 1;
        }
        let pc = &pieces[piece];
        let u = pc.u_at(s - base);
        let (p, d1, d2) = pc.eval(u);
        let speed_u = norm(d1).max(1e-12);
        let t = [d1[0] / speed_u, d1[1] / speed_u];
        let kappa = (d1[0] * d2[1] - d1[1] * d2[0]) / speed_u.powi(3);
        let normal = [-t[1], t[0]];
        tr.time_s.push(start_s + i as f64 * dt);
        tr.north.push(p[0]);
        tr.east.push(p[1]);
        tr.track_deg
            .push(t[1].atan2(t[0]).to_degrees().rem_euclid(360.0));
        tr.track_rate.push(kappa * v);
        tr.accel
            .push([v * v * kappa * normal[0], v * v * kappa * normal[1], 0.0]);
        tr.velocity.push([v * t[0], v * t[1], 0.0]);
        tr.line.push(pc.line());
        tr.drape.push(surface.height(p[0], p[1]) + plan.clearance_m);
    }
    // The aircraft follows the drape through a zero-phase first-order lag (forward and backward).
    let a = (-dt / dynamics.drape_time_s.max(dt)).exp();
    let mut h = tr.drape.clone();
    for i in 1..n {
        h[i] = a * h[i - 1] + (1.0 - a) * h[i];
    }
    for i in (0..n.saturating_sub(1)).rev() {
        h[i] = a * h[i + 1] + (1.0 - a) * h[i];
    }
    for i in 0..n {
        let (im, ip) = (i.saturating_sub(1), (i + 1).min(n - 1));
        let span = (ip - im) as f64 * dt;
        let vz = if span > 0.0 {
            (h[ip] - h[im]) / span
        } else {
            0.0
        };
        let az = if i > 0 && i + 1 < n {
            (h[i + 1] - 2.0 * h[i] + h[i - 1]) / (dt * dt)
        } else {
            0.0
        };
        tr.velocity[i][2] = -vz;
        tr.accel[i][2] = -az;
    }
    tr.height = h;
    tr
}

fn unit(v: [f64; 2]) -> [f64; 2] {
    let n = norm(v).max(1e-12);
    [v[0] / n, v[1] / n]
}
