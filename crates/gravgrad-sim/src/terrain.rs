//! The synthetic terrain: a surface of hills, ridges and rough ground, sampled as a DEM of square
//! cells, and the gradient of the DEM's mass at any point.
//!
//! Frame: local north/east metres from the area origin, heights above the ellipsoid (m); tensors in
//! NED, s⁻². The terrain mass is every DEM cell as a prism between the reference level (the DEM's
//! mean elevation, `docs/physics.md`) and the cell's elevation, with density ρ above the level and −ρ
//! below it: the same model the terrain reduction inverts, so the truth is exact for it.

use crate::noise::Rng;
use crate::scenario::{Area, Terrain};
use gravgrad_core::SymTensor;
use gravgrad_forward::prism::Prism;
use rayon::prelude::*;

/// The surface height (m above the ellipsoid) as a function, and the DEM sampled from it.
#[derive(Clone, Debug)]
pub struct Surface {
    ground_m: f64,
    spec: Terrain,
    /// Random plane waves of the rough ground: (k_north, k_east, phase, amplitude).
    waves: Vec<(f64, f64, f64, f64)>,
}

/// A north-up DEM: `values[row * ncol + col]`, row 0 the northernmost; cell centres at
/// north = north_max − (row + ½)·cell, east = east_min + (col + ½)·cell (local metres).
#[derive(Clone, Debug, PartialEq)]
pub struct Dem {
    pub nrow: usize,
    pub ncol: usize,
    pub cell_m: f64,
    pub north_max: f64,
    pub east_min: f64,
    pub values: Vec<f64>,
}

impl Dem {
    pub fn cell_center(&self, row: usize, col: usize) -> (f64, f64) {
        (
            self.north_max - (row as f64 + 0.5) * self.cell_m,
            self.east_min + (col as f64 + 0.5) * self.cell_m,
        )
    }

    /// Mean elevation (m): the default reference level of the terrain mass.
    pub fn mean(&self) -> f64 {
        self.values.iter().sum::<f64>() / self.values.len().max(1) as f64
    }
}

impl Surface {
    pub fn new(area: &Area, spec: &Terrain, seed: u64) -> Self {
        let mut rng = Rng::new(seed, 0x7E77);
        let m = 256;
        // Gaussian-correlated field: wavenumbers drawn from the normal spectrum of correlation length L
        // (a Gaussian covariance exp(−r²/2L²) has a Gaussian spectrum of standard deviation 1/L).
        let amp = spec.rough_rms_m * (2.0 / m as f64).sqrt();
        let waves = (0..m)
            .map(|_| {
                let kn = rng.normal() / spec.rough_length_m.max(1.0);
                let ke = rng.normal() / spec.rough_length_m.max(1.0);
                (kn, ke, 2.0 * std::f64::consts::PI * rng.uniform(), amp)
            })
            .collect();
        Self {
            ground_m: area.ground_height_m,
            spec: spec.clone(),
            waves,
        }
    }

    /// Height of the surface above the ellipsoid at local (north, east), m.
    pub fn height(&self, north: f64, east: f64) -> f64 {
        let mut h = self.ground_m;
        for hill in &self.spec.hill {
            let d2 = (north - hill.north_m).powi(2) + (east - hill.east_m).powi(2);
            h += hill.height_m * (-d2 / (hill.width_m * hill.width_m)).exp();
        }
        for r in &self.spec.ridge {
            let (s, c) = r.azimuth_deg.to_radians().sin_cos();
            let (dn, de) = (north - r.north_m, east - r.east_m);
            let along = dn * c + de * s;
            let across = -dn * s + de * c;
            let half = 0.5 * r.length_m;
            let beyond = (along.abs() - half).max(0.0);
            h +=
                r.height_m * (-(across * across + beyond * beyond) / (r.width_m * r.width_m)).exp();
        }
        for (kn, ke, ph, a) in &self.waves {
            h += a * (kn * north + ke * east + ph).cos();
        }
        h
    }

    /// The DEM over `north` × `east` (m, local), cell centres sampled from the surface.
    pub fn dem(&self, north: [f64; 2], east: [f64; 2]) -> Dem {
        let cell = self.spec.cell_m;
        let nrow = ((north[1] - north[0]) / cell).ceil().max(1.0) as usize;
        let ncol = ((east[1] - east[0]) / cell).ceil().max(1.0) as usize;
        let mut dem = Dem {
            nrow,
            ncol,
            cell_m: cell,
            north_max: north[0] + nrow as f64 * cell,
            east_min: east[0],
            values: vec![0.0; nrow * ncol],
        };
        let vals: Vec<f64> = (0..nrow * ncol)
            .into_par_iter()
            .map(|k| {
                let (n, e) = dem.cell_center(k / ncol, k % ncol);
                self.height(n, e)
            })
            .collect();
        dem.values = vals;
        dem
    }
}

/// The DEM's terrain mass as prisms (NED, z down from the ellipsoid: z = −height).
pub fn terrain_prisms(dem: &Dem, reference_m: f64, density: f64) -> Vec<Prism> {
    let half = 0.5 * dem.cell_m;
    let mut out = Vec::with_capacity(dem.values.len());
    for row in 0..dem.nrow {
        for col in 0..dem.ncol {
            let e = dem.values[row * dem.ncol + col];
            if e == reference_m {
                continue;
            }
            let (n, ea) = dem.cell_center(row, col);
            let (top, bottom, rho) = if e > reference_m {
                (e, reference_m, density)
            } else {
                (reference_m, e, -density)
            };
            out.push(Prism::new(
                [n - half, n + half],
                [ea - half, ea + half],
                [-top, -bottom],
                rho,
            ));
        }
    }
    out
}

/// The terrain tensor (NED, s⁻²) at points given as (north, east, height above the ellipsoid).
pub fn terrain_tensor(prisms: &[Prism], points: &[[f64; 3]]) -> Vec<SymTensor> {
    points
        .par_iter()
        .map(|p| {
            let obs = [p[0], p[1], -p[2]];
            let mut acc = [0.0; 6];
            for pr in prisms {
                for (a, v) in acc.iter_mut().zip(pr.tensor(obs).to_array()) {
                    *a += v;
                }
            }
            SymTensor::from_array(acc)
        })
        .collect()
}
