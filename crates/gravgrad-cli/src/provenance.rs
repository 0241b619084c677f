//! `provenance.json`: what a run was made from and how — the tool version, the recipe as run, the
//! SHA-256 of every input file, each flight's calibration and the stage timings. The only product
//! that holds a time stamp (the others are byte-identical for the same inputs).

use crate::pipeline::FlightResult;
use crate::tables::write_atomic;
use gravgrad_calibrate::file::PairEntry;
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
    recipe_path: &'a Path,
    recipe_text: String,
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
    Ok((
        total,
        h.finalize().iter().map(|b| format!("{b:02x}")).collect(),
    ))
}

/// Writes `<dir>/provenance.json`.
pub fn write(
    dir: &Path,
    recipe_path: &Path,
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
        recipe_path,
        recipe_text: std::fs::read_to_string(recipe_path)
            .map_err(|e| format!("{}: {e}", recipe_path.display()))?,
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
