//! How far a run's products are from the truth of the simulated survey they came from, per
//! component, beside the noise floor the simulation implies: `gravgrad score` as a library call.
//! Units: E; lines after the same low-pass as the floor.

use gravgrad_core::units::EOTVOS;
use gravgrad_ingest::tomlfile;
use gravgrad_products::tables::{Owned, read_parquet_columns};
use gravgrad_sim::scenario::Scenario;
use gravgrad_sim::score::{Series, StageScore, component_densities, scenario_pairs, score_stage};
use gravgrad_survey::RunError;
use std::path::Path;

const COMPONENTS: [&str; 6] = ["xx", "xy", "xz", "yy", "yz", "zz"];

/// A run's score: per stage along the lines, and per grid when the run wrote grids.
#[derive(Debug, serde::Serialize)]
pub struct Scored {
    pub lines: Vec<StageScore>,
    pub grids: Vec<GridScore>,
}

fn f64s(c: Owned) -> Vec<f64> {
    match c {
        Owned::F64(v) => v,
        Owned::I64(v) => v.into_iter().map(|x| x as f64).collect(),
    }
}

/// Scores the run in `run` (its `lines.parquet`, and `grids.nc` when written) against the truth of
/// the simulation in `truth`, lines after a low-pass of `wavelength_m`. (The crate's
/// documentation scores a run of a simulated survey.)
///
/// ```
/// let e = gravgrad::score::score("run".as_ref(), "truth".as_ref(), -1.0).unwrap_err();
/// assert!(e.to_string().contains("--wavelength"));
/// ```
pub fn score(run: &Path, truth: &Path, wavelength_m: f64) -> Result<Scored, RunError> {
    if !(wavelength_m.is_finite() && wavelength_m > 0.0) {
        return Err(RunError::Refused(
            "--wavelength: expected a positive number of metres".into(),
        ));
    }
    let scenario: Scenario =
        tomlfile::read(&truth.join("scenario.toml")).map_err(RunError::problem)?;
    let run_path = run.join("lines.parquet");
    let truth_path = truth.join("lines.parquet");
    let has = |path: &std::path::Path, n: &str| read_parquet_columns(path, &[n]).is_ok();
    let reduced = if has(&run_path, "terrain_removed_gzz") {
        "terrain_removed"
    } else {
        "normal_removed"
    };
    let mut names: Vec<String> = vec![
        "time".into(),
        "line".into(),
        "easting".into(),
        "northing".into(),
    ];
    for stage in ["rotated", reduced] {
        names.extend(COMPONENTS.iter().map(|c| format!("{stage}_g{c}")));
    }
    let truth_names: Vec<String> = ["time", "line"]
        .iter()
        .map(|s| s.to_string())
        .chain(
            ["total", "geology"]
                .iter()
                .flat_map(|t| COMPONENTS.iter().map(move |c| format!("{t}_{c}"))),
        )
        .collect();
    let read = |path: &std::path::Path, n: &[String]| {
        read_parquet_columns(path, &n.iter().map(String::as_str).collect::<Vec<_>>())
            .map(|v| v.into_iter().map(f64s).collect::<Vec<_>>())
    };
    let (run_cols, truth_cols) = match (read(&run_path, &names), read(&truth_path, &truth_names)) {
        (Ok(r), Ok(t)) => (r, t),
        (Err(e), _) | (_, Err(e)) => return Err(RunError::Refused(e)),
    };
    if run_cols[0].len() != truth_cols[0].len()
        || run_cols[0].iter().zip(&truth_cols[0]).any(|(a, b)| a != b)
    {
        return Err(RunError::Refused(format!(
            "{} and {} do not hold the same samples (time columns differ); score a run of this simulation",
            run_path.display(),
            truth_path.display()
        )));
    }
    let line: Vec<i64> = truth_cols[1].iter().map(|v| *v as i64).collect();
    let dens = component_densities(
        &scenario_pairs(&scenario),
        scenario.instrument.noise_e_rt_hz,
    );
    let series = |run_off: usize, truth_off: usize| Series {
        time: &run_cols[0],
        line: &line,
        easting: &run_cols[2],
        northing: &run_cols[3],
        run: std::array::from_fn(|c| &run_cols[run_off + c][..]),
        truth: std::array::from_fn(|c| &truth_cols[truth_off + c][..]),
    };
    let lines = vec![
        score_stage("rotated", "total", &series(4, 2), dens, wavelength_m),
        score_stage(reduced, "geology", &series(10, 8), dens, wavelength_m),
    ];
    // Grids, when the run wrote them: against the geology at the nodes on the flight surface.
    let grid_scores = if run.join("grids.nc").is_file() {
        let cutoff = std::fs::read_to_string(run.join("provenance.json"))
            .ok()
            .and_then(|t| serde_json::from_str::<serde_json::Value>(&t).ok())
            .and_then(|v| {
                v["recipe_text"]
                    .as_str()
                    .and_then(|r| r.parse::<toml::Value>().ok())
            })
            .and_then(|r| {
                r.get("filter")
                    .and_then(|f| f.get("cutoff_wavelength_m"))
                    .and_then(|v| v.as_float().or(v.as_integer().map(|i| i as f64)))
            })
            .unwrap_or(400.0);
        let floors = score_stage(reduced, "geology", &series(10, 8), dens, cutoff);
        score_grids(run, &scenario, &floors).map_err(RunError::Refused)?
    } else {
        Vec::new()
    };
    Ok(Scored {
        lines,
        grids: grid_scores,
    })
}

/// One gridded component's score against the truth at the grid's nodes.
#[derive(Debug, serde::Serialize)]
pub struct GridScore {
    pub grid: String,
    /// Cells compared (not blanked).
    pub cells: usize,
    /// RMS of (product − truth) about its mean over the cells, E.
    pub rms_error_e: f64,
    /// The same for the noise-free truth along the lines gridded and derived the same way: what
    /// gridding alone costs, E.
    pub gridding_error_e: f64,
    /// White-noise floor of the component along lines after the same low-pass (the lines score), E.
    pub noise_floor_e: f64,
    /// 1.2 × floor + gridding error, E.
    pub limit_e: f64,
}

fn rms_about_mean(v: &[f64]) -> f64 {
    let n = v.len().max(1) as f64;
    let m = v.iter().sum::<f64>() / n;
    (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / n).sqrt()
}

/// Scores `grids.nc` of a run against the scenario's geology at the grid nodes, on the flight
/// surface (the line heights gridded onto the nodes); the gridding error from the noise-free truth
/// along the lines, gridded and derived with the same settings.
pub fn score_grids(
    run: &std::path::Path,
    scenario: &Scenario,
    lines: &StageScore,
) -> Result<Vec<GridScore>, String> {
    use gravgrad_grid::{GridSpec, TensorOptions, blank, full_tensor, grid_points};
    let grids = run.join("grids.nc");
    let read = |name: &str| {
        gravgrad_netcdf::read_grid(&grids, Some(name)).map_err(|p| {
            p.iter()
                .map(|x| x.to_string())
                .collect::<Vec<_>>()
                .join("; ")
        })
    };
    // The run's [grid] settings, from the recipe as run.
    let prov: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(run.join("provenance.json"))
            .map_err(|e| format!("{}: {e}", run.join("provenance.json").display()))?,
    )
    .map_err(|e| e.to_string())?;
    let recipe: toml::Table = toml::from_str(prov["recipe_text"].as_str().unwrap_or(""))
        .map_err(|e| format!("provenance.json: recipe_text: {e}"))?;
    let get = |k: &str, d: f64| {
        recipe
            .get("grid")
            .and_then(|g| g.get(k))
            .and_then(|v| v.as_float().or(v.as_integer().map(|i| i as f64)))
            .unwrap_or(d)
    };
    let (tension, blanking, upward) = (
        get("tension", 0.25),
        get("blanking_m", 250.0),
        get("upward_continuation_m", 0.0),
    );
    let template = read("gzz")?;
    let spec = GridSpec {
        x_min: template.x_min,
        y_max: template.y_max,
        nx: template.nx,
        ny: template.ny,
        cell: template.dx,
        tension,
        blanking: Some(blanking),
        convergence: None,
        max_sweeps: 2000,
        epsg: template.epsg,
        block_mean: true,
    };
    let cols = read_parquet_columns(
        &run.join("lines.parquet"),
        &["line", "easting", "northing", "height"],
    )?;
    let cols: Vec<Vec<f64>> = cols.into_iter().map(f64s).collect();
    let probe = gravgrad_sim::simulate::GeologyProbe::new(scenario).map_err(|e| e.to_string())?;
    let on: Vec<usize> = (0..cols[0].len()).filter(|&i| cols[0][i] > 0.0).collect();
    let pts = |v: &dyn Fn(usize) -> f64| -> Vec<(f64, f64, f64)> {
        on.iter().map(|&i| (cols[1][i], cols[2][i], v(i))).collect()
    };
    // The flight surface at the nodes.
    let height = grid_points(&pts(&|i| cols[3][i]), &spec)
        .map_err(|e| e.to_string())?
        .surface;
    // Noise-free truth along the lines (map frame), gridded, and the full tensor from it.
    let truth_lines: Vec<[f64; 6]> = on
        .iter()
        .map(|&i| {
            probe
                .at(cols[1][i], cols[2][i], cols[3][i])
                .to_array()
                .map(|v| v / EOTVOS)
        })
        .collect();
    let ref_grids: Vec<gravgrad_core::raster::Raster> = (0..6)
        .map(|c| {
            let p: Vec<(f64, f64, f64)> = on
                .iter()
                .zip(&truth_lines)
                .map(|(&i, t)| (cols[1][i], cols[2][i], t[c]))
                .collect();
            grid_points(&p, &spec)
                .map(|g| g.surface)
                .map_err(|e| e.to_string())
        })
        .collect::<Result<_, _>>()?;
    let refs: [Option<&gravgrad_core::raster::Raster>; 6] =
        std::array::from_fn(|c| Some(&ref_grids[c]));
    let derived = full_tensor(
        &refs,
        &TensorOptions {
            upward_m: upward,
            ..TensorOptions::default()
        },
    )
    .map_err(|e| e.to_string())?;
    let mut out = Vec::new();
    for (c, comp) in COMPONENTS.iter().enumerate() {
        for (name, reference) in [
            (format!("measured_g{comp}"), &ref_grids[c]),
            (format!("g{comp}"), &derived.components[c]),
        ] {
            let Ok(ours) = read(&name) else { continue };
            let reference = blank(
                reference,
                &ours
                    .values
                    .iter()
                    .map(|v| v.is_finite())
                    .collect::<Vec<_>>(),
            );
            let mut err = Vec::new();
            let mut gerr = Vec::new();
            for row in 0..ours.ny {
                for col in 0..ours.nx {
                    let k = row * ours.nx + col;
                    if !ours.values[k].is_finite() {
                        continue;
                    }
                    let (x, y) = ours.cell_centre(col, row);
                    let up = if name.starts_with("measured_") {
                        0.0
                    } else {
                        upward
                    };
                    let t = probe.at(x, y, height.values[k] + up).to_array()[c] / EOTVOS;
                    err.push(ours.values[k] - t);
                    gerr.push(reference.values[k] - t);
                }
            }
            let floor = lines.components[c].filtered_noise_floor_e;
            let g = rms_about_mean(&gerr);
            out.push(GridScore {
                grid: name,
                cells: err.len(),
                rms_error_e: rms_about_mean(&err),
                gridding_error_e: g,
                noise_floor_e: floor,
                limit_e: 1.2 * floor + g,
            });
        }
    }
    Ok(out)
}
