//! A survey from arrays in memory, processed stage by stage or end to end without a file: each
//! flight's columns as `ndarray` views, named and in the units of a raw log's columns
//! (docs/formats.md, or as the recipe's `input.columns` maps them), an instrument and a recipe
//! built in code, and optionally the DEM as a [`Raster`]. What comes back are the same results a
//! run from files writes — the line table, the line stages, a QC verdict per line, the grids — as
//! arrays: [`SurveyOutput::column`], [`SurveyOutput::grid`].
//!
//! The arithmetic is the file run's, step for step: the same arrays give the same bits as
//! `gravgrad run` on files holding them (checked by `examples/arrays_to_grids.rs`).
//!
//! Frames and units: positions in the survey's map frame (m); line tensors in E, NED true north;
//! grids in E (gz in mGal), x grid north, y grid east, z down, row 0 the northernmost.
//!
//! ```
//! use gravgrad::memory::SurveyInMemory;
//! use gravgrad::{parse_instrument, parse_recipe};
//! use ndarray::Array1;
//! use std::path::Path;
//!
//! let recipe = parse_recipe(
//!     Path::new("recipe"),
//!     "layout = \"recipe/1\"\n[input]\nflights = []\n[instrument]\npath = \"in memory\"\n",
//!     Path::new("."),
//! )
//! .unwrap();
//! let instrument = parse_instrument(
//!     Path::new("instrument"),
//!     "layout = \"instrument/1\"\nname = \"one pair\"\n[[pair]]\nid = \"zz\"\n\
//!      center_m = [0.0, 0.0, 0.0]\nbaseline_m = [0.0, 0.0, 0.2]\naxis = [0.0, 0.0, 1.0]\n",
//! )
//! .unwrap();
//! // A flight without its navigation columns is refused, naming what is missing.
//! let time = Array1::linspace(0.0, 9.9, 100);
//! let err = SurveyInMemory::new(recipe, instrument)
//!     .with_flight("f01", &[("time", time.view())])
//!     .check()
//!     .err()
//!     .unwrap();
//! assert_eq!(err.exit_code(), 2);
//! assert!(err.to_string().contains("f01"));
//! ```

use crate::flight_units::Units;
use crate::run::{CalibrationChoice, process_checked};
use gravgrad_core::raster::Raster;
use gravgrad_ingest::instrument::Instrument;
use gravgrad_ingest::memory::{FlightColumns, survey_from_memory};
use gravgrad_ingest::recipe::Recipe;
use gravgrad_survey::preflight::{DemSource, Preflight, preflight_survey};
use gravgrad_survey::results::{SurveyResults, survey_results};
use gravgrad_survey::{Processed, RunError};
use ndarray::{Array2, ArrayView1};
use std::path::Path;

/// How messages name a recipe held in memory.
const RECIPE_NAME: &str = "recipe (in memory)";

/// One flight's name and its named columns, as views.
type FlightViews<'a> = (String, Vec<(String, ArrayView1<'a, f64>)>);

/// A survey to be processed from arrays: a recipe, an instrument, flights and optionally a DEM.
pub struct SurveyInMemory<'a> {
    recipe: Recipe,
    instrument: Instrument,
    flights: Vec<FlightViews<'a>>,
    dem: Option<Raster>,
}

impl<'a> SurveyInMemory<'a> {
    /// A survey of `recipe` (its `input.flights` and `instrument.path` are not read: the flights
    /// and the instrument are given here) measured with `instrument`.
    pub fn new(recipe: Recipe, instrument: Instrument) -> Self {
        Self {
            recipe,
            instrument,
            flights: Vec::new(),
            dem: None,
        }
    }

    /// Adds a flight: its name (which names its products, as a log file's stem does) and its
    /// columns, each `(name, values)`, all of one length; in flying order.
    pub fn with_flight(mut self, name: &str, columns: &[(&str, ArrayView1<'a, f64>)]) -> Self {
        self.flights.push((
            name.to_string(),
            columns.iter().map(|(n, v)| (n.to_string(), *v)).collect(),
        ));
        self
    }

    /// The terrain model the recipe's `[terrain]` uses, in the survey's map frame (its EPSG code
    /// stated), elevations in m above the ellipsoid; cut to the survey plus `terrain.margin_m` as
    /// a file's would be.
    pub fn with_dem(mut self, dem: Raster) -> Self {
        self.dem = Some(dem);
        self
    }

    /// The first stage: every flight's columns matched, converted and checked, the map frame
    /// chosen, the DEM window cut and every size checked, as `gravgrad check` does for files.
    pub fn check(self) -> Result<Checked, RunError> {
        let clock = std::time::Instant::now();
        let flights = self
            .flights
            .into_iter()
            .map(|(name, cols)| FlightColumns {
                name,
                columns: cols.into_iter().map(|(n, v)| (n, v.to_vec())).collect(),
            })
            .collect();
        let name = Path::new(RECIPE_NAME);
        let survey = survey_from_memory(name, self.recipe, self.instrument, flights);
        let dem = match &self.dem {
            Some(r) => DemSource::Memory(r),
            None => DemSource::Recipe,
        };
        let pre = preflight_survey(survey, name, dem);
        if pre.has_errors() {
            let problems = pre
                .survey
                .reports
                .iter()
                .flat_map(|r| r.all_problems())
                .filter(|p| p.is_error())
                .cloned()
                .collect();
            return Err(RunError::Input(problems));
        }
        Ok(Checked { pre, clock })
    }

    /// Every stage end to end: [`Self::check`], [`Checked::process`], then the survey-wide
    /// stages with the grids.
    pub fn run(self) -> Result<SurveyOutput, RunError> {
        let processed = self.check()?.process()?;
        let results = survey_results(&processed, Path::new(RECIPE_NAME), true)?;
        Ok(SurveyOutput { processed, results })
    }
}

/// A survey read and checked, ready to process.
pub struct Checked {
    pre: Preflight,
    clock: std::time::Instant,
}

impl Checked {
    /// The sizes the run will need (samples, grid lattice, terrain window), one line.
    pub fn sizes(&self) -> String {
        self.pre.sizes()
    }

    /// The per-flight stages: calibration, rotation, normal field and terrain, every flight.
    pub fn process(self) -> Result<Processed, RunError> {
        process_checked(
            self.pre,
            Path::new(RECIPE_NAME),
            self.clock,
            CalibrationChoice::Recipe,
            Units::Compute,
        )
    }
}

/// The survey-wide stages of a processed survey (line table, filter and levelling, QC, and with
/// `with_grids` the grids).
pub fn survey_wide(p: &Processed, with_grids: bool) -> Result<SurveyResults, RunError> {
    survey_results(p, Path::new(RECIPE_NAME), with_grids)
}

/// Everything a survey gives, in memory.
pub struct SurveyOutput {
    /// Per flight: every stage's tensors along the line.
    pub processed: Processed,
    /// The line table, line stages, QC and grids.
    pub results: SurveyResults,
}

impl SurveyOutput {
    /// A column of the line table (`lines.parquet`'s names, e.g. `levelled_gzz`, `easting`),
    /// one value per sample of every flight in flying order; `None` when there is no such column.
    pub fn column(&self, name: &str) -> Option<ArrayView1<'_, f64>> {
        self.results.table.column(name)
    }

    /// A grid by its product name (`gzz`, `measured_gzz`, `gz`, …) as an array of shape
    /// (rows, columns), row 0 the northernmost, column 0 the westernmost; `None` when not made.
    pub fn grid(&self, name: &str) -> Option<Array2<f64>> {
        self.results.grids.as_ref()?.by_name(name)?.to_array2().ok()
    }
}
