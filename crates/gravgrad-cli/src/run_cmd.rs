//! `gravgrad run RECIPE`: every stage the recipe asks for, into one output folder. Today: calibration,
//! rotation-term removal and rotation to NED, normal-field and terrain reduction, the along-track
//! filter and the levelling (`line_stages`), written to `lines.parquet` (and `lines.csv` on request)
//! with the calibration of every flight.

use crate::archive;
use crate::flight_units::{self, Store, Units};
use crate::grid_stage;
use crate::line_stages;
use crate::lines_out;
use crate::logging::Log;
use crate::pipeline::{self, CalibrationSource, FlightResult, MapFrame};
use crate::preflight::{Preflight, preflight};
use crate::provenance;
use crate::qc_cmd;
use crate::report;
use crate::staging::Staging;
use crate::tables::write_atomic;
use crate::terrain_stage::TerrainStage;
use crate::{EXIT_BAD_INPUT, EXIT_FAILURE};
use clap::Args;
use gravgrad_calibrate::file::CalibrationFile;
use gravgrad_core::pairs::AlphaSource;
use gravgrad_core::{Location, Problem};
use gravgrad_ingest::check::Survey;
use gravgrad_ingest::recipe::CalibrationMode;
use gravgrad_ingest::tomlfile;
use std::io::Write;
use std::path::{Path, PathBuf};

#[derive(Args, Debug)]
pub struct RunArgs {
    /// Processing recipe (layout `recipe/1`, TOML).
    #[arg(value_name = "RECIPE")]
    pub recipe: PathBuf,
    /// Output folder (default: the recipe's `output.folder`, relative to the recipe).
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Run only the per-flight stages (calibration, rotation, normal and terrain) of this flight
    /// and store the result as `<out>/flights/<NAME>.h5`, for a later plain run to reuse. NAME: the
    /// flight's name as the log shows it, or its file name without extension.
    #[arg(long, value_name = "NAME")]
    pub flight: Option<String>,
}

/// A processed survey: what every flight gave, and where.
pub struct Processed {
    pub survey: Survey,
    pub frame: MapFrame,
    pub names: Vec<String>,
    pub results: Vec<FlightResult>,
}

/// Prints problems and returns the exit code for bad input.
pub fn bad_input(problems: &[Problem]) -> u8 {
    for p in problems {
        eprintln!("{p}");
    }
    EXIT_BAD_INPUT
}

/// Prints every error the check of the recipe and its inputs found, each with its place, on
/// stderr; returns the exit code for bad input.
fn input_errors(survey: &Survey) -> u8 {
    let problems: Vec<Problem> = survey
        .reports
        .iter()
        .flat_map(|r| r.all_problems())
        .filter(|p| p.is_error())
        .cloned()
        .collect();
    if problems.is_empty() {
        // Cannot happen with a recipe that failed to load, but say something rather than nothing.
        print!("{}", report::render(&survey.reports));
    }
    bad_input(&problems)
}

/// The short name of a flight: its file stem, plus the HDF5 group when there is one.
fn flight_name(loc: &Location) -> String {
    let stem = loc
        .file
        .as_deref()
        .and_then(Path::file_stem)
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "flight".into());
    match &loc.part {
        Some(p) => format!("{stem}-{}", p.trim_matches('/').replace('/', "-")),
        None => stem,
    }
}

/// Reads the recipe and everything it names, and processes every flight through the pipeline.
/// `Err(code)` after printing what was wrong.
pub fn process(
    recipe_path: &Path,
    log: &Log,
    calibration_override: Option<CalibrationMode>,
) -> Result<Processed, u8> {
    process_units(recipe_path, log, calibration_override, Units::Compute)
}

/// [`process`], taking stored flights or storing them as `units` says.
pub fn process_units(
    recipe_path: &Path,
    log: &Log,
    calibration_override: Option<CalibrationMode>,
    units: Units<'_>,
) -> Result<Processed, u8> {
    log.info(&format!("reading {}", recipe_path.display()));
    let clock = std::time::Instant::now();
    // The same reading, checks and sizes as `gravgrad check RECIPE`; nothing is processed before
    // they pass.
    let pre = preflight(recipe_path);
    if pre.has_errors() {
        return Err(input_errors(&pre.survey));
    }
    let sizes = pre.sizes();
    let Preflight {
        survey, frame, dem, ..
    } = pre;
    let (Some(recipe), Some(instrument), Some(frame)) = (&survey.recipe, &survey.instrument, frame)
    else {
        return Err(input_errors(&survey));
    };
    for w in survey
        .reports
        .first()
        .iter()
        .flat_map(|r| r.problems.iter())
    {
        eprintln!("{w}");
    }
    log.info(&format!(
        "recipe, instrument and {} flights read and checked in {:.2} s; {sizes}",
        survey.flights.len(),
        clock.elapsed().as_secs_f64()
    ));
    let mode = calibration_override.unwrap_or(recipe.calibration.mode);
    let file: Option<CalibrationFile> = if mode == CalibrationMode::File {
        let rel = recipe
            .calibration
            .file
            .as_deref()
            .unwrap_or("calibration.toml");
        let path = recipe.resolve(rel);
        let f: CalibrationFile = tomlfile::read(&path).map_err(|p| bad_input(&[p]))?;
        let ids = instrument.pair_ids();
        let ids: Vec<&str> = ids.iter().map(String::as_str).collect();
        let problems: Vec<Problem> = f
            .validate(&ids)
            .into_iter()
            .map(|fp| Problem::error(Location::file(&path).with_key(fp.key), fp.message))
            .collect();
        if !problems.is_empty() {
            return Err(bad_input(&problems));
        }
        Some(f)
    } else {
        None
    };
    let terrain = match (&recipe.terrain, &dem) {
        (Some(t), Some(window)) => {
            log.info(&format!("building the terrain model of {}", t.dem));
            Some(
                TerrainStage::new(recipe, recipe_path, t, &window.raster)
                    .map_err(|p| bad_input(&p))?,
            )
        }
        _ => None,
    };
    drop(dem);
    let store = match units {
        Units::Compute => None,
        Units::Reuse { out } | Units::Only { out, .. } => Some(
            Store::new(recipe_path, recipe, &survey, frame.epsg, mode, out).map_err(|e| {
                eprintln!("error: {e}");
                EXIT_FAILURE
            })?,
        ),
    };
    let mut results = Vec::new();
    let mut names = Vec::new();
    let total = survey.flights.len();
    for (k, flight) in survey.flights.iter().enumerate() {
        let name = flight_name(&flight.flight.source);
        if let Units::Only { name: only, .. } = units
            && !flight_units::selects(only, &name, &flight.flight.source)
        {
            continue;
        }
        let key = match &store {
            Some(s) => Some(s.key(&name, &flight.flight.source).map_err(|e| {
                eprintln!("error: {e}");
                EXIT_FAILURE
            })?),
            None => None,
        };
        if let (Units::Reuse { .. }, Some(s), Some(key)) = (units, &store, &key)
            && let Some(r) = s.reuse(&name, key, log)
        {
            results.push(r);
            names.push(name);
            continue;
        }
        log.progress(k, total, &format!("processing {name}"));
        let source = match (&mode, &file) {
            (CalibrationMode::File, Some(f)) => CalibrationSource::File(f),
            (CalibrationMode::None, _) => CalibrationSource::None,
            _ => CalibrationSource::Estimate,
        };
        let r = pipeline::process_flight(recipe, instrument, flight, &frame, source, |p| {
            terrain.as_ref().map(|t| t.tensor_true_north(p)).transpose()
        })
        .map_err(|p| {
            log.clear_progress();
            bad_input(&[p])
        })?;
        if let Some(w) = terrain
            .as_ref()
            .and_then(|t| t.coverage_warning(&r.positions))
        {
            log.clear_progress();
            eprintln!("{w}");
        }
        log.info(&format!(
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
        ));
        for note in &r.calibration_notes {
            log.warn(&format!("{name}: {note}"));
        }
        log.info(&format!(
            "{name}: {} samples; {}",
            r.time.len(),
            r.timings
                .iter()
                .map(|(s, t)| format!("{s} {t:.2} s"))
                .collect::<Vec<_>>()
                .join(", ")
        ));
        if let (Units::Only { .. }, Some(s), Some(key)) = (units, &store, &key) {
            let path = s.keep(&name, key, &r).map_err(|e| {
                eprintln!("error: {e}");
                EXIT_FAILURE
            })?;
            log.info(&format!("{name}: stored as {}", path.display()));
        }
        results.push(r);
        names.push(name);
    }
    log.progress(total, total, "flights processed");
    log.clear_progress();
    Ok(Processed {
        survey,
        frame,
        names,
        results,
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
        write_atomic(&path, |f| {
            f.write_all(file.to_toml().as_bytes())
                .map_err(|e| e.to_string())
        })
        .map_err(|e| e.to_string())?;
        written.push(path);
    }
    Ok(written)
}

/// Every input file of a processed survey: instrument, navigation, DEM, calibration file, flights.
fn input_files(p: &Processed) -> Vec<PathBuf> {
    let mut out = Vec::new();
    if let Some(i) = &p.survey.instrument {
        out.push(i.path.clone());
    }
    if let Some(r) = &p.survey.recipe {
        if let Some(n) = &r.input.navigation {
            out.push(r.resolve(n));
        }
        if let Some(t) = &r.terrain {
            out.push(r.resolve(&t.dem));
        }
        if r.calibration.mode == CalibrationMode::File
            && let Some(f) = &r.calibration.file
        {
            out.push(r.resolve(f));
        }
    }
    let mut flights: Vec<PathBuf> = p
        .survey
        .flights
        .iter()
        .filter_map(|f| f.flight.source.file.clone())
        .collect();
    flights.dedup();
    out.extend(flights);
    out
}

/// Writes `survey.h5`.
fn write_archive(
    dir: &Path,
    p: &Processed,
    table: &lines_out::LinesTable,
    grids: Option<&grid_stage::Grids>,
    title: &str,
    recipe_path: &Path,
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
        recipe_text: std::fs::read_to_string(recipe_path)
            .map_err(|e| format!("{}: {e}", recipe_path.display()))?,
        sha256: hashes
            .iter()
            .map(|h| format!("{}  {}\n", h.sha256, h.path.display()))
            .collect(),
    };
    archive::write(&dir.join("survey.h5"), &a)
}

pub fn run(args: &RunArgs, log: &Log) -> u8 {
    if let Some(name) = &args.flight {
        return flight_units::run_one(&args.recipe, args.out.as_deref(), name, log);
    }
    let reuse = Units::Reuse {
        out: args.out.as_deref(),
    };
    let p = match process_units(&args.recipe, log, None, reuse) {
        Ok(p) => p,
        Err(code) => return code,
    };
    let out = output_folder(&p, args.out.as_deref());
    let staging = match Staging::begin(&out) {
        Ok(s) => s,
        Err(e) => {
            eprintln!("error: {e}");
            return EXIT_FAILURE;
        }
    };
    let clock = std::time::Instant::now();
    if let Err(code) = write_products(args, log, &p, staging.dir()) {
        return code;
    }
    if let Err(e) = staging.commit() {
        eprintln!("error: {e}");
        return EXIT_FAILURE;
    }
    let samples: usize = p.results.iter().map(|r| r.time.len()).sum();
    log.info(&format!(
        "products built and written in {:.2} s",
        clock.elapsed().as_secs_f64()
    ));
    log.info(&format!(
        "{} flights, {samples} samples; products in {}",
        p.results.len(),
        out.display()
    ));
    0
}

/// Prints an error and gives the failure exit code.
fn failure(e: impl std::fmt::Display) -> u8 {
    eprintln!("error: {e}");
    EXIT_FAILURE
}

/// Every product of the run into `dir` (the staging folder): lines, QC, grids and maps, calibration
/// files, the archive, provenance.
fn write_products(args: &RunArgs, log: &Log, p: &Processed, dir: &Path) -> Result<(), u8> {
    let mut table = lines_out::build(&p.results);
    let mut levelled = None;
    if let Some(recipe) = p.survey.recipe.as_ref() {
        let clock = std::time::Instant::now();
        let stages =
            line_stages::compute(&p.results, recipe, &args.recipe).map_err(|e| bad_input(&[e]))?;
        for n in &stages.notes {
            log.info(n);
        }
        let qcs = qc_cmd::write_qc(&dir.join("qc"), p, &stages, recipe)?;
        let failed = qcs.iter().filter(|q| !q.verdict.pass).count();
        log.info(&format!(
            "filter, levelling and QC of {} lines in {:.2} s: {} pass, {failed} fail",
            qcs.len(),
            clock.elapsed().as_secs_f64(),
            qcs.len() - failed
        ));
        stages.append_to(&mut table);
        levelled = Some(stages.levelled);
    }
    let clock = std::time::Instant::now();
    table
        .write_parquet(&dir.join("lines.parquet"), &p.names, p.frame.epsg)
        .map_err(failure)?;
    let recipe = p.survey.recipe.as_ref();
    if recipe.is_some_and(|r| r.output.lines_csv) {
        table.write_csv(&dir.join("lines.csv")).map_err(failure)?;
    }
    log.info(&format!(
        "line table written in {:.2} s",
        clock.elapsed().as_secs_f64()
    ));
    let title = recipe.map_or("survey".to_string(), |r| r.survey.name.clone());
    let grids = match recipe {
        Some(r) => {
            let clock = std::time::Instant::now();
            let g = grid_stage::grid_survey(r, &p.results, levelled.as_deref(), p.frame.epsg)
                .map_err(failure)?;
            grid_stage::write(dir, &g, &p.results, &title).map_err(failure)?;
            log.info(&format!(
                "grids of the {} tensor built and written in {:.2} s: {}",
                g.stage,
                clock.elapsed().as_secs_f64(),
                g.settings()
            ));
            Some(g)
        }
        None => None,
    };
    let clock = std::time::Instant::now();
    write_calibrations(p, dir).map_err(failure)?;
    let inputs = input_files(p);
    let hashes = provenance::hashes(
        &std::iter::once(args.recipe.clone())
            .chain(inputs.iter().cloned())
            .collect::<Vec<_>>(),
    )
    .map_err(failure)?;
    write_archive(
        dir,
        p,
        &table,
        grids.as_ref(),
        &title,
        &args.recipe,
        &hashes,
    )
    .map_err(failure)?;
    provenance::write(
        dir,
        &args.recipe,
        &hashes,
        &p.names,
        &p.results,
        p.frame.epsg,
    )
    .map_err(failure)?;
    log.info(&format!(
        "calibration files, survey.h5 and provenance.json written in {:.2} s",
        clock.elapsed().as_secs_f64()
    ));
    Ok(())
}
