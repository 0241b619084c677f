//! The output folder and the names and settings of a run: checked before any work, unique flight
//! names, `output.formats` obeyed, records independent of how the recipe's path is typed, and
//! `--threads` bounded.

use crate::{copy_demo, root, run_to_end};
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::time::{Duration, Instant};

/// `gravgrad run RECIPE --out OUT` (not quiet: the log shows whether any work began).
fn run_into(recipe: &Path, out: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_gravgrad"))
        .arg("run")
        .arg(recipe)
        .arg("--out")
        .arg(out)
        .output()
        .expect("gravgrad runs")
}

/// Asserts exit 2, one error naming `what` and `--out`, and no work begun (the log's first line
/// of work is `reading <recipe>`).
fn assert_refused(o: &Output, what: &str) -> String {
    let err = String::from_utf8_lossy(&o.stderr).into_owned();
    assert_eq!(o.status.code(), Some(2), "{err}");
    assert!(err.contains(what) && err.contains("--out"), "{err}");
    assert!(
        !err.contains("reading"),
        "work began before the refusal: {err}"
    );
    assert_eq!(
        err.lines().filter(|l| l.starts_with("error")).count(),
        1,
        "{err}"
    );
    err
}

/// Every file under `dir`, relative, sorted.
fn files(dir: &Path) -> Vec<String> {
    let mut out = Vec::new();
    let mut stack = vec![PathBuf::new()];
    while let Some(rel) = stack.pop() {
        for e in std::fs::read_dir(dir.join(&rel)).unwrap().flatten() {
            let rel = rel.join(e.file_name());
            if e.file_type().unwrap().is_dir() {
                stack.push(rel);
            } else {
                out.push(rel.to_string_lossy().into_owned());
            }
        }
    }
    out.sort();
    out
}

#[test]
fn root_system_home_and_input_folders_are_refused_as_output_before_any_work() {
    let tmp = tempfile::tempdir().unwrap();
    let survey = copy_demo(tmp.path());
    let recipe = survey.join("recipe.toml");
    for (out, what) in [
        (PathBuf::from("/"), "the root folder"),
        (PathBuf::from("/usr"), "a system folder"),
        (PathBuf::from("/etc/gravgrad"), "a system folder"),
        (PathBuf::from("/proc/self"), "a system folder"),
        (PathBuf::from("/home/someone"), "a home folder"),
        (survey.clone(), "holds the input"),
        (survey.join("flights"), "holds the input"),
        (survey.join("flights/.."), "holds the input"),
    ] {
        let o = run_into(&recipe, &out);
        assert_refused(&o, what);
    }
    // A home folder itself, as $HOME names it.
    let home = tmp.path().join("home");
    std::fs::create_dir_all(&home).unwrap();
    let o = Command::new(env!("CARGO_BIN_EXE_gravgrad"))
        .args(["run", recipe.to_str().unwrap(), "--out"])
        .arg(&home)
        .env("HOME", &home)
        .output()
        .unwrap();
    assert_refused(&o, "a home folder");
}

#[test]
fn a_dangling_symlink_as_output_folder_is_refused_naming_its_target() {
    let tmp = tempfile::tempdir().unwrap();
    let survey = copy_demo(tmp.path());
    let link = tmp.path().join("out");
    std::os::unix::fs::symlink(tmp.path().join("nowhere"), &link).unwrap();
    let o = run_into(&survey.join("recipe.toml"), &link);
    let err = assert_refused(&o, "nowhere");
    assert!(
        err.contains("symbolic link") && !err.contains("File exists"),
        "{err}"
    );
}

#[test]
fn an_output_folder_through_a_symlink_is_replaced_and_the_link_kept() {
    let tmp = tempfile::tempdir().unwrap();
    let survey = copy_demo(tmp.path());
    let real = tmp.path().join("real");
    std::fs::create_dir(&real).unwrap();
    let link = tmp.path().join("out");
    std::os::unix::fs::symlink(&real, &link).unwrap();
    run_to_end(&survey.join("recipe.toml"), &link);
    assert!(
        std::fs::symlink_metadata(&link)
            .unwrap()
            .file_type()
            .is_symlink()
    );
    assert!(real.join("provenance.json").is_file());
}

#[test]
fn a_read_only_output_folder_is_refused_before_any_work() {
    use std::os::unix::fs::PermissionsExt;
    use std::os::unix::process::CommandExt;
    let tmp = tempfile::tempdir().unwrap();
    let survey = copy_demo(tmp.path());
    let out = tmp.path().join("out");
    std::fs::create_dir(&out).unwrap();
    std::fs::set_permissions(&out, std::fs::Permissions::from_mode(0o555)).unwrap();
    // Everything readable by all, for the unprivileged user below.
    std::fs::set_permissions(tmp.path(), std::fs::Permissions::from_mode(0o755)).unwrap();
    let mut c = Command::new(env!("CARGO_BIN_EXE_gravgrad"));
    c.arg("run")
        .arg(survey.join("recipe.toml"))
        .arg("--out")
        .arg(&out);
    // The superuser writes into any folder: run as `nobody` (uid 65534) then.
    let root_user = std::fs::File::create(out.join("probe")).is_ok();
    if root_user {
        std::fs::remove_file(out.join("probe")).unwrap();
        c.uid(65534).gid(65534);
    }
    let o = c.output().unwrap();
    let err = assert_refused(&o, "cannot write in the output folder");
    assert!(err.contains(&out.display().to_string()), "{err}");
}

#[test]
fn an_output_folder_holding_files_no_run_writes_is_refused_and_left_untouched() {
    let tmp = tempfile::tempdir().unwrap();
    let survey = copy_demo(tmp.path());
    let out = tmp.path().join("out");
    std::fs::create_dir(&out).unwrap();
    std::fs::write(out.join("notes.txt"), "mine").unwrap();
    let o = run_into(&survey.join("recipe.toml"), &out);
    assert_refused(&o, "notes.txt");
    assert_eq!(files(&out), ["notes.txt"]);
}

#[test]
fn flights_of_one_name_are_refused_naming_both_files_and_the_key() {
    let tmp = tempfile::tempdir().unwrap();
    let survey = copy_demo(tmp.path());
    let demo = root().join("data/demo/flights");
    std::fs::create_dir_all(survey.join("A")).unwrap();
    std::fs::create_dir_all(survey.join("B")).unwrap();
    let f01 = "kestrand-flats-demo-f01";
    std::fs::copy(
        demo.join(format!("{f01}.parquet")),
        survey.join("A/x.parquet"),
    )
    .unwrap();
    std::fs::copy(
        demo.join(format!("{f01}.parquet")),
        survey.join("B/x.parquet"),
    )
    .unwrap();
    std::fs::copy(
        demo.join(format!("{f01}.csv")),
        survey.join(format!("flights/{f01}.csv")),
    )
    .unwrap();
    let base = std::fs::read_to_string(survey.join("recipe.toml")).unwrap();
    assert!(
        base.contains(r#"["flights/kestrand-flats-demo-f*.parquet"]"#),
        "{base}"
    );
    for (flights, says) in [
        (
            r#"["A/x.parquet", "B/x.parquet"]"#,
            "would both be the flight `x`",
        ),
        (
            r#"["flights/kestrand-flats-demo-f01.parquet", "flights/kestrand-flats-demo-f01.parquet"]"#,
            "is listed twice",
        ),
        (r#"["flights/*"]"#, "the same log in two formats"),
    ] {
        let recipe = survey.join("dup.toml");
        std::fs::write(
            &recipe,
            base.replace(r#"["flights/kestrand-flats-demo-f*.parquet"]"#, flights),
        )
        .unwrap();
        let out = tmp.path().join("out");
        for args in [vec!["check"], vec!["run"]] {
            let o = Command::new(env!("CARGO_BIN_EXE_gravgrad"))
                .args(&args)
                .arg(&recipe)
                .args(if args[0] == "run" {
                    vec!["--out", out.to_str().unwrap()]
                } else {
                    vec![]
                })
                .output()
                .unwrap();
            let text = format!(
                "{}{}",
                String::from_utf8_lossy(&o.stdout),
                String::from_utf8_lossy(&o.stderr)
            );
            assert_eq!(o.status.code(), Some(2), "{args:?} {flights}: {text}");
            assert!(text.contains(says), "{args:?} {flights}: {text}");
            assert!(
                text.contains("input.flights["),
                "{args:?} {flights}: {text}"
            );
        }
        assert!(!out.exists(), "{flights}: products written");
    }
    // Both files named.
    let recipe = survey.join("dup.toml");
    std::fs::write(
        &recipe,
        base.replace(
            r#"["flights/kestrand-flats-demo-f*.parquet"]"#,
            r#"["A/x.parquet", "B/x.parquet"]"#,
        ),
    )
    .unwrap();
    let o = run_into(&recipe, &tmp.path().join("out"));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("A/x.parquet") && err.contains("B/x.parquet"),
        "{err}"
    );
}

#[test]
fn output_formats_parquet_writes_only_the_line_table_and_what_is_always_written() {
    let tmp = tempfile::tempdir().unwrap();
    let survey = copy_demo(tmp.path());
    let base = std::fs::read_to_string(survey.join("recipe.toml")).unwrap();
    let recipe = survey.join("parquet_only.toml");
    std::fs::write(
        &recipe,
        format!("{base}\n[output]\nformats = [\"parquet\"]\n"),
    )
    .unwrap();
    let out = tmp.path().join("out");
    run_to_end(&recipe, &out);
    let written = files(&out);
    let mut kinds: Vec<&str> = written
        .iter()
        .map(|f| f.split('/').next().unwrap())
        .collect();
    kinds.dedup();
    assert_eq!(
        kinds,
        ["calibration", "lines.parquet", "provenance.json", "qc"],
        "{written:?}"
    );
    // And each other format alone adds exactly its files.
    for (format, expect) in [
        ("netcdf", "grids.nc"),
        ("geotiff", "grids/gzz.tif"),
        ("png", "maps/gzz.png"),
        ("hdf5", "survey.h5"),
        ("csv", "lines.csv"),
    ] {
        std::fs::write(
            &recipe,
            format!("{base}\n[output]\nformats = [\"{format}\"]\n"),
        )
        .unwrap();
        run_to_end(&recipe, &out);
        let written = files(&out);
        assert!(written.iter().any(|f| f == expect), "{format}: {written:?}");
        assert!(
            !written.iter().any(|f| f == "lines.parquet"),
            "{format}: {written:?}"
        );
        let others = [
            "grids.nc",
            "grids/gzz.tif",
            "maps/gzz.png",
            "survey.h5",
            "lines.csv",
        ];
        for o in others.iter().filter(|o| **o != expect) {
            assert!(!written.iter().any(|f| f == o), "{format} wrote {o}");
        }
    }
}

#[test]
fn survey_h5_and_provenance_inputs_do_not_depend_on_how_the_recipe_path_is_typed() {
    let tmp = tempfile::tempdir().unwrap();
    let survey = copy_demo(tmp.path());
    let (abs, rel) = (tmp.path().join("abs"), tmp.path().join("rel"));
    run_to_end(&survey.join("recipe.toml"), &abs);
    let o = Command::new(env!("CARGO_BIN_EXE_gravgrad"))
        .args([
            "--quiet",
            "run",
            "survey/../survey/recipe.toml",
            "--out",
            "rel",
        ])
        .current_dir(tmp.path())
        .output()
        .unwrap();
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    assert!(
        std::fs::read(abs.join("survey.h5")).unwrap()
            == std::fs::read(rel.join("survey.h5")).unwrap(),
        "survey.h5 differs with the recipe's path typed otherwise"
    );
    let inputs = |d: &Path| -> serde_json::Value {
        let v: serde_json::Value =
            serde_json::from_slice(&std::fs::read(d.join("provenance.json")).unwrap()).unwrap();
        serde_json::json!([v["recipe_path"], v["recipe_folder"], v["inputs"]])
    };
    assert_eq!(inputs(&abs), inputs(&rel));
}

#[test]
fn threads_beyond_the_bound_are_refused_at_once_naming_the_option() {
    for n in ["100000", "0", "many"] {
        let clock = Instant::now();
        let o = Command::new(env!("CARGO_BIN_EXE_gravgrad"))
            .args(["--threads", n, "check", "data/demo/recipe.toml"])
            .current_dir(root())
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(2), "{n}: {err}");
        assert!(
            err.contains("--threads") && err.contains("1024"),
            "{n}: {err}"
        );
        assert!(
            clock.elapsed() < Duration::from_secs(5),
            "{n}: {:?}",
            clock.elapsed()
        );
    }
}
