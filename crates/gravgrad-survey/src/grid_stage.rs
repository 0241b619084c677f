//! The grid stage of a run: the most reduced tensor along every line, horizontal components turned
//! from true to grid north, gridded by minimum curvature (recipe `[grid]`; cell and blanking
//! distance from the line spacing when the recipe sets none, `gravgrad_grid::spacing`; the
//! components gridded in parallel, each on its own), the Laplace-consistent
//! full tensor and gz derived from every measured component together. Written to files by
//! `gravgrad_products::grid_files`.
//!
//! Units: E for tensor grids, mGal for gz; map frame of the survey's UTM zone (x east, y north,
//! tensors with x grid north, y grid east, z down).

use crate::pipeline::{FlightResult, rz};
use gravgrad_core::SymTensor;
use gravgrad_core::raster::Raster;
use gravgrad_core::units::EOTVOS;
use gravgrad_grid::{
    GridSpec, GzReference, TensorOptions, blank, default_blanking, default_cell, full_tensor,
    grid_points, line_spacing,
};
use gravgrad_ingest::recipe::Recipe;
use rayon::prelude::*;

/// Component names in product order.
pub const NAMES: [&str; 6] = ["gxx", "gxy", "gxz", "gyy", "gyz", "gzz"];

/// The gridded products, kept for scoring and reports.
pub struct Grids {
    /// Measured components gridded (None: not observed), E.
    pub measured: [Option<Raster>; 6],
    /// The full tensor, E.
    pub tensor: [Raster; 6],
    /// gz, mGal (mean zero over the grid).
    pub gz: Raster,
    /// Which stage was gridded.
    pub stage: &'static str,
    /// Median spacing of the survey lines, m (None: not found).
    pub line_spacing_m: Option<f64>,
    /// Cell size used, m (the recipe's, or from the line spacing).
    pub cell_m: f64,
    /// Blanking distance used, m (the recipe's, or from the line spacing).
    pub blanking_m: f64,
    /// Cells eastwards and northwards.
    pub cells: (usize, usize),
}

/// Grids every flight's line samples and derives the full tensor. `levelled` (per flight and
/// component, E, NED true north, NaN off lines) is gridded when given (the filtered and levelled
/// stage); otherwise the reduced tensor.
pub fn grid_survey(
    recipe: &Recipe,
    results: &[FlightResult],
    levelled: Option<&[[Vec<f64>; 6]]>,
    epsg: u32,
) -> Result<Grids, String> {
    let stage = match (
        levelled.is_some(),
        results.iter().all(|r| r.terrain.is_some()),
    ) {
        (true, _) => "levelled",
        (false, true) => "terrain_removed",
        (false, false) => "normal_removed",
    };
    let observed = results.first().map_or([false; 6], |r| r.observed);
    let mut pts: [Vec<(f64, f64, f64)>; 6] = Default::default();
    for (f, r) in results.iter().enumerate() {
        for i in 0..r.time.len() {
            if r.line[i] <= 0 {
                continue;
            }
            // In E, NED true north; unobserved components as 0 so that the rotation about the
            // vertical (which keeps xx–xy–yy, xz–yz and zz apart) does not spread NaN.
            let e: [f64; 6] = match levelled {
                Some(l) => std::array::from_fn(|c| l[f][c][i]),
                None => {
                    let mut t = r.rotated[i] - r.normal[i];
                    if let Some(terr) = &r.terrain {
                        t = t - terr[i];
                    }
                    t.to_array().map(|v| v / EOTVOS)
                }
            };
            let t = SymTensor::from_array(std::array::from_fn(|c| {
                if observed[c] && e[c].is_finite() {
                    e[c]
                } else {
                    0.0
                }
            }));
            // True north → grid north: the inverse of the convergence rotation.
            let a = t.rotated(&rz(-r.positions.convergence_rad[i])).to_array();
            for c in 0..6 {
                if observed[c] && e[c].is_finite() {
                    pts[c].push((r.positions.easting_m[i], r.positions.northing_m[i], a[c]));
                }
            }
        }
    }
    // Each line's positions, for the line spacing.
    let mut tracks: Vec<Vec<(f64, f64)>> = Vec::new();
    for r in results {
        let mut i = 0;
        while i < r.line.len() {
            let (l, start) = (r.line[i], i);
            while i < r.line.len() && r.line[i] == l {
                i += 1;
            }
            if l > 0 {
                tracks.push(
                    (start..i)
                        .map(|k| (r.positions.easting_m[k], r.positions.northing_m[k]))
                        .collect(),
                );
            }
        }
    }
    let spacing = line_spacing(&tracks);
    let (cell, blanking) = cell_and_blanking(recipe, spacing);
    let any = pts
        .iter()
        .find(|p| !p.is_empty())
        .ok_or("no line samples to grid")?;
    let mut spec = GridSpec::covering(any, cell, blanking)
        .ok_or("the line samples have no finite position")?;
    spec.tension = recipe.grid.tension;
    spec.blanking = Some(blanking);
    spec.epsg = Some(epsg);
    // The components in parallel (each lattice's passes are banded finely enough to share the
    // threads); each result is independent of the thread count.
    let gridded: Vec<Option<gravgrad_grid::Gridded>> = (0..6)
        .into_par_iter()
        .map(|c| {
            if pts[c].is_empty() {
                return Ok(None);
            }
            grid_points(&pts[c], &spec)
                .map(Some)
                .map_err(|e| format!("gridding {}: {e}", NAMES[c]))
        })
        .collect::<Result<_, String>>()?;
    let mut keep: Option<Vec<bool>> = None;
    let mut surfaces: [Option<Raster>; 6] = Default::default();
    let mut measured: [Option<Raster>; 6] = Default::default();
    for (c, g) in gridded.into_iter().enumerate() {
        let Some(g) = g else { continue };
        measured[c] = Some(g.blanked());
        keep.get_or_insert(g.keep);
        surfaces[c] = Some(g.surface);
    }
    let keep = keep.ok_or("nothing gridded")?;
    let refs: [Option<&Raster>; 6] = std::array::from_fn(|c| surfaces[c].as_ref());
    let opts = TensorOptions {
        gz_reference: GzReference::MeanZero,
        upward_m: recipe.grid.upward_continuation_m,
        ..TensorOptions::default()
    };
    let t = full_tensor(&refs, &opts).map_err(|e| format!("full tensor: {e}"))?;
    Ok(Grids {
        measured,
        tensor: std::array::from_fn(|c| blank(&t.components[c], &keep)),
        gz: blank(&t.gz, &keep),
        stage,
        line_spacing_m: spacing,
        cell_m: cell,
        blanking_m: blanking,
        cells: (spec.nx, spec.ny),
    })
}

/// Most nodes of a grid lattice a run makes. Minimum curvature's time grows faster than the nodes
/// where cells are fine against the line spacing (long empty stretches between lines converge
/// slowly): measured on two shared cores (release build), four 3 km lines 200 m apart gridded at
/// 5 m (210,000 nodes) took 14 s and 0.25 GB, at 3 m (584,000) 59 s and 0.51 GB, at 2 m
/// (1.31 million) 211 s and 1.15 GB (docs/recipe.md, "Limits"). The limit keeps that worst case
/// under about 50 s.
pub const MAX_GRID_NODES: usize = 500_000;

/// The recipe's cell and blanking distance, or their defaults from the line spacing, m.
pub fn cell_and_blanking(recipe: &Recipe, spacing: Option<f64>) -> (f64, f64) {
    (
        recipe.grid.cell_m.unwrap_or_else(|| default_cell(spacing)),
        recipe
            .grid
            .blanking_m
            .unwrap_or_else(|| default_blanking(spacing)),
    )
}

/// The lattice a run will grid, known before any processing.
#[derive(Clone, Copy, Debug)]
pub struct GridPlan {
    /// Median line spacing, m (None: not found).
    pub spacing_m: Option<f64>,
    pub cell_m: f64,
    pub blanking_m: f64,
    /// Nodes eastwards and northwards.
    pub nx: usize,
    pub ny: usize,
    /// Nodes of the lattice over the lines alone, without the blanking distance around them.
    pub line_nodes: usize,
}

impl GridPlan {
    pub fn nodes(&self) -> usize {
        self.nx.saturating_mul(self.ny)
    }
}

/// The lattice of the survey whose lines run along `tracks` (each line's positions, easting and
/// northing, m): the same cell, blanking and extent [`grid_survey`] takes, from the line positions
/// alone (the gridded samples are a subset: the lattice is at most this large). `None` without a
/// finite position.
pub fn plan_grid(recipe: &Recipe, tracks: &[Vec<(f64, f64)>]) -> Option<GridPlan> {
    let spacing = line_spacing(tracks);
    let (cell, blanking) = cell_and_blanking(recipe, spacing);
    let mut b = [
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
    ];
    for &(x, y) in tracks.iter().flatten() {
        if x.is_finite() && y.is_finite() {
            b = [b[0].min(x), b[1].max(x), b[2].min(y), b[3].max(y)];
        }
    }
    let corners = [(b[0], b[2], 0.0), (b[1], b[3], 0.0)];
    let spec = GridSpec::covering(&corners, cell, blanking)?;
    let bare = GridSpec::covering(&corners, cell, 0.0)?;
    Some(GridPlan {
        spacing_m: spacing,
        cell_m: cell,
        blanking_m: blanking,
        nx: spec.nx,
        ny: spec.ny,
        line_nodes: bare.nx.saturating_mul(bare.ny),
    })
}

impl Grids {
    /// A grid by its product name: `g??` (the full tensor), `measured_g??` (a measured component
    /// gridded on its own; `None` when not observed) or `gz`.
    pub fn by_name(&self, name: &str) -> Option<&Raster> {
        if name == "gz" {
            return Some(&self.gz);
        }
        if let Some(c) = name.strip_prefix("measured_") {
            let k = NAMES.iter().position(|n| *n == c)?;
            return self.measured[k].as_ref();
        }
        let k = NAMES.iter().position(|n| *n == name)?;
        Some(&self.tensor[k])
    }

    /// The cell, lattice and blanking used, and the line spacing they followed, for the log.
    pub fn settings(&self) -> String {
        let spacing = self
            .line_spacing_m
            .map_or("line spacing not found".to_string(), |s| {
                format!("line spacing {s:.0} m")
            });
        format!(
            "{} m cells, {} × {}, blanking {:.0} m; {spacing}",
            self.cell_m, self.cells.0, self.cells.1, self.blanking_m
        )
    }
}
