//! The terrain stage of a run: the window of the recipe's DEM (GeoTIFF, or NetCDF-CF by its `.nc`
//! extension) over the survey plus `terrain.margin_m`, as the preflight cut and checked it
//! (`crate::preflight`), and the terrain tensor at every sample from the fast engine
//! (`gravgrad-reduce`), turned from grid north to true north.

use crate::pipeline::{Positions, rz};
use gravgrad_core::raster::Raster;
use gravgrad_core::{Location, Problem, SymTensor};
use gravgrad_ingest::recipe::{Recipe, Terrain};
use gravgrad_reduce::terrain::{TerrainModel, TerrainSettings};
use std::path::Path;

/// The DEM's mass model, ready to evaluate.
pub struct TerrainStage {
    model: TerrainModel,
    margin_m: f64,
    dem_path: std::path::PathBuf,
}

impl TerrainStage {
    /// Builds the mass model of the DEM window `window` (cut, checked and filled by the preflight,
    /// `crate::preflight`; in the survey's frame): each cell a prism between the reference level
    /// (recipe `terrain.reference_m`, else the window's mean) and its elevation, with +density above
    /// the level and −density below (docs/methods/terrain.md). The pyramid of the fast engine
    /// covers the window only.
    pub fn new(
        recipe: &Recipe,
        recipe_path: &Path,
        t: &Terrain,
        window: &Raster,
    ) -> Result<Self, Vec<Problem>> {
        let path = recipe.resolve(&t.dem);
        let key = || Location::file(recipe_path).with_key("terrain.dem");
        let settings = TerrainSettings {
            density_kg_m3: t.density_kg_m3,
            water_density_kg_m3: t.water_density_kg_m3,
            reference_m: t.reference_m,
            accuracy_e: t.accuracy_e,
        };
        let model = TerrainModel::new(window, &settings)
            .map_err(|e| vec![Problem::error(key(), format!("{}: {e}", path.display()))])?;
        Ok(Self {
            model,
            margin_m: t.margin_m,
            dem_path: path,
        })
    }

    /// A warning when the DEM does not reach the margin around `p`.
    pub fn coverage_warning(&self, p: &Positions) -> Option<Problem> {
        let pts = points(p);
        let c = self.model.covers(&pts, self.margin_m);
        // Shortfalls under a metre are the rounding of a DEM cut exactly to the margin.
        let short = c.shortfall.iter().cloned().fold(0.0, f64::max);
        (!c.covered && short >= 1.0).then(|| {
            let [w, e, s, n] = c.shortfall;
            Problem::warning(
                Location::file(&self.dem_path),
                format!(
                    "the DEM does not cover the flight plus the {} m margin: short by {w:.0} m west, {e:.0} m east, {s:.0} m south, {n:.0} m north; the terrain effect near those edges is too small",
                    self.margin_m
                ),
            )
        })
    }

    /// The terrain tensor at every sample, NED with true north, s⁻².
    pub fn tensor_true_north(&self, p: &Positions) -> Result<Vec<SymTensor>, Problem> {
        let pts = points(p);
        let grid = self.model.tensor(&pts);
        Ok(grid
            .into_iter()
            .zip(&p.convergence_rad)
            .map(|(t, g)| t.rotated(&rz(*g)))
            .collect())
    }
}

/// (easting, northing, height) of every sample.
fn points(p: &Positions) -> Vec<[f64; 3]> {
    (0..p.easting_m.len())
        .map(|i| [p.easting_m[i], p.northing_m[i], p.height_m[i]])
        .collect()
}
