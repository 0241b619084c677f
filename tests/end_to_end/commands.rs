//! The commands on good input: the same data through every container and writer gives the same
//! report; the demo works; usage errors exit 2.

use crate::{check_json, gravgrad, problems};

#[test]
fn good_files_from_every_writer_pass_and_agree() {
    // The same 40-row table written as CSV (with and without BOM/CRLF), by pyarrow, by polars and
    // by h5py (two flight groups): each reads as 40 rows at 10 Hz with two pairs and one line.
    let files = [
        "tests/corpus/good/clean.csv",
        "tests/corpus/good/bom_crlf.csv",
        "tests/corpus/good/pyarrow.parquet",
        "tests/corpus/good/polars.parquet",
        "tests/corpus/good/h5py.h5",
    ];
    let mut args = vec!["--instrument", "tests/corpus/good/instrument.toml"];
    args.extend(files);
    let (code, report, stderr) = check_json(&args);
    assert_eq!(code, 0, "{stderr}\n{report:#}");
    let errors: Vec<_> = problems(&report)
        .into_iter()
        .filter(|p| p["severity"] == "error")
        .collect();
    assert!(errors.is_empty(), "{errors:?}");
    let flights: Vec<&serde_json::Value> = report
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|f| f["flights"].as_array().unwrap())
        .collect();
    assert_eq!(flights.len(), 6);
    for f in flights {
        assert_eq!(f["rows"], 40);
        let tb = &f["time_base"];
        assert!((tb["rate_hz"].as_f64().unwrap() - 10.0).abs() < 1e-9);
        // Timestamps near 1.4e9 s resolve 2.4e-7 s (docs/formats.md); over the 3.9 s span that
        // bounds the rate estimate to 10 Hz × 2.4e-7/3.9 ≈ 6e-7 Hz.
        assert!((tb["estimated_rate_hz"].as_f64().unwrap() - 10.0).abs() < 1e-6);
        assert_eq!(f["pairs"], serde_json::json!(["zz", "xx"]));
        assert_eq!(f["lines"].as_array().unwrap().len(), 1);
        assert_eq!(f["lines"][0]["line"], 101);
    }
}

#[test]
fn a_recipe_checks_its_instrument_and_flights() {
    let (code, report, stderr) = check_json(&["tests/corpus/good/recipe.toml"]);
    assert_eq!(code, 0, "{stderr}\n{report:#}");
    let kinds: Vec<&str> = report
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f["kind"].as_str().unwrap())
        .collect();
    assert_eq!(kinds, vec!["recipe", "flight", "flight"]);
}

#[test]
fn the_demo_runs_end_to_end_and_scores_itself() {
    let tmp = tempfile::tempdir().unwrap();
    let products = tmp.path().join("demo");
    // The committed survey (tests/end_to_end/install.rs runs the one built into the binary).
    let out = gravgrad(&[
        "demo",
        "--quiet",
        "--data",
        "data/demo",
        "--out",
        products.to_str().unwrap(),
    ]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8_lossy(&out.stdout);
    // Two flights.
    assert!(text.contains("kestrand-flats-demo-f01.parquet"), "{text}");
    assert!(text.contains("kestrand-flats-demo-f02.parquet"), "{text}");
    // Lines 101 and 102 in the first flight; 103, 104 and the tie 9001 in the second.
    assert!(text.contains("lines        2"), "{text}");
    assert!(text.contains("lines        3"), "{text}");
    assert!(products.join("lines.parquet").is_file());
    assert!(
        text.contains("terrain_removed against truth geology"),
        "{text}"
    );
    // Provenance: every input with its SHA-256, as coreutils' sha256sum computes it.
    let prov: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(products.join("provenance.json")).unwrap())
            .unwrap();
    let inputs = prov["inputs"].as_array().unwrap();
    // Recipe, instrument, DEM, the calibration file the calibration flight gave, and the two
    // survey flights.
    assert_eq!(inputs.len(), 6, "{inputs:?}");
    let calibration: Vec<&serde_json::Value> = inputs
        .iter()
        .filter(|i| {
            i["path"]
                .as_str()
                .is_some_and(|p| p.ends_with("calibration.toml"))
        })
        .collect();
    assert_eq!(calibration.len(), 1, "{inputs:?}");
    // The calibration flight's file sits beside the products.
    assert!(
        calibration[0]["path"]
            .as_str()
            .unwrap()
            .ends_with("demo-calibration-flight/calibration.toml"),
        "{calibration:?}"
    );
    assert!(
        tmp.path()
            .join("demo-calibration-flight/calibration.toml")
            .is_file()
    );
    // Paths relative to the recipe's folder.
    let folder = std::path::PathBuf::from(prov["recipe_folder"].as_str().unwrap());
    assert_eq!(prov["recipe_path"], "recipe.toml");
    for i in inputs {
        let path = i["path"].as_str().unwrap();
        assert!(std::path::Path::new(path).is_relative(), "{path}");
        let o = std::process::Command::new("sha256sum")
            .arg(folder.join(path))
            .output()
            .unwrap();
        let sum = String::from_utf8_lossy(&o.stdout);
        assert_eq!(
            sum.split_whitespace().next(),
            i["sha256"].as_str(),
            "{path}"
        );
    }
    assert_eq!(prov["flights"].as_array().unwrap().len(), 2);
    assert_eq!(
        prov["flights"][0]["calibration"].as_array().unwrap().len(),
        9
    );
    // Grids: every component and gz in grids.nc (read back by the NetCDF reader that is tested on
    // files from netCDF4, xarray, GDAL and GMT), a GeoTIFF and a map each.
    for name in [
        "gxx",
        "gxy",
        "gxz",
        "gyy",
        "gyz",
        "gzz",
        "gz",
        "measured_gzz",
    ] {
        let r = gravgrad_netcdf::read_grid(&products.join("grids.nc"), Some(name)).unwrap();
        assert_eq!(r.epsg, Some(32753), "{name}");
        let finite = r.values.iter().filter(|v| v.is_finite()).count();
        assert!(
            finite > r.values.len() / 2,
            "{name}: {finite} of {}",
            r.values.len()
        );
        assert!(products.join(format!("grids/{name}.tif")).is_file());
        assert!(products.join(format!("maps/{name}.png")).is_file());
    }
}

#[test]
fn usage_errors_exit_2() {
    assert_eq!(gravgrad(&["check"]).status.code(), Some(2));
    assert_eq!(gravgrad(&["no-such-command"]).status.code(), Some(2));
    assert_eq!(
        gravgrad(&["check", "--jitter-tolerance", "-1", "x.csv"])
            .status
            .code(),
        Some(2)
    );
    assert_eq!(
        gravgrad(&["check", "tests/corpus/good/no-such-file.csv"])
            .status
            .code(),
        Some(2)
    );
}

#[test]
fn json_logs_are_json_lines() {
    let out = gravgrad(&["check", "--json", "tests/corpus/good/clean.csv"]);
    assert_eq!(out.status.code(), Some(0));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(!stderr.trim().is_empty());
    for line in stderr.lines() {
        let v: serde_json::Value =
            serde_json::from_str(line).unwrap_or_else(|e| panic!("not JSON: {line}: {e}"));
        assert!(v["level"].is_string());
    }
}

#[test]
fn a_slower_navigation_table_fills_the_navigation_columns() {
    // grad_only.csv has no position or attitude; nav_2hz.csv supplies them at 2 Hz.
    let (code, report, stderr) = check_json(&[
        "--navigation",
        "tests/corpus/good/nav_2hz.csv",
        "tests/corpus/good/grad_only.csv",
    ]);
    assert_eq!(code, 0, "{stderr}\n{report:#}");
    let flight = &report[1]["flights"][0];
    let channels: Vec<&str> = flight["channels"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| c.as_str().unwrap())
        .collect();
    for c in ["lat", "lon", "height", "roll", "pitch", "heading"] {
        assert!(channels.contains(&c), "{c} missing from {channels:?}");
    }
    // Without the navigation table the same log lacks six required columns.
    let (code, report, _) = check_json(&["tests/corpus/good/grad_only.csv"]);
    assert_eq!(code, 2);
    assert_eq!(
        problems(&report)
            .iter()
            .filter(|p| p["severity"] == "error")
            .count(),
        6
    );
}

#[test]
fn one_thread_or_two_give_the_same_report() {
    // A 120k-row CSV (several parallel pieces) with a bad cell and a gap in it.
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("big.csv");
    let mut text =
        String::from("time,lat,lon,height,roll,pitch,heading,wx,wy,wz,fx,fy,fz,zz_a,zz_b\n");
    for i in 0..120_000u64 {
        if i == 70_000 {
            continue; // one missing sample: a gap
        }
        let t = 1.4e9 + i as f64 * 0.02;
        let fz = if i == 90_001 {
            "x".to_string()
        } else {
            format!("{:.7}", -9.79 + 1e-3 * (i % 17) as f64)
        };
        text.push_str(&format!(
            "{t:.4},-27.35,134.1,420.0,0.01,-0.02,{:.3},0,0,0,0.01,0.02,{fz},-9.79,-9.79\n",
            (i / 3000) as f64 * 0.1
        ));
    }
    std::fs::write(&path, text).unwrap();
    let p = path.to_str().unwrap();
    let one = gravgrad(&["--threads", "1", "check", "--json", "--quiet", p]);
    let two = gravgrad(&["--threads", "2", "check", "--json", "--quiet", p]);
    assert_eq!(one.status.code(), Some(2));
    assert_eq!(one.stdout, two.stdout);
    let report: serde_json::Value = serde_json::from_slice(&one.stdout).unwrap();
    let errors: Vec<_> = problems(&report)
        .into_iter()
        .filter(|p| p["severity"] == "error")
        .collect();
    // Index 90_001 is CSV row 90_003, less the one skipped sample: row 90_002.
    assert_eq!(errors.len(), 1, "{errors:?}");
    assert_eq!(errors[0]["location"]["row"], 90_002);
    // The sample after the gap (i = 70_001) sits at table index 70_000: CSV row 70_002.
    assert_eq!(report[0]["flights"][0]["gaps"][0]["row"], 70_002);
}
