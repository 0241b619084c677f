//! The line table as a polars `DataFrame`, out and in (feature `polars`, off by default).
//!
//! The frame has the columns of `lines.parquet` in the file's order: `time`, then the integer
//! columns `flight`, `line`, `flags` (Int64), then every other column of the table (Float64), in
//! Eötvös for tensors as in the file (docs/formats.md). Values are moved bit for bit: NaN stays
//! NaN (a missing value in the layout), never a polars null.
//!
//! Reading a frame back is strict, so that a frame that went through a user's hands either gives
//! a table the products can be written from or an error naming the column (and row) at fault:
//! `time`, `flight`, `line` and `flags` must be present; `flight`, `line`, `flags` must be Int64
//! and every other column Float64; no value may be null.
//!
//! ```
//! use gravgrad_survey::line_table::LinesTable;
//!
//! let table = LinesTable {
//!     names: vec!["time".into(), "levelled_gzz".into()],
//!     f64_columns: vec![vec![0.0, 0.1], vec![12.5, f64::NAN]],
//!     i64_names: vec!["flight".into(), "line".into(), "flags".into()],
//!     i64_columns: vec![vec![1, 1], vec![1010, 1010], vec![0, 0]],
//! };
//! let df = table.to_dataframe()?;
//! let order: Vec<&str> = df.get_column_names().iter().map(|n| n.as_str()).collect();
//! assert_eq!(order, ["time", "flight", "line", "flags", "levelled_gzz"]);
//!
//! let back = LinesTable::from_dataframe(&df)?;
//! assert_eq!(back.names, table.names);
//! assert_eq!(back.i64_columns, table.i64_columns);
//! assert!(back.f64_columns[1][1].is_nan());
//! # Ok::<(), gravgrad_survey::line_frame::FrameError>(())
//! ```

use crate::line_table::LinesTable;
use polars::prelude::{Column, DataFrame, DataType, PlSmallStr};

/// The integer columns of the layout, in the file's order.
pub const INTEGER_COLUMNS: [&str; 3] = ["flight", "line", "flags"];

/// Why a table could not become a frame, or a frame a table. Each names the column at fault.
#[derive(Debug, Clone, PartialEq)]
pub enum FrameError {
    /// A column the layout needs is not in the frame (or, going out, not in the table).
    Missing { column: String },
    /// A column holds values of another type than the layout's.
    WrongType {
        column: String,
        expected: &'static str,
        found: String,
    },
    /// A null value: the layout has none (a missing value is NaN).
    Null { column: String, row: usize },
    /// Going out: a column's length differs from `time`'s.
    Length {
        column: String,
        expected: usize,
        found: usize,
    },
    /// Going out: the table's names and columns are not aligned, or a name is repeated.
    Table(String),
    /// polars refused the frame (the text is polars' own).
    Polars(String),
}

impl std::fmt::Display for FrameError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            FrameError::Missing { column } => {
                write!(f, "column `{column}`: missing; the line table needs it")
            }
            FrameError::WrongType {
                column,
                expected,
                found,
            } => write!(f, "column `{column}`: expected {expected}, found {found}"),
            FrameError::Null { column, row } => write!(
                f,
                "column `{column}`, row {row}: null; expected a value (a missing value is NaN)"
            ),
            FrameError::Length {
                column,
                expected,
                found,
            } => write!(
                f,
                "column `{column}`: {found} values, expected {expected} (as many as `time`)"
            ),
            FrameError::Table(what) => write!(f, "line table: {what}"),
            FrameError::Polars(what) => write!(f, "polars: {what}"),
        }
    }
}

impl std::error::Error for FrameError {}

impl LinesTable {
    /// Every column as a polars `DataFrame`, in `lines.parquet`'s order (module doc): `time`,
    /// `flight`, `line`, `flags`, then the other float columns in the table's order.
    ///
    /// Fails, naming the column, when the table is not a line table: `time` not its first float
    /// column, an integer column missing or repeated, names and columns not aligned, or a column
    /// of another length than `time`.
    pub fn to_dataframe(&self) -> Result<DataFrame, FrameError> {
        if self.names.len() != self.f64_columns.len() {
            return Err(FrameError::Table(format!(
                "{} float column names for {} float columns",
                self.names.len(),
                self.f64_columns.len()
            )));
        }
        if self.i64_names.len() != self.i64_columns.len() {
            return Err(FrameError::Table(format!(
                "{} integer column names for {} integer columns",
                self.i64_names.len(),
                self.i64_columns.len()
            )));
        }
        match self.names.first() {
            Some(first) if first == "time" => {}
            Some(first) => {
                return Err(FrameError::Table(format!(
                    "the first float column is `{first}`, expected `time`"
                )));
            }
            None => {
                return Err(FrameError::Missing {
                    column: "time".into(),
                });
            }
        }
        let height = self.f64_columns[0].len();
        let all = self
            .names
            .iter()
            .zip(self.f64_columns.iter().map(Vec::len))
            .chain(
                self.i64_names
                    .iter()
                    .zip(self.i64_columns.iter().map(Vec::len)),
            );
        let mut seen: Vec<&str> = Vec::with_capacity(self.names.len() + self.i64_names.len());
        for (name, len) in all {
            if seen.contains(&name.as_str()) {
                return Err(FrameError::Table(format!("column `{name}` appears twice")));
            }
            seen.push(name);
            if len != height {
                return Err(FrameError::Length {
                    column: name.clone(),
                    expected: height,
                    found: len,
                });
            }
        }
        for required in INTEGER_COLUMNS {
            if !self.i64_names.iter().any(|n| n == required) {
                return Err(FrameError::Missing {
                    column: required.to_string(),
                });
            }
        }

        let mut columns: Vec<Column> = Vec::with_capacity(self.names.len() + 3);
        columns.push(Column::new(
            PlSmallStr::from_str("time"),
            &self.f64_columns[0][..],
        ));
        for (n, c) in self.i64_names.iter().zip(&self.i64_columns) {
            columns.push(Column::new(PlSmallStr::from_str(n), &c[..]));
        }
        for (n, c) in self.names.iter().zip(&self.f64_columns).skip(1) {
            columns.push(Column::new(PlSmallStr::from_str(n), &c[..]));
        }
        DataFrame::new(columns).map_err(|e| FrameError::Polars(e.to_string()))
    }

    /// The table from a frame with the layout's columns (module doc): `time` and the other
    /// Float64 columns in the frame's order (`time` first), `flight`, `line`, `flags` as Int64.
    ///
    /// Fails, naming the column (and the row for a null), on a missing `time`, `flight`, `line`
    /// or `flags`, on a column of another type, or on a null value. Never panics, whatever the
    /// frame.
    pub fn from_dataframe(df: &DataFrame) -> Result<LinesTable, FrameError> {
        let mut names = Vec::new();
        let mut f64_columns = Vec::new();
        let time = df.column("time").map_err(|_| FrameError::Missing {
            column: "time".into(),
        })?;
        names.push("time".to_string());
        f64_columns.push(floats(time)?);

        let mut i64_names = Vec::new();
        let mut i64_columns = Vec::new();
        for name in INTEGER_COLUMNS {
            let col = df.column(name).map_err(|_| FrameError::Missing {
                column: name.to_string(),
            })?;
            i64_names.push(name.to_string());
            i64_columns.push(integers(col)?);
        }

        for col in df.get_columns() {
            let name = col.name().as_str();
            if name == "time" || INTEGER_COLUMNS.contains(&name) {
                continue;
            }
            names.push(name.to_string());
            f64_columns.push(floats(col)?);
        }
        Ok(LinesTable {
            names,
            f64_columns,
            i64_names,
            i64_columns,
        })
    }
}

/// The column's values; it must be Float64 with no null.
fn floats(col: &Column) -> Result<Vec<f64>, FrameError> {
    let name = col.name().as_str();
    if col.dtype() != &DataType::Float64 {
        return Err(wrong_type(name, "Float64", col.dtype()));
    }
    let ca = col
        .f64()
        .map_err(|_| wrong_type(name, "Float64", col.dtype()))?;
    if ca.null_count() > 0 {
        let row = ca.iter().position(|v| v.is_none()).unwrap_or(0);
        return Err(FrameError::Null {
            column: name.to_string(),
            row,
        });
    }
    Ok(ca.into_no_null_iter().collect())
}

/// The column's values; it must be Int64 with no null.
fn integers(col: &Column) -> Result<Vec<i64>, FrameError> {
    let name = col.name().as_str();
    if col.dtype() != &DataType::Int64 {
        return Err(wrong_type(name, "Int64", col.dtype()));
    }
    let ca = col
        .i64()
        .map_err(|_| wrong_type(name, "Int64", col.dtype()))?;
    if ca.null_count() > 0 {
        let row = ca.iter().position(|v| v.is_none()).unwrap_or(0);
        return Err(FrameError::Null {
            column: name.to_string(),
            row,
        });
    }
    Ok(ca.into_no_null_iter().collect())
}

fn wrong_type(column: &str, expected: &'static str, found: &DataType) -> FrameError {
    FrameError::WrongType {
        column: column.to_string(),
        expected,
        found: format!("{found:?}"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::line_table::{FLAG_OFF_LINE, build};
    use crate::pipeline::{FlightResult, Positions};
    use gravgrad_core::SymTensor;
    use gravgrad_core::pairs::AlphaSource;
    use gravgrad_core::units::EOTVOS;

    /// A flight of `n` samples with values that differ in every column and sample, so that a
    /// column or row out of place shows; lines 0 (off line) and `line`.
    fn flight(n: usize, t0: f64, line: i64, with_alpha: bool, observed: [bool; 6]) -> FlightResult {
        let s = |k: usize, c: f64| -> f64 { c + 0.37 * k as f64 + (k as f64 * 0.9).sin() };
        let tensor = |k: usize, c: f64| -> SymTensor {
            SymTensor::from_array(std::array::from_fn(|i| s(k, c + i as f64) * EOTVOS))
        };
        FlightResult {
            positions: Positions {
                lat_deg: (0..n).map(|k| s(k, -31.0)).collect(),
                lon_deg: (0..n).map(|k| s(k, 116.0)).collect(),
                height_m: (0..n).map(|k| s(k, 120.0)).collect(),
                easting_m: (0..n).map(|k| s(k, 400_000.0)).collect(),
                northing_m: (0..n).map(|k| s(k, 6_500_000.0)).collect(),
                convergence_rad: vec![0.0; n],
            },
            time: (0..n).map(|k| t0 + 0.1 * k as f64).collect(),
            line: (0..n).map(|k| if k < 2 { 0 } else { line }).collect(),
            clearance: with_alpha.then(|| (0..n).map(|k| s(k, 80.0)).collect()),
            measured: (0..n).map(|k| tensor(k, 10.0)).collect(),
            rotated: (0..n).map(|k| tensor(k, 20.0)).collect(),
            normal: (0..n).map(|k| tensor(k, 30.0)).collect(),
            terrain: Some((0..n).map(|k| tensor(k, 40.0)).collect()),
            trace: (0..n).map(|k| s(k, 0.5) * EOTVOS).collect(),
            alpha_difference: with_alpha
                .then(|| (0..n).map(|k| [s(k, 1e-4), -0.0, s(k, 3e-4)]).collect()),
            observed,
            heading_only: false,
            alpha_source: AlphaSource::Pairs,
            calibration: Vec::new(),
            calibration_notes: Vec::new(),
            calibration_held: Vec::new(),
            timings: Vec::new(),
        }
    }

    /// The error for a frame that must be refused.
    fn refused(df: &DataFrame) -> FrameError {
        match LinesTable::from_dataframe(df) {
            Ok(t) => panic!("frame accepted, with columns {:?}", t.names),
            Err(e) => e,
        }
    }

    fn two_flights() -> LinesTable {
        build(&[
            flight(5, 1000.0, 1010, true, [true; 6]),
            flight(
                4,
                5000.0,
                1020,
                false,
                [true, false, true, true, false, true],
            ),
        ])
    }

    fn bits(table: &LinesTable) -> Vec<Vec<u64>> {
        table
            .f64_columns
            .iter()
            .map(|c| c.iter().map(|v| v.to_bits()).collect())
            .collect()
    }

    #[test]
    fn a_built_table_goes_to_a_frame_in_the_file_order_and_back_bit_for_bit() {
        let table = two_flights();
        // The constructed flights give NaN (unobserved components, no clearance) and -0.0.
        assert!(table.f64_columns.iter().flatten().any(|v| v.is_nan()));
        assert!(table.i64_columns[2].contains(&FLAG_OFF_LINE));

        let df = table.to_dataframe().unwrap();
        assert_eq!(df.height(), 9);
        let order: Vec<String> = df
            .get_column_names()
            .iter()
            .map(|n| n.to_string())
            .collect();
        let mut expected = vec!["time".to_string()];
        expected.extend(["flight", "line", "flags"].map(String::from));
        expected.extend(table.names[1..].iter().cloned());
        assert_eq!(order, expected);
        for col in df.get_columns() {
            let want = if INTEGER_COLUMNS.contains(&col.name().as_str()) {
                DataType::Int64
            } else {
                DataType::Float64
            };
            assert_eq!(col.dtype(), &want, "column `{}`", col.name());
            assert_eq!(col.null_count(), 0, "column `{}`", col.name());
        }

        let back = LinesTable::from_dataframe(&df).unwrap();
        assert_eq!(back.names, table.names);
        assert_eq!(back.i64_names, table.i64_names);
        assert_eq!(back.i64_columns, table.i64_columns);
        assert_eq!(bits(&back), bits(&table));
    }

    #[test]
    fn an_empty_table_goes_round_with_its_columns() {
        let table = build(&[]);
        let back = LinesTable::from_dataframe(&table.to_dataframe().unwrap()).unwrap();
        assert_eq!(back.names, table.names);
        assert_eq!(back.i64_columns, vec![Vec::<i64>::new(); 3]);
        assert!(back.f64_columns.iter().all(|c| c.is_empty()));
    }

    #[test]
    fn a_string_line_column_is_refused_naming_it() {
        let mut df = two_flights().to_dataframe().unwrap();
        let text: Vec<String> = (0..df.height()).map(|k| format!("L{k}")).collect();
        df.with_column(Column::new("line".into(), text)).unwrap();
        let e = refused(&df);
        assert_eq!(e.to_string(), "column `line`: expected Int64, found String");
    }

    #[test]
    fn an_integer_tensor_column_is_refused_naming_it() {
        let mut df = two_flights().to_dataframe().unwrap();
        let ints: Vec<i64> = (0..df.height() as i64).collect();
        df.with_column(Column::new("levelled_gzz".into(), ints))
            .unwrap();
        let e = refused(&df);
        assert_eq!(
            e,
            FrameError::WrongType {
                column: "levelled_gzz".into(),
                expected: "Float64",
                found: "Int64".into()
            }
        );
        assert_eq!(
            e.to_string(),
            "column `levelled_gzz`: expected Float64, found Int64"
        );
    }

    #[test]
    fn a_missing_time_or_flags_column_is_named() {
        let df = two_flights().to_dataframe().unwrap();
        let e = refused(&df.drop("time").unwrap());
        assert_eq!(
            e.to_string(),
            "column `time`: missing; the line table needs it"
        );
        let e = refused(&df.drop("flags").unwrap());
        assert_eq!(
            e,
            FrameError::Missing {
                column: "flags".into()
            }
        );
        let e = refused(&DataFrame::empty());
        assert_eq!(
            e,
            FrameError::Missing {
                column: "time".into()
            }
        );
    }

    #[test]
    fn a_null_is_refused_naming_column_and_row() {
        let mut df = two_flights().to_dataframe().unwrap();
        let mut v: Vec<Option<f64>> = vec![Some(1.0); df.height()];
        v[3] = None;
        df.with_column(Column::new("trace".into(), v)).unwrap();
        let e = refused(&df);
        assert_eq!(
            e.to_string(),
            "column `trace`, row 3: null; expected a value (a missing value is NaN)"
        );
        let mut df = two_flights().to_dataframe().unwrap();
        let mut f: Vec<Option<i64>> = vec![Some(1); df.height()];
        f[8] = None;
        df.with_column(Column::new("flight".into(), f)).unwrap();
        assert_eq!(
            refused(&df),
            FrameError::Null {
                column: "flight".into(),
                row: 8
            }
        );
    }

    #[test]
    fn a_table_that_is_not_a_line_table_is_refused_naming_the_column() {
        let good = two_flights();
        let with = |f: &dyn Fn(&mut LinesTable)| {
            let mut t = LinesTable {
                names: good.names.clone(),
                f64_columns: good.f64_columns.clone(),
                i64_names: good.i64_names.clone(),
                i64_columns: good.i64_columns.clone(),
            };
            f(&mut t);
            t.to_dataframe().unwrap_err()
        };
        assert_eq!(
            with(&|t| {
                t.f64_columns[4].pop();
            }),
            FrameError::Length {
                column: good.names[4].clone(),
                expected: 9,
                found: 8
            }
        );
        assert_eq!(
            with(&|t| t.i64_columns[1].push(7)).to_string(),
            "column `line`: 10 values, expected 9 (as many as `time`)"
        );
        assert_eq!(
            with(&|t| {
                t.names.pop();
            })
            .to_string(),
            format!(
                "line table: {} float column names for {} float columns",
                good.names.len() - 1,
                good.names.len()
            )
        );
        assert_eq!(
            with(&|t| t.names.swap(0, 1)).to_string(),
            "line table: the first float column is `lat`, expected `time`"
        );
        assert_eq!(
            with(&|t| t.names[2] = "flight".into()).to_string(),
            "line table: column `flight` appears twice"
        );
        assert_eq!(
            with(&|t| {
                t.i64_names.pop();
                t.i64_columns.pop();
            }),
            FrameError::Missing {
                column: "flags".into()
            }
        );
        assert_eq!(
            with(&|t| {
                t.names.clear();
                t.f64_columns.clear();
            }),
            FrameError::Missing {
                column: "time".into()
            }
        );
    }
}
