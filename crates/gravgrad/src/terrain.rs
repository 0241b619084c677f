//! `gravgrad terrain DEM (--points FILE | --height M | --clearance M) --out FILE`: the terrain's
//! gradient tensor at given points or on a surface over the DEM, from the fast engine (or the exact
//! prism sum with `--exact`). Tensors in Eötvös in the DEM's map frame: x grid north, y grid east,
//! z down; positions in metres of that frame, heights above the ellipsoid.
//!
//! With `--points`, only the DEM window the points need is read: their extent plus `--margin`,
//! checked against the DEM's extent from its header before any cell is decoded (the same check
//! and wording as a run's, `gravgrad_ingest::dem::read_window`), holes filled as a run fills them.
//!
//! With `--height` or `--clearance` every `--step`-th cell centre is a point (`surface.rs`): of the
//! whole DEM, or, with `--extent`, of the cells inside that rectangle, the DEM then read over it
//! plus `--margin` as for `--points`. What the command will hold — the DEM cells read and their
//! terrain model, `gravgrad_ingest::dem::DEM_BYTES_PER_CELL` bytes a cell, and one batch of
//! `surface::BATCH_ROWS` output rows — is stated from the header before any cell is decoded and
//! refused past `gravgrad_ingest::dem::MAX_DEM_WINDOW_CELLS` cells (as a run's window is), naming
//! the flag, the size and what to change; the output rows are written a batch at a time as they
//! are computed, never all held.
//!
//! Either way the work is stated and bounded before the DEM is read: at most
//! [`MAX_TERRAIN_POINTS`] points for the fast engine, and at most [`MAX_EXACT_PRISM_SUMS`] cells ×
//! points with `--exact` (each about a minute on two cores; `docs/reliability.md`).

mod surface;

use gravgrad_core::limits::MAX_TEXT_FILE_BYTES;
use gravgrad_core::raster::Raster;
use gravgrad_core::units::EOTVOS;
use gravgrad_core::{Location, Problem, SymTensor};
use gravgrad_ingest::dem::{WindowKeys, read_dem_header, read_window, window_of};
use gravgrad_products::tables::{WriteError, write_f64_batches};
use gravgrad_reduce::terrain::{TerrainModel, TerrainSettings};
use gravgrad_survey::RunError;
use std::path::{Path, PathBuf};

/// Most points one command evaluates with the fast engine: 200,000, about 50 s at the 0.24 ms a
/// point measured on two cores at the default accuracy (`docs/performance.md`).
pub const MAX_TERRAIN_POINTS: usize = 200_000;

/// Most prism sums (DEM cells read × points) one command makes with `--exact`: 3 × 10⁸, about
/// 55 s at the 0.18 µs a sum measured on two shared cores (`docs/reliability.md`).
pub const MAX_EXACT_PRISM_SUMS: u64 = 300_000_000;

/// Columns of the output table.
const COLUMNS: [&str; 9] = [
    "easting", "northing", "height", "gxx", "gxy", "gxz", "gyy", "gyz", "gzz",
];

/// The comment line of a CSV output.
const CSV_COMMENT: &str =
    "gravgrad terrain effect: E, map frame (x grid north, y grid east, z down)";

/// What `gravgrad terrain` is asked for; each field is the command-line option of its name, which
/// the messages name. Exactly one of `points`, `height`, `clearance` is given.
#[derive(Clone, Debug)]
pub struct TerrainRequest {
    /// Terrain model: GeoTIFF, or NetCDF-CF (.nc), in a projected frame (metres).
    pub dem: PathBuf,
    /// CSV of points with columns `easting`, `northing`, `height` (m, the DEM's frame, heights
    /// above the ellipsoid).
    pub points: Option<PathBuf>,
    /// Evaluate at every DEM cell centre (see --step) at this height above the ellipsoid, m.
    pub height: Option<f64>,
    /// Evaluate at every DEM cell centre (see --step) this far above the DEM, m.
    pub clearance: Option<f64>,
    /// With --height or --clearance: every N-th cell in each direction.
    pub step: usize,
    /// With --height or --clearance: only the cells whose centres lie in this rectangle (m, the
    /// DEM's frame); the DEM is then read over it plus --margin only.
    pub extent: Option<Vec<f64>>,
    /// Terrain density, kg/m³.
    pub density: f64,
    /// Water density for cells below sea level, kg/m³ (default: none).
    pub water_density: Option<f64>,
    /// With --points or --extent: the DEM is read over the points' extent (or --extent) plus this
    /// distance on every side, m (the mass farther away is left out).
    pub margin: f64,
    /// Reference level of the terrain mass, m above the ellipsoid (default: the mean of the DEM
    /// cells read).
    pub reference: Option<f64>,
    /// Target accuracy of the fast engine, E.
    pub accuracy: f64,
    /// Sum every cell as an exact prism (slow).
    pub exact: bool,
    /// Output table: `.parquet` or `.csv`.
    pub out: PathBuf,
}

impl Default for TerrainRequest {
    /// The command's defaults: step 1, 2670 kg/m³, no water, a 5 km margin, the mean reference
    /// level, 0.1 E, the fast engine; no DEM, points or output named yet.
    fn default() -> Self {
        Self {
            dem: PathBuf::new(),
            points: None,
            height: None,
            clearance: None,
            step: 1,
            extent: None,
            density: 2670.0,
            water_density: None,
            margin: 5000.0,
            reference: None,
            accuracy: 0.1,
            exact: false,
            out: PathBuf::new(),
        }
    }
}

/// Reads `easting,northing,height` from a CSV file (other columns ignored; `#` lines skipped).
fn read_points(path: &Path) -> Result<Vec<[f64; 3]>, String> {
    let text = gravgrad_ingest::input_file::read_text(path, MAX_TEXT_FILE_BYTES)
        .map_err(|p| format!("{}: {}", path.display(), p.message))?;
    let mut rows = text
        .lines()
        .enumerate()
        .filter(|(_, l)| !l.starts_with('#') && !l.trim().is_empty());
    let (_, head) = rows.next().ok_or_else(|| {
        format!(
            "{}: empty; expected a header with easting,northing,height",
            path.display()
        )
    })?;
    let names: Vec<&str> = head
        .trim_start_matches('\u{feff}')
        .split(',')
        .map(str::trim)
        .collect();
    let idx = |n: &str| {
        names.iter().position(|h| *h == n).ok_or_else(|| {
            format!(
                "{}: row 1: no column `{n}`; expected easting, northing, height",
                path.display()
            )
        })
    };
    let cols = [idx("easting")?, idx("northing")?, idx("height")?];
    let mut out = Vec::new();
    for (line, row) in rows {
        let cells: Vec<&str> = row.split(',').map(str::trim).collect();
        let mut p = [0.0; 3];
        for (k, &c) in cols.iter().enumerate() {
            let name = names[c];
            let cell = cells.get(c).ok_or_else(|| {
                format!(
                    "{}: row {}, column `{name}`: missing",
                    path.display(),
                    line + 1
                )
            })?;
            p[k] = cell
                .parse::<f64>()
                .ok()
                .filter(|v| v.is_finite())
                .ok_or_else(|| {
                    format!(
                        "{}: row {}, column `{name}`: `{cell}` is not a finite number",
                        path.display(),
                        line + 1
                    )
                })?;
        }
        out.push(p);
    }
    Ok(out)
}

/// The terrain's tensor at the points or on the surface `args` asks for, written to `args.out`.
///
/// ```
/// # fn main() -> Result<(), Box<dyn std::error::Error>> {
/// use gravgrad::Raster;
/// use gravgrad::terrain::{TerrainRequest, terrain};
/// let dir = tempfile::tempdir()?;
/// // A DEM of 20 × 20 cells of 50 m in UTM zone 53S: a 30 m step up to the east.
/// let values = (0..400).map(|k| if k % 20 >= 10 { 130.0 } else { 100.0 }).collect();
/// let dem = Raster::new(20, 20, (500_000.0, 7_000_000.0), (50.0, 50.0), values)?
///     .with_epsg(32753);
/// let dem_path = dir.path().join("dem.tif");
/// gravgrad_grid::geotiff::write_geotiff(&dem, &dem_path, &Default::default())?;
/// let points = dir.path().join("points.csv");
/// std::fs::write(&points, "easting,northing,height\n500500,6999500,250\n")?;
/// let request = TerrainRequest {
///     dem: dem_path,
///     points: Some(points),
///     exact: true,
///     margin: 400.0,
///     out: dir.path().join("terrain.csv"),
///     ..Default::default()
/// };
/// terrain(&request)?;
/// let table = std::fs::read_to_string(&request.out)?;
/// assert_eq!(table.lines().filter(|l| l.starts_with("500500")).count(), 1);
/// # Ok(())
/// # }
/// ```
pub fn terrain(args: &TerrainRequest) -> Result<(), RunError> {
    if !(args.margin.is_finite() && args.margin >= 0.0) {
        return Err(RunError::Refused(format!(
            "--margin {}: expected a distance of 0 m or more",
            args.margin
        )));
    }
    let Some(points_file) = args.points.as_deref() else {
        return surface::run(args);
    };
    let points = match read_points(points_file) {
        Ok(v) if v.is_empty() => {
            return Err(RunError::Refused(format!(
                "{}: no points; expected rows of easting,northing,height",
                points_file.display()
            )));
        }
        Ok(v) => v,
        Err(e) => return Err(RunError::Refused(e)),
    };
    let header = match read_dem_header(&args.dem, None) {
        Ok(h) => h,
        Err(ps) => return Err(refuse(ps)),
    };
    let need = points.iter().fold(
        [
            f64::INFINITY,
            f64::NEG_INFINITY,
            f64::INFINITY,
            f64::NEG_INFINITY,
        ],
        |e, p| {
            [
                e[0].min(p[0] - args.margin),
                e[1].max(p[0] + args.margin),
                e[2].min(p[1] - args.margin),
                e[3].max(p[1] + args.margin),
            ]
        },
    );
    let cells = window_of(&header, need).cells();
    if let Err(p) = check_work(args, "--points", points.len(), cells, None) {
        return Err(refuse(vec![p]));
    }
    let keys = WindowKeys {
        dem: Location::file(&args.dem),
        margin: Location::file(&args.dem),
        margin_name: "`--margin`".into(),
    };
    let raster = match read_window(&args.dem, None, &header, need, &keys) {
        Ok(w) => {
            for p in &w.warnings {
                tracing::info!("{p}");
            }
            w.raster
        }
        Err(ps) => return Err(refuse(ps)),
    };
    let model = build_model(args, &raster)?;
    tracing::info!(
        "{} points, {} × {} cells, reference level {:.2} m{}",
        points.len(),
        raster.nx,
        raster.ny,
        model.reference_m(),
        if args.exact { ", exact sum" } else { "" }
    );
    if !model.covers(&points, 0.0).covered {
        tracing::info!(
            "warning: some points lie outside the DEM; their terrain effect lacks the mass beyond its edges"
        );
    }
    let mut batch = Some(points);
    let written = write_table(&args.out, || {
        Ok(batch.take().map(|p| {
            let t = evaluate(&model, &p, args.exact);
            table_columns(&p, &t)
        }))
    });
    finish(written, &args.out)
}

/// `problems` as the error of bad input.
fn refuse(problems: Vec<Problem>) -> RunError {
    RunError::Input(problems)
}

/// Refuses, before the DEM is read, work past the stated limits: `points` points for the fast
/// engine (at most [`MAX_TERRAIN_POINTS`]), or `points` × `cells` prism sums with `--exact` (at
/// most [`MAX_EXACT_PRISM_SUMS`]). `flag` is the option that made the points; `fewer` says how
/// to make fewer, when there is a way.
fn check_work(
    args: &TerrainRequest,
    flag: &str,
    points: usize,
    cells: u64,
    fewer: Option<String>,
) -> Result<(), Problem> {
    let fewer = fewer.unwrap_or_else(|| format!("give fewer points in {flag}"));
    if args.exact {
        let sums = (points as u64).saturating_mul(cells);
        if sums > MAX_EXACT_PRISM_SUMS {
            return Err(Problem::error(
                Location::file(&args.dem),
                format!(
                    "{flag} with --exact: {points} points × {cells} DEM cells = {sums} prism sums, \
                     more than the {MAX_EXACT_PRISM_SUMS} one command makes (about 0.18 µs \
                     each on two cores)"
                ),
            )
            .with_hint(format!("{fewer}, or leave out --exact (the fast engine)")));
        }
    } else if points > MAX_TERRAIN_POINTS {
        return Err(Problem::error(
            Location::file(&args.dem),
            format!(
                "{flag}: {points} points, more than the {MAX_TERRAIN_POINTS} one command \
                 evaluates (about {:.0} s at 0.24 ms a point on two cores)",
                points as f64 * 0.24e-3
            ),
        )
        .with_hint(fewer));
    }
    Ok(())
}

/// The terrain model of `raster` under the command's settings.
fn build_model(args: &TerrainRequest, raster: &Raster) -> Result<TerrainModel, RunError> {
    let settings = TerrainSettings {
        density_kg_m3: args.density,
        water_density_kg_m3: args.water_density,
        reference_m: args.reference,
        accuracy_e: args.accuracy,
    };
    TerrainModel::new(raster, &settings)
        .map_err(|e| RunError::Refused(format!("{}: {e}", args.dem.display())))
}

/// The tensor at `points` (easting, northing, height; m), s⁻², map frame NED.
fn evaluate(model: &TerrainModel, points: &[[f64; 3]], exact: bool) -> Vec<SymTensor> {
    if exact {
        model.tensor_exact(points)
    } else {
        model.tensor(points)
    }
}

/// The output columns ([`COLUMNS`]) of `points` and their tensors `t` (s⁻²): positions in m,
/// components in E.
fn table_columns(points: &[[f64; 3]], t: &[SymTensor]) -> Vec<Vec<f64>> {
    let mut cols: Vec<Vec<f64>> = (0..3)
        .map(|k| points.iter().map(|p| p[k]).collect())
        .collect();
    let arrays: Vec<[f64; 6]> = t.iter().map(|x| x.to_array()).collect();
    cols.extend((0..6).map(|c| arrays.iter().map(|a| a[c] / EOTVOS).collect()));
    cols
}

/// Writes the output table batch by batch (CSV by the `.csv` extension, else Parquet).
fn write_table(
    out: &Path,
    next: impl FnMut() -> Result<Option<Vec<Vec<f64>>>, String>,
) -> Result<(), WriteError> {
    let is_csv = out
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("csv"));
    write_f64_batches(out, is_csv.then_some(CSV_COMMENT), &COLUMNS, next)
}

/// A written (or failed) output table, logged.
fn finish(written: Result<(), WriteError>, out: &Path) -> Result<(), RunError> {
    written.map_err(|e| RunError::Failed(e.to_string()))?;
    tracing::info!("written to {}", out.display());
    Ok(())
}
