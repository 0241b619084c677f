//! The simulation: flight path, truth field, platform motion and the instrument equation
//! f(r) = f(O) + (Ω̇ + ΩΩ − G)·r (`docs/physics.md`; Jekeli 2001; Rummel et al. 2011) with the error
//! model a_j = (1 + ε_j)(n_k + δ_j)·f(r_j) + β_j + β̇_j·t + τ_j·(T − T0) + noise_j.
//!
//! Frames: the truth is in NED (local north/east metres, heights above the ellipsoid), the instrument
//! in the sensor frame; accelerations m/s², rates rad/s, tensors s⁻², angles in the log in degrees.

use crate::calflight::{self, CalibrationLeg};
use crate::flights;
use crate::noise::{self, Rng};
use crate::path::{self, Track};
use crate::scenario::{CalibrationFlight, InstrumentErrors, LAYOUT, Scenario, TemperatureLog};
use crate::terrain::{Dem, Surface};
use crate::terrain_truth::TerrainTruth;
use gravgrad_core::SymTensor;
use gravgrad_core::attitude::Attitude;
use gravgrad_core::ellipsoid::GRS80;
use gravgrad_core::mat3::{self, Mat3, Vec3};
use gravgrad_core::pairs::PairGeometry;
use gravgrad_core::projection::TransverseMercator;
use gravgrad_core::units::EOTVOS;
use gravgrad_forward::normal::NormalField;
use gravgrad_forward::point;
use gravgrad_forward::prism::Prism;
use rayon::prelude::*;
use std::ops::Range;

/// A scenario that cannot be simulated.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum SimError {
    #[error("layout is `{0}`, expected `{LAYOUT}`")]
    Layout(String),
    #[error("`{key}` = {value}: {what}")]
    Value {
        key: &'static str,
        value: f64,
        what: &'static str,
    },
    #[error(
        "`instrument.pairs`: `{0}` is not a pair of the standard layout (xx yy zz xy yx xz zx yz zy)"
    )]
    Pair(String),
    #[error("`{key}`: {message}")]
    TooLarge { key: &'static str, message: String },
}

/// The standard pair layout: axis along the first letter, baseline along the second, centres a few
/// centimetres apart (sensor frame, metres).
pub fn standard_pair(id: &str, baseline_m: f64) -> Option<PairGeometry> {
    let unit = |c: char| match c {
        'x' => Some([1.0, 0.0, 0.0]),
        'y' => Some([0.0, 1.0, 0.0]),
        'z' => Some([0.0, 0.0, 1.0]),
        _ => None,
    };
    let mut ch = id.chars();
    let (a, b) = (ch.next()?, ch.next()?);
    if ch.next().is_some() {
        return None;
    }
    let axis = unit(a)?;
    let dir = unit(b)?;
    let k = (a as u32 * 7 + b as u32 * 3) % 5;
    Some(PairGeometry {
        id: id.to_string(),
        center: [0.01 * k as f64, -0.01 * k as f64, 0.005 * k as f64],
        baseline: dir.map(|v| v * baseline_m),
        axis,
    })
}

/// The truth along the path (NED, s⁻²) and where it was taken.
#[derive(Clone, Debug, Default)]
pub struct Truth {
    pub north: Vec<f64>,
    pub east: Vec<f64>,
    pub height: Vec<f64>,
    pub geology: Vec<SymTensor>,
    pub terrain: Vec<SymTensor>,
    /// Normal gravitational tensor of GRS80.
    pub normal: Vec<SymTensor>,
}

impl Truth {
    /// Normal + terrain + geology at sample i: what an ideal gradiometer senses.
    pub fn total(&self, i: usize) -> SymTensor {
        self.normal[i] + self.terrain[i] + self.geology[i]
    }
}

/// The geology tensor on a grid at the survey's mean height.
#[derive(Clone, Debug, Default)]
pub struct TruthGrid {
    pub height_m: f64,
    pub north: Vec<f64>,
    pub east: Vec<f64>,
    /// `values[i * east.len() + j]` at (`north[i]`, `east[j]`).
    pub values: Vec<SymTensor>,
}

/// The map frame: UTM zone and the grid coordinates of the local origin (easting, northing, m).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Projection {
    pub zone: u32,
    pub south: bool,
    pub false_origin: [f64; 2],
}

impl Projection {
    /// EPSG code of the UTM zone on WGS84 (GRS80 differs from it by 0.1 mm in b).
    pub fn epsg(&self) -> u32 {
        if self.south {
            32700 + self.zone
        } else {
            32600 + self.zone
        }
    }
}

/// Everything a simulation produces.
#[derive(Clone, Debug)]
pub struct Simulation {
    /// The raw log of each flight, in flying order (`plan.flights` of them).
    pub flights: Vec<FlightLog>,
    /// Line number of every path sample, all flights in flying order (0 in transits); the samples
    /// of `truth` and `track`.
    pub line: Vec<i64>,
    pub pairs: Vec<PairGeometry>,
    pub sample_rate_hz: f64,
    pub truth: Truth,
    pub grid: TruthGrid,
    pub dem: Dem,
    pub reference_level_m: f64,
    pub track: Track,
    pub projection: Projection,
    /// The injected offset of each line (NED, s⁻²), in flying order; empty without
    /// `instrument.line_offset_e_rms`.
    pub line_offsets: Vec<(i64, SymTensor)>,
    /// The calibration flight, when the scenario has one.
    pub calibration: Option<CalibrationRun>,
}

/// The calibration flight: its log, path and truth (samples of its own, not those of `truth`).
#[derive(Clone, Debug)]
pub struct CalibrationRun {
    pub log: FlightLog,
    pub track: Track,
    pub truth: Truth,
    /// Its legs in flying order, with their manoeuvres and line numbers.
    pub legs: Vec<CalibrationLeg>,
}

/// The raw log of one flight.
#[derive(Clone, Debug)]
pub struct FlightLog {
    /// Raw-log channels in layout order and units (`docs/formats.md`).
    pub columns: Vec<(String, Vec<f64>)>,
    /// Line number per sample; 0 in transits.
    pub line: Vec<i64>,
    /// Index of the flight's first sample in the survey's path (`Simulation::truth`, `track`).
    pub first_sample: usize,
    /// The injected errors of each pair's difference a − b in this flight, in the order of `pairs`.
    pub pair_errors: Vec<PairErrors>,
    /// The injected errors of each pair's accelerometers (a, b) in this flight, in the order of
    /// `pairs`.
    pub accelerometers: Vec<[AccelerometerErrors; 2]>,
    /// GPS time of the first sample, s: the bias is its value then, the drift counts from it.
    pub time_ref_s: f64,
    /// T0 of the temperature term: the sensor's true temperature at the first sample, °C.
    pub temperature_ref_c: f64,
}

impl Simulation {
    /// A channel of every flight's log end to end: one value per path sample, as `truth` and
    /// `line` are; `None` when a flight lacks it.
    pub fn survey_column(&self, name: &str) -> Option<Vec<f64>> {
        let mut out = Vec::with_capacity(self.line.len());
        for f in &self.flights {
            out.extend_from_slice(f.column(name)?);
        }
        Some(out)
    }
}

impl FlightLog {
    pub fn column(&self, name: &str) -> Option<&[f64]> {
        self.columns
            .iter()
            .find(|c| c.0 == name)
            .map(|c| c.1.as_slice())
    }
}

/// The injected errors of one accelerometer in one flight. Its output is
/// a = (1 + ε)(n + δ)·f + β + β̇·t + τ·(T − T0) + K2·(n′·f)² + K_u·(n′·f)(u·f) + K_v·(n′·f)(v·f) +
/// noise, with n′ = n + δ the misaligned input axis and f the specific force at the accelerometer
/// (the second-order and cross-coupling terms after IEEE Std 1293-2018).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct AccelerometerErrors {
    /// ε, dimensionless.
    pub scale: f64,
    /// δ, perpendicular to the nominal axis, sensor frame (rad).
    pub misalignment: Vec3,
    /// β, m/s², at the flight's first sample.
    pub bias: f64,
    /// β̇, m/s² per second from the flight's first sample.
    pub drift: f64,
    /// τ, m/s² per °C.
    pub tempco: f64,
    /// K2, (m/s²)⁻¹.
    pub quadratic: f64,
    /// K_u and K_v, (m/s²)⁻¹.
    pub cross_u: f64,
    pub cross_v: f64,
    /// u and v: unit axes perpendicular to the nominal axis and to each other (sensor frame).
    pub u_axis: Vec3,
    pub v_axis: Vec3,
}

/// The injected errors of one pair's difference d = a − b, to first order:
/// d = κ·f(O) + Δβ + Δβ̇·t + Δτ·(T − T0) + Q(f(O)) + … (`docs/physics.md`), t from the flight's first
/// sample, T0 the sensor temperature there ([`FlightLog::temperature_ref_c`]).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PairErrors {
    /// κ = (1 + ε_a)(n + δ_a) − (1 + ε_b)(n + δ_b), sensor frame, dimensionless.
    pub kappa: Vec3,
    /// The pair's common-mode axis ((1 + ε_a)(n + δ_a) + (1 + ε_b)(n + δ_b))/2, sensor frame,
    /// dimensionless: what the pair's mean output (a + b)/2 senses of the force. The pipeline's
    /// force comes from these, so its κ is relative to them.
    pub common_axis: Vec3,
    /// Δβ, m/s².
    pub bias: f64,
    /// Δβ̇, m/s² per second.
    pub drift: f64,
    /// Δτ, m/s² per °C.
    pub tempco: f64,
    /// Q(f) = q_xx·fx² + q_yy·fy² + q_zz·fz² + q_xy·fx·fy + q_xz·fx·fz + q_yz·fy·fz: the quadratic
    /// form of the difference in the sensor-frame specific force at the sensor origin, to first
    /// order, [q_xx, q_yy, q_zz, q_xy, q_xz, q_yz], (m/s²)⁻¹.
    pub quadratic: [f64; 6],
}

/// The scenario's UTM projection (the zone of its origin, southern when the origin is) and the grid
/// coordinates of its local origin: easting, northing, m.
fn map_origin(s: &Scenario) -> Result<(TransverseMercator, f64, f64), SimError> {
    let south = s.area.origin_lat_deg < 0.0;
    let zone = TransverseMercator::utm_zone_of(s.area.origin_lon_deg);
    let tm = TransverseMercator::utm(&GRS80, zone, south).map_err(|_| SimError::Value {
        key: "area.origin_lon_deg",
        value: s.area.origin_lon_deg,
        what: "outside −180 to 180",
    })?;
    let (e0, n0, _, _) = tm.forward(
        s.area.origin_lat_deg.to_radians(),
        s.area.origin_lon_deg.to_radians(),
    );
    Ok((tm, e0, n0))
}

/// The geology of a scenario evaluated anywhere in its map frame: the truth of gridded products.
#[derive(Clone, Debug)]
pub struct GeologyProbe<'a> {
    scenario: &'a Scenario,
    /// UTM grid coordinates of the scenario's local origin (easting, northing), m.
    origin: [f64; 2],
}

impl<'a> GeologyProbe<'a> {
    /// The probe of `s` (its UTM zone is the origin's, as in [`simulate`]).
    pub fn new(s: &'a Scenario) -> Result<Self, SimError> {
        let (_, e0, n0) = map_origin(s)?;
        Ok(Self {
            scenario: s,
            origin: [e0, n0],
        })
    }

    /// The geology tensor at (easting, northing, height above the ellipsoid), m, in the map frame
    /// (x grid north, y grid east, z down), s⁻².
    pub fn at(&self, easting: f64, northing: f64, height: f64) -> SymTensor {
        geology_tensor(
            self.scenario,
            [northing - self.origin[1], easting - self.origin[0], -height],
        )
    }
}

/// Geology bodies as prisms and spheres in NED (z down from the ellipsoid).
fn geology_tensor(s: &Scenario, obs_ned: [f64; 3]) -> SymTensor {
    let ground = s.area.ground_height_m;
    let mut t = SymTensor::default();
    for b in &s.geology.prism {
        let p = Prism::new(
            b.north_m,
            b.east_m,
            [b.depth_m[0] - ground, b.depth_m[1] - ground],
            b.density_kg_m3,
        );
        t = t + p.tensor(obs_ned);
    }
    for b in &s.geology.sphere {
        let f = point::sphere(
            b.radius_m,
            b.density_kg_m3,
            [b.north_m, b.east_m, b.depth_m - ground],
            obs_ned,
        );
        t = t + f.tensor;
    }
    t
}

fn validate(s: &Scenario) -> Result<(), SimError> {
    if s.layout != LAYOUT {
        return Err(SimError::Layout(s.layout.clone()));
    }
    let positive = [
        ("plan.speed_m_s", s.plan.speed_m_s),
        ("plan.sample_rate_hz", s.plan.sample_rate_hz),
        ("plan.line_length_m", s.plan.line_length_m),
        ("plan.line_spacing_m", s.plan.line_spacing_m),
        ("plan.turn_rate_deg_s", s.plan.turn_rate_deg_s),
        ("plan.clearance_m", s.plan.clearance_m),
        ("terrain.cell_m", s.terrain.cell_m),
        ("instrument.baseline_m", s.instrument.baseline_m),
        ("dynamics.turbulence_time_s", s.dynamics.turbulence_time_s),
    ];
    for (key, value) in positive {
        if !(value.is_finite() && value > 0.0) {
            return Err(SimError::Value {
                key,
                value,
                what: "expected a positive number",
            });
        }
    }
    if s.plan.flights == 0 || s.plan.flights > s.plan.lines.max(1) {
        return Err(SimError::Value {
            key: "plan.flights",
            value: s.plan.flights as f64,
            what: "expected between 1 and the number of survey lines",
        });
    }
    if !(s.plan.flight_gap_s.is_finite() && s.plan.flight_gap_s >= 0.0) {
        return Err(SimError::Value {
            key: "plan.flight_gap_s",
            value: s.plan.flight_gap_s,
            what: "expected a time of zero or more",
        });
    }
    if s.plan.lines == 0 {
        return Err(SimError::Value {
            key: "plan.lines",
            value: 0.0,
            what: "expected at least one line",
        });
    }
    for id in &s.instrument.pairs {
        if standard_pair(id, 1.0).is_none() {
            return Err(SimError::Pair(id.clone()));
        }
    }
    let ie = &s.instrument;
    let not_negative = [
        (
            "instrument.quadratic_rms_per_m_s2",
            ie.quadratic_rms_per_m_s2,
        ),
        (
            "instrument.cross_axis_rms_per_m_s2",
            ie.cross_axis_rms_per_m_s2,
        ),
    ];
    for (key, value) in not_negative {
        if !(value.is_finite() && value >= 0.0) {
            return Err(SimError::Value {
                key,
                value,
                what: "expected an RMS of zero or more",
            });
        }
    }
    if !ie.temperature_ramp_c_h.is_finite() {
        return Err(SimError::Value {
            key: "instrument.temperature_ramp_c_h",
            value: ie.temperature_ramp_c_h,
            what: "expected a finite rate",
        });
    }
    if let Some(cf) = &s.calibration_flight {
        validate_calibration_flight(s, cf)?;
    }
    s.check_sizes()
        .map_err(|e| SimError::TooLarge {
            key: e.key,
            message: e.message,
        })
        .map(|_| ())
}

fn validate_calibration_flight(s: &Scenario, cf: &CalibrationFlight) -> Result<(), SimError> {
    let within = |key: &'static str, value: f64, lo: f64, hi: f64, what: &'static str| {
        if value.is_finite() && (lo..=hi).contains(&value) {
            Ok(())
        } else {
            Err(SimError::Value { key, value, what })
        }
    };
    within(
        "calibration_flight.altitude_m",
        cf.altitude_m,
        300.0,
        10_000.0,
        "expected 300 to 10 000 m above the ground",
    )?;
    within(
        "calibration_flight.period_s",
        cf.period_s,
        8.0 / s.plan.sample_rate_hz,
        600.0,
        "expected a period of at least 8 samples and at most 600 s",
    )?;
    within(
        "calibration_flight.leg_s",
        cf.leg_s,
        2.0 * cf.period_s,
        3600.0,
        "expected at least two periods (2 × period_s) and at most an hour",
    )?;
    within(
        "calibration_flight.roll_amplitude_deg",
        cf.roll_amplitude_deg,
        0.0,
        45.0,
        "expected a bank of 0 to 45 degrees",
    )?;
    within(
        "calibration_flight.pitch_amplitude_deg",
        cf.pitch_amplitude_deg,
        0.0,
        10.0,
        "expected a pitch of 0 to 10 degrees",
    )?;
    within(
        "calibration_flight.yaw_amplitude_deg",
        cf.yaw_amplitude_deg,
        0.0,
        10.0,
        "expected a heading swing of 0 to 10 degrees",
    )?;
    within(
        "calibration_flight.climb_rate_m_s",
        cf.climb_rate_m_s,
        0.0,
        15.0,
        "expected a rate of climb of 0 to 15 m/s",
    )?;
    within(
        "calibration_flight.surge_amplitude_m_s2",
        cf.surge_amplitude_m_s2,
        0.0,
        5.0,
        "expected an along-track acceleration of 0 to 5 m/s²",
    )?;
    // What the amplitudes mean at this speed and period (the leg's period is rounded to whole
    // periods, `calflight::periods_per_leg`).
    let v = s.plan.speed_m_s;
    let omega = 2.0 * std::f64::consts::PI * calflight::periods_per_leg(cf) as f64 / cf.leg_s;
    within(
        "calibration_flight.pitch_amplitude_deg",
        cf.pitch_amplitude_deg,
        0.0,
        (0.5 * 9.81 / (v * omega)).min(1.0).asin().to_degrees(),
        "at this speed and period the vertical acceleration would exceed half of g",
    )?;
    within(
        "calibration_flight.surge_amplitude_m_s2",
        cf.surge_amplitude_m_s2,
        0.0,
        0.25 * v * omega,
        "at this period the speed would swing by more than a quarter of plan.speed_m_s",
    )?;
    if cf.headings_deg.is_empty() || cf.headings_deg.iter().any(|h| !h.is_finite()) {
        return Err(SimError::Value {
            key: "calibration_flight.headings_deg",
            value: cf.headings_deg.len() as f64,
            what: "expected one or more finite headings (degrees)",
        });
    }
    if cf.manoeuvres.is_empty() {
        return Err(SimError::Value {
            key: "calibration_flight.manoeuvres",
            value: 0.0,
            what: "expected one or more manoeuvres",
        });
    }
    // Consecutive legs in flying order (the headings repeat for each manoeuvre) must turn.
    let seq: Vec<f64> = cf
        .manoeuvres
        .iter()
        .flat_map(|_| cf.headings_deg.iter().copied())
        .collect();
    for w in seq.windows(2) {
        let d = (w[1] - w[0]).rem_euclid(360.0);
        if d.min(360.0 - d) < 30.0 {
            return Err(SimError::Value {
                key: "calibration_flight.headings_deg",
                value: w[1],
                what: "consecutive legs (the headings repeat for each manoeuvre) must differ \
                       in heading by 30 degrees or more",
            });
        }
    }
    let n_legs = seq.len() as i64;
    let first = cf.first_line;
    let overlaps = |a: i64, count: i64| count > 0 && first < a + count && a < first + n_legs;
    if first <= 0
        || overlaps(s.plan.first_line, s.plan.lines as i64)
        || overlaps(s.plan.first_tie, s.plan.ties as i64)
    {
        return Err(SimError::Value {
            key: "calibration_flight.first_line",
            value: first as f64,
            what: "expected a positive line number whose legs do not reuse the survey's line or \
                   tie numbers",
        });
    }
    Ok(())
}

/// Runs a scenario.
pub fn simulate(s: &Scenario) -> Result<Simulation, SimError> {
    validate(s)?;
    let seed = s.seed;
    let rate = s.plan.sample_rate_hz;
    let surface = Surface::new(&s.area, &s.terrain, seed);
    let mut track = path::fly(&s.plan, &s.dynamics, &surface, s.area.start_time_s);
    let n = track.time_s.len();
    if let Some(b) = &s.badly_flown {
        hold_off_plan(&mut track, b.line, b.clearance_offset_m, rate);
    }

    // DEM over the path plus the margin (the calibration flight's path too, so that its recipe
    // finds terrain under all of it), and its mass relative to its mean elevation.
    let (nmin, nmax) = minmax(&track.north);
    let (emin, emax) = minmax(&track.east);
    let centre = [0.5 * (nmin + nmax), 0.5 * (emin + emax)];
    let (mut dn, mut de) = ([nmin, nmax], [emin, emax]);
    if let Some(cf) = &s.calibration_flight {
        // The path's extent does not depend on its start time.
        let height = s.area.ground_height_m + cf.altitude_m;
        let cal = calflight::fly(cf, &s.plan, centre, height, 0.0);
        let (a, b) = minmax(&cal.north);
        let (c, d) = minmax(&cal.east);
        dn = [dn[0].min(a), dn[1].max(b)];
        de = [de[0].min(c), de[1].max(d)];
    }
    let m = s.terrain.margin_m;
    let dem = surface.dem([dn[0] - m, dn[1] + m], [de[0] - m, de[1] + m]);
    let reference = dem.mean();
    let terrain_truth = TerrainTruth::new(&dem, reference, s.terrain.density_kg_m3);

    // Local coordinates are UTM grid metres from the origin's projection (zone of the origin): the
    // frame the DEM and the products use.
    let (tm, e0, n0) = map_origin(s)?;
    let fields = path_fields(s, &track, &tm, [e0, n0], &terrain_truth);

    let ie = &s.instrument;
    let pairs: Vec<PairGeometry> = ie
        .pairs
        .iter()
        .filter_map(|id| standard_pair(id, ie.baseline_m))
        .collect();
    let line_offsets = draw_line_offsets(&track.line, s.instrument.line_offset_e_rms, seed);
    let instrument = draw_instrument(s, &pairs);

    // The flights: the path cut in the transits between legs, each flight its own log.
    let ranges = flights::ranges(&track.line, &flights::leg_groups(&s.plan));
    let part = SurveyPart {
        s,
        track: &track,
        fields: &fields,
        pairs: &pairs,
        line_offsets: &line_offsets,
        surface: &surface,
        instrument: &instrument,
    };
    let logs: Vec<FlightLog> = ranges
        .iter()
        .enumerate()
        .map(|(k, r)| flight_log(&part, k, r.clone(), k as f64 * s.plan.flight_gap_s))
        .collect();

    // The calibration flight, after the survey: a flight of its own (its own random streams, those
    // of the flight after the last survey flight), over the middle of the surveyed area.
    let calibration = match &s.calibration_flight {
        None => None,
        Some(cf) => {
            let last = logs
                .last()
                .and_then(|f| f.column("time"))
                .and_then(|t| t.last().copied())
                .unwrap_or(s.area.start_time_s);
            let start = last + 1.0 / rate + s.plan.flight_gap_s;
            let height = s.area.ground_height_m + cf.altitude_m;
            let cal_track = calflight::fly(cf, &s.plan, centre, height, start);
            let cal_fields = path_fields(s, &cal_track, &tm, [e0, n0], &terrain_truth);
            let cal_part = SurveyPart {
                track: &cal_track,
                fields: &cal_fields,
                ..part
            };
            let m = cal_track.time_s.len();
            let log = flight_log(&cal_part, s.plan.flights, 0..m, 0.0);
            Some(CalibrationRun {
                log,
                legs: calflight::legs(cf, &s.plan, centre),
                track: cal_track,
                truth: cal_fields.truth,
            })
        }
    };
    let truth = fields.truth;

    // Geology truth on a grid at the mean survey height over the surveyed area.
    let mean_h = track.height.iter().sum::<f64>() / n.max(1) as f64;
    let cell = s.plan.line_spacing_m / 2.0;
    let gn: Vec<f64> = (0..=((nmax - nmin) / cell).ceil() as usize)
        .map(|k| nmin + k as f64 * cell)
        .collect();
    let ge: Vec<f64> = (0..=((emax - emin) / cell).ceil() as usize)
        .map(|k| emin + k as f64 * cell)
        .collect();
    let values: Vec<SymTensor> = (0..gn.len() * ge.len())
        .into_par_iter()
        .map(|k| geology_tensor(s, [gn[k / ge.len()], ge[k % ge.len()], -mean_h]))
        .collect();
    let grid = TruthGrid {
        height_m: mean_h,
        north: gn,
        east: ge,
        values,
    };

    Ok(Simulation {
        flights: logs,
        line: track.line.clone(),
        pairs,
        sample_rate_hz: rate,
        truth,
        grid,
        dem,
        reference_level_m: reference,
        track,
        projection: Projection {
            zone: TransverseMercator::utm_zone_of(s.area.origin_lon_deg),
            south: s.area.origin_lat_deg < 0.0,
            false_origin: [e0, n0],
        },
        line_offsets,
        calibration,
    })
}

/// What the flights read along a path: geodetic positions (rad), the meridian convergence (rad),
/// normal gravity (NED, m/s²) and the truth tensors.
struct PathFields {
    lat: Vec<f64>,
    lon: Vec<f64>,
    gamma: Vec<f64>,
    gravity_n: Vec<[f64; 3]>,
    truth: Truth,
}

/// The fields along `track`: geodetic positions by the inverse projection, tensors computed in the
/// grid frame turned to true north by the meridian convergence γ.
fn path_fields(
    s: &Scenario,
    track: &Track,
    tm: &TransverseMercator,
    origin: [f64; 2],
    terrain_truth: &TerrainTruth,
) -> PathFields {
    let n = track.time_s.len();
    let [e0, n0] = origin;
    let geo: Vec<(f64, f64, f64)> = (0..n)
        .into_par_iter()
        .map(|i| {
            let (la, lo) = tm.inverse(e0 + track.east[i], n0 + track.north[i]);
            let (_, _, gamma, _) = tm.forward(la, lo);
            (la, lo, gamma)
        })
        .collect();
    let lat: Vec<f64> = geo.iter().map(|g| g.0).collect();
    let lon: Vec<f64> = geo.iter().map(|g| g.1).collect();
    let gamma: Vec<f64> = geo.iter().map(|g| g.2).collect();
    let to_true = |t: SymTensor, g: f64| t.rotated(&rz(g));

    let points: Vec<[f64; 3]> = (0..n)
        .map(|i| [track.north[i], track.east[i], track.height[i]])
        .collect();
    let terrain_t: Vec<SymTensor> = terrain_truth
        .tensor(&points)
        .into_iter()
        .zip(&gamma)
        .map(|(t, g)| to_true(t, *g))
        .collect();
    let nf = NormalField::new(&GRS80);
    let normal_t: Vec<SymTensor> = (0..n)
        .into_par_iter()
        .map(|i| nf.gravitational_tensor_ned(lat[i], track.height[i]))
        .collect();
    let geology_t: Vec<SymTensor> = points
        .par_iter()
        .zip(&gamma)
        .map(|(p, g)| to_true(geology_tensor(s, [p[0], p[1], -p[2]]), *g))
        .collect();
    let gravity_n: Vec<[f64; 3]> = (0..n)
        .into_par_iter()
        .map(|i| nf.gravity_ned(lat[i], track.height[i]))
        .collect();
    PathFields {
        lat,
        lon,
        gamma,
        gravity_n,
        truth: Truth {
            north: track.north.clone(),
            east: track.east.clone(),
            height: track.height.clone(),
            geology: geology_t,
            terrain: terrain_t,
            normal: normal_t,
        },
    }
}

/// What the per-flight part of the simulation reads from the survey-wide part: the path, its
/// geodetic positions and convergence, the normal gravity, the truth, the pairs and line offsets.
#[derive(Clone, Copy)]
struct SurveyPart<'a> {
    s: &'a Scenario,
    track: &'a Track,
    fields: &'a PathFields,
    pairs: &'a [PairGeometry],
    line_offsets: &'a [(i64, SymTensor)],
    surface: &'a Surface,
    /// The instrument's own errors, per pair and accelerometer (a, b).
    instrument: &'a [[InstrumentDraw; 2]],
}

/// First stream of the errors drawn once for the instrument (`draw_instrument`): above every
/// per-flight stream (`flights::STREAMS_PER_FLIGHT` × flight + x) of any plausible survey.
const INSTRUMENT_STREAMS: u64 = 1 << 40;

/// Errors of one accelerometer that belong to the instrument, not to a flight: drawn once, the same
/// in every flight. Scale, misalignment and temperature coefficient replace the per-flight draws
/// only when the scenario asks for linear errors per instrument.
#[derive(Clone, Copy, Debug)]
struct InstrumentDraw {
    quadratic: f64,
    cross_u: f64,
    cross_v: f64,
    scale: f64,
    misalign: Vec3,
    tempco: f64,
}

/// Two unit axes perpendicular to `axis` and to each other: the directions of misalignment and
/// of the cross-axis terms.
fn perpendicular_axes(axis: &Vec3) -> (Vec3, Vec3) {
    let any = if axis[0].abs() < 0.9 {
        [1.0, 0.0, 0.0]
    } else {
        [0.0, 1.0, 0.0]
    };
    let u = unit(mat3::cross(axis, &any));
    let v = mat3::cross(axis, &u);
    (u, v)
}

/// The instrument's own errors, one stream per accelerometer (stream `INSTRUMENT_STREAMS` + 2k + j
/// for pair k, accelerometer j), drawn in the order K2, K_u, K_v, scale, two misalignment angles,
/// temperature coefficient.
fn draw_instrument(s: &Scenario, pairs: &[PairGeometry]) -> Vec<[InstrumentDraw; 2]> {
    let ie = &s.instrument;
    pairs
        .iter()
        .enumerate()
        .map(|(k, p)| {
            std::array::from_fn(|j| {
                let mut r = Rng::new(s.seed, INSTRUMENT_STREAMS + 2 * k as u64 + j as u64);
                let (u, v) = perpendicular_axes(&p.axis);
                let quadratic = ie.quadratic_rms_per_m_s2 * r.normal();
                let cross_u = ie.cross_axis_rms_per_m_s2 * r.normal();
                let cross_v = ie.cross_axis_rms_per_m_s2 * r.normal();
                let scale = ie.scale_rms * r.normal();
                let (m1, m2) = (
                    ie.misalignment_rms_rad * r.normal(),
                    ie.misalignment_rms_rad * r.normal(),
                );
                InstrumentDraw {
                    quadratic,
                    cross_u,
                    cross_v,
                    scale,
                    misalign: std::array::from_fn(|c| m1 * u[c] + m2 * v[c]),
                    tempco: ie.temperature_coefficient_rms_m_s2_c * r.normal(),
                }
            })
        })
        .collect()
}

/// The log of flight `flight` (0-based), the path samples `range`: platform motion, turbulence,
/// instrument and navigation errors drawn afresh for the flight (its own random streams, its own
/// biases, drifts and temperature), time shifted by `time_shift_s` (the ground time between
/// flights).
fn flight_log(
    part: &SurveyPart<'_>,
    flight: usize,
    range: Range<usize>,
    time_shift_s: f64,
) -> FlightLog {
    let s = part.s;
    let rate = s.plan.sample_rate_hz;
    let streams = FlightStreams {
        seed: s.seed,
        flight,
    };
    let track = &part.track.slice(range.clone(), time_shift_s);
    let n = track.time_s.len();
    let f = part.fields;
    let path = FlightPath {
        track,
        lat: &f.lat[range.clone()],
        lon: &f.lon[range.clone()],
        gamma: &f.gamma[range.clone()],
        gravity_n: &f.gravity_n[range.clone()],
        total: range.clone().map(|i| f.truth.total(i)).collect(),
    };
    let waves = platform_waves(s, &mut streams.rng(1));
    let turb = turbulence(s, track, streams, rate);
    let (att, omega) = platform_motion(s, &path, &waves, rate);
    let alpha = angular_acceleration(&omega, rate);
    let ie = &s.instrument;
    let temperature = sensor_temperature(ie, &mut streams.rng(20), n, rate);
    let t0 = temperature.first().copied().unwrap_or(31.0);
    let accels = draw_accelerometers(part, streams, n, rate);
    let pair_errors = pair_errors(part.pairs, &accels);
    let aircraft = AircraftAttitude::draw(s, track, streams, rate);
    let sensor = SensorMotion {
        path: &path,
        turb: &turb,
        att: &att,
        omega: &omega,
        alpha: &alpha,
        aircraft: &aircraft,
        line_offsets: part.line_offsets,
        self_gradient_e: ie.self_gradient_e,
    };
    let readings = Readings {
        temperature: &temperature,
        t0,
        accels: &accels,
        nonlinear: ie.quadratic_rms_per_m_s2 != 0.0 || ie.cross_axis_rms_per_m_s2 != 0.0,
        rate,
    };
    let (mut pair_cols, fs_all) = pair_outputs(&sensor, &readings, part.pairs);
    let mut columns = navigation_columns(ie, &path, &att, streams);
    columns.extend(inertial_columns(ie, &omega, &fs_all, streams));
    columns.extend(temperature_column(
        ie.temperature_log,
        &temperature,
        streams,
    ));
    columns.push(clearance_column(track, part.surface, streams));
    if ie.self_gradient_e != 0.0 {
        columns.extend(aircraft.columns(&att));
    }
    for (k, p) in part.pairs.iter().enumerate() {
        columns.push((format!("{}_a", p.id), std::mem::take(&mut pair_cols[2 * k])));
        columns.push((
            format!("{}_b", p.id),
            std::mem::take(&mut pair_cols[2 * k + 1]),
        ));
    }
    FlightLog {
        columns,
        line: track.line.clone(),
        first_sample: range.start,
        pair_errors,
        accelerometers: accels.iter().map(|[a, b]| [a.e, b.e]).collect(),
        time_ref_s: track.time_s.first().copied().unwrap_or(0.0),
        temperature_ref_c: t0,
    }
}

/// A flight's random streams: flight k draws stream `x + k × STREAMS_PER_FLIGHT`, so flight 0 draws
/// from the streams a single-flight survey always used.
#[derive(Clone, Copy)]
struct FlightStreams {
    seed: u64,
    flight: usize,
}

impl FlightStreams {
    /// A generator on the flight's stream `x`.
    fn rng(&self, x: u64) -> Rng {
        Rng::new(
            self.seed,
            x + flights::STREAMS_PER_FLIGHT * self.flight as u64,
        )
    }
}

/// A flight's part of the survey's path: the track and, per sample, its geodetic position
/// (radians), grid convergence γ (rad), normal gravity (NED, m/s²) and the total true tensor (NED,
/// s⁻²).
struct FlightPath<'a> {
    track: &'a Track,
    lat: &'a [f64],
    lon: &'a [f64],
    gamma: &'a [f64],
    gravity_n: &'a [[f64; 3]],
    total: Vec<SymTensor>,
}

/// Radius of curvature in the prime vertical of GRS80 at geodetic latitude `la` (rad), m.
fn radius_prime_vertical(la: f64) -> f64 {
    let e2 = GRS80.e2();
    GRS80.a / (1.0 - e2 * la.sin().powi(2)).sqrt()
}

/// Radius of curvature in the meridian of GRS80 at geodetic latitude `la` (rad), m.
fn radius_meridian(la: f64) -> f64 {
    let e2 = GRS80.e2();
    GRS80.a * (1.0 - e2) / (1.0 - e2 * la.sin().powi(2)).powf(1.5)
}

/// The residual platform rotation: eight sinusoids in the scenario's platform band, each as
/// (amplitude per sensor axis, rad/s; frequency, Hz; phase, rad), drawn from `rng`.
fn platform_waves(s: &Scenario, rng: &mut Rng) -> Vec<(Vec3, f64, f64)> {
    let [f_lo, f_hi] = s.dynamics.platform_band_hz;
    (0..8)
        .map(|_| {
            let a = s.dynamics.platform_rate_rad_s / 2.0;
            (
                [a * rng.normal(), a * rng.normal(), a * rng.normal()],
                f_lo + (f_hi - f_lo) * rng.uniform(),
                2.0 * std::f64::consts::PI * rng.uniform(),
            )
        })
        .collect()
}

/// Turbulence along the track, NED, m/s², one Gauss–Markov series per axis (streams 10–12; the
/// vertical three times the horizontal), plus the badly flown line's extra vertical turbulence
/// from its own stream (40), so that every other series is as without the bad line.
fn turbulence(s: &Scenario, track: &Track, streams: FlightStreams, rate: f64) -> Vec<Vec<f64>> {
    let n = track.time_s.len();
    let tau = s.dynamics.turbulence_time_s;
    let mut turb: Vec<Vec<f64>> = (0..3)
        .map(|k| {
            let sigma = if k == 2 {
                s.dynamics.turbulence_m_s2
            } else {
                s.dynamics.turbulence_m_s2 / 3.0
            };
            noise::gauss_markov(&mut streams.rng(10 + k), n, sigma, tau, rate)
        })
        .collect();
    if let Some(b) = s.badly_flown.as_ref().filter(|b| b.turbulence_m_s2 > 0.0) {
        let extra = noise::gauss_markov(&mut streams.rng(40), n, b.turbulence_m_s2, tau, rate);
        for i in 0..n {
            if track.line[i] == b.line {
                turb[2][i] += extra[i];
            }
        }
    }
    turb
}

/// The attitude of the stabilised platform in NED (true heading = grid track + convergence + crab
/// (+ sideslip of a yaw manoeuvre), roll and pitch the residual rotation's angles, rad) and its
/// inertial angular rate in the sensor frame, rad/s: Earth rate, transport rate and turn rate
/// turned into the sensor frame, plus the residual rotation `waves`.
fn platform_motion(
    s: &Scenario,
    path: &FlightPath<'_>,
    waves: &[(Vec3, f64, f64)],
    rate: f64,
) -> (Vec<Attitude>, Vec<Vec3>) {
    let (track, lat, gamma) = (path.track, path.lat, path.gamma);
    let n = track.time_s.len();
    let mut att = Vec::with_capacity(n);
    let mut omega = Vec::with_capacity(n);
    #[allow(clippy::needless_range_loop)] // i indexes six parallel series
    for i in 0..n {
        let t = i as f64 / rate;
        let mut w_res = [0.0; 3];
        let mut ang = [0.0; 3];
        for (a, f, ph) in waves {
            let arg = 2.0 * std::f64::consts::PI * f * t + ph;
            for k in 0..3 {
                w_res[k] += a[k] * arg.sin();
                ang[k] -= a[k] * arg.cos() / (2.0 * std::f64::consts::PI * f);
            }
        }
        let mut heading =
            (track.track_deg[i] + s.dynamics.crab_deg).to_radians() + gamma[i] + ang[2];
        if let Some(b) = track.sideslip.get(i) {
            heading += b;
        }
        let a = Attitude {
            roll: ang[0],
            pitch: ang[1],
            heading,
        };
        let c = a.c_sn();
        let v_true = mat3::mul_vec(&rz(gamma[i]), &track.velocity[i]);
        let (vn, ve) = (v_true[0], v_true[1]);
        let (sl, cl) = lat[i].sin_cos();
        let h = track.height[i];
        let mut w_n = [
            GRS80.omega * cl + ve / (radius_prime_vertical(lat[i]) + h),
            -vn / (radius_meridian(lat[i]) + h),
            -GRS80.omega * sl - ve * sl / cl / (radius_prime_vertical(lat[i]) + h)
                + track.track_rate[i],
        ];
        if let Some(rate_b) = track.sideslip_rate.get(i) {
            w_n[2] += rate_b;
        }
        let w_s = mat3::mul_vec(&mat3::transpose(&c), &w_n);
        omega.push([w_s[0] + w_res[0], w_s[1] + w_res[1], w_s[2] + w_res[2]]);
        att.push(a);
    }
    (att, omega)
}

/// Angular acceleration, sensor frame, rad/s²: central differences of the sensor-frame rate
/// `omega` (rad/s) sampled at `rate` Hz, one-sided at the ends.
fn angular_acceleration(omega: &[Vec3], rate: f64) -> Vec<Vec3> {
    let n = omega.len();
    (0..n)
        .map(|i| {
            let (a, b) = (i.saturating_sub(1), (i + 1).min(n - 1));
            let span = (b - a) as f64 / rate;
            if span > 0.0 {
                std::array::from_fn(|k| (omega[b][k] - omega[a][k]) / span)
            } else {
                [0.0; 3]
            }
        })
        .collect()
}

/// The sensor's true temperature, °C: the set-point plus a slow Gauss–Markov wander (600 s) drawn
/// from `rng`, plus the scenario's ramp.
fn sensor_temperature(ie: &InstrumentErrors, rng: &mut Rng, n: usize, rate: f64) -> Vec<f64> {
    let slow = noise::gauss_markov(rng, n, ie.temperature_swing_c, 600.0, rate);
    if ie.temperature_ramp_c_h != 0.0 {
        let per_sample = ie.temperature_ramp_c_h / 3600.0 / rate;
        slow.iter()
            .enumerate()
            .map(|(i, v)| 31.0 + v + per_sample * i as f64)
            .collect()
    } else {
        slow.iter().map(|v| 31.0 + v).collect()
    }
}

/// One accelerometer of a flight: its errors and its noise series, m/s².
struct Acc {
    e: AccelerometerErrors,
    noise: Vec<f64>,
}

/// Every pair's two accelerometers for the flight, one stream each (100 + 2k + j for pair k,
/// accelerometer j): misalignment (perpendicular to the axis), white plus flicker noise, scale,
/// bias, drift and temperature coefficient drawn afresh; the nonlinear terms, and with linear
/// errors per instrument scale, misalignment and temperature coefficient, the instrument's own.
fn draw_accelerometers(
    part: &SurveyPart<'_>,
    streams: FlightStreams,
    n: usize,
    rate: f64,
) -> Vec<[Acc; 2]> {
    let ie = &part.s.instrument;
    let white_density = ie.noise_e_rt_hz * EOTVOS * ie.baseline_m / std::f64::consts::SQRT_2;
    let per_instrument = part.s.linear_errors_per_instrument();
    part.pairs
        .iter()
        .enumerate()
        .map(|(k, p)| {
            std::array::from_fn(|j| {
                let mut r = streams.rng(100 + 2 * k as u64 + j as u64);
                let (u, v) = perpendicular_axes(&p.axis);
                let (m1, m2) = (
                    ie.misalignment_rms_rad * r.normal(),
                    ie.misalignment_rms_rad * r.normal(),
                );
                let mut nz = noise::white(&mut r, n, white_density, rate);
                let fl = noise::flicker(&mut r, n, white_density, ie.flicker_corner_hz, rate);
                for (a, b) in nz.iter_mut().zip(fl) {
                    *a += b;
                }
                let mut e = AccelerometerErrors {
                    scale: ie.scale_rms * r.normal(),
                    misalignment: [
                        m1 * u[0] + m2 * v[0],
                        m1 * u[1] + m2 * v[1],
                        m1 * u[2] + m2 * v[2],
                    ],
                    bias: ie.bias_rms_m_s2 * r.normal(),
                    drift: ie.drift_rms_m_s2_h * r.normal() / 3600.0,
                    tempco: ie.temperature_coefficient_rms_m_s2_c * r.normal(),
                    quadratic: 0.0,
                    cross_u: 0.0,
                    cross_v: 0.0,
                    u_axis: u,
                    v_axis: v,
                };
                let d = &part.instrument[k][j];
                (e.quadratic, e.cross_u, e.cross_v) = (d.quadratic, d.cross_u, d.cross_v);
                if per_instrument {
                    (e.scale, e.misalignment, e.tempco) = (d.scale, d.misalign, d.tempco);
                }
                Acc { e, noise: nz }
            })
        })
        .collect()
}

/// The injected errors of each pair's difference a − b, from its accelerometers' errors (κ and the
/// common-mode axis in the sensor frame, bias m/s², drift m/s²/s, temperature m/s²/°C, quadratic
/// form (m/s²)⁻¹).
fn pair_errors(pairs: &[PairGeometry], accels: &[[Acc; 2]]) -> Vec<PairErrors> {
    pairs
        .iter()
        .zip(accels)
        .map(|(p, [a, b])| {
            let (ea, eb) = (&a.e, &b.e);
            PairErrors {
                kappa: std::array::from_fn(|k| {
                    (1.0 + ea.scale) * (p.axis[k] + ea.misalignment[k])
                        - (1.0 + eb.scale) * (p.axis[k] + eb.misalignment[k])
                }),
                common_axis: std::array::from_fn(|k| {
                    0.5 * ((1.0 + ea.scale) * (p.axis[k] + ea.misalignment[k])
                        + (1.0 + eb.scale) * (p.axis[k] + eb.misalignment[k]))
                }),
                bias: ea.bias - eb.bias,
                drift: ea.drift - eb.drift,
                tempco: ea.tempco - eb.tempco,
                quadratic: quadratic_form(&p.axis, ea, eb),
            }
        })
        .collect()
}

/// RMS of the gusts in the aircraft's roll relative to the level platform, degrees.
const ROLL_GUST: f64 = 1.5;
/// RMS of the gusts in the aircraft's pitch about its cruise pitch, degrees.
const PITCH_GUST: f64 = 0.5;

/// The aircraft's attitude relative to the level platform and the self-gradient it causes: bank in
/// turns plus gusts (1.5° RMS in roll, 0.5° in pitch about a 2° cruise pitch, streams 31 and 32),
/// and a fixed trace-free pattern per axis (stream 30) scaled by them.
struct AircraftAttitude {
    /// Self-gradient pattern per unit of relative roll and of relative pitch (in gust RMS),
    /// sensor frame, dimensionless (scaled by the scenario's amplitude).
    pattern: (SymTensor, SymTensor),
    /// Relative roll and pitch per sample, rad.
    roll: Vec<f64>,
    pitch: Vec<f64>,
}

impl AircraftAttitude {
    /// The patterns and the relative attitude along `track`.
    fn draw(s: &Scenario, track: &Track, streams: FlightStreams, rate: f64) -> Self {
        let n = track.time_s.len();
        let mut sg_rng = streams.rng(30);
        let pattern = |r: &mut Rng| -> SymTensor {
            let mut t = SymTensor::from_array(std::array::from_fn(|_| r.normal()));
            let tr = t.trace() / 3.0;
            t.xx -= tr;
            t.yy -= tr;
            t.zz -= tr;
            t
        };
        let (pat_roll, pat_pitch) = (pattern(&mut sg_rng), pattern(&mut sg_rng));
        let gust = noise::gauss_markov(&mut streams.rng(31), n, ROLL_GUST.to_radians(), 3.0, rate);
        let gust_pitch =
            noise::gauss_markov(&mut streams.rng(32), n, PITCH_GUST.to_radians(), 3.0, rate);
        let roll: Vec<f64> = (0..n)
            .map(|i| (track.track_rate[i] * s.plan.speed_m_s / 9.81).atan() + gust[i])
            .collect();
        let pitch: Vec<f64> = (0..n).map(|i| 2f64.to_radians() + gust_pitch[i]).collect();
        Self {
            pattern: (pat_roll, pat_pitch),
            roll,
            pitch,
        }
    }

    /// `g_s` (s⁻², sensor frame) plus the self-gradient at sample `i` for amplitude `amp` (s⁻²): the
    /// contribution of one gust-RMS of relative roll (or pitch) per unit pattern component,
    /// G_self = A·(Δφ/σφ)·P_roll + A·(Δθ/σθ)·P_pitch.
    fn add_self_gradient(&self, g_s: SymTensor, i: usize, amp: f64) -> SymTensor {
        let d_roll = self.roll[i] / ROLL_GUST.to_radians();
        let d_pitch = (self.pitch[i] - 2f64.to_radians()) / PITCH_GUST.to_radians();
        g_s + self.pattern.0.scaled(amp * d_roll) + self.pattern.1.scaled(amp * d_pitch)
    }

    /// The log's aircraft attitude channels, degrees: relative roll and pitch, and the heading
    /// (the platform's, which follows the aircraft).
    fn columns(&self, att: &[Attitude]) -> [(String, Vec<f64>); 3] {
        [
            (
                "ac_roll".into(),
                self.roll.iter().map(|v| v.to_degrees()).collect(),
            ),
            (
                "ac_pitch".into(),
                self.pitch.iter().map(|v| v.to_degrees()).collect(),
            ),
            (
                "ac_heading".into(),
                att.iter()
                    .map(|a| a.heading.to_degrees().rem_euclid(360.0))
                    .collect(),
            ),
        ]
    }
}

/// What the sensor undergoes per sample: the path, turbulence (NED, m/s²), platform attitude and
/// rate (rad/s, sensor frame), angular acceleration (rad/s²), relative aircraft attitude, line
/// offsets (NED, s⁻²) and the self-gradient amplitude (E).
struct SensorMotion<'a> {
    path: &'a FlightPath<'a>,
    turb: &'a [Vec<f64>],
    att: &'a [Attitude],
    omega: &'a [Vec3],
    alpha: &'a [Vec3],
    aircraft: &'a AircraftAttitude,
    line_offsets: &'a [(i64, SymTensor)],
    self_gradient_e: f64,
}

impl SensorMotion<'_> {
    /// Specific force at the sensor origin at sample `i`, sensor frame, m/s²: the kinematic
    /// acceleration (grid to true north) plus turbulence, less gravity, turned by `ct` = C_snᵀ.
    fn specific_force(&self, i: usize, ct: &Mat3) -> Vec3 {
        let p = self.path;
        let acc_true = mat3::mul_vec(&rz(p.gamma[i]), &p.track.accel[i]);
        let a_kin = [
            acc_true[0] + self.turb[0][i],
            acc_true[1] + self.turb[1][i],
            acc_true[2] + self.turb[2][i],
        ];
        let f_n = [
            a_kin[0] - p.gravity_n[i][0],
            a_kin[1] - p.gravity_n[i][1],
            a_kin[2] - p.gravity_n[i][2],
        ];
        mat3::mul_vec(ct, &f_n)
    }

    /// The gradient the sensor sees at sample `i`, sensor frame, s⁻²: the total true tensor turned
    /// by `ct` = C_snᵀ, plus the self-gradient and the line's injected offset.
    fn gradient(&self, i: usize, ct: &Mat3) -> SymTensor {
        let mut g_s = self.path.total[i].rotated(ct);
        if self.self_gradient_e != 0.0 {
            g_s = self
                .aircraft
                .add_self_gradient(g_s, i, self.self_gradient_e * EOTVOS);
        }
        let line = self.path.track.line[i];
        if line > 0
            && let Some((_, o)) = self.line_offsets.iter().find(|(l, _)| *l == line)
        {
            g_s = g_s + o.rotated(ct);
        }
        g_s
    }

    /// Ω̇ + ΩΩ − G at sample `i` (sensor frame, s⁻²) for the gradient `g_s`: f(r) = f(O) + this·r.
    fn lever_matrix(&self, i: usize, g_s: &SymTensor) -> Mat3 {
        let w = self.omega[i];
        let wd = skew(&self.alpha[i]);
        let ww = mat3::mul(&skew(&w), &skew(&w));
        let gm = g_s.to_matrix();
        std::array::from_fn(|a| std::array::from_fn(|b| wd[a][b] + ww[a][b] - gm[a][b]))
    }
}

/// What turns the force at an accelerometer into its reading: the true temperature (°C) and its
/// value at the first sample, the accelerometers, whether the nonlinear terms are on, the sample
/// rate (Hz).
struct Readings<'a> {
    temperature: &'a [f64],
    t0: f64,
    accels: &'a [[Acc; 2]],
    nonlinear: bool,
    rate: f64,
}

impl Readings<'_> {
    /// The reading of accelerometer `acc` (pair axis `axis`) at sample `i` for the specific force
    /// `f` at it (sensor frame, m/s²), m/s²: a = (1 + ε)(n + δ)·f + β + β̇·t + τ·(T − T0) + noise,
    /// plus the second-order and cross-coupling terms of the input (misaligned) axis with the two
    /// axes across it (IEEE Std 1293-2018) when on.
    fn reading(&self, acc: &Acc, axis: &Vec3, i: usize, f: &Vec3) -> f64 {
        let (e, noise) = (&acc.e, &acc.noise);
        let t = i as f64 / self.rate;
        let axis = [
            axis[0] + e.misalignment[0],
            axis[1] + e.misalignment[1],
            axis[2] + e.misalignment[2],
        ];
        let mut out = (1.0 + e.scale) * mat3::dot(&axis, f)
            + e.bias
            + e.drift * t
            + e.tempco * (self.temperature[i] - self.t0)
            + noise[i];
        if self.nonlinear {
            let fi = mat3::dot(&axis, f);
            out += e.quadratic * fi * fi
                + fi * (e.cross_u * mat3::dot(&e.u_axis, f) + e.cross_v * mat3::dot(&e.v_axis, f));
        }
        out
    }
}

/// Every accelerometer's reading per sample (m/s², columns a then b per pair, in the order of
/// `pairs`), from f(r) = f(O) + (Ω̇ + ΩΩ − G)·r at its position r = centre ± baseline/2 (sensor
/// frame, m); and the specific force at the sensor origin per sample (sensor frame, m/s²).
fn pair_outputs(
    sensor: &SensorMotion<'_>,
    readings: &Readings<'_>,
    pairs: &[PairGeometry],
) -> (Vec<Vec<f64>>, Vec<Vec3>) {
    let n = sensor.att.len();
    let mut pair_cols: Vec<Vec<f64>> = vec![Vec::with_capacity(n); 2 * pairs.len()];
    let mut fs_all = Vec::with_capacity(n);
    for i in 0..n {
        let c = sensor.att[i].c_sn();
        let ct = mat3::transpose(&c);
        let f_s = sensor.specific_force(i, &ct);
        fs_all.push(f_s);
        let g_s = sensor.gradient(i, &ct);
        let m = sensor.lever_matrix(i, &g_s);
        for (k, p) in pairs.iter().enumerate() {
            for (j, sign) in [(0usize, 0.5), (1usize, -0.5)] {
                let r = [
                    p.center[0] + sign * p.baseline[0],
                    p.center[1] + sign * p.baseline[1],
                    p.center[2] + sign * p.baseline[2],
                ];
                let mr = mat3::mul_vec(&m, &r);
                let f = [f_s[0] + mr[0], f_s[1] + mr[1], f_s[2] + mr[2]];
                pair_cols[2 * k + j].push(readings.reading(&readings.accels[k][j], &p.axis, i, &f));
            }
        }
    }
    (pair_cols, fs_all)
}

/// The logged navigation with its errors (streams 200 + channel 0–5): time (s), position
/// (degrees, m) and attitude (degrees; heading in [0, 360)).
fn navigation_columns(
    ie: &InstrumentErrors,
    path: &FlightPath<'_>,
    att: &[Attitude],
    streams: FlightStreams,
) -> Vec<(String, Vec<f64>)> {
    let (track, lat, lon) = (path.track, path.lat, path.lon);
    let n = track.time_s.len();
    let nav_rng = |channel: u64| streams.rng(200 + channel);
    let pos_noise =
        |r: &mut Rng, sd: f64| -> Vec<f64> { (0..n).map(|_| sd * r.normal()).collect() };
    let (dn, de, dh) = (
        pos_noise(&mut nav_rng(0), ie.position_noise_m),
        pos_noise(&mut nav_rng(1), ie.position_noise_m),
        pos_noise(&mut nav_rng(2), ie.position_noise_m),
    );
    let att_noise: Vec<Vec<f64>> = (0..3)
        .map(|k| pos_noise(&mut nav_rng(3 + k), ie.attitude_noise_deg))
        .collect();
    vec![
        ("time".into(), track.time_s.clone()),
        (
            "lat".into(),
            (0..n)
                .map(|i| (lat[i] + dn[i] / radius_meridian(lat[i])).to_degrees())
                .collect(),
        ),
        (
            "lon".into(),
            (0..n)
                .map(|i| {
                    (lon[i] + de[i] / (radius_prime_vertical(lat[i]) * lat[i].cos())).to_degrees()
                })
                .collect(),
        ),
        (
            "height".into(),
            (0..n).map(|i| track.height[i] + dh[i]).collect(),
        ),
        (
            "roll".into(),
            (0..n)
                .map(|i| att[i].roll.to_degrees() + att_noise[0][i])
                .collect(),
        ),
        (
            "pitch".into(),
            (0..n)
                .map(|i| att[i].pitch.to_degrees() + att_noise[1][i])
                .collect(),
        ),
        (
            "heading".into(),
            (0..n)
                .map(|i| (att[i].heading.to_degrees() + att_noise[2][i]).rem_euclid(360.0))
                .collect(),
        ),
    ]
}

/// The logged inertial channels with their errors (streams 200 + channel 10–12 and 20–22): the
/// gyro rates (sensor axes, rad/s, the true `omega` with a bias and white noise) and the specific
/// force (sensor axes, m/s², the true `fs_all` with white noise).
fn inertial_columns(
    ie: &InstrumentErrors,
    omega: &[Vec3],
    fs_all: &[Vec3],
    streams: FlightStreams,
) -> Vec<(String, Vec<f64>)> {
    let n = omega.len();
    let nav_rng = |channel: u64| streams.rng(200 + channel);
    let gyro: Vec<Vec<f64>> = (0..3)
        .map(|k| {
            let mut r = nav_rng(10 + k);
            let bias = ie.gyro_bias_rad_s * r.normal();
            (0..n)
                .map(|i| omega[i][k as usize] + bias + ie.gyro_noise_rad_s * r.normal())
                .collect()
        })
        .collect();
    let accel: Vec<Vec<f64>> = (0..3)
        .map(|k| {
            let mut r = nav_rng(20 + k);
            (0..n)
                .map(|i| fs_all[i][k as usize] + ie.accel_noise_m_s2 * r.normal())
                .collect()
        })
        .collect();
    let mut columns = Vec::with_capacity(6);
    for (k, name) in ["wx", "wy", "wz"].iter().enumerate() {
        columns.push((name.to_string(), gyro[k].clone()));
    }
    for (k, name) in ["fx", "fy", "fz"].iter().enumerate() {
        columns.push((name.to_string(), accel[k].clone()));
    }
    columns
}

/// The logged temperature channel (°C) as the scenario logs it: the true temperature, the
/// set-point throughout, the true one with gaps (NaN; stream 50), or none.
fn temperature_column(
    log: TemperatureLog,
    temperature: &[f64],
    streams: FlightStreams,
) -> Option<(String, Vec<f64>)> {
    let n = temperature.len();
    match log {
        TemperatureLog::True => Some(("temp".into(), temperature.to_vec())),
        TemperatureLog::Constant => Some(("temp".into(), vec![SET_POINT_C; n])),
        TemperatureLog::Gaps => {
            let mut logged = temperature.to_vec();
            for i in gap_samples(&mut streams.rng(50), n) {
                logged[i] = f64::NAN;
            }
            Some(("temp".into(), logged))
        }
        TemperatureLog::Absent => None,
    }
}

/// The logged clearance over the terrain, m: height less the surface, plus 0.5 m of white noise
/// (stream 230).
fn clearance_column(
    track: &Track,
    surface: &Surface,
    streams: FlightStreams,
) -> (String, Vec<f64>) {
    let mut clear_rng = streams.rng(230);
    (
        "clearance".into(),
        (0..track.time_s.len())
            .map(|i| {
                track.height[i] - surface.height(track.north[i], track.east[i])
                    + 0.5 * clear_rng.normal()
            })
            .collect(),
    )
}

/// The set-point of the thermostatted sensor and the mean of its wandering temperature, °C.
const SET_POINT_C: f64 = 31.0;

/// Which samples of a temperature log of `n` rows are missing: about 1 % of them
/// (round(n/100), at least one), in runs of 1 to 20 samples, the first run a single sample; every
/// run has a logged sample on both sides (none touches another run or the ends of the log).
/// Placement is by rejection (at most 100 000 tries), so a very short log may get fewer.
pub fn gap_samples(r: &mut Rng, n: usize) -> Vec<usize> {
    let mut missing = vec![false; n];
    let target = ((n as f64) / 100.0).round().max(1.0) as usize;
    let mut count = 0;
    let mut tries = 0;
    while count < target && tries < 100_000 && n >= 3 {
        tries += 1;
        let len = if count == 0 {
            1
        } else {
            (1 + (r.uniform() * 20.0) as usize)
                .min(20)
                .min(target - count)
        };
        if len + 2 > n {
            continue;
        }
        // Start in 1..=n−1−len, so both neighbours exist.
        let start = 1 + (r.uniform() * (n - 1 - len) as f64) as usize;
        let (lo, hi) = (start - 1, (start + len).min(n - 1));
        if missing[lo..=hi].iter().any(|m| *m) {
            continue;
        }
        missing[start..start + len]
            .iter_mut()
            .for_each(|m| *m = true);
        count += len;
    }
    (0..n).filter(|&i| missing[i]).collect()
}

/// The quadratic form of the pair difference a − b in the specific force f (sensor frame), to first
/// order: Σ over a (+) and b (−) of K2·(n·f)² + K_u·(n·f)(u·f) + K_v·(n·f)(v·f) with the nominal
/// axis n, written as [q_xx, q_yy, q_zz, q_xy, q_xz, q_yz] for q_xx·fx² + … + q_xy·fx·fy + …, each
/// product counted once, (m/s²)⁻¹.
fn quadratic_form(n: &Vec3, a: &AccelerometerErrors, b: &AccelerometerErrors) -> [f64; 6] {
    // Symmetric matrix Q with fᵀQf the form: K2·nnᵀ + K_u·sym(nuᵀ) + K_v·sym(nvᵀ), a less b.
    let q = |x: usize, y: usize| -> f64 {
        let one = |e: &AccelerometerErrors| {
            e.quadratic * n[x] * n[y]
                + 0.5 * e.cross_u * (n[x] * e.u_axis[y] + e.u_axis[x] * n[y])
                + 0.5 * e.cross_v * (n[x] * e.v_axis[y] + e.v_axis[x] * n[y])
        };
        one(a) - one(b)
    };
    // + 0.0 turns a negative zero (of zero coefficients) into zero.
    [
        q(0, 0),
        q(1, 1),
        q(2, 2),
        2.0 * q(0, 1),
        2.0 * q(0, 2),
        2.0 * q(1, 2),
    ]
    .map(|x| x + 0.0)
}

/// Raises the flown height of line `line` by `offset_m` above the drape plan, eased in and out with
/// a raised cosine over the 10 s of transit before and after it (the logged clearance follows).
fn hold_off_plan(track: &mut Track, line: i64, offset_m: f64, rate: f64) {
    if offset_m == 0.0 {
        return;
    }
    let (Some(first), Some(last)) = (
        track.line.iter().position(|l| *l == line),
        track.line.iter().rposition(|l| *l == line),
    ) else {
        return;
    };
    let ease = (10.0 * rate).round().max(1.0) as usize;
    let n = track.height.len();
    let lo = first.saturating_sub(ease);
    let hi = (last + ease).min(n - 1);
    for i in lo..=hi {
        let d = if i < first {
            (first - i) as f64 / ease as f64
        } else if i > last {
            (i - last) as f64 / ease as f64
        } else {
            0.0
        };
        let w = 0.5 * (1.0 + (std::f64::consts::PI * d.min(1.0)).cos());
        track.height[i] += offset_m * w;
    }
}

/// One constant offset tensor per line (NED, s⁻², trace-free; each component of RMS `rms_e` E), in
/// the order lines are first flown; none when `rms_e` is 0.
fn draw_line_offsets(line: &[i64], rms_e: f64, seed: u64) -> Vec<(i64, SymTensor)> {
    if rms_e == 0.0 {
        return Vec::new();
    }
    let mut r = Rng::new(seed, 41);
    let mut out: Vec<(i64, SymTensor)> = Vec::new();
    for &l in line {
        if l <= 0 || out.iter().any(|(k, _)| *k == l) {
            continue;
        }
        let s = rms_e * EOTVOS;
        // Three diagonal draws less their mean have variance 2/3 each; √1.5 restores `rms_e`.
        let d = [r.normal(), r.normal(), r.normal()].map(|v| v * s * 1.5f64.sqrt());
        let m = (d[0] + d[1] + d[2]) / 3.0;
        let (xy, xz, yz) = (s * r.normal(), s * r.normal(), s * r.normal());
        out.push((
            l,
            SymTensor::from_array([d[0] - m, xy, xz, d[1] - m, yz, d[2] - m]),
        ));
    }
    out
}

fn minmax(v: &[f64]) -> (f64, f64) {
    v.iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), x| {
            (a.min(*x), b.max(*x))
        })
}

/// Rotation about the down axis by γ: grid-frame vectors into true NED (grid north has true azimuth γ).
fn rz(g: f64) -> Mat3 {
    let (s, c) = g.sin_cos();
    [[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]]
}

fn skew(w: &Vec3) -> Mat3 {
    [[0.0, -w[2], w[1]], [w[2], 0.0, -w[0]], [-w[1], w[0], 0.0]]
}

fn unit(v: Vec3) -> Vec3 {
    let n = mat3::norm(&v).max(1e-300);
    [v[0] / n, v[1] / n, v[2] / n]
}
