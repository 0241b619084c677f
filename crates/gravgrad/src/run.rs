//! A survey run from its recipe, end to end: the recipe and every input read and checked before
//! any work, every flight through the pipeline (stored results reused when their inputs are
//! unchanged), then the line stages, QC, grids, calibration files, `survey.h5` and
//! `provenance.json`, built beside the output folder and switched in at once.
//!
//! Messages go through `tracing` (progress under the target [`PROGRESS`], located problems under
//! [`PROBLEM`]); nothing here prints. Errors say where and what was expected ([`RunError`]).

use crate::flight_units::{self, Store, Units};
use gravgrad_calibrate::file::CalibrationFile;
use gravgrad_core::pairs::AlphaSource;
use gravgrad_core::{Location, Problem};
use gravgrad_ingest::check::Survey;
use gravgrad_ingest::recipe::CalibrationMode;
use gravgrad_ingest::tomlfile;
use gravgrad_products::product_formats::ProductFormats;
use gravgrad_products::provenance::{self, Inputs};
use gravgrad_products::staging::{self, Staging};
use gravgrad_products::tables::write_text;
use gravgrad_products::{archive, grid_files, lines_file, output_folder, qc_files};
use gravgrad_survey::RunError;
use gravgrad_survey::grid_stage;
use gravgrad_survey::line_table::LinesTable;
use gravgrad_survey::pipeline::{self, CalibrationSource};
use gravgrad_survey::preflight::{Preflight, preflight};
use gravgrad_survey::processed::{Processed, flight_name};
use gravgrad_survey::results::{SURVEY_STAGES, survey_results, survey_stage_started};
use gravgrad_survey::terrain_stage::TerrainStage;
use std::path::{Path, PathBuf};

/// The `tracing` target of progress events: fields `done` and `total`, the message says what.
pub const PROGRESS: &str = "gravgrad::progress";

/// The `tracing` target of a located problem (a warning that names its file, row, column or key),
/// whose message is the problem as it shows itself.
pub const PROBLEM: &str = "gravgrad::problem";

/// Reports progress through `total` items under the target [`PROGRESS`].
pub fn progress(done: usize, total: usize, what: &str) {
    tracing::info!(target: PROGRESS, done, total, "{what}");
}

/// What a run is asked to do: the recipe, and what the command line changes of it.
#[derive(Clone, Debug, Default)]
pub struct RunOptions {
    /// The processing recipe (layout `recipe/1`).
    pub recipe: PathBuf,
    /// Output folder (default: the recipe's `output.folder`, relative to the recipe).
    pub out: Option<PathBuf>,
    /// Run only the per-flight stages of the flights this name selects and store their results
    /// (`<out>/flights/<NAME>.h5`) for a later run to reuse.
    pub flight: Option<String>,
    /// Apply this calibration file instead of what the recipe's `[calibration]` says.
    pub calibration: Option<PathBuf>,
}

/// What a finished run did.
#[derive(Clone, Debug)]
pub struct RunSummary {
    /// The output folder the products went into (absolute, links resolved).
    pub out: PathBuf,
    /// Flights processed or reused.
    pub flights: usize,
    /// Samples over all flights.
    pub samples: usize,
}

/// Which calibration a run applies.
#[derive(Clone, Copy, Debug)]
pub enum CalibrationChoice<'a> {
    /// What the recipe's `[calibration]` says.
    Recipe,
    /// Estimate from the flights, whatever the recipe says (`gravgrad calibrate`).
    Estimate,
    /// This calibration file, as `mode = "file"` would apply it.
    File(&'a Path),
}

/// Every error the check of the recipe and its inputs found, each with its place.
fn input_errors(recipe_path: &Path, survey: &Survey) -> RunError {
    let mut problems: Vec<Problem> = survey
        .reports
        .iter()
        .flat_map(|r| r.all_problems())
        .filter(|p| p.is_error())
        .cloned()
        .collect();
    if problems.is_empty() {
        // Cannot happen with a recipe that failed to load, but say something rather than nothing.
        problems.push(Problem::error(
            Location::file(recipe_path),
            "the recipe or an input it names could not be read; `gravgrad check` on the recipe says more",
        ));
    }
    RunError::Input(problems)
}

/// A writer's failure as a run's failure.
fn failed(e: impl std::fmt::Display) -> RunError {
    RunError::Failed(e.to_string())
}

/// Every flight's name (file stem, plus the HDF5 group) names its calibration file, its stored
/// result and its attribute in `survey.h5`: two flights of one name are an error naming both.
/// (Files of one stem are refused by the recipe's check; this catches a group's name meeting
/// another file's, `a.h5` group `b` beside `a-b.csv`.)
fn unique_names(recipe_path: &Path, survey: &Survey) -> Result<(), Problem> {
    let mut seen: Vec<(String, &Location)> = Vec::new();
    for f in &survey.flights {
        let loc = &f.flight.source;
        let name = flight_name(loc);
        if let Some((_, first)) = seen.iter().find(|(n, _)| *n == name) {
            let show = |l: &Location| {
                let file = l
                    .file
                    .as_deref()
                    .map_or(String::new(), |p| p.display().to_string());
                match &l.part {
                    Some(g) => format!("{file} (group {g})"),
                    None => file,
                }
            };
            return Err(Problem::error(
                Location::file(recipe_path).with_key("input.flights"),
                format!(
                    "`{}` and `{}` would both be the flight `{name}`; rename one",
                    show(first),
                    show(loc)
                ),
            ));
        }
        seen.push((name, loc));
    }
    Ok(())
}

/// The recipe as `--calibration FILE` makes it: `calibration.mode = "file"` with the file's
/// absolute path, the other calibration keys unchanged.
fn use_calibration_file(recipe: &mut gravgrad_ingest::recipe::Recipe, path: &Path) {
    let path = std::path::absolute(path).unwrap_or_else(|_| path.to_path_buf());
    recipe.calibration.mode = CalibrationMode::File;
    recipe.calibration.file = Some(path.to_string_lossy().into_owned());
}

/// Reads the recipe and everything it names, and processes every flight through the pipeline.
pub fn process(
    recipe_path: &Path,
    calibration: CalibrationChoice<'_>,
) -> Result<Processed, RunError> {
    process_units(recipe_path, calibration, Units::Compute)
}

/// [`process`], taking stored flights or storing them as `units` says.
pub fn process_units(
    recipe_path: &Path,
    calibration: CalibrationChoice<'_>,
    units: Units<'_>,
) -> Result<Processed, RunError> {
    tracing::info!("reading {}", recipe_path.display());
    let clock = std::time::Instant::now();
    // The same reading, checks and sizes as `gravgrad check RECIPE`; nothing is processed before
    // they pass.
    let pre = preflight(recipe_path);
    process_checked(pre, recipe_path, clock, calibration, units)
}

/// [`process_units`] of a survey already read and checked (`pre`, from files or from memory),
/// `clock` started when its reading began; `recipe_path` names the recipe in messages.
pub(crate) fn process_checked(
    pre: Preflight,
    recipe_path: &Path,
    clock: std::time::Instant,
    calibration: CalibrationChoice<'_>,
    units: Units<'_>,
) -> Result<Processed, RunError> {
    if pre.has_errors() {
        return Err(input_errors(recipe_path, &pre.survey));
    }
    let sizes = pre.sizes();
    let Preflight {
        mut survey,
        frame,
        dem,
        ..
    } = pre;
    if let (CalibrationChoice::File(path), Some(recipe)) = (calibration, survey.recipe.as_mut()) {
        tracing::info!(
            "applying the calibration file {} (--calibration) instead of the recipe's [calibration]",
            path.display()
        );
        use_calibration_file(recipe, path);
    }
    let (Some(recipe), Some(instrument), Some(frame)) = (&survey.recipe, &survey.instrument, frame)
    else {
        return Err(input_errors(recipe_path, &survey));
    };
    for w in survey
        .reports
        .first()
        .iter()
        .flat_map(|r| r.problems.iter())
    {
        tracing::warn!(target: PROBLEM, "{w}");
    }
    tracing::info!(
        "recipe, instrument and {} flights read and checked in {:.2} s; {sizes}",
        survey.flights.len(),
        clock.elapsed().as_secs_f64()
    );
    unique_names(recipe_path, &survey).map_err(RunError::problem)?;
    let mode = match calibration {
        CalibrationChoice::Estimate => CalibrationMode::Estimate,
        CalibrationChoice::Recipe | CalibrationChoice::File(_) => recipe.calibration.mode,
    };
    let file: Option<CalibrationFile> = if mode == CalibrationMode::File {
        let rel = recipe
            .calibration
            .file
            .as_deref()
            .unwrap_or("calibration.toml");
        let path = recipe.resolve(rel);
        let f: CalibrationFile = tomlfile::read(&path).map_err(RunError::problem)?;
        let ids = instrument.pair_ids();
        let ids: Vec<&str> = ids.iter().map(String::as_str).collect();
        let problems: Vec<Problem> = f
            .validate(&ids)
            .into_iter()
            .map(|fp| Problem::error(Location::file(&path).with_key(fp.key), fp.message))
            .collect();
        if !problems.is_empty() {
            return Err(RunError::Input(problems));
        }
        Some(f)
    } else {
        None
    };
    let terrain = match (&recipe.terrain, &dem) {
        (Some(t), Some(window)) => {
            tracing::info!("building the terrain model of {}", t.dem);
            Some(
                TerrainStage::new(recipe, recipe_path, t, &window.raster)
                    .map_err(RunError::Input)?,
            )
        }
        _ => None,
    };
    drop(dem);
    let store = match units {
        Units::Compute => None,
        Units::Reuse { out, known } | Units::Only { out, known, .. } => Some(
            Store::new(recipe_path, recipe, &survey, frame.epsg, mode, out, known)
                .map_err(RunError::Failed)?,
        ),
    };
    let mut results = Vec::new();
    let mut names = Vec::new();
    let mut reused = Vec::new();
    let total = survey.flights.len();
    for (k, flight) in survey.flights.iter().enumerate() {
        let name = flight_name(&flight.flight.source);
        if let Units::Only { name: only, .. } = units
            && !flight_units::selects(only, &name, &flight.flight.source)
        {
            continue;
        }
        let key = match &store {
            Some(s) => Some(
                s.key(&name, &flight.flight.source)
                    .map_err(RunError::Failed)?,
            ),
            None => None,
        };
        if let (Units::Reuse { .. }, Some(s), Some(key)) = (units, &store, &key)
            && let Some(r) = s.reuse(&name, key)
        {
            results.push(r);
            reused.push(name.clone());
            names.push(name);
            continue;
        }
        progress(k, total, &format!("processing {name}"));
        let source = match (&mode, &file) {
            (CalibrationMode::File, Some(f)) => CalibrationSource::File(f),
            (CalibrationMode::None, _) => CalibrationSource::None,
            _ => CalibrationSource::Estimate,
        };
        let in_flight = tracing::info_span!(target: PROGRESS, "flight", flight = name.as_str());
        let entered = in_flight.enter();
        let r = pipeline::process_flight(recipe, instrument, flight, &frame, source, |p| {
            terrain.as_ref().map(|t| t.tensor_true_north(p)).transpose()
        })
        .map_err(RunError::problem)?;
        drop(entered);
        if let Some(w) = terrain
            .as_ref()
            .and_then(|t| t.coverage_warning(&r.positions))
        {
            tracing::warn!(target: PROBLEM, "{w}");
        }
        tracing::info!(
            "{name}: angular acceleration from the {}{}",
            match r.alpha_source {
                AlphaSource::Pairs => "pairs",
                AlphaSource::Gyros => "gyros",
            },
            if r.heading_only {
                "; partial tensor turned to NED by heading only"
            } else {
                ""
            }
        );
        for note in &r.calibration_notes {
            tracing::warn!("{name}: {note}")
        }
        tracing::info!(
            "{name}: {} samples; {}",
            r.time.len(),
            r.timings
                .iter()
                .map(|(s, t)| format!("{s} {t:.2} s"))
                .collect::<Vec<_>>()
                .join(", ")
        );
        if let (Units::Only { .. }, Some(s), Some(key)) = (units, &store, &key) {
            let path = s.keep(&name, key, &r).map_err(RunError::Failed)?;
            tracing::info!("{name}: stored as {}", path.display())
        }
        results.push(r);
        names.push(name);
    }
    progress(total, total, "flights processed");
    Ok(Processed {
        survey,
        frame,
        names,
        results,
        reused,
    })
}

/// The output folder: `--out`, else the recipe's `output.folder` beside the recipe.
pub fn output_folder(p: &Processed, out: Option<&Path>) -> PathBuf {
    match out {
        Some(o) => o.to_path_buf(),
        None => p
            .survey
            .recipe
            .as_ref()
            .map(|r| r.resolve(&r.output.folder))
            .unwrap_or_else(|| PathBuf::from("products")),
    }
}

/// Writes each flight's calibration to `<dir>/calibration/<flight>.toml`.
pub fn write_calibrations(p: &Processed, dir: &Path) -> Result<Vec<PathBuf>, String> {
    let band = p
        .survey
        .recipe
        .as_ref()
        .map_or([0.05, 1.0], |r| r.calibration.band_hz);
    let mut written = Vec::new();
    for (name, r) in p.names.iter().zip(&p.results) {
        if r.calibration.is_empty() {
            continue;
        }
        let file = CalibrationFile::new(name, band, &r.calibration);
        let path = dir.join("calibration").join(format!("{name}.toml"));
        write_text(&path, &file.to_toml())?;
        written.push(path);
    }
    Ok(written)
}

/// Writes `survey.h5`.
fn write_archive(
    dir: &Path,
    p: &Processed,
    table: &LinesTable,
    grids: Option<&grid_stage::Grids>,
    title: &str,
    recipe_text: &str,
    hashes: &[provenance::Hashed],
) -> Result<(), String> {
    let band = p
        .survey
        .recipe
        .as_ref()
        .map_or([0.05, 1.0], |r| r.calibration.band_hz);
    let measured_names: Vec<String> = grid_stage::NAMES
        .iter()
        .map(|n| format!("measured_{n}"))
        .collect();
    let mut archived = Vec::new();
    if let Some(g) = grids {
        for (m, name) in g.measured.iter().zip(&measured_names) {
            if let Some(m) = m {
                archived.push(archive::ArchivedGrid {
                    name,
                    units: "E",
                    long_name: "measured component, gridded",
                    raster: m,
                });
            }
        }
        for c in 0..6 {
            archived.push(archive::ArchivedGrid {
                name: grid_stage::NAMES[c],
                units: "E",
                long_name: "full tensor from all measured components",
                raster: &g.tensor[c],
            });
        }
        archived.push(archive::ArchivedGrid {
            name: "gz",
            units: "mGal",
            long_name: "vertical gravity from the tensor, mean removed",
            raster: &g.gz,
        });
    }
    let a = archive::Archive {
        title,
        epsg: p.frame.epsg,
        lines: table,
        grids: archived,
        calibrations: p
            .names
            .iter()
            .zip(&p.results)
            .filter(|(_, r)| !r.calibration.is_empty())
            .map(|(n, r)| {
                (
                    n.clone(),
                    CalibrationFile::new(n, band, &r.calibration).to_toml(),
                )
            })
            .collect(),
        recipe_text: recipe_text.to_string(),
        sha256: hashes
            .iter()
            .map(|h| format!("{}  {}\n", h.sha256, h.path.display()))
            .collect(),
    };
    archive::write(&dir.join("survey.h5"), &a)
}

/// The output folder `gravgrad qc` writes its `qc/` into, checked as a run's is
/// (`output_folder::check`) before any work: `Ok(None)` when the recipe cannot be read (the
/// processing's own check then says why).
pub fn checked_qc_folder(
    recipe_path: &Path,
    out: Option<&Path>,
) -> Result<Option<PathBuf>, RunError> {
    let Ok(text) = std::fs::read_to_string(recipe_path) else {
        return Ok(None);
    };
    let Ok(recipe) = gravgrad_ingest::recipe::read_recipe(recipe_path) else {
        return Ok(None);
    };
    let (dir, key) = match out {
        Some(o) => (o.to_path_buf(), "--out".to_string()),
        None => (
            recipe.resolve(&recipe.output.folder),
            format!("{}: output.folder", recipe_path.display()),
        ),
    };
    let inputs = Inputs::list(recipe_path, text, &recipe);
    let paths: Vec<PathBuf> = inputs.files.iter().map(|f| f.path.clone()).collect();
    output_folder::check(&dir, &key, &paths)
        .map(Some)
        .map_err(RunError::Refused)
}

/// What a run knows before any work: the recipe's inputs hashed before they are read, and the
/// output folder checked.
struct OutputPlan {
    inputs: Inputs,
    /// The output folder to replace: absolute, links resolved.
    out: PathBuf,
}

/// Reads the recipe, checks the output folder (`output_folder::check`) and then hashes every input
/// before any is read (not for `--flight`). `Ok(None)`: the recipe cannot be read; the run's own check reports why.
fn plan_output(args: &RunOptions) -> Result<Option<OutputPlan>, RunError> {
    let Ok(text) = std::fs::read_to_string(&args.recipe) else {
        return Ok(None);
    };
    let Ok(mut recipe) = gravgrad_ingest::recipe::read_recipe(&args.recipe) else {
        return Ok(None);
    };
    if let Some(f) = &args.calibration {
        use_calibration_file(&mut recipe, f);
    }
    let (out, key) = match &args.out {
        Some(o) => (o.clone(), "--out".to_string()),
        None => (
            recipe.resolve(&recipe.output.folder),
            format!("{}: output.folder", args.recipe.display()),
        ),
    };
    let mut inputs = Inputs::list(&args.recipe, text, &recipe);
    let paths: Vec<PathBuf> = inputs.files.iter().map(|f| f.path.clone()).collect();
    let out = output_folder::check(&out, &key, &paths).map_err(RunError::Refused)?;
    if args.flight.is_none() {
        // A flight unit (`--flight`) writes no products: its stored result's key hashes the few
        // inputs it reads.
        inputs.hash();
    }
    Ok(Some(OutputPlan { inputs, out }))
}

/// Runs a survey from its recipe as `options` says, products into the output folder: the recipe's
/// inputs hashed and the output folder checked before any work, every flight processed (stored
/// results reused), then every product built in a folder beside the output folder and switched
/// in at once. With `options.flight`, only the per-flight stages of that flight, stored. The
/// crate's documentation runs a whole survey; a recipe that cannot be read is an input error:
///
/// ```
/// use gravgrad::run::{RunOptions, run};
/// let options = RunOptions {
///     recipe: "no/such/recipe.toml".into(),
///     ..Default::default()
/// };
/// let e = run(&options).unwrap_err();
/// assert_eq!(e.exit_code(), 2);
/// assert!(e.to_string().contains("no/such/recipe.toml"));
/// ```
pub fn run(options: &RunOptions) -> Result<RunSummary, RunError> {
    let pre = plan_output(options)?;
    let out = pre
        .as_ref()
        .map(|p| p.out.as_path())
        .or(options.out.as_deref());
    if let Some(name) = &options.flight {
        let p = flight_units::run_one(&options.recipe, out, name)?;
        return Ok(RunSummary {
            out: out.map_or_else(|| output_folder(&p, None), Path::to_path_buf),
            flights: p.results.len(),
            samples: p.results.iter().map(|r| r.time.len()).sum(),
        });
    }
    let Some(pre) = &pre else {
        // The recipe cannot be read: the check says why.
        process_units(&options.recipe, CalibrationChoice::Recipe, Units::Compute)?;
        return Err(failed("the recipe could not be read before the run"));
    };
    // Opened before any work: a folder beside the output folder that cannot be made is found now.
    let staging = Staging::begin(&pre.out).map_err(RunError::Refused)?;
    let reuse = Units::Reuse {
        out: Some(&pre.out),
        known: Some(&pre.inputs),
    };
    let choice = match &options.calibration {
        Some(f) => CalibrationChoice::File(f),
        None => CalibrationChoice::Recipe,
    };
    let p = process_units(&options.recipe, choice, reuse)?;
    let clock = std::time::Instant::now();
    write_products(options, &p, staging.dir(), &pre.inputs)?;
    staging.commit(&p.reused).map_err(failed)?;
    survey_stage_started(SURVEY_STAGES.len());
    let samples: usize = p.results.iter().map(|r| r.time.len()).sum();
    tracing::info!(
        "products built and written in {:.2} s",
        clock.elapsed().as_secs_f64()
    );
    tracing::info!(
        "{} flights, {samples} samples; products in {}",
        p.results.len(),
        pre.out.display()
    );
    Ok(RunSummary {
        out: pre.out.clone(),
        flights: p.results.len(),
        samples,
    })
}

/// Every product of the run into `dir` (the next generation of the output folder), as
/// `output.formats` selects: lines, QC, grids and maps, calibration files, the archive, provenance.
/// Before the archive and provenance record the inputs, every input is hashed again; one that
/// changed since the run read it is an error (exit 2) and nothing is committed.
fn write_products(
    args: &RunOptions,
    p: &Processed,
    dir: &Path,
    inputs: &Inputs,
) -> Result<(), RunError> {
    let recipe = p.survey.recipe.as_ref();
    let formats = recipe.map_or(
        ProductFormats::of(&gravgrad_ingest::recipe::Output::default()),
        |r| ProductFormats::of(&r.output),
    );
    let built = survey_results(p, &args.recipe, formats.needs_grids())?;
    survey_stage_started(2);
    if let (Some(recipe), Some(stages)) = (recipe, &built.stages) {
        qc_files::write_qc(&dir.join("qc"), p, stages, recipe, &built.qc)?;
    }
    let table = &built.table;
    let clock = std::time::Instant::now();
    if formats.parquet {
        lines_file::write_parquet(table, &dir.join("lines.parquet"), &p.names, p.frame.epsg)
            .map_err(failed)?;
    }
    if formats.csv {
        lines_file::write_csv(table, &dir.join("lines.csv")).map_err(failed)?;
    }
    if formats.parquet || formats.csv {
        tracing::info!(
            "line table written in {:.2} s",
            clock.elapsed().as_secs_f64()
        );
    }
    let title = recipe.map_or("survey".to_string(), |r| r.survey.name.clone());
    let grids = built.grids.as_ref();
    survey_stage_started(3);
    if let Some(g) = grids {
        let clock = std::time::Instant::now();
        grid_files::write(dir, g, &p.results, &title, formats.grids).map_err(failed)?;
        tracing::info!(
            "grids and maps written in {:.2} s",
            clock.elapsed().as_secs_f64()
        );
    }
    survey_stage_started(4);
    let clock = std::time::Instant::now();
    write_calibrations(p, dir).map_err(failed)?;
    staging::pause_at("built");
    let hashes = inputs.verify().map_err(RunError::Refused)?;
    survey_stage_started(5);
    if formats.hdf5 {
        write_archive(dir, p, table, grids, &title, &inputs.recipe_text, &hashes)
            .map_err(failed)?;
    }
    provenance::write(
        dir,
        &args.recipe,
        &inputs.recipe_text,
        &hashes,
        &p.names,
        &p.results,
        p.frame.epsg,
    )
    .map_err(failed)?;
    tracing::info!(
        "calibration files, archive and provenance.json written in {:.2} s",
        clock.elapsed().as_secs_f64()
    );
    Ok(())
}
