//! Where an input went wrong, and what was wrong with it.
//!
//! Every reader and validator reports problems as [`Problem`] values carrying a [`Location`]
//! (file, row, column, recipe key) so that the binary can print them the same way everywhere and
//! tests can check the place, not only the text.

use serde::Serialize;
use std::fmt;
use std::path::PathBuf;

/// A place in the user's input. Rows are 1-based as `docs/formats.md` defines them: in CSV the
/// header line is row 1; in Parquet and HDF5 the first record is row 1.
#[derive(Clone, Debug, Default, PartialEq, Eq, Serialize)]
pub struct Location {
    #[serde(skip_serializing_if = "Option::is_none")]
    pub file: Option<PathBuf>,
    /// HDF5 group or other part of a file holding several flights.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub part: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub row: Option<u64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub column: Option<String>,
    /// Dotted key path inside a TOML file, e.g. `filter.cutoff_wavelength_m`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub key: Option<String>,
    /// Line within a text file (TOML), when the key alone does not find it.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub line: Option<u64>,
}

impl Location {
    pub fn file(path: impl Into<PathBuf>) -> Self {
        Self {
            file: Some(path.into()),
            ..Self::default()
        }
    }
    pub fn with_part(mut self, part: impl Into<String>) -> Self {
        self.part = Some(part.into());
        self
    }
    pub fn with_row(mut self, row: u64) -> Self {
        self.row = Some(row);
        self
    }
    pub fn with_column(mut self, column: impl Into<String>) -> Self {
        self.column = Some(column.into());
        self
    }
    pub fn with_key(mut self, key: impl Into<String>) -> Self {
        self.key = Some(key.into());
        self
    }
    pub fn with_line(mut self, line: u64) -> Self {
        self.line = Some(line);
        self
    }
}

impl fmt::Display for Location {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut parts: Vec<String> = Vec::new();
        if let Some(p) = &self.file {
            parts.push(p.display().to_string());
        }
        if let Some(p) = &self.part {
            parts.push(format!("group `{p}`"));
        }
        if let Some(l) = self.line {
            parts.push(format!("line {l}"));
        }
        if let Some(k) = &self.key {
            parts.push(format!("key `{k}`"));
        }
        if let Some(r) = self.row {
            parts.push(format!("row {r}"));
        }
        if let Some(c) = &self.column {
            parts.push(format!("column `{c}`"));
        }
        write!(f, "{}", parts.join(", "))
    }
}

/// How bad a problem is: an error stops processing (exit code 2); a warning is reported only.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Severity {
    Warning,
    Error,
}

/// One problem found in the input: where, what, and (when there is one) what the user can do.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Problem {
    pub severity: Severity,
    pub location: Location,
    pub message: String,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub hint: Option<String>,
}

impl Problem {
    pub fn error(location: Location, message: impl Into<String>) -> Self {
        Self {
            severity: Severity::Error,
            location,
            message: message.into(),
            hint: None,
        }
    }
    pub fn warning(location: Location, message: impl Into<String>) -> Self {
        Self {
            severity: Severity::Warning,
            location,
            message: message.into(),
            hint: None,
        }
    }
    pub fn with_hint(mut self, hint: impl Into<String>) -> Self {
        self.hint = Some(hint.into());
        self
    }
    pub fn is_error(&self) -> bool {
        self.severity == Severity::Error
    }
}

impl fmt::Display for Problem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let sev = match self.severity {
            Severity::Error => "error",
            Severity::Warning => "warning",
        };
        let loc = self.location.to_string();
        if loc.is_empty() {
            write!(f, "{sev}: {}", self.message)?;
        } else {
            write!(f, "{sev}: {loc}: {}", self.message)?;
        }
        if let Some(h) = &self.hint {
            write!(f, " ({h})")?;
        }
        Ok(())
    }
}

impl std::error::Error for Problem {}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn display_names_file_row_and_column() {
        let p = Problem::error(
            Location::file("f.csv").with_row(12).with_column("fx"),
            "not a number: `abc`",
        )
        .with_hint("fix the cell");
        assert_eq!(
            p.to_string(),
            "error: f.csv, row 12, column `fx`: not a number: `abc` (fix the cell)"
        );
    }
}
