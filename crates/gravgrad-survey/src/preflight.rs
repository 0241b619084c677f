//! What `gravgrad check RECIPE` and `gravgrad run RECIPE` both do before any processing, so that
//! they agree about every input: the recipe and everything it names read and checked
//! (`gravgrad_ingest::check::load_recipe`), the map frame chosen (UTM; a survey beyond 80°S–84°N
//! refused), the DEM read and its window over the survey plus `terrain.margin_m` cut, checked and
//! filled (`gravgrad_ingest::dem::prepare_window`), the size of every big thing the run will make
//! (grid lattice, DEM window and the terrain engine's pyramid) computed and held to its limit, and
//! the optional channels screened as the run will screen them. Every problem lands in the recipe's
//! report, located: `check` prints them, `run` stops on any error before its work starts.
//!
//! Units: positions in the survey's UTM frame, m; sizes in nodes, cells and bytes.

use crate::grid_stage::{self, GridPlan, MAX_GRID_NODES};
use crate::pipeline::{self, MapFrame};
use gravgrad_calibrate::channels::{self, ScreenLimits, Screened};
use gravgrad_core::projection::TransverseMercator;
use gravgrad_core::raster::Raster;
use gravgrad_core::{Location, Problem};
use gravgrad_ingest::check::{LoadedFlight, Survey, load_recipe};
use gravgrad_ingest::dem::{self, DEM_BYTES_PER_CELL, DemWindow, Extent};
use gravgrad_ingest::recipe::MAX_GRID_NODES_ALLOWED;
use gravgrad_ingest::recipe::{CalibrationMode, Recipe};
use rayon::prelude::*;
use std::path::Path;

/// Memory of the grid stage per lattice node, bytes: six components gridded at once, each with its
/// surface, weights and coarser levels, then the full tensor's spectra. Measured: peak resident
/// size less that of the same run at 50 m cells, over the nodes, 810–1000 bytes at 0.2–1.3 million
/// nodes (the lattices of `MAX_GRID_NODES`' note); rounded up.
pub const GRID_BYTES_PER_NODE: usize = 1000;

/// A recipe and its inputs, checked and sized, ready for the run.
pub struct Preflight {
    pub survey: Survey,
    /// The survey's map frame (None when the recipe or the flights did not load, or it failed).
    pub frame: Option<MapFrame>,
    /// The DEM window the terrain stage uses (None without `[terrain]` or when it failed).
    pub dem: Option<DemWindow>,
    /// The lattice the grid stage will make.
    pub grid: Option<GridPlan>,
}

impl Preflight {
    pub fn has_errors(&self) -> bool {
        self.survey.has_errors()
    }

    /// The sizes the run will need, one line for the log.
    pub fn sizes(&self) -> String {
        let samples: usize = self
            .survey
            .flights
            .iter()
            .map(|f| f.flight.table.n_rows())
            .sum();
        let mut s = format!("{samples} samples");
        if let Some(g) = &self.grid {
            s.push_str(&format!(
                "; grid {} × {} nodes of {} m (about {:.2} GB)",
                g.nx,
                g.ny,
                g.cell_m,
                (g.nodes() * GRID_BYTES_PER_NODE) as f64 / 1e9
            ));
        }
        if let Some(d) = &self.dem {
            let cells = d.raster.nx * d.raster.ny;
            s.push_str(&format!(
                "; terrain window {} × {} cells (about {:.2} GB)",
                d.raster.nx,
                d.raster.ny,
                (cells * DEM_BYTES_PER_CELL) as f64 / 1e9
            ));
        }
        s
    }
}

/// Where the terrain model comes from.
#[derive(Clone, Copy, Debug)]
pub enum DemSource<'a> {
    /// The file the recipe's `terrain.dem` names, read over the window only.
    Recipe,
    /// This raster, held in memory (the survey's frame, elevations in m above the ellipsoid).
    Memory(&'a Raster),
}

/// Reads, checks and sizes the recipe at `recipe_path` and everything it names (module doc).
pub fn preflight(recipe_path: &Path) -> Preflight {
    preflight_survey(load_recipe(recipe_path), recipe_path, DemSource::Recipe)
}

/// Checks and sizes a survey already read (from files, or from memory by
/// `gravgrad_ingest::memory::survey_from_memory`), its DEM from `dem`; `recipe_path` names the
/// recipe in messages.
pub fn preflight_survey(mut survey: Survey, recipe_path: &Path, dem: DemSource<'_>) -> Preflight {
    let mut out = Preflight {
        survey: Survey::default(),
        frame: None,
        dem: None,
        grid: None,
    };
    let recipe = match (&survey.recipe, survey.has_errors()) {
        (Some(r), false) => r.clone(),
        _ => {
            out.survey = survey;
            return out;
        }
    };
    let mut problems = Vec::new();
    match pipeline::map_frame(&recipe, recipe_path, &survey.flights) {
        Ok(frame) => {
            let (extent, tracks) = survey_geometry(&frame.projection, &survey.flights);
            out.grid = check_grid(&recipe, recipe_path, &tracks, &mut problems);
            if let Some(t) = &recipe.terrain {
                let key = Location::file(recipe_path).with_key("terrain.dem");
                let need = [
                    extent[0] - t.margin_m,
                    extent[1] + t.margin_m,
                    extent[2] - t.margin_m,
                    extent[3] + t.margin_m,
                ];
                match window(&recipe, &frame, need, &key, dem) {
                    Ok(w) => {
                        problems.extend(w.warnings.iter().cloned());
                        out.dem = Some(w);
                    }
                    Err(p) => problems.extend(p),
                }
            }
            out.frame = Some(frame);
        }
        Err(p) => problems.push(p),
    }
    problems.extend(optional_channels(&recipe, &survey.flights));
    if let Some(first) = survey.reports.first_mut() {
        first.problems.extend(problems);
    }
    out.survey = survey;
    out
}

/// The extent of every sample of every flight in the map frame (west, east, south, north; m), and
/// each line's positions (runs of one line number, as the line stages cut them).
fn survey_geometry(
    tm: &TransverseMercator,
    flights: &[LoadedFlight],
) -> (Extent, Vec<Vec<(f64, f64)>>) {
    let mut extent = [
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
    ];
    let mut tracks = Vec::new();
    for f in flights {
        let (Some(lat), Some(lon)) = (f.flight.table.get("lat"), f.flight.table.get("lon")) else {
            continue;
        };
        let xy: Vec<(f64, f64)> = lat
            .par_iter()
            .zip(lon)
            .map(|(la, lo)| {
                let (e, n, _, _) = tm.forward(la.to_radians(), lo.to_radians());
                (e, n)
            })
            .collect();
        for &(x, y) in &xy {
            if x.is_finite() && y.is_finite() {
                extent = [
                    extent[0].min(x),
                    extent[1].max(x),
                    extent[2].min(y),
                    extent[3].max(y),
                ];
            }
        }
        // Line number per sample as the pipeline assigns it; then runs of one number.
        let n = xy.len();
        let mut line = vec![0i64; n];
        for s in &f.lines {
            for l in &mut line[s.start.min(n)..s.end.min(n)] {
                *l = s.line;
            }
        }
        let mut i = 0;
        while i < n {
            let (l, start) = (line[i], i);
            while i < n && line[i] == l {
                i += 1;
            }
            if l > 0 {
                tracks.push(xy[start..i].to_vec());
            }
        }
    }
    (extent, tracks)
}

/// The grid lattice, refused past `grid.max_nodes` (default [`MAX_GRID_NODES`]) naming
/// `grid.cell_m`.
fn check_grid(
    recipe: &Recipe,
    recipe_path: &Path,
    tracks: &[Vec<(f64, f64)>],
    problems: &mut Vec<Problem>,
) -> Option<GridPlan> {
    let plan = grid_stage::plan_grid(recipe, tracks)?;
    let nodes = plan.nodes();
    let limit = recipe
        .grid
        .max_nodes
        .map_or(MAX_GRID_NODES, |n| usize::try_from(n).unwrap_or(usize::MAX));
    if nodes > limit {
        let how = match (recipe.grid.cell_m, plan.spacing_m) {
            (Some(_), _) => "the recipe's cell".to_string(),
            (None, Some(s)) => format!("the default cell, a quarter of the {s:.0} m line spacing"),
            (None, None) => "the default cell (no line spacing found)".to_string(),
        };
        // The blanking distance is to blame when the lines alone fit.
        let (key, hint) = if recipe.grid.blanking_m.is_some() && plan.line_nodes <= limit {
            (
                "grid.blanking_m",
                "lower `grid.blanking_m` (cells farther than it from data are empty anyway)"
                    .to_string(),
            )
        } else {
            // Nodes scale with 1/cell²: the cell at which the lattice fits.
            let fits = plan.cell_m * (nodes as f64 / limit as f64).sqrt();
            (
                "grid.cell_m",
                format!(
                    "set `grid.cell_m` to {:.0} m or more{}",
                    fits.ceil(),
                    if (nodes as u64) <= MAX_GRID_NODES_ALLOWED {
                        ", or raise `grid.max_nodes` (at most 2,000,000: about 1 kB of memory a \
                         node, and minutes of gridding)"
                    } else {
                        ""
                    }
                ),
            )
        };
        problems.push(
            Problem::error(
                Location::file(recipe_path).with_key(key),
                format!(
                    "the grid would be {} × {} = {nodes} nodes of {} m ({how}; the survey's lines \
                     plus the {} m blanking distance), about {:.1} GB; the limit is \
                     {limit} nodes (`grid.max_nodes`)",
                    plan.nx,
                    plan.ny,
                    plan.cell_m,
                    plan.blanking_m,
                    (nodes as f64 * GRID_BYTES_PER_NODE as f64) / 1e9
                ),
            )
            .with_hint(hint),
        );
    }
    Some(plan)
}

/// The recipe's DEM, in the survey's frame, cut to the window `need` and made fit to use.
fn window(
    recipe: &Recipe,
    frame: &MapFrame,
    need: Extent,
    key: &Location,
    dem: DemSource<'_>,
) -> Result<DemWindow, Vec<Problem>> {
    let Some(t) = &recipe.terrain else {
        return Err(vec![]);
    };
    let path = recipe.resolve(&t.dem);
    if let DemSource::Memory(raster) = dem {
        if raster.epsg != Some(frame.epsg) {
            return Err(vec![Problem::error(
                key.clone(),
                format!(
                    "the terrain model in memory is in {}, the survey in EPSG:{}",
                    raster
                        .epsg
                        .map_or("no stated frame".to_string(), |c| format!("EPSG:{c}")),
                    frame.epsg
                ),
            )]);
        }
        return dem::prepare_window(raster, need, &path, key);
    }
    // Where the DEM lies, from its header: the frame and the window are judged before any cell
    // is decoded, and only the window's cells are.
    let header = dem::read_dem_header(&path, None).map_err(|p| {
        let mut out = vec![Problem::error(
            key.clone(),
            format!("the terrain model {} cannot be used", path.display()),
        )];
        out.extend(p);
        out
    })?;
    if header.epsg != Some(frame.epsg) {
        return Err(vec![
            Problem::error(
                key.clone(),
                format!(
                    "{}: the terrain model's frame is {}, the survey's EPSG:{}",
                    path.display(),
                    header
                        .epsg
                        .map_or("not stated".to_string(), |c| format!("EPSG:{c}")),
                    frame.epsg
                ),
            )
            .with_hint("reproject the terrain model to the survey's projection (metres)"),
        ]);
    }
    dem::read_window(&path, None, &header, need, &dem::WindowKeys::recipe(key))
}

/// What the run will do with the optional channels `temp`, `ac_roll`, `ac_pitch` (calibration
/// regressors, screened by `gravgrad_calibrate::channels::screen` exactly as the pipeline screens
/// them) and `clearance` (QC), when they hold empty or not-a-number cells: one warning each.
fn optional_channels(recipe: &Recipe, flights: &[LoadedFlight]) -> Vec<Problem> {
    let fitted = recipe.calibration.mode != CalibrationMode::None;
    let mut out = Vec::new();
    for f in flights {
        let table = &f.flight.table;
        let n = table.n_rows();
        let Some(rate) = f.time_base.as_ref().map(|t| t.rate_hz) else {
            continue;
        };
        let mut usable = vec![false; n];
        for s in &f.lines {
            for u in &mut usable[s.start.min(n)..s.end.min(n)] {
                *u = true;
            }
        }
        if fitted {
            for (name, limits) in [
                ("temp", ScreenLimits::TEMPERATURE),
                ("ac_roll", ScreenLimits::ATTITUDE),
                ("ac_pitch", ScreenLimits::ATTITUDE),
            ] {
                let Some(x) = table.get(name) else { continue };
                let first_bad = x.iter().position(|v| !v.is_finite());
                let note = match channels::screen(name, x, Some(&usable), rate, limits) {
                    Screened::Use(_, note) => note,
                    Screened::Drop(why) => Some(why),
                };
                if let Some(note) = note {
                    let at = match first_bad {
                        Some(i) => f.flight.row_location(i).with_column(name),
                        None => f.flight.source.clone().with_column(name),
                    };
                    out.push(Problem::warning(
                        at,
                        format!("the run will do this: {note}"),
                    ));
                }
            }
        }
        if let Some(c) = table.get("clearance") {
            let bad: Vec<usize> = (0..n).filter(|&i| !c[i].is_finite()).collect();
            if let Some(&first) = bad.first() {
                let judged = recipe.qc.planned_clearance_m.is_some();
                out.push(Problem::warning(
                    f.flight.row_location(first).with_column("clearance"),
                    format!(
                        "{} of {n} cells are empty or not a number; the run {}",
                        bad.len(),
                        if judged {
                            "judges each line's clearance on its other samples (a line with none is not judged) and takes the calibration band's clearance from them"
                        } else {
                            "takes the calibration band's median clearance from the other samples"
                        }
                    ),
                ));
            }
        }
    }
    out
}
