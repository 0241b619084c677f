//! Calibration against the simulator's injected errors (issue 5).

use gravgrad_calibrate::estimate::{PairData, Settings, estimate};
use gravgrad_rotation::gyro::angular_acceleration;
use gravgrad_sim::scenario::Scenario;
use gravgrad_sim::simulate::{Simulation, simulate};

const SCENARIO: &str = r#"
layout = "scenario/1"
seed = 31
[[geology.sphere]]
north_m = 300.0
east_m = 1500.0
depth_m = 250.0
radius_m = 150.0
density_kg_m3 = 400.0
[terrain]
cell_m = 200.0
margin_m = 800.0
rough_rms_m = 3.0
[plan]
line_length_m = 8000.0
line_spacing_m = 1200.0
turn_rate_deg_s = 6.0
lines = 4
ties = 1
sample_rate_hz = 20.0
[dynamics]
turbulence_m_s2 = 0.4
[instrument]
scale_rms = 1e-5
misalignment_rms_rad = 1e-5
drift_rms_m_s2_h = 3e-8
temperature_coefficient_rms_m_s2_c = 2e-9
"#;

/// Where each survey line passes closest to the tie line (line numbers from 9000 up), from the
/// simulator's true track: the sample of each pass, survey first (brute force).
fn nearest_crossings(sim: &Simulation) -> Vec<(usize, usize)> {
    let t = &sim.track;
    let lines: Vec<i64> = {
        let mut l: Vec<i64> = t.line.iter().copied().filter(|l| *l > 0).collect();
        l.dedup();
        l.sort_unstable();
        l.dedup();
        l
    };
    let tie: Vec<usize> = (0..t.line.len()).filter(|&i| t.line[i] >= 9000).collect();
    lines
        .iter()
        .filter(|l| **l < 9000)
        .filter_map(|l| {
            (0..t.line.len())
                .filter(|&i| t.line[i] == *l)
                .flat_map(|i| tie.iter().map(move |&j| (i, j)))
                .map(|(i, j)| ((t.north[i] - t.north[j]).hypot(t.east[i] - t.east[j]), i, j))
                .filter(|x| x.0 < 10.0)
                .min_by(|a, b| a.0.total_cmp(&b.0))
                .map(|x| (x.1, x.2))
        })
        .collect()
}

fn col<'a>(s: &'a Simulation, n: &str) -> &'a [f64] {
    s.flights[0].column(n).unwrap()
}

#[test]
fn coupling_drift_and_temperature_are_recovered_within_three_standard_errors() {
    let sc: Scenario = toml::from_str(SCENARIO).unwrap();
    let sim = simulate(&sc).unwrap();
    let rate = sc.plan.sample_rate_hz;
    let alpha: Vec<Vec<f64>> = ["wx", "wy", "wz"]
        .iter()
        .map(|w| angular_acceleration(col(&sim, w), rate, 2.0))
        .collect();
    // The unrestricted estimator (no term held for want of significance): what is tested here is
    // that it is unbiased with honest standard errors; holding is tested on its own below.
    let settings = Settings {
        min_significance: 0.0,
        ..Settings::at_rate(rate)
    };
    let usable: Vec<bool> = sim.line.iter().map(|l| *l > 0).collect();
    let mut worst = 0.0f64;
    let mut kappa_se = Vec::new();
    for (p, truth) in sim.pairs.iter().zip(&sim.flights[0].pair_errors) {
        let d: Vec<f64> = col(&sim, &format!("{}_a", p.id))
            .iter()
            .zip(col(&sim, &format!("{}_b", p.id)))
            .map(|(a, b)| a - b)
            .collect();
        let data = PairData {
            geometry: p,
            difference: &d,
            omega: [col(&sim, "wx"), col(&sim, "wy"), col(&sim, "wz")],
            f: [col(&sim, "fx"), col(&sim, "fy"), col(&sim, "fz")],
            alpha: [&alpha[0], &alpha[1], &alpha[2]],
            time: col(&sim, "time"),
            temperature: Some(col(&sim, "temp")),
            usable: Some(&usable),
            expected: None,
            relative_attitude: None,
        };
        let c = estimate(&data, &settings);
        let zd = (c.polynomial[1].value - truth.drift) / c.polynomial[1].std_error;
        let t = c.temperature.unwrap();
        let zt = (t.value - truth.tempco) / t.std_error;
        eprintln!(
            "{}: κ z-scores {:.2} {:.2} {:.2}, SE {:.1e}; drift z {:.2} (SE {:.1e}); temperature z {:.2} (SE {:.1e}); band residual {:.1e}",
            p.id,
            (c.kappa[0].value - truth.kappa[0]) / c.kappa[0].std_error,
            (c.kappa[1].value - truth.kappa[1]) / c.kappa[1].std_error,
            (c.kappa[2].value - truth.kappa[2]) / c.kappa[2].std_error,
            c.kappa[2].std_error,
            zd,
            c.polynomial[1].std_error,
            zt,
            t.std_error,
            c.band_residual_rms
        );
        for k in 0..3 {
            let z = (c.kappa[k].value - truth.kappa[k]) / c.kappa[k].std_error;
            worst = worst.max(z.abs());
            kappa_se.push(c.kappa[k].std_error);
            assert!(
                z.abs() < 3.0,
                "pair {} κ[{k}]: {:e} vs truth {:e} (SE {:e})",
                p.id,
                c.kappa[k].value,
                truth.kappa[k],
                c.kappa[k].std_error
            );
        }
        assert!(
            zd.abs() < 3.0,
            "pair {} drift {:e} vs {:e} (SE {:e})",
            p.id,
            c.polynomial[1].value,
            truth.drift,
            c.polynomial[1].std_error
        );
        assert!(
            zt.abs() < 3.0,
            "pair {} temperature {:e} vs {:e} (SE {:e})",
            p.id,
            t.value,
            truth.tempco,
            t.std_error
        );
    }
    // What this data determines is printed, not asserted (docs/methods/calibration.md records it):
    // the in-line pairs' κ to a few 1e-9, the cross pairs' to about 1e-7, limited by the
    // gyro-derived angular acceleration they are fitted against. docs/physics.md needs about 1e-10:
    // not reached yet (issue 5 stays open).
    let max_se = kappa_se.iter().cloned().fold(0.0, f64::max);
    eprintln!("worst |z| {worst:.2}, largest κ standard error {max_se:.1e}");
    let inline_se = kappa_se[..9].iter().cloned().fold(0.0, f64::max);
    eprintln!("largest κ standard error of the in-line pairs {inline_se:.1e}");
}

/// The whole instrument fitted in the space of the solve's unknowns (α from the pairs), with the
/// known field (normal + terrain, from the simulation's truth) removed first: every pair's κ, drift
/// and temperature coefficient within three standard errors of the injected values.
#[test]
fn joint_fit_recovers_every_pair_within_three_standard_errors() {
    use gravgrad_calibrate::joint::{FlightData, KnownField, PairSamples, estimate_flight};
    let sc: Scenario = toml::from_str(SCENARIO).unwrap();
    let sim = simulate(&sc).unwrap();
    let rate = sc.plan.sample_rate_hz;
    let alpha: Vec<Vec<f64>> = ["wx", "wy", "wz"]
        .iter()
        .map(|w| angular_acceleration(col(&sim, w), rate, 2.0))
        .collect();
    let settings = Settings {
        quadratic: true,
        ..Settings::at_rate(rate)
    };
    let usable: Vec<bool> = sim.line.iter().map(|l| *l > 0).collect();
    let crossings = nearest_crossings(&sim);
    assert_eq!(crossings.len(), 4, "four lines cross the tie");
    let (roll, pitch, heading) = (col(&sim, "roll"), col(&sim, "pitch"), col(&sim, "heading"));
    // Known field: the truth's normal and terrain parts, turned into the sensor frame by the logged
    // attitude.
    let pair_col =
        |p: &gravgrad_core::pairs::PairGeometry, end: &str| col(&sim, &format!("{}_{end}", p.id));
    let data = FlightData {
        samples: PairSamples {
            pairs: &sim.pairs,
            a: sim.pairs.iter().map(|p| pair_col(p, "a")).collect(),
            b: sim.pairs.iter().map(|p| pair_col(p, "b")).collect(),
            known: Some(KnownField {
                normal: &sim.truth.normal,
                terrain: Some(&sim.truth.terrain),
                attitude_deg: [roll, pitch, heading],
            }),
            omega: [col(&sim, "wx"), col(&sim, "wy"), col(&sim, "wz")],
        },
        f: [col(&sim, "fx"), col(&sim, "fy"), col(&sim, "fz")],
        alpha: [&alpha[0], &alpha[1], &alpha[2]],
        time: col(&sim, "time"),
        temperature: Some(col(&sim, "temp")),
        usable: Some(&usable),
        relative_attitude: None,
        alpha_from_pairs: true,
        crossings: Some(&crossings),
    };
    let cals = estimate_flight(&data, &settings, None).pairs;
    let mut worst = 0.0f64;
    for ((p, truth), c) in sim.pairs.iter().zip(&sim.flights[0].pair_errors).zip(&cals) {
        let z: Vec<f64> = (0..3)
            .map(|k| (c.kappa[k].value - truth.kappa[k]) / c.kappa[k].std_error)
            .collect();
        let zd = (c.polynomial[1].value - truth.drift) / c.polynomial[1].std_error;
        let t = c.temperature.unwrap();
        let zt = (t.value - truth.tempco) / t.std_error;
        eprintln!(
            "{}: κ z {:.2} {:.2} {:.2} (SE {:.1e} {:.1e} {:.1e}); drift z {zd:.2}; temperature z {zt:.2}; band residual {:.2} E",
            p.id,
            z[0],
            z[1],
            z[2],
            c.kappa[0].std_error,
            c.kappa[1].std_error,
            c.kappa[2].std_error,
            c.band_residual_rms / 0.2 / 1e-9
        );
        for v in z.iter().chain([&zd, &zt]) {
            worst = worst.max(v.abs());
        }
    }
    eprintln!("worst |z| {worst:.2}");
    assert!(worst < 3.0, "worst |z| {worst:.2}");
}
