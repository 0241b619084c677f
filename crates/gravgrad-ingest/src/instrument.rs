//! The instrument file (`docs/formats.md`, layout `instrument/1`): the geometry of every
//! accelerometer pair in the sensor frame, and what the pair set can observe.

use crate::tomlfile;
use gravgrad_core::mat3::norm;
use gravgrad_core::pairs::{AlphaSource, Observability, PairGeometry, observability};
use gravgrad_core::{Location, Problem};
use serde::Deserialize;
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

pub const LAYOUT: &str = "instrument/1";

/// How far from 1 the length of a sensing axis may be.
pub const AXIS_TOLERANCE: f64 = 1e-6;

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct PairFile {
    id: String,
    center_m: [f64; 3],
    baseline_m: [f64; 3],
    axis: [f64; 3],
}

#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct InstrumentFile {
    layout: String,
    name: String,
    #[serde(default)]
    sample_rate_hz: Option<f64>,
    #[serde(default)]
    pair: Vec<PairFile>,
}

/// A validated instrument.
#[derive(Clone, Debug, PartialEq)]
pub struct Instrument {
    pub path: PathBuf,
    pub name: String,
    pub sample_rate_hz: Option<f64>,
    pub pairs: Vec<PairGeometry>,
}

impl Instrument {
    /// Pair ids in file order (they name the columns `<id>_a`, `<id>_b`).
    pub fn pair_ids(&self) -> Vec<String> {
        self.pairs.iter().map(|p| p.id.clone()).collect()
    }
}

/// Reads and validates an instrument file: layout, unique ids usable as column names, unit axes,
/// non-zero finite baselines. Observability is checked separately ([`check_observability`]),
/// because what is needed depends on the recipe.
pub fn read_instrument(path: &Path) -> Result<Instrument, Vec<Problem>> {
    let f: InstrumentFile = tomlfile::read(path).map_err(|p| vec![p])?;
    checked(f, path)
}

/// An instrument from its TOML text (layout `instrument/1`), checked as [`read_instrument`]
/// checks a file; `name` names it in messages.
pub fn parse_instrument(name: &Path, text: &str) -> Result<Instrument, Vec<Problem>> {
    let f: InstrumentFile = tomlfile::parse(name, text).map_err(|p| vec![p])?;
    checked(f, name)
}

/// The instrument file's entries checked (`path` names it in messages).
fn checked(f: InstrumentFile, path: &Path) -> Result<Instrument, Vec<Problem>> {
    let loc = Location::file(path);
    let mut problems = Vec::new();
    if f.layout != LAYOUT {
        problems.push(Problem::error(
            loc.clone().with_key("layout"),
            format!("layout is `{}`, expected `{LAYOUT}`", f.layout),
        ));
    }
    if let Some(r) = f.sample_rate_hz
        && !(r.is_finite() && r > 0.0)
    {
        problems.push(Problem::error(
            loc.clone().with_key("sample_rate_hz"),
            format!("sample rate {r} Hz; expected a positive number"),
        ));
    }
    if f.pair.is_empty() {
        problems.push(Problem::error(
            loc.clone().with_key("pair"),
            "no [[pair]] entries; an instrument needs at least one pair",
        ));
    }
    let mut seen = BTreeSet::new();
    let mut pairs = Vec::new();
    for (i, p) in f.pair.iter().enumerate() {
        let key = |k: &str| loc.clone().with_key(format!("pair[{i}].{k}"));
        if !seen.insert(p.id.clone()) {
            problems.push(
                Problem::error(key("id"), format!("pair id `{}` is used twice", p.id))
                    .with_hint("every pair needs its own id"),
            );
        }
        if p.id.is_empty()
            || !p.id.chars().all(|c| c.is_ascii_alphanumeric() || c == '-')
            || p.id == "ac"
        {
            problems.push(
                Problem::error(key("id"), format!("pair id `{}` cannot name columns", p.id))
                    .with_hint("use letters, digits and '-' (the columns are <id>_a and <id>_b); `ac` is reserved"),
            );
        }
        let all_finite = p
            .center_m
            .iter()
            .chain(&p.baseline_m)
            .chain(&p.axis)
            .all(|v| v.is_finite());
        if !all_finite {
            problems.push(Problem::error(
                key("axis"),
                "geometry holds a non-finite number",
            ));
            continue;
        }
        let len = norm(&p.axis);
        if (len - 1.0).abs() > AXIS_TOLERANCE {
            problems.push(
                Problem::error(
                    key("axis"),
                    format!("sensing axis has length {len:.9}, expected a unit vector"),
                )
                .with_hint(format!(
                    "divide it by its length (tolerance {AXIS_TOLERANCE})"
                )),
            );
        }
        let b = norm(&p.baseline_m);
        if b <= 0.0 {
            problems.push(Problem::error(
                key("baseline_m"),
                "baseline is zero; a pair needs two separated accelerometers",
            ));
        } else if b > 10.0 {
            problems.push(Problem::error(
                key("baseline_m"),
                format!("baseline of {b} m; expected decimetres (value in metres?)"),
            ));
        }
        pairs.push(PairGeometry {
            id: p.id.clone(),
            center: p.center_m,
            baseline: p.baseline_m,
            axis: p.axis,
        });
    }
    if !problems.is_empty() {
        return Err(problems);
    }
    Ok(Instrument {
        path: path.to_path_buf(),
        name: f.name,
        sample_rate_hz: f.sample_rate_hz,
        pairs,
    })
}

/// What the solve is asked to deliver.
#[derive(Clone, Debug, PartialEq)]
pub struct Needs {
    /// Tensor components wanted, by name (`Gxx` … `Gzz`).
    pub components: Vec<String>,
    /// Source of angular acceleration; `None` = from the pairs where they see it, else the gyros.
    pub alpha: Option<AlphaSource>,
    pub trace_constraint: bool,
}

/// Checks that the pair set observes what is needed. Returns the observability found (for the
/// report) and an error naming every missing component and the blind combinations.
pub fn check_observability(
    inst: &Instrument,
    needs: &Needs,
    key_prefix: &str,
) -> (Observability, Vec<Problem>) {
    let alpha = match needs.alpha {
        Some(a) => a,
        None => {
            let with_pairs = observability(&inst.pairs, AlphaSource::Pairs, needs.trace_constraint);
            if ["αx", "αy", "αz"].iter().all(|a| with_pairs.sees(a)) {
                AlphaSource::Pairs
            } else {
                AlphaSource::Gyros
            }
        }
    };
    let obs = observability(&inst.pairs, alpha, needs.trace_constraint);
    let mut problems = Vec::new();
    let missing: Vec<&String> = needs.components.iter().filter(|c| !obs.sees(c)).collect();
    if !missing.is_empty() {
        let names: Vec<&str> = missing.iter().map(|s| s.as_str()).collect();
        let mut p = Problem::error(
            Location::file(&inst.path).with_key("pair"),
            format!(
                "the pair set cannot observe {} (angular acceleration from {}; blind combinations: {})",
                names.join(", "),
                match alpha {
                    AlphaSource::Pairs => "the pairs",
                    AlphaSource::Gyros => "the gyros",
                },
                obs.blind_combinations.join("; ")
            ),
        );
        let with_trace = observability(&inst.pairs, alpha, true);
        if !needs.trace_constraint && missing.iter().all(|c| with_trace.sees(c)) {
            p = p.with_hint(format!(
                "set `{key_prefix}trace_constraint = true` to get them from Laplace's equation"
            ));
        } else {
            p = p.with_hint(format!(
                "add pairs that see them, or drop them from `{key_prefix}components`"
            ));
        }
        problems.push(p);
    }
    if needs.alpha == Some(AlphaSource::Pairs) {
        let blind: Vec<&str> = ["αx", "αy", "αz"]
            .into_iter()
            .filter(|a| !obs.sees(a))
            .collect();
        if !blind.is_empty() {
            problems.push(
                Problem::error(
                    Location::file(&inst.path).with_key("pair"),
                    format!("angular acceleration from the pairs was asked for, but the pairs cannot see {}", blind.join(", ")),
                )
                .with_hint(format!("set `{key_prefix}angular_acceleration = \"gyros\"`")),
            );
        }
    }
    (obs, problems)
}
