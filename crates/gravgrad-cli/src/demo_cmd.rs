//! `gravgrad demo`: the bundled demo survey, as far as gravgrad processes it today (checking the
//! raw logs, the instrument and the recipe).

use crate::EXIT_BAD_INPUT;
use crate::check_cmd::{self, CheckArgs};
use crate::logging::Log;
use std::path::PathBuf;

/// The demo folder inside the source tree.
fn default_demo_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../data/demo")
}

pub fn run(data: Option<PathBuf>, log: &Log, json: bool) -> u8 {
    let dir = data.unwrap_or_else(default_demo_dir);
    let dir = std::fs::canonicalize(&dir).unwrap_or(dir);
    let recipe = dir.join("recipe.toml");
    if !recipe.is_file() {
        eprintln!(
            "error: {}: no demo recipe here; give the demo folder with --data DIR",
            recipe.display()
        );
        return EXIT_BAD_INPUT;
    }
    log.info(&format!("demo survey: {}", dir.display()));
    let args = CheckArgs {
        files: vec![recipe],
        instrument: None,
        navigation: None,
        navigation_max_gap: 1.0,
        jitter_tolerance: 0.01,
    };
    check_cmd::run(&args, log, json)
}
