//! Which columns of a file to read, under which names, and with which unit scale.
//!
//! A logger may write its own names and units; the recipe's `[input.columns]` maps them onto the
//! layout's names (`docs/formats.md`). A [`ReadPlan`] is the outcome for one file: for each column we
//! keep, the source column in the file, the layout name, and the affine conversion `value·scale +
//! offset` into layout units.

use crate::layout::{self, Quantity};
use gravgrad_core::{Location, Problem};
use serde::{Deserialize, Serialize};
use std::collections::{BTreeMap, BTreeSet};

/// How one layout column is found in a file whose logger uses other names or units.
#[derive(Clone, Debug, PartialEq, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct ColumnSource {
    /// Name of the column in the file.
    pub from: String,
    /// Multiplier into the layout's unit (e.g. 9.80665 for accelerations logged in g).
    #[serde(default = "one")]
    pub scale: f64,
    /// Added after scaling (e.g. −273.15 for temperatures logged in kelvin).
    #[serde(default)]
    pub offset: f64,
}

fn one() -> f64 {
    1.0
}

/// The recipe's column map: layout name → source.
pub type ColumnMap = BTreeMap<String, ColumnSource>;

/// One column to read.
#[derive(Clone, Debug, PartialEq)]
pub struct Slot {
    /// Layout name (`fx`, `xx_a`, …).
    pub name: String,
    /// Name in the file.
    pub source: String,
    /// Position of the source among the file's columns.
    pub index: usize,
    pub scale: f64,
    pub offset: f64,
    pub quantity: Quantity,
    pub required: bool,
}

impl Slot {
    /// Whether the column holds integer line numbers.
    pub fn is_line(&self) -> bool {
        self.quantity == Quantity::Line
    }
}

/// The columns to read from one file, and the file's columns left alone.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct ReadPlan {
    pub slots: Vec<Slot>,
    pub ignored: Vec<String>,
    /// Pair ids whose `_a` and `_b` columns are read.
    pub pairs: Vec<String>,
}

/// What a file must and may contain.
#[derive(Clone, Debug, Default)]
pub struct Expectation<'a> {
    /// Pair ids from the instrument file; `None` means: take every `<id>_a`/`<id>_b` pair the
    /// header holds.
    pub pairs: Option<&'a [String]>,
    pub map: Option<&'a ColumnMap>,
    /// Layout columns that need not be in this file because another table supplies them
    /// (the navigation table).
    pub supplied_elsewhere: &'a [&'a str],
    /// Read only these layout columns, all optional except `time` (used for navigation tables).
    pub only: Option<&'a [&'a str]>,
}

/// Matches a file's column names against what is expected; every missing required column is an
/// error located at the header (CSV row 1; Parquet/HDF5 without a row).
pub fn plan(
    header: &[String],
    expect: &Expectation<'_>,
    loc: &Location,
) -> Result<ReadPlan, Vec<Problem>> {
    let mut problems = Vec::new();
    let mut positions: BTreeMap<&str, usize> = BTreeMap::new();
    for (i, h) in header.iter().enumerate() {
        if positions.insert(h.as_str(), i).is_some() {
            problems.push(
                Problem::error(
                    loc.clone().with_column(h.clone()),
                    "column name appears twice in the header",
                )
                .with_hint("give every column its own name"),
            );
        }
    }
    let map = expect.map;
    let source_of = |name: &str| -> (String, f64, f64) {
        match map.and_then(|m| m.get(name)) {
            Some(s) => (s.from.clone(), s.scale, s.offset),
            None => (name.to_string(), 1.0, 0.0),
        }
    };

    let mut wanted: Vec<(String, Quantity, bool)> = Vec::new();
    match expect.only {
        Some(only) => {
            for name in only {
                if let Some(d) = layout::column_def(name) {
                    wanted.push((d.name.to_string(), d.quantity, d.name == "time"));
                }
            }
        }
        None => {
            for d in layout::COLUMNS.iter() {
                let required = d.required && !expect.supplied_elsewhere.contains(&d.name);
                wanted.push((d.name.to_string(), d.quantity, required));
            }
        }
    }

    let pairs: Vec<String> = if expect.only.is_some() {
        Vec::new()
    } else {
        match expect.pairs {
            Some(ids) => ids.to_vec(),
            None => infer_pairs(header, map),
        }
    };
    for id in &pairs {
        for end in ["a", "b"] {
            wanted.push((format!("{id}_{end}"), Quantity::Acceleration, true));
        }
    }

    let mut used: BTreeSet<usize> = BTreeSet::new();
    let mut slots = Vec::new();
    for (name, quantity, required) in wanted {
        let (source, scale, offset) = source_of(&name);
        match positions.get(source.as_str()) {
            Some(&index) => {
                used.insert(index);
                slots.push(Slot {
                    name,
                    source,
                    index,
                    scale,
                    offset,
                    quantity,
                    required,
                });
            }
            None if required => {
                let what = if source == name {
                    format!("required column `{name}` is missing")
                } else {
                    format!("required column `{name}` (mapped from `{source}`) is missing")
                };
                let hint = if name.ends_with("_a") || name.ends_with("_b") {
                    "the instrument file names this pair; log both of its accelerometers"
                        .to_string()
                } else {
                    format!(
                        "add it, or map the logger's name onto it in the recipe's [input.columns] {name} = {{ from = \"…\" }}"
                    )
                };
                problems.push(
                    Problem::error(loc.clone().with_column(name.clone()), what).with_hint(hint),
                );
            }
            None => {}
        }
    }
    if !problems.is_empty() {
        return Err(problems);
    }
    let ignored = header
        .iter()
        .enumerate()
        .filter(|(i, _)| !used.contains(i))
        .map(|(_, h)| h.clone())
        .collect();
    Ok(ReadPlan {
        slots,
        ignored,
        pairs,
    })
}

/// Pair ids for which the header holds both `<id>_a` and `<id>_b` (after the column map).
fn infer_pairs(header: &[String], map: Option<&ColumnMap>) -> Vec<String> {
    let mut names: BTreeSet<String> = header.iter().cloned().collect();
    if let Some(m) = map {
        for (ours, src) in m {
            if names.remove(&src.from) {
                names.insert(ours.clone());
            }
        }
    }
    let mut ids: Vec<String> = names
        .iter()
        .filter_map(|n| n.strip_suffix("_a"))
        .filter(|id| !id.is_empty() && !["ac"].contains(id) && names.contains(&format!("{id}_b")))
        .map(str::to_string)
        .collect();
    ids.sort();
    ids
}

#[cfg(test)]
mod tests {
    use super::*;

    fn header(names: &[&str]) -> Vec<String> {
        names.iter().map(|s| s.to_string()).collect()
    }

    const NAV: [&str; 13] = [
        "time", "lat", "lon", "height", "roll", "pitch", "heading", "wx", "wy", "wz", "fx", "fy",
        "fz",
    ];

    #[test]
    fn pairs_are_found_from_the_header() {
        let mut h = header(&NAV);
        h.extend(header(&[
            "zz_a", "zz_b", "xx_a", "xx_b", "lonely_a", "note",
        ]));
        let p = plan(&h, &Expectation::default(), &Location::file("f.csv")).unwrap();
        assert_eq!(p.pairs, vec!["xx", "zz"]);
        assert_eq!(p.ignored, vec!["lonely_a", "note"]);
    }

    #[test]
    fn a_missing_column_is_named() {
        let h = header(&NAV[..12]);
        let err = plan(&h, &Expectation::default(), &Location::file("f.csv")).unwrap_err();
        assert_eq!(err.len(), 1);
        assert_eq!(err[0].location.column.as_deref(), Some("fz"));
    }

    #[test]
    fn the_map_renames_and_scales() {
        let mut h = header(&NAV);
        h[10] = "acc_x_g".into();
        let mut m = ColumnMap::new();
        m.insert(
            "fx".into(),
            ColumnSource {
                from: "acc_x_g".into(),
                scale: 9.80665,
                offset: 0.0,
            },
        );
        let p = plan(
            &h,
            &Expectation {
                map: Some(&m),
                ..Default::default()
            },
            &Location::default(),
        )
        .unwrap();
        let fx = p.slots.iter().find(|s| s.name == "fx").unwrap();
        assert_eq!((fx.index, fx.scale), (10, 9.80665));
    }
}
