//! Calibration that does not hurt the data (issue 15): degenerate optional channels, error-free
//! surveys in calm and turbulent air. Truth: the same survey processed without calibration (the
//! simulator's instrument has no calibration error here), or without the degenerate channel.

use crate::{gravgrad, ok, simulate_survey};
use std::path::Path;

/// Ten 3 km lines and a tie over two bodies and a hill; 10 Hz. `[dynamics]` and `[instrument]` are
/// appended by each test.
const SURVEY: &str = r#"
layout = "scenario/1"
name = "calibration test"
seed = 43

[[geology.sphere]]
north_m = 300.0
east_m = 1500.0
depth_m = 250.0
radius_m = 150.0
density_kg_m3 = 400.0

[[geology.prism]]
north_m = [100.0, 400.0]
east_m = [600.0, 1000.0]
depth_m = [100.0, 400.0]
density_kg_m3 = 300.0

[terrain]
cell_m = 50.0
margin_m = 1500.0
rough_rms_m = 3.0

[[terrain.hill]]
north_m = 250.0
east_m = 2200.0
height_m = 60.0
width_m = 400.0

[plan]
line_length_m = 3000.0
line_spacing_m = 200.0
lines = 10
ties = 1
sample_rate_hz = 10.0
turn_rate_deg_s = 3.0
"#;

/// No calibration error in the instrument (scale, misalignment, bias, drift, temperature all
/// zero); the pairs' white noise and the navigation's errors stay.
const NO_CALIBRATION_ERROR: &str = r#"
[instrument]
scale_rms = 0.0
misalignment_rms_rad = 0.0
bias_rms_m_s2 = 0.0
drift_rms_m_s2_h = 0.0
temperature_coefficient_rms_m_s2_c = 0.0
"#;

/// Every f64 column `name` of one of our Parquet tables.
fn parquet_f64(path: &Path, name: &str) -> Vec<f64> {
    use parquet::file::reader::{FileReader, SerializedFileReader};
    use parquet::record::RowAccessor;
    let r = SerializedFileReader::new(std::fs::File::open(path).unwrap()).unwrap();
    let schema = r.metadata().file_metadata().schema_descr_ptr();
    let k = (0..schema.num_columns())
        .find(|&i| schema.column(i).name() == name)
        .unwrap_or_else(|| panic!("no column {name}"));
    r.get_row_iter(None)
        .unwrap()
        .map(|row| row.unwrap().get_double(k).unwrap())
        .collect()
}

fn parquet_i64(path: &Path, name: &str) -> Vec<i64> {
    use parquet::file::reader::{FileReader, SerializedFileReader};
    use parquet::record::RowAccessor;
    let r = SerializedFileReader::new(std::fs::File::open(path).unwrap()).unwrap();
    let schema = r.metadata().file_metadata().schema_descr_ptr();
    let k = (0..schema.num_columns())
        .find(|&i| schema.column(i).name() == name)
        .unwrap_or_else(|| panic!("no column {name}"));
    r.get_row_iter(None)
        .unwrap()
        .map(|row| row.unwrap().get_long(k).unwrap())
        .collect()
}

const COMPONENTS: [&str; 6] = ["gxx", "gxy", "gxz", "gyy", "gyz", "gzz"];

/// The largest RMS over survey and tie lines and components of the difference of `stage` between
/// two runs, E; with `demean`, each line's mean difference is taken out first.
fn worst_line_difference(a: &Path, b: &Path, stage: &str, demean: bool) -> f64 {
    let line = parquet_i64(&a.join("lines.parquet"), "line");
    assert_eq!(line, parquet_i64(&b.join("lines.parquet"), "line"));
    let mut worst = 0.0f64;
    for c in COMPONENTS {
        let name = format!("{stage}_{c}");
        let (x, y) = (
            parquet_f64(&a.join("lines.parquet"), &name),
            parquet_f64(&b.join("lines.parquet"), &name),
        );
        let mut numbers: Vec<i64> = line.iter().copied().filter(|l| *l > 0).collect();
        numbers.sort_unstable();
        numbers.dedup();
        for l in numbers {
            let d: Vec<f64> = (0..x.len())
                .filter(|&i| line[i] == l && x[i].is_finite() && y[i].is_finite())
                .map(|i| x[i] - y[i])
                .collect();
            let mean = if demean {
                d.iter().sum::<f64>() / d.len() as f64
            } else {
                0.0
            };
            let rms = (d.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / d.len() as f64).sqrt();
            worst = worst.max(rms);
        }
    }
    worst
}

/// Runs `recipe` into `out`, not quiet; asserts exit 0 and returns what it printed on stderr.
fn run_logged(recipe: &Path, out: &Path) -> String {
    let o = gravgrad(&[
        "run",
        recipe.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    let err = String::from_utf8_lossy(&o.stderr).into_owned();
    assert_eq!(o.status.code(), Some(0), "{err}");
    err
}

/// A copy of the survey's recipe reading the CSV flights of `folder` and calibrating by `mode`.
fn recipe_variant(survey: &Path, name: &str, folder: &str, mode: &str) -> std::path::PathBuf {
    let text = std::fs::read_to_string(survey.join("recipe.toml"))
        .unwrap()
        .replace("flights/*.parquet", &format!("{folder}/*.csv"));
    let path = survey.join(format!("{name}.toml"));
    std::fs::write(&path, format!("{text}\n[calibration]\nmode = \"{mode}\"\n")).unwrap();
    path
}

/// The survey's CSV flight with its `temp` column rewritten by `cell` (row index, value → the
/// cell's text; `None` drops the column), into `survey/<folder>/`.
fn flight_variant(survey: &Path, folder: &str, cell: &dyn Fn(usize, &str) -> Option<String>) {
    std::fs::create_dir_all(survey.join(folder)).unwrap();
    for entry in std::fs::read_dir(survey.join("flights")).unwrap() {
        let p = entry.unwrap().path();
        if p.extension().is_none_or(|e| e != "csv") {
            continue;
        }
        let text = std::fs::read_to_string(&p).unwrap();
        let mut out = String::new();
        let mut k = None;
        let mut row = 0;
        for line in text.lines() {
            if line.starts_with('#') {
                out.push_str(line);
                out.push('\n');
                continue;
            }
            let cells: Vec<&str> = line.split(',').collect();
            let kept: Vec<String> = match k {
                None => {
                    k = cells.iter().position(|c| *c == "temp");
                    cells
                        .iter()
                        .enumerate()
                        .filter(|(i, _)| Some(*i) != k || cell(0, "probe").is_some())
                        .map(|(_, c)| c.to_string())
                        .collect()
                }
                Some(t) => {
                    let r = row;
                    row += 1;
                    cells
                        .iter()
                        .enumerate()
                        .filter_map(|(i, c)| {
                            if i == t {
                                cell(r, c)
                            } else {
                                Some(c.to_string())
                            }
                        })
                        .collect()
                }
            };
            out.push_str(&kept.join(","));
            out.push('\n');
        }
        std::fs::write(survey.join(folder).join(p.file_name().unwrap()), out).unwrap();
    }
}

/// A thermostatted sensor logging its set-point, and a `temp` column with a few empty and NaN
/// cells, on a survey whose instrument has a real temperature coefficient: the run completes; in
/// both cases the term is dropped, a warning says why, and the result equals the run without the
/// column within 0.01 E, before and after the product's low-pass and after levelling.
#[test]
fn a_constant_or_holed_temperature_column_drops_its_term_and_says_why() {
    let tmp = tempfile::tempdir().unwrap();
    simulate_survey(
        tmp.path(),
        &format!("{SURVEY}\n[instrument]\ntemperature_coefficient_rms_m_s2_c = 2e-9\n"),
        "",
    );
    let survey = tmp.path().join("survey");
    flight_variant(&survey, "absent", &|_, _| None);
    flight_variant(&survey, "constant", &|_, _| Some("31.0".into()));
    // Holes: empty cells and NaN text, short runs (at most 1 s at 10 Hz).
    flight_variant(&survey, "holed", &|r, c| {
        Some(match r % 997 {
            0..=4 => String::new(),
            500..=509 => "NaN".into(),
            _ => c.to_string(),
        })
    });
    let mut runs = Vec::new();
    let mut logs = Vec::new();
    for v in ["absent", "constant", "holed"] {
        let recipe = recipe_variant(&survey, v, v, "estimate");
        let out = tmp.path().join(format!("run-{v}"));
        logs.push(run_logged(&recipe, &out));
        runs.push(out);
    }
    assert!(
        logs[1].contains("`temp` is constant over the lines"),
        "no warning for the constant column: {}",
        logs[1]
    );
    assert!(
        logs[2].contains("`temp` has") && logs[2].contains("its term is dropped"),
        "no warning for the holes: {}",
        logs[2]
    );
    for stage in ["rotated", "filtered", "levelled"] {
        for (v, run) in ["constant", "holed"].iter().zip(&runs[1..]) {
            let d = worst_line_difference(run, &runs[0], stage, false);
            assert!(d < 0.01, "{stage}: {v} column vs none: {d} E");
            let line = parquet_i64(&run.join("lines.parquet"), "line");
            for name in COMPONENTS {
                let x = parquet_f64(&run.join("lines.parquet"), &format!("{stage}_{name}"));
                assert!(
                    x.iter()
                        .zip(&line)
                        .filter(|(_, l)| **l > 0)
                        .all(|(x, _)| x.is_finite()),
                    "{v}: {stage}_{name} has NaN on a line"
                );
            }
        }
    }
}

/// The calibration file's coefficients: every applied one (non-zero) must exceed its standard
/// error.
fn assert_no_applied_coefficient_below_its_error(run: &Path) {
    for entry in std::fs::read_dir(run.join("calibration")).unwrap() {
        let p = entry.unwrap().path();
        let v: toml::Value = toml::from_str(&std::fs::read_to_string(&p).unwrap()).unwrap();
        for pair in v["pair"].as_array().unwrap() {
            let id = pair["id"].as_str().unwrap();
            for (value, se) in [
                ("kappa", "kappa_se"),
                ("drift", "drift_se"),
                ("quadratic_per_m_s2", "quadratic_se"),
            ] {
                let (Some(vs), Some(es)) = (pair.get(value), pair.get(se)) else {
                    continue;
                };
                for (x, e) in vs.as_array().unwrap().iter().zip(es.as_array().unwrap()) {
                    let (x, e) = (x.as_float().unwrap(), e.as_float().unwrap());
                    assert!(
                        x == 0.0 || x.abs() > e,
                        "{}: pair {id} {value} {x:e} applied with standard error {e:e}",
                        p.display()
                    );
                }
            }
            if let (Some(x), Some(e)) = (
                pair.get("temperature_m_s2_per_c"),
                pair.get("temperature_se"),
            ) {
                let (x, e) = (x.as_float().unwrap(), e.as_float().unwrap());
                assert!(
                    x == 0.0 || x.abs() > e,
                    "pair {id} temperature {x:e} ± {e:e}"
                );
            }
        }
    }
}

/// A survey without calibration errors, in calm air and in 0.5 m/s² turbulence: estimating the
/// calibration changes no line by more than 0.05 E RMS (each line's mean taken out) against not
/// calibrating at all, and no coefficient is applied whose standard error exceeds it.
#[test]
fn error_free_surveys_in_calm_and_turbulent_air_are_not_changed_by_calibration() {
    for (label, turbulence) in [("calm", 0.0), ("turbulent", 0.5)] {
        let tmp = tempfile::tempdir().unwrap();
        simulate_survey(
            tmp.path(),
            &format!(
                "{SURVEY}\n[dynamics]\nturbulence_m_s2 = {turbulence}\n{NO_CALIBRATION_ERROR}"
            ),
            "",
        );
        let survey = tmp.path().join("survey");
        flight_variant(&survey, "csv", &|_, c| Some(c.to_string()));
        let none = tmp.path().join("none");
        let estimate = tmp.path().join("estimate");
        ok(&[
            "--quiet",
            "run",
            recipe_variant(&survey, "none", "csv", "none")
                .to_str()
                .unwrap(),
            "--out",
            none.to_str().unwrap(),
        ]);
        ok(&[
            "--quiet",
            "run",
            recipe_variant(&survey, "estimate", "csv", "estimate")
                .to_str()
                .unwrap(),
            "--out",
            estimate.to_str().unwrap(),
        ]);
        for stage in ["rotated", "filtered"] {
            let d = worst_line_difference(&estimate, &none, stage, true);
            assert!(d < 0.05, "{label}, {stage}: estimate vs none {d} E RMS");
        }
        assert_no_applied_coefficient_below_its_error(&estimate);
    }
}
