//! `provenance.json`: what a run was made from and how — the tool version, the recipe as run, the
//! SHA-256 of every input file, each flight's calibration and the stage timings. The only product
//! that holds a time stamp (the others are byte-identical for the same inputs).
//!
//! The hashes are of the bytes the run read: every input is hashed once before the run reads it
//! ([`Inputs::hash`]) and again after the products are built, before they are committed
//! ([`Inputs::verify`]); an input that changed in between stops the run with nothing committed.
//! Paths are recorded relative to the recipe's folder (from canonical paths, `..` steps for inputs
//! outside it), so the records do not depend on how the recipe's path was typed.

use crate::tables::write_atomic;
use gravgrad_calibrate::file::PairEntry;
use gravgrad_ingest::recipe::{CalibrationMode, Recipe};
use gravgrad_survey::pipeline::FlightResult;
use serde::Serialize;
use sha2::{Digest, Sha256};
use std::io::{Read, Write};
use std::path::{Path, PathBuf};

/// An input file with its size and SHA-256 (hex).
#[derive(Clone, Serialize)]
pub struct Hashed {
    pub path: PathBuf,
    pub bytes: u64,
    pub sha256: String,
}

/// One input file of a run.
#[derive(Clone, Debug)]
pub struct InputFile {
    /// What it is: `recipe`, `instrument`, `navigation`, `dem`, `calibration`, `plan`, `flight`.
    pub role: &'static str,
    /// The path the run opens it by.
    pub path: PathBuf,
    /// The path recorded in the products: relative to the recipe's folder.
    pub recorded: PathBuf,
    /// Size and SHA-256 before the run read it (`None`: it could not be read; the run's own
    /// reading reports why).
    pub before: Option<(u64, String)>,
}

/// Every input file of a run, hashed before the run reads it.
#[derive(Debug)]
pub struct Inputs {
    /// The recipe's text as hashed; the products record this text.
    pub recipe_text: String,
    pub files: Vec<InputFile>,
}

/// `path` relative to the folder `base`, both made canonical; `..` steps for a path outside it.
/// Paths that cannot be made canonical (missing) are taken as they are.
pub fn relative_to(base: &Path, path: &Path) -> PathBuf {
    let base = base.canonicalize().unwrap_or_else(|_| base.to_path_buf());
    let path = path.canonicalize().unwrap_or_else(|_| path.to_path_buf());
    let b: Vec<_> = base.components().collect();
    let p: Vec<_> = path.components().collect();
    let common = b.iter().zip(&p).take_while(|(x, y)| x == y).count();
    if common == 0 {
        return path;
    }
    let mut out = PathBuf::new();
    for _ in common..b.len() {
        out.push("..");
    }
    for c in &p[common..] {
        out.push(c);
    }
    out
}

impl Inputs {
    /// Lists the input files of `recipe` (read from `recipe_path`): the recipe, instrument,
    /// navigation table, DEM, calibration file (mode `file`), plan of lines and flights; only the
    /// recipe is hashed (`recipe_text`: its bytes as read), the others by [`Inputs::hash`]. A
    /// flight list the recipe cannot expand gives no flights here (the run's check reports it).
    pub fn list(recipe_path: &Path, recipe_text: String, recipe: &Recipe) -> Self {
        let mut listed: Vec<(&'static str, PathBuf)> =
            vec![("instrument", recipe.resolve(&recipe.instrument.path))];
        if let Some(n) = &recipe.input.navigation {
            listed.push(("navigation", recipe.resolve(n)));
        }
        if let Some(t) = &recipe.terrain {
            listed.push(("dem", recipe.resolve(&t.dem)));
        }
        if recipe.calibration.mode == CalibrationMode::File {
            let f = recipe
                .calibration
                .file
                .as_deref()
                .unwrap_or("calibration.toml");
            listed.push(("calibration", recipe.resolve(f)));
        }
        if let Some(plan) = &recipe.qc.plan {
            listed.push(("plan", recipe.resolve(plan)));
        }
        let mut flights = recipe.flight_files(recipe_path).unwrap_or_default();
        flights.dedup();
        listed.extend(flights.into_iter().map(|f| ("flight", f)));
        let base = recipe_folder(recipe_path);
        let mut files = vec![InputFile {
            role: "recipe",
            path: recipe_path.to_path_buf(),
            recorded: relative_to(&base, recipe_path),
            before: Some((
                recipe_text.len() as u64,
                hex(&Sha256::digest(recipe_text.as_bytes())),
            )),
        }];
        files.extend(listed.into_iter().map(|(role, path)| InputFile {
            role,
            recorded: relative_to(&base, &path),
            before: None,
            path,
        }));
        Self { recipe_text, files }
    }

    /// Hashes every input but the recipe (hashed from its text), before the run reads it.
    pub fn hash(&mut self) {
        for f in self.files.iter_mut().filter(|f| f.role != "recipe") {
            f.before = sha256(&f.path).ok();
        }
    }

    /// The SHA-256 taken before the run of the input at `path` (as the run opens it).
    pub fn sha256_of(&self, path: &Path) -> Option<&str> {
        self.files
            .iter()
            .find(|f| f.path == path)
            .and_then(|f| f.before.as_ref())
            .map(|(_, h)| h.as_str())
    }

    /// Hashes every input again and returns the records of the products, or — when any input
    /// changed, appeared or vanished since the run read it — the error naming each such file.
    pub fn verify(&self) -> Result<Vec<Hashed>, String> {
        let mut out = Vec::with_capacity(self.files.len());
        let mut changed = Vec::new();
        for f in &self.files {
            let now = sha256(&f.path).ok();
            match (&f.before, &now) {
                (Some(b), Some(n)) if b == n => out.push(Hashed {
                    path: f.recorded.clone(),
                    bytes: b.0,
                    sha256: b.1.clone(),
                }),
                _ => changed.push(format!(
                    "{}: the {} changed while the run read it (SHA-256 {} before, {} now)",
                    f.path.display(),
                    f.role,
                    f.before.as_ref().map_or("unreadable", |b| b.1.as_str()),
                    now.as_ref().map_or("unreadable", |n| n.1.as_str()),
                )),
            }
        }
        if changed.is_empty() {
            Ok(out)
        } else {
            Err(format!(
                "{}; nothing was written to the output folder: run again once the inputs are settled",
                changed.join("; ")
            ))
        }
    }
}

/// The folder of the recipe at `recipe_path`.
fn recipe_folder(recipe_path: &Path) -> PathBuf {
    match recipe_path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

/// The size and SHA-256 of every file.
pub fn hashes(paths: &[PathBuf]) -> Result<Vec<Hashed>, String> {
    paths
        .iter()
        .map(|p| {
            let (bytes, sha256) = sha256(p)?;
            Ok(Hashed {
                path: p.clone(),
                bytes,
                sha256,
            })
        })
        .collect()
}

#[derive(Serialize)]
struct Flight<'a> {
    name: &'a str,
    samples: usize,
    angular_acceleration_from: &'static str,
    calibration: Vec<PairEntry>,
    timings_s: Vec<(&'static str, f64)>,
}

#[derive(Serialize)]
struct Provenance<'a> {
    tool: &'static str,
    version: &'static str,
    written_utc_unix_s: u64,
    /// The recipe, relative to its own folder (as `inputs` records it).
    recipe_path: &'a Path,
    /// The recipe's folder, canonical (where the relative paths start).
    recipe_folder: PathBuf,
    recipe_text: &'a str,
    inputs: Vec<Hashed>,
    flights: Vec<Flight<'a>>,
    map_frame: String,
}

/// SHA-256 of a file, hex.
fn sha256(path: &Path) -> Result<(u64, String), String> {
    let mut f = std::fs::File::open(path).map_err(|e| format!("{}: {e}", path.display()))?;
    let mut h = Sha256::new();
    let mut buf = vec![0u8; 1 << 20];
    let mut total = 0u64;
    loop {
        let k = f
            .read(&mut buf)
            .map_err(|e| format!("{}: {e}", path.display()))?;
        if k == 0 {
            break;
        }
        total += k as u64;
        h.update(&buf[..k]);
    }
    Ok((total, hex(&h.finalize())))
}

/// Writes `<dir>/provenance.json`. `inputs`: as [`Inputs::verify`] gave them, the recipe first.
pub fn write(
    dir: &Path,
    recipe_path: &Path,
    recipe_text: &str,
    inputs: &[Hashed],
    names: &[String],
    results: &[FlightResult],
    epsg: u32,
) -> Result<(), String> {
    let flights = names
        .iter()
        .zip(results)
        .map(|(n, r)| Flight {
            name: n,
            samples: r.time.len(),
            angular_acceleration_from: match r.alpha_source {
                gravgrad_core::pairs::AlphaSource::Pairs => "pairs",
                gravgrad_core::pairs::AlphaSource::Gyros => "gyros",
            },
            calibration: r
                .calibration
                .iter()
                .map(|(id, c)| PairEntry::from_calibration(id, c))
                .collect(),
            timings_s: r.timings.clone(),
        })
        .collect();
    let p = Provenance {
        tool: "gravgrad",
        version: env!("CARGO_PKG_VERSION"),
        written_utc_unix_s: std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map_or(0, |d| d.as_secs()),
        recipe_path: inputs.first().map_or(recipe_path, |h| h.path.as_path()),
        recipe_folder: recipe_folder(recipe_path)
            .canonicalize()
            .unwrap_or_else(|_| recipe_folder(recipe_path)),
        recipe_text,
        inputs: inputs.to_vec(),
        flights,
        map_frame: format!("EPSG:{epsg}"),
    };
    let text = serde_json::to_string_pretty(&p).map_err(|e| e.to_string())?;
    write_atomic(&dir.join("provenance.json"), |f| {
        f.write_all(text.as_bytes()).map_err(|e| e.to_string())
    })
    .map_err(|e| e.to_string())
}
