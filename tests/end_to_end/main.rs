//! End-to-end tests: run the real `gravgrad` binary on files and read what it prints and returns.

mod batch;
mod calibration;
mod commands;
mod corpus;
mod inputs;
mod install;
mod interrupt;
mod logs;
mod motion;
mod output_folder;
mod qc;
mod run;
mod simulate;

use std::path::PathBuf;
use std::process::Output;

/// The repository root.
pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../..")
}

/// Runs `gravgrad` with `args` from the repository root.
pub fn gravgrad(args: &[&str]) -> Output {
    std::process::Command::new(env!("CARGO_BIN_EXE_gravgrad"))
        .args(args)
        .current_dir(root())
        .output()
        .expect("the gravgrad binary runs")
}

/// Runs `gravgrad` with `args`, asserts exit 0 and returns stdout.
pub fn ok(args: &[&str]) -> String {
    let o = gravgrad(args);
    assert_eq!(
        o.status.code(),
        Some(0),
        "gravgrad {args:?}: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    String::from_utf8_lossy(&o.stdout).into_owned()
}

/// Runs `gravgrad run` on `recipe` into `out` to the end; asserts exit 0.
pub fn run_to_end(recipe: &std::path::Path, out: &std::path::Path) {
    ok(&[
        "--quiet",
        "run",
        recipe.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
}

/// Simulates `scenario` into `dir/survey`, appending `recipe_extra` to the recipe it writes.
pub fn simulate_survey(dir: &std::path::Path, scenario: &str, recipe_extra: &str) {
    let sc = dir.join("scenario.toml");
    std::fs::write(&sc, scenario).unwrap();
    let out = dir.join("survey");
    ok(&[
        "--quiet",
        "simulate",
        sc.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    let recipe = out.join("recipe.toml");
    let mut text = std::fs::read_to_string(&recipe).unwrap();
    text.push_str(recipe_extra);
    std::fs::write(&recipe, text).unwrap();
}

/// A copy of the demo survey (recipe, instrument, DEM, Parquet flights) in `dir/survey`; its path.
pub fn copy_demo(dir: &std::path::Path) -> PathBuf {
    let demo = root().join("data/demo");
    let survey = dir.join("survey");
    std::fs::create_dir_all(survey.join("flights")).unwrap();
    for f in [
        "instrument.toml",
        "recipe.toml",
        "recipe-calibration.toml",
        "recipe-with-calibration.toml",
        "dem.tif",
    ] {
        std::fs::copy(demo.join(f), survey.join(f)).unwrap();
    }
    for e in std::fs::read_dir(demo.join("flights")).unwrap() {
        let p = e.unwrap().path();
        if p.extension().is_some_and(|x| x == "parquet") {
            std::fs::copy(&p, survey.join("flights").join(p.file_name().unwrap())).unwrap();
        }
    }
    survey
}

/// The JSON report of `gravgrad check --json …`.
pub fn check_json(args: &[&str]) -> (i32, serde_json::Value, String) {
    let mut all = vec!["check", "--json", "--quiet"];
    all.extend_from_slice(args);
    let out = gravgrad(&all);
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap_or_else(|e| {
        panic!(
            "stdout is not JSON ({e}): {}\nstderr: {stderr}",
            String::from_utf8_lossy(&out.stdout)
        )
    });
    (out.status.code().unwrap_or(-1), v, stderr)
}

/// Every problem of a JSON report, file-level and per flight.
pub fn problems(report: &serde_json::Value) -> Vec<serde_json::Value> {
    let mut out = Vec::new();
    for file in report.as_array().into_iter().flatten() {
        out.extend(file["problems"].as_array().into_iter().flatten().cloned());
        for f in file["flights"].as_array().into_iter().flatten() {
            out.extend(f["problems"].as_array().into_iter().flatten().cloned());
        }
    }
    out
}
