//! The simulator against facts outside its code: an independent inversion of the instrument
//! equation, determinism, and the statistics it was asked for.

use approx::assert_abs_diff_eq;
use gravgrad_sim::scenario::Scenario;
use gravgrad_sim::simulate::{Simulation, simulate};

const SMALL: &str = r#"
layout = "scenario/1"
name = "test"
seed = 5

[[geology.prism]]
north_m = [300.0, 700.0]
east_m = [400.0, 900.0]
depth_m = [150.0, 400.0]
density_kg_m3 = 400.0

[[geology.sphere]]
north_m = 100.0
east_m = 1200.0
depth_m = 300.0
radius_m = 120.0
density_kg_m3 = -300.0

[terrain]
cell_m = 200.0
margin_m = 600.0
rough_rms_m = 5.0
[[terrain.hill]]
north_m = 200.0
east_m = 700.0
height_m = 60.0
width_m = 400.0

[plan]
line_length_m = 1500.0
line_spacing_m = 250.0
lines = 2
ties = 1
sample_rate_hz = 10.0
"#;

fn scenario(text: &str) -> Scenario {
    toml::from_str(text).expect("scenario parses")
}

fn col<'a>(s: &'a Simulation, name: &str) -> &'a [f64] {
    s.flights[0]
        .column(name)
        .unwrap_or_else(|| panic!("no column {name}"))
}

/// Rz(ψ)·Ry(θ)·Rx(φ) written out independently of gravgrad-core (docs/physics.md).
fn c_sn(roll: f64, pitch: f64, heading: f64) -> [[f64; 3]; 3] {
    let rz = [
        [heading.cos(), -heading.sin(), 0.0],
        [heading.sin(), heading.cos(), 0.0],
        [0.0, 0.0, 1.0],
    ];
    let ry = [
        [pitch.cos(), 0.0, pitch.sin()],
        [0.0, 1.0, 0.0],
        [-pitch.sin(), 0.0, pitch.cos()],
    ];
    let rx = [
        [1.0, 0.0, 0.0],
        [0.0, roll.cos(), -roll.sin()],
        [0.0, roll.sin(), roll.cos()],
    ];
    let mul = |a: [[f64; 3]; 3], b: [[f64; 3]; 3]| -> [[f64; 3]; 3] {
        std::array::from_fn(|i| std::array::from_fn(|j| (0..3).map(|k| a[i][k] * b[k][j]).sum()))
    };
    mul(mul(rz, ry), rx)
}

/// Solves the normal equations of a small least-squares problem by Gaussian elimination.
fn lstsq(rows: &[[f64; 9]], y: &[f64]) -> [f64; 9] {
    let mut a = [[0.0; 10]; 9];
    for (r, yv) in rows.iter().zip(y) {
        for i in 0..9 {
            for j in 0..9 {
                a[i][j] += r[i] * r[j];
            }
            a[i][9] += r[i] * yv;
        }
    }
    for c in 0..9 {
        let p = (c..9)
            .max_by(|&i, &j| a[i][c].abs().total_cmp(&a[j][c].abs()))
            .unwrap();
        a.swap(c, p);
        let pivot = a[c];
        for (r, row) in a.iter_mut().enumerate() {
            if r != c {
                let f = row[c] / pivot[c];
                for (x, p) in row.iter_mut().zip(pivot).skip(c) {
                    *x -= f * p;
                }
            }
        }
    }
    std::array::from_fn(|i| a[i][9] / a[i][i])
}

#[test]
fn error_free_outputs_invert_to_the_truth_tensor() {
    // Issue 4: with every error zero, the raw pair outputs put back through the instrument equation
    // by independent code give the truth tensor (normal + terrain + geology). The pair outputs are
    // float64 values near 9.8 m/s² (ulp 1.8e-15 m/s²): over a 0.2 m baseline that resolves
    // 1.8e-15/0.2 s⁻² ≈ 9e-6 E per pair, so the comparison is at that resolution (docs/methods/sim.md).
    let mut s = scenario(SMALL);
    s.instrument = s.instrument.perfect();
    s.dynamics.turbulence_m_s2 = 0.8; // strong turbulence
    s.dynamics.platform_rate_rad_s = 2e-5; // cross-pair angular acceleration of order 1e5 E
    let sim = simulate(&s).unwrap();
    let n = sim.line.len();
    let (mut worst, mut sum2, mut count) = (0.0f64, 0.0, 0usize);
    let mut max_alpha_e = 0.0f64;
    // On the lines (turns carry rotation terms of 1e6 E and more, where the same float64 resolution
    // is a larger absolute error; they are not survey data).
    for i in (0..n).filter(|&i| sim.line[i] > 0) {
        let mut rows = Vec::new();
        let mut y = Vec::new();
        for p in &sim.pairs {
            let (nv, b) = (p.axis, p.baseline);
            // y = −(a_A − a_B) = nᵀ S b − α·(b × n), written out here from docs/physics.md.
            let bxn = [
                b[1] * nv[2] - b[2] * nv[1],
                b[2] * nv[0] - b[0] * nv[2],
                b[0] * nv[1] - b[1] * nv[0],
            ];
            rows.push([
                nv[0] * b[0],
                nv[0] * b[1] + nv[1] * b[0],
                nv[0] * b[2] + nv[2] * b[0],
                nv[1] * b[1],
                nv[1] * b[2] + nv[2] * b[1],
                nv[2] * b[2],
                -bxn[0],
                -bxn[1],
                -bxn[2],
            ]);
            y.push(-(col(&sim, &format!("{}_a", p.id))[i] - col(&sim, &format!("{}_b", p.id))[i]));
        }
        let u = lstsq(&rows, &y);
        // α in rad/s² equals, in s⁻², the cross-pair signal it makes: in Eötvös that is α/1e-9.
        max_alpha_e = max_alpha_e.max(u[6].abs().max(u[7].abs()).max(u[8].abs()) / 1e-9);
        let w = [col(&sim, "wx")[i], col(&sim, "wy")[i], col(&sim, "wz")[i]];
        let w2 = w[0] * w[0] + w[1] * w[1] + w[2] * w[2];
        // G_s = S + ΩΩ, ΩΩ = ωωᵀ − |ω|²I.
        let s6 = [u[0], u[1], u[2], u[3], u[4], u[5]];
        let gs = [
            [
                s6[0] + w[0] * w[0] - w2,
                s6[1] + w[0] * w[1],
                s6[2] + w[0] * w[2],
            ],
            [
                s6[1] + w[0] * w[1],
                s6[3] + w[1] * w[1] - w2,
                s6[4] + w[1] * w[2],
            ],
            [
                s6[2] + w[0] * w[2],
                s6[4] + w[1] * w[2],
                s6[5] + w[2] * w[2] - w2,
            ],
        ];
        let c = c_sn(
            col(&sim, "roll")[i].to_radians(),
            col(&sim, "pitch")[i].to_radians(),
            col(&sim, "heading")[i].to_radians(),
        );
        let gn: [[f64; 3]; 3] = std::array::from_fn(|a| {
            std::array::from_fn(|b| {
                (0..3)
                    .map(|k| (0..3).map(|l| c[a][k] * gs[k][l] * c[b][l]).sum::<f64>())
                    .sum()
            })
        });
        let truth = sim.truth.total(i).to_matrix();
        for a in 0..3 {
            for b in 0..3 {
                let e = (gn[a][b] - truth[a][b]).abs() / 1e-9;
                worst = worst.max(e);
                sum2 += e * e;
                count += 1;
            }
        }
    }
    let rms = (sum2 / count as f64).sqrt();
    eprintln!(
        "inversion error: RMS {rms:.2e} E, max {worst:.2e} E on {} line samples; |α| up to {max_alpha_e:.2e} E",
        count / 9
    );
    assert!(
        max_alpha_e > 5e4,
        "the test must exercise strong angular acceleration: {max_alpha_e}"
    );
    assert!(rms < 1e-5, "RMS {rms} E");
    assert!(worst < 5e-5, "max {worst} E");
}

#[test]
fn same_seed_same_numbers_other_seed_other_noise() {
    let a = simulate(&scenario(SMALL)).unwrap();
    let b = simulate(&scenario(SMALL)).unwrap();
    for ((na, va), (nb, vb)) in a.flights[0].columns.iter().zip(&b.flights[0].columns) {
        assert_eq!(na, nb);
        assert!(
            va.iter().zip(vb).all(|(x, y)| x.to_bits() == y.to_bits()),
            "{na} differs"
        );
    }
}

#[test]
fn noise_has_the_configured_density_and_seeds_change_only_the_realisation() {
    // White pair noise of N E/√Hz at rate fs has per-sample σ = N·√(fs/2) E in the pair difference
    // divided by the baseline (definition of a one-sided density); second differences remove the
    // slow signal and multiply white noise by √6. Noise-only errors, line samples, pair zz.
    let mut est = Vec::new();
    let mut series = Vec::new();
    for seed in [5, 6] {
        let mut s = scenario(SMALL);
        s.seed = seed;
        let configured = s.instrument.noise_e_rt_hz;
        s.instrument = s.instrument.perfect();
        s.instrument.noise_e_rt_hz = configured;
        s.instrument.flicker_corner_hz = 0.01;
        let sim = simulate(&s).unwrap();
        let d: Vec<f64> = (0..sim.line.len())
            .filter(|&i| sim.line[i] > 0)
            .map(|i| (col(&sim, "zz_a")[i] - col(&sim, "zz_b")[i]) / 0.2 / 1e-9)
            .collect();
        let dd: Vec<f64> = d.windows(3).map(|w| w[2] - 2.0 * w[1] + w[0]).collect();
        let rms = (dd.iter().map(|v| v * v).sum::<f64>() / dd.len() as f64).sqrt();
        let density = rms / (6f64.sqrt() * (s.plan.sample_rate_hz / 2.0).sqrt());
        est.push(density / configured);
        series.push(d);
    }
    eprintln!("estimated / configured density: {est:?}");
    for e in &est {
        assert_abs_diff_eq!(*e, 1.0, epsilon = 0.1);
    }
    assert!(series[0].iter().zip(&series[1]).any(|(a, b)| a != b));
}

#[test]
fn demo_statistics_are_realistic_and_as_configured() {
    // data/demo/scenario.toml: turbulence 0.3 m/s² RMS, clearance 100 m, 60 m/s, 5 E/√Hz.
    // Realistic ranges (common practice, no source): light-to-moderate survey turbulence 0.05–1.5
    // m/s² RMS vertical; drape within ±15 m of plan on average over gentle terrain; survey speeds
    // 50–80 m/s.
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../../data/demo/scenario.toml"
    ))
    .unwrap();
    let s = scenario(&text);
    let sim = simulate(&s).unwrap();
    let on: Vec<usize> = (0..sim.line.len())
        .filter(|&i| sim.line[i] > 0 && sim.line[i] < s.plan.first_tie)
        .collect();
    let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
    let std = |v: &[f64]| {
        let m = mean(v);
        (v.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / v.len() as f64).sqrt()
    };
    // The demo is flown in two flights: channels end to end index like the path.
    assert_eq!(sim.flights.len(), 2);
    let all = |sim: &Simulation, name: &str| sim.survey_column(name).unwrap();
    let (fz_all, clear_all) = (all(&sim, "fz"), all(&sim, "clearance"));
    let fz: Vec<f64> = on.iter().map(|&i| fz_all[i]).collect();
    let turb = std(&fz);
    assert!(
        (0.05..1.5).contains(&turb) && (turb / s.dynamics.turbulence_m_s2 - 1.0).abs() < 0.25,
        "vertical acceleration RMS {turb}"
    );
    let clear: Vec<f64> = on.iter().map(|&i| clear_all[i]).collect();
    assert_abs_diff_eq!(mean(&clear), s.plan.clearance_m, epsilon = 15.0);
    let dt = 1.0 / s.plan.sample_rate_hz;
    let speeds: Vec<f64> = on
        .windows(2)
        .filter(|w| w[1] == w[0] + 1)
        .map(|w| {
            ((sim.track.north[w[1]] - sim.track.north[w[0]]).powi(2)
                + (sim.track.east[w[1]] - sim.track.east[w[0]]).powi(2))
            .sqrt()
                / dt
        })
        .collect();
    assert_abs_diff_eq!(
        mean(&speeds),
        s.plan.speed_m_s,
        epsilon = 0.01 * s.plan.speed_m_s
    );
    assert!((50.0..80.0).contains(&mean(&speeds)));
    // Noise density as configured: the same scenario with noise as the only instrument error.
    let mut quiet = s.clone();
    quiet.instrument = s.instrument.perfect();
    quiet.instrument.noise_e_rt_hz = s.instrument.noise_e_rt_hz;
    quiet.instrument.flicker_corner_hz = s.instrument.flicker_corner_hz;
    let q = simulate(&quiet).unwrap();
    for id in ["xx", "yy", "zz"] {
        let (a, b) = (all(&q, &format!("{id}_a")), all(&q, &format!("{id}_b")));
        let d: Vec<f64> = on.iter().map(|&i| (a[i] - b[i]) / 0.2 / 1e-9).collect();
        let dd: Vec<f64> = d.windows(3).map(|w| w[2] - 2.0 * w[1] + w[0]).collect();
        let rms = (dd.iter().map(|v| v * v).sum::<f64>() / dd.len() as f64).sqrt();
        let density = rms / (6f64.sqrt() * (s.plan.sample_rate_hz / 2.0).sqrt());
        assert!(
            (density / s.instrument.noise_e_rt_hz - 1.0).abs() < 0.15,
            "{id}: {density} E/√Hz"
        );
    }
}

#[test]
fn flights_split_the_path_each_with_its_own_clock_and_errors() {
    let mut s = scenario(SMALL);
    s.plan.lines = 3;
    s.plan.flights = 2;
    let sim = simulate(&s).unwrap();
    assert_eq!(sim.flights.len(), 2);
    let (f1, f2) = (&sim.flights[0], &sim.flights[1]);
    // End to end they are the path: every truth sample in exactly one flight.
    assert_eq!(f1.first_sample, 0);
    assert_eq!(f2.first_sample, f1.line.len());
    assert_eq!(f1.line.len() + f2.line.len(), sim.line.len());
    // Lines 101 and 102 in the first flight (the extra line goes first), 103 and the ties last.
    let lines = |f: &gravgrad_sim::simulate::FlightLog| {
        let mut l: Vec<i64> = f.line.iter().copied().filter(|l| *l > 0).collect();
        l.dedup();
        l
    };
    assert_eq!(lines(f1), vec![101, 102]);
    assert_eq!(lines(f2)[0], 103);
    assert!(lines(f2)[1..].iter().all(|l| *l >= s.plan.first_tie));
    // The cut is in a transit, and the second clock starts the ground time later.
    assert_eq!(*f1.line.last().unwrap(), 0);
    assert_eq!(f2.line[0], 0);
    let (t1, t2) = (f1.column("time").unwrap(), f2.column("time").unwrap());
    let dt = 1.0 / s.plan.sample_rate_hz;
    assert_abs_diff_eq!(
        t2[0] - t1[t1.len() - 1] - dt,
        s.plan.flight_gap_s,
        epsilon = 1e-6
    );
    // A new take-off: other biases and drifts for every pair.
    for (a, b) in f1.pair_errors.iter().zip(&f2.pair_errors) {
        assert!(a.bias != b.bias && a.drift != b.drift);
    }
    // Bad values are refused by key.
    s.plan.flights = 4;
    let e = simulate(&s).unwrap_err().to_string();
    assert!(e.contains("plan.flights"), "{e}");
}

/// The SMALL scenario with every instrument error zero (noise-free, logged f and gyro rates exact).
fn quiet_small() -> Scenario {
    let mut s = scenario(SMALL);
    s.instrument = s.instrument.perfect();
    s
}

/// Pair outputs of every flight end to end, `<id>_a` then `<id>_b`.
fn outputs(sim: &Simulation, id: &str) -> (Vec<f64>, Vec<f64>) {
    (
        sim.survey_column(&format!("{id}_a")).unwrap(),
        sim.survey_column(&format!("{id}_b")).unwrap(),
    )
}

#[test]
fn second_order_term_is_k2_times_the_square_of_the_ideal_output() {
    // IEEE Std 1293-2018 model: with no other error, an accelerometer's output is
    // n·f + K2·(n·f)², and n·f is exactly what the same accelerometer outputs with K2 = 0 (the new
    // coefficients come from random streams of their own, so nothing else changes). The check is
    // at the float64 resolution of the outputs: fl(a + q) − a differs from q by at most ulp(a + q),
    // and q = K2·a² carries a few roundings of its own: ε·(|a + q| + 4|q|).
    let base = quiet_small();
    let mut with_k2 = base.clone();
    with_k2.instrument.quadratic_rms_per_m_s2 = 1e-4;
    let (s0, s1) = (simulate(&base).unwrap(), simulate(&with_k2).unwrap());
    let errors = &s1.flights[0].accelerometers;
    let (mut largest, mut worst_rel_z) = (0.0f64, 0.0f64);
    for (k, p) in s1.pairs.iter().enumerate() {
        let ((a0, b0), (a1, b1)) = (outputs(&s0, &p.id), outputs(&s1, &p.id));
        for (j, (ideal, with)) in [(&a0, &a1), (&b0, &b1)].into_iter().enumerate() {
            let e = errors[k][j];
            assert!(e.quadratic != 0.0 && e.cross_u == 0.0 && e.cross_v == 0.0);
            for (x, y) in ideal.iter().zip(with) {
                let q = e.quadratic * x * x;
                let tol = f64::EPSILON * (y.abs() + 4.0 * q.abs());
                assert!(
                    ((y - x) - q).abs() <= tol,
                    "{}{}: {} vs {q}",
                    p.id,
                    ["a", "b"][j],
                    y - x
                );
                largest = largest.max(q.abs());
                if p.axis[2] == 1.0 {
                    worst_rel_z = worst_rel_z.max(((y - x) - q).abs() / q.abs());
                }
            }
        }
    }
    eprintln!(
        "K2 term up to {largest:.2e} m/s²; z accelerometers within {worst_rel_z:.1e} relative"
    );
    // The term is there (K2 ~ 1e-4 per m/s² on g² ≈ 96 m²/s⁴), and on the z axes it is exact to
    // 1e-12 relative.
    assert!(largest > 1e-3, "{largest}");
    assert!(worst_rel_z < 1e-12, "{worst_rel_z}");
}

#[test]
fn pair_difference_carries_the_truth_quadratic_form_of_the_logged_force() {
    // The truth's `quadratic` coefficients applied to the logged specific force (fx fy fz, the
    // force at the sensor origin) give the change of each pair difference that K2 and the
    // cross-axis terms make, to first order. What first order leaves out: each accelerometer feels
    // f(r) = f(O) + M·r (docs/physics.md) with M = Ω̇ + ΩΩ − G, so its term K·(n·f)(m·f) moves by at
    // most ‖K‖·(2|f(O)|·|Mr| + |Mr|²); ‖M‖_F ≤ ‖G‖_F + √2·|ω|² + √2·|ω̇|, with G from the truth, ω
    // from the (error-free) gyros and ω̇ by central differences of them. Plus float rounding of the
    // four outputs, ε·Σ|a|. On line samples: the turns of this small plan reach several rad/s, where
    // |Mr| is no longer small against f (survey data are the lines).
    let base = quiet_small();
    let mut nl = base.clone();
    nl.instrument.quadratic_rms_per_m_s2 = 1e-4;
    nl.instrument.cross_axis_rms_per_m_s2 = 1e-4;
    let (s0, s1) = (simulate(&base).unwrap(), simulate(&nl).unwrap());
    let f = &s1.flights[0];
    let (fx, fy, fz) = (
        f.column("fx").unwrap(),
        f.column("fy").unwrap(),
        f.column("fz").unwrap(),
    );
    let w: Vec<[f64; 3]> = (0..fx.len())
        .map(|i| {
            [
                f.column("wx").unwrap()[i],
                f.column("wy").unwrap()[i],
                f.column("wz").unwrap()[i],
            ]
        })
        .collect();
    let rate = s1.sample_rate_hz;
    let norm = |v: [f64; 3]| (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt();
    let (mut largest, mut worst_miss, mut widest) = (0.0f64, 0.0f64, 0.0f64);
    for (k, p) in s1.pairs.iter().enumerate() {
        let q = f.pair_errors[k].quadratic;
        let e = f.accelerometers[k];
        let ((a0, b0), (a1, b1)) = (outputs(&s0, &p.id), outputs(&s1, &p.id));
        for i in (0..fx.len()).filter(|&i| s1.line[i] > 0) {
            let (x, y, z) = (fx[i], fy[i], fz[i]);
            // Written out from the layout in docs/formats.md: products counted once.
            let form = q[0] * x * x
                + q[1] * y * y
                + q[2] * z * z
                + q[3] * x * y
                + q[4] * x * z
                + q[5] * y * z;
            let change = (a1[i] - b1[i]) - (a0[i] - b0[i]);
            let (lo, hi) = (i.saturating_sub(1), (i + 1).min(fx.len() - 1));
            let alpha =
                std::array::from_fn(|c| (w[hi][c] - w[lo][c]) * rate / (hi - lo).max(1) as f64);
            let g = s1.truth.total(i).to_matrix();
            let g_f = g.iter().flatten().map(|v| v * v).sum::<f64>().sqrt();
            let m = g_f + 2f64.sqrt() * (norm(w[i]).powi(2) + norm(alpha));
            let f0 = norm([x, y, z]);
            let mut bound = f64::EPSILON * (a0[i].abs() + b0[i].abs() + a1[i].abs() + b1[i].abs());
            for (j, sign) in [(0usize, 0.5), (1usize, -0.5)] {
                let r: [f64; 3] = std::array::from_fn(|c| p.center[c] + sign * p.baseline[c]);
                let dr = m * norm(r);
                let kk = e[j].quadratic.abs() + e[j].cross_u.abs() + e[j].cross_v.abs();
                bound += kk * (2.0 * f0 * dr + dr * dr);
            }
            assert!(
                (change - form).abs() <= bound,
                "{} sample {i}: {change} vs {form} (bound {bound})",
                p.id
            );
            largest = largest.max(form.abs());
            worst_miss = worst_miss.max((change - form).abs());
            widest = widest.max(bound);
        }
    }
    eprintln!(
        "quadratic form up to {largest:.2e} m/s², missed by at most {worst_miss:.1e} m/s² (bound \
         up to {widest:.1e})"
    );
    // The form reaches 1e-2 m/s² and the bound stays below a thousandth of that (it is largest where
    // the angular acceleration of a line's first and last seconds reaches 2e-3 rad/s²): a wrong
    // coefficient (a product counted twice, a sign) would miss by the size of its term.
    assert!(largest > 1e-3, "{largest}");
    assert!(widest < 1e-3 * largest, "{widest}");
}

#[test]
fn temperature_log_modes_change_only_the_temp_column() {
    use gravgrad_sim::scenario::TemperatureLog;
    let run = |mode: TemperatureLog| {
        let mut s = scenario(SMALL);
        s.instrument.temperature_log = mode;
        s.instrument.temperature_coefficient_rms_m_s2_c = 1e-6; // so T shows in the outputs
        simulate(&s).unwrap()
    };
    let truth = run(TemperatureLog::True);
    let t_true = col(&truth, "temp").to_vec();
    let n = t_true.len();
    for mode in [
        TemperatureLog::Constant,
        TemperatureLog::Gaps,
        TemperatureLog::Absent,
    ] {
        let sim = run(mode);
        // Every other column, the pair outputs among them, is the same to the bit.
        for (name, v) in &truth.flights[0].columns {
            if name == "temp" {
                continue;
            }
            let w = col(&sim, name);
            assert!(
                v.iter().zip(w).all(|(a, b)| a.to_bits() == b.to_bits()),
                "{mode:?}: {name} changed"
            );
        }
        let names = |s: &Simulation| -> Vec<String> {
            s.flights[0]
                .columns
                .iter()
                .map(|c| c.0.clone())
                .filter(|c| c != "temp")
                .collect()
        };
        assert_eq!(names(&sim), names(&truth));
        let temp = sim.flights[0].column("temp");
        match mode {
            TemperatureLog::Constant => {
                // The set-point of the thermostatted sensor (scenario reference).
                assert!(temp.unwrap().iter().all(|t| *t == 31.0));
                assert!(t_true.iter().any(|t| (t - 31.0).abs() > 0.01));
            }
            TemperatureLog::Absent => assert!(temp.is_none()),
            TemperatureLog::Gaps => {
                let temp = temp.unwrap();
                // As designed (docs/scenario.md): round(n/100) missing rows in runs of 1 to 20, at
                // least one run a single sample, each run between logged samples; the rest is the
                // sensor temperature.
                let missing: Vec<usize> = (0..n).filter(|&i| temp[i].is_nan()).collect();
                assert_eq!(missing.len(), (n as f64 / 100.0).round() as usize);
                assert!(!temp[0].is_nan() && !temp[n - 1].is_nan());
                let mut runs = Vec::new();
                let mut i = 0;
                while i < n {
                    if temp[i].is_nan() {
                        let start = i;
                        while i < n && temp[i].is_nan() {
                            i += 1;
                        }
                        runs.push(i - start);
                    }
                    i += 1;
                }
                assert!(runs.iter().all(|r| (1..=20).contains(r)), "{runs:?}");
                assert!(runs.contains(&1), "{runs:?}");
                assert!(runs.len() >= 2, "{runs:?}");
                for i in 0..n {
                    if !temp[i].is_nan() {
                        assert_eq!(temp[i].to_bits(), t_true[i].to_bits());
                    }
                }
            }
            TemperatureLog::True => unreachable!(),
        }
    }
}

#[test]
fn temperature_ramp_adds_its_rate_times_elapsed_time() {
    // T(t) = T_wander(t) + ramp·t, t from the flight's first sample; each accelerometer's output
    // moves by τ·ramp·t (the error model, T0 the temperature at the first sample). Tolerances:
    // float64 resolution of the values compared (ε per operand).
    let mut s = quiet_small();
    s.instrument.temperature_coefficient_rms_m_s2_c = 1e-6;
    let mut ramped = s.clone();
    ramped.instrument.temperature_ramp_c_h = 3.6;
    let (a, b) = (simulate(&s).unwrap(), simulate(&ramped).unwrap());
    let (ta, tb) = (col(&a, "temp"), col(&b, "temp"));
    let rate = a.sample_rate_hz;
    for i in 0..ta.len() {
        let rise = 3.6 / 3600.0 * i as f64 / rate;
        assert_abs_diff_eq!(
            tb[i] - ta[i],
            rise,
            epsilon = 4.0 * f64::EPSILON * tb[i].abs()
        );
    }
    assert_eq!(
        a.flights[0].temperature_ref_c,
        b.flights[0].temperature_ref_c
    );
    let errors = &b.flights[0].accelerometers;
    for (k, p) in b.pairs.iter().enumerate() {
        let ((a0, _), (a1, _)) = (outputs(&a, &p.id), outputs(&b, &p.id));
        let tau = errors[k][0].tempco;
        for i in 0..a0.len() {
            let want = tau * 3.6 / 3600.0 * i as f64 / rate;
            let tol = 4.0 * f64::EPSILON * (a1[i].abs() + 31.0 * tau.abs());
            assert!(((a1[i] - a0[i]) - want).abs() <= tol, "{} {i}", p.id);
        }
    }
}

/// SMALL with a calibration flight of 40 s legs (five whole 8 s periods), default manoeuvres.
fn with_calibration_flight() -> Scenario {
    scenario(&format!("{SMALL}\n[calibration_flight]\nleg_s = 40.0\n"))
}

#[test]
fn calibration_flight_excites_every_sensor_axis_with_consistent_kinematics() {
    use gravgrad_sim::scenario::Manoeuvre;
    let s = with_calibration_flight();
    let cf = s.calibration_flight.clone().unwrap();
    let sim = simulate(&s).unwrap();
    let cal = sim.calibration.as_ref().unwrap();
    let (tr, log) = (&cal.track, &cal.log);
    let rate = s.plan.sample_rate_hz;
    let dt = 1.0 / rate;
    let v = s.plan.speed_m_s;

    // Legs: one per manoeuvre and heading, numbered from first_line in flying order, each
    // leg_s long.
    assert_eq!(cal.legs.len(), 20);
    let mut seen: Vec<i64> = log.line.iter().copied().filter(|l| *l > 0).collect();
    seen.dedup();
    assert_eq!(seen, (7001..=7020).collect::<Vec<i64>>());
    for (k, leg) in cal.legs.iter().enumerate() {
        assert_eq!(leg.line, 7001 + k as i64);
        assert_eq!(leg.manoeuvre, cf.manoeuvres[k / 4]);
        assert_abs_diff_eq!(
            leg.heading.to_degrees(),
            cf.headings_deg[k % 4],
            epsilon = 1e-9
        );
        let count = log.line.iter().filter(|l| **l == leg.line).count();
        assert_abs_diff_eq!(count as f64, cf.leg_s * rate, epsilon = 1.0);
    }
    // After the survey: the ground time between flights, as between survey flights.
    let survey_end = *sim.flights[0].column("time").unwrap().last().unwrap();
    let t = log.column("time").unwrap();
    assert_abs_diff_eq!(t[0] - survey_end - dt, s.plan.flight_gap_s, epsilon = 1e-6);
    // At the altitude asked for above the mean ground.
    let on_roll = |i: usize| log.line[i] > 0 && leg_of(cal, log.line[i]) == Manoeuvre::Roll;
    let h = (0..tr.height.len()).find(|&i| on_roll(i)).unwrap();
    assert_abs_diff_eq!(
        tr.height[h] - s.area.ground_height_m,
        cf.altitude_m,
        epsilon = 1e-9
    );

    // Amplitudes on the legs' untapered middle (whole periods, one period of taper at each end):
    // a coordinated bank φ turns with lateral acceleration g·tan φ (common textbook relation,
    // g = 9.81 m/s²); a flight-path angle θ oscillating at ω climbs at v·sin θ and accelerates
    // vertically by v·sin θ·ω; the highest climb rate is climb_rate_m_s. Samples reach a peak
    // within half an interval, cos(ω·dt/2) ≥ 0.999 of it.
    let n_periods = (cf.leg_s / cf.period_s).round();
    let omega = 2.0 * std::f64::consts::PI * n_periods / cf.leg_s;
    let period = cf.leg_s / n_periods;
    let peak = |m: Manoeuvre, value: &dyn Fn(usize, f64) -> f64| -> f64 {
        let mut best = 0.0f64;
        for leg in cal.legs.iter().filter(|l| l.manoeuvre == m) {
            let idx: Vec<usize> = (0..log.line.len())
                .filter(|&i| log.line[i] == leg.line)
                .collect();
            let t0 = tr.time_s[idx[0]];
            for &i in &idx {
                let tau = tr.time_s[i] - t0;
                if tau > period && tau < cf.leg_s - period {
                    best = best.max(value(i, leg.heading).abs());
                }
            }
        }
        best
    };
    let lateral = |i: usize, hd: f64| -tr.accel[i][0] * hd.sin() + tr.accel[i][1] * hd.cos();
    let along = |i: usize, hd: f64| tr.accel[i][0] * hd.cos() + tr.accel[i][1] * hd.sin();
    let close = |got: f64, want: f64| got <= want * (1.0 + 1e-12) && got >= 0.999 * want;
    let g_tan = 9.81 * cf.roll_amplitude_deg.to_radians().tan();
    let pitch_acc = v * cf.pitch_amplitude_deg.to_radians().sin() * omega;
    let checks = [
        (Manoeuvre::Roll, peak(Manoeuvre::Roll, &lateral), g_tan),
        (
            Manoeuvre::Pitch,
            peak(Manoeuvre::Pitch, &|i, _| tr.accel[i][2]),
            pitch_acc,
        ),
        (
            Manoeuvre::Surge,
            peak(Manoeuvre::Surge, &along),
            cf.surge_amplitude_m_s2,
        ),
        (
            Manoeuvre::Yaw,
            peak(Manoeuvre::Yaw, &|i, _| tr.sideslip[i]),
            cf.yaw_amplitude_deg.to_radians(),
        ),
    ];
    for (m, got, want) in checks {
        assert!(close(got, want), "{m:?}: {got} vs {want}");
    }
    let climb = (0..log.line.len())
        .filter(|&i| log.line[i] > 0 && leg_of(cal, log.line[i]) == Manoeuvre::Climb)
        .map(|i| -tr.velocity[i][2])
        .fold(0.0f64, f64::max);
    assert!(close(climb, cf.climb_rate_m_s), "climb {climb}");

    // What the manoeuvres are for: the logged specific force (sensor frame) varies by more than
    // 1 m/s² RMS in x on surge legs, in y on roll legs, in z on pitch legs, and over all legs by
    // several m/s² peak to peak on every axis.
    let std_on = |m: Manoeuvre, name: &str| {
        let c = log.column(name).unwrap();
        let v: Vec<f64> = (0..c.len())
            .filter(|&i| log.line[i] > 0 && leg_of(cal, log.line[i]) == m)
            .map(|i| c[i])
            .collect();
        let mean = v.iter().sum::<f64>() / v.len() as f64;
        (v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / v.len() as f64).sqrt()
    };
    let (sx, sy, sz) = (
        std_on(Manoeuvre::Surge, "fx"),
        std_on(Manoeuvre::Roll, "fy"),
        std_on(Manoeuvre::Pitch, "fz"),
    );
    eprintln!("specific force RMS: fx {sx:.2} (surge), fy {sy:.2} (roll), fz {sz:.2} (pitch) m/s²");
    assert!(sx > 1.0 && sy > 1.0 && sz > 1.0);
    for name in ["fx", "fy", "fz"] {
        let c = log.column(name).unwrap();
        let on: Vec<f64> = (0..c.len())
            .filter(|&i| log.line[i] > 0)
            .map(|i| c[i])
            .collect();
        let (lo, hi) = on.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |a, x| {
            (a.0.min(*x), a.1.max(*x))
        });
        assert!(hi - lo > 3.0, "{name}: {lo} to {hi}");
    }

    // Kinematics: velocity is the derivative of position and acceleration that of velocity, by
    // Simpson's rule over two intervals within a leg: x(t+h) − x(t−h) = (h/3)(ẋ₋ + 4ẋ + ẋ₊) up to
    // (2h)⁵/2880·max|x⁽⁵⁾|. Each displacement is a sum of sinusoids of frequency at most 1.5ω and
    // amplitudes adding up to its amplitude A (the taper is sin², a half-frequency cosine), so
    // |x⁽ᵏ⁾| ≤ A·(1.5ω)ᵏ; the climb, Z·sin⁴, is slower. Plus float rounding of the positions.
    let amp = [
        g_tan / (omega * omega),
        v * cf.pitch_amplitude_deg.to_radians().sin() / omega,
        cf.surge_amplitude_m_s2 / (omega * omega),
    ]
    .into_iter()
    .fold(0.0f64, f64::max);
    let simpson = |k: u32| (2.0 * dt).powi(5) / 2880.0 * amp * (1.5 * omega).powi(4 + k as i32);
    let series = |c: usize| -> (Vec<f64>, Vec<f64>, Vec<f64>) {
        let pos: Vec<f64> = match c {
            0 => tr.north.clone(),
            1 => tr.east.clone(),
            _ => tr.height.iter().map(|h| -h).collect(),
        };
        let vel = tr.velocity.iter().map(|x| x[c]).collect();
        let acc = tr.accel.iter().map(|x| x[c]).collect();
        (pos, vel, acc)
    };
    let mut checked = 0;
    for c in 0..3 {
        let (pos, vel, acc) = series(c);
        for i in 1..pos.len() - 1 {
            if !(log.line[i - 1] > 0 && log.line[i - 1] == log.line[i + 1]) {
                continue;
            }
            // The jerk jumps where the taper meets the flat part (τ = one period from either end,
            // where the sin² taper's second derivative stops): no Simpson bound across it.
            let start = log.line.iter().position(|l| *l == log.line[i]).unwrap_or(i);
            let tau = tr.time_s[i] - tr.time_s[start];
            if (tau - period).abs() < 1.5 * dt || (tau - (cf.leg_s - period)).abs() < 1.5 * dt {
                continue;
            }
            let dp = pos[i + 1] - pos[i - 1];
            let iv = dt / 3.0 * (vel[i - 1] + 4.0 * vel[i] + vel[i + 1]);
            let tol = simpson(1) + 4.0 * f64::EPSILON * pos[i].abs().max(1.0);
            assert!((dp - iv).abs() <= tol, "axis {c} sample {i}: {dp} vs {iv}");
            let dv = vel[i + 1] - vel[i - 1];
            let ia = dt / 3.0 * (acc[i - 1] + 4.0 * acc[i] + acc[i + 1]);
            assert!(
                (dv - ia).abs() <= simpson(2) + 1e-13,
                "axis {c} sample {i}: {dv} vs {ia}"
            );
            checked += 1;
        }
    }
    assert!(checked > 3 * 700, "{checked}");
    eprintln!(
        "Simpson tolerance {:.1e} m, {:.1e} m/s",
        simpson(1),
        simpson(2)
    );

    // The same instrument: second-order and cross-axis coefficients as in the survey flight, and
    // (per instrument, the default with a calibration flight) the same κ; a new take-off's biases.
    let survey = &sim.flights[0];
    assert!(s.linear_errors_per_instrument());
    for (a, b) in survey.accelerometers.iter().zip(&log.accelerometers) {
        for j in 0..2 {
            assert_eq!(a[j].quadratic, b[j].quadratic);
            assert_eq!((a[j].cross_u, a[j].cross_v), (b[j].cross_u, b[j].cross_v));
        }
    }
    for (a, b) in survey.pair_errors.iter().zip(&log.pair_errors) {
        assert_eq!(a.kappa, b.kappa);
        assert_eq!(a.quadratic, b.quadratic);
        assert!(a.bias != b.bias);
    }
}

/// The manoeuvre of the calibration leg numbered `line`.
fn leg_of(
    cal: &gravgrad_sim::simulate::CalibrationRun,
    line: i64,
) -> gravgrad_sim::scenario::Manoeuvre {
    cal.legs.iter().find(|l| l.line == line).unwrap().manoeuvre
}

#[test]
fn a_calibration_flight_with_linear_errors_per_flight_leaves_the_survey_path_and_errors_as_they_were()
 {
    use gravgrad_sim::scenario::LinearErrors;
    let plain = simulate(&scenario(SMALL)).unwrap();
    let mut s = with_calibration_flight();
    s.instrument.linear_errors = Some(LinearErrors::PerFlight);
    let sim = simulate(&s).unwrap();
    // The DEM grows to cover the calibration flight too (a run refuses a DEM short of any flight
    // plus its margin), so the terrain, and with it the pairs' outputs, differ; the path, the
    // navigation and every error drawn for the survey do not.
    for ((na, va), (nb, vb)) in plain.flights[0].columns.iter().zip(&sim.flights[0].columns) {
        assert_eq!(na, nb);
        if na.ends_with("_a") || na.ends_with("_b") {
            continue;
        }
        assert!(
            va.iter().zip(vb).all(|(x, y)| x.to_bits() == y.to_bits()),
            "{na} differs"
        );
    }
    for (a, b) in plain.flights[0]
        .pair_errors
        .iter()
        .zip(&sim.flights[0].pair_errors)
    {
        assert_eq!(a.kappa, b.kappa);
        assert_eq!(a.bias, b.bias);
    }
    // Per flight, the calibration flight is a take-off of its own: other κ.
    let cal = &sim.calibration.as_ref().unwrap().log;
    assert!(
        cal.pair_errors
            .iter()
            .zip(&sim.flights[0].pair_errors)
            .all(|(a, b)| a.kappa != b.kappa)
    );
}

#[test]
fn bad_calibration_flight_keys_are_refused_by_name() {
    let cases = [
        (
            "roll_amplitude_deg = 50.0",
            "calibration_flight.roll_amplitude_deg",
        ),
        ("altitude_m = 100.0", "calibration_flight.altitude_m"),
        ("period_s = 0.0", "calibration_flight.period_s"),
        ("leg_s = 10.0", "calibration_flight.leg_s"),
        ("first_line = 101", "calibration_flight.first_line"),
        (
            "headings_deg = [0.0, 10.0]",
            "calibration_flight.headings_deg",
        ),
        ("headings_deg = []", "calibration_flight.headings_deg"),
        (
            "pitch_amplitude_deg = 9.0",
            "calibration_flight.pitch_amplitude_deg",
        ),
        ("manoeuvres = []", "calibration_flight.manoeuvres"),
    ];
    for (line, key) in cases {
        let s = scenario(&format!("{SMALL}\n[calibration_flight]\n{line}\n"));
        let e = simulate(&s).unwrap_err().to_string();
        assert!(e.contains(key), "{line}: {e}");
    }
    let mut s = scenario(SMALL);
    s.instrument.quadratic_rms_per_m_s2 = -1.0;
    let e = simulate(&s).unwrap_err().to_string();
    assert!(e.contains("instrument.quadratic_rms_per_m_s2"), "{e}");
}

/// The simulator knows its sizes before it starts and refuses a scenario past its limits, naming
/// the key most to blame and the size it would need.
#[test]
fn scenarios_past_their_size_limits_are_refused_naming_the_key() {
    let base = "layout = \"scenario/1\"\n";
    let ok = scenario(base);
    let sizes = ok.check_sizes().expect("the default scenario fits");
    assert!(
        sizes.samples > 1000.0 && sizes.dem_cells > 100.0,
        "{sizes:?}"
    );
    for (extra, key, what) in [
        ("[terrain]\ncell_m = 0.001", "terrain.cell_m", "cells"),
        ("[plan]\nlines = 1000000000", "plan.lines", "samples"),
        (
            "[plan]\nsample_rate_hz = 1e7",
            "plan.sample_rate_hz",
            "at most 1000 Hz",
        ),
        (
            "[plan]\nsample_rate_hz = 100.0\nline_length_m = 200000.0",
            "plan.line_length_m",
            "samples",
        ),
        // Within the samples and DEM limits, past the estimated time.
        (
            "[terrain]\ncell_m = 10.0",
            "terrain.cell_m",
            "would take about",
        ),
        (
            "[plan]\nsample_rate_hz = 400.0",
            "plan.sample_rate_hz",
            "would take about",
        ),
    ] {
        let s = scenario(&format!("{base}{extra}"));
        let Err(e) = simulate(&s) else {
            panic!("{extra}: not refused")
        };
        let text = e.to_string();
        assert!(text.contains(key) && text.contains(what), "{extra}: {text}");
    }
}

/// The sizes counted before a simulation (`Scenario::sizes`) are the simulation's own: its samples
/// (survey and calibration flight) and its DEM's cells; and the terrain truth's work counted by
/// `check_sizes` bounds the simulation's: the same switch distance, every sample's far columns at
/// most samples × cells, and its prisms (columns near a sample) at most the counted number, which
/// is no more than twice the real one (more where the DEM is small against the switch distance:
/// its edges cut the samples' discs).
#[test]
fn counted_sizes_are_the_simulations_own() {
    use gravgrad_sim::terrain_truth::TerrainTruth;
    for s in [scenario(SMALL), with_calibration_flight()] {
        let counted = s.check_sizes().expect("fits");
        let sim = simulate(&s).unwrap();
        let samples = sim.truth.terrain.len()
            + sim
                .calibration
                .as_ref()
                .map_or(0, |c| c.truth.terrain.len());
        assert_eq!(counted.samples, samples as f64);
        assert_eq!(counted.dem_cells, sim.dem.values.len() as f64);
        // The rough estimate that stops runaway scenarios is an upper bound.
        let rough = s.rough_sizes();
        assert!(rough.samples >= counted.samples && rough.dem_cells >= counted.dem_cells);
        // The terrain truth's work.
        let truth = TerrainTruth::new(&sim.dem, sim.reference_level_m, s.terrain.density_kg_m3);
        let w = counted.terrain;
        let k = truth.switches();
        assert!(
            (w.switch_line_cells - k.line).abs() < 0.02
                && (w.switch_point_cells - k.point).abs() < 0.02,
            "{w:?} {k:?}"
        );
        assert_eq!(w.points, counted.samples * counted.dem_cells);
        let mut n = [0; 3];
        for t in std::iter::once(&sim.truth).chain(sim.calibration.iter().map(|c| &c.truth)) {
            for i in 0..t.north.len() {
                let c = truth.form_counts([t.north[i], t.east[i], t.height[i]]);
                n = std::array::from_fn(|j| n[j] + c[j]);
            }
        }
        assert!(
            w.prisms >= n[0] as f64 && w.prisms <= 2.0 * n[0] as f64,
            "counted {} real {}",
            w.prisms,
            n[0]
        );
        assert!(w.lines >= (n[0] + n[1]) as f64, "{w:?} {n:?}");
        assert!(w.seconds > 0.0 && w.seconds.is_finite());
    }
}

/// The demo scenario and the scenario files of the tests fit the limits.
#[test]
fn the_repositorys_scenario_files_fit_the_limits() {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../..");
    for f in [
        "data/demo/scenario.toml",
        "data/demo/truth/scenario.toml",
        "tests/end_to_end/small_scenario.toml",
    ] {
        let text = std::fs::read_to_string(root.join(f)).unwrap();
        let sizes = scenario(&text)
            .check_sizes()
            .unwrap_or_else(|e| panic!("{f}: {}", e.message));
        assert!(sizes.samples * sizes.dem_cells > 0.0, "{f}");
    }
}

/// Largest |fast − all-prism| per component (E) over `points`, the terrain tensor's RMS over all
/// components (E), and whether every point's error is within the far form's bound at that point.
fn truth_against_all_prisms(
    dem: &gravgrad_sim::terrain::Dem,
    points: &[[f64; 3]],
) -> (
    [f64; 6],
    f64,
    bool,
    gravgrad_sim::terrain_truth::TerrainTruth,
) {
    use gravgrad_sim::terrain::{terrain_prisms, terrain_tensor};
    use gravgrad_sim::terrain_truth::TerrainTruth;
    let reference = dem.mean();
    let exact = terrain_tensor(&terrain_prisms(dem, reference, 2670.0), points);
    let truth = TerrainTruth::new(dem, reference, 2670.0);
    let fast = truth.tensor(points);
    let mut max = [0.0f64; 6];
    let (mut sum2, mut within) = (0.0, true);
    for ((f, e), p) in fast.iter().zip(&exact).zip(points) {
        let (f, e) = (f.to_array(), e.to_array());
        let bound = truth.error_bound(*p);
        for i in 0..6 {
            let err = (f[i] - e[i]).abs();
            max[i] = max[i].max(err * 1e9);
            sum2 += e[i] * e[i];
            // The all-prism sum's own rounding: about 1e-12 of the tensor.
            within &= err <= bound + 1e-12 * e[i].abs();
        }
    }
    let rms = (sum2 / (6 * points.len()) as f64).sqrt() * 1e9;
    (max, rms, within, truth)
}

/// The terrain truth (prisms near, line masses with the cross-section term far) against every
/// cell as a prism, on random columns: an 80 × 80 DEM of 50 m cells with heights drawn uniformly
/// within ±60 m of their mean, at random points from level with the columns to 400 m above them.
/// Every component within 1e-3 E (`TRUTH_TOLERANCE`) and within the far form's bound at its point.
#[test]
fn terrain_truth_on_random_columns_is_within_its_bound_of_the_all_prism_sum() {
    use gravgrad_sim::noise::Rng;
    use gravgrad_sim::terrain::Dem;
    use gravgrad_sim::terrain_truth::TRUTH_TOLERANCE;
    let mut rng = Rng::new(11, 3);
    let (n, cell) = (80, 50.0);
    let dem = Dem {
        nrow: n,
        ncol: n,
        cell_m: cell,
        north_max: 2000.0,
        east_min: -2000.0,
        values: (0..n * n)
            .map(|_| 300.0 + 120.0 * (rng.uniform() - 0.5))
            .collect(),
    };
    let points: Vec<[f64; 3]> = (0..120)
        .map(|_| {
            [
                2000.0 - n as f64 * cell * rng.uniform(),
                -2000.0 + n as f64 * cell * rng.uniform(),
                300.0 + 60.0 + 340.0 * rng.uniform().powi(2),
            ]
        })
        .chain([[0.0, 0.0, 300.0], [-1000.0, 500.0, 330.0]])
        .collect();
    let (max, rms, within, truth) = truth_against_all_prisms(&dem, &points);
    eprintln!(
        "random columns: switches {:?} cells, relief {:.1} m; max error per component {:?} E; terrain RMS {rms:.2} E",
        truth.switches(),
        truth.relief_m(),
        max.map(|v| format!("{v:.2e}"))
    );
    // The far form is used for most of the cells (the comparison is not prisms against prisms).
    let forms = points.iter().fold([0; 3], |acc, p| {
        let c = truth.form_counts(*p);
        std::array::from_fn(|j| acc[j] + c[j])
    });
    assert!(
        forms[0] < points.len() * n * n / 2 && forms[1] > 0 && forms[2] > 0,
        "{forms:?}"
    );
    assert!(within, "an error past its point's bound");
    for m in max {
        assert!(m <= TRUTH_TOLERANCE * 1e9, "{max:?} E");
    }
}

/// The same on a simulated DEM: the demo scenario's terrain (hill, ridge, rough ground) over its
/// survey plus margin, at draped heights 70 to 130 m above the ground and at the calibration
/// flight's 1500 m.
#[test]
fn terrain_truth_on_the_demo_dem_is_within_its_bound_of_the_all_prism_sum() {
    use gravgrad_sim::noise::Rng;
    use gravgrad_sim::terrain::Surface;
    use gravgrad_sim::terrain_truth::TRUTH_TOLERANCE;
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../..");
    let s = scenario(&std::fs::read_to_string(root.join("data/demo/scenario.toml")).unwrap());
    let surface = Surface::new(&s.area, &s.terrain, s.seed);
    let dem = surface.dem([-1500.0, 2100.0], [-1500.0, 4500.0]);
    let mut rng = Rng::new(12, 3);
    let points: Vec<[f64; 3]> = (0..150)
        .map(|k| {
            let (n, e) = (600.0 * rng.uniform() - 50.0, 3000.0 * rng.uniform());
            let h = if k % 10 == 0 {
                1500.0 + s.area.ground_height_m
            } else {
                surface.height(n, e) + 70.0 + 60.0 * rng.uniform()
            };
            [n, e, h]
        })
        .collect();
    let (max, rms, within, truth) = truth_against_all_prisms(&dem, &points);
    eprintln!(
        "demo DEM: switches {:?} cells, relief {:.1} m; max error per component {:?} E; terrain RMS {rms:.2} E",
        truth.switches(),
        truth.relief_m(),
        max.map(|v| format!("{v:.2e}"))
    );
    assert!(within, "an error past its point's bound");
    for m in max {
        assert!(m <= TRUTH_TOLERANCE * 1e9, "{max:?} E");
    }
}

/// The switch distances are the smallest (to 0.01 cell) whose bounds meet half the tolerance each,
/// grow with the relief and the density, the point form's beyond the line form's, and are the floor
/// for flat ground.
#[test]
fn the_switch_distances_are_the_smallest_that_meet_the_tolerance() {
    use gravgrad_core::units::G;
    use gravgrad_forward::column::{FAR_ERROR_CONSTANT, point_error_factor};
    use gravgrad_sim::terrain_truth::{MIN_SWITCH_CELLS, TRUTH_TOLERANCE, lattice_bound, switches};
    let a = 50.0;
    let line = |h: f64, k: f64| FAR_ERROR_CONSTANT * G * 2670.0 * h / a * lattice_bound(k);
    let point =
        |h: f64, k: f64| G * 2670.0 * h * point_error_factor(a, h) / a.powi(5) * lattice_bound(k);
    let half = 0.5 * TRUTH_TOLERANCE;
    let mut last = 0.0;
    for h in [5.0, 50.0, 500.0] {
        let k = switches(a, h, 2670.0);
        assert!(
            line(h, k.line) <= half && line(h, k.line - 0.01) > half,
            "{h}: {k:?}"
        );
        assert!(
            point(h, k.point) <= half && point(h, k.point - 0.01) > half,
            "{h}: {k:?}"
        );
        assert!(k.line > last && k.point > k.line, "{h}: {k:?}");
        last = k.line;
    }
    assert!(switches(a, 50.0, 3000.0).line > switches(a, 50.0, 2000.0).line);
    let flat = switches(a, 0.0, 2670.0);
    assert!(flat.line == MIN_SWITCH_CELLS && flat.point == MIN_SWITCH_CELLS);
    // The bound's lattice sum against the sum itself over a large lattice (it must be above it):
    // columns at every cell centre with D ≥ k, D − 1/√2 to the power −7, for an observer level with
    // the cell centres' plane at a cell's corner.
    for k in [3.0, 8.0, 17.0] {
        let mut sum = 0.0;
        for i in -400i32..400 {
            for j in -400i32..400 {
                let d = ((i as f64 + 0.5).powi(2) + (j as f64 + 0.5).powi(2)).sqrt();
                if d >= k {
                    sum += (d - std::f64::consts::FRAC_1_SQRT_2).powi(-7);
                }
            }
        }
        assert!(sum <= lattice_bound(k), "{k}: {sum} > {}", lattice_bound(k));
        eprintln!(
            "k {k}: lattice sum {sum:.3e}, bound {:.3e}",
            lattice_bound(k)
        );
    }
}
