//! `gravgrad score RUN_DIR TRUTH_DIR`: how far a run's products are from the truth of the simulated
//! survey they came from, per component, beside the noise floor the simulation implies.

use crate::logging::Log;
use crate::tables::{Owned, read_parquet_columns};
use crate::{EXIT_BAD_INPUT, EXIT_FAILURE};
use clap::Args;
use gravgrad_ingest::tomlfile;
use gravgrad_sim::scenario::Scenario;
use gravgrad_sim::score::{Series, StageScore, component_densities, scenario_pairs, score_stage};
use std::fmt::Write as _;
use std::path::PathBuf;

#[derive(Args, Debug)]
pub struct ScoreArgs {
    /// Output folder of `gravgrad run` (holds lines.parquet).
    #[arg(value_name = "RUN_DIR")]
    pub run: PathBuf,
    /// Truth folder written by `gravgrad simulate` (holds lines.parquet and scenario.toml).
    #[arg(value_name = "TRUTH_DIR")]
    pub truth: PathBuf,
    /// Cutoff wavelength of the along-track low-pass applied to the errors, m.
    #[arg(long, value_name = "M", default_value_t = 300.0)]
    pub wavelength: f64,
}

const COMPONENTS: [&str; 6] = ["xx", "xy", "xz", "yy", "yz", "zz"];

fn f64s(c: Owned) -> Vec<f64> {
    match c {
        Owned::F64(v) => v,
        Owned::I64(v) => v.into_iter().map(|x| x as f64).collect(),
    }
}

fn render(scores: &[StageScore]) -> String {
    let mut s = String::new();
    for st in scores {
        let _ = writeln!(
            s,
            "{} against truth {} ({} line samples; low-pass {} m at {:.1} m/s)",
            st.stage, st.against, st.samples, st.cutoff_wavelength_m, st.median_speed_m_s
        );
        let _ = writeln!(
            s,
            "  {:<4} {:>10} {:>10} {:>13} {:>13}",
            "", "mean E", "RMS E", "filtered E", "noise floor E"
        );
        for c in &st.components {
            let _ = writeln!(
                s,
                "  {:<4} {:>10.3} {:>10.3} {:>13.3} {:>13.3}",
                c.component,
                c.mean_error_e,
                c.rms_error_e,
                c.filtered_rms_error_e,
                c.filtered_noise_floor_e
            );
        }
    }
    s
}

pub fn run(args: &ScoreArgs, log: &Log, json: bool) -> u8 {
    if !(args.wavelength.is_finite() && args.wavelength > 0.0) {
        eprintln!("error: --wavelength: expected a positive number of metres");
        return EXIT_BAD_INPUT;
    }
    let scenario: Scenario = match tomlfile::read(&args.truth.join("scenario.toml")) {
        Ok(s) => s,
        Err(p) => {
            eprintln!("{p}");
            return EXIT_BAD_INPUT;
        }
    };
    let run_path = args.run.join("lines.parquet");
    let truth_path = args.truth.join("lines.parquet");
    let has = |path: &std::path::Path, n: &str| read_parquet_columns(path, &[n]).is_ok();
    let reduced = if has(&run_path, "terrain_removed_gzz") {
        "terrain_removed"
    } else {
        "normal_removed"
    };
    let mut names: Vec<String> = vec![
        "time".into(),
        "line".into(),
        "easting".into(),
        "northing".into(),
    ];
    for stage in ["rotated", reduced] {
        names.extend(COMPONENTS.iter().map(|c| format!("{stage}_g{c}")));
    }
    let truth_names: Vec<String> = ["time", "line"]
        .iter()
        .map(|s| s.to_string())
        .chain(
            ["total", "geology"]
                .iter()
                .flat_map(|t| COMPONENTS.iter().map(move |c| format!("{t}_{c}"))),
        )
        .collect();
    let read = |path: &std::path::Path, n: &[String]| {
        read_parquet_columns(path, &n.iter().map(String::as_str).collect::<Vec<_>>())
            .map(|v| v.into_iter().map(f64s).collect::<Vec<_>>())
    };
    let (run, truth) = match (read(&run_path, &names), read(&truth_path, &truth_names)) {
        (Ok(r), Ok(t)) => (r, t),
        (Err(e), _) | (_, Err(e)) => {
            eprintln!("error: {e}");
            return EXIT_BAD_INPUT;
        }
    };
    if run[0].len() != truth[0].len() || run[0].iter().zip(&truth[0]).any(|(a, b)| a != b) {
        eprintln!(
            "error: {} and {} do not hold the same samples (time columns differ); score a run of this simulation",
            run_path.display(),
            truth_path.display()
        );
        return EXIT_BAD_INPUT;
    }
    let line: Vec<i64> = truth[1].iter().map(|v| *v as i64).collect();
    let dens = component_densities(
        &scenario_pairs(&scenario),
        scenario.instrument.noise_e_rt_hz,
    );
    let series = |run_off: usize, truth_off: usize| Series {
        time: &run[0],
        line: &line,
        easting: &run[2],
        northing: &run[3],
        run: std::array::from_fn(|c| &run[run_off + c][..]),
        truth: std::array::from_fn(|c| &truth[truth_off + c][..]),
    };
    let scores = vec![
        score_stage("rotated", "total", &series(4, 2), dens, args.wavelength),
        score_stage(reduced, "geology", &series(10, 8), dens, args.wavelength),
    ];
    if json {
        match serde_json::to_string_pretty(&scores) {
            Ok(s) => println!("{s}"),
            Err(e) => {
                eprintln!("error: {e}");
                return EXIT_FAILURE;
            }
        }
    } else {
        print!("{}", render(&scores));
    }
    log.info("noise floor: the scenario's white pair noise through the same low-pass (1/f noise not included)");
    0
}
