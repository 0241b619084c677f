//! The `gravgrad` command. Thin glue over the stage crates: parse arguments, call the stages,
//! print, and map outcomes to exit codes (0 success, 1 processing failure, 2 bad input or usage).

mod batch_cmd;
mod calibrate_cmd;
mod check_cmd;
mod completions_cmd;
mod demo_cmd;
mod logging;
mod manual_cmd;
mod qc_cmd;
mod report;
mod run_cmd;
mod score_cmd;
mod simulate_cmd;
mod terrain_cmd;

use clap::{Parser, Subcommand};
use std::path::PathBuf;
use std::process::ExitCode;

/// Airborne gravity-gradiometer logs to gridded gradient products, with a QC verdict per line.
///
/// Products are for geological interpretation only: never for navigation or flight safety,
/// terrain clearance included.
#[derive(Parser, Debug)]
#[command(name = "gravgrad", version, about, long_about = None, max_term_width = 100)]
struct Cli {
    /// Print nothing but results and errors.
    #[arg(long, global = true)]
    quiet: bool,
    /// Machine-readable output: reports as JSON on stdout, log messages as JSON lines on stderr.
    #[arg(long, global = true)]
    json: bool,
    /// Worker threads, 1 to 1024 (default: all cores). Results do not depend on it.
    #[arg(long, global = true, value_name = "N", value_parser = parse_threads)]
    threads: Option<usize>,
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Validate raw flight logs, instrument files and recipes; exit 2 if any has an error.
    Check(check_cmd::CheckArgs),
    /// Simulate a survey with known truth from a scenario file: raw log, instrument, DEM, recipe, truth.
    Simulate(simulate_cmd::SimulateArgs),
    /// Process a survey from its recipe: calibration, rotation removal, normal and terrain
    /// reduction, into the recipe's output folder.
    Run(run_cmd::RunArgs),
    /// Many surveys or flights at once: each flight and each survey's merge as its own process, at
    /// most --jobs at a time, finished surveys skipped, one log per unit and a summary; or, with
    /// --emit slurm, a job script that runs them on a Slurm cluster.
    Batch(batch_cmd::BatchArgs),
    /// Per-line QC of a survey from its recipe: a verdict per line against the recipe's `[qc]`
    /// tolerances, written to qc/lines.csv and the self-contained qc/report.html.
    Qc(qc_cmd::QcArgs),
    /// The terrain's gradient tensor from a DEM at given points or on a surface over it.
    Terrain(terrain_cmd::TerrainArgs),
    /// Score a run of a simulated survey against its truth, per component, beside the noise floor.
    Score(score_cmd::ScoreArgs),
    /// Estimate each pair's calibration from the recipe's flights; write the calibration file.
    Calibrate(calibrate_cmd::CalibrateArgs),
    /// Process the bundled demo survey end to end and show how far the result is from its truth.
    Demo {
        /// Folder of a demo survey (default: ./data/demo at the top of a source checkout; else the
        /// survey built into gravgrad, regenerated from its scenario into <OUT>-data beside the
        /// products, once, and reused while its checksums hold).
        #[arg(long, value_name = "DIR")]
        data: Option<PathBuf>,
        /// Output folder of the products (default: ./gravgrad-demo).
        #[arg(long, value_name = "DIR")]
        out: Option<PathBuf>,
    },
    /// Print the completion script for a shell on stdout.
    Completions(completions_cmd::CompletionsArgs),
    /// Write the manual pages (roff, for `man`): gravgrad.1 and one page per command.
    Manual(manual_cmd::ManualArgs),
}

/// A reusing allocator: decoders allocate and free large page buffers, which the system allocator
/// maps and unmaps each time (page faults took a third of Parquet ingest without it).
#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

/// Exit code for bad input or usage.
pub const EXIT_BAD_INPUT: u8 = 2;
/// Exit code for a processing failure.
pub const EXIT_FAILURE: u8 = 1;

/// Most worker threads `--threads` accepts: far above any core count this tool is run on, low
/// enough that starting them is instant (100,000 threads took 53 s to fail).
const MAX_THREADS: usize = 1024;

/// `--threads N`: an integer from 1 to [`MAX_THREADS`], checked before any work (clap names the
/// option and exits with code 2).
fn parse_threads(s: &str) -> Result<usize, String> {
    let n: usize = s
        .trim()
        .parse()
        .map_err(|_| format!("expected a whole number of threads from 1 to {MAX_THREADS}"))?;
    if (1..=MAX_THREADS).contains(&n) {
        Ok(n)
    } else {
        Err(format!(
            "expected 1 to {MAX_THREADS} threads (this machine has {} cores)",
            std::thread::available_parallelism().map_or(1, usize::from)
        ))
    }
}

fn main() -> ExitCode {
    // A panic of the Parquet decoders on a damaged column is caught and reported as that column's
    // located error (docs/reliability.md): its default message would only confuse.
    let default_hook = std::panic::take_hook();
    std::panic::set_hook(Box::new(move |info| {
        if !gravgrad_ingest::parquet_reader::in_contained_decode() {
            default_hook(info);
        }
    }));
    let cli = Cli::parse();
    let log = logging::Log::new(cli.quiet, cli.json);
    logging::install(log);
    if let Some(n) = cli.threads
        && let Err(e) = rayon::ThreadPoolBuilder::new()
            .num_threads(n)
            .build_global()
    {
        eprintln!("error: cannot start {n} threads: {e}");
        return ExitCode::from(EXIT_FAILURE);
    }
    let code = match cli.command {
        Command::Check(args) => check_cmd::run(&args, &log, cli.json),
        Command::Demo { data, out } => demo_cmd::run(data, out, &log, cli.json),
        Command::Simulate(args) => simulate_cmd::run(&args, &log),
        Command::Run(args) => run_cmd::run(&args, &log),
        Command::Batch(args) => batch_cmd::run(&args, cli.threads, &log),
        Command::Qc(args) => qc_cmd::run(&args, &log, cli.json),
        Command::Calibrate(args) => calibrate_cmd::run(&args, &log),
        Command::Terrain(args) => terrain_cmd::run(&args, &log),
        Command::Score(args) => score_cmd::run(&args, &log, cli.json),
        Command::Completions(args) => completions_cmd::run(&args),
        Command::Manual(args) => manual_cmd::run(&args, &log),
    };
    ExitCode::from(code)
}
