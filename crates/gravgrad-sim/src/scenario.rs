//! The scenario file (`scenario/1`, TOML): geology, terrain, survey plan, flight dynamics and
//! instrument errors of a synthetic survey. Every key has a default; unknown keys are errors.
//! Units are in the key names; local coordinates are metres north and east of the area origin.

use serde::Deserialize;

pub const LAYOUT: &str = "scenario/1";

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Scenario {
    pub layout: String,
    #[serde(default = "default_name")]
    pub name: String,
    #[serde(default = "default_seed")]
    pub seed: u64,
    #[serde(default)]
    pub area: Area,
    #[serde(default)]
    pub geology: Geology,
    #[serde(default)]
    pub terrain: Terrain,
    #[serde(default)]
    pub plan: Plan,
    #[serde(default)]
    pub dynamics: Dynamics,
    #[serde(default)]
    pub instrument: InstrumentErrors,
    /// One line flown badly on purpose (absent: every line flown to plan).
    #[serde(default)]
    pub badly_flown: Option<BadlyFlown>,
    /// A calibration flight flown after the survey (absent: none).
    #[serde(default)]
    pub calibration_flight: Option<CalibrationFlight>,
}

impl Scenario {
    /// Whether scale, misalignment and temperature coefficient are drawn once for the instrument:
    /// as `instrument.linear_errors` says, else so when there is a calibration flight.
    pub fn linear_errors_per_instrument(&self) -> bool {
        match self.instrument.linear_errors {
            Some(LinearErrors::PerInstrument) => true,
            Some(LinearErrors::PerFlight) => false,
            None => self.calibration_flight.is_some(),
        }
    }
}

/// A manoeuvre flown on a leg of the calibration flight.
#[derive(Clone, Copy, Debug, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum Manoeuvre {
    /// Bank oscillation: the path weaves sideways in coordinated flight (lateral acceleration).
    Roll,
    /// Pitch oscillation: the path weaves up and down (vertical acceleration).
    Pitch,
    /// Heading oscillation about a straight path (sideslip): rotation about the vertical.
    Yaw,
    /// One climb and descent over the leg.
    Climb,
    /// Speed oscillation along the path (along-track acceleration).
    Surge,
}

/// A calibration flight: straight legs at several headings around the survey area, each carrying
/// one manoeuvre, flown at a constant height above the mean ground; the survey's speed, sample
/// rate and turn rate, the same instrument and logged channels.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct CalibrationFlight {
    /// Height above the mean ground (`area.ground_height_m`), m.
    pub altitude_m: f64,
    /// Headings of the legs, degrees clockwise from grid north, flown in this order for each
    /// manoeuvre.
    pub headings_deg: Vec<f64>,
    /// Manoeuvres, one after the other; each flown once on every heading.
    pub manoeuvres: Vec<Manoeuvre>,
    /// Duration of a leg, s.
    pub leg_s: f64,
    /// Period of the roll, pitch, yaw and surge oscillations, s (rounded so that a leg holds a
    /// whole number of periods).
    pub period_s: f64,
    pub roll_amplitude_deg: f64,
    pub pitch_amplitude_deg: f64,
    pub yaw_amplitude_deg: f64,
    /// Highest rate of climb (and descent) of a climb leg, m/s.
    pub climb_rate_m_s: f64,
    /// Amplitude of the along-track acceleration of a surge leg, m/s².
    pub surge_amplitude_m_s2: f64,
    /// Line number of the first leg; the others follow in flying order.
    pub first_line: i64,
}

impl Default for CalibrationFlight {
    fn default() -> Self {
        Self {
            altitude_m: 1500.0,
            headings_deg: vec![0.0, 90.0, 180.0, 270.0],
            manoeuvres: vec![
                Manoeuvre::Roll,
                Manoeuvre::Pitch,
                Manoeuvre::Yaw,
                Manoeuvre::Climb,
                Manoeuvre::Surge,
            ],
            leg_s: 60.0,
            period_s: 8.0,
            roll_amplitude_deg: 15.0,
            pitch_amplitude_deg: 5.0,
            yaw_amplitude_deg: 5.0,
            climb_rate_m_s: 5.0,
            surge_amplitude_m_s2: 2.0,
            first_line: 7001,
        }
    }
}

/// A line flown badly on purpose, to rehearse the QC verdict: extra turbulence and a clearance held
/// off the drape plan on that line only.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BadlyFlown {
    /// The line's number.
    pub line: i64,
    /// RMS vertical acceleration added on the line, m/s² (a Gauss–Markov process with the
    /// correlation time of `dynamics.turbulence_time_s`).
    #[serde(default)]
    pub turbulence_m_s2: f64,
    /// Height flown above the drape plan on the line, m (eased in and out over 10 s of transit).
    #[serde(default)]
    pub clearance_offset_m: f64,
}

fn default_name() -> String {
    "synthetic survey".into()
}
fn default_seed() -> u64 {
    1
}

/// Where the survey is: the origin of the local north/east frame, and the GPS time of the start.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct Area {
    pub origin_lat_deg: f64,
    pub origin_lon_deg: f64,
    /// Mean ground height above the ellipsoid, m (the terrain model varies about it).
    pub ground_height_m: f64,
    /// GPS seconds at the first sample.
    pub start_time_s: f64,
}

impl Default for Area {
    fn default() -> Self {
        Self {
            origin_lat_deg: -27.35,
            origin_lon_deg: 134.10,
            ground_height_m: 100.0,
            start_time_s: 1.4e9,
        }
    }
}

/// A rectangular block, NED-aligned: north and east extents (m) and depth below the mean ground (m).
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BlockBody {
    pub north_m: [f64; 2],
    pub east_m: [f64; 2],
    pub depth_m: [f64; 2],
    pub density_kg_m3: f64,
}

/// A sphere: centre north, east (m), depth of the centre below the mean ground (m), radius (m).
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SphereBody {
    pub north_m: f64,
    pub east_m: f64,
    pub depth_m: f64,
    pub radius_m: f64,
    pub density_kg_m3: f64,
}

/// Bodies with density contrasts (kg/m³) relative to the host rock.
#[derive(Clone, Debug, Deserialize, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Geology {
    pub prism: Vec<BlockBody>,
    pub sphere: Vec<SphereBody>,
}

/// A Gaussian hill: centre (m), height (m, may be negative for a basin), e-folding half-width (m).
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Hill {
    pub north_m: f64,
    pub east_m: f64,
    pub height_m: f64,
    pub width_m: f64,
}

/// A ridge: centre (m), azimuth of its crest (degrees from north), crest length, height, half-width.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Ridge {
    pub north_m: f64,
    pub east_m: f64,
    pub azimuth_deg: f64,
    pub length_m: f64,
    pub height_m: f64,
    pub width_m: f64,
}

/// The terrain model: hills, ridges and rough ground on the mean ground height, as a DEM of square
/// cells covering the survey plus a margin; its mass (density kg/m³) is part of the simulated field.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct Terrain {
    pub cell_m: f64,
    pub margin_m: f64,
    pub density_kg_m3: f64,
    pub hill: Vec<Hill>,
    pub ridge: Vec<Ridge>,
    /// RMS of the rough ground, m, and its correlation length, m.
    pub rough_rms_m: f64,
    pub rough_length_m: f64,
}

impl Default for Terrain {
    fn default() -> Self {
        Self {
            cell_m: 50.0,
            margin_m: 2000.0,
            density_kg_m3: 2670.0,
            hill: vec![],
            ridge: vec![],
            rough_rms_m: 0.0,
            rough_length_m: 300.0,
        }
    }
}

/// The survey plan: parallel lines, tie lines across them, drape clearance, speed, rate, turns.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct Plan {
    /// Direction of the survey lines, degrees clockwise from north (their first pass).
    pub line_azimuth_deg: f64,
    pub line_length_m: f64,
    pub line_spacing_m: f64,
    pub lines: usize,
    pub first_line: i64,
    /// Tie lines across the survey lines, evenly spaced over the line length.
    pub ties: usize,
    pub first_tie: i64,
    /// Drape clearance above the terrain, m.
    pub clearance_m: f64,
    pub speed_m_s: f64,
    pub sample_rate_hz: f64,
    /// Rate of the turns between lines, °/s.
    pub turn_rate_deg_s: f64,
    /// Flights the survey is flown in: the lines split in flying order, the ties in the last
    /// flight (`flights.rs`); each flight its own log, errors and time base.
    pub flights: usize,
    /// Time from one flight's first sample to the same point had it been flown on without landing:
    /// the ground time between flights added to each later flight's clock, s.
    pub flight_gap_s: f64,
}

impl Default for Plan {
    fn default() -> Self {
        Self {
            line_azimuth_deg: 90.0,
            line_length_m: 4000.0,
            line_spacing_m: 200.0,
            lines: 4,
            first_line: 101,
            ties: 1,
            first_tie: 9001,
            clearance_m: 100.0,
            speed_m_s: 60.0,
            sample_rate_hz: 20.0,
            turn_rate_deg_s: 3.0,
            flights: 1,
            flight_gap_s: 7200.0,
        }
    }
}

/// Flight dynamics: turbulence and the residual motion of the stabilised platform.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct Dynamics {
    /// RMS vertical acceleration from turbulence, m/s²; horizontal is a third of it.
    pub turbulence_m_s2: f64,
    /// Correlation time of turbulence, s.
    pub turbulence_time_s: f64,
    /// RMS of the platform's residual angular rate about each axis, rad/s.
    pub platform_rate_rad_s: f64,
    /// Band of the residual platform motion, Hz.
    pub platform_band_hz: [f64; 2],
    /// Crab angle into the wind, degrees.
    pub crab_deg: f64,
    /// Time constant with which the drape height follows the terrain, s.
    pub drape_time_s: f64,
}

impl Default for Dynamics {
    fn default() -> Self {
        Self {
            turbulence_m_s2: 0.3,
            turbulence_time_s: 2.0,
            platform_rate_rad_s: 1e-5,
            platform_band_hz: [0.1, 1.5],
            crab_deg: 2.0,
            drape_time_s: 5.0,
        }
    }
}

/// Instrument and navigation errors (all RMS over accelerometers or channels; 0 = none).
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct InstrumentErrors {
    /// Pair ids of the standard layout (`xx`, `yy`, `zz`, `xy`, `yx`, `xz`, `zx`, `yz`, `zy`).
    pub pairs: Vec<String>,
    pub baseline_m: f64,
    /// White noise of each pair's difference, E/√Hz.
    pub noise_e_rt_hz: f64,
    /// Corner below which 1/f noise rises above the white level, Hz (0 = no 1/f noise).
    pub flicker_corner_hz: f64,
    pub scale_rms: f64,
    pub misalignment_rms_rad: f64,
    pub bias_rms_m_s2: f64,
    /// Linear drift, m/s² per hour.
    pub drift_rms_m_s2_h: f64,
    /// Temperature coefficient, m/s² per °C; the sensor temperature wanders by `temperature_swing_c`.
    pub temperature_coefficient_rms_m_s2_c: f64,
    pub temperature_swing_c: f64,
    pub gyro_noise_rad_s: f64,
    pub gyro_bias_rad_s: f64,
    pub accel_noise_m_s2: f64,
    pub position_noise_m: f64,
    pub attitude_noise_deg: f64,
    /// Amplitude of the aircraft's self-gradient, E (0 = none); needs aircraft attitude in the log.
    pub self_gradient_e: f64,
    /// RMS of a constant offset per line and component, E (0 = none): a trace-free tensor in NED,
    /// drawn per line, added to what the instrument senses; written to `truth/line_offsets.csv`.
    pub line_offset_e_rms: f64,
    /// Second-order coefficient K2 of each accelerometer, (m/s²)⁻¹: the output adds K2·(n·f)².
    pub quadratic_rms_per_m_s2: f64,
    /// Cross-axis coefficients K_u, K_v of each accelerometer, (m/s²)⁻¹: the output adds
    /// K_u·(n·f)(u·f) + K_v·(n·f)(v·f), u and v the axes perpendicular to the input axis n.
    pub cross_axis_rms_per_m_s2: f64,
    /// Rise of the sensor temperature from each flight's start, °C per hour (on top of the wander).
    pub temperature_ramp_c_h: f64,
    /// What the log's `temp` column holds.
    pub temperature_log: TemperatureLog,
    /// Whether scale, misalignment and temperature coefficient are drawn afresh for every flight or
    /// once for the instrument (absent: per flight, or per instrument with a calibration flight).
    pub linear_errors: Option<LinearErrors>,
}

/// What the log's `temp` column holds.
#[derive(Clone, Copy, Debug, Deserialize, PartialEq, Eq, Default)]
#[serde(rename_all = "lowercase")]
pub enum TemperatureLog {
    /// The sensor temperature.
    #[default]
    True,
    /// The set-point of a thermostatted sensor, 31.0 °C on every row (the accelerometers still
    /// feel the true temperature).
    Constant,
    /// The sensor temperature with short runs of missing values (NaN; empty cells in CSV).
    Gaps,
    /// No `temp` column.
    Absent,
}

/// How often the linear accelerometer errors (scale, misalignment, temperature coefficient) are
/// drawn.
#[derive(Clone, Copy, Debug, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum LinearErrors {
    /// Afresh for every flight, from the flight's own random streams.
    PerFlight,
    /// Once for the instrument, from streams of their own: the same in every flight.
    PerInstrument,
}

impl Default for InstrumentErrors {
    fn default() -> Self {
        Self {
            pairs: ["xx", "yy", "zz", "xy", "yx", "xz", "zx", "yz", "zy"]
                .map(String::from)
                .to_vec(),
            baseline_m: 0.2,
            noise_e_rt_hz: 5.0,
            flicker_corner_hz: 0.01,
            scale_rms: 1e-5,
            misalignment_rms_rad: 1e-5,
            bias_rms_m_s2: 1e-5,
            drift_rms_m_s2_h: 1e-8,
            temperature_coefficient_rms_m_s2_c: 1e-9,
            temperature_swing_c: 0.5,
            gyro_noise_rad_s: 1e-6,
            gyro_bias_rad_s: 1e-7,
            accel_noise_m_s2: 1e-3,
            position_noise_m: 0.05,
            attitude_noise_deg: 0.005,
            self_gradient_e: 0.0,
            line_offset_e_rms: 0.0,
            quadratic_rms_per_m_s2: 0.0,
            cross_axis_rms_per_m_s2: 0.0,
            temperature_ramp_c_h: 0.0,
            temperature_log: TemperatureLog::True,
            linear_errors: None,
        }
    }
}

impl InstrumentErrors {
    /// The same instrument with every error set to zero (noise-free, perfectly calibrated).
    pub fn perfect(&self) -> Self {
        Self {
            pairs: self.pairs.clone(),
            baseline_m: self.baseline_m,
            noise_e_rt_hz: 0.0,
            flicker_corner_hz: 0.0,
            scale_rms: 0.0,
            misalignment_rms_rad: 0.0,
            bias_rms_m_s2: 0.0,
            drift_rms_m_s2_h: 0.0,
            temperature_coefficient_rms_m_s2_c: 0.0,
            temperature_swing_c: self.temperature_swing_c,
            gyro_noise_rad_s: 0.0,
            gyro_bias_rad_s: 0.0,
            accel_noise_m_s2: 0.0,
            position_noise_m: 0.0,
            attitude_noise_deg: 0.0,
            self_gradient_e: 0.0,
            line_offset_e_rms: 0.0,
            quadratic_rms_per_m_s2: 0.0,
            cross_axis_rms_per_m_s2: 0.0,
            temperature_ramp_c_h: self.temperature_ramp_c_h,
            temperature_log: self.temperature_log,
            linear_errors: self.linear_errors,
        }
    }
}

/// Most samples a simulation logs over all its flights: every sample carries about
/// [`SIM_BYTES_PER_SAMPLE`] bytes of path, fields and log columns, so the limit holds a simulation
/// near 1.5 GB.
pub const MAX_SIM_SAMPLES: f64 = 1.0e6;
/// Memory of the simulation per sample, bytes. Measured: the run-test scenario of the end-to-end
/// tests at 200 Hz (85,281 samples) peaked at 127 MB resident against 20 MB at 10 Hz (4,265
/// samples): about 1,250 bytes a sample; rounded up.
pub const SIM_BYTES_PER_SAMPLE: f64 = 1500.0;
/// Most cells of the simulated DEM (each a prism of about 60 bytes, plus its elevation).
pub const MAX_SIM_DEM_CELLS: f64 = 4.0e6;
// The time a simulation will take is estimated before it starts from the terrain truth's counted
// work (`TerrainWork`) and the samples and DEM cells, each at a cost per item measured on this
// machine (2 cores shared with other agents' builds, load 6 to 11; release build, 2 threads;
// docs/reliability.md, "Simulator sizes"). The costs are whole-simulation costs fitted so that the
// estimate is above every measured time: of the eight scenarios measured the estimate exceeds the
// simulation's time by 8 to 22 %. On one thread or two the forms alone ran at 16 to 17 ns a point
// form, 20 to 23 ns a line form and 220 to 270 ns a prism (the second core was taken by the other
// builds); on the machine at rest (load under 1) 7.9, 14.7 and 152 ns on one thread, 3.8, 7.4 and
// 76 ns on two, and the calibration-flight scenario below took 11.3 s.

/// Cost of one prism of the terrain truth (a column near a sample, closed form of Nagy et al.), s.
/// Measured in whole simulations: 3.5e-7 at most (the 200 Hz scenario, 1.06e8 prisms), against
/// 1.6e-7 to 2.1e-7 for prisms alone.
pub const SIM_SECONDS_PER_PRISM: f64 = 3.5e-7;
/// Cost of one column in the line form (line mass and cross-section term), s: 2.1e-8 to 2.3e-8
/// measured alone, 2 threads.
pub const SIM_SECONDS_PER_LINE: f64 = 2.5e-8;
/// Cost of one column in the point form (one point with its second moments), s: 1.1e-8 to 1.2e-8
/// measured alone, 2 threads, and 1.2e-8 to 1.3e-8 in whole simulations.
pub const SIM_SECONDS_PER_POINT: f64 = 1.3e-8;
/// Cost of the rest of a simulation per sample (path, normal field, geology, instrument, logs), s:
/// 1e-5 to 4e-5 measured, 1e-4 on the smallest scenario.
pub const SIM_SECONDS_PER_SAMPLE: f64 = 5e-5;
/// Cost of sampling the terrain surface at one DEM cell, s (3.8e-6 to 5.8e-6 measured); done twice,
/// by [`Scenario::check_sizes`] for the relief, then by the simulation.
pub const SIM_SECONDS_PER_DEM_CELL: f64 = 6e-6;
/// Longest estimated simulation accepted, s. The largest scenario of the tests, the calibration
/// tests' survey with a calibration flight (49,512 samples, 42,364 DEM cells), is estimated at
/// 37 s and took 31 s at a load of 10 to 11; a scenario at the limit would take about 33 to 37 s
/// here (the estimates ran 8 to 22 % above the measured times), 40 s at most: a third under 60 s.
pub const MAX_SIM_SECONDS: f64 = 40.0;
/// Highest sample rate a scenario may ask for, Hz.
pub const MAX_SAMPLE_RATE_HZ: f64 = 1000.0;

/// The smallest and largest of `v` (infinite when empty).
fn minmax(v: &[f64]) -> (f64, f64) {
    v.iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| {
            (a.min(x), b.max(x))
        })
}

/// Whether `v` is a number no larger than `limit` (NaN is not).
fn within(v: f64, limit: f64) -> bool {
    v.is_finite() && v <= limit
}

/// What a scenario will need, known before anything is simulated.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ScenarioSizes {
    /// Samples over all flights (survey and calibration flight), an upper estimate.
    pub samples: f64,
    /// Cells of the DEM over the path plus `terrain.margin_m`, an upper estimate.
    pub dem_cells: f64,
    /// The terrain truth's work ([`crate::terrain_truth`]); zero until [`Scenario::check_sizes`]
    /// has counted it.
    pub terrain: TerrainWork,
}

/// The terrain truth's work, counted before the simulation: how many columns take each of its
/// forms over all samples ([`crate::terrain_truth`]), upper estimates.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct TerrainWork {
    /// The switch distances for the DEM's relief, cell sizes (zero when not counted).
    pub switch_line_cells: f64,
    pub switch_point_cells: f64,
    /// Prisms: every survey sample counted with every cell within the line switch horizontally,
    /// calibration-flight samples with those that its height above the highest column leaves
    /// within it.
    pub prisms: f64,
    /// Line forms: counted as the prisms, within the point switch.
    pub lines: f64,
    /// Point forms: samples × cells.
    pub points: f64,
    /// The estimated time of the whole simulation here, s.
    pub seconds: f64,
}

/// The path and DEM as the simulation lays them out.
struct Layout {
    samples: usize,
    survey_samples: usize,
    /// Heights of the calibration flight's samples above the ellipsoid, m.
    calibration_heights: Vec<f64>,
    /// The DEM's extent (local m) and its rows and columns.
    north: [f64; 2],
    east: [f64; 2],
    rows: usize,
    cols: usize,
}

/// A scenario that would need more than a stated limit: the key most to blame, the size asked for
/// and the limit.
#[derive(Clone, Debug, PartialEq)]
pub struct TooLarge {
    pub key: &'static str,
    pub message: String,
}

impl Scenario {
    /// Upper estimates of the sizes the scenario will need, from the plan alone and in constant
    /// time: every line, tie and turn flown at `plan.speed_m_s`, turns of twice the radius beyond
    /// the path. They stop runaway scenarios before [`Scenario::sizes`] lays out the path.
    pub fn rough_sizes(&self) -> ScenarioSizes {
        let p = &self.plan;
        let v = p.speed_m_s;
        let radius = v / p.turn_rate_deg_s.to_radians();
        let across = (p.lines.max(1) - 1) as f64 * p.line_spacing_m;
        let legs = (p.lines + p.ties) as f64;
        let distance = p.lines as f64 * p.line_length_m
            + p.ties as f64 * (across + 2.0 * p.line_spacing_m)
            + legs * (std::f64::consts::PI * radius + 2.0 * p.line_spacing_m + p.line_length_m);
        let mut seconds = distance / v;
        if let Some(cf) = &self.calibration_flight {
            let legs = (cf.manoeuvres.len() * cf.headings_deg.len()) as f64;
            seconds += legs * (cf.leg_s + 2.0 * std::f64::consts::PI * radius / v);
        }
        let samples = seconds * p.sample_rate_hz;
        // The path spans the lines (plus the turns beyond their ends) and the ties.
        let t = &self.terrain;
        let mut north = p.line_length_m + 4.0 * radius + 2.0 * p.line_spacing_m;
        let mut east = across + 4.0 * radius + 2.0 * p.line_spacing_m;
        if let Some(cf) = &self.calibration_flight {
            // Legs up to v·leg_s + radius from the survey's centre, with their turns.
            let reach = 2.0 * (v * cf.leg_s + 2.0 * radius);
            north = north.max(reach);
            east = east.max(reach);
        }
        north += 2.0 * t.margin_m;
        east += 2.0 * t.margin_m;
        ScenarioSizes {
            samples,
            dem_cells: (north / t.cell_m).ceil() * (east / t.cell_m).ceil(),
            terrain: TerrainWork::default(),
        }
    }

    /// The sizes the simulation will have, from the same path layout it flies, without sampling
    /// the terrain: the samples of the survey path and of the calibration flight, and the cells of
    /// the DEM over both paths plus `terrain.margin_m` (the DEM the simulation builds, and the
    /// columns of its terrain truth). Call only after [`Scenario::rough_sizes`] is within the limits.
    pub fn sizes(&self) -> ScenarioSizes {
        let l = self.layout();
        ScenarioSizes {
            samples: l.samples as f64,
            dem_cells: (l.rows * l.cols) as f64,
            terrain: TerrainWork::default(),
        }
    }

    /// The path's samples and extent and the DEM's, as the simulation lays them out.
    fn layout(&self) -> Layout {
        let (n, [n0, n1, e0, e1]) = crate::path::outline(&self.plan);
        let (mut dn, mut de) = ([n0, n1], [e0, e1]);
        let mut calibration_heights = Vec::new();
        if let Some(cf) = &self.calibration_flight {
            let centre = [0.5 * (n0 + n1), 0.5 * (e0 + e1)];
            let height = self.area.ground_height_m + cf.altitude_m;
            let cal = crate::calflight::fly(cf, &self.plan, centre, height, 0.0);
            let (a, b) = minmax(&cal.north);
            let (c, d) = minmax(&cal.east);
            dn = [dn[0].min(a), dn[1].max(b)];
            de = [de[0].min(c), de[1].max(d)];
            calibration_heights = cal.height;
        }
        let (m, cell) = (self.terrain.margin_m, self.terrain.cell_m);
        let (north, east) = ([dn[0] - m, dn[1] + m], [de[0] - m, de[1] + m]);
        // As `Surface::dem` counts them.
        let rows = ((north[1] - north[0]) / cell).ceil().max(1.0) as usize;
        let cols = ((east[1] - east[0]) / cell).ceil().max(1.0) as usize;
        Layout {
            samples: n + calibration_heights.len(),
            survey_samples: n,
            calibration_heights,
            north,
            east,
            rows,
            cols,
        }
    }

    /// The terrain truth's work and the simulation's estimated time for a layout: samples the
    /// DEM for its relief (the switch distances depend on it) unless the part of the time that
    /// does not depend on them is already past [`MAX_SIM_SECONDS`].
    fn terrain_work(&self, l: &Layout) -> TerrainWork {
        let cells = (l.rows * l.cols) as f64;
        let points = l.samples as f64 * cells;
        let base = points * SIM_SECONDS_PER_POINT
            + l.samples as f64 * SIM_SECONDS_PER_SAMPLE
            + 2.0 * cells * SIM_SECONDS_PER_DEM_CELL;
        if !within(base, MAX_SIM_SECONDS) {
            return TerrainWork {
                points,
                seconds: base,
                ..TerrainWork::default()
            };
        }
        let surface = crate::terrain::Surface::new(&self.area, &self.terrain, self.seed);
        let dem = surface.dem(l.north, l.east);
        let reference = dem.mean();
        let relief = dem
            .values
            .iter()
            .fold(0.0f64, |m, e| m.max((e - reference).abs()));
        let cell = self.terrain.cell_m;
        let k = crate::terrain_truth::switches(cell, relief, self.terrain.density_kg_m3);
        // Cells whose centres lie within a radius r (cell sizes) of a point: at most π(r + 1/√2)².
        let disc = |r: f64| {
            (std::f64::consts::PI * (r + std::f64::consts::FRAC_1_SQRT_2).powi(2)).min(cells)
        };
        // Columns within a switch k of a sample: a calibration-flight sample's height above the
        // highest column's top (at most `relief` above the reference level) leaves a disc of
        // radius √(k² − gap²).
        let within_of = |k: f64| {
            let mut n = l.survey_samples as f64 * disc(k);
            for h in &l.calibration_heights {
                let gap = ((h - reference - relief) / cell).max(0.0);
                if gap < k {
                    n += disc((k * k - gap * gap).sqrt());
                }
            }
            n
        };
        let (prisms, lines) = (within_of(k.line), within_of(k.point));
        TerrainWork {
            switch_line_cells: k.line,
            switch_point_cells: k.point,
            prisms,
            lines,
            points,
            seconds: base + prisms * SIM_SECONDS_PER_PRISM + lines * SIM_SECONDS_PER_LINE,
        }
    }

    /// Refuses a scenario past [`MAX_SIM_SAMPLES`] or [`MAX_SIM_DEM_CELLS`] (by the rough sizes),
    /// or whose estimated time (by the exact sizes and the terrain truth's counted work) is past
    /// [`MAX_SIM_SECONDS`], naming the key most to blame and the size it would need; gives the
    /// exact sizes and the work.
    /// Call after the values are known to be positive and finite.
    pub fn check_sizes(&self) -> Result<ScenarioSizes, TooLarge> {
        let p = &self.plan;
        if !within(p.sample_rate_hz, MAX_SAMPLE_RATE_HZ) {
            return Err(TooLarge {
                key: "plan.sample_rate_hz",
                message: format!(
                    "{} Hz: expected at most {MAX_SAMPLE_RATE_HZ} Hz",
                    p.sample_rate_hz
                ),
            });
        }
        let s = self.rough_sizes();
        let d = Plan::default();
        // The plan key furthest above its default is the one to blame for the samples.
        let sample_key = [
            ("plan.sample_rate_hz", p.sample_rate_hz / d.sample_rate_hz),
            ("plan.lines", p.lines as f64 / d.lines as f64),
            ("plan.line_length_m", p.line_length_m / d.line_length_m),
            ("plan.ties", p.ties as f64 / d.ties.max(1) as f64),
            ("plan.speed_m_s", d.speed_m_s / p.speed_m_s),
            ("plan.line_spacing_m", p.line_spacing_m / d.line_spacing_m),
        ]
        .into_iter()
        .max_by(|a, b| a.1.total_cmp(&b.1))
        .map_or("plan.lines", |k| k.0);
        if !within(s.samples, MAX_SIM_SAMPLES) {
            return Err(TooLarge {
                key: sample_key,
                message: format!(
                    "the survey would log about {:.3e} samples (about {:.1} GB); the limit is {MAX_SIM_SAMPLES:e} samples",
                    s.samples,
                    s.samples * SIM_BYTES_PER_SAMPLE / 1e9
                ),
            });
        }
        let td = Terrain::default();
        let cell_key = if self.terrain.margin_m / td.margin_m > td.cell_m / self.terrain.cell_m {
            "terrain.margin_m"
        } else {
            "terrain.cell_m"
        };
        if !within(s.dem_cells, MAX_SIM_DEM_CELLS) {
            return Err(TooLarge {
                key: cell_key,
                message: format!(
                    "the DEM over the path plus the margin would be about {:.3e} cells of {} m (about {:.1} GB); the limit is {MAX_SIM_DEM_CELLS:e} cells",
                    s.dem_cells,
                    self.terrain.cell_m,
                    s.dem_cells * 70.0 / 1e9
                ),
            });
        }
        // Within the rough limits: lay out the path for the exact count.
        let layout = self.layout();
        let work = self.terrain_work(&layout);
        let s = ScenarioSizes {
            samples: layout.samples as f64,
            dem_cells: (layout.rows * layout.cols) as f64,
            terrain: work,
        };
        if !within(work.seconds, MAX_SIM_SECONDS) {
            // Halving the cell quarters the far work; halving the rate halves all of it.
            let key = if cell_key == "terrain.margin_m" {
                cell_key
            } else if p.sample_rate_hz / d.sample_rate_hz > td.cell_m / self.terrain.cell_m {
                "plan.sample_rate_hz"
            } else {
                "terrain.cell_m"
            };
            return Err(TooLarge {
                key,
                message: format!(
                    "the simulation would take about {:.0} s here ({:.0} samples, {:.0} DEM cells: the terrain truth sums {:.3e} columns); the limit is {MAX_SIM_SECONDS} s: coarsen `terrain.cell_m` (the work falls with its square), lower `plan.sample_rate_hz` or `terrain.margin_m`, or shorten the plan",
                    work.seconds, s.samples, s.dem_cells, work.points
                ),
            });
        }
        Ok(s)
    }
}
