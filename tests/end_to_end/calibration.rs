//! Calibration that does not hurt the data (issue 15): degenerate optional channels, error-free
//! surveys in calm and turbulent air. Truth: the same survey processed without calibration (the
//! simulator's instrument has no calibration error here), or without the degenerate channel.

use crate::{gravgrad, ok, simulate_survey};
use std::path::Path;

/// Ten 3 km lines and a tie over two bodies and a hill, 10 Hz: the run tests' base scenario with
/// more lines and its own seed. `[dynamics]` and `[instrument]` are appended by each test.
fn survey_scenario() -> String {
    crate::run::BASE
        .replace("name = \"run test\"", "name = \"calibration test\"")
        .replace("seed = 41", "seed = 43")
        .replace("lines = 4\n", "lines = 10\n")
}

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

use crate::run::parquet_f64;

/// The inverse of a 3 × 3 matrix (adjugate over determinant).
fn invert3(m: &[[f64; 3]; 3]) -> [[f64; 3]; 3] {
    let c = |r: usize, k: usize| {
        let (r1, r2) = ((r + 1) % 3, (r + 2) % 3);
        let (k1, k2) = ((k + 1) % 3, (k + 2) % 3);
        m[r1][k1] * m[r2][k2] - m[r1][k2] * m[r2][k1]
    };
    let det: f64 = (0..3).map(|k| m[0][k] * c(0, k)).sum();
    std::array::from_fn(|i| std::array::from_fn(|j| c(j, i) / det))
}

/// Every int64 column `name` of one of our Parquet tables (the `line` column).
fn parquet_i64(path: &Path, name: &str) -> Vec<i64> {
    crate::run::parquet_column(path, name, |row, k| {
        parquet::record::RowAccessor::get_long(row, k).unwrap()
    })
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

/// A cell's new text from its row index and old text.
type CellRewrite<'a> = &'a dyn Fn(usize, &str) -> String;

/// The survey's CSV flight with its `temp` column rewritten by `cell` (row index, value → the
/// cell's text), or dropped when `cell` is `None`, into `survey/<folder>/`.
fn flight_variant(survey: &Path, folder: &str, cell: Option<CellRewrite<'_>>) {
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
                        .filter(|(i, _)| Some(*i) != k || cell.is_some())
                        .map(|(_, c)| c.to_string())
                        .collect()
                }
                Some(t) => {
                    let r = row;
                    row += 1;
                    cells
                        .iter()
                        .enumerate()
                        .filter_map(|(i, c)| match (i == t, cell) {
                            (true, Some(f)) => Some(f(r, c)),
                            (true, None) => None,
                            (false, _) => Some(c.to_string()),
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
        &format!(
            "{}\n[instrument]\ntemperature_coefficient_rms_m_s2_c = 2e-9\n",
            survey_scenario()
        ),
        "",
    );
    let survey = tmp.path().join("survey");
    flight_variant(&survey, "absent", None);
    flight_variant(&survey, "constant", Some(&|_, _| "31.0".into()));
    // Holes: empty cells and NaN text, short runs (at most 1 s at 10 Hz).
    flight_variant(
        &survey,
        "holed",
        Some(&|r, c| match r % 997 {
            0..=4 => String::new(),
            500..=509 => "NaN".into(),
            _ => c.to_string(),
        }),
    );
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
                "{}\n[dynamics]\nturbulence_m_s2 = {turbulence}\n{NO_CALIBRATION_ERROR}",
                survey_scenario()
            ),
            "",
        );
        let survey = tmp.path().join("survey");
        flight_variant(&survey, "csv", Some(&|_, c| c.to_string()));
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

/// Four 6 km lines and a tie at 20 Hz with every default error, a quadratic term of 1e-8 (m/s²)⁻¹
/// per accelerometer and a temperature ramp of 2 °C/h, and a calibration flight of manoeuvres at
/// 1500 m.
fn scenario_with_calibration_flight() -> String {
    format!(
        "{}\n[instrument]\nquadratic_rms_per_m_s2 = 1e-8\ntemperature_ramp_c_h = 2.0\n\n[calibration_flight]\n",
        survey_scenario()
            .replace("lines = 10", "lines = 4")
            .replace("line_length_m = 3000.0", "line_length_m = 6000.0")
            .replace("sample_rate_hz = 10.0", "sample_rate_hz = 20.0")
    )
}

/// `gravgrad score --json --wavelength 400` of `run` against `truth`: per stage and component the
/// error at ≥ 400 m with each line's mean taken out, and the noise floor.
fn scores_400(run: &Path, truth: &Path) -> Vec<(String, String, f64, f64)> {
    let s: serde_json::Value = serde_json::from_str(&ok(&[
        "--quiet",
        "--json",
        "score",
        run.to_str().unwrap(),
        truth.to_str().unwrap(),
        "--wavelength",
        "400",
    ]))
    .unwrap();
    let mut out = Vec::new();
    for stage in s["lines"].as_array().unwrap() {
        for c in stage["components"].as_array().unwrap() {
            out.push((
                stage["stage"].as_str().unwrap().to_string(),
                c["component"].as_str().unwrap().to_string(),
                c["filtered_line_rms_error_e"].as_f64().unwrap(),
                c["filtered_noise_floor_e"].as_f64().unwrap(),
            ));
        }
    }
    out
}

/// The calibration flight's file against the simulator's truth (`truth/calibration.toml`, the
/// calibration flight's entry): every κ, and every quadratic coefficient applied, against the truth
/// in standard errors. The file's κ is the coupling about its force origin f0 (its quadratic form is
/// centred there), so the truth's κ is moved to the same origin: κ' = κ + ∇q(f0). And it is the
/// coupling to the force the pipeline uses, the pairs' common mode, whose own scale and
/// misalignment errors (1e-5) make it f̂ = T·f with row k of T the mean common-mode axis of the
/// pairs sensing along k (`common_axis` in the truth): κ̂ᵀ·f̂ = κᵀ·f, so the truth is compared as
/// T⁻ᵀ·κ'. Left in the truth's own frame, κ of 3e-5 times T's 1e-5 off-diagonal is 3e-10, several
/// standard errors of an in-line pair's κ (docs/methods/calibration.md).
///
/// Every coefficient must lie within 3σ (the issue's goal, at this seed; the distribution over
/// seeds is in the method note).
fn assert_calibration_against_truth(file: &Path, truth: &Path) {
    let cal: toml::Value = toml::from_str(&std::fs::read_to_string(file).unwrap()).unwrap();
    let tr: toml::Value = toml::from_str(&std::fs::read_to_string(truth).unwrap()).unwrap();
    let instrument: toml::Value =
        toml::from_str(&std::fs::read_to_string(file.with_file_name("instrument.toml")).unwrap())
            .unwrap();
    let flight = tr["flight"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["calibration_flight"].as_bool() == Some(true))
        .expect("the truth holds the calibration flight");
    let floats = |v: &toml::Value| -> Vec<f64> {
        v.as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_float().unwrap())
            .collect()
    };
    // T: per sensor axis, the mean of ±common_axis over the pairs sensing along it.
    let mut t = [[0.0f64; 3]; 3];
    let mut count = [0usize; 3];
    for p in instrument["pair"].as_array().unwrap() {
        let axis = floats(&p["axis"]);
        let k = (0..3).find(|&k| axis[k].abs() > 0.5).unwrap();
        let common = floats(
            &flight["pair"]
                .as_array()
                .unwrap()
                .iter()
                .find(|q| q["id"] == p["id"])
                .unwrap()["common_axis"],
        );
        for m in 0..3 {
            t[k][m] += axis[k].signum() * common[m];
        }
        count[k] += 1;
    }
    for k in 0..3 {
        assert!(count[k] > 0, "no pair senses along axis {k}");
        t[k] = t[k].map(|v| v / count[k] as f64);
    }
    let t_inv = invert3(&t);
    const PRODUCTS: [(usize, usize); 6] = [(0, 0), (1, 1), (2, 2), (0, 1), (0, 2), (1, 2)];
    let mut worst = 0.0f64;
    let mut zs: Vec<(String, f64)> = Vec::new();
    for p in cal["pair"].as_array().unwrap() {
        let id = p["id"].as_str().unwrap();
        let t = flight["pair"]
            .as_array()
            .unwrap()
            .iter()
            .find(|q| q["id"].as_str() == Some(id))
            .unwrap();
        let (tk, tq) = (floats(&t["kappa"]), floats(&t["quadratic"]));
        let f0 = p.get("force_mean_m_s2").map_or(vec![0.0; 3], floats);
        let mut moved = [tk[0], tk[1], tk[2]];
        for ((a, b), q) in PRODUCTS.iter().zip(&tq) {
            moved[*a] += q * f0[*b];
            moved[*b] += q * f0[*a];
        }
        // T⁻ᵀ·κ': component m is Σ_j (T⁻¹)_jm κ'_j.
        let target: [f64; 3] =
            std::array::from_fn(|m| (0..3).map(|j| t_inv[j][m] * moved[j]).sum());
        let (k, kse) = (floats(&p["kappa"]), floats(&p["kappa_se"]));
        for m in 0..3 {
            let z = (k[m] - target[m]) / kse[m];
            zs.push((format!("pair {id} κ[{m}]"), z));
        }
        if let (Some(q), Some(qse)) = (p.get("quadratic_per_m_s2"), p.get("quadratic_se")) {
            for (m, (v, e)) in floats(q).iter().zip(floats(qse)).enumerate() {
                if *v != 0.0 {
                    zs.push((format!("pair {id} quadratic[{m}]"), (v - tq[m]) / e));
                }
            }
        }
    }
    for (_, z) in &zs {
        worst = worst.max(z.abs());
    }
    let rms = (zs.iter().map(|(_, z)| z * z).sum::<f64>() / zs.len() as f64).sqrt();
    eprintln!(
        "calibration flight: {} coefficients, RMS z {rms:.2}, worst |z| {worst:.2}",
        zs.len()
    );
    for (name, z) in &zs {
        assert!(z.abs() < 3.0, "{name}: z {z:.2} ({zs:?})");
    }
    // Standard errors neither far too small nor far too large.
    assert!((0.4..1.6).contains(&rms), "RMS z {rms:.2}: {zs:?}");
    // The diagonal quadratic terms of the in-line pairs are among those applied.
    let zz = cal["pair"]
        .as_array()
        .unwrap()
        .iter()
        .find(|p| p["id"].as_str() == Some("zz"))
        .unwrap();
    assert!(
        floats(&zz["quadratic_per_m_s2"])[2] != 0.0,
        "zz's fz² term was not applied"
    );
}

/// The same survey with every calibration error zero (scale, misalignment, bias, drift,
/// temperature coefficient, quadratic and cross-axis terms), flown through the same noise: the pairs'
/// white and 1/f noise, the gyros' and the navigation's errors. Its error processed without any
/// calibration is the floor a calibration can reach on this survey.
fn perfect_twin_scenario() -> String {
    let with_errors = scenario_with_calibration_flight();
    let twin = with_errors.replace(
        "[instrument]\nquadratic_rms_per_m_s2 = 1e-8\n",
        &format!(
            "{}quadratic_rms_per_m_s2 = 0.0\n",
            NO_CALIBRATION_ERROR.trim_start()
        ),
    );
    assert_ne!(twin, with_errors, "the errors' section was not found");
    twin
}

/// Errors the survey's own data hardly see (quadratic 1e-8 (m/s²)⁻¹, a temperature ramp): through
/// a calibration flight, every coefficient lies within 3σ of the truth
/// ([`assert_calibration_against_truth`]), and the survey's error at
/// ≥ 400 m, each line's mean taken out, is measured against two floors: the pairs' white noise
/// through the same filter (what `gravgrad score` reports), and the error of the same survey flown
/// with a perfect instrument through the same noise ([`perfect_twin_scenario`]), which also holds
/// the 1/f noise and the gyros' and navigation's errors no calibration can remove. The perfect
/// twin itself is 0.99–1.17 × the white floor here (Gyz worst).
///
/// Measured (seed 43): against the perfect twin, through the calibration flight 0.99–1.03 ×, from
/// the survey alone 0.98–1.09 ×. Asserted: the issue's goals, 1.1 × and 1.2 × the twin; and 1.25 ×
/// and 1.3 × the white floor.
#[test]
fn a_calibration_flight_brings_the_survey_to_the_noise_floor() {
    let tmp = tempfile::tempdir().unwrap();
    simulate_survey(tmp.path(), &scenario_with_calibration_flight(), "");
    let survey = tmp.path().join("survey");
    ok(&[
        "--quiet",
        "calibrate",
        survey.join("recipe-calibration.toml").to_str().unwrap(),
    ]);
    assert_calibration_against_truth(
        &survey.join("calibration.toml"),
        &survey.join("truth/calibration.toml"),
    );
    // The perfect twin, processed without calibration.
    let twin = tmp.path().join("twin");
    std::fs::create_dir_all(&twin).unwrap();
    simulate_survey(
        &twin,
        &perfect_twin_scenario(),
        "\n[calibration]\nmode = \"none\"\n",
    );
    let twin_run = twin.join("run");
    ok(&[
        "--quiet",
        "run",
        twin.join("survey/recipe.toml").to_str().unwrap(),
        "--out",
        twin_run.to_str().unwrap(),
    ]);
    let perfect = scores_400(&twin_run, &twin.join("survey/truth"));
    let truth = survey.join("truth");
    for (recipe, limit, twin_limit) in [
        ("recipe-with-calibration.toml", 1.25, 1.1),
        ("recipe.toml", 1.3, 1.2),
    ] {
        let out = tmp.path().join(recipe.replace(".toml", ""));
        ok(&[
            "--quiet",
            "run",
            survey.join(recipe).to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
        ]);
        for (stage, c, err, floor) in scores_400(&out, &truth) {
            let (_, _, reachable, _) = perfect
                .iter()
                .find(|(s, k, _, _)| *s == stage && *k == c)
                .expect("the twin has every stage and component");
            eprintln!(
                "{recipe} {stage} {c}: {err:.3} E, white floor {floor:.3} E ({:.2} ×), perfect \
                 instrument {reachable:.3} E ({:.2} ×)",
                err / floor,
                err / reachable
            );
            assert!(
                err <= limit * floor,
                "{recipe} {stage} {c}: {err} E against {limit} × floor {floor} E"
            );
            assert!(
                err <= twin_limit * reachable,
                "{recipe} {stage} {c}: {err} E against {twin_limit} × the perfect instrument's \
                 {reachable} E"
            );
        }
    }
}

/// `gravgrad qc --json` of `recipe` into `out`: the survey lines' verdicts and reasons.
fn survey_verdicts(recipe: &Path, out: &Path) -> Vec<(i64, String, Vec<String>)> {
    let r = crate::motion::qc(recipe, out);
    r["lines"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|l| l["role"] == "survey")
        .map(|l| {
            (
                l["line"].as_i64().unwrap(),
                l["verdict"].as_str().unwrap().to_string(),
                crate::motion::reasons(l),
            )
        })
        .collect()
}

/// A calibration that leaves a real error in the tensor must not pass: the quadratic terms of the
/// accelerometers (1e-8 (m/s²)⁻¹) estimated without the quadratic model fail the lines for motion
/// correlation; with it, no line fails for motion correlation. A calm-air survey given its
/// calibration flight's file with every κ ten times too large fails every survey line for motion
/// correlation.
#[test]
fn a_calibration_missing_a_term_or_wrong_tenfold_fails_qc_for_motion_correlation() {
    let tmp = tempfile::tempdir().unwrap();
    simulate_survey(tmp.path(), &scenario_with_calibration_flight(), "");
    let survey = tmp.path().join("survey");
    let motion = |why: &[String]| why.iter().any(|r| r.starts_with("motion correlation"));
    // Survey alone, without and with the quadratic model.
    let base = std::fs::read_to_string(survey.join("recipe.toml")).unwrap();
    let linear = survey.join("recipe-linear.toml");
    std::fs::write(
        &linear,
        format!("{base}\n[calibration]\nquadratic = false\n"),
    )
    .unwrap();
    let lines = survey_verdicts(&linear, &tmp.path().join("qc-linear"));
    eprintln!("linear model: {lines:?}");
    assert!(
        lines.iter().any(|(_, v, why)| v == "fail" && motion(why)),
        "no line failed for motion correlation without the quadratic model: {lines:?}"
    );
    let lines = survey_verdicts(&survey.join("recipe.toml"), &tmp.path().join("qc-full"));
    eprintln!("full model: {lines:?}");
    assert!(
        lines.iter().all(|(_, _, why)| !motion(why)),
        "a line failed for motion correlation with the quadratic model: {lines:?}"
    );

    // Calm air: the same survey without turbulence, its calibration flight's file ten times wrong.
    let calm = tempfile::tempdir().unwrap();
    simulate_survey(
        calm.path(),
        &scenario_with_calibration_flight()
            .replace("[plan]", "[dynamics]\nturbulence_m_s2 = 0.0\n\n[plan]"),
        "",
    );
    let survey = calm.path().join("survey");
    ok(&[
        "--quiet",
        "calibrate",
        survey.join("recipe-calibration.toml").to_str().unwrap(),
    ]);
    let cal = survey.join("calibration.toml");
    let good = std::fs::read_to_string(&cal).unwrap();
    std::fs::write(
        &cal,
        crate::motion::with_kappa(&good, |_, k| k.map(|v| 10.0 * v)),
    )
    .unwrap();
    let lines = survey_verdicts(
        &survey.join("recipe-with-calibration.toml"),
        &calm.path().join("qc-wrong"),
    );
    eprintln!("calm, κ × 10: {lines:?}");
    assert!(!lines.is_empty());
    for (line, verdict, why) in &lines {
        assert!(
            verdict == "fail" && motion(why),
            "calm air, κ × 10: line {line} {verdict} {why:?}"
        );
    }
}

/// `calibrate` compares what it estimated with the calibration file it replaces: the demo's
/// calibration flight calibrated twice from the same data changes nothing; after one pair's κz in
/// the file is moved by 100 standard errors, the report names that pair and term beyond the limit,
/// and no other.
#[test]
fn calibrate_reports_each_coefficients_change_from_the_file_it_replaces() {
    let tmp = tempfile::tempdir().unwrap();
    let survey = crate::copy_demo(tmp.path());
    let recipe = survey.join("recipe-calibration.toml");
    ok(&["--quiet", "calibrate", recipe.to_str().unwrap()]);
    // One flight and no earlier file: nothing to compare.
    assert!(!survey.join("stability.txt").exists());
    let cal = survey.join("calibration.toml");
    ok(&["--quiet", "calibrate", recipe.to_str().unwrap()]);
    let same = std::fs::read_to_string(survey.join("stability.txt")).unwrap();
    assert!(same.contains("largest change 0.0 SE"), "{same}");
    assert!(same.contains("none beyond 4 SE"), "{same}");

    let text = std::fs::read_to_string(&cal).unwrap();
    let file: toml::Value = toml::from_str(&text).unwrap();
    let zz = file["pair"]
        .as_array()
        .unwrap()
        .iter()
        .find(|p| p["id"].as_str() == Some("zz"))
        .unwrap();
    let se = zz["kappa_se"][2].as_float().unwrap();
    assert!(se > 0.0 && se.is_finite(), "{zz:?}");
    std::fs::write(
        &cal,
        crate::motion::with_kappa(&text, |id, k| {
            if id == "zz" {
                [k[0], k[1], k[2] + 100.0 * se]
            } else {
                k
            }
        }),
    )
    .unwrap();
    ok(&["--quiet", "calibrate", recipe.to_str().unwrap()]);
    let moved = std::fs::read_to_string(survey.join("stability.txt")).unwrap();
    eprintln!("{moved}");
    assert!(moved.contains("1 beyond 4 SE"), "{moved}");
    let flagged: Vec<&str> = moved.lines().filter(|l| l.contains(" SE)")).collect();
    assert_eq!(flagged.len(), 1, "{moved}");
    assert!(
        flagged[0].contains("pair zz") && flagged[0].contains("kappa[2]"),
        "{moved}"
    );
}

/// A coupling band reaching the Nyquist frequency of a flight is refused before any work: exit 2,
/// the key and the flight named, with the limit in the hint.
#[test]
fn a_calibration_band_above_nyquist_is_refused_with_its_key() {
    let tmp = tempfile::tempdir().unwrap();
    let survey = crate::copy_demo(tmp.path());
    let recipe = survey.join("recipe.toml");
    let text = std::fs::read_to_string(&recipe).unwrap();
    // The demo flies at 10 Hz: Nyquist 5 Hz.
    std::fs::write(
        &recipe,
        format!("{text}\n[calibration]\nband_hz = [0.05, 6.0]\n"),
    )
    .unwrap();
    let out = gravgrad(&[
        "--quiet",
        "run",
        recipe.to_str().unwrap(),
        "--out",
        tmp.path().join("out").to_str().unwrap(),
    ]);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains("calibration.band_hz"), "{stderr}");
    assert!(stderr.contains("kestrand-flats-demo-f01"), "{stderr}");
    assert!(stderr.contains("below 5 Hz"), "{stderr}");
    assert!(!tmp.path().join("out/lines.parquet").exists());
}
