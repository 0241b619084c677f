//! Reading a flight log of any supported format into [`FlightTable`]s in layout units.

use crate::columns::{Expectation, ReadPlan};
use crate::csv::{RawColumns, read_csv};
use crate::hdf5_reader::read_hdf5;
use crate::parquet_reader::read_parquet;
use crate::sink::Sink;
use gravgrad_core::table::FlightTable;
use gravgrad_core::{Location, Problem};
use rayon::prelude::*;
use std::path::Path;

/// The container format of a log.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Format {
    Csv,
    Parquet,
    Hdf5,
    /// Columns handed over in memory (`crate::memory`), row numbers counted from 0.
    Memory,
}

impl Format {
    /// Decides the format from the file name's extension.
    pub fn from_path(path: &Path) -> Option<Format> {
        let ext = path.extension()?.to_str()?.to_ascii_lowercase();
        match ext.as_str() {
            "csv" | "txt" => Some(Format::Csv),
            "parquet" | "pq" => Some(Format::Parquet),
            "h5" | "hdf5" | "he5" => Some(Format::Hdf5),
            _ => None,
        }
    }
}

/// One flight as read: its table in layout units, where it came from, and how rows are numbered.
#[derive(Debug)]
pub struct Flight {
    /// The file, plus the HDF5 group when a file holds several flights.
    pub source: Location,
    pub format: Format,
    pub table: FlightTable,
    pub plan: ReadPlan,
    /// File row number of table index 0 (2 for CSV, 1 for Parquet and HDF5).
    pub first_row: u64,
}

impl Flight {
    /// The location of table row `index` in the user's file.
    pub fn row_location(&self, index: usize) -> Location {
        self.source.clone().with_row(index as u64 + self.first_row)
    }
}

/// What reading one file gave: the flights that could be read, and every problem found.
#[derive(Debug, Default)]
pub struct ReadOutcome {
    pub flights: Vec<Flight>,
    pub problems: Vec<Problem>,
}

/// Reads a flight log (CSV, Parquet or HDF5, by extension).
pub fn read_flight_file(path: &Path, expect: &Expectation<'_>) -> ReadOutcome {
    let loc = Location::file(path);
    let Some(format) = Format::from_path(path) else {
        return ReadOutcome {
            flights: vec![],
            problems: vec![
                Problem::error(loc, "unknown file type")
                    .with_hint("raw logs end in .csv, .parquet or .h5"),
            ],
        };
    };
    let raw: Vec<(Location, Option<RawColumns>, Vec<Problem>)> = match format {
        Format::Csv => {
            let (c, p) = read_csv(path, expect);
            vec![(loc, c, p)]
        }
        Format::Parquet => {
            let (c, p) = read_parquet(path, expect);
            vec![(loc, c, p)]
        }
        Format::Memory => vec![],
        Format::Hdf5 => read_hdf5(path, expect)
            .into_iter()
            .map(|f| {
                let l = if f.group == "/" {
                    loc.clone()
                } else {
                    loc.clone().with_part(f.group)
                };
                (l, f.columns, f.problems)
            })
            .collect(),
    };
    let mut out = ReadOutcome::default();
    for (source, cols, mut problems) in raw {
        if let Some(cols) = cols {
            let (table, more) = to_table(cols.values, &cols.plan, &source, cols.first_row);
            problems.extend(more);
            out.flights.push(Flight {
                source,
                format,
                table,
                plan: cols.plan,
                first_row: cols.first_row,
            });
        }
        out.problems.extend(problems);
    }
    out
}

/// Applies each slot's unit conversion and turns the line column into integers.
pub fn to_table(
    values: Vec<Vec<f64>>,
    plan: &ReadPlan,
    source: &Location,
    first_row: u64,
) -> (FlightTable, Vec<Problem>) {
    let converted: Vec<(Vec<f64>, Option<Vec<i64>>, Sink)> = values
        .into_par_iter()
        .zip(plan.slots.par_iter())
        .map(|(mut v, slot)| {
            let mut sink = Sink::new();
            if slot.scale != 1.0 || slot.offset != 0.0 {
                for x in v.iter_mut() {
                    *x = *x * slot.scale + slot.offset;
                }
            }
            if slot.is_line() {
                let mut lines = Vec::with_capacity(v.len());
                for (i, x) in v.iter().enumerate() {
                    if x.is_finite() && x.fract() == 0.0 && x.abs() < 1e15 {
                        lines.push(*x as i64);
                    } else if x.is_nan() {
                        sink.add("line", &slot.name, i as u64, || {
                            Problem::error(
                                Location::default().with_column(slot.name.clone()),
                                "missing line number",
                            )
                        });
                        lines.push(0);
                    } else {
                        sink.add("line", &slot.name, i as u64, || {
                            Problem::error(
                                Location::default().with_column(slot.name.clone()),
                                format!("line number `{x}` is not an integer"),
                            )
                        });
                        lines.push(0);
                    }
                }
                (Vec::new(), Some(lines), sink)
            } else {
                (v, None, sink)
            }
        })
        .collect();
    let mut table = FlightTable::new();
    let mut problems = Vec::new();
    let mut sink = Sink::new();
    for ((v, lines, s), slot) in converted.into_iter().zip(&plan.slots) {
        sink.merge_shifted(s, 0);
        let res = match lines {
            Some(l) => {
                table.line = Some(l);
                Ok(())
            }
            None => table.insert(&slot.name, v),
        };
        if let Err(e) = res {
            problems.push(Problem::error(
                source.clone().with_column(slot.name.clone()),
                e.to_string(),
            ));
        }
    }
    problems.extend(sink.into_problems(source, first_row));
    (table, problems)
}
