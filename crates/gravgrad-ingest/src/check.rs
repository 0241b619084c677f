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
    pub(crate) fn new(file: &Path, kind: FileKind) -> Self {
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

/// Checks one flight as read (from a file or from memory): the navigation merged when given, its
/// values and time base checked, its lines cut. `file_problems`: what reading it already reported
/// (not reported again). The report and the flight ready for processing.
pub fn check_read_flight(
    mut flight: Flight,
    s: &CheckSettings,
    nav: Option<&Flight>,
    file_problems: &[Problem],
) -> (FlightReport, LoadedFlight) {
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
    problems = drop_repeats(file_problems, problems);
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
    let report = FlightReport {
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
    };
    let loaded = LoadedFlight {
        lines: report.lines.clone(),
        gaps: report.gaps.clone(),
        time_base: report.time_base.clone(),
        flight,
    };
    (report, loaded)
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
    for flight in outcome.flights {
        let (fr, lf) = check_read_flight(flight, s, nav, &report.problems);
        report.flights.push(fr);
        loaded.push(lf);
    }
    (report, loaded)
}

/// Fewest samples a survey line must have for a run to process it: the along-track filter needs
/// at least 3, and a line of fewer than 16 samples gives no noise, motion or crossover estimate.
pub const MIN_LINE_SAMPLES: usize = 16;

/// What a run needs of a flight beyond valid values: a usable time base and at least one survey
/// line of [`MIN_LINE_SAMPLES`] samples. A recipe's check and its run both apply it (through
/// [`load_recipe`]), so that a flight `check` passes does not fail `run` late.
pub fn processable(f: &FlightReport, numbered: bool, rules: &LineRules) -> Vec<Problem> {
    if f.problems.iter().any(Problem::is_error) {
        return vec![]; // already refused, with its place
    }
    if f.time_base.is_none() {
        return vec![Problem::error(
            f.source.clone().with_column("time"),
            format!(
                "{} rows: too few to find a sample rate and survey lines",
                f.rows
            ),
        )];
    }
    let longest = f.lines.iter().map(|s| s.end - s.start).max().unwrap_or(0);
    if longest >= MIN_LINE_SAMPLES {
        return vec![];
    }
    let how = if numbered {
        "the `line` column numbers no line (all ≤ 0)".to_string()
    } else {
        format!(
            "no straight stretch of at least {} s turning under {} °/s was found              ([input.line_finder])",
            rules.min_duration_s, rules.max_turn_rate_deg_s
        )
    };
    let msg = if f.lines.is_empty() {
        format!("{} rows and no survey line: {how}", f.rows)
    } else {
        format!(
            "{} rows; its longest survey line has {longest} samples, fewer than the {MIN_LINE_SAMPLES} a line needs to be filtered and judged",
            f.rows
        )
    };
    vec![Problem::error(f.source.clone(), msg)]
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

/// Whether the instrument's pairs can see what the recipe's `[rotation]` asks for, into the
/// recipe's report (problems located at `rotation.` keys).
pub(crate) fn observe(report: &mut FileReport, r: &Recipe, instrument: &Instrument) {
    let needs = Needs {
        components: r.rotation.components.clone(),
        alpha: r.rotation.alpha_source(),
        trace_constraint: r.rotation.trace_constraint,
    };
    let (obs, p) = check_observability(instrument, &needs, "rotation.");
    report.problems.extend(p);
    report.observability = Some(obs);
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
            observe(&mut report, &r, &i);
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
        let (mut rep, fl) = load_flight_file(&f, &settings, nav.as_ref());
        for (fr, lf) in rep.flights.iter_mut().zip(&fl) {
            let numbered = lf.flight.table.line.is_some();
            let p = processable(fr, numbered, &r.input.line_finder);
            fr.problems.extend(p);
        }
        reports.push(rep);
        flights.extend(fl);
    }
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
