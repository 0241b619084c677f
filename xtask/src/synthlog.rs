//! A sample-log generator: a small racetrack survey flown over one buried body, written in the raw
//! flight-log layout with a first-order instrument model. It exists to give the demo, the tests
//! and the benchmarks realistic logs of any size; it is not the survey simulator (that one models
//! terrain, instrument errors and scoring in full and lives in its own crate).
//!
//! Frames and units follow `docs/physics.md`: NED navigation frame, sensor frame x forward, y right,
//! z down; pair outputs from f(r) = f(O) + (Ω̇ + ΩΩ − G)·r in m/s².

use gravgrad_core::attitude::Attitude;
use gravgrad_core::ellipsoid::GRS80;
use gravgrad_core::mat3::{self, Mat3, Vec3};
use gravgrad_core::tensor::{SymTensor, point_mass_tensor};
use gravgrad_core::units::{EOTVOS, G};
use gravgrad_sim::noise::Rng;
use gravgrad_sim::simulate::standard_pair;

/// Settings of a sample log.
#[derive(Clone, Debug)]
pub struct LogSpec {
    pub rows: usize,
    pub rate_hz: f64,
    pub seed: u64,
    /// Pair ids to write; the geometry comes from [`pair_geometry`].
    pub pairs: Vec<String>,
    /// Write the `line` column (otherwise lines must be found from the flight path).
    pub with_line_column: bool,
    /// Write `temp` and `clearance`.
    pub with_extras: bool,
    /// Line length, m.
    pub line_length_m: f64,
}

/// One generated log as named columns (layout units) plus the line numbers.
pub struct SampleLog {
    pub columns: Vec<(String, Vec<f64>)>,
    pub line: Option<Vec<i64>>,
}

/// The standard pair layout of the simulator: (centre, baseline, axis), sensor frame, metres.
pub fn pair_geometry(id: &str) -> Option<(Vec3, Vec3, Vec3)> {
    let base = id.get(..2)?;
    standard_pair(base, 0.2).map(|p| (p.center, p.baseline, p.axis))
}

/// The nine pair ids of a full-tensor instrument, then more in-line repeats for wider logs.
pub fn pair_ids(n: usize) -> Vec<String> {
    let base = ["xx", "yy", "zz", "xy", "yx", "xz", "zx", "yz", "zy"];
    (0..n)
        .map(|i| {
            if i < 9 {
                base[i].to_string()
            } else {
                format!("{}{}", base[i % 9], i / 9)
            }
        })
        .collect()
}

/// Skew matrix [ω×].
fn skew(w: &Vec3) -> Mat3 {
    [[0.0, -w[2], w[1]], [w[2], 0.0, -w[0]], [-w[1], w[0], 0.0]]
}

/// Survey area origin: an invented prospect in an empty stretch of inland plain.
const LAT0: f64 = -27.35;
const LON0: f64 = 134.10;
const SPEED: f64 = 60.0;
const TURN_RATE_DEG: f64 = 3.0;

/// Generates the log.
pub fn generate(spec: &LogSpec) -> SampleLog {
    let n = spec.rows;
    let dt = 1.0 / spec.rate_hz;
    let mut rng = Rng::new(spec.seed, 0);
    // Residual platform rotation: a few sinusoids, so Ω̇ is analytic (rad/s).
    let waves: Vec<([f64; 3], f64, f64)> = (0..6)
        .map(|_| {
            let amp = [
                1e-5 * rng.normal(),
                1e-5 * rng.normal(),
                1e-5 * rng.normal(),
            ];
            (
                amp,
                0.1 + 1.5 * rng.uniform(),
                2.0 * std::f64::consts::PI * rng.uniform(),
            )
        })
        .collect();
    // Per-accelerometer biases (m/s²) and noise (m/s² per sample, ≈ 5 E/√Hz per pair).
    let noise = 5.0 * EOTVOS * 0.2 / std::f64::consts::SQRT_2 * (spec.rate_hz / 2.0).sqrt();
    let pairs: Vec<(String, Vec3, Vec3, Vec3, f64, f64)> = spec
        .pairs
        .iter()
        .filter_map(|id| {
            pair_geometry(id).map(|(c, b, a)| {
                (
                    id.clone(),
                    c,
                    b,
                    a,
                    1e-5 * rng.normal(),
                    1e-5 * rng.normal(),
                )
            })
        })
        .collect();
    let body_mass = 3.0e10; // kg excess of the buried body
    let body = [2500.0, 300.0, 450.0]; // north, east, depth below ground (m)

    let mut cols: Vec<(String, Vec<f64>)> = Vec::new();
    let names = [
        "time", "lat", "lon", "height", "roll", "pitch", "heading", "wx", "wy", "wz", "fx", "fy",
        "fz",
    ];
    for nm in names {
        cols.push((nm.to_string(), Vec::with_capacity(n)));
    }
    let extras = ["temp", "clearance"];
    if spec.with_extras {
        for nm in extras {
            cols.push((nm.to_string(), Vec::with_capacity(n)));
        }
    }
    let first_pair = cols.len();
    for p in &pairs {
        cols.push((format!("{}_a", p.0), Vec::with_capacity(n)));
        cols.push((format!("{}_b", p.0), Vec::with_capacity(n)));
    }
    let mut line = Vec::with_capacity(n);

    let line_s = spec.line_length_m / SPEED;
    let turn_s = 180.0 / TURN_RATE_DEG;
    let period = line_s + turn_s;
    let radius = SPEED / TURN_RATE_DEG.to_radians();
    let spacing = 2.0 * radius;
    let mut turb = [0.0f64; 3];
    let alpha_t = (-dt / 2.0).exp(); // 2 s correlation of turbulence
    let t0 = 1.4e9 + (spec.seed % 1000) as f64 * 10.0;
    for i in 0..n {
        let t = i as f64 * dt;
        let k = (t / period).floor();
        let tau = t - k * period;
        let dir = if (k as i64) % 2 == 0 { 1.0 } else { -1.0 };
        // Lines run east-west; turns are half circles to the next line northward.
        let (north, east, track_deg, lat_acc, on_line) = if tau < line_s {
            let e = if dir > 0.0 {
                tau * SPEED
            } else {
                spec.line_length_m - tau * SPEED
            };
            (
                k * spacing,
                e,
                if dir > 0.0 { 90.0 } else { 270.0 },
                0.0,
                true,
            )
        } else {
            let a = (tau - line_s) * TURN_RATE_DEG.to_radians();
            let (ce, sign) = if dir > 0.0 {
                (spec.line_length_m, 1.0)
            } else {
                (0.0, -1.0)
            };
            let e = ce + sign * radius * a.sin();
            let nn = k * spacing + radius * (1.0 - a.cos());
            let track = if dir > 0.0 {
                90.0 - a.to_degrees()
            } else {
                270.0 + a.to_degrees()
            };
            (nn, e, track, SPEED * SPEED / radius, false)
        };
        for (j, tb) in turb.iter_mut().enumerate() {
            let s = if j == 2 { 0.35 } else { 0.12 };
            *tb = alpha_t * *tb + (1.0 - alpha_t * alpha_t).sqrt() * s * rng.normal();
        }
        let lat_deg = LAT0 + north / 111_000.0;
        let lat = lat_deg.to_radians();
        let lon_deg = LON0 + east / (111_320.0 * LAT0.to_radians().cos());
        let height = 420.0 + 3.0 * (t / 40.0).sin() + turb[2] * 2.0;
        let crab = 2.0 + 0.3 * (t / 25.0).sin();
        let heading = (track_deg + crab + 0.05 * rng.normal()).rem_euclid(360.0);
        let roll = 0.02 * rng.normal();
        let pitch = 0.02 * rng.normal();
        let att = Attitude::from_degrees(roll, pitch, heading);
        let c = att.c_sn();
        let ct = mat3::transpose(&c);
        // Angular rate in NED: Earth rate, transport rate, turning; then residual platform motion.
        let (vn, ve) = (
            SPEED * track_deg.to_radians().cos(),
            SPEED * track_deg.to_radians().sin(),
        );
        let r = GRS80.a + height;
        let earth = [GRS80.omega * lat.cos(), 0.0, -GRS80.omega * lat.sin()];
        let transport = [ve / r, -vn / r, -ve * lat.tan() / r];
        let turn_rate = if on_line {
            0.0
        } else {
            -dir * TURN_RATE_DEG.to_radians()
        };
        let w_n = [
            earth[0] + transport[0],
            earth[1] + transport[1],
            earth[2] + transport[2] + turn_rate,
        ];
        let mut w_s = mat3::mul_vec(&ct, &w_n);
        let mut a_s = [0.0; 3];
        for (amp, f, ph) in &waves {
            let arg = 2.0 * std::f64::consts::PI * f * t + ph;
            for j in 0..3 {
                w_s[j] += amp[j] * arg.sin();
                a_s[j] += amp[j] * 2.0 * std::f64::consts::PI * f * arg.cos();
            }
        }
        // Specific force at O: f = a − g, NED, then sensor axes.
        let g = GRS80.somigliana(lat) - 3.086e-6 * height;
        let lateral = if on_line {
            [0.0, 0.0]
        } else {
            [
                lat_acc * (track_deg + 90.0 * -dir).to_radians().cos(),
                lat_acc * (track_deg + 90.0 * -dir).to_radians().sin(),
            ]
        };
        let f_n = [lateral[0] + turb[0], lateral[1] + turb[1], turb[2] - g];
        let f_s = mat3::mul_vec(&ct, &f_n);
        // Gradient tensor in NED: normal field (spherical approximation) plus the buried body.
        let gm = GRS80.gm;
        let normal = SymTensor {
            xx: -gm / r.powi(3),
            xy: 0.0,
            xz: 0.0,
            yy: -gm / r.powi(3),
            yz: 0.0,
            zz: 2.0 * gm / r.powi(3),
        };
        // Sensor minus source, NED: the ground is at 100 m ellipsoidal height, the body below it.
        let geo = point_mass_tensor(
            G * body_mass,
            [north - body[0], east - body[1], 100.0 - height - body[2]],
        );
        let g_s = (normal + geo).rotated(&ct).to_matrix();
        let ww = mat3::mul(&skew(&w_s), &skew(&w_s));
        let wd = skew(&a_s);
        let mut m = [[0.0; 3]; 3];
        for a in 0..3 {
            for b in 0..3 {
                m[a][b] = wd[a][b] + ww[a][b] - g_s[a][b];
            }
        }
        let vals = [
            t0 + t,
            lat_deg,
            lon_deg,
            height,
            roll,
            pitch,
            heading,
            w_s[0],
            w_s[1],
            w_s[2],
            f_s[0],
            f_s[1],
            f_s[2],
        ];
        for (col, v) in cols.iter_mut().zip(vals) {
            col.1.push(v);
        }
        if spec.with_extras {
            cols[13]
                .1
                .push(31.0 + 0.5 * (t / 3000.0).sin() + 0.01 * rng.normal());
            cols[14]
                .1
                .push(320.0 + 3.0 * (t / 40.0).sin() + 5.0 * (east / 900.0).sin());
        }
        for (k, (_, cen, bl, ax, bias_a, bias_b)) in pairs.iter().enumerate() {
            let ra = [
                cen[0] + bl[0] / 2.0,
                cen[1] + bl[1] / 2.0,
                cen[2] + bl[2] / 2.0,
            ];
            let rb = [
                cen[0] - bl[0] / 2.0,
                cen[1] - bl[1] / 2.0,
                cen[2] - bl[2] / 2.0,
            ];
            let fa = mat3::mul_vec(&m, &ra);
            let fb = mat3::mul_vec(&m, &rb);
            let aa = mat3::dot(ax, &[f_s[0] + fa[0], f_s[1] + fa[1], f_s[2] + fa[2]])
                + bias_a
                + noise * rng.normal();
            let ab = mat3::dot(ax, &[f_s[0] + fb[0], f_s[1] + fb[1], f_s[2] + fb[2]])
                + bias_b
                + noise * rng.normal();
            cols[first_pair + 2 * k].1.push(aa);
            cols[first_pair + 2 * k + 1].1.push(ab);
        }
        let number = if on_line { 101 + k as i64 } else { 0 };
        line.push(number);
    }
    SampleLog {
        columns: cols,
        line: spec.with_line_column.then_some(line),
    }
}

/// Decimal places used when writing each column as text (enough for the instrument's resolution).
pub fn decimals(name: &str) -> usize {
    match name {
        "time" => 4,
        "lat" | "lon" => 9,
        "height" | "clearance" => 3,
        "roll" | "pitch" | "heading" => 5,
        "temp" => 3,
        "wx" | "wy" | "wz" => 10,
        "fx" | "fy" | "fz" => 7,
        _ => 12,
    }
}
