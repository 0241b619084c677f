//! `gravgrad batch RECIPES…`: many surveys and flights at once on this machine, or a Slurm job
//! script that spreads them over a cluster (`--emit slurm`, see `slurm.rs`). Locally each unit —
//! one flight of one recipe (`gravgrad run RECIPE --flight NAME`), then the recipe's merge (`gravgrad
//! run RECIPE`) once all its flights succeeded — is a child process of this same executable, at most
//! `--jobs` at a time, each with its share of the threads and its own log file. Finished recipes
//! are skipped unless `--force`; a summary table ends the batch.

use crate::logging::Log;
use crate::{EXIT_BAD_INPUT, EXIT_FAILURE};
use clap::{Args, ValueEnum};
use gravgrad::batch_plan::{self, RecipeWork};
use gravgrad::slurm;
use std::fs::File;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

#[derive(Args, Debug)]
pub struct BatchArgs {
    /// Processing recipes (layout `recipe/1`, TOML); each writes to its own `output.folder`.
    #[arg(value_name = "RECIPES", required = true)]
    pub recipes: Vec<PathBuf>,
    /// Units run at the same time; the threads (`--threads`, default all cores) are shared out among
    /// them.
    #[arg(long, value_name = "N", default_value_t = 1)]
    pub jobs: usize,
    /// Run recipes again even when their output folder holds a finished run of the same recipe.
    #[arg(long)]
    pub force: bool,
    /// Folder of the unit logs (default: `logs/` in each recipe's output folder).
    #[arg(long, value_name = "DIR")]
    pub logs: Option<PathBuf>,
    /// Write a job script for a cluster's scheduler instead of running (`slurm`: a job array of
    /// the flights and a merge job that waits for it; submit it with `bash FILE`).
    #[arg(long, value_name = "SCHEDULER")]
    pub emit: Option<Scheduler>,
    /// Where `--emit` writes the script (default: `gravgrad-batch.sh` in the current folder).
    #[arg(long, value_name = "FILE", requires = "emit")]
    pub out_script: Option<PathBuf>,
}

/// Schedulers `--emit` writes scripts for.
#[derive(Clone, Copy, Debug, ValueEnum)]
pub enum Scheduler {
    Slurm,
}

/// One unit of work and what became of it.
struct Unit {
    recipe: usize,
    /// `None` for the recipe's merge.
    flight: Option<String>,
    log: PathBuf,
    status: Status,
    wall_s: f64,
}

#[derive(Clone, Copy, Debug, PartialEq)]
enum Status {
    Waiting,
    Running,
    Done,
    Skipped,
    Failed(i32),
    /// Not started because a flight of its recipe failed.
    Blocked,
}

impl Status {
    fn text(self) -> String {
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
fn log_path(logs: Option<&Path>, k: usize, work: &RecipeWork, flight: Option<&str>) -> PathBuf {
    let file = match flight {
        Some(f) => format!("flight-{f}.log"),
        None => "merge.log".into(),
    };
    match logs {
        Some(d) => d.join(format!("r{:02}-{file}", k + 1)),
        None => work.out.join("logs").join(file),
    }
}

pub fn run(args: &BatchArgs, threads: Option<usize>, log: &Log) -> u8 {
    if args.jobs == 0 {
        eprintln!("error: --jobs: expected at least 1");
        return EXIT_BAD_INPUT;
    }
    let works = match batch_plan::plan(&args.recipes, args.force) {
        Ok(w) => w,
        Err(problems) => {
            for p in &problems {
                eprintln!("{p}");
            }
            return EXIT_BAD_INPUT;
        }
    };
    let exe = match std::env::current_exe().and_then(std::fs::canonicalize) {
        Ok(e) => e,
        Err(e) => {
            eprintln!("error: cannot find this executable: {e}");
            return EXIT_FAILURE;
        }
    };
    if let Some(Scheduler::Slurm) = args.emit {
        let path = args
            .out_script
            .clone()
            .unwrap_or_else(|| PathBuf::from("gravgrad-batch.sh"));
        let logs = args
            .logs
            .clone()
            .or_else(|| works.first().map(|w| w.out.join("logs")))
            .unwrap_or_else(|| PathBuf::from("logs"));
        let logs = std::path::absolute(&logs).unwrap_or(logs);
        return match slurm::write_script(&path, &exe, &works, &logs, threads.unwrap_or(1)) {
            Ok(s) => {
                log.info(&format!(
                    "{} flight task(s) and a merge of {} recipe(s) ({} finished, skipped) written to {}; submit with: bash {}",
                    s.tasks,
                    s.merges,
                    works.len() - s.merges,
                    path.display(),
                    path.display()
                ));
                0
            }
            Err(e) => {
                eprintln!("error: {e}");
                EXIT_FAILURE
            }
        };
    }
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
                log: log_path(args.logs.as_deref(), k, w, f),
                status,
                wall_s: 0.0,
            });
        }
    }
    let cores = threads.unwrap_or_else(|| {
        std::thread::available_parallelism().map_or(1, std::num::NonZeroUsize::get)
    });
    let per_unit = (cores / args.jobs).max(1);
    execute(&exe, &works, &mut units, args.jobs, per_unit, log);
    print!("{}", summary(&works, &units));
    let ok = units
        .iter()
        .all(|u| matches!(u.status, Status::Done | Status::Skipped));
    if ok { 0 } else { EXIT_FAILURE }
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

fn unit_name(works: &[RecipeWork], u: &Unit) -> String {
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
fn execute(
    exe: &Path,
    works: &[RecipeWork],
    units: &mut [Unit],
    jobs: usize,
    threads: usize,
    log: &Log,
) {
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
                    log.info(&format!(
                        "[{finished}/{total}] not run: {} (a flight failed)",
                        unit_name(works, &units[i])
                    ));
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
                    log.info(&format!("started {}", unit_name(works, &units[i])));
                    running.push((i, child, Instant::now()));
                }
                Err(e) => {
                    eprintln!("error: {e}");
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
                log.info(&format!(
                    "[{finished}/{total}] {}: {} in {:.1} s, log {}",
                    unit_name(works, u),
                    u.status.text(),
                    u.wall_s,
                    u.log.display()
                ));
                running.swap_remove(k);
            } else {
                k += 1;
            }
        }
    }
}

/// The table at the end: one row per unit.
fn summary(works: &[RecipeWork], units: &[Unit]) -> String {
    let rows: Vec<[String; 5]> = units
        .iter()
        .map(|u| {
            [
                works[u.recipe].recipe.display().to_string(),
                u.flight.clone().unwrap_or_else(|| "(merge)".into()),
                u.status.text(),
                if matches!(u.status, Status::Done | Status::Failed(_)) {
                    format!("{:.1}", u.wall_s)
                } else {
                    "-".into()
                },
                if matches!(u.status, Status::Done | Status::Failed(_)) {
                    u.log.display().to_string()
                } else {
                    "-".into()
                },
            ]
        })
        .collect();
    let head = ["recipe", "flight", "status", "wall_s", "log"];
    let width: Vec<usize> = (0..5)
        .map(|c| {
            rows.iter()
                .map(|r| r[c].chars().count())
                .chain([head[c].len()])
                .max()
                .unwrap_or(0)
        })
        .collect();
    let line = |cells: [&str; 5]| -> String {
        let mut s = String::new();
        for (c, cell) in cells.iter().enumerate() {
            if c + 1 == cells.len() {
                s.push_str(cell);
            } else {
                s.push_str(&format!("{cell:<w$}  ", w = width[c]));
            }
        }
        s.trim_end().to_string() + "\n"
    };
    let mut out = line(head);
    for r in &rows {
        out.push_str(&line([&r[0], &r[1], &r[2], &r[3], &r[4]]));
    }
    out
}
