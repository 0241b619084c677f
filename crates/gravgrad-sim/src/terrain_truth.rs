//! The terrain truth: the tensor of the DEM's mass at every sample, every cell's column as a prism
//! near the sample, as a vertical line mass with its cross-section term farther away, and as one
//! point with its second moments farther still.
//!
//! Frame: local north/east metres from the area origin, heights above the ellipsoid; the columns in
//! NED (z down from the ellipsoid, z = −height); tensors in NED (map frame), s⁻². The mass model is
//! that of [`crate::terrain::terrain_prisms`]: every cell a column between the reference level and
//! its elevation, density ρ above the level and −ρ below.
//!
//! **Three forms.** With D the distance from the sample to a column's axis (the vertical segment
//! through the cell's centre) and a the cell size, a column is taken as
//!
//! - the closed-form prism of Nagy et al. ([`Prism::tensor`]) when D < k_line·a;
//! - the line form ([`gravgrad_forward::column`]: the finite vertical line mass plus the square's
//!   second-order term) when k_line·a ≤ D < k_point·a;
//! - the point form (one point with the column's second moments, same module) beyond.
//!
//! Cells are never merged: every one is summed on its own (unlike the pipeline's terrain engine,
//! which groups cells into blocks).
//!
//! **The switches, from the forms' errors.** A column of side a, height h and density ρ at distance
//! d from the sample errs by at most (7/6)·G·|ρ|·a⁶·h/d⁷ in the line form and
//! G·|ρ|·a²h·P(h)/d⁷, P(h) = 7a⁴/6 + 5a²h²/6 + 3h⁴/8, in the point form, in every component
//! (`gravgrad_forward::column`); and d ≥ D − a/√2. With H the largest |elevation − reference| of
//! the DEM, the columns of one sample beyond k·a err together by at most
//!
//! ```text
//! line form:   (7/6)·G·|ρ|·H/a · S(k)          point form:   G·|ρ|·H·P(H)/a⁵ · S(k)
//! S(k) = 2π [ (k + c)² / (2(k − c)⁷) + 1/(5(k − c)⁵) + c/(3(k − c)⁶) ],   c = 1/√2
//! ```
//!
//! S(k) bounds a⁷·Σ (D_c − a/√2)⁻⁷ over the columns with D_c ≥ ka by an integral: every point p of
//! a cell lies within a/√2 of its centre, so a cell's term, a non-increasing function of its
//! horizontal distance s_c, is at most the mean over the cell of the same function at |p| − a/√2;
//! and such a column has D_c ≥ max(ka, s_c). The disc |p| < (k + c)·a gives the first term (its
//! columns may be beyond ka by their height above or below the sample), the rest the others.
//! [`switches`] takes the smallest k_line whose line bound is at most half of [`TRUTH_TOLERANCE`]
//! and the smallest k_point whose point bound is at most the other half (the line bound from
//! k_line covers every column beyond it, so the two halves add up to the tolerance). For the demo's
//! DEM (H ≈ 46 m, a = 50 m, ρ = 2670 kg/m³) k_line ≈ 19 and k_point ≈ 22. The bound takes every
//! column at the full height H with errors of one sign; measured errors are far smaller
//! (`crates/gravgrad-sim/tests/sim.rs`, `docs/scenario.md`).

use crate::terrain::Dem;
use gravgrad_core::SymTensor;
use gravgrad_core::units::G;
use gravgrad_forward::column::{FAR_ERROR_CONSTANT, far_terms, point_error_factor, point_terms};
use gravgrad_forward::prism::Prism;
use rayon::prelude::*;

/// Largest error of any component of the terrain truth at any sample that the switches allow, s⁻²
/// (1e-3 E): a hundredth of the accuracy of the terrain engine the truth scores.
pub const TRUTH_TOLERANCE: f64 = 1e-12;

/// Smallest switch distance, cell sizes: no column next to the sample is ever approximated.
pub const MIN_SWITCH_CELLS: f64 = 2.0;

/// S(k) of the module docs: the bound of Σ (D_c/a − 1/√2)⁻⁷ over the columns with D_c ≥ k·a.
pub fn lattice_bound(k: f64) -> f64 {
    let c = std::f64::consts::FRAC_1_SQRT_2;
    let m = k - c;
    2.0 * std::f64::consts::PI
        * ((k + c).powi(2) / (2.0 * m.powi(7)) + 1.0 / (5.0 * m.powi(5)) + c / (3.0 * m.powi(6)))
}

/// Where the forms change, in cell sizes of the distance to a column's axis.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Switches {
    /// From the prism to the line form.
    pub line: f64,
    /// From the line to the point form (at least `line`).
    pub point: f64,
}

/// The switches for a DEM of cell `cell_m` (m), largest |elevation − reference| `relief_m` (m) and
/// density `density` (kg/m³): each the smallest k ≥ [`MIN_SWITCH_CELLS`] (to 0.01) whose bound is at
/// most half of [`TRUTH_TOLERANCE`] (module docs).
pub fn switches(cell_m: f64, relief_m: f64, density: f64) -> Switches {
    let line = FAR_ERROR_CONSTANT * G * density.abs() * relief_m / cell_m;
    let point =
        G * density.abs() * relief_m * point_error_factor(cell_m, relief_m) / cell_m.powi(5);
    let k_line = smallest_k(line, 0.5 * TRUTH_TOLERANCE);
    Switches {
        line: k_line,
        point: smallest_k(point, 0.5 * TRUTH_TOLERANCE).max(k_line),
    }
}

/// The smallest k ≥ [`MIN_SWITCH_CELLS`] (to 0.01) with `scale`·S(k) ≤ `budget`.
fn smallest_k(scale: f64, budget: f64) -> f64 {
    let ok = |k: f64| scale * lattice_bound(k) <= budget;
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

/// The form a column takes at a sample.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Form {
    Prism,
    Line,
    Point,
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
    switches: Switches,
    relief_m: f64,
}

impl TerrainTruth {
    /// The DEM's mass relative to `reference_m` (m) with density `density` (kg/m³), the switches
    /// chosen by [`switches`] from the DEM's own relief.
    pub fn new(dem: &Dem, reference_m: f64, density: f64) -> Self {
        let unset = Switches {
            line: MIN_SWITCH_CELLS,
            point: MIN_SWITCH_CELLS,
        };
        let mut t = Self::with_switches(dem, reference_m, density, unset);
        t.switches = switches(dem.cell_m, t.relief_m, density);
        t
    }

    /// As [`TerrainTruth::new`] with the switches given.
    pub fn with_switches(dem: &Dem, reference_m: f64, density: f64, switches: Switches) -> Self {
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
            switches,
            relief_m,
        }
    }

    /// The switch distances, cell sizes.
    pub fn switches(&self) -> Switches {
        self.switches
    }

    /// The DEM's largest |elevation − reference|, m.
    pub fn relief_m(&self) -> f64 {
        self.relief_m
    }

    /// The form of the column `c` at horizontal offset (x, y) (source − sample, m) for a sample at
    /// NED depth `oz`, from its squared distance to the column's axis.
    #[inline]
    fn form(&self, x: f64, y: f64, c: &[f64; 3], oz: f64) -> Form {
        let gap = (c[0] - oz).max(oz - c[1]).max(0.0);
        let d2 = (x * x + y * y + gap * gap) / (self.cell_m * self.cell_m);
        if d2 < self.switches.line * self.switches.line {
            Form::Prism
        } else if d2 < self.switches.point * self.switches.point {
            Form::Line
        } else {
            Form::Point
        }
    }

    /// Columns [first, last) of a row within `reach` (m) horizontally of east `e` (m): the others
    /// are farther.
    fn columns_within(&self, e: f64, reach: f64) -> (usize, usize) {
        let east0 = self.east.first().copied().unwrap_or(0.0);
        let first = ((e - reach - east0) / self.cell_m).floor().max(0.0) as usize;
        let last = ((e + reach - east0) / self.cell_m).ceil().max(0.0) as usize + 1;
        (first.min(self.ncol), last.min(self.ncol))
    }

    /// The terrain tensor (NED, s⁻²) at one point given as (north, east, height above the
    /// ellipsoid), m.
    pub fn tensor_at(&self, p: [f64; 3]) -> SymTensor {
        let obs = [p[0], p[1], -p[2]];
        let a = self.cell_m;
        let reach = self.switches.point * a;
        let spread = a * a / 24.0;
        // Line and point forms: Σρ·(zz, xz, yz, xy, xx − yy) per unit G·a²; prisms in full.
        let mut far = [0.0; 5];
        let mut near = [0.0; 6];
        for (row, &north) in self.north.iter().enumerate() {
            let x = north - obs[0];
            let cells = &self.cells[row * self.ncol..(row + 1) * self.ncol];
            // Columns beyond `reach` horizontally take the point form; the others are sorted.
            let (lo, hi) = if x * x < reach * reach {
                self.columns_within(obs[1], (reach * reach - x * x).sqrt())
            } else {
                (self.ncol, self.ncol)
            };
            let mut sums = RowSums::default();
            for (col, c) in cells.iter().enumerate().take(hi).skip(lo) {
                if c[2] == 0.0 {
                    continue;
                }
                let y = self.east[col] - obs[1];
                match self.form(x, y, c, obs[2]) {
                    Form::Prism => {
                        let half = 0.5 * a;
                        let pr = Prism::new(
                            [north - half, north + half],
                            [self.east[col] - half, self.east[col] + half],
                            [c[0], c[1]],
                            c[2],
                        );
                        for (s, v) in near.iter_mut().zip(pr.tensor(obs).to_array()) {
                            *s += v;
                        }
                    }
                    Form::Line => {
                        let w = [c[0] - obs[2], c[1] - obs[2]];
                        sums.add(c[2], y, far_terms(x, y, w, spread));
                    }
                    Form::Point => sums.add(c[2], y, self.point(x, y, c, obs[2])),
                }
            }
            for range in [0..lo, hi..self.ncol] {
                self.point_run(x, obs, &cells[range.clone()], &self.east[range], &mut sums);
            }
            sums.finish(x, &mut far);
        }
        let ga2 = G * a * a;
        let [zz, xz, yz, xy, d] = far.map(|v| ga2 * v);
        let far = [0.5 * (d - zz), xy, xz, -0.5 * (d + zz), yz, zz];
        SymTensor::from_array(std::array::from_fn(|i| near[i] + far[i]))
    }

    /// Adds the point forms of a run of columns `cells` of a row (north offset x, east of their
    /// centres `east`) at `obs` (NED). A column without mass adds zero (it is never at the sample:
    /// the point form is at least [`MIN_SWITCH_CELLS`] away).
    fn point_run(
        &self,
        x: f64,
        obs: [f64; 3],
        cells: &[[f64; 3]],
        east: &[f64],
        sums: &mut RowSums,
    ) {
        for (c, e) in cells.iter().zip(east) {
            let y = e - obs[1];
            sums.add(c[2], y, self.point(x, y, c, obs[2]));
        }
    }

    /// The point form of column `c` at horizontal offset (x, y) from a sample at NED depth `oz`.
    #[inline]
    fn point(&self, x: f64, y: f64, c: &[f64; 3], oz: f64) -> [f64; 3] {
        point_terms(x, y, 0.5 * (c[0] + c[1]) - oz, c[1] - c[0], self.cell_m)
    }

    /// The terrain tensor (NED, s⁻²) at points given as (north, east, height above the ellipsoid).
    pub fn tensor(&self, points: &[[f64; 3]]) -> Vec<SymTensor> {
        points.par_iter().map(|&p| self.tensor_at(p)).collect()
    }

    /// How many columns take each form (prism, line, point) at the point (north, east, height
    /// above the ellipsoid), m.
    pub fn form_counts(&self, p: [f64; 3]) -> [usize; 3] {
        let mut n = [0; 3];
        for (row, &north) in self.north.iter().enumerate() {
            let cells = &self.cells[row * self.ncol..(row + 1) * self.ncol];
            for (c, east) in cells.iter().zip(&self.east) {
                if c[2] != 0.0 {
                    n[self.form(north - p[0], east - p[1], c, -p[2]) as usize] += 1;
                }
            }
        }
        n
    }

    /// The error bound of the line and point forms at the point (north, east, height above the
    /// ellipsoid), s⁻²: over its columns in those forms, each one's bound of the module docs with
    /// its own height h and axis distance D (d ≥ D − a/√2). Every component's error is at most this.
    pub fn error_bound(&self, p: [f64; 3]) -> f64 {
        let a = self.cell_m;
        let mut sum = 0.0;
        for (row, &north) in self.north.iter().enumerate() {
            let cells = &self.cells[row * self.ncol..(row + 1) * self.ncol];
            for (c, east) in cells.iter().zip(&self.east) {
                let (x, y) = (north - p[0], east - p[1]);
                let h = c[1] - c[0];
                let factor = match self.form(x, y, c, -p[2]) {
                    Form::Prism => continue,
                    Form::Line => FAR_ERROR_CONSTANT * a.powi(4),
                    Form::Point => point_error_factor(a, h),
                };
                let gap = (c[0] + p[2]).max(-p[2] - c[1]).max(0.0);
                let d = (x * x + y * y + gap * gap).sqrt() - a * std::f64::consts::FRAC_1_SQRT_2;
                sum += c[2].abs() * a * a * h * factor / d.powi(7);
            }
        }
        G * sum
    }
}

/// Sums along one row of the line and point forms' numbers [dz, dx, dq] weighted by density:
/// Σρ·dz, Σρ·dx, Σρ·y·dx, Σρ·dq, Σρ·y·dq, Σρ·y²·dq (x is the row's).
#[derive(Default)]
struct RowSums([f64; 6]);

impl RowSums {
    #[inline]
    fn add(&mut self, rho: f64, y: f64, [dz, dx, dq]: [f64; 3]) {
        let (rdx, rdq) = (rho * dx, rho * dq);
        let s = &mut self.0;
        s[0] += rho * dz;
        s[1] += rdx;
        s[2] += y * rdx;
        s[3] += rdq;
        s[4] += y * rdq;
        s[5] += y * y * rdq;
    }

    /// Adds the row to Σρ·(zz, xz, yz, xy, xx − yy) per unit G·a².
    fn finish(self, x: f64, far: &mut [f64; 5]) {
        let s = self.0;
        far[0] += s[0];
        far[1] += x * s[1];
        far[2] += s[2];
        far[3] += x * s[4];
        far[4] += x * x * s[3] - s[5];
    }
}
