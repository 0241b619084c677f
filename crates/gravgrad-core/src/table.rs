//! The in-memory flight table: one flight's channels as contiguous `f64` columns on one time base.
//!
//! Column names and units are those of the raw flight log (`docs/formats.md`, layout 1): time in GPS
//! seconds, angles in degrees, rates in rad/s, accelerations in m/s². Readers convert to these units
//! on the way in; stages take the columns as slices.

use std::collections::BTreeMap;

/// One flight's data: named `f64` columns of equal length, plus the optional integer line numbers.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct FlightTable {
    names: Vec<String>,
    columns: Vec<Vec<f64>>,
    index: BTreeMap<String, usize>,
    /// Line number per row (0 or negative: turn, transit, calibration), when the log has it.
    pub line: Option<Vec<i64>>,
}

/// Two columns of different length were put in one table.
#[derive(Debug, thiserror::Error, PartialEq, Eq)]
#[error("column `{name}` has {got} rows where the table has {want}")]
pub struct LengthMismatch {
    pub name: String,
    pub got: usize,
    pub want: usize,
}

impl FlightTable {
    pub fn new() -> Self {
        Self::default()
    }

    /// Number of rows (0 for an empty table).
    pub fn n_rows(&self) -> usize {
        self.columns
            .first()
            .map_or_else(|| self.line.as_ref().map_or(0, Vec::len), Vec::len)
    }

    /// Adds or replaces a column; all columns must have the same length.
    pub fn insert(&mut self, name: &str, values: Vec<f64>) -> Result<(), LengthMismatch> {
        if !self.columns.is_empty() || self.line.is_some() {
            let want = self.n_rows();
            if values.len() != want {
                return Err(LengthMismatch {
                    name: name.to_string(),
                    got: values.len(),
                    want,
                });
            }
        }
        if let Some(&i) = self.index.get(name) {
            self.columns[i] = values;
        } else {
            self.index.insert(name.to_string(), self.columns.len());
            self.names.push(name.to_string());
            self.columns.push(values);
        }
        Ok(())
    }

    /// The column of that name.
    pub fn get(&self, name: &str) -> Option<&[f64]> {
        self.index.get(name).map(|&i| self.columns[i].as_slice())
    }

    /// Mutable access to a column.
    pub fn get_mut(&mut self, name: &str) -> Option<&mut Vec<f64>> {
        self.index.get(name).map(|&i| &mut self.columns[i])
    }

    /// Column names in insertion order.
    pub fn names(&self) -> &[String] {
        &self.names
    }

    /// Iterates over (name, values).
    pub fn iter(&self) -> impl Iterator<Item = (&str, &[f64])> {
        self.names
            .iter()
            .map(String::as_str)
            .zip(self.columns.iter().map(Vec::as_slice))
    }

    /// Bytes held by the numeric data (for memory reporting).
    pub fn data_bytes(&self) -> usize {
        self.columns.iter().map(|c| c.len() * 8).sum::<usize>()
            + self.line.as_ref().map_or(0, |l| l.len() * 8)
    }

    /// Keeps only the rows in `range` (used to cut a flight into segments).
    pub fn slice_rows(&self, range: std::ops::Range<usize>) -> FlightTable {
        FlightTable {
            names: self.names.clone(),
            columns: self
                .columns
                .iter()
                .map(|c| c[range.clone()].to_vec())
                .collect(),
            index: self.index.clone(),
            line: self.line.as_ref().map(|l| l[range.clone()].to_vec()),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn columns_must_share_one_length() {
        let mut t = FlightTable::new();
        t.insert("time", vec![1.0, 2.0, 3.0]).unwrap();
        assert_eq!(
            t.insert("lat", vec![1.0]),
            Err(LengthMismatch {
                name: "lat".into(),
                got: 1,
                want: 3
            })
        );
        t.insert("lat", vec![4.0, 5.0, 6.0]).unwrap();
        assert_eq!(t.get("lat"), Some(&[4.0, 5.0, 6.0][..]));
        assert_eq!(t.n_rows(), 3);
        assert_eq!(t.slice_rows(1..3).get("time"), Some(&[2.0, 3.0][..]));
    }
}
