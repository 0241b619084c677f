//! Minimum-curvature gridding with tension and blanking.
//!
//! Frame: a projected map frame; easting x and northing y in metres (grid north up). The grid is
//! cell-centred: a [`GridSpec`] names the outer west and north edges, the cell size and the number
//! of columns (eastwards) and rows (southwards); the surface is solved at the cell centres, as a
//! north-up [`Raster`]. Values keep the unit of the data (E for gradients in products).
//!
//! Method. The surface u minimises (1 − T)·∫(∇²u)² + T·∫|∇u|² through the data: it solves
//! (1 − T)·∇⁴u − T·∇²u = 0 away from the data (Briggs 1974, Geophysics 39:39–48, for T = 0;
//! Smith & Wessel 1990, Geophysics 55:293–305, for the tension T, 0 ≤ T ≤ 1; T = 1 gives a
//! harmonic surface). On a unit lattice the equation at a node reads
//! u₀ = [(8 − 7T)·ΣN − 2(1 − T)·ΣD − (1 − T)·ΣF] / (20 − 16T), with N the four nearest nodes,
//! D the four diagonal ones and F the four at distance two.
//!
//! - **Block means** (on by default, [`GridSpec::block_mean`]): the data inside each cell are
//!   first replaced by one point at their mean position with their mean value ([`block_means`]),
//!   the usual preparation for minimum-curvature gridding: a node holds one datum, so without it
//!   the other data of a cell are dropped and the kept one's noise passes into the grid as it is.
//! - **Data**: a least-squares plane is removed from the data first and added back at the end (the
//!   boundary conditions with tension are not invariant to a plane; Smith & Wessel do the same).
//!   Each node is constrained by the single datum nearest to it within its own cell (|ξ|, |η| ≤ ½
//!   cell); with block means off, further data in the cell are not used. A datum within 0.05 of a
//!   spacing of its node (both directions) fixes the node. Farther off, the datum enters the node's
//!   equation through the node's own Laplacian (Briggs 1974; the tension form is equation A-7 of
//!   Smith & Wessel 1990): L₀ is the Laplacian of the quadratic through the node, four neighbours
//!   and the datum (`Near` below), and the node solves (1 − T)·(ΣL of its four neighbours − 4·L₀) −
//!   T·L₀ = 0. The surface is not forced through each datum: a noisy datum is weighed against the
//!   curvature it would cost. (An earlier version held the surface at the datum through a Taylor
//!   expansion; with 0.5 E of noise on 3% of the data's RMS, its grids differed from GMT `surface`
//!   by 3.3% of that RMS where this form agrees to 0.06%; docs/methods/grid.md.)
//! - **Edges**: the natural conditions of Smith & Wessel (1990): (1 − T)·∂²u/∂n² + T·∂u/∂n = 0 and
//!   ∂(∇²u)/∂n = 0 on each edge, ∂²u/∂x∂y = 0 at the corners, imposed through two rows of ghost
//!   nodes outside the grid. One tension serves the interior and the edges.
//! - **Iteration**: coarse to fine. The coarsest lattice (spacing 2ᵏ cells, at least 4 nodes a
//!   side) starts from zero; each finer one starts from the coarser solution interpolated
//!   bilinearly. On each lattice, over-relaxed Gauss–Seidel sweeps (ω = 1.4 on free nodes, 1 on
//!   nodes beside a datum) in a fixed five-colour order (colour (i + 2j) mod 5: no node's stencil holds
//!   another node of its colour) run until the largest change of a sweep is below the convergence
//!   limit. Nodes of one colour are updated in parallel from the same state, so the result does
//!   not depend on the number of threads.
//! - **Convergence limit**: by default 1e-4 × the RMS of the data about the removed plane, in the
//!   data's unit; the largest change of the last sweep on each lattice is reported.
//! - **Blanking**: cells whose centre is farther than the blanking distance from every datum (all
//!   finite data, inside the grid or not) are marked missing (NaN in [`Gridded::blanked`]).

use gravgrad_core::Raster;
use gravgrad_core::raster::RasterError;
use rayon::prelude::*;
use thiserror::Error;

/// Over-relaxation factor of the free nodes.
const OMEGA: f64 = 1.4;
/// Smallest lattice side (nodes) of the coarsest level.
const MIN_SIDE: usize = 4;
/// Default convergence limit, relative to the RMS of the data about the removed plane.
pub const DEFAULT_CONVERGENCE: f64 = 1e-4;

/// The grid to fill: a cell-centred, north-up lattice of square cells in a projected frame.
#[derive(Clone, Debug, PartialEq)]
pub struct GridSpec {
    /// Outer west edge, easting in m.
    pub x_min: f64,
    /// Outer north edge, northing in m.
    pub y_max: f64,
    /// Columns, counted eastwards (at least 4).
    pub nx: usize,
    /// Rows, counted southwards (at least 4).
    pub ny: usize,
    /// Cell size, m (square cells).
    pub cell: f64,
    /// Tension T, 0 ≤ T ≤ 1: 0 is pure minimum curvature, 1 a harmonic surface.
    pub tension: f64,
    /// Blanking distance, m: cells whose centre is farther than this from every datum are missing.
    /// `None` keeps every cell.
    pub blanking: Option<f64>,
    /// Convergence limit, in the data's unit (largest change of a sweep). `None`:
    /// [`DEFAULT_CONVERGENCE`] × the RMS of the data about the removed plane.
    pub convergence: Option<f64>,
    /// Most sweeps on each lattice.
    pub max_sweeps: usize,
    /// EPSG code of the map frame, carried into the raster.
    pub epsg: Option<u32>,
    /// Replace the data inside each cell by one point at their mean position with their mean
    /// value before gridding ([`block_means`]). On by default ([`GridSpec::covering`]): each node
    /// is constrained by one datum, so without it the rest of a cell's data are dropped and the
    /// noise of the one kept passes into the grid unaveraged.
    pub block_mean: bool,
}

impl GridSpec {
    /// A grid of `cell`-metre cells covering the points' extent plus `margin` metres on every side,
    /// its edges on whole multiples of the cell size; tension 0, no blanking, default convergence,
    /// 2000 sweeps per lattice, block means on. `None` when no point is finite or the cell is not positive.
    pub fn covering(points: &[(f64, f64, f64)], cell: f64, margin: f64) -> Option<Self> {
        if !(cell.is_finite() && cell > 0.0 && margin.is_finite() && margin >= 0.0) {
            return None;
        }
        let mut b = [
            f64::INFINITY,
            f64::NEG_INFINITY,
            f64::INFINITY,
            f64::NEG_INFINITY,
        ];
        for &(x, y, v) in points {
            if x.is_finite() && y.is_finite() && v.is_finite() {
                b = [b[0].min(x), b[1].max(x), b[2].min(y), b[3].max(y)];
            }
        }
        if !b[0].is_finite() {
            return None;
        }
        let x_min = ((b[0] - margin) / cell).floor() * cell;
        let x_max = ((b[1] + margin) / cell).ceil() * cell;
        let y_min = ((b[2] - margin) / cell).floor() * cell;
        let y_max = ((b[3] + margin) / cell).ceil() * cell;
        let nx = (((x_max - x_min) / cell).round() as usize).max(MIN_SIDE);
        let ny = (((y_max - y_min) / cell).round() as usize).max(MIN_SIDE);
        Some(Self {
            x_min,
            y_max,
            nx,
            ny,
            cell,
            tension: 0.0,
            blanking: None,
            convergence: None,
            max_sweeps: 2000,
            epsg: None,
            block_mean: true,
        })
    }
}

/// Why a grid could not be made.
#[derive(Debug, Error, PartialEq)]
pub enum GridError {
    #[error("the grid needs at least {MIN_SIDE} × {MIN_SIDE} cells, got {nx} × {ny}")]
    TooSmall { nx: usize, ny: usize },
    #[error("{nx} × {ny} cells are too many to hold")]
    TooLarge { nx: usize, ny: usize },
    #[error("cell size {cell} m: expected a finite positive size")]
    Cell { cell: f64 },
    #[error("grid corner ({x_min}, {y_max}) m is not finite")]
    Corner { x_min: f64, y_max: f64 },
    #[error("tension {tension}: expected 0 ≤ tension ≤ 1")]
    Tension { tension: f64 },
    #[error("blanking distance {distance} m: expected a positive distance")]
    Blanking { distance: f64 },
    #[error("convergence limit {limit}: expected a positive value")]
    Convergence { limit: f64 },
    #[error("no finite datum lies inside the grid")]
    NoData,
    #[error(transparent)]
    Raster(#[from] RasterError),
}

/// What one lattice of the coarse-to-fine iteration did.
#[derive(Clone, Debug, PartialEq)]
pub struct LevelReport {
    /// Node spacing of the lattice, in cells of the final grid.
    pub stride: usize,
    /// Nodes eastwards and southwards.
    pub nodes: (usize, usize),
    /// Nodes constrained by a datum.
    pub constrained: usize,
    /// Sweeps run.
    pub sweeps: usize,
    /// Largest change of the last sweep, in the data's unit.
    pub last_change: f64,
}

/// How the gridding went.
#[derive(Clone, Debug, PartialEq)]
pub struct GridReport {
    /// Finite data inside the grid.
    pub data_inside: usize,
    /// Finite data outside the grid (used for blanking only).
    pub data_outside: usize,
    /// Data with a non-finite coordinate or value, ignored.
    pub data_not_finite: usize,
    /// Points the surface was fitted to: one per cell holding data with block means on
    /// ([`GridSpec::block_mean`]), else the data inside.
    pub data_gridded: usize,
    /// The convergence limit used, in the data's unit.
    pub convergence: f64,
    /// Whether every lattice met the limit within `max_sweeps`.
    pub converged: bool,
    /// Coarsest first.
    pub levels: Vec<LevelReport>,
    /// The removed plane, fitted to the gridded points: value = a + b·(x − x̄) + c·(y − ȳ) with
    /// (x̄, ȳ) their centroid, as
    /// (a, b per m, c per m, x̄, ȳ).
    pub plane: [f64; 5],
}

/// A gridded surface: every cell filled, and which cells blanking keeps.
#[derive(Clone, Debug, PartialEq)]
pub struct Gridded {
    /// The surface at every cell centre (no missing cell), north-up.
    pub surface: Raster,
    /// Per cell, row-major like `surface.values`: true where the cell lies within the blanking
    /// distance of a datum (every cell when there is no blanking).
    pub keep: Vec<bool>,
    pub report: GridReport,
}

impl Gridded {
    /// The surface with the blanked cells set to NaN, NaN as the raster's nodata value.
    pub fn blanked(&self) -> Raster {
        blank(&self.surface, &self.keep)
    }
}

/// `raster` with the cells where `keep` is false set to NaN (NaN as its nodata value). `keep` must
/// have one flag per cell; extra or missing flags leave the cells beyond them as they are.
pub fn blank(raster: &Raster, keep: &[bool]) -> Raster {
    let mut r = raster.clone().with_nodata(f64::NAN);
    for (v, &k) in r.values.iter_mut().zip(keep) {
        if !k {
            *v = f64::NAN;
        }
    }
    r
}

/// Grids scattered data (easting m, northing m, value) onto `spec`'s cell centres by minimum
/// curvature with tension (see the module documentation). Data with a non-finite coordinate or
/// value are ignored and counted.
pub fn grid_points(points: &[(f64, f64, f64)], spec: &GridSpec) -> Result<Gridded, GridError> {
    check_spec(spec)?;
    let (nx, ny, h) = (spec.nx, spec.ny, spec.cell);
    // Centre of the first (north-west) cell; lattice index i eastwards, j southwards.
    let e0 = spec.x_min + 0.5 * h;
    let n0 = spec.y_max - 0.5 * h;
    let (inside, outside, not_finite) = locate(points, spec);
    if inside.is_empty() {
        return Err(GridError::NoData);
    }
    let data_inside = inside.len();
    let inside = if spec.block_mean {
        cell_means(&inside, nx, ny)
    } else {
        inside
    };
    let plane = fit_plane(&inside);
    let resid: Vec<(f64, f64, f64)> = inside
        .iter()
        .map(|&(fi, fj, v)| (fi, fj, v - plane_at(&plane, fi, fj)))
        .collect();
    let rms = (resid.iter().map(|p| p.2 * p.2).sum::<f64>() / resid.len() as f64).sqrt();
    let limit = match spec.convergence {
        Some(c) => c,
        None if rms > 0.0 => DEFAULT_CONVERGENCE * rms,
        // Data on a plane: the residual surface is zero; any positive limit ends at once.
        None => f64::MIN_POSITIVE,
    };

    // Strides: powers of two while the lattice keeps at least MIN_SIDE nodes a side.
    let mut strides = vec![1usize];
    loop {
        let s = strides[strides.len() - 1] * 2;
        let (ax, ay) = (lattice_side(nx, s), lattice_side(ny, s));
        if ax < MIN_SIDE || ay < MIN_SIDE {
            break;
        }
        strides.push(s);
    }
    strides.reverse();

    let mut levels = Vec::with_capacity(strides.len());
    let mut converged = true;
    let mut prev: Option<(Lattice, usize)> = None;
    for &s in &strides {
        let mut lat = Lattice::new(lattice_side(nx, s), lattice_side(ny, s), spec.tension);
        if let Some((coarse, cs)) = &prev {
            lat.init_from(coarse, cs / s);
        }
        lat.set_data(&resid, s as f64);
        let (sweeps, last) = lat.solve(limit, spec.max_sweeps);
        converged &= last < limit;
        levels.push(LevelReport {
            stride: s,
            nodes: (lat.nx, lat.ny),
            constrained: lat.constrained(),
            sweeps,
            last_change: last,
        });
        prev = Some((lat, s));
    }
    let (fine, _) = prev.ok_or(GridError::NoData)?;
    let mut values = Vec::with_capacity(nx * ny);
    for j in 0..ny {
        for i in 0..nx {
            values.push(fine.get(i as isize, j as isize) + plane_at(&plane, i as f64, j as f64));
        }
    }
    let mut surface = Raster::new(nx, ny, (spec.x_min, spec.y_max), (h, h), values)?;
    surface.epsg = spec.epsg;
    let keep = match spec.blanking {
        Some(d) => keep_mask(points, spec, d),
        None => vec![true; nx * ny],
    };
    // The plane in metres about the centroid, for the report.
    let n = inside.len() as f64;
    let ci = inside.iter().map(|p| p.0).sum::<f64>() / n;
    let cj = inside.iter().map(|p| p.1).sum::<f64>() / n;
    let report = GridReport {
        data_inside,
        data_gridded: inside.len(),
        data_outside: outside,
        data_not_finite: not_finite,
        convergence: limit,
        converged,
        levels,
        plane: [
            plane_at(&plane, ci, cj),
            plane[1] / h,
            -plane[2] / h,
            e0 + ci * h,
            n0 - cj * h,
        ],
    };
    Ok(Gridded {
        surface,
        keep,
        report,
    })
}

/// The block means of `points` on `spec`'s cells: for every cell holding at least one finite
/// datum, one point at the mean easting and northing of its data with their mean value, in map
/// coordinates, cells in row-major order (north row first, each west to east). Data outside the
/// grid or with a non-finite coordinate or value are left out. These are the points
/// [`grid_points`] fits when [`GridSpec::block_mean`] is on. The sums run over each cell's data in
/// their given order, so the means do not depend on the number of threads.
pub fn block_means(
    points: &[(f64, f64, f64)],
    spec: &GridSpec,
) -> Result<Vec<(f64, f64, f64)>, GridError> {
    check_spec(spec)?;
    let h = spec.cell;
    let e0 = spec.x_min + 0.5 * h;
    let n0 = spec.y_max - 0.5 * h;
    let (inside, _, _) = locate(points, spec);
    Ok(cell_means(&inside, spec.nx, spec.ny)
        .into_iter()
        .map(|(fi, fj, v)| (e0 + fi * h, n0 - fj * h, v))
        .collect())
}

/// The finite data inside the grid as (column, row, value) in cells from the first centre
/// (fractional), with the counts of finite data outside and of data not finite.
fn locate(points: &[(f64, f64, f64)], spec: &GridSpec) -> (Vec<(f64, f64, f64)>, usize, usize) {
    let (nx, ny, h) = (spec.nx, spec.ny, spec.cell);
    let e0 = spec.x_min + 0.5 * h;
    let n0 = spec.y_max - 0.5 * h;
    let mut inside: Vec<(f64, f64, f64)> = Vec::new();
    let mut outside = 0usize;
    let mut not_finite = 0usize;
    for &(x, y, v) in points {
        if !(x.is_finite() && y.is_finite() && v.is_finite()) {
            not_finite += 1;
            continue;
        }
        let fi = (x - e0) / h;
        let fj = (n0 - y) / h;
        if fi >= -0.5 && fi < nx as f64 - 0.5 && fj >= -0.5 && fj < ny as f64 - 0.5 {
            inside.push((fi, fj, v));
        } else {
            outside += 1;
        }
    }
    (inside, outside, not_finite)
}

/// One point per occupied cell: the mean offset from the cell's centre and the mean value of the
/// data in it (cell units, as [`locate`] gives them), cells in row-major order. Offsets rather
/// than positions are summed, so the means keep full precision far from the origin.
fn cell_means(data: &[(f64, f64, f64)], nx: usize, ny: usize) -> Vec<(f64, f64, f64)> {
    // Per cell: Σ offset east, Σ offset south, Σ value, count.
    let mut acc = vec![(0.0f64, 0.0f64, 0.0f64, 0usize); nx * ny];
    for &(fi, fj, v) in data {
        let ci = ((fi + 0.5).floor().max(0.0) as usize).min(nx - 1);
        let cj = ((fj + 0.5).floor().max(0.0) as usize).min(ny - 1);
        let a = &mut acc[cj * nx + ci];
        a.0 += fi - ci as f64;
        a.1 += fj - cj as f64;
        a.2 += v;
        a.3 += 1;
    }
    acc.iter()
        .enumerate()
        .filter(|(_, a)| a.3 > 0)
        .map(|(k, a)| {
            let n = a.3 as f64;
            (
                (k % nx) as f64 + a.0 / n,
                (k / nx) as f64 + a.1 / n,
                a.2 / n,
            )
        })
        .collect()
}

fn check_spec(spec: &GridSpec) -> Result<(), GridError> {
    let (nx, ny) = (spec.nx, spec.ny);
    if nx < MIN_SIDE || ny < MIN_SIDE {
        return Err(GridError::TooSmall { nx, ny });
    }
    if nx
        .checked_add(4)
        .and_then(|a| ny.checked_add(4).and_then(|b| a.checked_mul(b)))
        .and_then(|c| c.checked_mul(16))
        .is_none_or(|bytes| bytes / 16 >= (u32::MAX - 1) as usize)
        || nx > (1 << 24)
        || ny > (1 << 24)
    {
        return Err(GridError::TooLarge { nx, ny });
    }
    if !(spec.cell.is_finite() && spec.cell > 0.0) {
        return Err(GridError::Cell { cell: spec.cell });
    }
    if !(spec.x_min.is_finite() && spec.y_max.is_finite()) {
        return Err(GridError::Corner {
            x_min: spec.x_min,
            y_max: spec.y_max,
        });
    }
    if !(0.0..=1.0).contains(&spec.tension) {
        return Err(GridError::Tension {
            tension: spec.tension,
        });
    }
    if let Some(d) = spec.blanking
        && !(d.is_finite() && d > 0.0)
    {
        return Err(GridError::Blanking { distance: d });
    }
    if let Some(c) = spec.convergence
        && !(c.is_finite() && c > 0.0)
    {
        return Err(GridError::Convergence { limit: c });
    }
    Ok(())
}

/// Nodes along a side of `n` cells at `stride` cells: enough to reach the last centre.
fn lattice_side(n: usize, stride: usize) -> usize {
    (n - 1).div_ceil(stride) + 1
}

/// Least-squares plane v = a + b·(i − ī) + c·(j − j̄) in cell units, returned as a closure's
/// coefficients [a, b, c, ī, j̄]; degenerate directions (data on a line or a point) get no slope.
fn fit_plane(p: &[(f64, f64, f64)]) -> [f64; 5] {
    let n = p.len() as f64;
    let ci = p.iter().map(|q| q.0).sum::<f64>() / n;
    let cj = p.iter().map(|q| q.1).sum::<f64>() / n;
    let a = p.iter().map(|q| q.2).sum::<f64>() / n;
    let (mut sii, mut sjj, mut sij, mut siv, mut sjv) = (0.0, 0.0, 0.0, 0.0, 0.0);
    for &(i, j, v) in p {
        let (di, dj) = (i - ci, j - cj);
        sii += di * di;
        sjj += dj * dj;
        sij += di * dj;
        siv += di * (v - a);
        sjv += dj * (v - a);
    }
    let det = sii * sjj - sij * sij;
    let scale = (sii * sjj).max(f64::MIN_POSITIVE);
    let (b, c) = if det > 1e-9 * scale && sii > 0.0 && sjj > 0.0 {
        ((siv * sjj - sjv * sij) / det, (sjv * sii - siv * sij) / det)
    } else {
        (0.0, 0.0)
    };
    [a, b, c, ci, cj]
}

fn plane_at(p: &[f64; 5], i: f64, j: f64) -> f64 {
    p[0] + p[1] * (i - p[3]) + p[2] * (j - p[4])
}

/// What holds a lattice node, in four bytes (the colour passes read it at every node):
/// [`Hold::FREE`] (no datum in its cell: the equation of the surface alone), [`Hold::FIXED`] (a
/// datum within [`CLOSE`] of the node in both directions: the node keeps the datum's value), or
/// else the index into [`Lattice::near`] of the datum farther off, which enters the node's
/// equation through its Laplacian. [`check_spec`] keeps every lattice below `u32::MAX - 1` nodes.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
struct Hold(u32);

impl Hold {
    const FREE: Hold = Hold(u32::MAX);
    const FIXED: Hold = Hold(u32::MAX - 1);
}

/// The Laplacian at a node estimated through a datum off it (Briggs 1974): with the datum rotated
/// by a multiple of 90° into the quadrant (x ≥ 0, y ≥ 0, y up, in spacings), the quadratic
/// u0 + a·x + b·y + c·x² + d·xy + e·y² through the node, its neighbours A (−1, 1), B (−1, 0),
/// C (0, −1), D (1, −1) and the datum E (x, y) has the Laplacian 2(c + e) =
/// Σ b_k·(u_k − u0) with, for s = x + y and q = s·(1 + s),
/// b_A = (x² + 2xy + x − y² − y)/q, b_B = 2(1 − x + y)/(1 + s), b_C = 2(1 + x − y)/(1 + s),
/// b_D = (y² + 2xy + y − x² − x)/q, b_E = 4/q.
#[derive(Clone, Copy, Debug)]
struct Near {
    /// Padded-index offsets of A, B, C, D from the node.
    at: [isize; 4],
    b: [f64; 4],
    /// b_E times the datum.
    b_datum: f64,
    /// Σ b_k over A–E.
    b_sum: f64,
}

/// Offsets (in spacings, both directions) within which a datum fixes its node outright; nearer,
/// the Laplacian through the datum degenerates (b_E grows as 1/(x + y)).
const CLOSE: f64 = 0.05;

/// Maps canonical offsets (p east, q north) back to the lattice.
type Turn = fn(isize, isize) -> (isize, isize);

impl Near {
    /// The coefficients for a datum `value` at (ξ east, η south) spacings from the node, on a
    /// padded lattice `w` nodes wide.
    fn new(xi: f64, eta: f64, value: f64, w: usize) -> Self {
        let (dx, dy) = (xi, -eta);
        // (x, y) in the first quadrant, and the map from the canonical offsets (p east, q north)
        // back to the lattice.
        let ((x, y), back): ((f64, f64), Turn) = match (dx >= 0.0, dy >= 0.0) {
            (true, true) => ((dx, dy), |p, q| (p, q)),
            (false, true) => ((dy, -dx), |p, q| (-q, p)),
            (false, false) => ((-dx, -dy), |p, q| (-p, -q)),
            (true, false) => ((-dy, dx), |p, q| (q, -p)),
        };
        let s = x + y;
        let q = s * (1.0 + s);
        let b = [
            (x * x + 2.0 * x * y + x - y * y - y) / q,
            2.0 * (1.0 - x + y) / (1.0 + s),
            2.0 * (1.0 + x - y) / (1.0 + s),
            (y * y + 2.0 * x * y + y - x * x - x) / q,
        ];
        let b_e = 4.0 / q;
        let w = w as isize;
        let at = [(-1, 1), (-1, 0), (0, -1), (1, -1)].map(|(p, q)| {
            let (east, north) = back(p, q);
            east - north * w
        });
        Self {
            at,
            b,
            b_datum: b_e * value,
            b_sum: b.iter().sum::<f64>() + b_e,
        }
    }
}

/// A lattice with two rows of ghost nodes on every side.
struct Lattice {
    nx: usize,
    ny: usize,
    /// Padded width and height.
    w: usize,
    u: Vec<f64>,
    /// Per padded node: what holds it.
    hold: Vec<Hold>,
    near: Vec<Near>,
    tension: f64,
}

impl Lattice {
    fn new(nx: usize, ny: usize, tension: f64) -> Self {
        let w = nx + 4;
        let size = w * (ny + 4);
        Self {
            nx,
            ny,
            w,
            u: vec![0.0; size],
            hold: vec![Hold::FREE; size],
            near: Vec::new(),
            tension,
        }
    }

    fn at(&self, i: isize, j: isize) -> usize {
        ((j + 2) as usize) * self.w + (i + 2) as usize
    }

    fn get(&self, i: isize, j: isize) -> f64 {
        self.u[self.at(i, j)]
    }

    fn constrained(&self) -> usize {
        self.hold.iter().filter(|&&h| h != Hold::FREE).count()
    }

    /// Starts from a coarser lattice whose spacing is `ratio` of ours, interpolated bilinearly.
    fn init_from(&mut self, coarse: &Lattice, ratio: usize) {
        let r = ratio as f64;
        for j in 0..self.ny {
            let fj = j as f64 / r;
            let j0 = (fj.floor() as usize).min(coarse.ny - 2);
            let tj = fj - j0 as f64;
            for i in 0..self.nx {
                let fi = i as f64 / r;
                let i0 = (fi.floor() as usize).min(coarse.nx - 2);
                let ti = fi - i0 as f64;
                let (a, b) = (i0 as isize, j0 as isize);
                let v = (1.0 - ti) * (1.0 - tj) * coarse.get(a, b)
                    + ti * (1.0 - tj) * coarse.get(a + 1, b)
                    + (1.0 - ti) * tj * coarse.get(a, b + 1)
                    + ti * tj * coarse.get(a + 1, b + 1);
                let k = self.at(i as isize, j as isize);
                self.u[k] = v;
            }
        }
    }

    /// Binds each node to its nearest datum within half a spacing; `stride` converts the data's
    /// cell units to this lattice's spacing. Ties go to the earlier datum.
    fn set_data(&mut self, data: &[(f64, f64, f64)], stride: f64) {
        let mut best: Vec<f64> = vec![f64::INFINITY; self.u.len()];
        let mut nearest: Vec<Option<(f64, f64, f64)>> = vec![None; self.u.len()];
        for &(fi, fj, v) in data {
            let (li, lj) = (fi / stride, fj / stride);
            let (i, j) = (li.round(), lj.round());
            if i < 0.0 || j < 0.0 || i >= self.nx as f64 || j >= self.ny as f64 {
                continue;
            }
            let (xi, eta) = (li - i, lj - j);
            let d2 = xi * xi + eta * eta;
            let k = self.at(i as isize, j as isize);
            if d2 < best[k] {
                best[k] = d2;
                nearest[k] = Some((xi, eta, v));
            }
        }
        for (k, d) in nearest.into_iter().enumerate() {
            if let Some((xi, eta, v)) = d {
                if xi.abs() < CLOSE && eta.abs() < CLOSE {
                    self.hold[k] = Hold::FIXED;
                    self.u[k] = v;
                } else {
                    self.hold[k] = Hold(self.near.len() as u32);
                    self.near.push(Near::new(xi, eta, v, self.w));
                }
            }
        }
    }

    /// Fills the ghost nodes from the edge conditions (module documentation).
    fn set_ghosts(&mut self) {
        let t = self.tension;
        let a0 = 4.0 * (1.0 - t) / (2.0 - t);
        let a1 = (3.0 * t - 2.0) / (2.0 - t);
        let (nx, ny) = (self.nx as isize, self.ny as isize);
        // First ghost row/column: (1 − T)·∂²u/∂n² + T·∂u/∂n = 0.
        for i in 0..nx {
            let k = self.at(i, -1);
            self.u[k] = a0 * self.get(i, 0) + a1 * self.get(i, 1);
            let k = self.at(i, ny);
            self.u[k] = a0 * self.get(i, ny - 1) + a1 * self.get(i, ny - 2);
        }
        for j in 0..ny {
            let k = self.at(-1, j);
            self.u[k] = a0 * self.get(0, j) + a1 * self.get(1, j);
            let k = self.at(nx, j);
            self.u[k] = a0 * self.get(nx - 1, j) + a1 * self.get(nx - 2, j);
        }
        // Corners: ∂²u/∂x∂y = 0.
        for (ci, cj, si, sj) in [
            (0, 0, 1, 1),
            (nx - 1, 0, -1, 1),
            (0, ny - 1, 1, -1),
            (nx - 1, ny - 1, -1, -1),
        ] {
            let v = self.get(ci + si, cj - sj) + self.get(ci - si, cj + sj)
                - self.get(ci + si, cj + sj);
            let k = self.at(ci - si, cj - sj);
            self.u[k] = v;
        }
        // Second ghosts: ∂(∇²u)/∂n = 0, centred on the edge node.
        for i in 0..nx {
            for (e, s) in [(0, 1), (ny - 1, -1)] {
                let g = |a: isize, b: isize| self.get(a, e + s * b);
                let v = g(i, 2) - 4.0 * g(i, 1) + g(i + 1, 1) + g(i - 1, 1) + 4.0 * g(i, -1)
                    - g(i + 1, -1)
                    - g(i - 1, -1);
                let k = self.at(i, e - 2 * s);
                self.u[k] = v;
            }
        }
        for j in 0..ny {
            for (e, s) in [(0, 1), (nx - 1, -1)] {
                let g = |a: isize, b: isize| self.get(e + s * a, b);
                let v = g(2, j) - 4.0 * g(1, j) + g(1, j + 1) + g(1, j - 1) + 4.0 * g(-1, j)
                    - g(-1, j + 1)
                    - g(-1, j - 1);
                let k = self.at(e - 2 * s, j);
                self.u[k] = v;
            }
        }
    }

    /// Sweeps until the largest change is below `limit` or `max_sweeps` ran; returns the sweeps
    /// run and the last largest change.
    fn solve(&mut self, limit: f64, max_sweeps: usize) -> (usize, f64) {
        let bands = Bands::new(self.w, self.ny + 4);
        let mut halo = vec![0.0; bands.halo_len()];
        let mut last = f64::INFINITY;
        let mut sweeps = 0;
        while sweeps < max_sweeps {
            let mut change: f64 = 0.0;
            for colour in 0..5 {
                self.set_ghosts();
                change = change.max(self.colour_pass(colour, &bands, &mut halo));
            }
            sweeps += 1;
            last = change;
            if change < limit {
                break;
            }
        }
        self.set_ghosts();
        (sweeps, last)
    }

    /// Updates the nodes of one colour from the current state; returns the largest change.
    ///
    /// The padded rows are cut into bands of [`Bands`] (a few thousand nodes each, so that one
    /// task is worth scheduling on a long lattice). Each band is updated in place from a copy of
    /// itself and of the two rows on either side, those taken before any band changes: every node
    /// of the colour sees the state before the pass, whatever the number of threads or bands (and
    /// no node's stencil holds another node of its colour, so the copy only keeps the borrow
    /// checker's rules, not the arithmetic).
    fn colour_pass(&mut self, colour: usize, bands: &Bands, halo: &mut [f64]) -> f64 {
        let (w, nx, ny) = (self.w, self.nx, self.ny);
        let t = self.tension;
        let cn = (8.0 - 7.0 * t) / (20.0 - 16.0 * t);
        let cd = -2.0 * (1.0 - t) / (20.0 - 16.0 * t);
        let cf = -(1.0 - t) / (20.0 - 16.0 * t);
        // Node beside a datum: (1 − T)·(Σ Laplacians of the four neighbours − 4·L0) − T·L0 = 0
        // with L0 through the datum (Near): u0·[4(1 − T) + (4 − 3T)·Σb] =
        // (1 − T)·(4ΣN − 2ΣD − ΣF) + (4 − 3T)·(Σ b_k·u_k + b_E·datum).
        let (nn, nd, nf) = (4.0 * (1.0 - t), -2.0 * (1.0 - t), -(1.0 - t));
        let (d_own, d_lap) = (4.0 * (1.0 - t), 4.0 - 3.0 * t);
        bands.take_halos(&self.u, halo);
        let halo = &*halo;
        let hold = &self.hold;
        let near = &self.near;
        let rows = bands.rows;
        self.u
            .par_chunks_mut(rows * w)
            .enumerate()
            .map(|(b, band)| {
                let first_row = b * rows;
                let band_rows = band.len() / w;
                // Active rows of the band: lattice rows 0..ny are padded rows 2..ny + 2.
                let lo = first_row.max(2);
                let hi = (first_row + band_rows).min(ny + 2);
                if lo >= hi {
                    return 0.0;
                }
                // The band with two rows either side, as they were before the pass.
                let (above, below) = bands.halo_of(b, halo);
                let top = first_row - above.len() / w;
                let mut src = Vec::with_capacity(above.len() + band.len() + below.len());
                src.extend_from_slice(above);
                src.extend_from_slice(band);
                src.extend_from_slice(below);
                let src = &src;
                let mut worst: f64 = 0.0;
                for pj in lo..hi {
                    let j = pj - 2;
                    // Colour (i + 2j) mod 5 = colour  ⇔  i ≡ colour − 2j (mod 5).
                    let mut i = (colour + 5 * ny * 2 - 2 * j) % 5;
                    while i < nx {
                        let g = pj * w + i + 2;
                        let k = g - top * w;
                        let old = src[k];
                        let sums = || {
                            let nsum = src[k - 1] + src[k + 1] + src[k - w] + src[k + w];
                            let dsum =
                                src[k - w - 1] + src[k - w + 1] + src[k + w - 1] + src[k + w + 1];
                            let fsum = src[k - 2] + src[k + 2] + src[k - 2 * w] + src[k + 2 * w];
                            (nsum, dsum, fsum)
                        };
                        let new = match hold[g] {
                            Hold::FREE => {
                                let (ns, ds, fs) = sums();
                                let target = cn * ns + cd * ds + cf * fs;
                                old + OMEGA * (target - old)
                            }
                            Hold::FIXED => old,
                            Hold(n) => {
                                let c = &near[n as usize];
                                let (ns, ds, fs) = sums();
                                let mut lap = c.b_datum;
                                for (b, &at) in c.b.iter().zip(&c.at) {
                                    lap += b * src[k.wrapping_add_signed(at)];
                                }
                                // Not over-relaxed: neighbouring data can pull against each other.
                                (nn * ns + nd * ds + nf * fs + d_lap * lap)
                                    / (d_own + d_lap * c.b_sum)
                            }
                        };
                        band[g - first_row * w] = new;
                        worst = worst.max((new - old).abs());
                        i += 5;
                    }
                }
                worst
            })
            .reduce(|| 0.0, f64::max)
    }
}

/// Bands of whole padded rows for the colour passes, and where each band's two rows above and
/// below are kept while the bands change.
struct Bands {
    /// Padded width.
    w: usize,
    /// Padded rows in all.
    total: usize,
    /// Rows per band (the last may be shorter).
    rows: usize,
    count: usize,
}

/// Nodes per band, about: enough work to be worth a task, small enough to stay in cache.
const BAND_NODES: usize = 16_384;

impl Bands {
    fn new(w: usize, total: usize) -> Self {
        let rows = BAND_NODES.div_ceil(w).max(4);
        Self {
            w,
            total,
            rows,
            count: total.div_ceil(rows),
        }
    }

    /// Two rows above and two below per band.
    fn halo_len(&self) -> usize {
        self.count * 4 * self.w
    }

    /// Copies each band's neighbouring rows (up to two either side, fewer at the lattice's ends).
    fn take_halos(&self, u: &[f64], halo: &mut [f64]) {
        let w = self.w;
        for (b, h) in halo.chunks_mut(4 * w).enumerate() {
            let start = b * self.rows;
            let end = (start + self.rows).min(self.total);
            let a0 = start.saturating_sub(2);
            let above = (start - a0) * w;
            h[2 * w - above..2 * w].copy_from_slice(&u[a0 * w..start * w]);
            let b1 = (end + 2).min(self.total);
            let below = (b1 - end) * w;
            h[2 * w..2 * w + below].copy_from_slice(&u[end * w..b1 * w]);
        }
    }

    /// Band `b`'s rows above and below from [`Bands::take_halos`]'s copy.
    fn halo_of<'a>(&self, b: usize, halo: &'a [f64]) -> (&'a [f64], &'a [f64]) {
        let w = self.w;
        let start = b * self.rows;
        let end = (start + self.rows).min(self.total);
        let above = (start - start.saturating_sub(2)) * w;
        let below = ((end + 2).min(self.total) - end) * w;
        let h = &halo[b * 4 * w..(b + 1) * 4 * w];
        (&h[2 * w - above..2 * w], &h[2 * w..2 * w + below])
    }
}

/// Per cell, whether a datum lies within `distance` m of its centre.
fn keep_mask(points: &[(f64, f64, f64)], spec: &GridSpec, distance: f64) -> Vec<bool> {
    let (nx, ny, h) = (spec.nx, spec.ny, spec.cell);
    // Buckets of one cell over the grid widened by the distance.
    let reach = (distance / h).ceil() as isize + 1;
    let bw = nx as isize + 2 * reach;
    let bh = ny as isize + 2 * reach;
    let bucket_of = |x: f64, y: f64| -> Option<usize> {
        let bi = ((x - spec.x_min) / h).floor();
        let bj = ((spec.y_max - y) / h).floor();
        if !(bi.is_finite() && bj.is_finite()) {
            return None;
        }
        let (bi, bj) = (bi as isize + reach, bj as isize + reach);
        if bi < 0 || bj < 0 || bi >= bw || bj >= bh {
            return None;
        }
        Some((bj * bw + bi) as usize)
    };
    let nb = (bw * bh) as usize;
    let mut count = vec![0usize; nb + 1];
    let mut member: Vec<(usize, f64, f64)> = Vec::new();
    for &(x, y, v) in points {
        if !(x.is_finite() && y.is_finite() && v.is_finite()) {
            continue;
        }
        if let Some(b) = bucket_of(x, y) {
            count[b + 1] += 1;
            member.push((b, x, y));
        }
    }
    for b in 0..nb {
        count[b + 1] += count[b];
    }
    let mut fill = count.clone();
    let mut xy = vec![(0.0, 0.0); member.len()];
    for &(b, x, y) in &member {
        xy[fill[b]] = (x, y);
        fill[b] += 1;
    }
    let d2 = distance * distance;
    let mut keep = vec![false; nx * ny];
    keep.par_chunks_mut(nx).enumerate().for_each(|(r, row)| {
        let cy = spec.y_max - (r as f64 + 0.5) * h;
        for (c, kept) in row.iter_mut().enumerate() {
            let cx = spec.x_min + (c as f64 + 0.5) * h;
            let (bi, bj) = (c as isize + reach, r as isize + reach);
            'search: for dj in -reach..=reach {
                let jj = bj + dj;
                if jj < 0 || jj >= bh {
                    continue;
                }
                for di in -reach..=reach {
                    let ii = bi + di;
                    if ii < 0 || ii >= bw {
                        continue;
                    }
                    let b = (jj * bw + ii) as usize;
                    for &(x, y) in &xy[count[b]..count[b + 1]] {
                        if (x - cx) * (x - cx) + (y - cy) * (y - cy) <= d2 {
                            *kept = true;
                            break 'search;
                        }
                    }
                }
            }
        }
    });
    keep
}
