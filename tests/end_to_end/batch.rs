//! `gravgrad batch` and per-flight units: a batch of the two-flight demo gives the bytes of a plain
//! run, finished recipes are skipped, `--force` runs them again, a failing flight fails its recipe
//! with its log naming the problem, and `--emit slurm` writes the job array and its merge job.

use crate::{copy_demo, gravgrad, ok};
use std::path::Path;

/// The products compared byte for byte (provenance.json holds a time stamp; logs differ).
const PRODUCTS: [&str; 7] = [
    "lines.parquet",
    "grids.nc",
    "grids/gzz.tif",
    "grids/gz.tif",
    "maps/gzz.png",
    "survey.h5",
    "calibration/kestrand-flats-demo-f02.toml",
];

fn assert_same_products(a: &Path, b: &Path) {
    for f in PRODUCTS {
        let (x, y) = (
            std::fs::read(a.join(f)).unwrap_or_else(|e| panic!("{}: {e}", a.join(f).display())),
            std::fs::read(b.join(f)).unwrap_or_else(|e| panic!("{}: {e}", b.join(f).display())),
        );
        assert!(
            x == y,
            "{f} differs between {} and {}",
            a.display(),
            b.display()
        );
    }
}

fn batch(args: &[&str]) -> (i32, String, String) {
    let mut all = vec!["batch"];
    all.extend_from_slice(args);
    let o = gravgrad(&all);
    (
        o.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&o.stdout).into_owned(),
        String::from_utf8_lossy(&o.stderr).into_owned(),
    )
}

/// The summary rows `(flight, status)` of a batch's table.
fn rows(table: &str) -> Vec<(String, String)> {
    table
        .lines()
        .skip(1)
        .map(|l| {
            let cells: Vec<&str> = l
                .split("  ")
                .map(str::trim)
                .filter(|c| !c.is_empty())
                .collect();
            (cells[1].to_string(), cells[2].to_string())
        })
        .collect()
}

#[test]
fn a_batch_of_two_flights_gives_the_bytes_of_a_plain_run_and_resumes() {
    let tmp = tempfile::tempdir().unwrap();
    let survey = copy_demo(tmp.path());
    let recipe = survey.join("recipe.toml");
    let r = recipe.to_str().unwrap();
    let products = survey.join("products");
    // A plain run computes both flights; its products are set aside.
    ok(&["--quiet", "run", r]);
    let plain = tmp.path().join("plain");
    std::fs::rename(&products, &plain).unwrap();

    let (code, table, stderr) = batch(&[r, "--jobs", "2"]);
    assert_eq!(code, 0, "{table}\n{stderr}");
    assert_eq!(
        rows(&table),
        [
            ("kestrand-flats-demo-f01", "done"),
            ("kestrand-flats-demo-f02", "done"),
            ("(merge)", "done"),
        ]
        .map(|(a, b)| (a.to_string(), b.to_string()))
    );
    for f in ["kestrand-flats-demo-f01", "kestrand-flats-demo-f02"] {
        assert!(products.join(format!("flights/{f}.h5")).is_file());
        assert!(products.join(format!("logs/flight-{f}.log")).is_file());
    }
    // The merge took both flights from their stored results, and the products are the same bytes.
    let merge_log = std::fs::read_to_string(products.join("logs/merge.log")).unwrap();
    assert_eq!(merge_log.matches("reused").count(), 2, "{merge_log}");
    assert_same_products(&plain, &products);

    // Finished: skipped, nothing rewritten.
    let provenance = std::fs::read(products.join("provenance.json")).unwrap();
    let (code, table, stderr) = batch(&[r]);
    assert_eq!(code, 0, "{table}\n{stderr}");
    assert!(
        rows(&table).iter().all(|(_, s)| s == "skipped (finished)"),
        "{table}"
    );
    assert_eq!(
        std::fs::read(products.join("provenance.json")).unwrap(),
        provenance
    );

    // Forced: run again, same products.
    let (code, table, stderr) = batch(&[
        r,
        "--force",
        "--logs",
        tmp.path().join("logs").to_str().unwrap(),
    ]);
    assert_eq!(code, 0, "{table}\n{stderr}");
    assert!(rows(&table).iter().all(|(_, s)| s == "done"), "{table}");
    assert!(tmp.path().join("logs/r01-merge.log").is_file());
    assert_same_products(&plain, &products);

    // A changed recipe is not finished any more.
    let mut text = std::fs::read_to_string(&recipe).unwrap();
    text.push_str("\n# changed\n");
    std::fs::write(&recipe, text).unwrap();
    let (_, table, _) = batch(&[
        r,
        "--emit",
        "slurm",
        "--out-script",
        tmp.path().join("s.sh").to_str().unwrap(),
    ]);
    assert!(table.is_empty(), "{table}");
    let script = std::fs::read_to_string(tmp.path().join("s.sh")).unwrap();
    assert!(script.contains("--array=0-1 "), "{script}");
}

#[test]
fn a_failing_flight_fails_its_recipe_and_its_log_says_why() {
    let tmp = tempfile::tempdir().unwrap();
    let survey = copy_demo(tmp.path());
    let bad = survey.join("flights/kestrand-flats-demo-f02.parquet");
    std::fs::write(&bad, b"not a parquet file").unwrap();
    let (code, table, stderr) =
        batch(&[survey.join("recipe.toml").to_str().unwrap(), "--jobs", "2"]);
    assert_eq!(code, 1, "{table}\n{stderr}");
    let r = rows(&table);
    assert_eq!(
        r[1],
        (
            "kestrand-flats-demo-f02".to_string(),
            "failed (exit 2)".to_string()
        ),
        "{table}"
    );
    assert_eq!(
        r[2],
        (
            "(merge)".to_string(),
            "not run (a flight failed)".to_string()
        ),
        "{table}"
    );
    let log =
        std::fs::read_to_string(survey.join("products/logs/flight-kestrand-flats-demo-f02.log"))
            .unwrap();
    assert!(log.contains("kestrand-flats-demo-f02.parquet"), "{log}");
    assert!(!survey.join("products/provenance.json").exists());
}

#[test]
fn bad_arguments_and_unreadable_recipes_stop_before_anything_runs() {
    let (code, _, stderr) = batch(&["no/such/recipe.toml"]);
    assert_eq!(code, 2, "{stderr}");
    assert!(stderr.contains("no/such/recipe.toml"), "{stderr}");
    let (code, _, stderr) = batch(&["data/demo/recipe.toml", "--jobs", "0"]);
    assert_eq!(code, 2, "{stderr}");
    assert!(stderr.contains("--jobs"), "{stderr}");
    let o = gravgrad(&[
        "run",
        "data/demo/recipe.toml",
        "--flight",
        "no-such-flight",
        "--out",
        "/nonexistent/x",
    ]);
    assert_eq!(o.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert!(
        stderr.contains("no-such-flight") && stderr.contains("kestrand-flats-demo-f02"),
        "{stderr}"
    );
}

#[test]
fn the_slurm_script_holds_one_array_task_per_flight_and_a_dependent_merge() {
    let tmp = tempfile::tempdir().unwrap();
    let a = copy_demo(&tmp.path().join("a"));
    let b = copy_demo(&tmp.path().join("b"));
    let script = tmp.path().join("jobs.sh");
    ok(&[
        "--quiet",
        "--threads",
        "2",
        "batch",
        a.join("recipe.toml").to_str().unwrap(),
        b.join("recipe.toml").to_str().unwrap(),
        "--emit",
        "slurm",
        "--out-script",
        script.to_str().unwrap(),
    ]);
    let text = std::fs::read_to_string(&script).unwrap();
    // The embedded lists: four flight tasks, two merges, absolute paths.
    let list = |name: &str| -> Vec<String> {
        let start = text
            .find(&format!("\n{name}=(\n"))
            .unwrap_or_else(|| panic!("{name}: {text}"));
        text[start + name.len() + 4..]
            .lines()
            .take_while(|l| *l != ")")
            .map(|l| l.trim().trim_matches('\'').to_string())
            .collect()
    };
    let names = list("FLIGHT_NAME");
    assert_eq!(
        names,
        ["kestrand-flats-demo-f01", "kestrand-flats-demo-f02"].repeat(2)
    );
    let recipes = list("FLIGHT_RECIPE");
    assert_eq!(recipes.len(), 4);
    assert!(
        recipes
            .iter()
            .all(|r| Path::new(r).is_absolute() && Path::new(r).is_file())
    );
    assert_eq!(list("MERGE_RECIPE").len(), 2);
    let exe = text
        .lines()
        .find_map(|l| l.strip_prefix("GRAVGRAD="))
        .unwrap()
        .trim_matches('\'');
    assert!(
        Path::new(exe).is_absolute() && Path::new(exe).is_file(),
        "{exe}"
    );
    assert!(text.contains("#SBATCH --cpus-per-task=2\n"), "{text}");
    let array = text
        .lines()
        .find(|l| l.contains("sbatch --parsable --array="))
        .unwrap();
    assert!(array.contains("--array=0-3 "), "{array}");
    let merge = text.lines().find(|l| l.contains("--dependency=")).unwrap();
    assert!(merge.contains("--dependency=afterok:\"$array\""), "{merge}");
    let syntax = std::process::Command::new("bash")
        .arg("-n")
        .arg(&script)
        .status()
        .unwrap();
    assert!(syntax.success());
}
