//! What `gravgrad batch` has to run: per recipe, one unit per flight file (`gravgrad run RECIPE
//! --flight NAME`) and the merge (`gravgrad run RECIPE`), which levels across the flights, grids and
//! writes the products from the stored flights. A recipe whose output folder holds a
//! `provenance.json` recording the recipe as it is now is finished and skipped unless forced.

use gravgrad_core::Problem;
use gravgrad_ingest::recipe::read_recipe;
use serde::Deserialize;
use std::path::{Path, PathBuf};

/// One recipe to run.
#[derive(Clone, Debug)]
pub struct RecipeWork {
    /// The recipe, absolute.
    pub recipe: PathBuf,
    /// Its output folder, absolute.
    pub out: PathBuf,
    /// The flight names (file stems) of its flight units, in the recipe's order.
    pub flights: Vec<String>,
    /// Finished before this batch: skipped.
    pub finished: bool,
}

/// Reads every recipe and lists its flights; the problems of all recipes that cannot be planned.
pub fn plan(recipes: &[PathBuf], force: bool) -> Result<Vec<RecipeWork>, Vec<Problem>> {
    let mut out = Vec::new();
    let mut problems = Vec::new();
    for path in recipes {
        let abs = std::path::absolute(path).unwrap_or_else(|_| path.clone());
        let recipe = match read_recipe(&abs) {
            Ok(r) => r,
            Err(p) => {
                problems.extend(p);
                continue;
            }
        };
        let files = match recipe.flight_files(&abs) {
            Ok(f) => f,
            Err(p) => {
                problems.extend(p);
                continue;
            }
        };
        let mut flights: Vec<String> = files
            .iter()
            .filter_map(|f| f.file_stem())
            .map(|s| s.to_string_lossy().into_owned())
            .collect();
        flights.dedup();
        let folder = recipe.resolve(&recipe.output.folder);
        let folder = std::path::absolute(&folder).unwrap_or(folder);
        let finished = !force && is_finished(&folder, &abs);
        out.push(RecipeWork {
            recipe: abs,
            out: folder,
            flights,
            finished,
        });
    }
    if problems.is_empty() {
        Ok(out)
    } else {
        Err(problems)
    }
}

#[derive(Deserialize)]
struct Recorded {
    recipe_path: PathBuf,
    inputs: Vec<RecordedInput>,
}

#[derive(Deserialize)]
struct RecordedInput {
    path: PathBuf,
    sha256: String,
}

/// Whether `out/provenance.json` (the last file a run writes) records the recipe at `recipe` with
/// the SHA-256 it has now.
pub fn is_finished(out: &Path, recipe: &Path) -> bool {
    let Ok(text) = std::fs::read_to_string(out.join("provenance.json")) else {
        return false;
    };
    let Ok(rec) = serde_json::from_str::<Recorded>(&text) else {
        return false;
    };
    let Ok(now) = gravgrad_products::provenance::hashes(&[recipe.to_path_buf()]) else {
        return false;
    };
    rec.inputs
        .iter()
        .find(|i| i.path == rec.recipe_path)
        .is_some_and(|i| now.first().is_some_and(|h| h.sha256 == i.sha256))
}
