//! From arrays to grids without a file: the demo survey simulated in memory, its flights handed
//! over as `ndarray` columns, processed end to end by `gravgrad::memory`, and the grids printed
//! as a fingerprint of their bits.
//!
//! ```sh
//! cargo run --release -p gravgrad --example arrays_to_grids
//! # the same survey run from files, then both compared bit for bit:
//! cargo run --release -- run data/demo/recipe.toml --out /tmp/demo-run
//! cargo run --release -p gravgrad --example arrays_to_grids -- --compare /tmp/demo-run/survey.h5
//! ```
//!
//! The scenario and the recipe are the demo's, compiled in; nothing is read at run time unless
//! `--compare` names a run's `survey.h5` to compare with. The DEM is handed over as the demo's
//! GeoTIFF stores it (float32), so that both runs see the same data.

use gravgrad::memory::SurveyInMemory;
use gravgrad::simulate::{dem_raster, flight_stem, instrument_text};
use gravgrad::{parse_instrument, parse_recipe};
use gravgrad_sim::scenario::Scenario;
use ndarray::{Array1, Array2};
use std::path::Path;
use std::process::ExitCode;

const RECIPE: &str = include_str!("../../../data/demo/recipe.toml");

/// The grids `gravgrad run` writes into `survey.h5`.
const GRIDS: [&str; 13] = [
    "measured_gxx",
    "measured_gxy",
    "measured_gxz",
    "measured_gyy",
    "measured_gyz",
    "measured_gzz",
    "gxx",
    "gxy",
    "gxz",
    "gyy",
    "gyz",
    "gzz",
    "gz",
];

/// A flight's named columns.
type Columns = Vec<(String, Array1<f64>)>;

/// FNV-1a over the bits of every value, row by row.
fn fingerprint(a: &Array2<f64>) -> u64 {
    a.iter().fold(0xcbf2_9ce4_8422_2325, |h, v| {
        v.to_bits().to_le_bytes().iter().fold(h, |h, b| {
            (h ^ u64::from(*b)).wrapping_mul(0x0000_0100_0000_01b3)
        })
    })
}

/// The grid `name` of the `survey.h5` at `path`, as (rows, columns).
fn archived(path: &Path, name: &str) -> Result<Array2<f64>, String> {
    let file = hdf5_pure::File::open(path).map_err(|e| format!("{}: {e}", path.display()))?;
    let ds = file
        .group("grids")
        .and_then(|g| g.dataset(name))
        .map_err(|e| format!("{}: grids/{name}: {e}", path.display()))?;
    let shape = ds.shape().map_err(|e| e.to_string())?;
    let values = ds.read_f64().map_err(|e| e.to_string())?;
    let (ny, nx) = (shape[0] as usize, shape[1] as usize);
    Array2::from_shape_vec((ny, nx), values).map_err(|e| e.to_string())
}

fn main() -> ExitCode {
    let compare = std::env::args()
        .skip_while(|a| a != "--compare")
        .nth(1)
        .map(std::path::PathBuf::from);
    match run(compare.as_deref()) {
        Ok(true) => ExitCode::SUCCESS,
        Ok(false) => ExitCode::FAILURE,
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::from(2)
        }
    }
}

fn run(compare: Option<&Path>) -> Result<bool, String> {
    // The survey, simulated in memory.
    let scenario: Scenario =
        toml::from_str(gravgrad::demo_data::SCENARIO).map_err(|e| e.to_string())?;
    let sim = gravgrad_sim::simulate::simulate(&scenario).map_err(|e| e.to_string())?;
    // The recipe and instrument, built in code.
    let recipe = parse_recipe(Path::new("demo recipe"), RECIPE, Path::new("."))
        .map_err(|p| format!("{p:?}"))?;
    let instrument = parse_instrument(Path::new("simulated instrument"), &instrument_text(&sim))
        .map_err(|p| format!("{p:?}"))?;
    // Each flight's columns as arrays, with its line numbers; the DEM as float32 holds it.
    let flights: Vec<(String, Columns)> = sim
        .flights
        .iter()
        .enumerate()
        .map(|(k, f)| {
            let mut cols: Vec<(String, Array1<f64>)> = f
                .columns
                .iter()
                .map(|(n, v)| (n.clone(), Array1::from(v.clone())))
                .collect();
            cols.push(("line".into(), f.line.iter().map(|l| *l as f64).collect()));
            (flight_stem(&scenario.name, k), cols)
        })
        .collect();
    let mut dem = dem_raster(&sim)?;
    for v in &mut dem.values {
        *v = f64::from(*v as f32);
    }
    let mut survey = SurveyInMemory::new(recipe, instrument).with_dem(dem);
    for (name, cols) in &flights {
        let views: Vec<(&str, ndarray::ArrayView1<f64>)> =
            cols.iter().map(|(n, v)| (n.as_str(), v.view())).collect();
        survey = survey.with_flight(name, &views);
    }
    let out = survey.run().map_err(|e| e.to_string())?;

    let levelled = out.column("levelled_gzz").ok_or("no levelled_gzz column")?;
    let on_lines = levelled.iter().filter(|v| v.is_finite()).count();
    println!(
        "{} flights, {} samples ({on_lines} on lines), {} lines assessed",
        out.processed.results.len(),
        levelled.len(),
        out.results.qc.len()
    );
    let mut same = true;
    for name in GRIDS {
        let Some(g) = out.grid(name) else {
            continue;
        };
        let fp = fingerprint(&g);
        match compare {
            None => println!("{name:<13} {:>4} × {:<4} {fp:016x}", g.nrows(), g.ncols()),
            Some(path) => {
                let a = archived(path, name)?;
                let equal = a.shape() == g.shape()
                    && a.iter()
                        .zip(g.iter())
                        .all(|(x, y)| x.to_bits() == y.to_bits());
                same &= equal;
                println!(
                    "{name:<13} {:>4} × {:<4} {fp:016x}  {}",
                    g.nrows(),
                    g.ncols(),
                    if equal {
                        "equal to the last bit"
                    } else {
                        "DIFFERENT"
                    }
                );
            }
        }
    }
    Ok(same)
}
