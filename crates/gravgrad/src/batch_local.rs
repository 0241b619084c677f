//! `gravgrad batch` on this machine: each unit — one flight of one recipe (`gravgrad run RECIPE
//! --flight NAME`), then the recipe's merge (`gravgrad run RECIPE`) once all its flights succeeded —
//! a child process of the given executable, at most `jobs` at a time, each with its share of the
//! threads and its own log file. What to run comes from [`crate::batch_plan`].

use crate::batch_plan::RecipeWork;
use crate::run::PROBLEM;
use std::fs::File;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

/// One unit of work and what became of it.
pub struct Unit {
    pub recipe: usize,
    /// `None` for the recipe's merge.
    pub flight: Option<String>,
    pub log: PathBuf,
    pub status: Status,
    /// Wall time of its process, s.
    pub wall_s: f64,
}

#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Status {
    Waiting,
    Running,
    Done,
    Skipped,
    Failed(i32),
    /// Not started because a flight of its recipe failed.
    Blocked,
}

impl Status {
    /// How the summary and the log say it.
    pub fn text(self) -> String {
        match self {
            Status::Waiting | Status::Running => "not run".into(),
            Status::Done => "done".into(),
            Status::Skipped => "skipped (finished)".into(),
            Status::Failed(c) if c < 0 => "failed (killed by a signal)".into(),
            Status::Failed(c) => format!("failed (exit {c})"),
            Status::Blocked => "not run (a flight failed)".into(),
        }
    }
}

/// The log file of a unit.
pub fn log_path(logs: Option<&Path>, k: usize, work: &RecipeWork, flight: Option<&str>) -> PathBuf {
    let file = match flight {
        Some(f) => format!("flight-{f}.log"),
        None => "merge.log".into(),
    };
    match logs {
        Some(d) => d.join(format!("r{:02}-{file}", k + 1)),
        None => work.out.join("logs").join(file),
    }
}

/// The child process of a unit, its output to the unit's log.
fn spawn(exe: &Path, w: &RecipeWork, u: &Unit, threads: usize) -> Result<Child, String> {
    if let Some(dir) = u.log.parent() {
        std::fs::create_dir_all(dir).map_err(|e| format!("{}: {e}", dir.display()))?;
    }
    let out = File::create(&u.log).map_err(|e| format!("{}: {e}", u.log.display()))?;
    let err = out
        .try_clone()
        .map_err(|e| format!("{}: {e}", u.log.display()))?;
    let mut c = Command::new(exe);
    c.arg("--threads")
        .arg(threads.to_string())
        .arg("run")
        .arg(&w.recipe);
    if let Some(f) = &u.flight {
        c.arg("--flight").arg(f);
    }
    c.stdin(Stdio::null())
        .stdout(Stdio::from(out))
        .stderr(Stdio::from(err))
        .spawn()
        .map_err(|e| format!("{}: cannot start: {e}", exe.display()))
}

/// A unit as the log names it: the recipe and `--flight NAME` or `(merge)`.
pub fn unit_name(works: &[RecipeWork], u: &Unit) -> String {
    format!(
        "{} {}",
        works[u.recipe].recipe.display(),
        u.flight
            .as_deref()
            .map_or("(merge)".into(), |f| format!("--flight {f}"))
    )
}

/// Runs the waiting units, at most `jobs` at a time; a merge starts once all flights of its recipe
/// are done and is blocked when one failed.
pub fn execute(exe: &Path, works: &[RecipeWork], units: &mut [Unit], jobs: usize, threads: usize) {
    let total = units.iter().filter(|u| u.status == Status::Waiting).count();
    let mut finished = 0usize;
    let mut running: Vec<(usize, Child, Instant)> = Vec::new();
    loop {
        // Merges whose flights failed cannot run.
        for i in 0..units.len() {
            if units[i].flight.is_none() && units[i].status == Status::Waiting {
                let r = units[i].recipe;
                if units
                    .iter()
                    .any(|u| u.recipe == r && matches!(u.status, Status::Failed(_)))
                {
                    units[i].status = Status::Blocked;
                    finished += 1;
                    tracing::info!(
                        "[{finished}/{total}] not run: {} (a flight failed)",
                        unit_name(works, &units[i])
                    );
                }
            }
        }
        while running.len() < jobs {
            let ready = (0..units.len()).find(|&i| {
                let u = &units[i];
                u.status == Status::Waiting
                    && (u.flight.is_some()
                        || units
                            .iter()
                            .filter(|o| o.recipe == u.recipe && o.flight.is_some())
                            .all(|o| o.status == Status::Done))
            });
            let Some(i) = ready else { break };
            match spawn(exe, &works[units[i].recipe], &units[i], threads) {
                Ok(child) => {
                    units[i].status = Status::Running;
                    tracing::info!("started {}", unit_name(works, &units[i]));
                    running.push((i, child, Instant::now()));
                }
                Err(e) => {
                    tracing::error!(target: PROBLEM, "error: {e}");
                    units[i].status = Status::Failed(-1);
                    finished += 1;
                }
            }
        }
        if running.is_empty() {
            break;
        }
        std::thread::sleep(Duration::from_millis(50));
        let mut k = 0;
        while k < running.len() {
            let (i, child, started) = &mut running[k];
            let state = match child.try_wait() {
                Ok(Some(s)) => Some(s.code().unwrap_or(-1)),
                Ok(None) => None,
                Err(_) => Some(-1),
            };
            if let Some(code) = state {
                let u = &mut units[*i];
                u.wall_s = started.elapsed().as_secs_f64();
                u.status = if code == 0 {
                    Status::Done
                } else {
                    Status::Failed(code)
                };
                finished += 1;
                tracing::info!(
                    "[{finished}/{total}] {}: {} in {:.1} s, log {}",
                    unit_name(works, u),
                    u.status.text(),
                    u.wall_s,
                    u.log.display()
                );
                running.swap_remove(k);
            } else {
                k += 1;
            }
        }
    }
}

/// Every unit of `works` in order (each recipe's flights, then its merge), finished recipes'
/// units skipped; logs in `logs` (default: `logs/` in each recipe's output folder).
pub fn units(works: &[RecipeWork], logs: Option<&Path>) -> Vec<Unit> {
    let mut units = Vec::new();
    for (k, w) in works.iter().enumerate() {
        let status = if w.finished {
            Status::Skipped
        } else {
            Status::Waiting
        };
        for f in w.flights.iter().map(|f| Some(f.as_str())).chain([None]) {
            units.push(Unit {
                recipe: k,
                flight: f.map(str::to_string),
                log: log_path(logs, k, w, f),
                status,
                wall_s: 0.0,
            });
        }
    }
    units
}
