//! Collects problems found row by row without flooding the report: one entry per kind of problem
//! and column, holding the first row where it happened and how many rows share it.

use gravgrad_core::{Location, Problem};
use std::collections::BTreeMap;

#[derive(Clone, Debug)]
struct Entry {
    row: u64,
    count: u64,
    problem: Problem,
}

/// Problems keyed by (kind, column); rows are kept as numbers until the end so that partial
/// results from parallel chunks can be shifted and merged.
#[derive(Clone, Debug, Default)]
pub struct Sink {
    entries: BTreeMap<(&'static str, String), Entry>,
}

impl Sink {
    pub fn new() -> Self {
        Self::default()
    }

    /// Records a problem of `kind` at `row` of `column`; `make` builds it only for the first one.
    pub fn add(
        &mut self,
        kind: &'static str,
        column: &str,
        row: u64,
        make: impl FnOnce() -> Problem,
    ) {
        match self.entries.get_mut(&(kind, column.to_string())) {
            Some(e) => {
                e.count += 1;
                if row < e.row {
                    e.row = row;
                    e.problem = make();
                }
            }
            None => {
                self.entries.insert(
                    (kind, column.to_string()),
                    Entry {
                        row,
                        count: 1,
                        problem: make(),
                    },
                );
            }
        }
    }

    /// Adds all of `other`'s entries with their rows shifted by `offset`.
    pub fn merge_shifted(&mut self, other: Sink, offset: u64) {
        for (key, mut e) in other.entries {
            e.row += offset;
            match self.entries.get_mut(&key) {
                Some(mine) => {
                    mine.count += e.count;
                    if e.row < mine.row {
                        mine.row = e.row;
                        mine.problem = e.problem;
                    }
                }
                None => {
                    self.entries.insert(key, e);
                }
            }
        }
    }

    /// The problems, ordered by row, each located at its first row (`row + first_row` in the file's
    /// numbering) with the count of further rows in its message.
    pub fn into_problems(self, base: &Location, first_row: u64) -> Vec<Problem> {
        let mut out: Vec<(u64, Problem)> = self
            .entries
            .into_values()
            .map(|e| {
                let mut p = e.problem;
                let mut loc = base.clone();
                loc.row = Some(e.row + first_row);
                loc.column = p.location.column.take();
                p.location = loc;
                if e.count > 1 {
                    p.message = format!("{} (and {} more rows like it)", p.message, e.count - 1);
                }
                (e.row, p)
            })
            .collect();
        out.sort_by(|a, b| {
            a.0.cmp(&b.0)
                .then_with(|| a.1.location.column.cmp(&b.1.location.column))
        });
        out.into_iter().map(|(_, p)| p).collect()
    }
}
