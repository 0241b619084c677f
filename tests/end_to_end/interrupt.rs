//! A run killed with SIGKILL part-way leaves no half-written product in its output folder, and
//! running it again completes with the products of an uninterrupted run, byte for byte.

use crate::{copy_demo, run_to_end};
use std::path::{Path, PathBuf};
use std::process::{Child, Command};
use std::time::{Duration, Instant};

/// Prefix of the staging folder a run writes its products into (see `staging.rs`).
const STAGING: &str = ".gravgrad-staging-";

/// Every file under `dir` (relative paths, sorted), leaving out staging folders.
fn products(dir: &Path) -> Vec<PathBuf> {
    let mut out = Vec::new();
    let mut stack = vec![PathBuf::new()];
    while let Some(rel) = stack.pop() {
        let Ok(entries) = std::fs::read_dir(dir.join(&rel)) else {
            continue;
        };
        for e in entries.flatten() {
            let name = e.file_name().to_string_lossy().into_owned();
            if name.starts_with(STAGING) {
                continue;
            }
            let rel = rel.join(&name);
            if e.file_type().unwrap().is_dir() {
                stack.push(rel);
            } else {
                out.push(rel);
            }
        }
    }
    out.sort();
    out
}

/// The staging folders in `dir` and the files each holds.
fn staged(dir: &Path) -> Vec<(PathBuf, Vec<PathBuf>)> {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return vec![];
    };
    entries
        .flatten()
        .filter(|e| e.file_name().to_string_lossy().starts_with(STAGING))
        .map(|e| (e.path(), products(&e.path())))
        .collect()
}

fn start_run(recipe: &Path, out: &Path) -> Child {
    Command::new(env!("CARGO_BIN_EXE_gravgrad"))
        .args(["--quiet", "run"])
        .arg(recipe)
        .arg("--out")
        .arg(out)
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::null())
        .spawn()
        .expect("gravgrad starts")
}

/// Kills `child` with SIGKILL once `when` holds (polled every 2 ms) and returns whether it was
/// still running then.
fn kill_when(mut child: Child, mut when: impl FnMut() -> bool) -> bool {
    loop {
        if child.try_wait().unwrap().is_some() {
            return false;
        }
        if when() {
            // `Child::kill` sends SIGKILL on Unix: no handler, no clean-up runs.
            child.kill().unwrap();
            child.wait().unwrap();
            return true;
        }
        std::thread::sleep(Duration::from_millis(2));
    }
}

/// Asserts that `out` holds exactly the products of `reference`, byte for byte (provenance.json
/// only parsed: it records when it was written), and no staging folder.
fn assert_same_products(out: &Path, reference: &Path) {
    assert_eq!(products(out), products(reference));
    for rel in products(reference) {
        let a = std::fs::read(out.join(&rel)).unwrap();
        if rel == Path::new("provenance.json") {
            serde_json::from_slice::<serde_json::Value>(&a).expect("provenance.json is whole JSON");
            continue;
        }
        let b = std::fs::read(reference.join(&rel)).unwrap();
        assert!(
            a == b,
            "{} differs from the uninterrupted run's",
            rel.display()
        );
    }
    assert!(staged(out).is_empty(), "staging folder left behind");
}

#[test]
fn killed_run_leaves_no_partial_product_and_the_rerun_completes() {
    let tmp = tempfile::tempdir().unwrap();
    let survey = copy_demo(tmp.path());
    let recipe = survey.join("recipe.toml");
    let reference = tmp.path().join("reference");
    let clock = Instant::now();
    run_to_end(&recipe, &reference);
    let full = clock.elapsed();
    let expected = products(&reference);
    for p in [
        "lines.parquet",
        "grids.nc",
        "survey.h5",
        "provenance.json",
        "qc/report.html",
    ] {
        assert!(expected.contains(&PathBuf::from(p)), "the run wrote no {p}");
    }

    // 1. Into an empty folder, killed while its products are being written (the lines are staged,
    //    the grids not yet): nothing but the staging folder may exist.
    let out = tmp.path().join("out");
    let child = start_run(&recipe, &out);
    let killed = kill_when(child, || {
        staged(&out)
            .iter()
            .any(|(_, files)| files.contains(&PathBuf::from("lines.parquet")))
    });
    assert!(killed, "the run finished before it could be killed");
    assert!(
        products(&out).is_empty(),
        "products outside the staging folder after SIGKILL: {:?}",
        products(&out)
    );
    assert!(
        !staged(&out).is_empty(),
        "the kill came before any product was staged"
    );

    // 2. Over a complete earlier run, killed at several points of its course: the earlier run's
    //    products stay whole and unchanged.
    run_to_end(&recipe, &out);
    assert_same_products(&out, &reference);
    let mut kills = 0;
    for fraction in [0.2, 0.5, 0.8, 0.95] {
        let child = start_run(&recipe, &out);
        let started = Instant::now();
        let at = full.mul_f64(fraction);
        if kill_when(child, || started.elapsed() >= at) {
            kills += 1;
        }
        // Whatever the moment: every product present is the earlier run's, byte for byte, or the
        // marker is gone (the kill came while products were being moved into place).
        for rel in products(&out) {
            let a = std::fs::read(out.join(&rel)).unwrap();
            if rel == Path::new("provenance.json") {
                serde_json::from_slice::<serde_json::Value>(&a).expect("whole provenance.json");
                continue;
            }
            assert!(
                a == std::fs::read(reference.join(&rel)).unwrap(),
                "{} changed by a killed run (killed at {fraction} of a full run)",
                rel.display()
            );
        }
    }
    assert!(
        kills >= 2,
        "only {kills} of 4 runs were still running when killed"
    );

    // 3. Running again completes, cleans the staging folders of the killed runs, and gives the
    //    uninterrupted run's products.
    run_to_end(&recipe, &out);
    assert_same_products(&out, &reference);
}
