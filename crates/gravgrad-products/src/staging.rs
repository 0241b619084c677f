//! The commit of a run's products: the output folder is always wholly one run.
//!
//! A run builds its whole output folder — every product, the stored flights it reused and the batch
//! logs (`logs/`) — as a new folder beside the output folder, `<parent>/.<name>.gravgrad-next-<pid>`,
//! and then switches the two in ONE rename: `renameat2(RENAME_EXCHANGE)` on Linux (`renamex_np(RENAME_SWAP)` on
//! macOS) swaps the two folders atomically, after which the previous generation sits under the
//! sibling's name and is removed. Into a folder that does not exist yet the switch is a plain
//! rename. The output folder therefore holds, after a SIGKILL at any point, either every file of
//! the previous run and nothing else, or every file of the new run and nothing else; no product of
//! an earlier run survives beside a new `provenance.json`, and `provenance.json` present still
//! means the folder is one complete run (what `gravgrad batch` relies on).
//!
//! Where the file system cannot exchange two folders (some network file systems), the switch falls
//! back to two renames — the previous folder aside to `.<name>.gravgrad-old-<pid>`, the new one into
//! place. A kill between the two leaves the output folder missing for that moment; the next run
//! into it moves the previous generation back before anything else.
//!
//! A later run removes the siblings of processes that no longer exist. The test hook
//! `GRAVGRAD_COMMIT_PAUSE=<step>` makes a run stop at a named step — saying so on stderr — until a
//! line arrives on its stdin (or it is killed): `built` (every product written beside the folder
//! but the archive and provenance, inputs not yet hashed again), `staged` (every product
//! written), `carried` (stored flights linked in), `aside` (two-rename fallback only: the previous
//! folder moved aside) and `switched` (the new folder in place, the previous one not yet removed).

use std::path::{Path, PathBuf};

/// The file written last into a generation: its presence marks a complete run.
pub const MARKER: &str = "provenance.json";
/// The folder of stored per-flight results (`run --flight`), carried into the next generation for
/// the flights the run reused.
pub const STORE: &str = "flights";
/// The folder of `gravgrad batch`'s unit logs, carried whole into the next generation (the merge
/// run's own log is still being written while the run commits).
pub const LOGS: &str = "logs";
/// Every entry a run, `run --flight` or `gravgrad batch` writes into the output folder. An output
/// folder holding anything else is refused before any work (a run replaces the folder whole).
pub const ENTRIES: [&str; 11] = [
    "lines.parquet",
    "lines.csv",
    "grids.nc",
    "grids",
    "maps",
    "qc",
    "calibration",
    "survey.h5",
    MARKER,
    STORE,
    LOGS,
];
/// Prefix of the staging folders earlier versions kept inside the output folder (dropped with the
/// generation that holds them).
pub const LEGACY_PREFIX: &str = ".gravgrad-staging-";

/// Prefix of the folder `gravgrad qc` builds its `qc/` in, and of a folder moved aside while one is
/// replaced ([`replace_folder`]): left by a stopped process, they are ours, not the user's.
pub const QC_NEXT_PREFIX: &str = ".gravgrad-qc-next-";
pub const ASIDE_PREFIX: &str = ".gravgrad-old-";

/// Environment variable of the test hook that pauses a run at a named commit step.
pub const PAUSE_ENV: &str = "GRAVGRAD_COMMIT_PAUSE";

/// The next generation of one output folder.
pub struct Staging {
    target: PathBuf,
    next: PathBuf,
    committed: bool,
}

fn io_err(path: &Path, what: &str, e: std::io::Error) -> String {
    format!("{}: cannot {what}: {e}", path.display())
}

/// The sibling of `target` of kind `kind` (`next`, `old`) for process `pid`.
fn sibling(target: &Path, kind: &str, pid: u32) -> PathBuf {
    let name = target
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    target
        .parent()
        .unwrap_or(Path::new("/"))
        .join(format!(".{name}.gravgrad-{kind}-{pid}"))
}

/// The pid of a sibling of `target` of kind `kind`, when `entry` is one.
fn sibling_pid(target: &Path, kind: &str, entry: &str) -> Option<u32> {
    let name = target.file_name()?.to_string_lossy().into_owned();
    entry
        .strip_prefix(&format!(".{name}.gravgrad-{kind}-"))?
        .parse()
        .ok()
}

/// Whether process `pid` is gone. On systems without `/proc` every other process counts as gone.
fn is_gone(pid: u32) -> bool {
    if pid == std::process::id() {
        return false;
    }
    let proc_root = Path::new("/proc");
    !proc_root.is_dir() || !proc_root.join(pid.to_string()).exists()
}

/// Stops at commit step `step` when the test hook names it: says so on stderr and waits for a
/// line on stdin (or the end of stdin, or a kill) before it goes on.
pub fn pause_at(step: &str) {
    if std::env::var(PAUSE_ENV).is_ok_and(|s| s == step) {
        eprintln!("gravgrad: paused at commit step `{step}`");
        let mut line = String::new();
        let _ = std::io::stdin().read_line(&mut line);
    }
}

/// Makes the renames in `dir` durable (best effort: not every file system syncs a folder).
fn sync_dir(dir: &Path) {
    if let Ok(f) = std::fs::File::open(dir) {
        let _ = f.sync_all();
    }
}

/// Swaps the folders `a` and `b` in one step. `Ok(false)`: the file system cannot.
#[cfg(any(target_os = "linux", target_os = "macos"))]
fn exchange(a: &Path, b: &Path) -> Result<bool, std::io::Error> {
    use rustix::fs::{CWD, RenameFlags, renameat_with};
    use rustix::io::Errno;
    match renameat_with(CWD, a, CWD, b, RenameFlags::EXCHANGE) {
        Ok(()) => Ok(true),
        Err(e) if e == Errno::INVAL || e == Errno::NOSYS || e == Errno::NOTSUP => Ok(false),
        Err(e) => Err(e.into()),
    }
}

#[cfg(not(any(target_os = "linux", target_os = "macos")))]
fn exchange(_a: &Path, _b: &Path) -> Result<bool, std::io::Error> {
    Ok(false)
}

/// Replaces the folder `target` by the complete folder `new` (a sibling): one exchange where the
/// file system can, the old one then removed; where `target` does not exist yet, one rename. Where
/// the file system cannot exchange, the old folder is moved aside first (a kill between the two
/// renames leaves `target` missing, never half-written).
pub fn replace_folder(new: &Path, target: &Path) -> Result<(), String> {
    if !target.exists() {
        return std::fs::rename(new, target).map_err(|e| io_err(target, "move into place", e));
    }
    if exchange(new, target).map_err(|e| io_err(target, "swap", e))? {
        // `new` now holds the old folder.
        return std::fs::remove_dir_all(new).map_err(|e| io_err(new, "remove", e));
    }
    let aside = target.with_file_name(format!("{ASIDE_PREFIX}{}", std::process::id()));
    std::fs::rename(target, &aside).map_err(|e| io_err(target, "move aside", e))?;
    std::fs::rename(new, target).map_err(|e| io_err(target, "move into place", e))?;
    std::fs::remove_dir_all(&aside).map_err(|e| io_err(&aside, "remove", e))
}

impl Staging {
    /// Opens the next generation of the output folder `target` (an absolute path whose last part
    /// is not a symbolic link): creates its parent if needed, puts back a previous generation a
    /// killed two-rename switch left aside, removes the siblings of processes that are gone, and
    /// creates this run's.
    pub fn begin(target: &Path) -> Result<Self, String> {
        let parent = target
            .parent()
            .ok_or_else(|| format!("{}: the output folder has no parent", target.display()))?;
        std::fs::create_dir_all(parent)
            .map_err(|e| io_err(parent, "create the output folder's parent", e))?;
        let entries = std::fs::read_dir(parent).map_err(|e| io_err(parent, "list", e))?;
        let mut names: Vec<String> = entries
            .flatten()
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .collect();
        names.sort();
        for name in &names {
            let Some(pid) = sibling_pid(target, "old", name) else {
                continue;
            };
            if !is_gone(pid) {
                continue;
            }
            let old = parent.join(name);
            if std::fs::symlink_metadata(target).is_err() {
                std::fs::rename(&old, target)
                    .map_err(|e| io_err(target, "put back the previous run's products", e))?;
            } else {
                std::fs::remove_dir_all(&old)
                    .map_err(|e| io_err(&old, "remove a killed run's folder", e))?;
            }
        }
        for name in &names {
            if let Some(pid) = sibling_pid(target, "next", name)
                && is_gone(pid)
            {
                let p = parent.join(name);
                std::fs::remove_dir_all(&p)
                    .map_err(|e| io_err(&p, "remove a killed run's folder", e))?;
            }
        }
        let next = sibling(target, "next", std::process::id());
        if next.exists() {
            std::fs::remove_dir_all(&next).map_err(|e| io_err(&next, "clear", e))?;
        }
        std::fs::create_dir(&next).map_err(|e| io_err(&next, "create", e))?;
        Ok(Self {
            target: target.to_path_buf(),
            next,
            committed: false,
        })
    }

    /// Where the products are written until the commit.
    pub fn dir(&self) -> &Path {
        &self.next
    }

    /// Links the stored results of `flights` (`flights/<name>.h5`) and every batch log (`logs/`)
    /// from the current output folder into the next generation: hard links, so that a log still
    /// being written goes on in the new folder (copies where no link can be made).
    fn carry(&self, flights: &[String]) -> Result<(), String> {
        let mut files: Vec<PathBuf> = flights
            .iter()
            .map(|n| Path::new(STORE).join(format!("{n}.h5")))
            .filter(|rel| self.target.join(rel).is_file())
            .collect();
        if let Ok(entries) = std::fs::read_dir(self.target.join(LOGS)) {
            files.extend(
                entries
                    .flatten()
                    .filter(|e| e.file_type().is_ok_and(|t| t.is_file()))
                    .map(|e| Path::new(LOGS).join(e.file_name())),
            );
        }
        for rel in files {
            let (from, to) = (self.target.join(&rel), self.next.join(&rel));
            if let Some(dir) = to.parent() {
                std::fs::create_dir_all(dir).map_err(|e| io_err(dir, "create", e))?;
            }
            if std::fs::hard_link(&from, &to).is_err() {
                std::fs::copy(&from, &to).map_err(|e| io_err(&to, "copy", e))?;
            }
        }
        Ok(())
    }

    /// Makes the next generation the output folder in one rename and removes the previous one.
    /// `stored`: the flights whose stored results (`flights/<name>.h5`) the run reused, kept.
    pub fn commit(mut self, stored: &[String]) -> Result<(), String> {
        pause_at("staged");
        self.carry(stored)?;
        pause_at("carried");
        let parent = self.target.parent().unwrap_or(Path::new("/")).to_path_buf();
        if std::fs::symlink_metadata(&self.target).is_err() {
            std::fs::rename(&self.next, &self.target)
                .map_err(|e| io_err(&self.target, "move the products into place", e))?;
            self.committed = true;
            sync_dir(&parent);
            pause_at("switched");
            return Ok(());
        }
        let swapped = exchange(&self.next, &self.target)
            .map_err(|e| io_err(&self.target, "switch to the new products", e))?;
        if !swapped {
            let old = sibling(&self.target, "old", std::process::id());
            std::fs::rename(&self.target, &old)
                .map_err(|e| io_err(&self.target, "move the previous products aside", e))?;
            pause_at("aside");
            if let Err(e) = std::fs::rename(&self.next, &self.target) {
                let _ = std::fs::rename(&old, &self.target);
                return Err(io_err(&self.target, "move the products into place", e));
            }
            self.committed = true;
            sync_dir(&parent);
            pause_at("switched");
            let _ = std::fs::remove_dir_all(&old);
            return Ok(());
        }
        // The previous generation now sits under the sibling's name.
        self.committed = true;
        sync_dir(&parent);
        pause_at("switched");
        std::fs::remove_dir_all(&self.next)
            .map_err(|e| io_err(&self.next, "remove the previous run's products", e))?;
        Ok(())
    }
}

impl Drop for Staging {
    /// A run that returns early (an error) leaves nothing behind; a killed one is cleaned by the next.
    fn drop(&mut self) {
        if !self.committed {
            let _ = std::fs::remove_dir_all(&self.next);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_folder_is_replaced_whole_and_nothing_of_the_old_one_stays() {
        let root = temp("replace");
        let _ = std::fs::remove_dir_all(&root);
        let (new, target) = (root.join(".next"), root.join("qc"));
        // No folder yet: one rename.
        std::fs::create_dir_all(&new).unwrap();
        std::fs::write(new.join("a.csv"), "1").unwrap();
        replace_folder(&new, &target).unwrap();
        assert_eq!(std::fs::read_to_string(target.join("a.csv")).unwrap(), "1");
        assert!(!new.exists());
        // A folder there: swapped, and its files gone.
        std::fs::create_dir_all(&new).unwrap();
        std::fs::write(new.join("b.csv"), "2").unwrap();
        replace_folder(&new, &target).unwrap();
        assert!(!target.join("a.csv").exists());
        assert_eq!(std::fs::read_to_string(target.join("b.csv")).unwrap(), "2");
        let left: Vec<_> = std::fs::read_dir(&root).unwrap().flatten().collect();
        assert_eq!(left.len(), 1, "{left:?}");
        std::fs::remove_dir_all(&root).unwrap();
    }

    fn temp(name: &str) -> PathBuf {
        let d =
            std::env::temp_dir().join(format!("gravgrad-staging-{name}-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        std::fs::create_dir_all(&d).unwrap();
        d
    }

    fn names(dir: &Path) -> Vec<String> {
        let mut v: Vec<String> = std::fs::read_dir(dir)
            .unwrap()
            .flatten()
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    }

    #[test]
    fn commit_replaces_the_whole_folder_and_keeps_only_the_reused_stored_flights() {
        let root = temp("commit");
        let out = root.join("out");
        std::fs::create_dir_all(out.join("calibration")).unwrap();
        std::fs::create_dir_all(out.join(STORE)).unwrap();
        std::fs::write(out.join(MARKER), "old").unwrap();
        std::fs::write(out.join("lines.csv"), "stale").unwrap();
        std::fs::write(out.join("calibration/gone.toml"), "stale").unwrap();
        std::fs::write(out.join("flights/a.h5"), "stored a").unwrap();
        std::fs::write(out.join("flights/gone.h5"), "stored gone").unwrap();
        let s = Staging::begin(&out).unwrap();
        std::fs::create_dir_all(s.dir().join("maps")).unwrap();
        std::fs::write(s.dir().join("maps/gzz.png"), "png").unwrap();
        std::fs::write(s.dir().join(MARKER), "new").unwrap();
        s.commit(&["a".to_string()]).unwrap();
        assert_eq!(names(&out), ["flights", "maps", MARKER]);
        assert_eq!(names(&out.join(STORE)), ["a.h5"]);
        assert_eq!(
            std::fs::read_to_string(out.join("flights/a.h5")).unwrap(),
            "stored a"
        );
        assert_eq!(std::fs::read_to_string(out.join(MARKER)).unwrap(), "new");
        // Nothing left beside the folder.
        assert_eq!(names(&root), ["out"]);
        std::fs::remove_dir_all(&root).unwrap();
    }

    #[test]
    fn commit_into_a_missing_folder_renames_it_into_place() {
        let root = temp("fresh");
        let out = root.join("sub/out");
        let s = Staging::begin(&out).unwrap();
        std::fs::write(s.dir().join(MARKER), "new").unwrap();
        s.commit(&[]).unwrap();
        assert_eq!(names(&out), [MARKER]);
        assert_eq!(names(&root.join("sub")), ["out"]);
        std::fs::remove_dir_all(&root).unwrap();
    }

    #[test]
    fn dropped_staging_leaves_the_folder_as_it_was_and_killed_runs_are_cleaned() {
        let root = temp("drop");
        let out = root.join("out");
        std::fs::create_dir_all(&out).unwrap();
        std::fs::write(out.join(MARKER), "old").unwrap();
        // A sibling of a process that cannot exist (pid above the kernel's maximum).
        let stale = sibling(&out, "next", u32::MAX);
        std::fs::create_dir_all(&stale).unwrap();
        std::fs::write(stale.join("lines.parquet"), "half").unwrap();
        {
            let s = Staging::begin(&out).unwrap();
            assert!(!stale.exists(), "a killed run's folder kept");
            std::fs::write(s.dir().join("lines.parquet"), "x").unwrap();
        }
        assert_eq!(names(&root), ["out"]);
        assert_eq!(names(&out), [MARKER]);
        std::fs::remove_dir_all(&root).unwrap();
    }

    #[test]
    fn a_generation_left_aside_by_a_killed_two_rename_switch_is_put_back() {
        let root = temp("aside");
        let out = root.join("out");
        let old = sibling(&out, "old", u32::MAX);
        std::fs::create_dir_all(&old).unwrap();
        std::fs::write(old.join(MARKER), "previous").unwrap();
        let s = Staging::begin(&out).unwrap();
        assert_eq!(
            std::fs::read_to_string(out.join(MARKER)).unwrap(),
            "previous"
        );
        drop(s);
        assert_eq!(names(&root), ["out"]);
        std::fs::remove_dir_all(&root).unwrap();
    }
}
