//! Reader for raw flight logs in HDF5 (`docs/formats.md`, layout 1): one group per flight holding
//! one 1-D dataset per column, the group carrying the attribute `layout = "raw-flight/1"`. A file may
//! hold several flights; the first record of each dataset is row 1.

use crate::columns::{self, Expectation};
use crate::csv::RawColumns;
use crate::input_file::open_regular;
use crate::layout::LAYOUT;
use gravgrad_core::limits::{
    MAX_FLIGHT_ROWS, MAX_FLIGHT_VALUES, MAX_LOG_EXPANSION, MAX_WHOLE_FILE_BYTES,
    SMALL_FILE_ALLOWANCE, decoded_bound, decoded_fits,
};
use gravgrad_core::{Location, Problem};
use hdf5_pure::{AttrValue, DType, File, Group};
use std::io::Read;
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
///
/// The file is read whole into memory (at most [`MAX_WHOLE_FILE_BYTES`]); before any dataset is
/// read, the rows its shape declares are checked against the stated limits and against what the
/// file's size can hold (`docs/reliability.md`), over all flights of the file together.
pub fn read_hdf5(path: &Path, expect: &Expectation<'_>) -> Vec<Hdf5Flight> {
    let loc = Location::file(path);
    let whole_file = |problem: Problem| {
        vec![Hdf5Flight {
            group: "/".into(),
            columns: None,
            problems: vec![problem],
        }]
    };
    let (bytes, file_len) = match read_whole(path) {
        Ok(b) => b,
        Err(p) => return whole_file(p),
    };
    let file = match File::from_bytes(bytes) {
        Ok(f) => f,
        Err(e) => {
            return whole_file(Problem::error(
                loc,
                format!("not a readable HDF5 file: {e}"),
            ));
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
        return whole_file(
            Problem::error(
                loc,
                format!("no group carries the attribute layout = \"{LAYOUT}\""),
            )
            .with_hint("put each flight's columns in a group and set its `layout` attribute"),
        );
    }
    groups.sort_by(|a, b| a.0.cmp(&b.0));
    let mut budget = Budget {
        file_len,
        left: decoded_bound(file_len, MAX_LOG_EXPANSION),
    };
    groups
        .into_iter()
        .map(|(name, g)| read_group(&loc, name, &g, expect, &mut budget))
        .collect()
}

/// Reads a regular file of at most [`MAX_WHOLE_FILE_BYTES`] whole, and its size.
fn read_whole(path: &Path) -> Result<(Vec<u8>, u64), Problem> {
    let loc = Location::file(path);
    let input = open_regular(path)?;
    if input.len > MAX_WHOLE_FILE_BYTES {
        return Err(Problem::error(
            loc,
            format!(
                "the file is {} bytes long; an HDF5 log is read whole and may be at most \
                 {MAX_WHOLE_FILE_BYTES} bytes",
                input.len
            ),
        )
        .with_hint("split the flights into several files"));
    }
    let len = input.len as usize;
    let mut bytes = Vec::new();
    bytes
        .try_reserve_exact(len)
        .map_err(|_| Problem::error(loc.clone(), format!("no memory to read {len} bytes")))?;
    input
        .file
        .take(input.len)
        .read_to_end(&mut bytes)
        .map_err(|e| Problem::error(loc.clone(), format!("cannot read: {e}")))?;
    if bytes.len() != len {
        return Err(Problem::error(
            loc,
            format!(
                "the file changed while being read: {} bytes read of {len}",
                bytes.len()
            ),
        ));
    }
    Ok((bytes, input.len))
}

/// Decoded bytes (as f64) the file's flights may still declare.
struct Budget {
    file_len: u64,
    left: u64,
}

/// Bytes of one stored value of a numeric type.
fn stored_size(d: &DType) -> u64 {
    match d {
        DType::I8 | DType::U8 => 1,
        DType::I16 | DType::U16 => 2,
        DType::F32 | DType::I32 | DType::U32 => 4,
        _ => 8,
    }
}

fn read_group(
    loc: &Location,
    name: String,
    g: &Group,
    expect: &Expectation<'_>,
    budget: &mut Budget,
) -> Hdf5Flight {
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
    // First every dataset's shape and type, with nothing read.
    let mut found = Vec::with_capacity(plan.slots.len());
    let mut problems = Vec::new();
    let mut n_rows: Option<(u64, String)> = None;
    for slot in &plan.slots {
        let cloc = gloc.clone().with_column(slot.name.clone());
        let ds = match g.dataset(&slot.source) {
            Ok(d) => d,
            Err(e) => {
                problems.push(Problem::error(cloc, format!("cannot open dataset: {e}")));
                continue;
            }
        };
        let rows = match ds.shape() {
            Ok(s) if s.len() == 1 => s[0],
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
        };
        let size = match ds.dtype() {
            Ok(
                d @ (DType::F32
                | DType::F64
                | DType::I8
                | DType::I16
                | DType::I32
                | DType::I64
                | DType::U8
                | DType::U16
                | DType::U32
                | DType::U64),
            ) => stored_size(&d),
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
        };
        match ds.chunk_shape() {
            Ok(None) => {}
            Ok(Some(c)) => {
                let cells = c.iter().fold(1u64, |a, &n| a.saturating_mul(n));
                let bytes = cells.saturating_mul(size);
                if cells > MAX_FLIGHT_ROWS
                    || !decoded_fits(bytes, budget.file_len, MAX_LOG_EXPANSION)
                {
                    problems.push(Problem::error(
                        cloc,
                        format!(
                            "dataset declares chunks of {cells} values ({bytes} bytes), more than \
                             a file of {} bytes can hold (limit {MAX_FLIGHT_ROWS} values)",
                            budget.file_len
                        ),
                    ));
                    continue;
                }
            }
            Err(e) => {
                problems.push(Problem::error(
                    cloc,
                    format!("cannot read the chunk layout: {e}"),
                ));
                continue;
            }
        }
        match &n_rows {
            None => n_rows = Some((rows, slot.name.clone())),
            Some((n, first)) if *n != rows => {
                problems.push(
                    Problem::error(cloc, format!("has {rows} rows where `{first}` has {n}"))
                        .with_hint("all columns of a flight share one time base and one length"),
                );
                continue;
            }
            _ => {}
        }
        found.push((cloc, ds));
    }
    if !problems.is_empty() {
        return fail(problems);
    }
    let rows = n_rows.map_or(0, |n| n.0);
    if rows == 0 {
        return fail(vec![Problem::error(
            gloc,
            "the flight's datasets hold no rows",
        )]);
    }
    // Then the declared size against the limits and the file's size, before anything is read.
    let n_values = rows.saturating_mul(found.len() as u64);
    if rows > MAX_FLIGHT_ROWS || n_values > MAX_FLIGHT_VALUES {
        return fail(vec![
            Problem::error(
                gloc,
                format!(
                    "the datasets declare {rows} rows × {} columns read; one flight log holds at \
                     most {MAX_FLIGHT_ROWS} rows and {MAX_FLIGHT_VALUES} values",
                    found.len()
                ),
            )
            .with_hint("split the flight into several logs"),
        ]);
    }
    let decoded = n_values.saturating_mul(8);
    if decoded > budget.left {
        return fail(vec![
            Problem::error(
                gloc,
                format!(
                    "the datasets declare {rows} rows × {} columns ({decoded} bytes as f64), more \
                     than the file of {} bytes can hold (at most {} bytes for all its flights, \
                     {MAX_LOG_EXPANSION} times its size plus {SMALL_FILE_ALLOWANCE})",
                    found.len(),
                    budget.file_len,
                    decoded_bound(budget.file_len, MAX_LOG_EXPANSION)
                ),
            )
            .with_hint("the file is damaged or was not fully written"),
        ]);
    }
    budget.left -= decoded;
    let mut values = Vec::with_capacity(found.len());
    for (cloc, ds) in found {
        match ds.read_f64() {
            Ok(v) if v.len() as u64 == rows => values.push(v),
            Ok(v) => problems.push(Problem::error(
                cloc,
                format!(
                    "{} values read, the dataset's shape declares {rows}",
                    v.len()
                ),
            )),
            Err(e) => problems.push(Problem::error(cloc, format!("cannot read: {e}"))),
        }
    }
    if !problems.is_empty() {
        return fail(problems);
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
