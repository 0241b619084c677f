//! A run's products are written into a staging folder inside the output folder and moved into place
//! only when every one of them is complete, `provenance.json` last. A run stopped at any point, even
//! by SIGKILL, therefore leaves no half-written product in the output folder; and `provenance.json`
//! present means every product beside it comes from one complete run (what `gravgrad batch` relies
//! on to skip finished runs).
//!
//! The staging folder is `<out>/.gravgrad-staging-<pid>`. A later run into the same folder removes
//! the staging folders of processes that no longer exist.

use std::path::{Path, PathBuf};

/// Prefix of a staging folder's name inside the output folder.
pub const PREFIX: &str = ".gravgrad-staging-";
/// The file moved into place last: its presence marks a complete run.
pub const MARKER: &str = "provenance.json";

/// The staging folder of one run.
pub struct Staging {
    out: PathBuf,
    dir: PathBuf,
    committed: bool,
}

fn io_err(path: &Path, what: &str, e: std::io::Error) -> String {
    format!("{}: cannot {what}: {e}", path.display())
}

/// Whether the process that made a staging folder is gone. On systems without `/proc` every other
/// process's folder counts as stale.
fn is_stale(name: &str) -> bool {
    let Some(pid) = name
        .strip_prefix(PREFIX)
        .and_then(|p| p.parse::<u32>().ok())
    else {
        return false;
    };
    if pid == std::process::id() {
        return false;
    }
    let proc_root = Path::new("/proc");
    !proc_root.is_dir() || !proc_root.join(pid.to_string()).exists()
}

/// Every file under `dir`, as paths relative to it, sorted.
fn files_under(dir: &Path) -> Result<Vec<PathBuf>, String> {
    let mut out = Vec::new();
    let mut stack = vec![PathBuf::new()];
    while let Some(rel) = stack.pop() {
        let here = dir.join(&rel);
        let entries = std::fs::read_dir(&here).map_err(|e| io_err(&here, "list", e))?;
        for entry in entries {
            let entry = entry.map_err(|e| io_err(&here, "list", e))?;
            let kind = entry
                .file_type()
                .map_err(|e| io_err(&entry.path(), "inspect", e))?;
            let rel = rel.join(entry.file_name());
            if kind.is_dir() {
                stack.push(rel);
            } else {
                out.push(rel);
            }
        }
    }
    out.sort();
    Ok(out)
}

impl Staging {
    /// Creates `out` if needed, removes stale staging folders in it, and opens this run's.
    pub fn begin(out: &Path) -> Result<Self, String> {
        std::fs::create_dir_all(out).map_err(|e| io_err(out, "create the output folder", e))?;
        let entries = std::fs::read_dir(out).map_err(|e| io_err(out, "list", e))?;
        for entry in entries.flatten() {
            let name = entry.file_name().to_string_lossy().into_owned();
            if is_stale(&name) {
                let p = entry.path();
                std::fs::remove_dir_all(&p)
                    .map_err(|e| io_err(&p, "remove a stale staging folder", e))?;
            }
        }
        let dir = out.join(format!("{PREFIX}{}", std::process::id()));
        if dir.exists() {
            std::fs::remove_dir_all(&dir).map_err(|e| io_err(&dir, "clear", e))?;
        }
        std::fs::create_dir_all(&dir).map_err(|e| io_err(&dir, "create", e))?;
        Ok(Self {
            out: out.to_path_buf(),
            dir,
            committed: false,
        })
    }

    /// Where the products are written until the commit.
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    /// Moves every staged file into the output folder (same relative path), the marker last after
    /// removing the previous one first, and removes the staging folder. Returns the final paths.
    pub fn commit(mut self) -> Result<Vec<PathBuf>, String> {
        let old_marker = self.out.join(MARKER);
        if old_marker.exists() {
            std::fs::remove_file(&old_marker)
                .map_err(|e| io_err(&old_marker, "remove the previous run's marker", e))?;
        }
        let mut files = files_under(&self.dir)?;
        // The marker last: sort puts it wherever its name falls.
        files.sort_by_key(|f| f == Path::new(MARKER));
        let mut moved = Vec::with_capacity(files.len());
        for rel in files {
            let from = self.dir.join(&rel);
            let to = self.out.join(&rel);
            if let Some(parent) = to.parent() {
                std::fs::create_dir_all(parent).map_err(|e| io_err(parent, "create", e))?;
            }
            std::fs::rename(&from, &to).map_err(|e| io_err(&to, "move into place", e))?;
            moved.push(to);
        }
        std::fs::remove_dir_all(&self.dir).map_err(|e| io_err(&self.dir, "remove", e))?;
        self.committed = true;
        Ok(moved)
    }
}

impl Drop for Staging {
    /// A run that returns early (an error) leaves nothing behind; a killed one is cleaned by the next.
    fn drop(&mut self) {
        if !self.committed {
            let _ = std::fs::remove_dir_all(&self.dir);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn temp(name: &str) -> PathBuf {
        let d =
            std::env::temp_dir().join(format!("gravgrad-staging-{name}-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        d
    }

    #[test]
    fn commit_moves_everything_marker_last_and_cleans_up() {
        let out = temp("commit");
        std::fs::create_dir_all(&out).unwrap();
        std::fs::write(out.join(MARKER), "old").unwrap();
        std::fs::write(out.join("kept.txt"), "user file").unwrap();
        let s = Staging::begin(&out).unwrap();
        std::fs::create_dir_all(s.dir().join("maps")).unwrap();
        std::fs::write(s.dir().join("maps/gzz.png"), "png").unwrap();
        std::fs::write(s.dir().join(MARKER), "new").unwrap();
        std::fs::write(s.dir().join("a.parquet"), "lines").unwrap();
        let moved = s.commit().unwrap();
        assert_eq!(moved.last().unwrap(), &out.join(MARKER));
        assert_eq!(moved.len(), 3);
        assert_eq!(std::fs::read_to_string(out.join(MARKER)).unwrap(), "new");
        assert_eq!(
            std::fs::read_to_string(out.join("maps/gzz.png")).unwrap(),
            "png"
        );
        assert_eq!(
            std::fs::read_to_string(out.join("kept.txt")).unwrap(),
            "user file"
        );
        let left: Vec<_> = std::fs::read_dir(&out)
            .unwrap()
            .flatten()
            .filter(|e| e.file_name().to_string_lossy().starts_with(PREFIX))
            .collect();
        assert!(left.is_empty());
        std::fs::remove_dir_all(&out).unwrap();
    }

    #[test]
    fn dropped_staging_leaves_the_folder_as_it_was_and_stale_ones_are_removed() {
        let out = temp("drop");
        // A staging folder of a process that cannot exist (pid above the kernel's maximum).
        let stale = out.join(format!("{PREFIX}4294967295"));
        std::fs::create_dir_all(&stale).unwrap();
        std::fs::write(stale.join("lines.parquet"), "half").unwrap();
        {
            let s = Staging::begin(&out).unwrap();
            assert!(!stale.exists(), "stale staging folder kept");
            std::fs::write(s.dir().join("lines.parquet"), "x").unwrap();
        }
        assert_eq!(std::fs::read_dir(&out).unwrap().count(), 0);
        std::fs::remove_dir_all(&out).unwrap();
    }
}
