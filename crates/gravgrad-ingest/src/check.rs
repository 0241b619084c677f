//! Everything `gravgrad check` learns about a file: reading, navigation merge, value and time-base
//! validation, gaps and lines, as plain data for the binary to print.

use crate::columns::{ColumnMap, Expectation};
use crate::instrument::{Instrument, Needs, check_observability, read_instrument};
use crate::layout::{LAYOUT as FLIGHT_LAYOUT, NAVIGATION_COLUMNS};
use crate::read::{Flight, Format, read_flight_file};
use crate::recipe::{self, Recipe, read_recipe};
use crate::segment::{LineRules, Segment, segment_lines};
use crate::validate::{Gap, TimeBase, TimeRules, check_time, check_values};
use crate::{instrument, navmerge, tomlfile};
use gravgrad_core::pairs::Observability;
use gravgrad_core::{Location, Problem, Severity};
use serde::Serialize;
use std::path::{Path, PathBuf};

/// Settings of a check.
#[derive(Clone, Debug, Default)]
pub struct CheckSettings {
    pub instrument: Option<Instrument>,
    pub columns: Option<ColumnMap>,
    pub navigation: Option<PathBuf>,
    pub navigation_max_gap_s: f64,
    pub time: TimeRules,
    pub lines: LineRules,
}

impl CheckSettings {
    /// The settings a recipe implies.
    pub fn from_recipe(r: &Recipe, instrument: Option<Instrument>) -> Self {
        Self {
            time: TimeRules {
                sample_rate_hz: instrument.as_ref().and_then(|i| i.sample_rate_hz),
                jitter_tolerance: r.input.jitter_tolerance,
                ..TimeRules::default()
            },
            instrument,
            columns: Some(r.input.columns.clone()),
            navigation: r.input.navigation.as_ref().map(|n| r.resolve(n)),
            navigation_max_gap_s: r.input.navigation_max_gap_s,
            lines: r.input.line_finder,
        }
    }
}

/// What was found in one flight.
#[derive(Clone, Debug, Serialize)]
pub struct FlightReport {
    pub source: Location,
    pub format: Format,
    pub rows: usize,
    /// File row number of the first data row (2 in CSV, 1 in Parquet and HDF5); segment and gap
    /// indices count from it.
    pub first_row: u64,
    pub time_base: Option<TimeBase>,
    /// Layout names of the channels read.
    pub channels: Vec<String>,
    pub pairs: Vec<String>,
    /// Columns of the file that are not part of the layout.
    pub ignored_columns: Vec<String>,
    pub lines: Vec<Segment>,
    pub gaps: Vec<Gap>,
    pub problems: Vec<Problem>,
    /// Bytes of the parsed table in memory.
    pub table_bytes: usize,
    /// Geodetic extent of the flight, degrees: [lat min, lat max, lon min, lon max].
    pub extent_deg: Option<[f64; 4]>,
    /// Positions (lat, lon in degrees), at most about 20,000 of them evenly taken, for coverage checks.
    #[serde(skip)]
    pub track_deg: Vec<[f64; 2]>,
}

/// What kind of file was checked.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum FileKind {
    Flight,
    Navigation,
    Instrument,
    Recipe,
}

/// The check of one file given on the command line (a recipe also checks the files it names).
#[derive(Clone, Debug, Serialize)]
pub struct FileReport {
    pub file: PathBuf,
    pub kind: FileKind,
    pub flights: Vec<FlightReport>,
    /// Problems of the file as a whole (unreadable, bad TOML, missing columns, …).
    pub problems: Vec<Problem>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub observability: Option<Observability>,
}

impl FileReport {
    fn new(file: &Path, kind: FileKind) -> Self {
        Self {
            file: file.to_path_buf(),
            kind,
            flights: vec![],
            problems: vec![],
            observability: None,
        }
    }

    /// Every problem, file-level first.
    pub fn all_problems(&self) -> impl Iterator<Item = &Problem> {
        self.problems
            .iter()
            .chain(self.flights.iter().flat_map(|f| f.problems.iter()))
    }

    pub fn has_errors(&self) -> bool {
        self.all_problems().any(|p| p.severity == Severity::Error)
    }
}

/// A flight read and checked, ready for processing.
#[derive(Debug)]
pub struct LoadedFlight {
    pub flight: Flight,
    /// Line segments (table index ranges), gaps and time base as the check found them.
    pub lines: Vec<Segment>,
    pub gaps: Vec<Gap>,
    pub time_base: Option<TimeBase>,
}

/// Checks one flight log.
pub fn check_flight_file(path: &Path, s: &CheckSettings, nav: Option<&Flight>) -> FileReport {
    load_flight_file(path, s, nav).0
}

/// Reads and checks one flight log: the report, and the flights that were read (also those with
/// errors; the caller decides from the report).
pub fn load_flight_file(
    path: &Path,
    s: &CheckSettings,
    nav: Option<&Flight>,
) -> (FileReport, Vec<LoadedFlight>) {
    let mut loaded = Vec::new();
    let mut report = FileReport::new(path, FileKind::Flight);
    let ids = s.instrument.as_ref().map(|i| i.pair_ids());
    let supplied: Vec<&str> = nav
        .map(|n| {
            n.table
                .names()
                .iter()
                .map(String::as_str)
                .filter(|c| *c != "time")
                .collect()
        })
        .unwrap_or_default();
    let expect = Expectation {
        pairs: ids.as_deref(),
        map: s.columns.as_ref(),
        supplied_elsewhere: &supplied,
        only: None,
    };
    let outcome = read_flight_file(path, &expect);
    report.problems = drop_repeats(&[], outcome.problems);
    for mut flight in outcome.flights {
        let mut problems = Vec::new();
        if let Some(n) = nav {
            problems.extend(navmerge::merge_navigation(
                &mut flight,
                n,
                s.navigation_max_gap_s,
            ));
        }
        // A cell the reader already rejected (or a row it found short) is not reported again.
        problems.extend(check_values(&flight));
        problems = drop_repeats(&report.problems, problems);
        let (tb, p) = check_time(&flight, &s.time);
        problems.extend(p);
        let gaps = tb.as_ref().map(|t| t.gaps.clone()).unwrap_or_default();
        let breaks: Vec<usize> = gaps.iter().map(|g| g.index).collect();
        let time_ok = !problems
            .iter()
            .any(|p| p.is_error() && p.location.column.as_deref() == Some("time"));
        let lines = if time_ok {
            segment_lines(&flight.table, &breaks, &s.lines)
        } else {
            vec![]
        };
        for g in &gaps {
            problems.push(Problem::warning(
                flight.row_location(g.index).with_column("time"),
                format!(
                    "gap of {:.3} s ({} samples missing) after time {}; the line is split here",
                    g.length_s, g.missing_samples, g.start_s
                ),
            ));
        }
        if !flight.plan.ignored.is_empty() {
            problems.push(Problem::warning(
                flight.source.clone(),
                format!(
                    "columns not in the layout are ignored: {}",
                    flight.plan.ignored.join(", ")
                ),
            ));
        }
        if s.instrument.is_none() && flight.plan.pairs.is_empty() {
            problems.push(
                Problem::warning(
                    flight.source.clone(),
                    "no accelerometer pair columns (<id>_a, <id>_b) found",
                )
                .with_hint("give --instrument to name the pairs"),
            );
        }
        problems.sort_by_key(|p| (std::cmp::Reverse(p.severity), p.location.row.unwrap_or(0)));
        report.flights.push(FlightReport {
            source: flight.source.clone(),
            format: flight.format,
            rows: flight.table.n_rows(),
            first_row: flight.first_row,
            time_base: tb,
            channels: flight.table.names().to_vec(),
            pairs: flight.plan.pairs.clone(),
            ignored_columns: flight.plan.ignored.clone(),
            lines,
            gaps,
            problems,
            table_bytes: flight.table.data_bytes(),
            extent_deg: extent(&flight),
            track_deg: track(&flight),
        });
        let fr = report.flights.last().expect("pushed above");
        loaded.push(LoadedFlight {
            lines: fr.lines.clone(),
            gaps: fr.gaps.clone(),
            time_base: fr.time_base.clone(),
            flight,
        });
    }
    (report, loaded)
}

/// Drops errors located at a cell (or in a row) that an earlier error already covers: a cell the
/// reader could not parse is not reported again as a missing value, and a short row is reported
/// once, not once per missing cell.
fn drop_repeats(earlier: &[Problem], later: Vec<Problem>) -> Vec<Problem> {
    type Cell = (Option<String>, Option<u64>, Option<String>);
    let mut cells: Vec<Cell> = Vec::new();
    let mut rows: Vec<(Option<String>, Option<u64>)> = Vec::new();
    let note =
        |p: &Problem, cells: &mut Vec<Cell>, rows: &mut Vec<(Option<String>, Option<u64>)>| {
            let l = &p.location;
            if l.column.is_none() {
                rows.push((l.part.clone(), l.row));
            }
            cells.push((l.part.clone(), l.row, l.column.clone()));
        };
    for p in earlier
        .iter()
        .filter(|p| p.is_error() && p.location.row.is_some())
    {
        note(p, &mut cells, &mut rows);
    }
    let mut out = Vec::with_capacity(later.len());
    for p in later {
        let l = &p.location;
        if p.is_error() && l.row.is_some() {
            let cell = (l.part.clone(), l.row, l.column.clone());
            if cells.contains(&cell) || rows.contains(&(l.part.clone(), l.row)) {
                continue;
            }
            note(&p, &mut cells, &mut rows);
        }
        out.push(p);
    }
    out
}

/// The finite geodetic extent of a flight, degrees.
fn extent(f: &Flight) -> Option<[f64; 4]> {
    let (lat, lon) = (f.table.get("lat")?, f.table.get("lon")?);
    let mut e = [
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
    ];
    for (a, o) in lat.iter().zip(lon) {
        if a.is_finite() && o.is_finite() && a.abs() <= 90.0 && o.abs() <= 180.0 {
            e = [e[0].min(*a), e[1].max(*a), e[2].min(*o), e[3].max(*o)];
        }
    }
    e[0].is_finite().then_some(e)
}

/// Every k-th finite position of a flight (k so that at most about 20,000 remain), degrees.
fn track(f: &Flight) -> Vec<[f64; 2]> {
    let (Some(lat), Some(lon)) = (f.table.get("lat"), f.table.get("lon")) else {
        return vec![];
    };
    let step = (lat.len() / 20_000).max(1);
    let mut out: Vec<[f64; 2]> = lat
        .iter()
        .zip(lon)
        .step_by(step)
        .map(|(a, o)| [*a, *o])
        .collect();
    if let (Some(a), Some(o)) = (lat.last(), lon.last()) {
        out.push([*a, *o]);
    }
    out.retain(|p| {
        p[0].is_finite() && p[1].is_finite() && p[0].abs() <= 90.0 && p[1].abs() <= 180.0
    });
    out
}

/// Checks the recipe's terrain model: readable, and covering every flight plus the margin.
fn check_dem(r: &Recipe, recipe_path: &Path, flights: &[FileReport]) -> Vec<Problem> {
    let Some(t) = &r.terrain else { return vec![] };
    let dem_path = r.resolve(&t.dem);
    let key = Location::file(recipe_path).with_key("terrain.dem");
    let dem = match crate::dem::read_dem(&dem_path, None) {
        Ok(d) => d,
        Err(p) => {
            let mut out = vec![Problem::error(
                key,
                format!("the terrain model {} cannot be used", dem_path.display()),
            )];
            out.extend(p);
            return out;
        }
    };
    let (x_max, y_min) = (
        dem.x_min + dem.nx as f64 * dem.dx,
        dem.y_max - dem.ny as f64 * dem.dy,
    );
    let code = dem.epsg.unwrap_or(0);
    let utm = match code {
        32601..=32660 => Some((code - 32600, false)),
        32701..=32760 => Some((code - 32700, true)),
        _ => None,
    };
    let geographic = matches!(
        gravgrad_core::raster::frame_kind_of_epsg(code),
        gravgrad_core::raster::FrameKind::Geographic
    );
    let mut out = Vec::new();
    for rep in flights {
        for f in &rep.flights {
            let Some([la0, la1, _, _]) = f.extent_deg else {
                continue;
            };
            let corners: Vec<(f64, f64)> = f.track_deg.iter().map(|p| (p[0], p[1])).collect();
            let (mut ex, mut ny) = (
                [f64::INFINITY, f64::NEG_INFINITY],
                [f64::INFINITY, f64::NEG_INFINITY],
            );
            let margin;
            if let Some((zone, south)) = utm {
                let Ok(tm) = gravgrad_core::projection::TransverseMercator::utm(
                    &gravgrad_core::ellipsoid::WGS84,
                    zone,
                    south,
                ) else {
                    continue;
                };
                for (la, lo) in corners {
                    let (e, n, _, _) = tm.forward(la.to_radians(), lo.to_radians());
                    ex = [ex[0].min(e), ex[1].max(e)];
                    ny = [ny[0].min(n), ny[1].max(n)];
                }
                margin = (t.margin_m, t.margin_m);
            } else if geographic {
                for (la, lo) in corners {
                    ex = [ex[0].min(lo), ex[1].max(lo)];
                    ny = [ny[0].min(la), ny[1].max(la)];
                }
                // Metres to degrees on the mean Earth radius (IUGG R1), for a warning only.
                let deg = t.margin_m / (6_371_008.8 * std::f64::consts::PI / 180.0);
                margin = (
                    deg / la0.abs().max(la1.abs()).to_radians().cos().max(0.01),
                    deg,
                );
            } else {
                out.push(Problem::warning(key.clone(), format!("the terrain model's CRS (EPSG:{code}) is not a UTM zone or a geographic frame; its coverage is not checked")));
                return out;
            }
            // Within one cell: the positions are samples of the path, and a DEM is cut at whole cells.
            let (tx, ty) = (dem.dx, dem.dy);
            let covered = dem.x_min <= ex[0] - margin.0 + tx
                && x_max >= ex[1] + margin.0 - tx
                && y_min <= ny[0] - margin.1 + ty
                && dem.y_max >= ny[1] + margin.1 - ty;
            if !covered {
                out.push(
                    Problem::warning(
                        key.clone(),
                        format!(
                            "the terrain model does not cover {} plus the {} m margin: it spans x {:.0} to {:.0}, y {:.0} to {:.0}; the flight with its margin needs x {:.0} to {:.0}, y {:.0} to {:.0}",
                            f.source, t.margin_m, dem.x_min, x_max, y_min, dem.y_max, ex[0] - margin.0, ex[1] + margin.0, ny[0] - margin.1, ny[1] + margin.1
                        ),
                    )
                    .with_hint("extend the terrain model, or lower `terrain.margin_m` knowing the terrain effect near the edges is then incomplete"),
                );
            }
        }
    }
    out
}

/// Reads and validates a navigation table; returns it (when readable) and its report.
pub fn read_navigation(path: &Path, s: &CheckSettings) -> (Option<Flight>, FileReport) {
    let mut report = FileReport::new(path, FileKind::Navigation);
    let mut only: Vec<&str> = vec!["time"];
    only.extend(NAVIGATION_COLUMNS);
    let expect = Expectation {
        pairs: None,
        map: s.columns.as_ref(),
        supplied_elsewhere: &[],
        only: Some(&only),
    };
    let mut outcome = read_flight_file(path, &expect);
    report.problems = outcome.problems;
    if outcome.flights.len() > 1 {
        report.problems.push(Problem::error(
            Location::file(path),
            "a navigation table holds one flight",
        ));
    }
    let nav = outcome.flights.pop();
    if let Some(n) = &nav {
        let mut p = check_values(n);
        let rules = TimeRules {
            sample_rate_hz: None,
            jitter_tolerance: 0.5,
            gap_factor: f64::INFINITY,
        };
        p.extend(check_time(n, &rules).1);
        report.problems.extend(p);
    }
    let ok = !report.has_errors();
    (if ok { nav } else { None }, report)
}

/// The needs an instrument is checked against when no recipe says otherwise: Gzz is required (every
/// gridded product derives from it); the other components are reported when missing.
fn standalone_needs() -> Needs {
    Needs {
        components: vec!["Gzz".into()],
        alpha: None,
        trace_constraint: false,
    }
}

/// Checks an instrument file on its own.
pub fn check_instrument_file(path: &Path) -> (Option<Instrument>, FileReport) {
    let mut report = FileReport::new(path, FileKind::Instrument);
    match read_instrument(path) {
        Ok(inst) => {
            let (obs, p) = check_observability(&inst, &standalone_needs(), "rotation.");
            report.problems.extend(p);
            let missing = obs.missing_components();
            if !missing.is_empty() && obs.sees("Gzz") {
                report.problems.push(Problem::warning(
                    Location::file(path).with_key("pair"),
                    format!("the pair set does not observe {}; they will be derived from Gzz on the grid", missing.join(", ")),
                ));
            }
            report.observability = Some(obs);
            (Some(inst), report)
        }
        Err(p) => {
            report.problems = p;
            (None, report)
        }
    }
}

/// Checks a recipe, its instrument, navigation table and every flight file it names.
pub fn check_recipe_file(path: &Path) -> Vec<FileReport> {
    load_recipe(path).reports
}

/// A recipe with everything it names, read and checked.
#[derive(Debug, Default)]
pub struct Survey {
    /// The recipe's report first, then navigation and flight files.
    pub reports: Vec<FileReport>,
    pub recipe: Option<Recipe>,
    pub instrument: Option<Instrument>,
    pub flights: Vec<LoadedFlight>,
}

impl Survey {
    pub fn has_errors(&self) -> bool {
        self.reports.iter().any(FileReport::has_errors)
    }
}

/// Reads and checks a recipe, its instrument, navigation table and every flight file it names.
pub fn load_recipe(path: &Path) -> Survey {
    let mut report = FileReport::new(path, FileKind::Recipe);
    let r = match read_recipe(path) {
        Ok(r) => r,
        Err(p) => {
            report.problems = p;
            return Survey {
                reports: vec![report],
                ..Survey::default()
            };
        }
    };
    let inst_path = r.resolve(&r.instrument.path);
    let inst = match read_instrument(&inst_path) {
        Ok(i) => {
            let needs = Needs {
                components: r.rotation.components.clone(),
                alpha: r.rotation.alpha_source(),
                trace_constraint: r.rotation.trace_constraint,
            };
            let (obs, p) = check_observability(&i, &needs, "rotation.");
            report.problems.extend(p);
            report.observability = Some(obs);
            Some(i)
        }
        Err(p) => {
            report.problems.push(Problem::error(
                Location::file(path).with_key("instrument.path"),
                format!("the instrument file {} has problems", inst_path.display()),
            ));
            report.problems.extend(p);
            None
        }
    };
    let settings = CheckSettings::from_recipe(&r, inst.clone());
    let mut reports = vec![];
    let mut flights = vec![];
    let files = match r.flight_files(path) {
        Ok(f) => f,
        Err(p) => {
            report.problems.extend(p);
            vec![]
        }
    };
    let mut nav = None;
    if let Some(np) = &settings.navigation {
        let (n, nrep) = read_navigation(np, &settings);
        nav = n;
        let failed = nrep.has_errors();
        reports.push(nrep);
        if failed {
            reports.insert(0, report);
            return Survey {
                reports,
                recipe: Some(r),
                instrument: inst,
                flights,
            };
        }
    }
    for f in files {
        let (rep, fl) = load_flight_file(&f, &settings, nav.as_ref());
        reports.push(rep);
        flights.extend(fl);
    }
    report.problems.extend(check_dem(&r, path, &reports));
    reports.insert(0, report);
    Survey {
        reports,
        recipe: Some(r),
        instrument: inst,
        flights,
    }
}

/// Checks any file: a recipe or instrument (by its `layout`), or a flight log. `settings` applies to
/// flight logs given directly.
pub fn check_path(path: &Path, settings: &CheckSettings, nav: Option<&Flight>) -> Vec<FileReport> {
    let is_toml = path
        .extension()
        .and_then(|e| e.to_str())
        .is_some_and(|e| e.eq_ignore_ascii_case("toml"));
    if !is_toml {
        return vec![check_flight_file(path, settings, nav)];
    }
    let text = match crate::input_file::read_text(path, gravgrad_core::limits::MAX_TEXT_FILE_BYTES)
    {
        Ok(t) => t,
        Err(p) => {
            let mut r = FileReport::new(path, FileKind::Recipe);
            r.problems.push(p);
            return vec![r];
        }
    };
    let layout = match tomlfile::layout_of(path, &text) {
        Ok(l) => l,
        Err(p) => {
            let mut r = FileReport::new(path, FileKind::Recipe);
            r.problems.push(p);
            return vec![r];
        }
    };
    match layout.as_deref() {
        Some(instrument::LAYOUT) => vec![check_instrument_file(path).1],
        Some(recipe::LAYOUT) => check_recipe_file(path),
        other => {
            let mut r = FileReport::new(path, FileKind::Recipe);
            let found = other.map_or("no `layout` key".to_string(), |l| format!("layout `{l}`"));
            r.problems.push(
                Problem::error(
                    Location::file(path).with_key("layout"),
                    format!(
                        "{found}; expected `{}` or `{}`",
                        recipe::LAYOUT,
                        instrument::LAYOUT
                    ),
                )
                .with_hint(format!(
                    "flight logs are CSV, Parquet or HDF5 ({FLIGHT_LAYOUT})"
                )),
            );
            vec![r]
        }
    }
}
