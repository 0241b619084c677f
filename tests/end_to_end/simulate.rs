//! `gravgrad simulate`: same scenario, same bytes (with one thread or two); what it writes is read
//! back by our own readers and the check command; a bad scenario is located and exits 2.

use crate::{check_json, gravgrad, problems};
use std::path::Path;

fn simulate(out: &Path, threads: &str) {
    let o = gravgrad(&[
        "--quiet",
        "--threads",
        threads,
        "simulate",
        "tests/end_to_end/small_scenario.toml",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
}

/// Every file below `dir`, relative path → bytes.
fn files(dir: &Path) -> Vec<(String, Vec<u8>)> {
    let mut out = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else {
                out.push((
                    p.strip_prefix(dir).unwrap().display().to_string(),
                    std::fs::read(&p).unwrap(),
                ));
            }
        }
    }
    out.sort();
    out
}

#[test]
fn same_scenario_same_bytes_with_one_thread_or_two() {
    let (a, b) = (tempfile::tempdir().unwrap(), tempfile::tempdir().unwrap());
    simulate(a.path(), "1");
    simulate(b.path(), "2");
    let (fa, fb) = (files(a.path()), files(b.path()));
    let names: Vec<&str> = fa.iter().map(|f| f.0.as_str()).collect();
    assert_eq!(
        names,
        vec![
            "dem.tif",
            "flights/test-patch-f01.csv",
            "flights/test-patch-f01.parquet",
            "instrument.toml",
            "recipe.toml",
            "truth/calibration.toml",
            "truth/grid.parquet",
            "truth/lines.parquet",
            "truth/scenario.toml"
        ]
    );
    for ((na, ba), (_, bb)) in fa.iter().zip(&fb) {
        assert!(ba == bb, "{na} differs between runs");
    }
}

#[test]
fn what_simulate_writes_reads_back() {
    let dir = tempfile::tempdir().unwrap();
    simulate(dir.path(), "2");
    // The recipe, its instrument and the flight pass the check; CSV and Parquet carry the same table.
    let recipe = dir.path().join("recipe.toml");
    let (code, report, stderr) = check_json(&[recipe.to_str().unwrap()]);
    assert_eq!(code, 0, "{stderr}\n{report:#}");
    assert!(problems(&report).iter().all(|p| p["severity"] != "error"));
    let csv = dir.path().join("flights/test-patch-f01.csv");
    let pq = dir.path().join("flights/test-patch-f01.parquet");
    let expect = gravgrad_ingest::columns::Expectation::default();
    let a = gravgrad_ingest::read::read_flight_file(&csv, &expect);
    let b = gravgrad_ingest::read::read_flight_file(&pq, &expect);
    assert!(a.problems.is_empty() && b.problems.is_empty());
    let (ta, tb) = (&a.flights[0].table, &b.flights[0].table);
    assert_eq!(ta.n_rows(), tb.n_rows());
    for (name, va) in ta.iter() {
        let vb = tb.get(name).unwrap();
        assert!(
            va.iter().zip(vb).all(|(x, y)| x.to_bits() == y.to_bits()),
            "{name}: CSV and Parquet differ"
        );
    }
    // The DEM opens with its CRS: the scenario's origin (−27.35°, 134.10°) is in UTM zone 53 south.
    let dem = gravgrad_ingest::geotiff_reader::read_geotiff(&dir.path().join("dem.tif")).unwrap();
    assert_eq!(dem.epsg, Some(32753));
    assert_eq!(dem.dx, 200.0);
}

#[test]
fn a_bad_scenario_is_located() {
    let dir = tempfile::tempdir().unwrap();
    let bad = dir.path().join("bad.toml");
    std::fs::write(
        &bad,
        "layout = \"scenario/1\"\n[plan]\nline_lenght_m = 5.0\n",
    )
    .unwrap();
    let o = gravgrad(&[
        "simulate",
        bad.to_str().unwrap(),
        "--out",
        dir.path().join("o").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("key `plan.line_lenght_m`") && err.contains("line 3"),
        "{err}"
    );
    assert!(!dir.path().join("o").exists());
}

#[test]
fn the_recipe_check_reads_the_terrain_model_and_its_coverage() {
    let dir = tempfile::tempdir().unwrap();
    simulate(dir.path(), "2");
    let recipe = dir.path().join("recipe.toml");
    let text = std::fs::read_to_string(&recipe).unwrap();
    let dem_problems = |report: &serde_json::Value| -> Vec<serde_json::Value> {
        problems(report)
            .into_iter()
            .filter(|p| p["location"]["key"] == "terrain.dem")
            .collect()
    };
    // As simulated: the DEM spans the path plus the scenario's margin, which the recipe states.
    let (code, report, _) = check_json(&[recipe.to_str().unwrap()]);
    assert_eq!(code, 0);
    assert!(
        dem_problems(&report).is_empty(),
        "{:?}",
        dem_problems(&report)
    );
    // A margin wider than the DEM: an error naming the key, the DEM's extent and the one needed
    // (issue 16: a DEM that does not cover the survey plus the margin is refused, not warned of).
    std::fs::write(
        &recipe,
        text.replace("margin_m = 600.0", "margin_m = 50000.0"),
    )
    .unwrap();
    let (code, report, _) = check_json(&[recipe.to_str().unwrap()]);
    assert_eq!(code, 2);
    let w = dem_problems(&report);
    assert!(
        w.len() == 1
            && w[0]["severity"] == "error"
            && w[0]["message"].as_str().unwrap().contains("spans x")
            && w[0]["message"].as_str().unwrap().contains("needs x"),
        "{w:?}"
    );
    // No DEM at the path: an error naming the key, exit 2.
    std::fs::write(
        &recipe,
        text.replace("dem = \"dem.tif\"", "dem = \"missing.tif\""),
    )
    .unwrap();
    let (code, report, _) = check_json(&[recipe.to_str().unwrap()]);
    assert_eq!(code, 2);
    assert!(
        dem_problems(&report)
            .iter()
            .any(|p| p["severity"] == "error")
    );
}

/// Simulates the end-to-end scenario with `extra` put before its `[plan]` into `dir/survey`.
fn simulate_with(dir: &Path, extra: &str) -> std::path::PathBuf {
    let text = std::fs::read_to_string(crate::root().join("tests/end_to_end/small_scenario.toml"))
        .unwrap();
    let sc = dir.join("scenario.toml");
    std::fs::write(&sc, text.replace("[plan]", &format!("{extra}\n[plan]"))).unwrap();
    let out = dir.join("survey");
    crate::ok(&[
        "--quiet",
        "simulate",
        sc.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    out
}

#[test]
fn a_temperature_log_with_gaps_has_empty_csv_cells_read_as_missing() {
    let dir = tempfile::tempdir().unwrap();
    let out = simulate_with(dir.path(), "[instrument]\ntemperature_log = \"gaps\"\n");
    // Empty CSV cells in an optional channel are missing values (docs/formats.md): the same NaN as
    // the Parquet file holds, about 1 % of the rows as designed (docs/scenario.md).
    let expect = gravgrad_ingest::columns::Expectation::default();
    let csv = out.join("flights/test-patch-f01.csv");
    let a = gravgrad_ingest::read::read_flight_file(&csv, &expect);
    let b = gravgrad_ingest::read::read_flight_file(
        &out.join("flights/test-patch-f01.parquet"),
        &expect,
    );
    assert!(
        a.problems.is_empty() && b.problems.is_empty(),
        "{:?}",
        a.problems
    );
    let (ta, tb) = (
        a.flights[0].table.get("temp").unwrap(),
        b.flights[0].table.get("temp").unwrap(),
    );
    assert!(ta.iter().zip(tb).all(|(x, y)| x.to_bits() == y.to_bits()));
    let missing = ta.iter().filter(|t| t.is_nan()).count();
    assert_eq!(missing, ((ta.len() as f64 / 100.0).round() as usize).max(1));
    let text = std::fs::read_to_string(&csv).unwrap();
    assert!(!text.contains("NaN") && text.contains(",,"));
    // The check passes the log (the temperature is an optional channel).
    let (code, report, stderr) = check_json(&[out.join("recipe.toml").to_str().unwrap()]);
    assert_eq!(code, 0, "{stderr}\n{report:#}");
}

#[test]
fn a_calibration_flight_comes_with_its_recipes_and_truth_and_calibrates() {
    let dir = tempfile::tempdir().unwrap();
    let out = simulate_with(dir.path(), "[calibration_flight]\nleg_s = 40.0\n");
    for f in [
        "flights/test-patch-cal.parquet",
        "flights/test-patch-cal.csv",
        "recipe-calibration.toml",
        "recipe-with-calibration.toml",
    ] {
        assert!(out.join(f).is_file(), "{f}");
    }
    // The survey recipe reads the survey flights only, as it would without the calibration flight.
    let recipe = std::fs::read_to_string(out.join("recipe.toml")).unwrap();
    assert!(recipe.contains("flights = [\"flights/test-patch-f*.parquet\"]"));
    assert!(!recipe.contains("[calibration]"));

    // The truth: layout, one entry per flight with the calibration flight last, every pair.
    let truth: toml::Table =
        toml::from_str(&std::fs::read_to_string(out.join("truth/calibration.toml")).unwrap())
            .unwrap();
    assert_eq!(truth["layout"].as_str(), Some("calibration-truth/1"));
    assert_eq!(truth["linear_errors"].as_str(), Some("per_instrument"));
    let flights = truth["flight"].as_array().unwrap();
    assert_eq!(flights.len(), 2);
    assert_eq!(flights[0]["name"].as_str(), Some("test-patch-f01"));
    assert_eq!(flights[1]["name"].as_str(), Some("test-patch-cal"));
    assert_eq!(flights[1]["calibration_flight"].as_bool(), Some(true));
    let cal_pairs = flights[1]["pair"].as_array().unwrap();
    assert_eq!(cal_pairs.len(), 9);
    for p in cal_pairs {
        assert_eq!(p["quadratic"].as_array().unwrap().len(), 6);
    }

    // The calibration recipe estimates κ of the calibration flight: within five standard errors of
    // the injected truth, every pair and axis (no second-order or cross-axis errors here: the
    // estimator's model is the simulator's).
    crate::ok(&[
        "--quiet",
        "calibrate",
        out.join("recipe-calibration.toml").to_str().unwrap(),
    ]);
    let est: toml::Table =
        toml::from_str(&std::fs::read_to_string(out.join("calibration.toml")).unwrap()).unwrap();
    for (e, t) in est["pair"].as_array().unwrap().iter().zip(cal_pairs) {
        assert_eq!(e["id"], t["id"]);
        let v = |x: &toml::Value, k: &str| -> Vec<f64> {
            x[k].as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_float().unwrap())
                .collect()
        };
        let (k, se, truth_k) = (v(e, "kappa"), v(e, "kappa_se"), v(t, "kappa"));
        for c in 0..3 {
            assert!(
                (k[c] - truth_k[c]).abs() <= 5.0 * se[c],
                "{}: κ{c} {} vs truth {} (SE {})",
                t["id"],
                k[c],
                truth_k[c],
                se[c]
            );
        }
    }
    // And the survey runs with it.
    crate::run_to_end(
        &out.join("recipe-with-calibration.toml"),
        &dir.path().join("products"),
    );
}
