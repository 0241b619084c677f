//! A run killed with SIGKILL at any point leaves its output folder wholly the previous run or wholly
//! the new one — compared file by file with both complete runs — and running it again completes
//! with the products of an uninterrupted run, byte for byte.

use crate::{copy_demo, run_to_end};
use std::io::{BufRead, BufReader, Write};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

/// Infix of the folders a run builds beside its output folder (see `staging.rs`).
const BESIDE: &str = ".gravgrad-";

/// Every file under `dir` (relative paths, sorted).
fn products(dir: &Path) -> Vec<PathBuf> {
    let mut out = Vec::new();
    let mut stack = vec![PathBuf::new()];
    while let Some(rel) = stack.pop() {
        let Ok(entries) = std::fs::read_dir(dir.join(&rel)) else {
            continue;
        };
        for e in entries.flatten() {
            let rel = rel.join(e.file_name());
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

/// The folders a run built beside `out` and the files each holds.
fn beside(out: &Path) -> Vec<(PathBuf, Vec<PathBuf>)> {
    let parent = out.parent().unwrap();
    let prefix = format!(".{}{BESIDE}", out.file_name().unwrap().to_string_lossy());
    let Ok(entries) = std::fs::read_dir(parent) else {
        return vec![];
    };
    entries
        .flatten()
        .filter(|e| e.file_name().to_string_lossy().starts_with(&prefix))
        .map(|e| (e.path(), products(&e.path())))
        .collect()
}

fn start_run(recipe: &Path, out: &Path, pause: Option<&str>) -> Child {
    let mut c = Command::new(env!("CARGO_BIN_EXE_gravgrad"));
    c.args(["--quiet", "run"])
        .arg(recipe)
        .arg("--out")
        .arg(out)
        .stdin(Stdio::piped())
        .stdout(Stdio::null())
        .stderr(Stdio::piped());
    if let Some(step) = pause {
        c.env("GRAVGRAD_COMMIT_PAUSE", step);
    }
    c.spawn().expect("gravgrad starts")
}

/// Waits until `child` says it paused at its commit step; false when it ended first.
fn wait_for_pause(child: &mut Child) -> bool {
    let err = child.stderr.take().unwrap();
    for line in BufReader::new(err).lines() {
        if line.unwrap().contains("paused at commit step") {
            return true;
        }
    }
    false
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

/// `provenance.json` without what differs between two runs of the same inputs: the time it was
/// written and the stage timings.
fn provenance_without_times(bytes: &[u8]) -> serde_json::Value {
    let mut v: serde_json::Value =
        serde_json::from_slice(bytes).expect("provenance.json is whole JSON");
    v.as_object_mut().unwrap().remove("written_utc_unix_s");
    for f in v["flights"].as_array_mut().unwrap() {
        f.as_object_mut().unwrap().remove("timings_s");
    }
    v
}

/// Whether `out` holds exactly the files of `reference`, byte for byte (provenance.json without
/// its time stamp and timings); the first difference otherwise.
fn same_products(out: &Path, reference: &Path) -> Result<(), String> {
    let (a, b) = (products(out), products(reference));
    if a != b {
        return Err(format!("files {a:?} against {b:?}"));
    }
    for rel in b {
        let x = std::fs::read(out.join(&rel)).unwrap();
        let y = std::fs::read(reference.join(&rel)).unwrap();
        let equal = if rel == Path::new("provenance.json") {
            provenance_without_times(&x) == provenance_without_times(&y)
        } else {
            x == y
        };
        if !equal {
            return Err(format!("{} differs", rel.display()));
        }
    }
    Ok(())
}

fn assert_same_products(out: &Path, reference: &Path) {
    if let Err(e) = same_products(out, reference) {
        panic!(
            "{} is not the run in {}: {e}",
            out.display(),
            reference.display()
        );
    }
}

#[test]
fn killed_run_leaves_no_partial_product_and_the_rerun_completes() {
    let tmp = tempfile::tempdir().unwrap();
    let survey = copy_demo(tmp.path());
    let recipe = survey.join("recipe.toml");
    let reference = tmp.path().join("reference");
    run_to_end(&recipe, &reference);
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
    assert!(
        beside(&reference).is_empty(),
        "a folder left beside the output"
    );

    // Into a folder that does not exist, killed while its products are being written (the lines
    // are built, the grids not yet): the output folder does not exist either.
    let out = tmp.path().join("out");
    let child = start_run(&recipe, &out, None);
    let killed = kill_when(child, || {
        beside(&out)
            .iter()
            .any(|(_, files)| files.contains(&PathBuf::from("lines.parquet")))
    });
    assert!(killed, "the run finished before it could be killed");
    assert!(
        !out.exists(),
        "an output folder after SIGKILL: {:?}",
        products(&out)
    );
    assert!(!beside(&out).is_empty(), "the kill came before any product");

    // Running again completes, removes the killed run's folder and gives the uninterrupted run's
    // products.
    run_to_end(&recipe, &out);
    assert_same_products(&out, &reference);
    assert!(beside(&out).is_empty(), "the killed run's folder kept");
}

/// Two complete runs of one survey that differ in every way a rerun can: run A has both flights
/// and `lines.csv`; run B only the first flight and no CSV, so A's `lines.csv` and the second
/// flight's calibration are products B must not leave behind.
fn two_runs(dir: &Path) -> (PathBuf, PathBuf) {
    let survey = copy_demo(dir);
    let base = std::fs::read_to_string(survey.join("recipe.toml")).unwrap();
    assert!(
        base.contains("flights/kestrand-flats-demo-f*.parquet"),
        "{base}"
    );
    let a = survey.join("recipe_a.toml");
    let b = survey.join("recipe_b.toml");
    std::fs::write(&a, format!("{base}\n[output]\nlines_csv = true\n")).unwrap();
    std::fs::write(
        &b,
        base.replace(
            "flights/kestrand-flats-demo-f*.parquet",
            "flights/kestrand-flats-demo-f01.parquet",
        ),
    )
    .unwrap();
    (a, b)
}

/// The rerun of another recipe over a complete run, killed at every named step of its commit and
/// at many moments of its course: after each kill the output folder is, file by file, one of the
/// two complete runs.
#[test]
fn rerun_killed_at_any_point_leaves_wholly_the_previous_or_the_new_run() {
    let tmp = tempfile::tempdir().unwrap();
    let (recipe_a, recipe_b) = two_runs(tmp.path());
    let (ref_a, ref_b) = (tmp.path().join("ref_a"), tmp.path().join("ref_b"));
    let clock = Instant::now();
    run_to_end(&recipe_a, &ref_a);
    let time_a = clock.elapsed();
    let clock = Instant::now();
    run_to_end(&recipe_b, &ref_b);
    let time_b = clock.elapsed();
    assert!(products(&ref_a).contains(&PathBuf::from("lines.csv")));
    assert!(!products(&ref_b).contains(&PathBuf::from("lines.csv")));
    assert!(products(&ref_a).len() > products(&ref_b).len());

    let out = tmp.path().join("out");
    run_to_end(&recipe_a, &out);
    // Which run the folder holds now; each rerun is of the other recipe.
    let mut holds_a = true;
    let which = |out: &Path| -> Result<bool, String> {
        match (same_products(out, &ref_a), same_products(out, &ref_b)) {
            (Ok(()), _) => Ok(true),
            (_, Ok(())) => Ok(false),
            (Err(a), Err(b)) => Err(format!("neither run A ({a}) nor run B ({b})")),
        }
    };

    // At each named step of the commit (`aside` exists only where folders cannot be exchanged):
    // before the switch the folder is the previous run, after it the new one.
    for (step, switched) in [
        ("built", false),
        ("staged", false),
        ("carried", false),
        ("switched", true),
    ] {
        let recipe = if holds_a { &recipe_b } else { &recipe_a };
        let mut child = start_run(recipe, &out, Some(step));
        assert!(
            wait_for_pause(&mut child),
            "the run never paused at `{step}`"
        );
        child.kill().unwrap();
        child.wait().unwrap();
        let now = which(&out).unwrap_or_else(|e| panic!("killed at `{step}`: {e}"));
        assert_eq!(
            now != holds_a,
            switched,
            "killed at `{step}`: the folder holds run {}",
            if now { "A" } else { "B" }
        );
        holds_a = now;
    }

    // At moments spread over the whole run, its end included (fixed pseudo-random fractions of
    // the uninterrupted run's time, some past it: such a run may have finished).
    let mut state = 0x2545_f491_4f6c_dd1d_u64;
    let mut kills = 0;
    let mut outcomes = [0usize; 2];
    for _ in 0..14 {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        let fraction = 0.02 + 1.18 * (state % 10_000) as f64 / 10_000.0;
        let recipe = if holds_a { &recipe_b } else { &recipe_a };
        let child = start_run(recipe, &out, None);
        let started = Instant::now();
        let at = if holds_a { time_b } else { time_a }.mul_f64(fraction);
        if kill_when(child, || started.elapsed() >= at) {
            kills += 1;
        }
        let now =
            which(&out).unwrap_or_else(|e| panic!("killed at {fraction:.3} of a full run: {e}"));
        outcomes[usize::from(now != holds_a)] += 1;
        holds_a = now;
    }
    eprintln!(
        "{kills} of 14 reruns killed (the others finished); {} left the previous run, {} the new one",
        outcomes[0], outcomes[1]
    );
    assert!(
        kills >= 7,
        "only {kills} of 14 runs were still running when killed"
    );
    assert!(
        outcomes[0] > 0,
        "no kill left the previous run: {outcomes:?}"
    );

    // A run to the end after all of it removes the killed runs' folders and is the new run.
    let recipe = if holds_a { &recipe_b } else { &recipe_a };
    run_to_end(recipe, &out);
    assert_same_products(&out, if holds_a { &ref_b } else { &ref_a });
    assert!(beside(&out).is_empty(), "folders of killed runs kept");
}

/// An input replaced while the run reads it: the run stops with exit 2 naming the file, and the
/// output folder keeps the previous run whole.
#[test]
fn an_input_replaced_during_the_run_stops_it_before_the_commit() {
    let tmp = tempfile::tempdir().unwrap();
    let survey = copy_demo(tmp.path());
    let recipe = survey.join("recipe.toml");
    let reference = tmp.path().join("reference");
    run_to_end(&recipe, &reference);
    let out = tmp.path().join("out");
    run_to_end(&recipe, &out);
    let mut child = start_run(&recipe, &out, Some("built"));
    let err = child.stderr.take().unwrap();
    let mut lines = BufReader::new(err).lines();
    assert!(
        lines
            .by_ref()
            .any(|l| l.unwrap().contains("paused at commit step")),
        "the run never paused"
    );
    // The DEM replaced by another file (one byte changed) after the run read it.
    let dem = survey.join("dem.tif");
    let mut bytes = std::fs::read(&dem).unwrap();
    let last = bytes.len() - 1;
    bytes[last] ^= 1;
    std::fs::write(survey.join("dem.new"), &bytes).unwrap();
    std::fs::rename(survey.join("dem.new"), &dem).unwrap();
    child.stdin.take().unwrap().write_all(b"\n").unwrap();
    let rest: Vec<String> = lines.map(Result::unwrap).collect();
    let status = child.wait().unwrap();
    assert_eq!(status.code(), Some(2), "{rest:?}");
    let text = rest.join("\n");
    assert!(
        text.contains("dem.tif") && text.contains("changed while the run read it"),
        "{text}"
    );
    assert_same_products(&out, &reference);
    assert!(beside(&out).is_empty(), "the stopped run's folder kept");
}
