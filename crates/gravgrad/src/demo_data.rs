//! The demo survey carried inside the binary, so that `gravgrad demo` runs wherever the binary was
//! installed: the demo's scenario file is built in, and the simulator (the code `gravgrad simulate`
//! runs) regenerates the survey from it bit for bit — raw logs, instrument, DEM, recipes, truth —
//! into a folder beside the demo's products. It does so once: the folder gets a checksum file
//! (`checksums.sha256`, the layout `sha256sum -c` reads), and a later demo reuses the folder when
//! every file still has its checksum and the scenario is still the one built in, and regenerates
//! it otherwise.

use crate::simulate::simulate_to_folder;
use gravgrad_survey::RunError;
use sha2::{Digest, Sha256};
use std::path::{Path, PathBuf};

/// The demo's scenario (`data/demo/scenario.toml` of the source tree, layout `scenario/1`).
pub const SCENARIO: &str = include_str!("../../../data/demo/scenario.toml");

/// The checksum file of a regenerated survey: one line `<SHA-256 hex>  <path>` per file, paths
/// relative to the folder with `/` between parts.
pub const CHECKSUMS: &str = "checksums.sha256";

/// What [`prepare`] did with the folder.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Prepared {
    /// The folder held the survey of the built-in scenario, every file unchanged.
    Reused,
    /// The survey was simulated into the folder.
    Regenerated,
}

/// Makes `dir` hold the demo survey of the built-in scenario: reuses it when its checksums still
/// hold, else simulates the survey into it.
pub fn prepare(dir: &Path) -> Result<Prepared, RunError> {
    let why = match verify(dir) {
        Ok(()) => return Ok(Prepared::Reused),
        Err(why) => why,
    };
    if dir.exists() && !dir.is_dir() {
        return Err(RunError::Refused(format!(
            "{}: the demo survey's folder is a file; expected a folder or nothing (choose \
             another --out, or give a survey with --data DIR)",
            dir.display()
        )));
    }
    tracing::info!(
        "regenerating the demo survey from the scenario built into gravgrad ({why}) into {}; \
         later demos with the same --out reuse it",
        dir.display()
    );
    // Whatever happens below, the folder is not taken as complete until the checksums are written
    // again at the end.
    let sums = dir.join(CHECKSUMS);
    if let Err(e) = std::fs::remove_file(&sums)
        && e.kind() != std::io::ErrorKind::NotFound
    {
        return Err(RunError::Failed(format!(
            "{}: cannot remove the old checksums: {e}",
            sums.display()
        )));
    }
    std::fs::create_dir_all(dir)
        .map_err(|e| RunError::Failed(format!("{}: cannot make the folder: {e}", dir.display())))?;
    let scenario = dir.join("scenario.toml");
    std::fs::write(&scenario, SCENARIO).map_err(|e| {
        RunError::Failed(format!(
            "{}: cannot write the scenario: {e}",
            scenario.display()
        ))
    })?;
    let s = simulate_to_folder(&scenario, dir)?;
    tracing::info!(
        "{} samples, {} lines; written to {}",
        s.samples,
        s.lines,
        dir.display()
    );
    write_checksums(dir).map_err(RunError::Failed)?;
    Ok(Prepared::Regenerated)
}

/// `Ok` when `dir` holds the survey of the built-in scenario unchanged; else why not, for the log.
pub fn verify(dir: &Path) -> Result<(), String> {
    let sums = dir.join(CHECKSUMS);
    let text = match std::fs::read_to_string(&sums) {
        Ok(t) => t,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
            return Err("not generated there yet".into());
        }
        Err(e) => return Err(format!("{CHECKSUMS} unreadable: {e}")),
    };
    match std::fs::read_to_string(dir.join("scenario.toml")) {
        Ok(s) if s == SCENARIO => {}
        Ok(_) => return Err("scenario.toml differs from the built-in scenario".into()),
        Err(_) => return Err("scenario.toml is missing".into()),
    }
    let mut listed = Vec::new();
    for (k, line) in text.lines().enumerate() {
        let Some((sum, path)) = line.split_once("  ") else {
            return Err(format!(
                "{CHECKSUMS}, line {}: expected `<sha256>  <path>`",
                k + 1
            ));
        };
        let file = dir.join(path);
        match std::fs::read(&file) {
            Ok(bytes) if hex(&Sha256::digest(&bytes)) == sum => listed.push(path),
            Ok(_) => return Err(format!("{path} changed since it was written")),
            Err(_) => return Err(format!("{path} is missing")),
        }
    }
    for needed in ["scenario.toml", "recipe.toml", "truth/lines.parquet"] {
        if !listed.contains(&needed) {
            return Err(format!("{CHECKSUMS} does not list {needed}"));
        }
    }
    Ok(())
}

/// Writes `dir/checksums.sha256` over every regular file below `dir` (hidden files and the
/// checksum file itself left out), in path order.
fn write_checksums(dir: &Path) -> Result<(), String> {
    let mut files = Vec::new();
    collect_files(dir, dir, &mut files)?;
    files.sort();
    let mut text = String::new();
    for rel in &files {
        let path = dir.join(rel);
        let bytes = std::fs::read(&path).map_err(|e| format!("{}: {e}", path.display()))?;
        text.push_str(&format!("{}  {rel}\n", hex(&Sha256::digest(&bytes))));
    }
    let sums = dir.join(CHECKSUMS);
    let tmp = dir.join(format!(".{CHECKSUMS}.partial"));
    std::fs::write(&tmp, text)
        .and_then(|()| std::fs::rename(&tmp, &sums))
        .map_err(|e| format!("{}: cannot write the checksums: {e}", sums.display()))
}

/// Every regular file below `dir`, as paths relative to `root` joined with `/`.
fn collect_files(root: &Path, dir: &Path, out: &mut Vec<String>) -> Result<(), String> {
    let entries = std::fs::read_dir(dir).map_err(|e| format!("{}: {e}", dir.display()))?;
    for entry in entries {
        let entry = entry.map_err(|e| format!("{}: {e}", dir.display()))?;
        let name = entry.file_name().to_string_lossy().into_owned();
        if name.starts_with('.') || (dir == root && name == CHECKSUMS) {
            continue;
        }
        let path: PathBuf = entry.path();
        let kind = entry
            .file_type()
            .map_err(|e| format!("{}: {e}", path.display()))?;
        if kind.is_dir() {
            collect_files(root, &path, out)?;
        } else if kind.is_file()
            && let Ok(rel) = path.strip_prefix(root)
        {
            let parts: Vec<String> = rel
                .components()
                .map(|c| c.as_os_str().to_string_lossy().into_owned())
                .collect();
            out.push(parts.join("/"));
        }
    }
    Ok(())
}

/// Lower-case hex of `bytes`.
fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}
