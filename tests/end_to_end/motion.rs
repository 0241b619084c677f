//! The motion-correlation test of `gravgrad qc` on a simulated survey processed with a calibration
//! file (`[calibration] mode = "file"`): the file `gravgrad calibrate` wrote, then the same file with
//! every κ ten times too large, then with one coupling wrong by a stated amount.

use crate::{ok, simulate_survey};
use std::path::Path;

/// `gravgrad qc --json` of `recipe` into `out`.
pub fn qc(recipe: &Path, out: &Path) -> serde_json::Value {
    serde_json::from_str(&ok(&[
        "--quiet",
        "--json",
        "qc",
        recipe.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]))
    .unwrap()
}

/// A copy of the calibration file `text` with each pair's κ passed through `change(id, κ)`.
pub fn with_kappa(text: &str, change: impl Fn(&str, [f64; 3]) -> [f64; 3]) -> String {
    let mut id = String::new();
    text.lines()
        .map(|l| {
            if let Some(v) = l.strip_prefix("id = ") {
                id = v.trim_matches('"').to_string();
            }
            match l.strip_prefix("kappa = [") {
                Some(v) => {
                    let k: Vec<f64> = v
                        .trim_end_matches(']')
                        .split(',')
                        .map(|x| x.trim().parse().unwrap())
                        .collect();
                    let k = change(&id, [k[0], k[1], k[2]]);
                    format!("kappa = [{:e}, {:e}, {:e}]\n", k[0], k[1], k[2])
                }
                None => format!("{l}\n"),
            }
        })
        .collect()
}

pub fn reasons(l: &serde_json::Value) -> Vec<String> {
    l["reasons"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r.as_str().unwrap().to_string())
        .collect()
}

fn motion_of<'a>(l: &'a serde_json::Value, component: &str) -> &'a serde_json::Value {
    &l["components"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["component"] == component)
        .unwrap()["motion"]
}

#[test]
fn a_wrong_calibration_file_fails_for_motion_correlation_and_the_right_one_does_not() {
    let tmp = tempfile::tempdir().unwrap();
    let scenario =
        std::fs::read_to_string(crate::root().join("tests/end_to_end/small_scenario.toml"))
            .unwrap();
    simulate_survey(
        tmp.path(),
        &scenario,
        "\n[calibration]\nmode = \"file\"\nfile = \"cal.toml\"\n",
    );
    let survey = tmp.path().join("survey");
    let recipe = survey.join("recipe.toml");
    let cal = survey.join("cal.toml");
    ok(&[
        "--quiet",
        "calibrate",
        recipe.to_str().unwrap(),
        "--out",
        cal.to_str().unwrap(),
    ]);
    let good = std::fs::read_to_string(&cal).unwrap();
    let survey_lines = |r: &serde_json::Value| -> Vec<serde_json::Value> {
        r["lines"]
            .as_array()
            .unwrap()
            .iter()
            .filter(|l| l["role"] == "survey")
            .cloned()
            .collect()
    };

    // The file as estimated: no line fails for motion correlation, and the survey lines were
    // tested (the 10 s tie line has too few effective samples in 0.1–1 Hz for 15 regressors).
    let r = qc(&recipe, &tmp.path().join("good"));
    for l in r["lines"].as_array().unwrap() {
        let m = motion_of(l, "Gzz");
        eprintln!(
            "as estimated, line {}: Gzz motion {} ± {} E, p {}; {:?}",
            l["line"],
            m["motion_rms_e"],
            m["motion_rms_se_e"],
            m["p_value"],
            reasons(l)
        );
        assert!(
            reasons(l).iter().all(|r| !r.contains("motion correlation")),
            "line {}: {:?}",
            l["line"],
            reasons(l)
        );
    }
    let lines = survey_lines(&r);
    assert_eq!(lines.len(), 2);
    for l in &lines {
        for c in ["Gxx", "Gxy", "Gxz", "Gyy", "Gyz", "Gzz"] {
            assert!(
                motion_of(l, c).is_object(),
                "line {} {c} not tested",
                l["line"]
            );
        }
    }

    // Every κ ten times its estimate: every component of every survey line fails for motion
    // correlation.
    std::fs::write(&cal, with_kappa(&good, |_, k| k.map(|v| 10.0 * v))).unwrap();
    let r = qc(&recipe, &tmp.path().join("ten"));
    for l in survey_lines(&r) {
        let why = reasons(&l);
        eprintln!("κ × 10, line {}: {why:?}", l["line"]);
        assert_eq!(l["verdict"], "fail");
        for c in ["Gxx", "Gxy", "Gxz", "Gyy", "Gyz", "Gzz"] {
            let tag = format!("motion correlation {c}:");
            assert!(why.iter().any(|r| r.starts_with(&tag)), "{tag} {why:?}");
        }
    }

    // The zz pair's κz off by Δ = 2e-8 (0.2 % of its estimate of 1.2e-5 here, 27 times its standard
    // error of 7.4e-10): the corrected difference of that pair keeps −Δ·fz, the pair observes
    // y = −d = Szz·|b| (docs/physics.md), so Gzz carries +Δ/|b|·fz = 100 E per m/s² (|b| = 0.2 m; the
    // platform is level, so Gzz in NED is Gzz of the sensor frame). In 0.1–1 Hz the turbulence gives
    // fz about 0.1 m/s², some 10 E of Gzz: every survey line fails for motion correlation of Gzz,
    // most from fz, with the coefficient of fz within three standard errors of 100 E per m/s², and
    // for nothing else.
    // The file states its κ to 1e-15, far more certain than the flight's own estimate (about
    // 7e-10): a survey flight refines a file's κ by the posterior of the two (docs/methods/
    // calibration.md), and with such a file it leaves the wrong value as it is.
    let delta = 2e-8;
    let confident: String = good
        .lines()
        .map(|l| {
            if l.starts_with("kappa_se = [") {
                "kappa_se = [1e-15, 1e-15, 1e-15]\n".to_string()
            } else {
                format!("{l}\n")
            }
        })
        .collect();
    std::fs::write(
        &cal,
        with_kappa(&confident, |id, k| {
            if id == "zz" {
                [k[0], k[1], k[2] + delta]
            } else {
                k
            }
        }),
    )
    .unwrap();
    let r = qc(&recipe, &tmp.path().join("zz"));
    let want = delta / 0.2 / 1e-9;
    for l in survey_lines(&r) {
        let why = reasons(&l);
        let m = motion_of(&l, "Gzz");
        let fz = m["regressors"]
            .as_array()
            .unwrap()
            .iter()
            .find(|x| x["name"] == "fz")
            .unwrap();
        let (b, se) = (
            fz["coefficient_e"].as_f64().unwrap(),
            fz["std_error_e"].as_f64().unwrap(),
        );
        eprintln!(
            "zz κz + {delta:e}, line {}: Gzz motion {} ± {} E, fz coefficient {b:.1} ± {se:.1} E per m/s² (injected {want}); {why:?}",
            l["line"], m["motion_rms_e"], m["motion_rms_se_e"]
        );
        assert_eq!(why.len(), 1, "{why:?}");
        assert!(
            why[0].starts_with("motion correlation Gzz:")
                && why[0].ends_with(&format!(
                    "most from fz (|t| = {:.1})",
                    fz["t"].as_f64().unwrap().abs()
                )),
            "{why:?}"
        );
        assert!((b - want).abs() <= 3.0 * se, "{b} ± {se} vs {want}");
    }
    // The QC table carries the test per component, the report its section.
    let csv = std::fs::read_to_string(tmp.path().join("zz/qc/lines.csv")).unwrap();
    let mut rows = csv.lines().filter(|l| !l.starts_with('#'));
    let head: Vec<&str> = rows.next().unwrap().split(',').collect();
    let col = |name: &str| {
        head.iter()
            .position(|h| *h == name)
            .unwrap_or_else(|| panic!("no column {name}: {head:?}"))
    };
    let (e, f, p, g) = (
        col("motion_gzz_e"),
        col("motion_f_gzz"),
        col("motion_p_gzz"),
        col("motion_regressor_gzz"),
    );
    let (line, role) = (col("line"), col("role"));
    for row in rows {
        let v: Vec<&str> = row.split(',').collect();
        if v[role] == "survey" {
            let l = r["lines"]
                .as_array()
                .unwrap()
                .iter()
                .find(|l| l["line"].as_i64() == v[line].parse::<i64>().ok())
                .unwrap();
            let m = motion_of(l, "Gzz");
            assert_eq!(v[g], "fz", "{row}");
            let num = |s: &str| s.parse::<f64>().unwrap();
            assert!((num(v[e]) - m["motion_rms_e"].as_f64().unwrap()).abs() < 1e-4);
            assert!((num(v[f]) / m["f_statistic"].as_f64().unwrap() - 1.0).abs() < 1e-3);
            assert!(num(v[p]) < 1e-3);
            assert!(row.contains("motion correlation Gzz"), "{row}");
        }
    }
    let html = std::fs::read_to_string(tmp.path().join("zz/qc/report.html")).unwrap();
    assert!(html.contains("<table id=\"motion\">") && html.contains("<strong>"));

    // Bad motion settings are refused by key, exit 2, nothing written.
    let text = std::fs::read_to_string(&recipe).unwrap();
    std::fs::write(
        &recipe,
        format!("{text}\n[qc]\nmotion_band_hz = [1.0, 0.1]\nmax_motion_e = 0.0\n"),
    )
    .unwrap();
    let out = tmp.path().join("refused");
    let o = crate::gravgrad(&[
        "qc",
        recipe.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("qc.motion_band_hz") && err.contains("qc.max_motion_e"),
        "{err}"
    );
    assert!(!out.join("qc").exists());
}
