//! Flights as units of work for `gravgrad run`: `--flight NAME` runs one flight's per-flight stages
//! and stores the result (`flight_store`), and a plain run takes every stored flight whose key still
//! matches instead of computing it. The survey-wide stages (levelling across flights, gridding,
//! products) always run on all flights.

use crate::run::{CalibrationChoice, process_units};
use gravgrad_core::Location;
use gravgrad_ingest::check::Survey;
use gravgrad_ingest::recipe::{CalibrationMode, Recipe};
use gravgrad_products::flight_store::{self, Stored};
use gravgrad_products::provenance::{self, Inputs};
use gravgrad_survey::pipeline::FlightResult;
use gravgrad_survey::{Processed, RunError};
use std::path::{Path, PathBuf};

/// What `process` does with stored flights.
#[derive(Clone, Copy, Debug)]
pub enum Units<'a> {
    /// Compute every flight; store nothing (`qc`, `calibrate`).
    Compute,
    /// Take matching stored flights from the output folder (`--out` or the recipe's), compute the
    /// others (`run`). `known`: the inputs hashed before the run read them.
    Reuse {
        out: Option<&'a Path>,
        known: Option<&'a Inputs>,
    },
    /// Compute and store only the flights `NAME` selects (`run --flight NAME`).
    Only {
        out: Option<&'a Path>,
        name: &'a str,
        known: Option<&'a Inputs>,
    },
}

/// Whether `--flight NAME` selects this flight: its name, or the stem of its file (every flight of
/// an HDF5 file holding several).
pub fn selects(name_arg: &str, name: &str, source: &Location) -> bool {
    name == name_arg
        || source
            .file
            .as_deref()
            .and_then(Path::file_stem)
            .is_some_and(|s| s.to_string_lossy() == name_arg)
}

/// The stored flights of one survey: the output folder and the part of the key every flight shares.
pub struct Store<'a> {
    out: PathBuf,
    epsg: u32,
    /// `(role, SHA-256)` of the recipe, instrument, navigation, DEM and calibration files.
    shared: Vec<(&'static str, String)>,
    /// The inputs hashed before the run read them (their hashes are taken from here).
    known: Option<&'a Inputs>,
}

/// The SHA-256 of `path`: as hashed before the run read it, else hashed now.
fn sha(known: Option<&Inputs>, path: &Path) -> Result<String, String> {
    if let Some(h) = known.and_then(|k| k.sha256_of(path)) {
        return Ok(h.to_string());
    }
    provenance::hashes(&[path.to_path_buf()])
        .map(|h| h.into_iter().map(|x| x.sha256).collect::<String>())
}

impl<'a> Store<'a> {
    /// The store of `survey` processed with `recipe` (at `recipe_path`) in the map frame `epsg`;
    /// `out` overrides the recipe's output folder.
    pub fn new(
        recipe_path: &Path,
        recipe: &Recipe,
        survey: &Survey,
        epsg: u32,
        mode: CalibrationMode,
        out: Option<&Path>,
        known: Option<&'a Inputs>,
    ) -> Result<Self, String> {
        let mut shared = vec![("recipe", sha(known, recipe_path)?)];
        if let Some(i) = &survey.instrument {
            shared.push(("instrument", sha(known, &i.path)?));
        }
        if let Some(n) = &recipe.input.navigation {
            shared.push(("navigation", sha(known, &recipe.resolve(n))?));
        }
        if let Some(t) = &recipe.terrain {
            shared.push(("dem", sha(known, &recipe.resolve(&t.dem))?));
        }
        if mode == CalibrationMode::File {
            let f = recipe
                .calibration
                .file
                .as_deref()
                .unwrap_or("calibration.toml");
            shared.push(("calibration", sha(known, &recipe.resolve(f))?));
        }
        Ok(Self {
            out: out.map_or_else(|| recipe.resolve(&recipe.output.folder), Path::to_path_buf),
            epsg,
            shared,
            known,
        })
    }

    /// The key of flight `name` read from `source`.
    pub fn key(&self, name: &str, source: &Location) -> Result<String, String> {
        let mut inputs = self.shared.clone();
        if let Some(f) = &source.file {
            inputs.push(("flight", sha(self.known, f)?));
        }
        Ok(flight_store::key(self.epsg, name, &inputs))
    }

    /// The stored result of flight `name` when its key matches; `None` (after saying why when the
    /// file exists but cannot be used) otherwise.
    pub fn reuse(&self, name: &str, key: &str) -> Option<FlightResult> {
        let path = flight_store::path(&self.out, name);
        let clock = std::time::Instant::now();
        match flight_store::read(&path, key) {
            Ok(Stored::Fresh(mut r)) => {
                r.timings = vec![("stored result read", clock.elapsed().as_secs_f64())];
                tracing::info!("{name}: stored result {} reused", path.display());
                Some(*r)
            }
            Ok(Stored::Stale) => None,
            Err(e) => {
                tracing::info!("{e}; the flight is computed again");
                None
            }
        }
    }

    /// Stores the result of flight `name`; its path.
    pub fn keep(&self, name: &str, key: &str, r: &FlightResult) -> Result<PathBuf, String> {
        let path = flight_store::path(&self.out, name);
        flight_store::write(&path, key, name, r)?;
        Ok(path)
    }
}

/// `gravgrad run RECIPE --flight NAME`: the per-flight stages of the flights NAME selects, stored
/// in the output folder. An input error when NAME selects no flight of the recipe.
pub fn run_one(recipe: &Path, out: Option<&Path>, name: &str) -> Result<Processed, RunError> {
    let units = Units::Only {
        out,
        name,
        known: None,
    };
    let p = process_units(recipe, CalibrationChoice::Recipe, units)?;
    if p.results.is_empty() {
        let all = gravgrad_ingest::recipe::read_recipe(recipe)
            .ok()
            .and_then(|r| r.flight_files(recipe).ok())
            .unwrap_or_default();
        let stems: Vec<String> = all
            .iter()
            .filter_map(|f| f.file_stem())
            .map(|s| s.to_string_lossy().into_owned())
            .collect();
        return Err(RunError::Refused(format!(
            "{}: --flight `{name}` is none of the recipe's flights (expected one of: {})",
            recipe.display(),
            stems.join(", ")
        )));
    }
    tracing::info!(
        "{} flight(s) processed and stored: {}",
        p.names.len(),
        p.names.join(", ")
    );
    Ok(p)
}
