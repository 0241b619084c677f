//! Terrain models (DEMs) by file type: NetCDF-CF (`.nc`, `.nc4`, `.cdf`, `.netcdf`) through
//! `gravgrad-netcdf`, anything else as GeoTIFF. Both give the same north-up [`Raster`] of heights in
//! metres (docs/formats.md, section 4).
//!
//! A run reads only the window it needs (survey plus `terrain.margin_m`): [`read_dem_header`] gives
//! where the DEM lies before any cell is decoded, and [`read_window`] checks that the DEM covers the
//! window and that the window is not too big, decodes only the window's cells
//! ([`read_dem_block`]), refuses implausible elevations and fills holes (docs/recipe.md, "Limits").
//! [`prepare_window`] does the same for a DEM already in memory.

use crate::geotiff_reader::{read_geotiff, read_geotiff_block, read_geotiff_header};
use crate::recipe::{MAX_ELEVATION_M, MIN_ELEVATION_M};
use gravgrad_core::raster::Raster;
use gravgrad_core::{Location, Problem};
pub use gravgrad_netcdf::{CellBlock, GridHeader};
use std::path::Path;

/// Whether `path` names a NetCDF file by its extension.
pub fn is_netcdf(path: &Path) -> bool {
    path.extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase)
        .is_some_and(|e| matches!(e.as_str(), "nc" | "nc4" | "cdf" | "netcdf"))
}

/// Reads a whole DEM (at most `gravgrad_core::limits::MAX_GRID_CELLS` cells); `variable` names the
/// elevation variable of a NetCDF file (default: found).
pub fn read_dem(path: &Path, variable: Option<&str>) -> Result<Raster, Vec<Problem>> {
    if is_netcdf(path) {
        gravgrad_netcdf::read_dem(path, variable)
    } else {
        read_geotiff(path)
    }
}

/// Where a DEM lies (its grid, frame and no-data value), read from its header before any cell is
/// decoded; `variable` as for [`read_dem`].
pub fn read_dem_header(path: &Path, variable: Option<&str>) -> Result<GridHeader, Vec<Problem>> {
    if is_netcdf(path) {
        gravgrad_netcdf::dem_header(path, variable)
    } else {
        read_geotiff_header(path)
    }
}

/// The cells `block` of a DEM (the north-up grid of [`read_dem_header`]), decoding only the strips,
/// tiles or rows that meet it; the raster's corner is the block's.
pub fn read_dem_block(
    path: &Path,
    variable: Option<&str>,
    block: CellBlock,
) -> Result<Raster, Vec<Problem>> {
    if is_netcdf(path) {
        gravgrad_netcdf::read_dem_block(path, variable, block)
    } else {
        read_geotiff_block(path, block)
    }
}

/// Most cells of the DEM window a run builds its terrain model over (survey extent plus
/// `terrain.margin_m`): the window's elevations and the engine's block pyramid take about
/// [`DEM_BYTES_PER_CELL`] bytes a cell, so the limit holds the terrain stage near 1 GB.
pub const MAX_DEM_WINDOW_CELLS: usize = 10_000_000;
/// Memory of the terrain stage per DEM window cell, bytes: the window's elevations (8), the
/// engine's grid copy (8) and its pyramid of blocks (1/4 + 1/16 + … = 1/3 block a cell at 144
/// bytes a block, the size of `gravgrad_reduce::terrain::pyramid::Block`): 64, rounded up.
pub const DEM_BYTES_PER_CELL: usize = 80;
/// Largest share of the window's cells that may be holes (no data) and still be filled.
pub const MAX_HOLE_FRACTION: f64 = 0.05;
/// Values that mark a missing cell in common elevation products even when the file does not
/// declare them as its no-data value.
pub const NODATA_SENTINELS: [f64; 2] = [-9999.0, -32768.0];
/// How many cells a warning or error names before it only counts the rest.
const NAMED_CELLS: usize = 5;

/// A rectangle of the survey's map frame: west, east, south, north edges, m.
pub type Extent = [f64; 4];

/// The DEM window a run's terrain model is built from: holes filled, every value a plausible
/// elevation (m above the ellipsoid), no no-data value left.
#[derive(Clone, Debug)]
pub struct DemWindow {
    pub raster: Raster,
    /// Cells of the window that were holes and were filled.
    pub filled: usize,
    /// What was done to the DEM (holes filled, sentinels taken as holes), for the user.
    pub warnings: Vec<Problem>,
}

/// Where a window's problems are reported: `dem` for the coverage, `margin` (called
/// `margin_name` in hints) for the window's size.
#[derive(Clone, Debug)]
pub struct WindowKeys {
    pub dem: Location,
    pub margin: Location,
    pub margin_name: String,
}

impl WindowKeys {
    /// A run's: the recipe key `key` (`terrain.dem`) and `terrain.margin_m` in the same file.
    pub fn recipe(key: &Location) -> Self {
        Self {
            dem: key.clone(),
            margin: key.clone().with_key("terrain.margin_m"),
            margin_name: "`terrain.margin_m`".into(),
        }
    }
}

/// The grid of a raster already in memory.
fn header_of(r: &Raster) -> GridHeader {
    GridHeader {
        nx: r.nx,
        ny: r.ny,
        x_min: r.x_min,
        y_max: r.y_max,
        dx: r.dx,
        dy: r.dy,
        epsg: r.epsg,
        nodata: r.nodata,
    }
}

/// Whether `v` is the grid's no-data value (any NaN when that is NaN).
fn is_missing(h: &GridHeader, v: f64) -> bool {
    match h.nodata {
        Some(nd) if nd.is_nan() => v.is_nan(),
        Some(nd) => v == nd,
        None => false,
    }
}

/// A cell of the DEM file: (column eastwards, row southwards), counted from 0 at the north-west.
fn cell_name(dem: &GridHeader, col: usize, row: usize) -> String {
    let (x, y) = dem.cell_centre(col, row);
    format!("row {row}, column {col} (centre {x:.1}, {y:.1})")
}

fn name_cells(dem: &GridHeader, cells: &[(usize, usize)], total: usize) -> String {
    let mut s: Vec<String> = cells
        .iter()
        .take(NAMED_CELLS)
        .map(|&(c, r)| cell_name(dem, c, r))
        .collect();
    if total > NAMED_CELLS {
        s.push(format!("and {} more", total - NAMED_CELLS));
    }
    s.join("; ")
}

/// Cuts the window `need` (the survey's extent widened by the margin; the DEM's frame, m) out of
/// `dem`, held in memory, and makes it fit to use as [`read_window`] does; `key` is the recipe key
/// of the DEM (`terrain.dem`), and the window's size is blamed on `terrain.margin_m`.
pub fn prepare_window(
    dem: &Raster,
    need: Extent,
    path: &Path,
    key: &Location,
) -> Result<DemWindow, Vec<Problem>> {
    prepare(&header_of(dem), need, path, &WindowKeys::recipe(key), |b| {
        Ok(copy_block(dem, b))
    })
}

/// Reads the window `need` (the survey's extent widened by the margin; the DEM's frame, m) of the
/// DEM at `path`, whose header `header` was read by [`read_dem_header`], and makes it fit to use:
///
/// - the DEM must cover `need` to within one cell on every side, else an error naming the DEM's
///   extent and the one needed (at `keys.dem`);
/// - the window (the cells `need` touches, plus one cell on every side where the DEM has it) may
///   hold at most [`MAX_DEM_WINDOW_CELLS`] cells, else an error at `keys.margin` naming the size
///   needed; both are checked before any cell is decoded, and only the window's cells are;
/// - an elevation outside [`MIN_ELEVATION_M`] to [`MAX_ELEVATION_M`] (or infinite) is an error
///   naming its cells;
/// - holes — the file's no-data value, NaN, or an undeclared [`NODATA_SENTINELS`] value — are
///   filled by inverse-distance weighting of the nearest valid cell in each of the eight
///   directions (weights 1/d²) with a warning naming them, or refused when they are more than
///   [`MAX_HOLE_FRACTION`] of the window.
///
/// `variable` names a NetCDF file's elevation variable (default: found).
pub fn read_window(
    path: &Path,
    variable: Option<&str>,
    header: &GridHeader,
    need: Extent,
    keys: &WindowKeys,
) -> Result<DemWindow, Vec<Problem>> {
    prepare(header, need, path, keys, |b| {
        read_dem_block(path, variable, b).map_err(|p| {
            let mut out = vec![Problem::error(
                keys.dem.clone(),
                format!("the terrain model {} cannot be used", path.display()),
            )];
            out.extend(p);
            out
        })
    })
}

/// The steps of [`read_window`], the cells got by `cells`.
fn prepare(
    header: &GridHeader,
    need: Extent,
    path: &Path,
    keys: &WindowKeys,
    cells: impl FnOnce(CellBlock) -> Result<Raster, Vec<Problem>>,
) -> Result<DemWindow, Vec<Problem>> {
    check_coverage(header, need, path, keys)?;
    let block = window_block(header, need, keys)?;
    let mut window = cells(block)?;
    if (window.nx, window.ny) != (block.nx, block.ny) {
        return Err(vec![Problem::error(
            Location::file(path),
            format!(
                "the window read is {} × {} cells, {} × {} were asked for",
                window.nx, window.ny, block.nx, block.ny
            ),
        )]);
    }
    let at = (block.col0, block.row0);
    let (holes, mut warnings) = screen_cells(header, &window, at, path)?;
    fill_or_refuse(header, &mut window, &holes, at, path, &mut warnings)?;
    window.nodata = None;
    Ok(DemWindow {
        raster: window,
        filled: holes.len(),
        warnings,
    })
}

/// Refuses a survey without a finite position, and a DEM that misses the survey plus the margin
/// (`need`: x_min, x_max, y_min, y_max in the DEM's map frame, m) by more than one cell, at `keys.dem`.
fn check_coverage(
    dem: &GridHeader,
    need: Extent,
    path: &Path,
    keys: &WindowKeys,
) -> Result<(), Vec<Problem>> {
    let at = |msg: String| Problem::error(keys.dem.clone(), msg);
    let have = dem.extent();
    let short = [
        have[0] - need[0],
        need[1] - have[1],
        have[2] - need[2],
        need[3] - have[3],
    ];
    let tol = [dem.dx, dem.dx, dem.dy, dem.dy];
    if !need.iter().all(|v| v.is_finite()) {
        return Err(vec![at(
            "the survey has no finite position to cut the terrain model for".into(),
        )]);
    }
    if short.iter().zip(tol).any(|(s, t)| *s > t) {
        let sides: Vec<String> = ["west", "east", "south", "north"]
            .iter()
            .zip(short)
            .filter(|(_, s)| *s > 0.0)
            .map(|(n, s)| format!("{s:.0} m {n}"))
            .collect();
        return Err(vec![
            at(format!(
                "the terrain model {} spans x {:.0} to {:.0}, y {:.0} to {:.0} m, but the survey plus \
                 the margin needs x {:.0} to {:.0}, y {:.0} to {:.0} m: short by {}",
                path.display(),
                have[0],
                have[1],
                have[2],
                have[3],
                need[0],
                need[1],
                need[2],
                need[3],
                sides.join(", ")
            ))
            .with_hint(format!(
                "give a terrain model that covers the survey plus {}, or lower the margin knowing \
                 the terrain effect near the edges is then incomplete",
                keys.margin_name
            )),
        ]);
    }
    Ok(())
}

/// The DEM's cells the window `need` (west, east, south, north; the DEM's frame, m) touches, one
/// more on each side, clipped to the DEM, at least one cell: the block [`read_window`] reads,
/// known from the header alone.
pub fn window_of(dem: &GridHeader, need: Extent) -> CellBlock {
    let col = |x: f64| ((x - dem.x_min) / dem.dx).clamp(0.0, dem.nx as f64);
    let row = |y: f64| ((dem.y_max - y) / dem.dy).clamp(0.0, dem.ny as f64);
    let c0 = (col(need[0]).floor() as usize).saturating_sub(1);
    let c1 = (col(need[1]).ceil() as usize + 1).min(dem.nx);
    let r0 = (row(need[3]).floor() as usize).saturating_sub(1);
    let r1 = (row(need[2]).ceil() as usize + 1).min(dem.ny);
    // At least one cell, inside the DEM.
    let (c0, r0) = (
        c0.min(dem.nx.saturating_sub(1)),
        r0.min(dem.ny.saturating_sub(1)),
    );
    let (nx, ny) = (c1.saturating_sub(c0).max(1), r1.saturating_sub(r0).max(1));
    CellBlock {
        col0: c0,
        row0: r0,
        nx,
        ny,
    }
}

/// [`window_of`], refused past [`MAX_DEM_WINDOW_CELLS`] at `keys.margin`.
fn window_block(
    dem: &GridHeader,
    need: Extent,
    keys: &WindowKeys,
) -> Result<CellBlock, Vec<Problem>> {
    let block = window_of(dem, need);
    let (nx, ny) = (block.nx, block.ny);
    let cells = nx.saturating_mul(ny);
    if cells > MAX_DEM_WINDOW_CELLS {
        return Err(vec![
            Problem::error(
                keys.margin.clone(),
                format!(
                    "the terrain model's window over the survey plus the margin is {nx} × {ny} = \
                     {cells} cells of {} × {} m (about {:.1} GB for the terrain stage); the limit \
                     is {MAX_DEM_WINDOW_CELLS} cells",
                    dem.dx,
                    dem.dy,
                    (cells as f64 * DEM_BYTES_PER_CELL as f64) / 1e9
                ),
            )
            .with_hint(format!(
                "resample the terrain model to coarser cells, or lower {}",
                keys.margin_name
            )),
        ]);
    }
    Ok(block)
}

/// The cells `b` of a raster in memory (inside it: [`window_block`] clips to the grid).
fn copy_block(dem: &Raster, b: CellBlock) -> Raster {
    let mut values = Vec::with_capacity(b.nx * b.ny);
    for r in b.row0..b.row0 + b.ny {
        values.extend_from_slice(&dem.values[r * dem.nx + b.col0..r * dem.nx + b.col0 + b.nx]);
    }
    Raster {
        nx: b.nx,
        ny: b.ny,
        x_min: dem.x_min + b.col0 as f64 * dem.dx,
        y_max: dem.y_max - b.row0 as f64 * dem.dy,
        dx: dem.dx,
        dy: dem.dy,
        epsg: dem.epsg,
        nodata: dem.nodata,
        values,
    }
}

/// Sorts the window's cells: holes (no-data, NaN, or an undeclared sentinel, with a warning naming
/// those) as indices into the window, and implausible elevations, refused with their cells (named
/// by their place in the DEM file; `(c0, r0)` the window's first cell there).
fn screen_cells(
    dem: &GridHeader,
    window: &Raster,
    (c0, r0): (usize, usize),
    path: &Path,
) -> Result<(Vec<usize>, Vec<Problem>), Vec<Problem>> {
    let nx = window.nx;
    // Holes and implausible cells, named by their place in the DEM file.
    let mut holes = Vec::new();
    let mut sentinels = Vec::new();
    let mut wrong = Vec::new();
    let mut wrong_first = None;
    for (k, v) in window.values.iter().enumerate() {
        let (c, r) = (k % nx, k / nx);
        if is_missing(dem, *v) || v.is_nan() {
            holes.push(k);
        } else if NODATA_SENTINELS.contains(v) {
            holes.push(k);
            sentinels.push((c + c0, r + r0));
        } else if !(MIN_ELEVATION_M..=MAX_ELEVATION_M).contains(v) {
            wrong_first.get_or_insert(*v);
            wrong.push((c + c0, r + r0));
        }
    }
    if !wrong.is_empty() {
        return Err(vec![
            Problem::error(
                Location::file(path),
                format!(
                    "{} cells hold elevations outside the plausible {MIN_ELEVATION_M} to \
                     {MAX_ELEVATION_M} m (the first {:e} m): {}",
                    wrong.len(),
                    wrong_first.unwrap_or(f64::NAN),
                    name_cells(dem, &wrong, wrong.len())
                ),
            )
            .with_hint(
                "the terrain model must hold heights in metres; mark missing cells as no data",
            ),
        ]);
    }
    let mut warnings = Vec::new();
    if !sentinels.is_empty() {
        warnings.push(Problem::warning(
            Location::file(path),
            format!(
                "{} cells hold {} without the file declaring it as its no-data value; they are taken \
                 as holes: {}",
                sentinels.len(),
                NODATA_SENTINELS
                    .iter()
                    .map(|v| v.to_string())
                    .collect::<Vec<_>>()
                    .join(" or "),
                name_cells(dem, &sentinels, sentinels.len())
            ),
        ));
    }
    Ok((holes, warnings))
}

/// Fills the window's `holes` with a warning naming them, or refuses the DEM when they are more than
/// [`MAX_HOLE_FRACTION`] of its cells.
fn fill_or_refuse(
    dem: &GridHeader,
    window: &mut Raster,
    holes: &[usize],
    (c0, r0): (usize, usize),
    path: &Path,
    warnings: &mut Vec<Problem>,
) -> Result<(), Vec<Problem>> {
    let (nx, cells) = (window.nx, window.values.len());
    if !holes.is_empty() {
        let share = holes.len() as f64 / cells as f64;
        let named: Vec<(usize, usize)> = holes
            .iter()
            .take(NAMED_CELLS)
            .map(|k| (k % nx + c0, k / nx + r0))
            .collect();
        if share > MAX_HOLE_FRACTION {
            return Err(vec![
                Problem::error(
                    Location::file(path),
                    format!(
                        "{} of the {cells} cells under the survey plus the margin ({:.1} %) have no \
                         elevation; at most {:.0} % are filled: {}",
                        holes.len(),
                        100.0 * share,
                        100.0 * MAX_HOLE_FRACTION,
                        name_cells(dem, &named, holes.len())
                    ),
                )
                .with_hint("fill the terrain model's holes, or give one without them"),
            ]);
        }
        fill_holes(window, holes);
        warnings.push(Problem::warning(
            Location::file(path),
            format!(
                "{} cells under the survey plus the margin have no elevation and were filled by \
                 inverse-distance weighting (1/d²) of the nearest valid cell in each of eight \
                 directions: {}",
                holes.len(),
                name_cells(dem, &named, holes.len())
            ),
        ));
    }
    Ok(())
}

/// Fills the cells `holes` (indices into `r.values`, which hold NaN or no-data there) from the
/// nearest valid cell in each of the eight directions (N, NE, E, …), weighted by 1/d² with d the
/// distance between cell centres in the raster's units; a hole from which no direction reaches a
/// valid cell takes the mean of the valid cells (NaN when there is none). Valid cells are never
/// changed, and every fill reads only the original valid cells, so the result does not depend on
/// the order.
pub fn fill_holes(r: &mut Raster, holes: &[usize]) {
    let (nx, ny) = (r.nx as i64, r.ny as i64);
    let mut is_hole = vec![false; r.values.len()];
    for &k in holes {
        is_hole[k] = true;
    }
    const DIRS: [(i64, i64); 8] = [
        (0, -1),
        (1, -1),
        (1, 0),
        (1, 1),
        (0, 1),
        (-1, 1),
        (-1, 0),
        (-1, -1),
    ];
    // A hole no direction reaches a valid cell from (only in a window of holes) takes the mean.
    let (total, count) = r
        .values
        .iter()
        .zip(&is_hole)
        .filter(|(_, h)| !**h)
        .fold((0.0, 0usize), |(s, n), (v, _)| (s + v, n + 1));
    let mean = if count > 0 {
        total / count as f64
    } else {
        f64::NAN
    };
    let filled: Vec<f64> = holes
        .iter()
        .map(|&k| {
            let (c, row) = ((k as i64) % nx, (k as i64) / nx);
            let (mut sum, mut wsum) = (0.0, 0.0);
            for (dc, dr) in DIRS {
                let (mut cc, mut rr, mut steps) = (c + dc, row + dr, 1.0);
                while cc >= 0 && cc < nx && rr >= 0 && rr < ny {
                    let j = (rr * nx + cc) as usize;
                    if !is_hole[j] {
                        let d2 = steps
                            * steps
                            * ((dc as f64 * r.dx).powi(2) + (dr as f64 * r.dy).powi(2));
                        sum += r.values[j] / d2;
                        wsum += 1.0 / d2;
                        break;
                    }
                    cc += dc;
                    rr += dr;
                    steps += 1.0;
                }
            }
            if wsum > 0.0 { sum / wsum } else { mean }
        })
        .collect();
    for (&k, v) in holes.iter().zip(filled) {
        r.values[k] = v;
    }
}
