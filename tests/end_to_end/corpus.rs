//! The bad-input corpus (`tests/corpus/bad`, written by `tests/corpus/make_corpus.py`): each file
//! is broken in one known place, and the check must name that place and exit with code 2.

use crate::{check_json, problems};

/// Where the error must be reported. Rows follow `docs/formats.md`: CSV header = row 1; Parquet
/// and HDF5 first record = row 1. The expected places come from how make_corpus.py broke each file.
struct Case {
    file: &'static str,
    args: &'static [&'static str],
    row: Option<u64>,
    column: Option<&'static str>,
    key: Option<&'static str>,
    part: Option<&'static str>,
    says: &'static str,
}

const fn case(
    file: &'static str,
    row: Option<u64>,
    column: Option<&'static str>,
    says: &'static str,
) -> Case {
    Case {
        file,
        args: &[],
        row,
        column,
        key: None,
        part: None,
        says,
    }
}

const fn keyed(file: &'static str, key: &'static str, says: &'static str) -> Case {
    Case {
        file,
        args: &[],
        row: None,
        column: None,
        key: Some(key),
        part: None,
        says,
    }
}

const CASES: &[Case] = &[
    case(
        "missing_column.csv",
        Some(1),
        Some("fz"),
        "required column `fz` is missing",
    ),
    case(
        "text_in_number.csv",
        Some(7),
        Some("fy"),
        "expected a number, found `0.0x12`",
    ),
    case("nan_value.csv", Some(9), Some("wz"), "missing value"),
    case("empty_cell.csv", Some(4), Some("height"), "empty cell"),
    case(
        "time_backwards.csv",
        Some(13),
        Some("time"),
        "time goes backwards",
    ),
    case(
        "time_repeated.csv",
        Some(15),
        Some("time"),
        "repeats the previous row",
    ),
    case(
        "jittered_interval.csv",
        Some(20),
        Some("time"),
        "differs from the nominal",
    ),
    case(
        "latitude_95.csv",
        Some(6),
        Some("lat"),
        "value 95 is outside the plausible range -90 to 90",
    ),
    case(
        "longitude_200.csv",
        Some(8),
        Some("lon"),
        "outside the plausible range -180 to 180",
    ),
    case(
        "huge_value.csv",
        Some(10),
        Some("fx"),
        "value 1e308 is outside the plausible range",
    ),
    case("rate_in_degrees.csv", Some(11), Some("wz"), "rad/s"),
    case(
        "infinite_value.csv",
        Some(5),
        Some("zz_a"),
        "infinite value",
    ),
    case(
        "line_not_integer.csv",
        Some(16),
        Some("line"),
        "not an integer",
    ),
    case(
        "truncated_last_row.csv",
        Some(41),
        None,
        "9 cells where the header has 18",
    ),
    case("semicolons.csv", Some(1), None, "separated by semicolons"),
    case("blank_row_inside.csv", Some(21), None, "empty row"),
    // A byte-order mark and CRLF endings are accepted (docs/formats.md); these two files carry an
    // error elsewhere to prove that neither shifts rows nor leaks into the last cell.
    case(
        "bom_with_error.csv",
        Some(5),
        Some("fz"),
        "expected a number, found `abc`",
    ),
    case(
        "crlf_with_error.csv",
        Some(41),
        Some("line"),
        "expected a number, found `x`",
    ),
    case("empty.csv", Some(1), None, "the file is empty"),
    case("header_only.csv", Some(2), None, "no data rows"),
    case(
        "missing_column.parquet",
        None,
        Some("heading"),
        "required column `heading` is missing",
    ),
    case(
        "text_column.parquet",
        None,
        Some("pitch"),
        "numeric column stored as BYTE_ARRAY",
    ),
    case("null_value.parquet", Some(23), Some("fy"), "missing value"),
    case(
        "not_parquet.parquet",
        None,
        None,
        "not a readable Parquet file",
    ),
    Case {
        part: Some("flight_1"),
        ..case(
            "wrong_type.h5",
            None,
            Some("roll"),
            "numeric column stored as text",
        )
    },
    Case {
        part: Some("flight_1"),
        ..case(
            "unequal_length.h5",
            None,
            Some("wy"),
            "has 37 rows where `time` has 40",
        )
    },
    case(
        "no_layout.h5",
        None,
        None,
        "no group carries the attribute layout",
    ),
    keyed(
        "unknown_key_recipe.toml",
        "filter.cutof_wavelength_m",
        "unknown field `cutof_wavelength_m`",
    ),
    keyed(
        "axis_not_unit.toml",
        "pair[1].axis",
        "expected a unit vector",
    ),
    keyed(
        "duplicate_pair.toml",
        "pair[1].id",
        "pair id `zz` is used twice",
    ),
    keyed(
        "zero_baseline.toml",
        "pair[0].baseline_m",
        "baseline is zero",
    ),
    keyed("blind_to_gzz.toml", "pair", "cannot observe Gzz"),
    keyed(
        "recipe_bad_tension.toml",
        "grid.tension",
        "expected from 0 to 1",
    ),
    keyed(
        "recipe_no_flights_match.toml",
        "input.flights[1]",
        "matches no file",
    ),
    keyed("recipe_needs_gxz.toml", "pair", "cannot observe Gxz"),
    case("not_toml.toml", None, None, "not valid TOML"),
    // A navigation table that ends 1.4 s before the log: the first uncovered sample is located
    // in the gradiometer log (index 26, t = 2.6 s after the start: CSV row 28).
    Case {
        args: &["--navigation", "tests/corpus/bad/nav_ends_early.csv"],
        ..case(
            "../good/grad_only.csv",
            Some(28),
            Some("time"),
            "outside the navigation table's span",
        )
    },
];

#[test]
fn every_bad_file_is_located_and_exits_2() {
    assert!(CASES.len() >= 20);
    let mut failures = Vec::new();
    for c in CASES {
        let path = format!("tests/corpus/bad/{}", c.file);
        let mut args: Vec<&str> = c.args.to_vec();
        args.push(&path);
        let (code, report, stderr) = check_json(&args);
        if stderr.contains("panicked") {
            failures.push(format!("{}: panicked: {stderr}", c.file));
            continue;
        }
        if code != 2 {
            failures.push(format!("{}: exit code {code}, expected 2", c.file));
        }
        let errors: Vec<serde_json::Value> = problems(&report)
            .into_iter()
            .filter(|p| p["severity"] == "error")
            .collect();
        let hit = errors.iter().any(|p| {
            let l = &p["location"];
            p["message"].as_str().is_some_and(|m| m.contains(c.says))
                && l["row"].as_u64() == c.row
                && l["column"].as_str() == c.column
                && l["key"].as_str() == c.key
                && l["part"].as_str() == c.part
                && l["file"].as_str().is_some_and(|f| {
                    f.ends_with(c.file.trim_start_matches("../")) || c.key.is_some()
                })
        });
        if !hit {
            failures.push(format!(
                "{}: no error at row {:?}, column {:?}, key {:?} saying {:?}; got {}",
                c.file,
                c.row,
                c.column,
                c.key,
                c.says,
                serde_json::to_string(&errors).unwrap_or_default()
            ));
        }
        // One defect, one error: nothing reported twice for the same cause.
        if errors.len() != 1 {
            failures.push(format!(
                "{}: {} errors, expected exactly 1: {}",
                c.file,
                errors.len(),
                serde_json::to_string(&errors).unwrap_or_default()
            ));
        }
    }
    assert!(failures.is_empty(), "\n{}", failures.join("\n"));
}

#[test]
fn text_report_names_the_place_too() {
    let out = crate::gravgrad(&["check", "--quiet", "tests/corpus/bad/text_in_number.csv"]);
    assert_eq!(out.status.code(), Some(2));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains("tests/corpus/bad/text_in_number.csv, row 7, column `fy`: expected a number"),
        "{text}"
    );
}

/// How `gravgrad run` reaches a corpus file: as a flight log, an instrument file, a DEM, or the
/// file itself as the recipe.
fn recipe_reaching(c: &Case, dir: &std::path::Path) -> std::path::PathBuf {
    let bad = crate::root().join("tests/corpus/bad");
    let good = crate::root().join("tests/corpus/good");
    let q = |p: std::path::PathBuf| format!("{:?}", p.to_string_lossy());
    let path = bad.join(c.file);
    let text = std::fs::read_to_string(&path).unwrap_or_default();
    if c.file.ends_with(".toml") && !text.contains("\"instrument/1\"") {
        return path;
    }
    let mut flight = path.clone();
    let mut instrument = good.join("instrument.toml");
    let mut extra = String::new();
    if c.file.ends_with(".toml") {
        instrument = path.clone();
        flight = good.join("clean.csv");
    } else if c.file.ends_with(".tif") {
        flight = good.join("clean.csv");
        extra = format!("\n[terrain]\ndem = {}\n", q(path.clone()));
    }
    let navigation = match c.args {
        ["--navigation", nav] => format!("navigation = {}\n", q(crate::root().join(nav))),
        _ => String::new(),
    };
    let recipe = dir.join(format!("{}.recipe.toml", c.file.replace(['/', '.'], "_")));
    std::fs::write(
        &recipe,
        format!(
            "layout = \"recipe/1\"\n[input]\nflights = [{}]\n{navigation}[instrument]\npath = {}\n\
             [rotation]\ncomponents = [\"Gzz\"]\n{extra}",
            q(flight),
            q(instrument)
        ),
    )
    .unwrap();
    recipe
}

/// The DEM cases of the corpus (read by the GeoTIFF tests of the ingest crate): refused with the
/// TIFF tag that is wrong.
const DEM_CASES: &[Case] = &[
    case(
        "dem_rotated.tif",
        None,
        None,
        "ModelTransformationTag (34264)",
    ),
    case("dem_two_bands.tif", None, None, "SamplesPerPixel tag 277"),
    case(
        "dem_no_georef.tif",
        None,
        None,
        "ModelPixelScaleTag (33550)",
    ),
];

/// Every bad input of the corpus, reached through a recipe, makes `gravgrad run` exit 2 with an
/// error line on stderr that names the place as the check does: file, group, key, row, column.
#[test]
fn every_bad_input_stops_run_with_its_place() {
    let tmp = tempfile::tempdir().unwrap();
    let mut failures = Vec::new();
    for c in CASES.iter().chain(DEM_CASES) {
        let recipe = recipe_reaching(c, tmp.path());
        let out = tmp.path().join("out");
        let o = crate::gravgrad(&[
            "--quiet",
            "run",
            recipe.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
        ]);
        let stderr = String::from_utf8_lossy(&o.stderr);
        if o.status.code() != Some(2) || stderr.contains("panicked") {
            failures.push(format!("{}: exit {:?}: {stderr}", c.file, o.status.code()));
            continue;
        }
        // The place, in the order `Location` prints it.
        let mut place = Vec::new();
        if let Some(p) = c.part {
            place.push(format!("group `{p}`"));
        }
        if let Some(k) = c.key {
            place.push(format!("key `{k}`"));
        }
        if let Some(r) = c.row {
            place.push(format!("row {r}"));
        }
        if let Some(col) = c.column {
            place.push(format!("column `{col}`"));
        }
        let place = place.join(", ");
        let file = c.file.trim_start_matches("../");
        let hit = stderr.lines().any(|l| {
            l.starts_with("error: ")
                && l.contains(c.says)
                && (c.key.is_some()
                    || l.contains(&format!("{file}, {place}"))
                    || place.is_empty() && l.contains(&format!("{file}: ")))
                && (place.is_empty() || l.contains(&format!("{place}: ")))
        });
        if !hit {
            failures.push(format!(
                "{}: no error line naming `{place}` and saying {:?}; stderr:\n{stderr}",
                c.file, c.says
            ));
        }
        if out.join("lines.parquet").exists() {
            failures.push(format!("{}: products written despite the error", c.file));
        }
    }
    assert!(failures.is_empty(), "\n{}", failures.join("\n"));
}
