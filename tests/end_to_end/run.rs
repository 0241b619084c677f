//! `gravgrad run`, `calibrate` and `score` on simulated surveys (issues 4, 5, 6): what the products
//! hold against the simulation's truth, computed by the simulator independently of the pipeline.

use crate::{copy_demo, gravgrad, ok, run_to_end, simulate_survey};
use std::path::Path;

/// Base scenario: two geology bodies under rough terrain with a hill, four 3 km lines and a tie.
pub const BASE: &str = r#"
layout = "scenario/1"
name = "run test"
seed = 41

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
lines = 4
ties = 1
sample_rate_hz = 10.0
turn_rate_deg_s = 3.0
"#;

/// No error of any kind in the instrument or the navigation.
const PERFECT: &str = r#"
[instrument]
noise_e_rt_hz = 0.0
flicker_corner_hz = 0.0
scale_rms = 0.0
misalignment_rms_rad = 0.0
bias_rms_m_s2 = 0.0
drift_rms_m_s2_h = 0.0
temperature_coefficient_rms_m_s2_c = 0.0
gyro_noise_rad_s = 0.0
gyro_bias_rad_s = 0.0
accel_noise_m_s2 = 0.0
position_noise_m = 0.0
attitude_noise_deg = 0.0
"#;

/// `gravgrad score --json` of the run in `dir/run` against `dir/survey/truth`.
fn score(dir: &Path) -> serde_json::Value {
    let run = dir.join("run");
    let truth = dir.join("survey/truth");
    let s = ok(&[
        "--quiet",
        "--json",
        "score",
        run.to_str().unwrap(),
        truth.to_str().unwrap(),
    ]);
    let v: serde_json::Value = serde_json::from_str(&s).unwrap();
    v["lines"].clone()
}

/// Every component of every stage of a score: the error at ≥ 300 m, each line's mean taken out, at
/// most 0.5 E above the floor. A constant per line is levelling's to set: the calibration fits the
/// tensor's drift only where crossings resolve it (a drift fitted against time would take a
/// regional across the lines), and leaves the rest to levelling's per-line offsets.
fn assert_within_half_an_eotvos_of_the_floor(s: &serde_json::Value, label: &str) {
    for stage in s.as_array().unwrap() {
        for c in stage["components"].as_array().unwrap() {
            let err = c["filtered_line_rms_error_e"].as_f64().unwrap();
            let floor = c["filtered_noise_floor_e"].as_f64().unwrap();
            eprintln!(
                "{label} {} {}: {err:.3} E at ≥300 m, floor {floor:.3} E",
                stage["stage"], c["component"]
            );
            assert!(
                err <= floor + 0.5,
                "{label} {} {}: {err} E vs floor {floor} E",
                stage["stage"],
                c["component"]
            );
        }
    }
}

/// Runs the recipe `simulate_survey` wrote in `dir` into `dir/run`.
fn run(dir: &Path) {
    run_to_end(&dir.join("survey/recipe.toml"), &dir.join("run"));
}

/// Column `name` of a CSV flight log written by the simulator.
fn csv_column(path: &Path, name: &str) -> Vec<f64> {
    let text = std::fs::read_to_string(path).unwrap();
    let mut lines = text.lines().filter(|l| !l.starts_with('#'));
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let k = header.iter().position(|h| *h == name).unwrap();
    lines
        .map(|l| l.split(',').nth(k).unwrap().parse::<f64>().unwrap())
        .collect()
}

#[test]
fn without_errors_the_run_gives_the_total_tensor_and_after_reduction_the_geology() {
    let tmp = tempfile::tempdir().unwrap();
    let scenario =
        format!("{BASE}\n[dynamics]\nturbulence_m_s2 = 0.8\nplatform_rate_rad_s = 1e-4\n{PERFECT}");
    simulate_survey(tmp.path(), &scenario, "\n[calibration]\nmode = \"none\"\n");
    run(tmp.path());
    // The cross pairs see α·|b|; on the lines it must reach 1e5 E (α of 1e-4 rad/s²): the rotation
    // term the solve removes is far larger than what it must leave.
    let flight = std::fs::read_dir(tmp.path().join("survey/flights"))
        .unwrap()
        .map(|e| e.unwrap().path())
        .find(|p| p.extension().is_some_and(|e| e == "csv"))
        .unwrap();
    let line = csv_column(&flight, "line");
    let rate = 10.0;
    let mut alpha_max = 0.0f64;
    for axis in ["wx", "wy", "wz"] {
        let w = csv_column(&flight, axis);
        for i in 1..w.len() - 1 {
            if line[i] > 0.0 {
                alpha_max = alpha_max.max(((w[i + 1] - w[i - 1]) * rate / 2.0).abs());
            }
        }
    }
    assert!(
        alpha_max >= 1e-4,
        "largest α on the lines {alpha_max:e} rad/s²"
    );
    let s = score(tmp.path());
    for (stage, limit) in [(0, 0.01), (1, 0.05)] {
        for c in s[stage]["components"].as_array().unwrap() {
            let mean = c["mean_error_e"].as_f64().unwrap();
            let rms = c["rms_error_e"].as_f64().unwrap();
            let total = (mean * mean + rms * rms).sqrt();
            eprintln!("{} {}: {total:.2e} E", s[stage]["stage"], c["component"]);
            assert!(
                total <= limit,
                "{} {}: {total} E RMS (limit {limit})",
                s[stage]["stage"],
                c["component"]
            );
        }
    }
}

#[test]
fn calibrated_run_is_within_half_an_eotvos_of_the_noise_floor_at_300_m_and_the_file_serves_again() {
    let tmp = tempfile::tempdir().unwrap();
    // Default instrument errors: scale and misalignment 1e-5, bias, drift, temperature, 5 E/√Hz
    // with 1/f noise, gyro, accelerometer, position and attitude noise; longer lines at 20 Hz.
    let scenario = BASE
        .replace("line_length_m = 3000.0", "line_length_m = 6000.0")
        .replace("sample_rate_hz = 10.0", "sample_rate_hz = 20.0");
    simulate_survey(tmp.path(), &scenario, "");
    run(tmp.path());
    let s = score(tmp.path());
    assert_within_half_an_eotvos_of_the_floor(&s, "");
    // The calibration written by `calibrate` serves the same flight as a file.
    let survey = tmp.path().join("survey");
    let cal = survey.join("cal.toml");
    ok(&[
        "--quiet",
        "calibrate",
        survey.join("recipe.toml").to_str().unwrap(),
        "--out",
        cal.to_str().unwrap(),
    ]);
    let text = std::fs::read_to_string(&cal).unwrap();
    assert!(text.contains("layout = \"calibration/1\""), "{text}");
    assert!(survey.join("cal.report.txt").is_file());
    let recipe = survey.join("recipe.toml");
    let mut r = std::fs::read_to_string(&recipe).unwrap();
    r.push_str("\n[calibration]\nmode = \"file\"\nfile = \"cal.toml\"\n");
    std::fs::write(&recipe, r).unwrap();
    std::fs::remove_dir_all(tmp.path().join("run")).unwrap();
    run(tmp.path());
    let s2 = score(tmp.path());
    for (a, b) in s[0]["components"]
        .as_array()
        .unwrap()
        .iter()
        .zip(s2[0]["components"].as_array().unwrap())
    {
        let e1 = a["filtered_rms_error_e"].as_f64().unwrap();
        let e2 = b["filtered_rms_error_e"].as_f64().unwrap();
        assert!(
            (e1 - e2).abs() < 0.05,
            "{}: {e1} estimated, {e2} from the file",
            a["component"]
        );
    }
    // A damaged calibration file is located by key.
    std::fs::write(&cal, text.replacen("kappa = [", "kappa = [\"x\", ", 1)).unwrap();
    let o = gravgrad(&[
        "run",
        recipe.to_str().unwrap(),
        "--out",
        tmp.path().join("run2").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("cal.toml") && err.contains("kappa"), "{err}");
    assert!(!tmp.path().join("run2/lines.parquet").exists());
}

#[test]
fn a_partial_instrument_gives_what_it_sees_and_names_what_it_cannot() {
    let tmp = tempfile::tempdir().unwrap();
    let scenario = format!(
        "{BASE}{}\npairs = [\"xx\", \"yy\", \"xy\", \"yx\"]\n",
        PERFECT
    );
    simulate_survey(tmp.path(), &scenario, "\n[calibration]\nmode = \"none\"\n");
    // Asking for all six components: refused, naming the blind combinations.
    let recipe = tmp.path().join("survey/recipe.toml");
    let o = gravgrad(&[
        "run",
        recipe.to_str().unwrap(),
        "--out",
        tmp.path().join("run").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    let text = format!(
        "{}{}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    );
    assert!(text.contains("Gxz") && text.contains("Gzz"), "{text}");
    // Asking for what it sees: Gxx, Gyy, Gxy from the pairs, α from the gyros.
    let mut r = std::fs::read_to_string(&recipe).unwrap();
    r.push_str("\n[rotation]\ncomponents = [\"Gxx\", \"Gyy\", \"Gxy\"]\n");
    std::fs::write(&recipe, r).unwrap();
    let o = gravgrad(&[
        "run",
        recipe.to_str().unwrap(),
        "--out",
        tmp.path().join("run").to_str().unwrap(),
    ]);
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    assert!(String::from_utf8_lossy(&o.stderr).contains("from the gyros"));
    let s = score(tmp.path());
    for c in s[0]["components"].as_array().unwrap() {
        let name = c["component"].as_str().unwrap();
        let rms = c["rms_error_e"].as_f64();
        match name {
            "gxx" | "gyy" | "gxy" => {
                let rms = rms.unwrap();
                let mean = c["mean_error_e"].as_f64().unwrap();
                eprintln!("partial {name}: mean {mean:.2e} rms {rms:.2e} E");
                assert!((mean * mean + rms * rms).sqrt() < 0.05, "{name}: {rms}");
            }
            _ => assert!(rms.is_none(), "{name} should be absent (NaN), got {rms:?}"),
        }
    }
}

/// Columns of a CSV table written by gravgrad (after its `#` comment line).
fn csv_table(path: &Path) -> Vec<Vec<f64>> {
    let text = std::fs::read_to_string(path).unwrap();
    let rows: Vec<Vec<f64>> = text
        .lines()
        .filter(|l| !l.starts_with('#'))
        .skip(1)
        .map(|l| l.split(',').map(|c| c.parse().unwrap()).collect())
        .collect();
    (0..rows[0].len())
        .map(|k| rows.iter().map(|r| r[k]).collect())
        .collect()
}

#[test]
fn terrain_command_fast_engine_agrees_with_the_exact_sum_and_locates_bad_points() {
    let tmp = tempfile::tempdir().unwrap();
    let dem = "data/demo/dem.tif";
    let fast = tmp.path().join("fast.csv");
    let exact = tmp.path().join("exact.csv");
    for (out, extra) in [(&fast, None), (&exact, Some("--exact"))] {
        let mut args = vec![
            "--quiet",
            "terrain",
            dem,
            "--clearance",
            "90",
            "--step",
            "7",
            "--out",
            out.to_str().unwrap(),
        ];
        args.extend(extra);
        ok(&args);
    }
    let (f, e) = (csv_table(&fast), csv_table(&exact));
    assert!(f[0].len() > 300, "{} points", f[0].len());
    for c in 3..9 {
        let worst = f[c]
            .iter()
            .zip(&e[c])
            .map(|(a, b)| (a - b).abs())
            .fold(0.0, f64::max);
        let largest = e[c].iter().map(|v| v.abs()).fold(0.0, f64::max);
        eprintln!("component {c}: largest {largest:.2} E, worst difference {worst:.2e} E");
        assert!(largest > 1.0 && worst <= 0.1, "component {c}: {worst} E");
    }
    // Points from a file; a bad cell is named by row and column.
    let pts = tmp.path().join("points.csv");
    std::fs::write(
        &pts,
        format!(
            "easting,northing,height\n{},{},300\n{},{},oops\n",
            f[0][0], f[1][0], f[0][1], f[1][1]
        ),
    )
    .unwrap();
    let o = gravgrad(&[
        "terrain",
        dem,
        "--points",
        pts.to_str().unwrap(),
        "--out",
        tmp.path().join("p.csv").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("row 3") && err.contains("`height`"), "{err}");
}

/// A terrain model of 8400 × 8000 cells of 30 m (past the 2^26 cells a whole read may hold) as a
/// classic (CDF-2) NetCDF file, `elevation(y, x)` int16 with y running south to north, sparse on
/// disk: only the cells of `rows` × `cols` (north-up) hold `height`, the rest is a hole read as
/// 0 m. With `copy`, the same cells are also written alone, by our writer, as a small file.
mod big_dem {
    use std::ops::Range;
    use std::os::unix::fs::FileExt;
    use std::path::Path;

    pub const W: usize = 8400;
    pub const H: usize = 8000;
    pub const CELL: f64 = 30.0;
    /// The outer north-west corner, EPSG:32753 (m).
    pub const X0: f64 = 400_000.0;
    pub const Y0: f64 = 7_400_000.0;

    /// The invented terrain at (`col`, `row`), m: a hill on a plane, different in every cell.
    pub fn height(col: usize, row: usize) -> i16 {
        let (dx, dy) = (col as f64 - 4200.0, row as f64 - 4000.0);
        (150.0 + 0.1 * col as f64 + 400.0 * (-(dx * dx + dy * dy) / 20_000.0).exp()) as i16
    }

    fn x(c: usize) -> f64 {
        X0 + (c as f64 + 0.5) * CELL
    }
    /// The centre of file row `j` (south to north).
    fn y(j: usize) -> f64 {
        Y0 - H as f64 * CELL + (j as f64 + 0.5) * CELL
    }

    fn name(out: &mut Vec<u8>, n: &str) {
        out.extend((n.len() as u32).to_be_bytes());
        out.extend(n.as_bytes());
        out.resize(out.len().next_multiple_of(4), 0);
    }

    pub fn write(big: &Path, rows: Range<usize>, cols: Range<usize>, copy: Option<&Path>) {
        type Var<'a> = (&'a str, &'a [u32], &'a [(&'a str, &'a str)], u32, u64);
        let vars: [Var; 4] = [
            ("crs", &[], &[("epsg_code", "EPSG:32753")], 4, 4),
            ("x", &[1], &[("units", "m"), ("axis", "X")], 6, W as u64 * 8),
            ("y", &[0], &[("units", "m"), ("axis", "Y")], 6, H as u64 * 8),
            (
                "elevation",
                &[0, 1],
                &[("units", "m"), ("grid_mapping", "crs")],
                3,
                (W * H * 2) as u64,
            ),
        ];
        let header = |begins: &[u64]| {
            let mut h = b"CDF\x02".to_vec();
            h.extend(0u32.to_be_bytes());
            h.extend(10u32.to_be_bytes());
            h.extend(2u32.to_be_bytes());
            name(&mut h, "y");
            h.extend((H as u32).to_be_bytes());
            name(&mut h, "x");
            h.extend((W as u32).to_be_bytes());
            h.extend([0u8; 8]);
            h.extend(11u32.to_be_bytes());
            h.extend(4u32.to_be_bytes());
            for (k, (n, dims, attrs, t, bytes)) in vars.iter().enumerate() {
                name(&mut h, n);
                h.extend((dims.len() as u32).to_be_bytes());
                for d in *dims {
                    h.extend(d.to_be_bytes());
                }
                h.extend(12u32.to_be_bytes());
                h.extend((attrs.len() as u32).to_be_bytes());
                for (a, v) in *attrs {
                    name(&mut h, a);
                    h.extend(2u32.to_be_bytes());
                    name(&mut h, v);
                }
                h.extend(t.to_be_bytes());
                h.extend((*bytes as u32).to_be_bytes());
                h.extend(begins[k].to_be_bytes());
            }
            h
        };
        let mut begins = vec![header(&[0; 4]).len() as u64];
        for v in &vars[..3] {
            begins.push(begins.last().unwrap() + v.4);
        }
        let mut bytes = header(&begins);
        bytes.extend(0i32.to_be_bytes());
        bytes.extend((0..W).flat_map(|c| x(c).to_be_bytes()));
        bytes.extend((0..H).flat_map(|j| y(j).to_be_bytes()));
        let f = std::fs::File::create(big).unwrap();
        f.set_len(begins[3] + vars[3].4).unwrap();
        f.write_all_at(&bytes, 0).unwrap();
        for r in rows.clone() {
            let cells: Vec<u8> = cols
                .clone()
                .flat_map(|c| height(c, r).to_be_bytes())
                .collect();
            let at = begins[3] + (((H - 1 - r) * W + cols.start) * 2) as u64;
            f.write_all_at(&cells, at).unwrap();
        }
        if let Some(copy) = copy {
            use gravgrad_netcdf::{NcWriter, VarData};
            let mut w = NcWriter::new();
            let dy = w.add_dimension("y", rows.len()).unwrap();
            let dx = w.add_dimension("x", cols.len()).unwrap();
            let crs = w.add_variable("crs", &[], VarData::I32(vec![0])).unwrap();
            w.add_attribute(crs, "epsg_code", "EPSG:32753").unwrap();
            let xs = cols.clone().map(x).collect();
            let vx = w.add_variable("x", &[dx], VarData::F64(xs)).unwrap();
            w.add_attribute(vx, "units", "m").unwrap();
            // South to north, as in the big file.
            let ys = rows.clone().rev().map(|r| y(H - 1 - r)).collect();
            let vy = w.add_variable("y", &[dy], VarData::F64(ys)).unwrap();
            w.add_attribute(vy, "units", "m").unwrap();
            let z = rows
                .clone()
                .rev()
                .flat_map(|r| cols.clone().map(move |c| height(c, r)))
                .collect();
            let vz = w
                .add_variable("elevation", &[dy, dx], VarData::I16(z))
                .unwrap();
            w.add_attribute(vz, "units", "m").unwrap();
            w.add_attribute(vz, "grid_mapping", "crs").unwrap();
            w.write(copy).unwrap();
        }
    }
}

/// `gravgrad terrain --points` on a DEM past the whole-read limit reads only the window the
/// points need (their extent plus `--margin`): the same tensors as from a small copy of those
/// cells; a point off the DEM is the run's coverage error naming both extents; evaluating every
/// cell (`--height`) needs the whole DEM and is refused by its size.
#[test]
fn terrain_command_reads_only_the_window_of_a_big_dem() {
    use big_dem::{CELL, H, W, X0, Y0};
    let tmp = tempfile::tempdir().unwrap();
    let (big, copy) = (tmp.path().join("big.nc"), tmp.path().join("copy.nc"));
    // Points over the hill within 3 km of column 4200, row 4000; a 2 km margin: the window is
    // columns about 4000 to 4400 and rows 3800 to 4200; the copy holds a few cells more.
    let (rows, cols) = (3780..4220, 3980..4420);
    big_dem::write(&big, rows.clone(), cols.clone(), Some(&copy));
    let centre = (X0 + 4200.5 * CELL, Y0 - 4000.5 * CELL);
    let pts = tmp.path().join("points.csv");
    let mut text = "easting,northing,height\n".to_string();
    for (k, (de, dn)) in [
        (0.0, 0.0),
        (-3000.0, 1500.0),
        (2500.0, -3000.0),
        (900.0, 2200.0),
    ]
    .iter()
    .enumerate()
    {
        text += &format!(
            "{},{},{}\n",
            centre.0 + de,
            centre.1 + dn,
            700.0 + 40.0 * k as f64
        );
    }
    std::fs::write(&pts, text).unwrap();
    let out = |name: &str| tmp.path().join(name);
    for (dem, table) in [(&big, "big.csv"), (&copy, "copy.csv")] {
        ok(&[
            "terrain",
            dem.to_str().unwrap(),
            "--points",
            pts.to_str().unwrap(),
            "--margin",
            "2000",
            "--out",
            out(table).to_str().unwrap(),
        ]);
    }
    let (b, c) = (csv_table(&out("big.csv")), csv_table(&out("copy.csv")));
    assert_eq!(b[0].len(), 4);
    // The same window, the same model: the same numbers, and a terrain effect of tens of E.
    assert_eq!(b, c);
    assert!(b[8].iter().any(|v| v.abs() > 10.0), "gzz {:?}", b[8]);

    // A point 10 km east of the DEM's east edge.
    let east = X0 + W as f64 * CELL + 10_000.0;
    std::fs::write(
        &pts,
        format!("easting,northing,height\n{east},{},900\n", centre.1),
    )
    .unwrap();
    let o = gravgrad(&[
        "terrain",
        big.to_str().unwrap(),
        "--points",
        pts.to_str().unwrap(),
        "--out",
        out("off.csv").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    let south = Y0 - H as f64 * CELL;
    assert!(
        err.contains(&format!(
            "spans x {X0:.0} to {:.0}, y {south:.0} to {Y0:.0} m",
            X0 + W as f64 * CELL
        )) && err.contains("but the survey plus the margin needs x")
            && err.contains("big.nc"),
        "{err}"
    );

    // Every cell as a point: the whole DEM would be held, past the limit; refused from the
    // header, naming the flag, the size and what to change.
    let o = gravgrad(&[
        "terrain",
        big.to_str().unwrap(),
        "--height",
        "900",
        "--out",
        out("all.csv").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("--height over every cell of the terrain model: 8400 × 8000 = 67200000 cells")
            && err.contains("about 5376 MB")
            && err.contains("the limit is 10000000 cells")
            && err.contains("give --extent WEST,EAST,SOUTH,NORTH")
            && err.contains("big.nc"),
        "{err}"
    );
    assert!(!out("all.csv").exists());
}

/// `gravgrad terrain --height` with `--extent` on the same big DEM reads only the extent plus
/// `--margin` and evaluates every `--step`-th cell inside it: the same table from the big file
/// as from the small copy, in CSV and in Parquet (written a batch at a time); an extent of more
/// points than one command evaluates is refused before the DEM is read, naming the `--step` that
/// fits.
#[test]
fn terrain_surface_over_an_extent_of_a_big_dem_reads_only_its_window() {
    use big_dem::{CELL, X0, Y0};
    let tmp = tempfile::tempdir().unwrap();
    let (big, copy) = (tmp.path().join("big.nc"), tmp.path().join("copy.nc"));
    let (rows, cols) = (3780..4220, 3980..4420);
    big_dem::write(&big, rows, cols, Some(&copy));
    let out = |name: &str| tmp.path().join(name);
    // 2 km × 1.5 km around the hill's top (column 4200, row 4000); a 2 km margin.
    let (ce, cn) = (X0 + 4200.0 * CELL, Y0 - 4000.0 * CELL);
    let extent = format!(
        "{},{},{},{}",
        ce - 1000.0,
        ce + 1000.0,
        cn - 750.0,
        cn + 750.0
    );
    let args = |dem: &Path, table: &str| {
        ok(&[
            "terrain",
            dem.to_str().unwrap(),
            "--height",
            "1000",
            "--extent",
            &extent,
            "--margin",
            "2000",
            "--step",
            "4",
            "--out",
            out(table).to_str().unwrap(),
        ])
    };
    args(&big, "big.csv");
    args(&copy, "copy.csv");
    args(&big, "big.parquet");
    let (b, c) = (csv_table(&out("big.csv")), csv_table(&out("copy.csv")));
    // Centres inside 2000 m × 1500 m of 30 m cells: 66 × 50 cells (the extent's edges fall
    // inside cells), every 4th: 17 × 13 points.
    assert_eq!(b[0].len(), 17 * 13);
    assert_eq!(b, c);
    for (k, (e, n)) in b[0].iter().zip(&b[1]).enumerate() {
        assert!(
            (ce - 1000.0..=ce + 1000.0).contains(e) && (cn - 750.0..=cn + 750.0).contains(n),
            "point {k}: {e}, {n}"
        );
        assert_eq!(b[2][k], 1000.0);
    }
    assert!(b[8].iter().any(|v| v.abs() > 10.0), "gzz {:?}", b[8]);
    for (k, name) in [
        "easting", "northing", "height", "gxx", "gxy", "gxz", "gyy", "gyz", "gzz",
    ]
    .iter()
    .enumerate()
    {
        assert_eq!(parquet_f64(&out("big.parquet"), name), b[k], "{name}");
    }

    // 15 km × 15 km: 500 × 500 points at --step 1, past the 200,000 evaluated at once.
    let o = gravgrad(&[
        "terrain",
        big.to_str().unwrap(),
        "--clearance",
        "80",
        "--extent",
        &format!(
            "{},{},{},{}",
            ce - 7500.0,
            ce + 7500.0,
            cn - 7500.0,
            cn + 7500.0
        ),
        "--margin",
        "0",
        "--out",
        out("wide.csv").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("--clearance: 250000 points, more than the 200000")
            && err.contains("give --step 2 or a smaller --extent"),
        "{err}"
    );
    assert!(!out("wide.csv").exists());
}

/// Every value of column `name` of one of our Parquet tables, read by `get` (row, column index).
pub fn parquet_column<T>(
    path: &Path,
    name: &str,
    get: impl Fn(&parquet::record::Row, usize) -> T,
) -> Vec<T> {
    use parquet::file::reader::{FileReader, SerializedFileReader};
    let r = SerializedFileReader::new(std::fs::File::open(path).unwrap()).unwrap();
    let schema = r.metadata().file_metadata().schema_descr_ptr();
    let k = (0..schema.num_columns())
        .find(|&i| schema.column(i).name() == name)
        .unwrap_or_else(|| panic!("no column {name}"));
    r.get_row_iter(None)
        .unwrap()
        .map(|row| get(&row.unwrap(), k))
        .collect()
}

/// Every f64 column named `name` of one of our Parquet tables.
pub fn parquet_f64(path: &Path, name: &str) -> Vec<f64> {
    parquet_column(path, name, |row, k| {
        parquet::record::RowAccessor::get_double(row, k).unwrap()
    })
}

#[test]
fn a_netcdf_terrain_model_gives_the_same_reduction_as_the_geotiff() {
    let tmp = tempfile::tempdir().unwrap();
    // The demo survey with its DEM also written as a NetCDF-CF grid (our writer; read back by the
    // NetCDF reader that xarray and GDAL files pass through in the netcdf crate's tests).
    let demo = crate::root().join("data/demo");
    let survey = copy_demo(tmp.path());
    let raster = gravgrad_ingest::geotiff_reader::read_geotiff(&demo.join("dem.tif")).unwrap();
    let grid = gravgrad_netcdf::GridFile::new("demo terrain", "gravgrad test").with_variable(
        "elevation",
        "terrain height above the ellipsoid",
        "m",
        &raster,
    );
    gravgrad_netcdf::write_grids(&survey.join("dem.nc"), &grid).unwrap();
    let tif_run = tmp.path().join("tif");
    let nc_run = tmp.path().join("nc");
    ok(&[
        "--quiet",
        "run",
        survey.join("recipe.toml").to_str().unwrap(),
        "--out",
        tif_run.to_str().unwrap(),
    ]);
    let recipe = survey.join("recipe.toml");
    let text = std::fs::read_to_string(&recipe)
        .unwrap()
        .replace("dem.tif", "dem.nc");
    std::fs::write(&recipe, text).unwrap();
    ok(&[
        "--quiet",
        "run",
        recipe.to_str().unwrap(),
        "--out",
        nc_run.to_str().unwrap(),
    ]);
    for c in ["gxx", "gxy", "gxz", "gyy", "gyz", "gzz"] {
        let a = parquet_f64(
            &tif_run.join("lines.parquet"),
            &format!("terrain_model_{c}"),
        );
        let b = parquet_f64(&nc_run.join("lines.parquet"), &format!("terrain_model_{c}"));
        let largest = a.iter().map(|v| v.abs()).fold(0.0, f64::max);
        assert!(largest > 1.0, "{c}: terrain effect {largest} E");
        let worst = a
            .iter()
            .zip(&b)
            .map(|(x, y)| (x - y).abs())
            .fold(0.0, f64::max);
        assert!(
            worst <= 1e-9 * largest,
            "{c}: GeoTIFF and NetCDF runs differ by {worst} E"
        );
    }
}

#[test]
fn the_aircraft_self_gradient_is_regressed_out() {
    let tmp = tempfile::tempdir().unwrap();
    // Every default error, plus an aircraft self-gradient of 5 E per gust RMS of relative roll and
    // of relative pitch (about 65 E in a 20° bank); the log carries the aircraft attitude.
    let scenario = BASE
        .replace("line_length_m = 3000.0", "line_length_m = 6000.0")
        .replace("sample_rate_hz = 10.0", "sample_rate_hz = 20.0")
        + "\n[instrument]\nself_gradient_e = 5.0\n";
    simulate_survey(tmp.path(), &scenario, "");
    let flight = std::fs::read_dir(tmp.path().join("survey/flights"))
        .unwrap()
        .map(|e| e.unwrap().path())
        .find(|p| p.extension().is_some_and(|e| e == "csv"))
        .unwrap();
    assert!(!csv_column(&flight, "ac_roll").is_empty());
    run(tmp.path());
    let s = score(tmp.path());
    assert_within_half_an_eotvos_of_the_floor(&s, "self-gradient");
    let cal = std::fs::read_to_string(
        std::fs::read_dir(tmp.path().join("run/calibration"))
            .unwrap()
            .next()
            .unwrap()
            .unwrap()
            .path(),
    )
    .unwrap();
    assert!(cal.contains("self_gradient_m_s2_per_rad"), "{cal}");
    // The same log without the aircraft attitude: the self-gradient stays in, and at least one
    // component is then well above the floor (so the regression above did real work).
    let text = std::fs::read_to_string(&flight).unwrap();
    let mut lines = text.lines();
    let mut kept = String::new();
    let mut drop: Vec<usize> = Vec::new();
    for l in lines.by_ref() {
        if l.starts_with('#') {
            continue;
        }
        let head: Vec<&str> = l.split(',').collect();
        drop = (0..head.len())
            .filter(|&k| head[k].starts_with("ac_"))
            .collect();
        let keep: Vec<&str> = (0..head.len())
            .filter(|k| !drop.contains(k))
            .map(|k| head[k])
            .collect();
        kept.push_str(&keep.join(","));
        kept.push('\n');
        break;
    }
    assert_eq!(drop.len(), 3);
    for l in lines {
        let cells: Vec<&str> = l.split(',').collect();
        let keep: Vec<&str> = (0..cells.len())
            .filter(|k| !drop.contains(k))
            .map(|k| cells[k])
            .collect();
        kept.push_str(&keep.join(","));
        kept.push('\n');
    }
    let survey = tmp.path().join("survey");
    std::fs::write(survey.join("without-aircraft.csv"), kept).unwrap();
    let recipe = survey.join("recipe.toml");
    let r = std::fs::read_to_string(&recipe).unwrap();
    let start = r.find("flights = [").unwrap();
    let end = start + r[start..].find(']').unwrap() + 1;
    let r = format!(
        "{}flights = [\"without-aircraft.csv\"]{}",
        &r[..start],
        &r[end..]
    );
    std::fs::write(&recipe, r).unwrap();
    std::fs::remove_dir_all(tmp.path().join("run")).unwrap();
    run(tmp.path());
    let s2 = score(tmp.path());
    let worst = s2[0]["components"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| {
            c["filtered_rms_error_e"].as_f64().unwrap()
                - c["filtered_noise_floor_e"].as_f64().unwrap()
        })
        .fold(f64::NEG_INFINITY, f64::max);
    eprintln!("without the regression: worst {worst:.2} E above the floor");
    assert!(
        worst > 1.0,
        "without the aircraft attitude the self-gradient should show: {worst} E"
    );
}

#[test]
fn the_recipe_continues_the_derived_grids_upwards_and_refuses_downwards() {
    let tmp = tempfile::tempdir().unwrap();
    let survey = copy_demo(tmp.path());
    let recipe = survey.join("recipe.toml");
    let base = std::fs::read_to_string(&recipe).unwrap();
    let rms = |dir: &Path| -> f64 {
        let r = gravgrad_netcdf::read_grid(&dir.join("grids.nc"), Some("gzz")).unwrap();
        let v: Vec<f64> = r.values.iter().copied().filter(|x| x.is_finite()).collect();
        let m = v.iter().sum::<f64>() / v.len() as f64;
        (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / v.len() as f64).sqrt()
    };
    ok(&[
        "--quiet",
        "run",
        recipe.to_str().unwrap(),
        "--out",
        tmp.path().join("at").to_str().unwrap(),
    ]);
    std::fs::write(
        &recipe,
        base.replace("[grid]", "[grid]\nupward_continuation_m = 200.0"),
    )
    .unwrap();
    ok(&[
        "--quiet",
        "run",
        recipe.to_str().unwrap(),
        "--out",
        tmp.path().join("up").to_str().unwrap(),
    ]);
    let (at, up) = (rms(&tmp.path().join("at")), rms(&tmp.path().join("up")));
    eprintln!("gzz RMS on the flight surface {at:.3} E, 200 m higher {up:.3} E");
    assert!(up < 0.8 * at, "{up} vs {at}");
    std::fs::write(
        &recipe,
        base.replace("[grid]", "[grid]\nupward_continuation_m = -50.0"),
    )
    .unwrap();
    let o = gravgrad(&[
        "run",
        recipe.to_str().unwrap(),
        "--out",
        tmp.path().join("down").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    let text = format!(
        "{}{}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    );
    assert!(text.contains("grid.upward_continuation_m"), "{text}");
}

/// Issue 8 on the demo survey: gridded Gzz, and every component of the full tensor derived from all
/// measured grids, against the simulator's geology at the grid nodes (on the flight surface),
/// within 1.2 × the noise floor plus what gridding the noise-free truth costs.
#[test]
fn demo_grids_are_within_the_noise_floor_plus_the_gridding_error() {
    let tmp = tempfile::tempdir().unwrap();
    let demo = crate::root().join("data/demo");
    let out = tmp.path().join("run");
    ok(&[
        "--quiet",
        "run",
        demo.join("recipe.toml").to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    let s = ok(&[
        "--quiet",
        "--json",
        "score",
        out.to_str().unwrap(),
        demo.join("truth").to_str().unwrap(),
    ]);
    let v: serde_json::Value = serde_json::from_str(&s).unwrap();
    let grids = v["grids"].as_array().unwrap();
    assert_eq!(grids.len(), 12, "{grids:?}");
    for g in grids {
        let name = g["grid"].as_str().unwrap();
        let (err, limit) = (
            g["rms_error_e"].as_f64().unwrap(),
            g["limit_e"].as_f64().unwrap(),
        );
        eprintln!(
            "{name}: {err:.3} E, limit {limit:.3} E over {} cells",
            g["cells"]
        );
        assert!(g["cells"].as_u64().unwrap() > 1000, "{name}");
        if name == "measured_gzz" || !name.starts_with("measured_") {
            assert!(err <= limit, "{name}: {err} E > {limit} E");
        }
    }
}
