//! A simulated survey with known truth written as the files a real survey would bring (raw logs,
//! instrument file, DEM, recipes) plus the truth tables: `gravgrad simulate` as a library call.

use gravgrad_core::raster::Raster;
use gravgrad_core::units::EOTVOS;
use gravgrad_grid::geotiff::{WriteOptions, write_geotiff};
use gravgrad_ingest::tomlfile;
use gravgrad_products::tables::{Column, write_csv, write_parquet, write_text};
use gravgrad_sim::scenario::Scenario;
use gravgrad_sim::simulate::{FlightLog, Simulation, simulate};
use gravgrad_survey::RunError;
use std::path::Path;

const COMPONENTS: [&str; 6] = ["xx", "xy", "xz", "yy", "yz", "zz"];

/// A small invented scenario (layout `scenario/1`): three 1 km lines and a tie over a gentle hill
/// and a buried block, one flight, simulated in a few seconds; for examples and tests.
pub const SMALL_SCENARIO: &str = r#"layout = "scenario/1"
name = "Small example"
seed = 7

[area]
origin_lat_deg = -27.35
origin_lon_deg = 134.10
ground_height_m = 120.0
start_time_s = 1400000000.0

[[geology.prism]]
north_m = [150.0, 350.0]
east_m = [400.0, 700.0]
depth_m = [100.0, 300.0]
density_kg_m3 = 300.0

[terrain]
cell_m = 50.0
margin_m = 600.0
density_kg_m3 = 2670.0

[[terrain.hill]]
north_m = 250.0
east_m = 500.0
height_m = 20.0
width_m = 300.0

[plan]
line_azimuth_deg = 90.0
line_length_m = 1000.0
line_spacing_m = 200.0
lines = 3
first_line = 101
ties = 1
first_tie = 9001
clearance_m = 100.0
speed_m_s = 60.0
sample_rate_hz = 10.0
turn_rate_deg_s = 3.0
flights = 1

[dynamics]
turbulence_m_s2 = 0.3
turbulence_time_s = 2.0

[instrument]
baseline_m = 0.2
noise_e_rt_hz = 5.0
"#;

/// What a simulation wrote.
#[derive(Clone, Debug)]
pub struct Simulated {
    /// Samples over all flights.
    pub samples: usize,
    /// Survey and tie lines flown.
    pub lines: usize,
}

/// Simulates the survey of the scenario file `scenario_path` (layout `scenario/1`) and writes
/// its files into `out` (created; files in it are replaced). Deterministic from the scenario's
/// seed: the same scenario gives the same bytes.
///
/// ```
/// # fn main() -> Result<(), Box<dyn std::error::Error>> {
/// let dir = tempfile::tempdir()?;
/// let scenario = dir.path().join("scenario.toml");
/// std::fs::write(&scenario, gravgrad::simulate::SMALL_SCENARIO)?;
/// let s = gravgrad::simulate::simulate_to_folder(&scenario, &dir.path().join("survey"))?;
/// assert_eq!(s.lines, 4); // three survey lines and a tie
/// assert!(dir.path().join("survey/truth/lines.parquet").is_file());
/// # Ok(())
/// # }
/// ```
pub fn simulate_to_folder(scenario_path: &Path, out: &Path) -> Result<Simulated, RunError> {
    let scenario: Scenario = tomlfile::read(scenario_path).map_err(RunError::problem)?;
    tracing::info!("simulating {} (seed {})", scenario.name, scenario.seed);
    let sim = simulate(&scenario)
        .map_err(|e| RunError::Refused(format!("{}: {e}", scenario_path.display())))?;
    write_all(scenario_path, &scenario, &sim, out).map_err(RunError::Failed)?;
    Ok(Simulated {
        samples: sim.line.len(),
        lines: count_lines(&sim),
    })
}

/// The instrument file (layout `instrument/1`) of the simulated instrument: its pairs' geometry,
/// m, in the sensor frame, each number written so that it reads back to the same bits.
pub fn instrument_text(sim: &Simulation) -> String {
    let mut inst = format!(
        "layout = \"instrument/1\"\nname = \"simulated nine-pair gradiometer\"\nsample_rate_hz = {:?}\n",
        sim.sample_rate_hz
    );
    for p in &sim.pairs {
        inst.push_str(&format!(
            "\n[[pair]]\nid = \"{}\"\ncenter_m = [{:?}, {:?}, {:?}]\nbaseline_m = [{:?}, {:?}, {:?}]\naxis = [{:?}, {:?}, {:?}]\n",
            p.id, p.center[0], p.center[1], p.center[2], p.baseline[0], p.baseline[1], p.baseline[2], p.axis[0], p.axis[1], p.axis[2]
        ));
    }
    inst
}

/// The simulated DEM as a north-up raster in the survey's UTM frame (m; elevations in m above the
/// ellipsoid), full precision (the GeoTIFF stores it as float32).
pub fn dem_raster(sim: &Simulation) -> Result<Raster, String> {
    let [e0, n0] = sim.projection.false_origin;
    let dem = &sim.dem;
    Ok(Raster::new(
        dem.ncol,
        dem.nrow,
        (e0 + dem.east_min, n0 + dem.north_max),
        (dem.cell_m, dem.cell_m),
        dem.values.clone(),
    )
    .map_err(|e| format!("DEM: {e}"))?
    .with_epsg(sim.projection.epsg()))
}

/// The file stem of flight `k` (from 0) of the simulated survey of `scenario_name`, as
/// `gravgrad simulate` names its log: `<slug>-f01`, `<slug>-f02`, …
pub fn flight_stem(scenario_name: &str, k: usize) -> String {
    format!("{}-f{:02}", slug(scenario_name), k + 1)
}

fn count_lines(sim: &Simulation) -> usize {
    let mut ids: Vec<i64> = sim.line.iter().copied().filter(|l| *l > 0).collect();
    ids.dedup();
    ids.sort();
    ids.dedup();
    ids.len()
}

/// A file-name-safe form of the scenario name.
fn slug(name: &str) -> String {
    let s: String = name
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() {
                c.to_ascii_lowercase()
            } else {
                '-'
            }
        })
        .collect();
    let s = s.trim_matches('-').to_string();
    if s.is_empty() { "survey".into() } else { s }
}

/// Every file of the simulated survey into `out`: flight logs, instrument, DEM, recipes, truth.
fn write_all(
    scenario_path: &Path,
    s: &Scenario,
    sim: &Simulation,
    out: &Path,
) -> Result<(), String> {
    let logs = write_flight_logs(s, sim, out)?;
    write_text(&out.join("instrument.toml"), &instrument_text(sim))?;
    // DEM in the survey's UTM zone, float32, north-up.
    write_geotiff(
        &dem_raster(sim)?,
        &out.join("dem.tif"),
        &WriteOptions::default(),
    )
    .map_err(|e| e.to_string())?;
    write_recipes(s, sim, out)?;
    write_truth_lines(sim, out)?;
    write_truth_grid(sim, out)?;
    write_line_offsets(sim, out)?;
    write_text(
        &out.join("truth/calibration.toml"),
        &calibration_truth(s, sim, &logs),
    )?;
    let scenario_text = std::fs::read_to_string(scenario_path)
        .map_err(|e| format!("{}: {e}", scenario_path.display()))?;
    write_text(&out.join("truth/scenario.toml"), &scenario_text)?;
    tracing::info!(
        "truth written (truth/lines.parquet, truth/grid.parquet, truth/calibration.toml)"
    );
    Ok(())
}

/// The raw flight logs, one per flight, as Parquet and CSV in `out/flights`: layout columns plus
/// `line`; the calibration flight last. Each log with its file stem and whether it is the
/// calibration flight.
fn write_flight_logs<'s>(
    s: &Scenario,
    sim: &'s Simulation,
    out: &Path,
) -> Result<Vec<(String, &'s FlightLog, bool)>, String> {
    let name = slug(&s.name);
    let flights = out.join("flights");
    let mut logs: Vec<(String, &FlightLog, bool)> = sim
        .flights
        .iter()
        .enumerate()
        .map(|(k, f)| (flight_stem(&s.name, k), f, false))
        .collect();
    if let Some(c) = &sim.calibration {
        logs.push((format!("{name}-cal"), &c.log, true));
    }
    for (stem, log_k, _) in &logs {
        // A missing temperature (NaN) is an empty cell in CSV, which the reader takes as missing
        // in an optional channel.
        let mut cols: Vec<(&str, Column<'_>)> = log_k
            .columns
            .iter()
            .map(|(n, v)| match n.as_str() {
                "temp" => (n.as_str(), Column::F64Blank(v)),
                _ => (n.as_str(), Column::F64(v)),
            })
            .collect();
        cols.push(("line", Column::I64(&log_k.line)));
        write_parquet(&flights.join(format!("{stem}.parquet")), &cols)
            .map_err(|e| e.to_string())?;
        write_csv(
            &flights.join(format!("{stem}.csv")),
            "layout: raw-flight/1 (simulated)",
            &cols,
        )
        .map_err(|e| e.to_string())?;
    }
    tracing::info!("{} raw flight log(s) written (Parquet and CSV)", logs.len());
    Ok(logs)
}

/// The recipes that process the survey. With a calibration flight, the survey recipe reads the
/// survey flights only (`-fNN`), the calibration recipe the calibration flight only, and a third
/// recipe processes the survey with the calibration estimated from the calibration flight.
fn write_recipes(s: &Scenario, sim: &Simulation, out: &Path) -> Result<(), String> {
    let name = slug(&s.name);
    let head = format!(
        "# Processes the simulated survey `{}` (seed {}).\n",
        s.name, s.seed
    );
    let Some(_) = &sim.calibration else {
        return write_text(
            &out.join("recipe.toml"),
            &recipe(s, sim, &head, "flights/*.parquet", ""),
        );
    };
    let survey_glob = format!("flights/{name}-f*.parquet");
    write_text(
        &out.join("recipe.toml"),
        &recipe(s, sim, &head, &survey_glob, ""),
    )?;
    let cal_head = format!(
        "# Estimates the calibration of the simulated survey `{}` (seed {}) from its \
         calibration flight:\n# `gravgrad calibrate recipe-calibration.toml` writes \
         calibration.toml.\n",
        s.name, s.seed
    );
    write_text(
        &out.join("recipe-calibration.toml"),
        &recipe(
            s,
            sim,
            &cal_head,
            &format!("flights/{name}-cal.parquet"),
            "[calibration]\nmode = \"estimate\"\nfile = \"calibration.toml\"\n\n",
        ),
    )?;
    let with_head = format!(
        "# Processes the simulated survey `{}` (seed {}) with the calibration that \
         recipe-calibration.toml estimates\n# from the calibration flight (run \
         `gravgrad calibrate recipe-calibration.toml` first).\n",
        s.name, s.seed
    );
    write_text(
        &out.join("recipe-with-calibration.toml"),
        &recipe(
            s,
            sim,
            &with_head,
            &survey_glob,
            "[calibration]\nmode = \"file\"\nfile = \"calibration.toml\"\n\n",
        ),
    )
}

/// `truth/lines.parquet`: the truth along the path, every flight's samples in flying order —
/// position (map frame, m), then the geology, terrain, normal and total tensors (NED, E).
fn write_truth_lines(sim: &Simulation, out: &Path) -> Result<(), String> {
    let [e0, n0] = sim.projection.false_origin;
    let t = &sim.truth;
    let n = t.north.len();
    let e_abs: Vec<f64> = t.east.iter().map(|v| v + e0).collect();
    let n_abs: Vec<f64> = t.north.iter().map(|v| v + n0).collect();
    let mut truth_cols: Vec<(String, Vec<f64>)> = Vec::new();
    for (label, series) in [
        ("geology", &t.geology),
        ("terrain", &t.terrain),
        ("normal", &t.normal),
    ] {
        for (k, c) in COMPONENTS.iter().enumerate() {
            truth_cols.push((
                format!("{label}_{c}"),
                series.iter().map(|x| x.to_array()[k] / EOTVOS).collect(),
            ));
        }
    }
    let total: Vec<Vec<f64>> = (0..6)
        .map(|k| (0..n).map(|i| t.total(i).to_array()[k] / EOTVOS).collect())
        .collect();
    // The flights' clocks, in flying order: the samples of the truth.
    let time: Vec<f64> = sim.survey_column("time").unwrap_or_default();
    let mut tc: Vec<(&str, Column<'_>)> = vec![
        ("time", Column::F64(&time)),
        ("line", Column::I64(&sim.line)),
        ("easting", Column::F64(&e_abs)),
        ("northing", Column::F64(&n_abs)),
        ("height", Column::F64(&t.height)),
    ];
    for (name, v) in &truth_cols {
        tc.push((name.as_str(), Column::F64(v)));
    }
    let total_names: Vec<String> = COMPONENTS.iter().map(|c| format!("total_{c}")).collect();
    for (name, v) in total_names.iter().zip(&total) {
        tc.push((name.as_str(), Column::F64(v)));
    }
    write_parquet(&out.join("truth/lines.parquet"), &tc).map_err(|e| e.to_string())
}

/// `truth/grid.parquet`: the geology's tensor (map frame, E) on the truth grid at its height.
fn write_truth_grid(sim: &Simulation, out: &Path) -> Result<(), String> {
    let [e0, n0] = sim.projection.false_origin;
    let g = &sim.grid;
    let (mut ge, mut gn) = (Vec::new(), Vec::new());
    for nn in &g.north {
        for ee in &g.east {
            gn.push(nn + n0);
            ge.push(ee + e0);
        }
    }
    let gh = vec![g.height_m; ge.len()];
    let gcols: Vec<(String, Vec<f64>)> = COMPONENTS
        .iter()
        .enumerate()
        .map(|(k, c)| {
            (
                format!("geology_{c}"),
                g.values.iter().map(|x| x.to_array()[k] / EOTVOS).collect(),
            )
        })
        .collect();
    let mut gc: Vec<(&str, Column<'_>)> = vec![
        ("easting", Column::F64(&ge)),
        ("northing", Column::F64(&gn)),
        ("height", Column::F64(&gh)),
    ];
    for (name, v) in &gcols {
        gc.push((name.as_str(), Column::F64(v)));
    }
    write_parquet(&out.join("truth/grid.parquet"), &gc).map_err(|e| e.to_string())
}

/// `truth/line_offsets.csv`: the offset injected on each line (NED, E), when the scenario asks for
/// any.
fn write_line_offsets(sim: &Simulation, out: &Path) -> Result<(), String> {
    if sim.line_offsets.is_empty() {
        return Ok(());
    }
    let lines: Vec<i64> = sim.line_offsets.iter().map(|(l, _)| *l).collect();
    let offsets: Vec<Vec<f64>> = (0..6)
        .map(|k| {
            sim.line_offsets
                .iter()
                .map(|(_, o)| o.to_array()[k] / EOTVOS)
                .collect()
        })
        .collect();
    let names: Vec<String> = COMPONENTS.iter().map(|c| format!("offset_{c}")).collect();
    let mut oc: Vec<(&str, Column<'_>)> = vec![("line", Column::I64(&lines))];
    for (name, v) in names.iter().zip(&offsets) {
        oc.push((name.as_str(), Column::F64(v)));
    }
    write_csv(
        &out.join("truth/line_offsets.csv"),
        "injected offset per line, NED, E (added to the sensed tensor)",
        &oc,
    )
    .map_err(|e| e.to_string())
}

/// A recipe for the simulated survey: `head` (comment lines), the flights `flights` (a file or glob)
/// and `calibration` (a `[calibration]` section or nothing).
fn recipe(s: &Scenario, sim: &Simulation, head: &str, flights: &str, calibration: &str) -> String {
    format!(
        "{head}layout = \"recipe/1\"\n\n[survey]\nname = \"{}\"\nprojection = \"EPSG:{}\"\n\n[input]\nflights = [\"{flights}\"]\n\n[instrument]\npath = \"instrument.toml\"\n\n{calibration}[terrain]\ndem = \"dem.tif\"\ndensity_kg_m3 = {:?}\nmargin_m = {:?}\n\n[level]\nfirst_tie_line = {}\n\n[grid]\ncell_m = {:?}\n",
        s.name,
        sim.projection.epsg(),
        s.terrain.density_kg_m3,
        s.terrain.margin_m,
        s.plan.first_tie,
        s.plan.line_spacing_m / 4.0
    )
}

/// `truth/calibration.toml` (layout `calibration-truth/1`, docs/formats.md): the injected pair-level
/// calibration of every flight, the calibration flight last.
fn calibration_truth(
    s: &Scenario,
    sim: &Simulation,
    logs: &[(String, &FlightLog, bool)],
) -> String {
    let text = |v: &str| toml::Value::String(v.to_string()).to_string();
    let mut t = format!(
        "# The calibration injected into each flight's pairs (difference a − b, to first order): what \
         an estimator\n# should recover. Layout: docs/formats.md.\nlayout = \"calibration-truth/1\"\n\
         scenario = {}\nseed = {}\nlinear_errors = \"{}\"\n",
        text(&s.name),
        s.seed,
        if s.linear_errors_per_instrument() {
            "per_instrument"
        } else {
            "per_flight"
        }
    );
    for (stem, f, is_calibration) in logs {
        t.push_str(&format!(
            "\n[[flight]]\nname = {}\ncalibration_flight = {}\ntime_ref_s = {:?}\ntemperature_ref_c = {:?}\n",
            text(stem),
            is_calibration,
            f.time_ref_s,
            f.temperature_ref_c
        ));
        for (p, e) in sim.pairs.iter().zip(&f.pair_errors) {
            let q = e.quadratic;
            t.push_str(&format!(
                "\n[[flight.pair]]\nid = {}\nkappa = [{:?}, {:?}, {:?}]\nbias_m_s2 = {:?}\ndrift_m_s2_per_s = {:?}\ntemperature_m_s2_per_c = {:?}\nquadratic = [{:?}, {:?}, {:?}, {:?}, {:?}, {:?}]\ncommon_axis = [{:?}, {:?}, {:?}]\n",
                text(&p.id),
                e.kappa[0],
                e.kappa[1],
                e.kappa[2],
                e.bias,
                e.drift,
                e.tempco,
                q[0],
                q[1],
                q[2],
                q[3],
                q[4],
                q[5],
                e.common_axis[0],
                e.common_axis[1],
                e.common_axis[2]
            ));
        }
    }
    t
}
