//! The solve against the simulator's truth (normal + terrain + geology), error-free instrument.

use gravgrad_core::pairs::AlphaSource;
use gravgrad_rotation::solve::{Inputs, PairSeries, RotationError, SolveSettings, solve};
use gravgrad_sim::scenario::Scenario;
use gravgrad_sim::simulate::{Simulation, simulate};

const SCENARIO: &str = r#"
layout = "scenario/1"
seed = 9
[[geology.sphere]]
north_m = 150.0
east_m = 700.0
depth_m = 250.0
radius_m = 120.0
density_kg_m3 = 400.0
[terrain]
cell_m = 200.0
margin_m = 600.0
rough_rms_m = 4.0
[plan]
line_length_m = 1500.0
lines = 2
ties = 0
sample_rate_hz = 20.0
[dynamics]
turbulence_m_s2 = 0.8
platform_rate_rad_s = 2e-5
"#;

fn sim(pairs: &[&str]) -> Simulation {
    let mut s: Scenario = toml::from_str(SCENARIO).unwrap();
    s.instrument = s.instrument.perfect();
    s.instrument.pairs = pairs.iter().map(|p| p.to_string()).collect();
    simulate(&s).unwrap()
}

fn col<'a>(s: &'a Simulation, n: &str) -> &'a [f64] {
    s.flights[0].column(n).unwrap()
}

fn inputs(s: &Simulation) -> Inputs<'_> {
    Inputs {
        pairs: s
            .pairs
            .iter()
            .map(|p| PairSeries {
                geometry: p,
                a: col(s, &format!("{}_a", p.id)),
                b: col(s, &format!("{}_b", p.id)),
                correction: None,
            })
            .collect(),
        omega: [col(s, "wx"), col(s, "wy"), col(s, "wz")],
        roll_deg: col(s, "roll"),
        pitch_deg: col(s, "pitch"),
        heading_deg: col(s, "heading"),
        rate_hz: 20.0,
        alpha_gyro: None,
    }
}

fn all() -> Vec<String> {
    ["Gxx", "Gxy", "Gxz", "Gyy", "Gyz", "Gzz"]
        .map(String::from)
        .to_vec()
}

/// RMS error in E per component over line samples.
fn rms_errors(s: &Simulation, got: &[gravgrad_core::SymTensor]) -> [f64; 6] {
    let idx: Vec<usize> = (0..s.line.len()).filter(|&i| s.line[i] > 0).collect();
    std::array::from_fn(|c| {
        (idx.iter()
            .map(|&i| (got[i].to_array()[c] - s.truth.total(i).to_array()[c]).powi(2))
            .sum::<f64>()
            / idx.len() as f64)
            .sqrt()
            / 1e-9
    })
}

#[test]
fn nine_pairs_give_the_total_tensor_with_turbulence() {
    // Issue 5: no noise, turbulence on, cross-pair angular acceleration of order 1e5 E: the tensor
    // after rotation removal equals the simulated total within 0.01 E RMS.
    let s = sim(&["xx", "yy", "zz", "xy", "yx", "xz", "zx", "yz", "zy"]);
    for trace_constraint in [false, true] {
        let set = SolveSettings {
            alpha: AlphaSource::Pairs,
            trace_constraint,
            gyro_lowpass_hz: 2.0,
            components: all(),
        };
        let sol = solve(&inputs(&s), &set).unwrap();
        let e = rms_errors(&s, &sol.tensor_ned);
        eprintln!(
            "nine pairs, trace constraint {trace_constraint}: RMS error per component {e:?} E"
        );
        assert!(
            e.iter().all(|v| *v < 0.01),
            "trace constraint {trace_constraint}: {e:?} E"
        );
        let amax = sol
            .alpha_pairs
            .as_ref()
            .unwrap()
            .iter()
            .flat_map(|a| a.iter())
            .fold(0.0f64, |m, v| m.max(v.abs()));
        assert!(amax / 1e-9 > 5e4, "angular acceleration {amax}");
        // QC: the unconstrained trace is zero to the same resolution.
        let idx = (0..s.line.len()).filter(|&i| s.line[i] > 0);
        assert!(idx.map(|i| sol.trace[i].abs() / 1e-9).fold(0.0, f64::max) < 0.01);
    }
}

#[test]
fn a_partial_instrument_gives_what_it_observes() {
    // Issue 5: in-line x, in-line y, cross xy, cross yx; α from the gyros; Gzz from the trace.
    let s = sim(&["xx", "yy", "xy", "yx"]);
    let want = ["Gxx", "Gxy", "Gyy", "Gzz"].map(String::from).to_vec();
    let set = SolveSettings {
        alpha: AlphaSource::Gyros,
        trace_constraint: true,
        gyro_lowpass_hz: 2.0,
        components: want,
    };
    let sol = solve(&inputs(&s), &set).unwrap();
    assert_eq!(sol.observed, [true, true, false, true, false, true]);
    assert!(sol.heading_only);
    let e = rms_errors(&s, &sol.tensor_ned);
    eprintln!("partial instrument: RMS error per component {e:?} E");
    // Heading-only rotation leaves at most |Gxz, Gyz|·max(|roll|, |pitch|): the stabilised
    // platform's residual angles are ~1e-5 rad, so well under 0.01 E.
    for c in [0, 1, 3, 5] {
        assert!(e[c] < 0.01, "component {c}: {e:?}");
    }
    assert!(
        sol.tensor_ned
            .iter()
            .all(|t| t.xz.is_nan() && t.yz.is_nan())
    );
    // And a clear refusal for what it cannot give.
    let set = SolveSettings {
        alpha: AlphaSource::Gyros,
        trace_constraint: true,
        gyro_lowpass_hz: 2.0,
        components: all(),
    };
    match solve(&inputs(&s), &set) {
        Err(RotationError::Unobservable { missing, .. }) => assert_eq!(missing, vec!["Gxz", "Gyz"]),
        other => panic!("expected a refusal, got {:?}", other.map(|_| ())),
    }
}
