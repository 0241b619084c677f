//! A survey whose flights come as arrays in memory rather than files: each flight's columns, named
//! as a log's columns are (the layout's names and units, docs/formats.md, or the recipe's
//! `input.columns` map), matched, converted and checked exactly as a file's would be. Problems name
//! the flight, the column and the row (the index into the arrays, from 0).

use crate::check::{
    CheckSettings, FileKind, FileReport, LoadedFlight, Survey, check_read_flight, observe,
    processable,
};
use crate::columns::{self, Expectation};
use crate::instrument::Instrument;
use crate::read::{Flight, Format, to_table};
use crate::recipe::Recipe;
use gravgrad_core::{Location, Problem};
use std::path::Path;

/// One flight's columns: its name (which names its products, as a file's stem does) and each
/// column's name and values, all of one length.
#[derive(Clone, Debug, Default)]
pub struct FlightColumns {
    pub name: String,
    pub columns: Vec<(String, Vec<f64>)>,
}

/// The flight `c` as a reader would give it: columns matched against what is expected and
/// converted to layout units. `None` when a required column is missing or the lengths differ.
pub fn flight_from_columns(
    c: FlightColumns,
    expect: &Expectation<'_>,
) -> (Option<Flight>, Vec<Problem>) {
    let source = Location::file(&c.name);
    let header: Vec<String> = c.columns.iter().map(|(n, _)| n.clone()).collect();
    let rows = c.columns.first().map_or(0, |(_, v)| v.len());
    let uneven: Vec<Problem> = c
        .columns
        .iter()
        .filter(|(_, v)| v.len() != rows)
        .map(|(n, v)| {
            Problem::error(
                source.clone().with_column(n.clone()),
                format!(
                    "{} values; expected {rows}, the length of the first column",
                    v.len()
                ),
            )
        })
        .collect();
    if !uneven.is_empty() {
        return (None, uneven);
    }
    let plan = match columns::plan(&header, expect, &source) {
        Ok(p) => p,
        Err(p) => return (None, p),
    };
    let mut columns = c.columns;
    let values: Vec<Vec<f64>> = plan
        .slots
        .iter()
        .map(|s| std::mem::take(&mut columns[s.index].1))
        .collect();
    let (table, problems) = to_table(values, &plan, &source, 0);
    let flight = Flight {
        source,
        format: Format::Memory,
        table,
        plan,
        first_row: 0,
    };
    (Some(flight), problems)
}

/// A survey of `recipe` and `instrument` whose flights are `flights`, read and checked as
/// [`crate::check::load_recipe`] reads and checks a recipe's files: the instrument's observability
/// for the recipe's components, then each flight's columns, values, time base and lines. `name`
/// names the recipe in messages. A navigation table is not merged in memory: give its columns
/// with the flight's (a recipe that names one gets an error).
pub fn survey_from_memory(
    name: &Path,
    recipe: Recipe,
    instrument: Instrument,
    flights: Vec<FlightColumns>,
) -> Survey {
    let mut report = FileReport::new(name, FileKind::Recipe);
    observe(&mut report, &recipe, &instrument);
    if recipe.input.navigation.is_some() {
        report.problems.push(
            Problem::error(
                Location::file(name).with_key("input.navigation"),
                "a navigation table is not merged in memory",
            )
            .with_hint("give the navigation columns with each flight's columns"),
        );
    }
    if flights.is_empty() {
        report.problems.push(Problem::error(
            Location::file(name),
            "no flights given; expected at least one flight's columns",
        ));
    }
    let settings = CheckSettings::from_recipe(&recipe, Some(instrument.clone()));
    let ids = instrument.pair_ids();
    let expect = Expectation {
        pairs: Some(&ids),
        map: settings.columns.as_ref(),
        supplied_elsewhere: &[],
        only: None,
    };
    let mut reports = vec![];
    let mut loaded: Vec<LoadedFlight> = vec![];
    for c in flights {
        let mut rep = FileReport::new(Path::new(&c.name), FileKind::Flight);
        let (flight, problems) = flight_from_columns(c, &expect);
        rep.problems = problems;
        if let Some(flight) = flight {
            let (mut fr, lf) = check_read_flight(flight, &settings, None, &rep.problems);
            let numbered = lf.flight.table.line.is_some();
            let p = processable(&fr, numbered, &recipe.input.line_finder);
            fr.problems.extend(p);
            rep.flights.push(fr);
            loaded.push(lf);
        }
        reports.push(rep);
    }
    reports.insert(0, report);
    Survey {
        reports,
        recipe: Some(recipe),
        instrument: Some(instrument),
        flights: loaded,
    }
}
