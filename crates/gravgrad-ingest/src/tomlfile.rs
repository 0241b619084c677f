//! Reading our TOML files (instrument, recipe) with errors that name the key path and line.

use crate::input_file::read_text;
use gravgrad_core::limits::MAX_TEXT_FILE_BYTES;
use gravgrad_core::{Location, Problem};
use serde::de::DeserializeOwned;
use std::path::Path;

/// Parses `text` (from `path`) into `T`, rejecting unknown keys; the error names the dotted key
/// path and the line.
pub fn parse<T: DeserializeOwned>(path: &Path, text: &str) -> Result<T, Problem> {
    let loc = Location::file(path);
    let de = match toml::de::Deserializer::parse(text) {
        Ok(d) => d,
        Err(e) => {
            return Err(with_span(
                Problem::error(loc, format!("not valid TOML: {}", e.message())),
                text,
                e.span(),
            ));
        }
    };
    serde_path_to_error::deserialize::<_, T>(de).map_err(|e| {
        let key = e.path().to_string();
        let inner = e.into_inner();
        let mut l = loc.clone();
        if key != "." && !key.is_empty() {
            l = l.with_key(key);
        }
        with_span(
            Problem::error(l, inner.message().to_string()),
            text,
            inner.span(),
        )
    })
}

fn with_span(mut p: Problem, text: &str, span: Option<std::ops::Range<usize>>) -> Problem {
    if let Some(s) = span {
        let line = text.as_bytes()[..s.start.min(text.len())]
            .iter()
            .filter(|b| **b == b'\n')
            .count() as u64
            + 1;
        p.location.line = Some(line);
    }
    p
}

/// Reads and parses a TOML file.
pub fn read<T: DeserializeOwned>(path: &Path) -> Result<T, Problem> {
    let text = read_text(path, MAX_TEXT_FILE_BYTES)?;
    parse(path, &text)
}

/// The `layout` string of a TOML file (to tell instrument from recipe files); `Ok(None)` when the
/// file is TOML without one, an error naming the line when it is not TOML.
pub fn layout_of(path: &Path, text: &str) -> Result<Option<String>, Problem> {
    let v: toml::Table = parse(path, text)?;
    Ok(v.get("layout").and_then(|l| l.as_str()).map(str::to_string))
}
