//! The Slurm job script of `gravgrad batch --emit slurm`: one bash file that is both the submitter
//! and the job body. `bash FILE` submits it twice with `sbatch --parsable`: as a job array with one
//! task per flight unit (`--array=0-K`, each task `gravgrad run RECIPE --flight NAME`), and as the
//! merge job (`--dependency=afterok:<array job id>`, each unfinished recipe's `gravgrad run
//! RECIPE`), then prints the two job ids. Slurm runs the copy it took at submission, with the first
//! argument `flight` or `merge` saying which part. The units are listed in the file itself; the
//! executable, recipes and log folder are absolute paths, so the jobs may start in any folder of a
//! node that sees the same file system.

use crate::batch_plan::RecipeWork;
use gravgrad_products::tables::write_atomic;
use std::io::Write;
use std::path::Path;

/// What a written script holds.
pub struct Written {
    /// Flight tasks in the array.
    pub tasks: usize,
    /// Recipes merged by the dependent job.
    pub merges: usize,
}

/// `s` quoted for bash: single quotes, with each `'` written as `'\''`.
pub fn quote(s: &str) -> String {
    format!("'{}'", s.replace('\'', r"'\''"))
}

fn quote_path(p: &Path) -> String {
    quote(&p.to_string_lossy())
}

/// The script for the unfinished recipes of `works`; `threads` per task (`--cpus-per-task`).
pub fn script(exe: &Path, works: &[RecipeWork], logs: &Path, threads: usize) -> (String, Written) {
    let todo: Vec<&RecipeWork> = works.iter().filter(|w| !w.finished).collect();
    let tasks: Vec<(&RecipeWork, &str)> = todo
        .iter()
        .flat_map(|w| w.flights.iter().map(move |f| (*w, f.as_str())))
        .collect();
    let mut s = String::new();
    s.push_str("#!/usr/bin/env bash\n");
    s.push_str("# Written by `gravgrad batch --emit slurm`. Submit with: bash THIS_FILE\n");
    s.push_str("# (it calls sbatch twice: a job array of the flights, then the merge job that\n");
    s.push_str("# waits for the whole array to succeed; it prints both job ids).\n");
    s.push_str("#SBATCH --job-name=gravgrad\n");
    s.push_str(&format!("#SBATCH --cpus-per-task={threads}\n"));
    s.push_str("#SBATCH --ntasks=1\n");
    s.push_str("set -euo pipefail\n\n");
    s.push_str(&format!("GRAVGRAD={}\n", quote_path(exe)));
    s.push_str(&format!("LOGS={}\n", quote_path(logs)));
    s.push_str(&format!("THREADS={threads}\n"));
    s.push_str("# Flight units: task i runs recipe FLIGHT_RECIPE[i], flight FLIGHT_NAME[i].\n");
    s.push_str("FLIGHT_RECIPE=(\n");
    for (w, _) in &tasks {
        s.push_str(&format!("  {}\n", quote_path(&w.recipe)));
    }
    s.push_str(")\nFLIGHT_NAME=(\n");
    for (_, f) in &tasks {
        s.push_str(&format!("  {}\n", quote(f)));
    }
    s.push_str(")\n# Recipes merged once every flight task has succeeded.\nMERGE_RECIPE=(\n");
    for w in &todo {
        s.push_str(&format!("  {}\n", quote_path(&w.recipe)));
    }
    s.push_str(")\n\n");
    let last = tasks.len().saturating_sub(1);
    s.push_str(&format!(
        r#"case "${{1:-submit}}" in
  flight)
    i="${{SLURM_ARRAY_TASK_ID:?expected to run as a task of the job array}}"
    exec "$GRAVGRAD" --threads "$THREADS" run "${{FLIGHT_RECIPE[$i]}}" --flight "${{FLIGHT_NAME[$i]}}"
    ;;
  merge)
    status=0
    for r in "${{MERGE_RECIPE[@]}}"; do
      echo "merge: $r"
      "$GRAVGRAD" --threads "$THREADS" run "$r" || status=1
    done
    exit "$status"
    ;;
  submit)
    if [ "${{#MERGE_RECIPE[@]}}" -eq 0 ]; then
      echo "nothing to run: every recipe is finished"
      exit 0
    fi
    mkdir -p "$LOGS"
    self="$(readlink -f "$0")"
    array=$(sbatch --parsable --array=0-{last} --job-name=gravgrad-flights \
      --output="$LOGS/flight-%A_%a.log" "$self" flight)
    array="${{array%%;*}}"
    merge=$(sbatch --parsable --dependency=afterok:"$array" --kill-on-invalid-dep=yes \
      --job-name=gravgrad-merge --output="$LOGS/merge-%j.log" "$self" merge)
    merge="${{merge%%;*}}"
    echo "flights: job $array ({count} tasks); merge: job $merge"
    ;;
  *)
    echo "usage: bash $0   (submits the jobs; Slurm runs it with \`flight\` or \`merge\`)" >&2
    exit 2
    ;;
esac
"#,
        count = tasks.len()
    ));
    (
        s,
        Written {
            tasks: tasks.len(),
            merges: todo.len(),
        },
    )
}

/// Writes the script to `path` (executable), atomically.
pub fn write_script(
    path: &Path,
    exe: &Path,
    works: &[RecipeWork],
    logs: &Path,
    threads: usize,
) -> Result<Written, String> {
    let (text, written) = script(exe, works, logs, threads);
    write_atomic(path, |f| {
        f.write_all(text.as_bytes()).map_err(|e| e.to_string())
    })
    .map_err(|e| e.to_string())?;
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        std::fs::set_permissions(path, std::fs::Permissions::from_mode(0o755))
            .map_err(|e| format!("{}: {e}", path.display()))?;
    }
    Ok(written)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::path::PathBuf;

    #[test]
    fn quoting_survives_spaces_and_quotes() {
        assert_eq!(quote("a b"), "'a b'");
        assert_eq!(quote("it's"), r"'it'\''s'");
    }

    #[test]
    fn one_task_per_flight_of_unfinished_recipes() {
        let w = |name: &str, flights: &[&str], finished| RecipeWork {
            recipe: PathBuf::from(format!("/s/{name}/recipe.toml")),
            out: PathBuf::from(format!("/s/{name}/products")),
            flights: flights.iter().map(|f| f.to_string()).collect(),
            finished,
        };
        let works = [
            w("a", &["a-f01", "a-f02"], false),
            w("b", &["b-f01"], true),
            w("c", &["c-f01"], false),
        ];
        let (text, n) = script(Path::new("/usr/bin/gravgrad"), &works, Path::new("/l"), 2);
        assert_eq!((n.tasks, n.merges), (3, 2));
        assert!(text.contains("--array=0-2 "), "{text}");
        assert!(text.contains("--dependency=afterok:\"$array\""), "{text}");
        assert!(text.contains("  'c-f01'\n"), "{text}");
        assert!(!text.contains("b-f01"), "{text}");
    }
}
