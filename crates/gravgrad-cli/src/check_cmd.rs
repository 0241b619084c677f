//! `gravgrad check`: validate flight logs, instrument files and recipes.

use crate::logging::Log;
use crate::report;
use crate::{EXIT_BAD_INPUT, EXIT_FAILURE};
use clap::Args;
use gravgrad::survey::preflight::preflight;
use gravgrad_ingest::check::{
    CheckSettings, FileReport, check_instrument_file, check_path, read_navigation,
};
use gravgrad_ingest::{recipe, tomlfile};
use std::path::{Path, PathBuf};

#[derive(Args, Debug)]
pub struct CheckArgs {
    /// Flight logs (.csv, .parquet, .h5), instrument files or recipes (.toml).
    #[arg(required = true, value_name = "FILES")]
    pub files: Vec<PathBuf>,
    /// Instrument file naming the pairs and the sample rate (default: pairs found from the
    /// `<id>_a`/`<id>_b` columns, rate estimated from the log).
    #[arg(long, value_name = "FILE")]
    pub instrument: Option<PathBuf>,
    /// Navigation table at its own rate, merged onto each log's time base.
    #[arg(long, value_name = "FILE")]
    pub navigation: Option<PathBuf>,
    /// Longest navigation gap interpolated across, seconds.
    #[arg(long, value_name = "S", default_value_t = 1.0)]
    pub navigation_max_gap: f64,
    /// Allowed deviation of a sample interval from the nominal, as a fraction of it.
    #[arg(long, value_name = "FRACTION", default_value_t = 0.01)]
    pub jitter_tolerance: f64,
}

pub fn run(args: &CheckArgs, log: &Log, json: bool) -> u8 {
    if !(args.jitter_tolerance.is_finite() && args.jitter_tolerance > 0.0) {
        eprintln!(
            "error: --jitter-tolerance: expected a positive fraction, got {}",
            args.jitter_tolerance
        );
        return EXIT_BAD_INPUT;
    }
    if !(args.navigation_max_gap.is_finite() && args.navigation_max_gap > 0.0) {
        eprintln!(
            "error: --navigation-max-gap: expected a positive number of seconds, got {}",
            args.navigation_max_gap
        );
        return EXIT_BAD_INPUT;
    }
    let mut reports: Vec<FileReport> = Vec::new();
    let mut settings = CheckSettings {
        navigation_max_gap_s: args.navigation_max_gap,
        ..CheckSettings::default()
    };
    settings.time.jitter_tolerance = args.jitter_tolerance;
    if let Some(ip) = &args.instrument {
        let (inst, rep) = check_instrument_file(ip);
        settings.time.sample_rate_hz = inst.as_ref().and_then(|i| i.sample_rate_hz);
        settings.instrument = inst;
        let bad = rep.has_errors();
        reports.push(rep);
        if bad {
            return finish(&reports, log, json);
        }
    }
    let mut nav = None;
    if let Some(np) = &args.navigation {
        let (n, rep) = read_navigation(np, &settings);
        nav = n;
        let bad = rep.has_errors();
        reports.push(rep);
        if bad {
            return finish(&reports, log, json);
        }
    }
    let total = args.files.len();
    for (i, f) in args.files.iter().enumerate() {
        log.progress(i, total, &format!("checking {}", f.display()));
        if is_recipe(f) {
            // The same reading, checks and sizes `gravgrad run` makes before its work.
            reports.extend(preflight(f).survey.reports);
        } else {
            reports.extend(check_path(f, &settings, nav.as_ref()));
        }
    }
    log.progress(total, total, "done");
    log.clear_progress();
    finish(&reports, log, json)
}

/// Whether `path` is a recipe: a TOML file whose `layout` is the recipe's.
fn is_recipe(path: &Path) -> bool {
    let toml = path
        .extension()
        .and_then(|e| e.to_str())
        .is_some_and(|e| e.eq_ignore_ascii_case("toml"));
    toml && std::fs::read_to_string(path).is_ok_and(|text| {
        tomlfile::layout_of(path, &text).is_ok_and(|l| l.as_deref() == Some(recipe::LAYOUT))
    })
}

fn finish(reports: &[FileReport], log: &Log, json: bool) -> u8 {
    if json {
        match serde_json::to_string_pretty(reports) {
            Ok(s) => println!("{s}"),
            Err(e) => {
                eprintln!("error: cannot write the report as JSON: {e}");
                return EXIT_FAILURE;
            }
        }
    } else {
        print!("{}", report::render(reports));
    }
    let bad = reports.iter().filter(|r| r.has_errors()).count();
    if bad > 0 {
        log.info(&format!("{bad} of {} files have errors", reports.len()));
        EXIT_BAD_INPUT
    } else {
        0
    }
}
