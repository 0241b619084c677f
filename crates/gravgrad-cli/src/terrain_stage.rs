//! The terrain stage of a run: the recipe's DEM read once, checked against the survey's map frame,
//! and the terrain tensor at every sample turned from grid north to true north.

use crate::pipeline::{MapFrame, Positions, rz};
use gravgrad_core::raster::Raster;
use gravgrad_core::{Location, Problem, SymTensor};
use gravgrad_forward::prism::Prism;
use gravgrad_ingest::geotiff_reader::read_geotiff;
use gravgrad_ingest::recipe::{Recipe, Terrain};
use rayon::prelude::*;
use std::path::Path;

/// The DEM as prisms, ready to evaluate.
pub struct TerrainStage {
    prisms: Vec<Prism>,
}

impl TerrainStage {
    /// Reads the DEM the recipe names and builds its mass model: each cell a prism between the
    /// reference level (recipe `terrain.reference_m`, else the DEM's mean) and its elevation, with
    /// +density above the level and −density below.
    pub fn new(
        recipe: &Recipe,
        recipe_path: &Path,
        t: &Terrain,
        frame: &MapFrame,
    ) -> Result<Self, Vec<Problem>> {
        let path = recipe.resolve(&t.dem);
        let raster = read_geotiff(&path)?;
        let key = || Location::file(recipe_path).with_key("terrain.dem");
        match raster.epsg {
            Some(code) if code == frame.epsg => {}
            other => {
                return Err(vec![Problem::error(
                    key(),
                    format!(
                        "{}: the DEM's frame is {}, the survey's EPSG:{}; reproject the DEM to the survey's projection",
                        path.display(),
                        other.map_or("not stated".to_string(), |c| format!("EPSG:{c}")),
                        frame.epsg
                    ),
                )]);
            }
        }
        Ok(Self {
            prisms: prisms_of(&raster, t.reference_m, t.density_kg_m3),
        })
    }

    /// The terrain tensor at every sample, NED with true north, s⁻².
    pub fn tensor_true_north(&self, p: &Positions) -> Result<Vec<SymTensor>, Problem> {
        Ok((0..p.easting_m.len())
            .into_par_iter()
            .map(|i| {
                let obs = [p.northing_m[i], p.easting_m[i], -p.height_m[i]];
                let mut t = SymTensor::default();
                for pr in &self.prisms {
                    t = t + pr.tensor(obs);
                }
                t.rotated(&rz(p.convergence_rad[i]))
            })
            .collect())
    }
}

/// The DEM's cells as prisms in the grid frame (x grid north, y grid east, z down = −height).
fn prisms_of(r: &Raster, reference: Option<f64>, density: f64) -> Vec<Prism> {
    let valid: Vec<f64> = r
        .values
        .iter()
        .copied()
        .filter(|v| !r.is_missing(*v) && v.is_finite())
        .collect();
    let level = reference.unwrap_or(valid.iter().sum::<f64>() / valid.len().max(1) as f64);
    let mut out = Vec::new();
    for row in 0..r.ny {
        for col in 0..r.nx {
            let e = r.values[row * r.nx + col];
            if r.is_missing(e) || !e.is_finite() || e == level {
                continue;
            }
            let (x, y) = r.cell_centre(col, row);
            let (top, bottom, rho) = if e > level {
                (e, level, density)
            } else {
                (level, e, -density)
            };
            out.push(Prism::new(
                [y - 0.5 * r.dy, y + 0.5 * r.dy],
                [x - 0.5 * r.dx, x + 0.5 * r.dx],
                [-top, -bottom],
                rho,
            ));
        }
    }
    out
}
