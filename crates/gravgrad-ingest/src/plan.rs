//! The survey plan for QC (recipe `[qc] plan`): a CSV of planned lines, one row per line with
//! columns `line`, `start_easting`, `start_northing`, `end_easting`, `end_northing` (m, in the
//! survey's UTM frame). Other columns are ignored; `#` lines before the header are comments.

use gravgrad_core::{Location, Problem};
use std::collections::BTreeMap;
use std::path::Path;

/// Planned start and end of each line: line number → [start E, start N, end E, end N], m.
pub type Plan = BTreeMap<i64, [f64; 4]>;

const COLUMNS: [&str; 5] = [
    "line",
    "start_easting",
    "start_northing",
    "end_easting",
    "end_northing",
];

/// Reads a plan; every problem names the file, row (header = row 1) and column.
pub fn read_plan(path: &Path) -> Result<Plan, Vec<Problem>> {
    let loc = || Location::file(path);
    let text = crate::input_file::read_text(path, gravgrad_core::limits::MAX_TEXT_FILE_BYTES)
        .map_err(|p| vec![p])?;
    let mut rows = text
        .lines()
        .filter(|l| !l.starts_with('#') && !l.trim().is_empty());
    let head = rows
        .next()
        .ok_or_else(|| vec![Problem::error(loc(), "empty; expected a header row")])?;
    let names: Vec<&str> = head
        .trim_start_matches('\u{feff}')
        .split(',')
        .map(str::trim)
        .collect();
    let mut idx = [0usize; 5];
    let mut problems = Vec::new();
    for (k, c) in COLUMNS.iter().enumerate() {
        match names.iter().position(|n| n == c) {
            Some(i) => idx[k] = i,
            None => problems.push(Problem::error(
                loc().with_row(1).with_column(*c),
                format!("column missing; a plan needs {}", COLUMNS.join(", ")),
            )),
        }
    }
    if !problems.is_empty() {
        return Err(problems);
    }
    let mut plan = Plan::new();
    for (k, row) in rows.enumerate() {
        let rown = k as u64 + 2;
        let cells: Vec<&str> = row.split(',').map(str::trim).collect();
        let mut v = [0.0; 5];
        for (j, &i) in idx.iter().enumerate() {
            let cell = cells.get(i).copied().unwrap_or("");
            match cell.parse::<f64>() {
                Ok(x) if x.is_finite() => v[j] = x,
                _ => problems.push(Problem::error(
                    loc().with_row(rown).with_column(COLUMNS[j]),
                    format!("expected a number, found `{cell}`"),
                )),
            }
        }
        let line = v[0] as i64;
        if v[0] != line as f64 {
            problems.push(Problem::error(
                loc().with_row(rown).with_column("line"),
                format!("expected a whole line number, found {}", v[0]),
            ));
        } else if plan.insert(line, [v[1], v[2], v[3], v[4]]).is_some() {
            problems.push(Problem::error(
                loc().with_row(rown).with_column("line"),
                format!("line {line} is planned twice"),
            ));
        }
    }
    if problems.is_empty() {
        Ok(plan)
    } else {
        Err(problems)
    }
}
