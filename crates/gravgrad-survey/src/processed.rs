//! A processed survey: what every flight of a recipe gave, in flight order, with the recipe, the
//! instrument and the map frame they were processed in.

use crate::pipeline::{FlightResult, MapFrame};
use gravgrad_core::Location;
use gravgrad_ingest::check::Survey;
use std::path::Path;

/// A processed survey: what every flight gave, and where.
pub struct Processed {
    /// The recipe, the instrument and the flights as read and checked.
    pub survey: Survey,
    /// The survey's map frame (UTM zone, EPSG code).
    pub frame: MapFrame,
    /// Each flight's name ([`flight_name`]), in the order of `results`.
    pub names: Vec<String>,
    /// Each flight's per-sample results.
    pub results: Vec<FlightResult>,
    /// The flights whose stored result (`flights/<name>.h5`) was reused.
    pub reused: Vec<String>,
}

/// The short name of a flight: its file stem, plus the HDF5 group when there is one.
///
/// ```
/// use gravgrad_core::Location;
/// let loc = Location::file("flights/f01.csv");
/// assert_eq!(gravgrad_survey::processed::flight_name(&loc), "f01");
/// ```
pub fn flight_name(loc: &Location) -> String {
    let stem = loc
        .file
        .as_deref()
        .and_then(Path::file_stem)
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "flight".into());
    match &loc.part {
        Some(p) => format!("{stem}-{}", p.trim_matches('/').replace('/', "-")),
        None => stem,
    }
}
