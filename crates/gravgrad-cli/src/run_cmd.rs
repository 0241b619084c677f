//! `gravgrad run RECIPE`: every stage the recipe asks for, into one output folder. Today: calibration,
//! rotation-term removal and rotation to NED, normal-field and terrain reduction, the along-track
//! filter and the levelling (`line_stages`), written to `lines.parquet` (and `lines.csv` on request)
//! with the calibration of every flight.

use crate::archive;
use crate::grid_stage;
use crate::line_stages;
use crate::lines_out;
use crate::logging::Log;
use crate::pipeline::{self, CalibrationSource, FlightResult, MapFrame};
use crate::provenance;
use crate::report;
use crate::tables::write_atomic;
use crate::terrain_stage::TerrainStage;
use crate::{EXIT_BAD_INPUT, EXIT_FAILURE};
use clap::Args;
use gravgrad_calibrate::file::CalibrationFile;
use gravgrad_core::pairs::AlphaSource;
use gravgrad_core::{Location, Problem};
use gravgrad_ingest::check::{Survey, load_recipe};
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
    log.info(&format!("reading {}", recipe_path.display()));
    let survey = load_recipe(recipe_path);
    if survey.has_errors() {
        print!("{}", report::render(&survey.reports));
        return Err(EXIT_BAD_INPUT);
    }
    let (Some(recipe), Some(instrument)) = (&survey.recipe, &survey.instrument) else {
        print!("{}", report::render(&survey.reports));
        return Err(EXIT_BAD_INPUT);
    };
    let frame =
        pipeline::map_frame(recipe, recipe_path, &survey.flights).map_err(|p| bad_input(&[p]))?;
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
    let terrain = match &recipe.terrain {
        Some(t) => {
            log.info(&format!("reading the terrain model {}", t.dem));
            Some(TerrainStage::new(recipe, recipe_path, t, &frame).map_err(|p| bad_input(&p))?)
        }
        None => None,
    };
    let mut results = Vec::new();
    let mut names = Vec::new();
    let total = survey.flights.len();
    for (k, flight) in survey.flights.iter().enumerate() {
        let name = flight_name(&flight.flight.source);
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
        log.info(&format!(
            "{name}: {} samples; {}",
            r.time.len(),
            r.timings
                .iter()
                .map(|(s, t)| format!("{s} {t:.2} s"))
                .collect::<Vec<_>>()
                .join(", ")
        ));
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
    let p = match process(&args.recipe, log, None) {
        Ok(p) => p,
        Err(code) => return code,
    };
    let dir = output_folder(&p, args.out.as_deref());
    let clock = std::time::Instant::now();
    let mut table = lines_out::build(&p.results);
    let mut levelled = None;
    if let Some(recipe) = p.survey.recipe.as_ref() {
        match line_stages::compute(&p.results, recipe, &args.recipe) {
            Ok(stages) => {
                for n in &stages.notes {
                    log.info(n);
                }
                stages.append_to(&mut table);
                levelled = Some(stages.levelled);
            }
            Err(problem) => return bad_input(&[problem]),
        }
    }
    let lines = dir.join("lines.parquet");
    if let Err(e) = table.write_parquet(&lines, &p.names, p.frame.epsg) {
        eprintln!("error: {e}");
        return EXIT_FAILURE;
    }
    let recipe = p.survey.recipe.as_ref();
    if recipe.is_some_and(|r| r.output.lines_csv)
        && let Err(e) = table.write_csv(&dir.join("lines.csv"))
    {
        eprintln!("error: {e}");
        return EXIT_FAILURE;
    }
    let title = recipe.map_or("survey".to_string(), |r| r.survey.name.clone());
    let grid_clock = std::time::Instant::now();
    let gridded =
        recipe.map(|r| grid_stage::grid_survey(r, &p.results, levelled.as_deref(), p.frame.epsg));
    let grids = match gridded {
        Some(Ok(g)) => {
            if let Err(e) = grid_stage::write(&dir, &g, &p.results, &title) {
                eprintln!("error: {e}");
                return EXIT_FAILURE;
            }
            log.info(&format!(
                "grids of the {} tensor written to {} ({}; {:.2} s)",
                g.stage,
                dir.display(),
                g.settings(),
                grid_clock.elapsed().as_secs_f64()
            ));
            Some(g)
        }
        Some(Err(e)) => {
            eprintln!("error: {e}");
            return EXIT_FAILURE;
        }
        None => None,
    };
    if let Err(e) = write_calibrations(&p, &dir) {
        eprintln!("error: {e}");
        return EXIT_FAILURE;
    }
    let inputs = input_files(&p);
    let hashes = match provenance::hashes(
        &std::iter::once(args.recipe.clone())
            .chain(inputs.iter().cloned())
            .collect::<Vec<_>>(),
    ) {
        Ok(h) => h,
        Err(e) => {
            eprintln!("error: {e}");
            return EXIT_FAILURE;
        }
    };
    if let Err(e) = write_archive(
        &dir,
        &p,
        &table,
        grids.as_ref(),
        &title,
        &args.recipe,
        &hashes,
    ) {
        eprintln!("error: {e}");
        return EXIT_FAILURE;
    }
    if let Err(e) = provenance::write(
        &dir,
        &args.recipe,
        &hashes,
        &p.names,
        &p.results,
        p.frame.epsg,
    ) {
        eprintln!("error: {e}");
        return EXIT_FAILURE;
    }
    let samples: usize = p.results.iter().map(|r| r.time.len()).sum();
    log.info(&format!(
        "products built and written in {:.2} s",
        clock.elapsed().as_secs_f64()
    ));
    log.info(&format!(
        "{} flights, {samples} samples; lines written to {}",
        p.results.len(),
        lines.display()
    ));
    0
}
