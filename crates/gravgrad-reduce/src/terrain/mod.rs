//! The terrain effect of a DEM on the gradient tensor (issue 6).
//!
//! Frames and units: the DEM is a north-up [`Raster`] in a projected map frame (easting x, northing
//! y, metres; elevations in metres above the ellipsoid). Points are (easting, northing, height above
//! the ellipsoid) in that frame, metres. Tensors are in the map frame's NED — x grid north, y grid
//! east, z down — in s⁻²; the caller turns them to true north by the meridian convergence.
//!
//! Mass model ([`mass`]): every cell a vertical prism between the reference level h_ref and the
//! cell's elevation, +ρ above h_ref and −ρ below (the simulator's model); with a water density, the
//! sea between a cell below 0 m and sea level carries ρ_w instead of nothing; missing cells carry
//! no mass.
//!
//! Two evaluators: [`TerrainModel::tensor_exact`], every cell's prism at every point
//! (`gravgrad_forward::prism::Prism::tensor`), and [`TerrainModel::tensor`], the fast engine
//! ([`engine`]): exact prisms near each point, second-order multipole expansions of 2^L × 2^L cell
//! blocks ([`pyramid`], [`multipole`]) where their rigorous error bound is within a per-block
//! budget derived from the accuracy target. `docs/methods/terrain.md` gives the method, the bound and
//! the measured errors.

pub mod coverage;
pub mod dem;
pub mod engine;
pub mod mass;
pub mod multipole;
pub mod pyramid;

use coverage::Coverage;
use dem::DemMass;
use gravgrad_core::SymTensor;
use gravgrad_core::raster::{FrameKind, Raster, RasterError, frame_kind_of_epsg};
use gravgrad_core::units::EOTVOS;
use mass::MassModel;
use pyramid::Pyramid;
use rayon::prelude::*;
use thiserror::Error;

/// Per-block error budget τ of the fast engine as a fraction of the accuracy target: a block is
/// taken as its expansion when its rigorous error bound is at most τ = `BUDGET_PER_TARGET` ×
/// target. The bound summed over a point's blocks is far above the actual error (the blocks' errors
/// are much smaller than their bounds and of both signs), so τ is set from errors measured against
/// the all-exact sum on rough invented terrain (`docs/methods/terrain.md`): with ½ and a 0.1 E
/// target, the largest error over 160 points was 0.26 × target and the RMS at most 0.08 × target
/// (1000 × 1000 cells of 25 m, hills up to 300 m, points 80–120 m above the ground).
pub const BUDGET_PER_TARGET: f64 = 0.5;

/// Settings of the terrain model (recipe section `[terrain]`).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TerrainSettings {
    /// Rock density ρ, kg/m³ (`terrain.density_kg_m3`, default 2670).
    pub density_kg_m3: f64,
    /// Sea-water density ρ_w for cells below 0 m, kg/m³ (`terrain.water_density_kg_m3`); `None`:
    /// no water.
    pub water_density_kg_m3: Option<f64>,
    /// Reference level h_ref, m above the ellipsoid; `None`: the mean elevation of the DEM's valid
    /// cells.
    pub reference_m: Option<f64>,
    /// Target accuracy of the fast engine per component, Eötvös (`terrain.accuracy_e`, default 0.1).
    pub accuracy_e: f64,
}

impl Default for TerrainSettings {
    fn default() -> Self {
        Self {
            density_kg_m3: 2670.0,
            water_density_kg_m3: None,
            reference_m: None,
            accuracy_e: 0.1,
        }
    }
}

/// Why a terrain model could not be built.
#[derive(Clone, Debug, PartialEq, Error)]
pub enum TerrainError {
    #[error("the terrain model's raster is malformed: {0}")]
    Raster(#[from] RasterError),
    #[error(
        "the terrain model is in a geographic frame (EPSG:{0}); it must be in a projected frame in metres, such as the survey's UTM zone"
    )]
    Geographic(u32),
    #[error("`{key}` = {value}: expected a finite positive number")]
    NotPositive { key: &'static str, value: f64 },
    #[error("the reference level {0} m is not a finite number")]
    Reference(f64),
    #[error("the terrain model has no valid cell (every cell is missing or not finite)")]
    NoValidCell,
}

/// A DEM's terrain mass, ready to be evaluated at points.
#[derive(Clone, Debug)]
pub struct TerrainModel {
    grid: DemMass,
    pyramid: Pyramid,
    tau: f64,
    missing: usize,
}

impl TerrainModel {
    /// Builds the mass model of `raster` (projected, metres) under `settings`, and the pyramid of
    /// the fast engine.
    pub fn new(raster: &Raster, settings: &TerrainSettings) -> Result<Self, TerrainError> {
        raster.check()?;
        if let Some(code) = raster.epsg
            && frame_kind_of_epsg(code) == FrameKind::Geographic
        {
            return Err(TerrainError::Geographic(code));
        }
        let positive = |key: &'static str, value: f64| {
            if value.is_finite() && value > 0.0 {
                Ok(())
            } else {
                Err(TerrainError::NotPositive { key, value })
            }
        };
        positive("terrain.density_kg_m3", settings.density_kg_m3)?;
        positive("terrain.accuracy_e", settings.accuracy_e)?;
        if let Some(w) = settings.water_density_kg_m3 {
            positive("terrain.water_density_kg_m3", w)?;
        }
        let elevation: Vec<f64> = raster
            .values
            .iter()
            .map(|&v| {
                if raster.is_missing(v) || !v.is_finite() {
                    f64::NAN
                } else {
                    v
                }
            })
            .collect();
        let valid = elevation.iter().filter(|v| v.is_finite()).count();
        if valid == 0 {
            return Err(TerrainError::NoValidCell);
        }
        let reference_m = match settings.reference_m {
            Some(r) if r.is_finite() => r,
            Some(r) => return Err(TerrainError::Reference(r)),
            None => elevation.iter().filter(|v| v.is_finite()).sum::<f64>() / valid as f64,
        };
        // The DEM's cells with missing ones as NaN; `check` above makes this raster valid too.
        let mut elevation = Raster::new(
            raster.nx,
            raster.ny,
            (raster.x_min, raster.y_max),
            (raster.dx, raster.dy),
            elevation,
        )?
        .with_nodata(f64::NAN);
        elevation.epsg = raster.epsg;
        let grid = DemMass {
            elevation,
            mass: MassModel {
                density: settings.density_kg_m3,
                water_density: settings.water_density_kg_m3,
                reference_m,
            },
        };
        let pyramid = Pyramid::build(&grid);
        Ok(Self {
            grid,
            pyramid,
            tau: BUDGET_PER_TARGET * settings.accuracy_e * EOTVOS,
            missing: raster.values.len() - valid,
        })
    }

    /// The reference level h_ref in use, m above the ellipsoid.
    pub fn reference_m(&self) -> f64 {
        self.grid.mass.reference_m
    }

    /// The number of missing cells (no-data or not finite), which carry no mass.
    pub fn missing_cells(&self) -> usize {
        self.missing
    }

    /// The per-block error budget τ of the fast engine, s⁻².
    pub fn block_budget(&self) -> f64 {
        self.tau
    }

    /// The fast engine at points (easting, northing, height above the ellipsoid; m): the tensor in
    /// the map frame's NED, s⁻². A point with a non-finite coordinate gets NaN components.
    pub fn tensor(&self, points: &[[f64; 3]]) -> Vec<SymTensor> {
        self.tensor_with_bound(points)
            .into_iter()
            .map(|(t, _)| t)
            .collect()
    }

    /// [`TerrainModel::tensor`] with, for each point, the rigorous bound on every component's error
    /// (s⁻²): the sum of the error bounds of the blocks taken as expansions.
    pub fn tensor_with_bound(&self, points: &[[f64; 3]]) -> Vec<(SymTensor, f64)> {
        points
            .par_iter()
            .map(|p| match to_ned(p) {
                Some(obs) => {
                    let (t, b) = engine::fast_at(&self.grid, &self.pyramid, self.tau, obs);
                    (SymTensor::from_array(t), b)
                }
                None => (SymTensor::from_array([f64::NAN; 6]), f64::NAN),
            })
            .collect()
    }

    /// The all-exact sum at points (easting, northing, height above the ellipsoid; m): every cell's
    /// prisms by `Prism::tensor`, the tensor in the map frame's NED, s⁻². Slow (cells × points); for
    /// checks and an exact mode.
    pub fn tensor_exact(&self, points: &[[f64; 3]]) -> Vec<SymTensor> {
        points
            .par_iter()
            .map(|p| match to_ned(p) {
                Some(obs) => SymTensor::from_array(engine::exact_at(&self.grid, obs)),
                None => SymTensor::from_array([f64::NAN; 6]),
            })
            .collect()
    }

    /// Whether the DEM covers the points (easting, northing, height; m) plus `margin_m` on every
    /// side; see [`Coverage`].
    pub fn covers(&self, points: &[[f64; 3]], margin_m: f64) -> Coverage {
        coverage::coverage(self.grid.extent(), points, margin_m)
    }
}

/// (easting, northing, height) → NED (north, east, down), or `None` if a coordinate is not finite.
fn to_ned(p: &[f64; 3]) -> Option<[f64; 3]> {
    p.iter()
        .all(|v| v.is_finite())
        .then_some([p[1], p[0], -p[2]])
}
