//! `gravgrad batch RECIPES…`: many surveys and flights at once on this machine
//! (`gravgrad::batch_local`: each flight and each merge a child process of this same executable, at
//! most `--jobs` at a time), or a Slurm job script that spreads them over a cluster (`--emit slurm`,
//! `gravgrad::slurm`). Finished recipes are skipped unless `--force`; a summary table ends the
//! batch.

use crate::logging::Log;
use crate::{EXIT_BAD_INPUT, EXIT_FAILURE};
use clap::{Args, ValueEnum};
use gravgrad::batch_local::{self, Status, Unit};
use gravgrad::batch_plan::{self, RecipeWork};
use gravgrad::slurm;
use std::path::PathBuf;

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
    let mut units = batch_local::units(&works, args.logs.as_deref());
    let cores = threads.unwrap_or_else(|| {
        std::thread::available_parallelism().map_or(1, std::num::NonZeroUsize::get)
    });
    let per_unit = (cores / args.jobs).max(1);
    batch_local::execute(&exe, &works, &mut units, args.jobs, per_unit);
    print!("{}", summary(&works, &units));
    let ok = units
        .iter()
        .all(|u| matches!(u.status, Status::Done | Status::Skipped));
    if ok { 0 } else { EXIT_FAILURE }
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
