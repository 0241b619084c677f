//! Hostile and broken inputs (issue 16): recipe values and sizes refused before any work, terrain
//! never silently wrong, `check` and `run` agreeing about every input, gaps splitting lines, polar
//! latitudes refused. Each case: a located error with exit 2, or processing with a warning that
//! says what was done, each within 60 s.

use crate::run::BASE;
use crate::{check_json, gravgrad, ok, problems, simulate_survey};
use gravgrad_core::raster::Raster;
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

const SMALL: &str = include_str!("small_scenario.toml");

/// A simulated survey in `dir/survey`; the recipe's path.
fn survey(dir: &Path, scenario: &str) -> PathBuf {
    simulate_survey(dir, scenario, "");
    dir.join("survey/recipe.toml")
}

/// The recipe with `from` replaced by `to` (asserting `from` is there), written beside it as
/// `name`; its path.
fn variant(recipe: &Path, name: &str, from: &str, to: &str) -> PathBuf {
    let text = std::fs::read_to_string(recipe).unwrap();
    assert!(text.contains(from), "`{from}` in {text}");
    let out = recipe.with_file_name(name);
    std::fs::write(&out, text.replacen(from, to, 1)).unwrap();
    out
}

/// `gravgrad check --json` and `gravgrad run` on `recipe`: both must refuse it with exit 2, each
/// within `limit`, and name every one of `words` (check in its report, run on stderr).
fn both_refuse(recipe: &Path, words: &[&str], limit: Duration) {
    let r = recipe.to_str().unwrap();
    let clock = Instant::now();
    let (code, report, _) = check_json(&[r]);
    let check_time = clock.elapsed();
    let text = serde_json::to_string(&problems(&report)).unwrap();
    assert_eq!(code, 2, "check {r}: {text}");
    let out = recipe.with_file_name("products-refused");
    let clock = Instant::now();
    let o = gravgrad(&["--quiet", "run", r, "--out", out.to_str().unwrap()]);
    let run_time = clock.elapsed();
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "run {r}: {stderr}");
    for w in words {
        assert!(text.contains(w), "check of {r} does not name `{w}`: {text}");
        assert!(
            stderr.contains(w),
            "run of {r} does not name `{w}`: {stderr}"
        );
    }
    assert!(
        check_time < limit && run_time < limit,
        "{r}: check {check_time:?}, run {run_time:?}"
    );
    assert!(!out.join("lines.parquet").exists(), "nothing is written");
}

#[test]
fn recipe_values_and_sizes_past_their_limits_are_refused_before_any_work() {
    let dir = tempfile::tempdir().unwrap();
    let recipe = survey(dir.path(), BASE);
    let limit = Duration::from_secs(20);
    for (name, from, to, words) in [
        (
            "fine.toml",
            "cell_m = 50.0",
            "cell_m = 1.0",
            &["grid.cell_m", "nodes", "the limit is 500000"][..],
        ),
        (
            "max-nodes.toml",
            "cell_m = 50.0",
            "cell_m = 50.0\nmax_nodes = 100000000",
            &["grid.max_nodes", "from 1000 to 2000000 nodes"][..],
        ),
        (
            "finer.toml",
            "cell_m = 50.0",
            "cell_m = 0.1",
            &["grid.cell_m", "from 1 to 10000 m"][..],
        ),
        (
            "blank.toml",
            "cell_m = 50.0",
            "cell_m = 50.0\nblanking_m = 1e300",
            &["grid.blanking_m", "at most 100000 m"][..],
        ),
        (
            "wide-blank.toml",
            "cell_m = 50.0",
            "cell_m = 50.0\nblanking_m = 50000.0",
            &["grid.blanking_m", "nodes"][..],
        ),
        (
            "cutoff.toml",
            "[level]",
            "[filter]\ncutoff_wavelength_m = 1e12\n\n[level]",
            &["filter.cutoff_wavelength_m", "from 10 to 100000 m"][..],
        ),
        (
            "density.toml",
            "density_kg_m3 = 2670.0",
            "density_kg_m3 = 1e300",
            &["terrain.density_kg_m3", "from 500 to 5000 kg/m³"][..],
        ),
        (
            "margin.toml",
            "margin_m = 1500.0",
            "margin_m = 150000.0",
            &["terrain.dem", "dem.tif", "spans x", "short by"][..],
        ),
    ] {
        both_refuse(&variant(&recipe, name, from, to), words, limit);
    }
}

/// The survey's DEM, changed by `edit`, written as `name` beside the recipe; the recipe naming it.
fn with_dem(recipe: &Path, name: &str, edit: impl FnOnce(&mut Raster)) -> PathBuf {
    let folder = recipe.parent().unwrap();
    let mut dem =
        gravgrad_ingest::geotiff_reader::read_geotiff(&folder.join("dem.tif")).expect("dem");
    edit(&mut dem);
    gravgrad_grid::geotiff::write_geotiff(
        &dem,
        &folder.join(name),
        &gravgrad_grid::geotiff::WriteOptions {
            sample: gravgrad_grid::geotiff::SampleType::Float64,
            ..Default::default()
        },
    )
    .unwrap();
    variant(
        recipe,
        &format!("{name}.toml"),
        "dem = \"dem.tif\"",
        &format!("dem = \"{name}\""),
    )
}

#[test]
fn terrain_is_never_silently_wrong() {
    let dir = tempfile::tempdir().unwrap();
    let recipe = survey(dir.path(), SMALL);
    let limit = Duration::from_secs(20);
    // One cell of 1e30 m in the middle: refused with its cell.
    let huge = with_dem(&recipe, "huge.tif", |d| {
        let k = (d.ny / 2) * d.nx + d.nx / 2;
        d.values[k] = 1e30;
    });
    both_refuse(&huge, &["huge.tif", "1e30", "row "], limit);
    // The DEM moved 100 km east: it does not cover the survey.
    let far = with_dem(&recipe, "far.tif", |d| d.x_min += 100_000.0);
    both_refuse(&far, &["far.tif", "spans x", "short by"], limit);
    // A geographic DEM: refused by check as by run.
    let geo = with_dem(&recipe, "geo.tif", |d| {
        *d = Raster::new(d.nx, d.ny, (134.0, -27.0), (0.001, 0.001), d.values.clone())
            .unwrap()
            .with_epsg(4326);
    });
    both_refuse(&geo, &["geo.tif", "EPSG:4326", "reproject"], limit);

    // Holes under the survey: NaN cells and an undeclared -9999 are filled, with a warning that
    // names them and the method, by check and by run.
    let holes = with_dem(&recipe, "holes.tif", |d| {
        let (c, r) = (d.nx / 2, d.ny / 2);
        d.values[r * d.nx + c] = f64::NAN;
        d.values[r * d.nx + c + 1] = -9999.0;
    });
    let (code, report, _) = check_json(&[holes.to_str().unwrap()]);
    let text = serde_json::to_string(&problems(&report)).unwrap();
    assert_eq!(code, 0, "{text}");
    assert!(
        text.contains("2 cells under the survey plus the margin have no elevation")
            && text.contains("inverse-distance")
            && text.contains("-9999 or -32768"),
        "{text}"
    );
    let out = dir.path().join("holes-products");
    let o = gravgrad(&[
        "--quiet",
        "run",
        holes.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(0), "{stderr}");
    assert!(
        stderr.contains("were filled by inverse-distance"),
        "{stderr}"
    );
}

/// The survey's first flight log, changed by `edit` (header, rows; CSV cells), written beside the
/// recipe as `name`; a recipe reading the CSV logs (`name` for the first flight).
fn with_flight(
    recipe: &Path,
    name: &str,
    edit: impl FnOnce(&[String], &mut Vec<Vec<String>>),
) -> PathBuf {
    let flights = recipe.parent().unwrap().join("flights");
    let mut csvs: Vec<PathBuf> = std::fs::read_dir(&flights)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|e| e == "csv"))
        .collect();
    csvs.sort();
    let text = std::fs::read_to_string(&csvs[0]).unwrap();
    let mut lines = text.lines();
    let mut head = Vec::new();
    let mut comments = String::new();
    for l in lines.by_ref() {
        if l.starts_with('#') {
            comments.push_str(l);
            comments.push('\n');
        } else {
            head = l.split(',').map(String::from).collect();
            break;
        }
    }
    let mut rows: Vec<Vec<String>> = lines
        .map(|l| l.split(',').map(String::from).collect())
        .collect();
    edit(&head, &mut rows);
    let mut out = comments;
    out.push_str(&head.join(","));
    out.push('\n');
    for r in &rows {
        out.push_str(&r.join(","));
        out.push('\n');
    }
    let sub = recipe.parent().unwrap().join(name);
    std::fs::create_dir_all(&sub).unwrap();
    std::fs::write(sub.join("flight.csv"), out).unwrap();
    let text = std::fs::read_to_string(recipe).unwrap();
    let start = text.find("flights = [").unwrap();
    let end = start + text[start..].find(']').unwrap() + 1;
    let new = format!(
        "{}flights = [\"{name}/flight.csv\"]{}",
        &text[..start],
        &text[end..]
    );
    let path = recipe.with_file_name(format!("{name}.toml"));
    std::fs::write(&path, new).unwrap();
    path
}

fn column(head: &[String], name: &str) -> usize {
    head.iter()
        .position(|h| h == name)
        .unwrap_or_else(|| panic!("no `{name}` in {head:?}"))
}

#[test]
fn check_and_run_agree_about_every_flight() {
    let dir = tempfile::tempdir().unwrap();
    let recipe = survey(dir.path(), SMALL);
    let limit = Duration::from_secs(20);
    // No line: every line number 0.
    let none = with_flight(&recipe, "nolines", |h, rows| {
        let c = column(h, "line");
        for r in rows.iter_mut() {
            r[c] = "0".into();
        }
    });
    both_refuse(&none, &["flight.csv", "no survey line"], limit);
    // Two rows.
    let two = with_flight(&recipe, "tworows", |_, rows| rows.truncate(2));
    both_refuse(&two, &["flight.csv", "2 rows"], limit);
    // At 89.95° N: UTM is not defined there.
    let polar = with_flight(&recipe, "polar", |h, rows| {
        let c = column(h, "lat");
        for r in rows.iter_mut() {
            r[c] = "89.95".into();
        }
    });
    both_refuse(&polar, &["flight.csv", "lat", "89.95", "84°N"], limit);
    // Empty clearance cells: check says what run does, and run does it.
    let clear = with_flight(&recipe, "clearance", |h, rows| {
        let c = column(h, "clearance");
        for r in rows.iter_mut().skip(100).take(30) {
            r[c] = String::new();
        }
    });
    let (code, report, _) = check_json(&[clear.to_str().unwrap()]);
    let text = serde_json::to_string(&problems(&report)).unwrap();
    assert_eq!(code, 0, "{text}");
    assert!(
        text.contains("30 of") && text.contains("clearance") && text.contains("the run"),
        "{text}"
    );
    let out = dir.path().join("clearance-products");
    ok(&[
        "--quiet",
        "run",
        clear.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
}

#[test]
fn a_gap_splits_the_line_and_its_pieces_are_filtered_judged_and_gridded() {
    let dir = tempfile::tempdir().unwrap();
    let recipe = survey(dir.path(), BASE);
    // 20 s (200 samples at 10 Hz) cut out of the middle of the first 3 km line.
    let mut cut_line = String::new();
    let gapped = with_flight(&recipe, "gap", |h, rows| {
        let c = column(h, "line");
        let first = rows.iter().position(|r| r[c] != "0").unwrap();
        let last = rows[first..]
            .iter()
            .position(|r| r[c] != rows[first][c])
            .unwrap()
            + first;
        let mid = (first + last) / 2;
        cut_line = rows[first][c].clone();
        rows.drain(mid - 100..mid + 100);
    });
    let out = dir.path().join("gap-products");
    let o = gravgrad(&[
        "--quiet",
        "run",
        gapped.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(0), "{stderr}");
    // QC judges the line with its gap; the grids are written.
    let qc = std::fs::read_to_string(out.join("qc/lines.csv")).unwrap();
    let mut rows = qc.lines().filter(|l| !l.starts_with('#'));
    let head: Vec<&str> = rows.next().unwrap().split(',').collect();
    let (li, gi) = (
        head.iter().position(|h| *h == "line").unwrap(),
        head.iter().position(|h| *h == "longest_gap_s").unwrap(),
    );
    let row: Vec<&str> = rows
        .map(|r| r.split(',').collect::<Vec<_>>())
        .find(|r| r[li] == cut_line)
        .unwrap_or_else(|| panic!("line {cut_line} not in {qc}"));
    let gap: f64 = row[gi].parse().unwrap();
    // 201 intervals of 0.1 s between the samples either side of the cut.
    assert!((gap - 20.1).abs() < 0.05, "longest gap {gap} s");
    assert!(out.join("grids.nc").exists());
    // The filtered stage is finite on both sides of the gap.
    let filtered = crate::run::parquet_f64(&out.join("lines.parquet"), "filtered_gzz");
    let line = crate::run::parquet_column(&out.join("lines.parquet"), "line", |row, k| {
        parquet::record::RowAccessor::get_long(row, k).unwrap()
    });
    let on: Vec<f64> = filtered
        .iter()
        .zip(&line)
        .filter(|(_, l)| l.to_string() == cut_line)
        .map(|(v, _)| *v)
        .collect();
    assert!(
        on.len() > 100 && on.iter().all(|v| v.is_finite()),
        "{}",
        on.len()
    );
}

#[test]
fn the_simulator_refuses_scenarios_past_its_limits() {
    let dir = tempfile::tempdir().unwrap();
    for (extra, key) in [
        ("[terrain]\ncell_m = 0.001\n", "terrain.cell_m"),
        ("[plan]\nlines = 1000000000\n", "plan.lines"),
        ("[plan]\nsample_rate_hz = 1e7\n", "plan.sample_rate_hz"),
    ] {
        let text = format!("layout = \"scenario/1\"\n{extra}");
        let sc = dir.path().join("scenario.toml");
        std::fs::write(&sc, text).unwrap();
        let clock = Instant::now();
        let o = gravgrad(&[
            "--quiet",
            "simulate",
            sc.to_str().unwrap(),
            "--out",
            dir.path().join("out").to_str().unwrap(),
        ]);
        let stderr = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(2), "{extra}: {stderr}");
        assert!(stderr.contains(key), "{extra}: {stderr}");
        assert!(clock.elapsed() < Duration::from_secs(5), "{extra}");
    }
}

/// A temperature log with empty cells: `check` of the recipe says what the run's calibration will
/// do with the channel, from the same screen the run uses, and the run says the same.
#[test]
fn check_says_what_the_run_does_with_a_holed_temperature_log() {
    let dir = tempfile::tempdir().unwrap();
    let recipe = survey(
        dir.path(),
        &format!("{SMALL}\n[instrument]\ntemperature_log = \"gaps\"\n"),
    );
    let (code, report, _) = check_json(&[recipe.to_str().unwrap()]);
    let text = serde_json::to_string(&problems(&report)).unwrap();
    assert_eq!(code, 0, "{text}");
    let said: Vec<String> = problems(&report)
        .iter()
        .filter(|p| p["location"]["column"] == "temp")
        .map(|p| p["message"].as_str().unwrap().to_string())
        .collect();
    assert!(
        !said.is_empty()
            && said
                .iter()
                .all(|m| m.starts_with("the run will do this: `temp`")),
        "{text}"
    );
    let out = dir.path().join("products");
    let o = gravgrad(&[
        "run",
        recipe.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(0), "{stderr}");
    // The run's own note (the calibration's) says the same of the channel as the check did.
    let note = said[0].trim_start_matches("the run will do this: ");
    let head = &note[..note.find(':').unwrap_or(note.len())];
    assert!(stderr.contains(head), "run does not say `{head}`: {stderr}");
}

/// A grid past the default limit is refused naming `grid.cell_m` and `grid.max_nodes`; raising
/// `grid.max_nodes` deliberately lets the same recipe through `check` (which sizes, not grids).
#[test]
fn grid_max_nodes_raises_the_grid_limit_deliberately() {
    let dir = tempfile::tempdir().unwrap();
    let recipe = survey(dir.path(), BASE);
    // 2 m cells on four 3 km lines 200 m apart plus the blanking distance: about 1.3 million nodes.
    let fine = variant(&recipe, "fine.toml", "cell_m = 50.0", "cell_m = 2.0");
    let (code, report, _) = check_json(&[fine.to_str().unwrap()]);
    assert_eq!(code, 2, "{report}");
    let text = report.to_string();
    assert!(
        text.contains("grid.cell_m") && text.contains("raise `grid.max_nodes`"),
        "{text}"
    );
    let raised = variant(
        &recipe,
        "raised.toml",
        "cell_m = 50.0",
        "cell_m = 2.0\nmax_nodes = 1500000",
    );
    let (code, report, _) = check_json(&[raised.to_str().unwrap()]);
    assert_eq!(code, 0, "{report}");
}
