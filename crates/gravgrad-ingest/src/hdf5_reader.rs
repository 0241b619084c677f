//! Reader for raw flight logs in HDF5 (`docs/formats.md`, layout 1): one group per flight holding
//! one 1-D dataset per column, the group carrying the attribute `layout = "raw-flight/1"`. A file may
//! hold several flights; the first record of each dataset is row 1.

use crate::columns::{self, Expectation};
use crate::csv::RawColumns;
use crate::layout::LAYOUT;
use gravgrad_core::{Location, Problem};
use hdf5_pure::{AttrValue, DType, File, Group};
use std::path::Path;

/// One flight found in an HDF5 file.
pub struct Hdf5Flight {
    /// Group path (`/` for datasets at the root).
    pub group: String,
    pub columns: Option<RawColumns>,
    pub problems: Vec<Problem>,
}

fn attr_string(v: &AttrValue) -> Option<&str> {
    match v {
        AttrValue::String(s)
        | AttrValue::AsciiString(s)
        | AttrValue::VarLenString(s)
        | AttrValue::VarLenAsciiString(s) => Some(s),
        AttrValue::StringSized { value, .. } | AttrValue::AsciiStringSized { value, .. } => {
            Some(value)
        }
        _ => None,
    }
}

fn is_flight(g: &Group) -> bool {
    g.attrs()
        .ok()
        .and_then(|a| a.get("layout").and_then(attr_string).map(|s| s == LAYOUT))
        .unwrap_or(false)
}

/// Reads every flight group of an HDF5 file. Errors that concern the whole file come back as one
/// flight with no columns.
pub fn read_hdf5(path: &Path, expect: &Expectation<'_>) -> Vec<Hdf5Flight> {
    let loc = Location::file(path);
    let file = match File::open(path) {
        Ok(f) => f,
        Err(e) => {
            return vec![Hdf5Flight {
                group: "/".into(),
                columns: None,
                problems: vec![Problem::error(
                    loc,
                    format!("not a readable HDF5 file: {e}"),
                )],
            }];
        }
    };
    let root = file.root();
    let mut groups: Vec<(String, Group)> = Vec::new();
    if is_flight(&root) {
        groups.push(("/".into(), root));
    } else {
        let names = root.groups().unwrap_or_default();
        for name in names {
            if let Ok(g) = file.group(&name)
                && is_flight(&g)
            {
                groups.push((name, g));
            }
        }
    }
    if groups.is_empty() {
        return vec![Hdf5Flight {
            group: "/".into(),
            columns: None,
            problems: vec![
                Problem::error(
                    loc,
                    format!("no group carries the attribute layout = \"{LAYOUT}\""),
                )
                .with_hint("put each flight's columns in a group and set its `layout` attribute"),
            ],
        }];
    }
    groups.sort_by(|a, b| a.0.cmp(&b.0));
    groups
        .into_iter()
        .map(|(name, g)| read_group(&loc, name, &g, expect))
        .collect()
}

fn read_group(loc: &Location, name: String, g: &Group, expect: &Expectation<'_>) -> Hdf5Flight {
    let gloc = loc.clone().with_part(name.clone());
    let fail = |problems: Vec<Problem>| Hdf5Flight {
        group: name.clone(),
        columns: None,
        problems,
    };
    let header = match g.datasets() {
        Ok(mut d) => {
            d.sort();
            d
        }
        Err(e) => {
            return fail(vec![Problem::error(
                gloc,
                format!("cannot list datasets: {e}"),
            )]);
        }
    };
    let plan = match columns::plan(&header, expect, &gloc) {
        Ok(p) => p,
        Err(p) => return fail(p),
    };
    let mut values = Vec::with_capacity(plan.slots.len());
    let mut problems = Vec::new();
    let mut n_rows: Option<(usize, String)> = None;
    for slot in &plan.slots {
        let cloc = gloc.clone().with_column(slot.name.clone());
        let ds = match g.dataset(&slot.source) {
            Ok(d) => d,
            Err(e) => {
                problems.push(Problem::error(cloc, format!("cannot open dataset: {e}")));
                continue;
            }
        };
        match ds.shape() {
            Ok(s) if s.len() == 1 => {}
            Ok(s) => {
                problems.push(Problem::error(
                    cloc,
                    format!("dataset has shape {s:?}, expected one dimension"),
                ));
                continue;
            }
            Err(e) => {
                problems.push(Problem::error(cloc, format!("cannot read the shape: {e}")));
                continue;
            }
        }
        match ds.dtype() {
            Ok(
                DType::F32
                | DType::F64
                | DType::I8
                | DType::I16
                | DType::I32
                | DType::I64
                | DType::U8
                | DType::U16
                | DType::U32
                | DType::U64,
            ) => {}
            Ok(other) => {
                let what = match other {
                    DType::String | DType::VariableLengthString => "text".to_string(),
                    o => format!("{o:?}"),
                };
                problems.push(
                    Problem::error(
                        cloc,
                        format!(
                            "numeric column stored as {what}, expected a float or integer dataset"
                        ),
                    )
                    .with_hint("write the channel as float64"),
                );
                continue;
            }
            Err(e) => {
                problems.push(Problem::error(
                    cloc,
                    format!("cannot read the data type: {e}"),
                ));
                continue;
            }
        }
        match ds.read_f64() {
            Ok(v) => {
                match &n_rows {
                    None => n_rows = Some((v.len(), slot.name.clone())),
                    Some((n, first)) if *n != v.len() => {
                        problems.push(
                            Problem::error(
                                cloc,
                                format!("has {} rows where `{first}` has {n}", v.len()),
                            )
                            .with_hint(
                                "all columns of a flight share one time base and one length",
                            ),
                        );
                    }
                    _ => {}
                }
                values.push(v);
            }
            Err(e) => problems.push(Problem::error(cloc, format!("cannot read: {e}"))),
        }
    }
    if !problems.is_empty() {
        return fail(problems);
    }
    if n_rows.map_or(0, |n| n.0) == 0 {
        return fail(vec![Problem::error(
            gloc,
            "the flight's datasets hold no rows",
        )]);
    }
    Hdf5Flight {
        group: name,
        columns: Some(RawColumns {
            plan,
            values,
            first_row: 1,
        }),
        problems,
    }
}
