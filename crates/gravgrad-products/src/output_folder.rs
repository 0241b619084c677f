//! The output folder of a run, checked before any work. A run replaces the folder whole (see
//! `staging`), so it must be a folder a run may replace: not `/`, not a home folder itself, not a
//! system folder, not the current folder, not a folder holding any input of the run, not a mount
//! point, holding nothing a run does not write, writable, and — when it is a symbolic link — a link
//! to a folder that exists (the run then replaces the folder it points to and keeps the link).

use crate::staging::{ASIDE_PREFIX, ENTRIES, LEGACY_PREFIX, QC_NEXT_PREFIX};
use std::path::{Component, Path, PathBuf};

/// Folders refused together with everything below them: system folders.
const SYSTEM_TREES: [&str; 8] = [
    "/proc", "/sys", "/dev", "/boot", "/etc", "/bin", "/sbin", "/usr",
];
/// Folders refused themselves (a run inside them is fine).
const SYSTEM_FOLDERS: [&str; 16] = [
    "/var", "/var/tmp", "/var/lib", "/var/log", "/tmp", "/home", "/root", "/opt", "/srv", "/mnt",
    "/media", "/run", "/snap", "/Users", "/Volumes", "/private",
];

/// `path` made absolute, with `.` and `..` taken away lexically.
fn lexical(path: &Path) -> PathBuf {
    let abs = std::path::absolute(path).unwrap_or_else(|_| path.to_path_buf());
    let mut out = PathBuf::new();
    for c in abs.components() {
        match c {
            Component::CurDir => {}
            Component::ParentDir => {
                out.pop();
            }
            other => out.push(other),
        }
    }
    out
}

/// The folder a run writing to `out` replaces: absolute, symbolic links resolved in the part that
/// exists. A dangling link is an error.
fn resolve(out: &Path) -> Result<PathBuf, String> {
    let shown = out.display();
    if let Ok(m) = std::fs::symlink_metadata(out)
        && m.file_type().is_symlink()
        && std::fs::metadata(out).is_err()
    {
        let to = std::fs::read_link(out)
            .map(|t| t.display().to_string())
            .unwrap_or_else(|_| "?".into());
        return Err(format!(
            "{shown}: the output folder is a symbolic link to `{to}`, which does not exist; \
             expected a folder, a link to one, or no file at all"
        ));
    }
    let full = lexical(out);
    // The longest part that exists, made canonical, and the rest as written.
    let mut existing = full.clone();
    let mut rest = Vec::new();
    while std::fs::symlink_metadata(&existing).is_err() {
        match (existing.file_name(), existing.parent()) {
            (Some(n), Some(p)) => {
                rest.push(n.to_os_string());
                existing = p.to_path_buf();
            }
            _ => break,
        }
    }
    let mut resolved = existing.canonicalize().map_err(|e| {
        format!(
            "{shown}: cannot resolve the output folder's path ({}: {e})",
            existing.display()
        )
    })?;
    for n in rest.into_iter().rev() {
        resolved.push(n);
    }
    Ok(resolved)
}

/// Why a run may not replace the folder `dir` (canonical), or `None`.
fn forbidden(dir: &Path) -> Option<&'static str> {
    if dir.parent().is_none() {
        return Some("the root folder");
    }
    let top_lib = dir
        .components()
        .nth(1)
        .is_some_and(|c| c.as_os_str().to_string_lossy().starts_with("lib"));
    if top_lib || SYSTEM_TREES.iter().any(|s| dir.starts_with(s)) {
        return Some("a system folder");
    }
    if SYSTEM_FOLDERS.iter().any(|s| dir == Path::new(s)) {
        return Some("a system folder");
    }
    let home = std::env::var_os("HOME")
        .map(PathBuf::from)
        .and_then(|h| h.canonicalize().ok());
    if home.as_deref() == Some(dir) || dir.parent() == Some(Path::new("/home")) {
        return Some("a home folder");
    }
    None
}

/// Prefix of the probe file (another unit of a batch may be probing the same folder).
const PROBE_PREFIX: &str = ".gravgrad-probe-";

/// Whether a file can be created in the folder `dir`: creates and removes a probe file.
fn probe(dir: &Path) -> Result<(), std::io::Error> {
    let p = dir.join(format!("{PROBE_PREFIX}{}", std::process::id()));
    std::fs::File::create(&p)?;
    std::fs::remove_file(&p)
}

/// Checks the output folder `out` (as given: `--out` or the recipe's `output.folder`; `key`
/// names which) against the rules above, before any work; `inputs`: every input file of the run.
/// Returns the folder to replace (absolute, links resolved).
pub fn check(out: &Path, key: &str, inputs: &[PathBuf]) -> Result<PathBuf, String> {
    let shown = out.display();
    let dir = resolve(out).map_err(|e| format!("{e} ({key})"))?;
    let refuse = |why: String| format!("{shown}: {why} ({key})");
    if let Some(what) = forbidden(&dir) {
        return Err(refuse(format!(
            "`{}` is {what}; a run replaces its output folder whole: expected a folder of its own, \
             e.g. `products` beside the recipe",
            dir.display(),
        )));
    }
    if std::env::current_dir()
        .and_then(|c| c.canonicalize())
        .is_ok_and(|c| c == dir)
    {
        return Err(refuse(
            "is the current folder; a run replaces its output folder whole: expected a folder of \
             its own, e.g. `products`"
                .into(),
        ));
    }
    for input in inputs {
        let Ok(canon) = input.canonicalize() else {
            continue;
        };
        if canon.starts_with(&dir) {
            return Err(refuse(format!(
                "holds the input `{}`; a run replaces its output folder whole: expected a folder \
                 that holds no input",
                input.display()
            )));
        }
    }
    match std::fs::metadata(&dir) {
        Ok(m) if !m.is_dir() => {
            return Err(refuse("is a file; expected a folder".into()));
        }
        Ok(m) => {
            let entries =
                std::fs::read_dir(&dir).map_err(|e| refuse(format!("cannot list: {e}")))?;
            let mut foreign: Vec<String> = entries
                .flatten()
                .map(|e| e.file_name().to_string_lossy().into_owned())
                .filter(|n| {
                    !ENTRIES.contains(&n.as_str())
                        && !n.starts_with(LEGACY_PREFIX)
                        && !n.starts_with(PROBE_PREFIX)
                        && !n.starts_with(QC_NEXT_PREFIX)
                        && !n.starts_with(ASIDE_PREFIX)
                })
                .collect();
            foreign.sort();
            if let Some(first) = foreign.first() {
                return Err(refuse(format!(
                    "holds `{first}`{}, which no run writes; a run replaces its output folder \
                     whole: move {} away or choose another folder",
                    if foreign.len() > 1 {
                        format!(" and {} more", foreign.len() - 1)
                    } else {
                        String::new()
                    },
                    if foreign.len() > 1 { "them" } else { "it" }
                )));
            }
            #[cfg(unix)]
            {
                use std::os::unix::fs::MetadataExt;
                if let Some(parent) = dir.parent()
                    && std::fs::metadata(parent).is_ok_and(|p| p.dev() != m.dev())
                {
                    return Err(refuse(
                        "is a mount point; a run replaces its output folder whole: expected a \
                         folder inside it"
                            .into(),
                    ));
                }
            }
            probe(&dir).map_err(|e| refuse(format!("cannot write in the output folder: {e}")))?;
        }
        Err(_) => {}
    }
    // The new products are built beside the folder: its parent (or the nearest folder above that
    // exists) must take new files.
    let mut above = dir.parent().map(Path::to_path_buf);
    while let Some(a) = &above {
        if a.exists() {
            break;
        }
        above = a.parent().map(Path::to_path_buf);
    }
    if let Some(a) = above {
        probe(&a).map_err(|e| {
            refuse(format!(
                "cannot write in `{}`, where the new products are built before they replace the \
                 folder: {e}",
                a.display()
            ))
        })?;
    }
    Ok(dir)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn system_home_and_root_folders_are_refused_and_folders_inside_some_are_not() {
        // Source: the folders of the Filesystem Hierarchy Standard 3.0.
        for d in [
            "/",
            "/usr",
            "/usr/share/x",
            "/etc",
            "/proc/1",
            "/lib64",
            "/var",
            "/tmp",
        ] {
            assert!(forbidden(Path::new(d)).is_some(), "{d} accepted");
        }
        assert_eq!(forbidden(Path::new("/home/someone")), Some("a home folder"));
        for d in [
            "/tmp/run1",
            "/var/tmp/x",
            "/home/someone/survey/products",
            "/srv/data/out",
        ] {
            assert_eq!(forbidden(Path::new(d)), None, "{d} refused");
        }
    }

    #[test]
    fn lexical_takes_away_dot_and_dot_dot() {
        assert_eq!(lexical(Path::new("/a/./b/../c")), PathBuf::from("/a/c"));
        assert_eq!(lexical(Path::new("/usr/../")), PathBuf::from("/"));
    }
}
