//! What a run says on stderr: progress for every flight, every stage of a flight and every
//! survey-wide stage, as `[k/n] what` lines off a terminal or JSON lines with `--json`; nothing
//! with `--quiet`; `RUST_LOG` choosing what is shown. On a terminal (a pty) the run succeeds and
//! its messages are still printed.

use crate::simulate_survey;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

const SMALL: &str = include_str!("small_scenario.toml");

/// The stages of one flight, in order (`gravgrad_survey::pipeline::FLIGHT_STAGES`).
const FLIGHT_STAGES: [&str; 4] = [
    "positions and normal field",
    "terrain",
    "calibration",
    "solve and rotation",
];

/// The survey-wide stages of a run, in order, and the last step.
const SURVEY_STAGES: [&str; 7] = [
    "filter, levelling and QC",
    "grids",
    "writing the QC files and the line table",
    "writing grids and maps",
    "writing calibration files, checking the inputs",
    "writing survey.h5 and provenance",
    "products written",
];

/// A small simulated survey in `dir/survey`; its recipe.
fn survey(dir: &Path) -> PathBuf {
    simulate_survey(dir, SMALL, "");
    dir.join("survey/recipe.toml")
}

/// `gravgrad ARGS… run RECIPE --out OUT` with the environment `env`, stdin closed; asserts exit 0.
fn run_with(args: &[&str], recipe: &Path, out: &Path, env: &[(&str, &str)]) -> Output {
    let mut c = Command::new(env!("CARGO_BIN_EXE_gravgrad"));
    c.args(args)
        .arg("run")
        .arg(recipe)
        .arg("--out")
        .arg(out)
        .env_remove("RUST_LOG")
        .stdin(Stdio::null());
    for (k, v) in env {
        c.env(k, v);
    }
    let o = c.output().expect("the gravgrad binary runs");
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    o
}

/// The lines of `o`'s stderr.
fn stderr_lines(o: &Output) -> Vec<String> {
    String::from_utf8_lossy(&o.stderr)
        .lines()
        .map(str::to_string)
        .collect()
}

/// A plain progress line `[done/total] what` taken apart.
fn progress_line(line: &str) -> Option<(usize, usize, &str)> {
    let rest = line.strip_prefix('[')?;
    let (count, what) = rest.split_once("] ")?;
    let (done, total) = count.split_once('/')?;
    Some((done.parse().ok()?, total.parse().ok()?, what))
}

#[test]
fn off_a_terminal_a_run_prints_progress_lines_for_each_flight_its_stages_and_the_survey_stages() {
    let tmp = tempfile::tempdir().unwrap();
    let recipe = survey(tmp.path());
    let o = run_with(&[], &recipe, &tmp.path().join("out"), &[]);
    let lines = stderr_lines(&o);
    let progress: Vec<(usize, usize, &str)> =
        lines.iter().filter_map(|l| progress_line(l)).collect();
    let flights: Vec<&str> = progress
        .iter()
        .filter_map(|(_, _, w)| w.strip_prefix("processing "))
        .collect();
    assert!(!flights.is_empty(), "{lines:#?}");
    // Every flight, then each of its stages, in order; then the survey-wide stages.
    let n = flights.len();
    let mut expected: Vec<(usize, usize, String)> = Vec::new();
    for (k, f) in flights.iter().enumerate() {
        expected.push((k, n, format!("processing {f}")));
        for (s, stage) in FLIGHT_STAGES.iter().enumerate() {
            expected.push((s, FLIGHT_STAGES.len(), format!("{f}: {stage}")));
        }
    }
    expected.push((n, n, "flights processed".to_string()));
    for (s, stage) in SURVEY_STAGES.iter().enumerate() {
        expected.push((s, SURVEY_STAGES.len() - 1, stage.to_string()));
    }
    let seen: Vec<(usize, usize, String)> = progress
        .iter()
        .map(|(d, t, w)| (*d, *t, w.to_string()))
        .collect();
    assert_eq!(seen, expected, "{lines:#?}");
    // The messages are plain lines beside them, no terminal control characters.
    assert!(
        lines.iter().any(|l| l.starts_with("reading ")),
        "{lines:#?}"
    );
    assert!(!lines.iter().any(|l| l.contains('\x1b') || l.contains('\r')));
}

#[test]
fn with_json_every_stderr_line_is_json_and_progress_lines_carry_done_and_total() {
    let tmp = tempfile::tempdir().unwrap();
    let recipe = survey(tmp.path());
    let o = run_with(&["--json"], &recipe, &tmp.path().join("out"), &[]);
    let lines = stderr_lines(&o);
    let values: Vec<serde_json::Value> = lines
        .iter()
        .map(|l| serde_json::from_str(l).unwrap_or_else(|e| panic!("not JSON ({e}): {l}")))
        .collect();
    let progress: Vec<&serde_json::Value> =
        values.iter().filter(|v| v["level"] == "progress").collect();
    // Each flight with its 4 stages, the final count of flights and the 7 survey steps.
    let flights = progress
        .iter()
        .filter(|p| {
            p["item"]
                .as_str()
                .is_some_and(|s| s.starts_with("processing "))
        })
        .count();
    assert!(flights >= 1, "{lines:#?}");
    assert_eq!(progress.len(), flights * 5 + 1 + 7, "{lines:#?}");
    for p in &progress {
        let done = p["done"].as_u64().unwrap_or_else(|| panic!("done: {p}"));
        let total = p["total"].as_u64().unwrap_or_else(|| panic!("total: {p}"));
        assert!(done <= total && total > 0, "{p}");
        assert!(p["item"].as_str().is_some_and(|s| !s.is_empty()), "{p}");
    }
    // A flight's stage names the stage and the flight; the item says both.
    let terrain: Vec<&&serde_json::Value> = progress
        .iter()
        .filter(|p| p["stage"] == "terrain")
        .collect();
    assert_eq!(terrain.len(), flights, "{lines:#?}");
    for p in terrain {
        let flight = p["flight"]
            .as_str()
            .unwrap_or_else(|| panic!("flight: {p}"));
        assert_eq!(p["item"], format!("{flight}: terrain"), "{p}");
        assert_eq!(
            (p["done"].as_u64(), p["total"].as_u64()),
            (Some(1), Some(4))
        );
    }
    let grids = progress.iter().find(|p| p["stage"] == "grids");
    assert!(
        grids.is_some_and(|p| p.get("flight").is_none() && p["total"] == 6),
        "{lines:#?}"
    );
    assert!(
        values
            .iter()
            .any(|v| v["level"] == "info" && v["message"].is_string()),
        "{lines:#?}"
    );
}

#[test]
fn quiet_prints_no_progress_and_no_messages() {
    let tmp = tempfile::tempdir().unwrap();
    let recipe = survey(tmp.path());
    for args in [&["--quiet"][..], &["--quiet", "--json"][..]] {
        let out = tmp.path().join("out");
        let o = run_with(args, &recipe, &out, &[]);
        let lines = stderr_lines(&o);
        assert!(lines.is_empty(), "{args:?}: {lines:#?}");
        assert!(out.join("survey.h5").is_file(), "{args:?}: the run wrote");
    }
}

#[test]
fn rust_log_warn_drops_information_and_progress_and_keeps_the_warnings() {
    let tmp = tempfile::tempdir().unwrap();
    let recipe = survey(tmp.path());
    let all = stderr_lines(&run_with(&[], &recipe, &tmp.path().join("all"), &[]));
    let warnings: Vec<&String> = all.iter().filter(|l| l.starts_with("warning: ")).collect();
    assert!(!warnings.is_empty(), "the survey gives warnings: {all:#?}");
    let o = run_with(
        &[],
        &recipe,
        &tmp.path().join("warn"),
        &[("RUST_LOG", "warn")],
    );
    let shown = stderr_lines(&o);
    // Every warning, nothing else (no progress, no information), in the same order.
    let shown_warnings: Vec<&String> = shown
        .iter()
        .filter(|l| l.starts_with("warning: "))
        .collect();
    assert_eq!(shown_warnings, warnings);
    for l in &shown {
        assert!(all.contains(l), "not in the full log: {l}");
        assert!(progress_line(l).is_none(), "progress: {l}");
        assert!(!l.starts_with("reading "), "information: {l}");
    }
}

/// On a terminal (a pty from `script`, as a user would see it), the run succeeds, writes its
/// products and still prints its messages; the bars themselves are drawn by `indicatif`.
#[test]
fn under_a_terminal_the_run_succeeds_and_prints_its_messages() {
    let tmp = tempfile::tempdir().unwrap();
    let recipe = survey(tmp.path());
    let out = tmp.path().join("out");
    let command = format!(
        "'{}' run '{}' --out '{}'",
        env!("CARGO_BIN_EXE_gravgrad"),
        recipe.display(),
        out.display()
    );
    let o = Command::new("script")
        .args(["-qec", &command, "/dev/null"])
        .env_remove("RUST_LOG")
        .stdin(Stdio::null())
        .output()
        .expect("`script` (util-linux) runs");
    let transcript = String::from_utf8_lossy(&o.stdout);
    assert_eq!(o.status.code(), Some(0), "{transcript}");
    assert!(out.join("survey.h5").is_file(), "{transcript}");
    assert!(transcript.contains("products in"), "{transcript}");
    // No plain progress line: on a terminal progress is drawn in place.
    assert!(
        !transcript.lines().any(|l| l.starts_with("[0/")),
        "{transcript}"
    );
}
