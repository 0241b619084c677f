//! The terrain truth: the tensor of the DEM's mass at every sample, every cell's column as a prism
//! near the sample and as a vertical line mass with its cross-section term farther away.
//!
//! Frame: local north/east metres from the area origin, heights above the ellipsoid; the columns in
//! NED (z down from the ellipsoid, z = −height); tensors in NED (map frame), s⁻². The mass model is
//! that of [`crate::terrain::terrain_prisms`]: every cell a column between the reference level and
//! its elevation, density ρ above the level and −ρ below.
//!
//! **Near and far.** A cell's column is taken as the closed-form prism of Nagy et al.
//! ([`Prism::tensor`]) when the distance D from the sample to the column's axis (the vertical
//! segment through the cell's centre) is under k cell sizes, and by the far form
//! ([`gravgrad_forward::column`]: the finite line mass plus the square's second-order term) beyond.
//! Cells are never merged: every one is summed on its own, near or far (unlike the pipeline's
//! terrain engine, which groups cells into blocks).
//!
//! **The switch k, from the far form's error.** A far column of side a, height h and density ρ errs
//! by at most (7/6)·G·|ρ|·a⁶·h/d⁷ in every component, d the distance from the sample to the column
//! (`gravgrad_forward::column`), and d ≥ D − a/√2. With H the largest |elevation − reference| of the
//! DEM, the far columns of one sample err by at most
//!
//! ```text
//! (7/6)·G·|ρ|·H·a⁶ · Σ_{D_c ≥ ka} (D_c − a/√2)⁻⁷  ≤  (7/6)·G·|ρ|·H/a · S(k)
//! S(k) = 2π [ (k + c)² / (2(k − c)⁷) + 1/(5(k − c)⁵) + c/(3(k − c)⁶) ],   c = 1/√2
//! ```
//!
//! The lattice sum is bounded by an integral: every point p of a cell lies within a/√2 of its centre,
//! so a cell's term, a non-increasing function of its horizontal distance s_c, is at most the mean
//! over the cell of the same function at |p| − a/√2; and a far column has D_c ≥ max(ka, s_c). The
//! disc |p| < (k + c)·a gives the first term (its columns may be far by their height above or below
//! the sample), the rest the others. [`switch_cells`] takes the smallest k with this bound at most
//! [`TRUTH_TOLERANCE`]; for the demo's DEM (H ≈ 50 m, a = 50 m, ρ = 2670 kg/m³) k ≈ 17. The bound
//! assumes every far column at the full height H with errors of one sign; measured errors are far
//! smaller (`crates/gravgrad-sim/tests/sim.rs`, `docs/scenario.md`).

use crate::terrain::Dem;
use gravgrad_core::SymTensor;
use gravgrad_core::units::G;
use gravgrad_forward::column::{FAR_ERROR_CONSTANT, far_terms, line_terms};
use gravgrad_forward::prism::Prism;
use rayon::prelude::*;

/// Largest error of any component of the terrain truth at any sample that the switch allows, s⁻²
/// (1e-3 E): a hundredth of the accuracy of the terrain engine the truth scores.
pub const TRUTH_TOLERANCE: f64 = 1e-12;

/// Smallest switch distance, cell sizes: the far form is never used on a column next to the sample.
pub const MIN_SWITCH_CELLS: f64 = 2.0;

/// S(k) of the module docs: the bound of Σ (D_c/a − 1/√2)⁻⁷ over the columns with D_c ≥ k·a.
pub fn lattice_bound(k: f64) -> f64 {
    let c = std::f64::consts::FRAC_1_SQRT_2;
    let m = k - c;
    2.0 * std::f64::consts::PI
        * ((k + c).powi(2) / (2.0 * m.powi(7)) + 1.0 / (5.0 * m.powi(5)) + c / (3.0 * m.powi(6)))
}

/// The switch distance k (cell sizes) for a DEM of cell `cell_m` (m), largest |elevation −
/// reference| `relief_m` (m) and density `density` (kg/m³): the smallest k ≥ [`MIN_SWITCH_CELLS`]
/// (to 0.01) whose bound (7/6)·G·|ρ|·H/a·S(k) is at most [`TRUTH_TOLERANCE`] (module docs).
pub fn switch_cells(cell_m: f64, relief_m: f64, density: f64) -> f64 {
    let scale = FAR_ERROR_CONSTANT * G * density.abs() * relief_m / cell_m;
    let ok = |k: f64| scale * lattice_bound(k) <= TRUTH_TOLERANCE;
    if !scale.is_finite() || ok(MIN_SWITCH_CELLS) {
        return MIN_SWITCH_CELLS;
    }
    // S falls monotonically with k, like k⁻⁵: double, then bisect.
    let (mut lo, mut hi) = (MIN_SWITCH_CELLS, 2.0 * MIN_SWITCH_CELLS);
    while !ok(hi) && hi < 1e6 {
        lo = hi;
        hi *= 2.0;
    }
    while hi - lo > 0.01 {
        let mid = 0.5 * (lo + hi);
        if ok(mid) { hi = mid } else { lo = mid }
    }
    hi
}

/// A DEM's columns ready to be summed at samples.
#[derive(Clone, Debug)]
pub struct TerrainTruth {
    /// Cell centres' north (per row) and east (per column), m.
    north: Vec<f64>,
    east: Vec<f64>,
    /// Per cell: top and bottom (NED z, m) and density contrast (kg/m³, 0: no mass).
    cells: Vec<[f64; 3]>,
    ncol: usize,
    cell_m: f64,
    switch_cells: f64,
    relief_m: f64,
}

impl TerrainTruth {
    /// The DEM's mass relative to `reference_m` (m) with density `density` (kg/m³), the switch
    /// distance chosen by [`switch_cells`] from the DEM's own relief.
    pub fn new(dem: &Dem, reference_m: f64, density: f64) -> Self {
        let mut t = Self::with_switch(dem, reference_m, density, MIN_SWITCH_CELLS);
        t.switch_cells = switch_cells(dem.cell_m, t.relief_m, density);
        t
    }

    /// As [`TerrainTruth::new`] with the switch distance `switch_cells` (cell sizes) given.
    pub fn with_switch(dem: &Dem, reference_m: f64, density: f64, switch_cells: f64) -> Self {
        let north = (0..dem.nrow).map(|r| dem.cell_center(r, 0).0).collect();
        let east = (0..dem.ncol).map(|c| dem.cell_center(0, c).1).collect();
        let cells = dem
            .values
            .iter()
            .map(|&e| {
                if e > reference_m {
                    [-e, -reference_m, density]
                } else if e < reference_m {
                    [-reference_m, -e, -density]
                } else {
                    [0.0, 0.0, 0.0]
                }
            })
            .collect();
        let relief_m = dem
            .values
            .iter()
            .fold(0.0f64, |m, e| m.max((e - reference_m).abs()));
        Self {
            north,
            east,
            cells,
            ncol: dem.ncol,
            cell_m: dem.cell_m,
            switch_cells,
            relief_m,
        }
    }

    /// The switch distance, cell sizes.
    pub fn switch_cells(&self) -> f64 {
        self.switch_cells
    }

    /// The DEM's largest |elevation − reference|, m.
    pub fn relief_m(&self) -> f64 {
        self.relief_m
    }

    /// Squared distance (m²) from `obs` (NED) to the axis of the column at (row, col).
    #[inline]
    fn axis_distance2(&self, x: f64, y: f64, c: &[f64; 3], oz: f64) -> f64 {
        let gap = (c[0] - oz).max(oz - c[1]).max(0.0);
        x * x + y * y + gap * gap
    }

    /// The prism of the cell at (row, col).
    fn prism(&self, row: usize, col: usize, c: &[f64; 3]) -> Prism {
        let half = 0.5 * self.cell_m;
        let (n, e) = (self.north[row], self.east[col]);
        Prism::new(
            [n - half, n + half],
            [e - half, e + half],
            [c[0], c[1]],
            c[2],
        )
    }

    /// The terrain tensor (NED, s⁻²) at one point given as (north, east, height above the
    /// ellipsoid), m.
    pub fn tensor_at(&self, p: [f64; 3]) -> SymTensor {
        let obs = [p[0], p[1], -p[2]];
        let reach = self.switch_cells * self.cell_m;
        let switch2 = reach * reach;
        let spread = self.cell_m * self.cell_m / 24.0;
        // Far columns: Σρ·(zz, xz, yz, xy, xx − yy) per unit G·a²; near ones in full.
        let mut far = [0.0; 5];
        let mut near = [0.0; 6];
        let east0 = self.east.first().copied().unwrap_or(0.0);
        for (row, &north) in self.north.iter().enumerate() {
            let x = north - obs[0];
            let span = row * self.ncol..(row + 1) * self.ncol;
            let cells = &self.cells[span];
            // Columns within `reach` horizontally may be near; the others are far.
            let (lo, hi) = if x * x < switch2 {
                let half = (switch2 - x * x).sqrt();
                let first = ((obs[1] - half - east0) / self.cell_m).floor().max(0.0) as usize;
                let last = ((obs[1] + half - east0) / self.cell_m).ceil().max(0.0) as usize + 1;
                (first.min(self.ncol), last.min(self.ncol))
            } else {
                (self.ncol, self.ncol)
            };
            for (col, c) in cells.iter().enumerate().take(hi).skip(lo) {
                if c[2] == 0.0 {
                    continue;
                }
                let y = self.east[col] - obs[1];
                let t = if self.axis_distance2(x, y, c, obs[2]) < switch2 {
                    self.prism(row, col, c).tensor(obs).to_array()
                } else {
                    let w = [c[0] - obs[2], c[1] - obs[2]];
                    line_terms(G * self.cell_m * self.cell_m * c[2], x, y, w, spread).to_array()
                };
                for (a, v) in near.iter_mut().zip(t) {
                    *a += v;
                }
            }
            for (start, end) in [(0, lo), (hi, self.ncol)] {
                self.far_run(x, obs, start..end, row, spread, &mut far);
            }
        }
        let ga2 = G * self.cell_m * self.cell_m;
        let [zz, xz, yz, xy, d] = far.map(|v| ga2 * v);
        let far = [0.5 * (d - zz), xy, xz, -0.5 * (d + zz), yz, zz];
        SymTensor::from_array(std::array::from_fn(|i| near[i] + far[i]))
    }

    /// Adds the far form of the columns `cols` of `row` at `obs` (NED), unscaled by G·a², to
    /// `far` = Σρ·(T_zz, T_xz, T_yz, T_xy, T_xx − T_yy) ([`far_terms`]).
    fn far_run(
        &self,
        x: f64,
        obs: [f64; 3],
        cols: std::ops::Range<usize>,
        row: usize,
        spread: f64,
        far: &mut [f64; 5],
    ) {
        let cells = &self.cells[row * self.ncol..(row + 1) * self.ncol];
        // Σρ·dz, Σρ·dx, Σρ·y·dx, Σρ·dq, Σρ·y·dq, Σρ·y²·dq along the row; x is the row's.
        let mut s = [0.0; 6];
        for (c, east) in cells[cols.clone()].iter().zip(&self.east[cols]) {
            if c[2] == 0.0 {
                continue;
            }
            let y = east - obs[1];
            let [dz, dx, dq] = far_terms(x, y, [c[0] - obs[2], c[1] - obs[2]], spread);
            let (rdx, rdq) = (c[2] * dx, c[2] * dq);
            s[0] += c[2] * dz;
            s[1] += rdx;
            s[2] += y * rdx;
            s[3] += rdq;
            s[4] += y * rdq;
            s[5] += y * y * rdq;
        }
        far[0] += s[0];
        far[1] += x * s[1];
        far[2] += s[2];
        far[3] += x * s[4];
        far[4] += x * x * s[3] - s[5];
    }

    /// The terrain tensor (NED, s⁻²) at points given as (north, east, height above the ellipsoid).
    pub fn tensor(&self, points: &[[f64; 3]]) -> Vec<SymTensor> {
        points.par_iter().map(|&p| self.tensor_at(p)).collect()
    }

    /// Columns summed as prisms at the point (north, east, height above the ellipsoid), m.
    pub fn near_count(&self, p: [f64; 3]) -> usize {
        let (oz, switch2) = (-p[2], (self.switch_cells * self.cell_m).powi(2));
        let mut n = 0;
        for (row, &north) in self.north.iter().enumerate() {
            let cells = &self.cells[row * self.ncol..(row + 1) * self.ncol];
            for (col, c) in cells.iter().enumerate() {
                let (x, y) = (north - p[0], self.east[col] - p[1]);
                if c[2] != 0.0 && self.axis_distance2(x, y, c, oz) < switch2 {
                    n += 1;
                }
            }
        }
        n
    }

    /// The far form's error bound at the point (north, east, height above the ellipsoid), s⁻²: the
    /// sum over its far columns of (7/6)·G·|ρ|·a⁶·h/(D − a/√2)⁷ with each column's own height h
    /// and axis distance D (module docs); every component's error is at most this.
    pub fn error_bound(&self, p: [f64; 3]) -> f64 {
        let (oz, switch2) = (-p[2], (self.switch_cells * self.cell_m).powi(2));
        let a = self.cell_m;
        let mut sum = 0.0;
        for (row, &north) in self.north.iter().enumerate() {
            let cells = &self.cells[row * self.ncol..(row + 1) * self.ncol];
            for (col, c) in cells.iter().enumerate() {
                let (x, y) = (north - p[0], self.east[col] - p[1]);
                let d2 = self.axis_distance2(x, y, c, oz);
                if c[2] != 0.0 && d2 >= switch2 {
                    let d = d2.sqrt() - a * std::f64::consts::FRAC_1_SQRT_2;
                    sum += c[2].abs() * (c[1] - c[0]) / d.powi(7);
                }
            }
        }
        FAR_ERROR_CONSTANT * G * a.powi(6) * sum
    }
}
