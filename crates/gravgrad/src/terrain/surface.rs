//! `gravgrad terrain --height M | --clearance M`: the terrain tensor at every `--step`-th cell
//! centre of the DEM, or of the cells inside `--extent` (west, east, south, north; m, the DEM's
//! frame), at a height above the ellipsoid (`--height`) or above the DEM (`--clearance`; cells
//! without a height are skipped). Positions in metres of the DEM's frame; tensors in Eötvös, map
//! frame (x grid north, y grid east, z down).
//!
//! Before any cell is decoded the plan is made from the DEM's header alone: the cells read (the
//! whole DEM, or the `--extent` window plus `--margin`), the points, and the memory they need —
//! the DEM and its terrain model at [`DEM_BYTES_PER_CELL`] bytes a cell, plus one batch of
//! [`BATCH_ROWS`] output rows at [`OUTPUT_BYTES_PER_ROW`] — which is logged, and refused past
//! [`MAX_DEM_WINDOW_CELLS`] cells naming the flag, the size and what to change. Then the rows are
//! computed and written a batch at a time (a Parquet row group each), so the output is never held
//! whole.

use super::{
    TerrainRequest, build_model, check_work, evaluate, finish, refuse, table_columns, write_table,
};
use gravgrad_core::raster::Raster;
use gravgrad_core::{Location, Problem};
use gravgrad_ingest::dem::{
    CellBlock, DEM_BYTES_PER_CELL, Extent, GridHeader, MAX_DEM_WINDOW_CELLS, WindowKeys,
    read_dem_block, read_dem_header, read_window, window_of,
};
use gravgrad_reduce::terrain::TerrainModel;
use gravgrad_survey::RunError;

/// Output rows computed and written at a time: 131,072 (a Parquet row group, as every table of
/// ours has).
pub const BATCH_ROWS: usize = 131_072;

/// Memory of one output row while its batch is held, bytes: the point (24), its tensor (48), the
/// nine output columns (72) and the writer's copy of them before compression (72).
pub const OUTPUT_BYTES_PER_ROW: usize = 216;

/// What a surface run will read, evaluate and hold, from the DEM's header alone.
struct Plan {
    /// The DEM's cells read (the whole DEM, or the `--extent` window plus `--margin`).
    read: CellBlock,
    /// The cells evaluated, in the DEM's columns and rows (before `--step`).
    cols: std::ops::Range<usize>,
    rows: std::ops::Range<usize>,
    /// Points at most (cells without a height are skipped with `--clearance`).
    points: usize,
}

/// How many of `n` cells from the first every `step`-th takes.
fn stepped(n: usize, step: usize) -> usize {
    n.div_ceil(step)
}

/// The flag that asked for a surface: `--height` or `--clearance`.
fn flag(args: &TerrainRequest) -> &'static str {
    if args.height.is_some() {
        "--height"
    } else {
        "--clearance"
    }
}

/// `--extent` checked: four finite numbers, west < east, south < north.
fn extent(args: &TerrainRequest) -> Result<Option<Extent>, String> {
    let Some(v) = &args.extent else {
        return Ok(None);
    };
    match v.as_slice() {
        [w, e, s, n] if v.iter().all(|x| x.is_finite()) && w < e && s < n => {
            Ok(Some([*w, *e, *s, *n]))
        }
        _ => Err(format!(
            "--extent {}: expected WEST,EAST,SOUTH,NORTH in metres of the DEM's frame, west \
             below east and south below north",
            v.iter()
                .map(|x| x.to_string())
                .collect::<Vec<_>>()
                .join(",")
        )),
    }
}

/// The plan of a surface run over the DEM of header `h`, or why there is nothing to evaluate.
fn plan(args: &TerrainRequest, h: &GridHeader, ext: Option<Extent>) -> Result<Plan, Problem> {
    let step = args.step.max(1);
    let Some([w, e, s, n]) = ext else {
        return Ok(Plan {
            read: h.whole(),
            cols: 0..h.nx,
            rows: 0..h.ny,
            points: stepped(h.nx, step).saturating_mul(stepped(h.ny, step)),
        });
    };
    let m = args.margin;
    let read = window_of(h, [w - m, e + m, s - m, n + m]);
    // Cells whose centres lie inside the extent: x_min + (c + ½)·dx in [w, e], and likewise rows.
    let first = |lo: f64, d: f64| ((lo / d - 0.5).ceil().max(0.0)) as usize;
    let end = |hi: f64, d: f64, count: usize| {
        let last = (hi / d - 0.5).floor();
        if last < 0.0 {
            0
        } else {
            (last as usize).saturating_add(1).min(count)
        }
    };
    let cols = first(w - h.x_min, h.dx).max(read.col0)
        ..end(e - h.x_min, h.dx, h.nx).min(read.col0 + read.nx);
    let rows = first(h.y_max - n, h.dy).max(read.row0)
        ..end(h.y_max - s, h.dy, h.ny).min(read.row0 + read.ny);
    if cols.is_empty() || rows.is_empty() {
        let [x0, x1, y0, y1] = h.extent();
        return Err(Problem::error(
            Location::file(&args.dem),
            format!(
                "--extent {w},{e},{s},{n}: no cell centre of the terrain model lies inside it; \
                 the model spans x {x0:.0} to {x1:.0}, y {y0:.0} to {y1:.0} m"
            ),
        ));
    }
    let points = stepped(cols.len(), step).saturating_mul(stepped(rows.len(), step));
    Ok(Plan {
        read,
        cols,
        rows,
        points,
    })
}

/// Memory the plan needs, bytes: the DEM cells read and their terrain model, and one batch of
/// output rows.
fn memory(p: &Plan) -> (u64, u64) {
    let model = p.read.cells().saturating_mul(DEM_BYTES_PER_CELL as u64);
    let batch = (p.points.min(BATCH_ROWS) * OUTPUT_BYTES_PER_ROW) as u64;
    (model, batch)
}

/// Refuses a plan whose DEM cells read are past [`MAX_DEM_WINDOW_CELLS`]: the flag, the size it
/// would need and what to change.
fn check_memory(
    args: &TerrainRequest,
    p: &Plan,
    (model, batch): (u64, u64),
) -> Result<(), Problem> {
    let cells = p.read.cells();
    if cells <= MAX_DEM_WINDOW_CELLS as u64 {
        return Ok(());
    }
    let mb = |b: u64| b as f64 / 1e6;
    let what = if args.extent.is_some() {
        "the cells of --extent plus --margin"
    } else {
        "every cell of the terrain model"
    };
    Err(Problem::error(
        Location::file(&args.dem),
        format!(
            "{} over {what}: {} × {} = {cells} cells read would need about {:.0} MB for the DEM \
             and its terrain model ({DEM_BYTES_PER_CELL} bytes a cell) plus {:.0} MB for a batch \
             of output rows; the limit is {MAX_DEM_WINDOW_CELLS} cells ({:.0} MB)",
            flag(args),
            p.read.nx,
            p.read.ny,
            mb(model),
            mb(batch),
            mb(MAX_DEM_WINDOW_CELLS as u64 * DEM_BYTES_PER_CELL as u64)
        ),
    )
    .with_hint(if args.extent.is_some() {
        "give a smaller --extent or --margin, or resample the terrain model to coarser cells"
    } else {
        "give --extent WEST,EAST,SOUTH,NORTH (m) to evaluate part of the terrain model, which is \
         then read over that rectangle plus --margin only, or resample it to coarser cells"
    }))
}

/// The smallest `--step` at which the plan's cells give at most `max` points.
fn step_for(p: &Plan, max: usize) -> usize {
    let (nc, nr) = (p.cols.len(), p.rows.len());
    (1..=nc.max(nr).max(1))
        .find(|&s| stepped(nc, s).saturating_mul(stepped(nr, s)) <= max)
        .unwrap_or(nc.max(nr).max(1))
}

/// Runs `gravgrad terrain` with `--height` or `--clearance`.
pub(super) fn run(args: &TerrainRequest) -> Result<(), RunError> {
    let ext = match extent(args) {
        Ok(e) => e,
        Err(e) => return Err(RunError::Refused(e)),
    };
    let header = match read_dem_header(&args.dem, None) {
        Ok(h) => h,
        Err(ps) => return Err(refuse(ps)),
    };
    let plan = match plan(args, &header, ext) {
        Ok(p) => p,
        Err(p) => return Err(refuse(vec![p])),
    };
    let need = memory(&plan);
    tracing::info!(
        "{}: up to {} points over {} × {} cells read; about {:.0} MB for the DEM and its terrain \
         model and {:.0} MB for a batch of output rows",
        flag(args),
        plan.points,
        plan.read.nx,
        plan.read.ny,
        need.0 as f64 / 1e6,
        need.1 as f64 / 1e6
    );
    if let Err(p) = check_memory(args, &plan, need) {
        return Err(refuse(vec![p]));
    }
    let max = if args.exact {
        (super::MAX_EXACT_PRISM_SUMS / plan.read.cells().max(1)) as usize
    } else {
        super::MAX_TERRAIN_POINTS
    };
    let fewer = format!(
        "give --step {}{}",
        step_for(&plan, max),
        if args.extent.is_some() {
            " or a smaller --extent"
        } else {
            ", or --extent WEST,EAST,SOUTH,NORTH (m) to evaluate part of the terrain model"
        }
    );
    if let Err(p) = check_work(
        args,
        flag(args),
        plan.points,
        plan.read.cells(),
        Some(fewer),
    ) {
        return Err(refuse(vec![p]));
    }

    let raster = read_planned(args, &header, ext, &plan)?;
    let model = build_model(args, &raster)?;
    tracing::info!(
        "{} × {} cells, reference level {:.2} m{}",
        raster.nx,
        raster.ny,
        model.reference_m(),
        if args.exact { ", exact sum" } else { "" }
    );

    write_surface(args, &plan, &raster, &model)
}

/// The DEM cells `plan` needs: the extent's window plus `--margin` (holes filled as a run fills
/// them, with the warnings logged), or the planned block of the whole DEM; checked against the
/// plan's size. Err: the exit code, the problem printed.
fn read_planned(
    args: &TerrainRequest,
    header: &GridHeader,
    ext: Option<[f64; 4]>,
    plan: &Plan,
) -> Result<Raster, RunError> {
    let raster = match ext {
        Some([w, e, s, n]) => {
            let m = args.margin;
            let keys = WindowKeys {
                dem: Location::file(&args.dem),
                margin: Location::file(&args.dem),
                margin_name: "`--margin`".into(),
            };
            match read_window(&args.dem, None, header, [w - m, e + m, s - m, n + m], &keys) {
                Ok(win) => {
                    for p in &win.warnings {
                        tracing::info!("{p}");
                    }
                    win.raster
                }
                Err(ps) => return Err(refuse(ps)),
            }
        }
        None => match read_dem_block(&args.dem, None, plan.read) {
            Ok(r) => r,
            Err(ps) => return Err(refuse(ps)),
        },
    };
    if (raster.nx, raster.ny) != (plan.read.nx, plan.read.ny) {
        return Err(RunError::Refused(format!(
            "{}: {} × {} cells read, {} × {} planned",
            args.dem.display(),
            raster.nx,
            raster.ny,
            plan.read.nx,
            plan.read.ny
        )));
    }
    Ok(raster)
}

/// Evaluates the model at every `--step`-th planned cell (height from `--height`, or the cell's
/// elevation plus `--clearance`; cells without one skipped) and writes the table a batch of rows
/// at a time.
fn write_surface(
    args: &TerrainRequest,
    plan: &Plan,
    raster: &Raster,
    model: &TerrainModel,
) -> Result<(), RunError> {
    // The cells evaluated, row by row, in the raster's own columns and rows.
    let step = args.step.max(1);
    let (c0, r0) = (plan.read.col0, plan.read.row0);
    let mut cells = plan
        .rows
        .clone()
        .step_by(step)
        .flat_map(|r| plan.cols.clone().step_by(step).map(move |c| (c, r)));
    let mut written = 0usize;
    let mut batch: Vec<[f64; 3]> = Vec::new();
    let result = write_table(&args.out, || {
        batch.clear();
        for (c, r) in cells.by_ref() {
            let (col, row) = (c - c0, r - r0);
            let (x, y) = raster.cell_centre(col, row);
            let z = raster.values[row * raster.nx + col];
            let h = match (args.height, args.clearance) {
                (Some(h), _) => h,
                (None, Some(cl)) if !raster.is_missing(z) && z.is_finite() => z + cl,
                _ => continue,
            };
            batch.push([x, y, h]);
            if batch.len() == BATCH_ROWS {
                break;
            }
        }
        if batch.is_empty() {
            return Ok(None);
        }
        written += batch.len();
        let t = evaluate(model, &batch, args.exact);
        Ok(Some(table_columns(&batch, &t)))
    });
    tracing::info!("{written} points");
    finish(result, &args.out)
}
