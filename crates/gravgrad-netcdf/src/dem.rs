//! Terrain models from NetCDF-CF grids (`docs/formats.md`, section "NetCDF terrain models").
//!
//! Frame: the result is a north-up [`Raster`] (row 0 northernmost, column 0 westernmost), its
//! `x_min`, `y_max` the outer north-west corner of the grid, cell sizes positive: eastings and
//! northings in metres (projected frame) or longitude and latitude in degrees (geographic frame).
//! Coordinate values in the file are cell centres (CF convention), so the outer edge lies half a
//! cell beyond the first and last centres. A file whose y runs south to north (the usual NetCDF
//! order) has its rows flipped; x running east to west has its columns flipped. Heights come back
//! in metres; missing cells are NaN and the raster's nodata value is NaN.
//!
//! Which variable: the one named by the caller; otherwise the single 2-D numeric variable (not
//! counting auxiliary coordinates); otherwise the single one whose `standard_name` is a height
//! (`surface_altitude`, `altitude`, `height_above_reference_ellipsoid`,
//! `height_above_mean_sea_level`, `height`, `bedrock_altitude`).
//!
//! Refused, each with the file and what was expected: no such variable; not 2-D, or not numeric;
//! a dimension without a 1-D coordinate variable; axes that are not one easting/longitude and one
//! northing/latitude; coordinates in units other than metres (km accepted and converted) or
//! degrees; uneven spacing; a single row or column (no cell size); heights in units other than
//! metres; a grid mapping that names no variable; a frame given neither by an EPSG code nor by
//! UTM or latitude-longitude parameters on WGS 84; an EPSG frame whose kind (projected or
//! geographic) disagrees with the coordinate units.

use crate::model::{AttrValue, NcType, Variable};
use crate::read::NcFile;
use gravgrad_core::raster::{FrameKind, frame_kind_of_epsg};
use gravgrad_core::{Location, Problem, Raster};
use std::path::Path;

/// CF standard names that mark a variable as terrain heights.
pub const HEIGHT_STANDARD_NAMES: [&str; 6] = [
    "surface_altitude",
    "altitude",
    "height_above_reference_ellipsoid",
    "height_above_mean_sea_level",
    "height",
    "bedrock_altitude",
];

/// An error with an optional hint, before it gets its location.
struct Refusal {
    message: String,
    hint: Option<&'static str>,
}

impl Refusal {
    fn new(message: impl Into<String>) -> Self {
        Self {
            message: message.into(),
            hint: None,
        }
    }
    fn hint(mut self, hint: &'static str) -> Self {
        self.hint = Some(hint);
        self
    }
}

impl From<String> for Refusal {
    fn from(message: String) -> Self {
        Self::new(message)
    }
}

/// Where a north-up grid lies, read from a file's header and coordinates before any cell:
/// `nx` columns eastwards and `ny` rows southwards of `dx` × `dy` (positive) from the outer
/// north-west corner (`x_min`, `y_max`), in the frame's units (m, or degrees); the frame's EPSG
/// code when the file states one; the value that marks a missing cell (NaN for NetCDF, whose
/// missing cells come back as NaN).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct GridHeader {
    pub nx: usize,
    pub ny: usize,
    pub x_min: f64,
    pub y_max: f64,
    pub dx: f64,
    pub dy: f64,
    pub epsg: Option<u32>,
    pub nodata: Option<f64>,
}

impl GridHeader {
    /// The grid's edges: west, east, south, north, in the frame's units.
    pub fn extent(&self) -> [f64; 4] {
        [
            self.x_min,
            self.x_min + self.nx as f64 * self.dx,
            self.y_max - self.ny as f64 * self.dy,
            self.y_max,
        ]
    }
    /// The centre of the cell at `col` (eastwards) and `row` (southwards), counted from 0.
    pub fn cell_centre(&self, col: usize, row: usize) -> (f64, f64) {
        (
            self.x_min + (col as f64 + 0.5) * self.dx,
            self.y_max - (row as f64 + 0.5) * self.dy,
        )
    }
    /// Every cell of the grid as one block.
    pub fn whole(&self) -> CellBlock {
        CellBlock {
            col0: 0,
            row0: 0,
            nx: self.nx,
            ny: self.ny,
        }
    }
}

/// A block of a north-up grid's cells: columns `col0..col0 + nx` (eastwards) and rows
/// `row0..row0 + ny` (southwards), counted from 0 at the north-west corner.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct CellBlock {
    pub col0: usize,
    pub row0: usize,
    pub nx: usize,
    pub ny: usize,
}

impl CellBlock {
    /// Cells of the block.
    pub fn cells(&self) -> u64 {
        (self.nx as u64).saturating_mul(self.ny as u64)
    }
    /// Whether the block lies inside a grid of `nx` × `ny` cells and holds at least one cell.
    pub fn inside(&self, nx: usize, ny: usize) -> bool {
        self.nx > 0
            && self.ny > 0
            && self.col0.checked_add(self.nx).is_some_and(|e| e <= nx)
            && self.row0.checked_add(self.ny).is_some_and(|e| e <= ny)
    }
}

/// Reads a terrain model from the NetCDF file at `path` (classic CDF-1/2/5 or NetCDF-4) into a
/// north-up raster of heights in metres (frame, units and the choice of variable in the module
/// documentation). `variable` names the 2-D variable to read; `None` lets the reader find it.
/// Every problem carries the file's location and says what was expected.
pub fn read_dem(path: &Path, variable: Option<&str>) -> Result<Raster, Vec<Problem>> {
    read(path, variable, true, None).map_err(|r| to_problems(path, r))
}

/// Reads the header of a terrain model as [`read_dem`] would, with every check but those of the
/// values: where it lies and in which frame, before any cell is decoded.
pub fn dem_header(path: &Path, variable: Option<&str>) -> Result<GridHeader, Vec<Problem>> {
    (|| {
        let file = NcFile::open(path).map_err(|e| Refusal::new(e.message))?;
        Ok(Layout::of(&file, variable, true)?.header)
    })()
    .map_err(|r: Refusal| to_problems(path, r))
}

/// Reads the cells `block` of a terrain model (the north-up grid of [`dem_header`]) as [`read_dem`]
/// would: only the block is decoded, and the limit on cells read at once applies to it, not to the
/// file. The raster's corner is the block's.
pub fn read_dem_block(
    path: &Path,
    variable: Option<&str>,
    block: CellBlock,
) -> Result<Raster, Vec<Problem>> {
    read(path, variable, true, Some(block)).map_err(|r| to_problems(path, r))
}

/// Reads any 2-D grid of a NetCDF-CF file into a north-up raster, as [`read_dem`] does but with
/// no check of the values' units: values come back unpacked, in the units the file states (for
/// example a product of `grids.nc` in E or mGal). `variable` names it; `None` picks it as
/// [`read_dem`] does.
pub fn read_grid(path: &Path, variable: Option<&str>) -> Result<Raster, Vec<Problem>> {
    read(path, variable, false, None).map_err(|r| to_problems(path, r))
}

fn to_problems(path: &Path, r: Refusal) -> Vec<Problem> {
    let mut p = Problem::error(Location::file(path), r.message);
    if let Some(h) = r.hint {
        p = p.with_hint(h);
    }
    vec![p]
}

/// How a file's 2-D variable maps onto the north-up grid.
struct Layout {
    name: String,
    header: GridHeader,
    /// The variable's dimensions are (x, y) rather than (y, x).
    transposed: bool,
    /// The file's x runs east to west.
    flip_cols: bool,
    /// The file's y runs south to north.
    flip_rows: bool,
}

impl Layout {
    /// The chosen variable's layout and header, every check but those of the values done.
    fn of(file: &NcFile, variable: Option<&str>, heights: bool) -> Result<Self, Refusal> {
        let var = choose_variable(file, variable)?;
        let name = var.name.clone();
        if var.dims.len() != 2 {
            return Err(Refusal::new(format!(
                "variable `{name}` has {} dimensions, a terrain model has 2 (y, x)",
                var.dims.len()
            ))
            .hint("store the heights as a 2-D variable over the dimensions (y, x)"));
        }
        if !var.nc_type.is_numeric() {
            return Err(Refusal::new(format!(
                "variable `{name}` holds {} values, expected numbers (heights in metres)",
                var.nc_type.name()
            )));
        }
        if heights {
            check_height_units(var)?;
        }

        let epsg = crs(file, var)?;
        let frame = epsg.map(frame_kind_of_epsg);
        let a0 = axis(file, var, 0, frame)?;
        let a1 = axis(file, var, 1, frame)?;
        let (xa, ya, transposed) = match (a0.dir, a1.dir) {
            (Dir::Y, Dir::X) => (a1, a0, false),
            (Dir::X, Dir::Y) => (a0, a1, true),
            _ => {
                return Err(Refusal::new(format!(
                    "variable `{name}`: cannot tell which of its dimensions `{}` and `{}` runs \
                     east and which north (from their coordinates' axis, standard_name, units \
                     or name)",
                    a0.name, a1.name
                ))
                .hint("give the coordinate variables axis = \"X\" / \"Y\" or CF standard names"));
            }
        };
        if xa.geographic != ya.geographic {
            return Err(Refusal::new(format!(
                "coordinates `{}` and `{}` mix degrees and metres",
                xa.name, ya.name
            )));
        }
        let geographic = xa.geographic;

        if let Some(code) = epsg {
            let kind = frame_kind_of_epsg(code);
            let want = if geographic {
                FrameKind::Geographic
            } else {
                FrameKind::Projected
            };
            if kind != want {
                return Err(Refusal::new(format!(
                    "the grid mapping gives EPSG:{code}, a {} frame, but the coordinates are in {}",
                    if kind == FrameKind::Geographic {
                        "geographic (degrees)"
                    } else {
                        "projected (metres)"
                    },
                    if geographic { "degrees" } else { "metres" }
                )));
            }
        }
        let dx = xa.step.abs();
        let dy = ya.step.abs();
        let x_west = xa.values.iter().copied().fold(f64::INFINITY, f64::min);
        let y_north = ya.values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        Ok(Self {
            name,
            header: GridHeader {
                nx: xa.values.len(),
                ny: ya.values.len(),
                x_min: x_west - 0.5 * dx,
                y_max: y_north + 0.5 * dy,
                dx,
                dy,
                epsg,
                nodata: Some(f64::NAN),
            },
            transposed,
            flip_cols: xa.step < 0.0,
            flip_rows: ya.step > 0.0,
        })
    }
}

/// Reads the block `block` (all cells when `None`) of the chosen variable into a north-up raster.
fn read(
    path: &Path,
    variable: Option<&str>,
    heights: bool,
    block: Option<CellBlock>,
) -> Result<Raster, Refusal> {
    let file = NcFile::open(path).map_err(|e| Refusal::new(e.message))?;
    let layout = Layout::of(&file, variable, heights)?;
    let Layout {
        name,
        header: h,
        transposed,
        flip_cols,
        flip_rows,
    } = layout;
    let b = block.unwrap_or(h.whole());
    if !b.inside(h.nx, h.ny) {
        return Err(Refusal::new(format!(
            "variable `{name}`: the block of columns {} to {} and rows {} to {} is not inside its \
             {} × {} cells",
            b.col0,
            b.col0.saturating_add(b.nx),
            b.row0,
            b.row0.saturating_add(b.ny),
            h.nx,
            h.ny
        )));
    }
    // The block's first x and y index in the file, and how many.
    let ix0 = if flip_cols {
        h.nx - b.col0 - b.nx
    } else {
        b.col0
    };
    let iy0 = if flip_rows {
        h.ny - b.row0 - b.ny
    } else {
        b.row0
    };
    let (start, count) = if transposed {
        ([ix0 as u64, iy0 as u64], [b.nx as u64, b.ny as u64])
    } else {
        ([iy0 as u64, ix0 as u64], [b.ny as u64, b.nx as u64])
    };
    let var = file
        .variable(&name)
        .ok_or_else(|| Refusal::new(format!("no variable `{name}`")))?;
    let raw = if block.is_none() {
        file.read_f64(&name)
    } else {
        file.read_f64_block(&name, start, count)
    }
    .map_err(|e| Refusal::new(e.message))?;
    let heights = unpack(var, raw);
    let (nx, ny) = (b.nx, b.ny);
    if heights.len() != nx * ny {
        return Err(Refusal::new(format!(
            "variable `{name}` holds {} values, its coordinates make {nx} × {ny}",
            heights.len()
        )));
    }
    let mut values = Vec::with_capacity(nx * ny);
    for row in 0..ny {
        let iy = if flip_rows { ny - 1 - row } else { row };
        for col in 0..nx {
            let ix = if flip_cols { nx - 1 - col } else { col };
            let k = if transposed {
                ix * ny + iy
            } else {
                iy * nx + ix
            };
            values.push(heights[k]);
        }
    }
    let raster = Raster::new(
        nx,
        ny,
        (
            h.x_min + b.col0 as f64 * h.dx,
            h.y_max - b.row0 as f64 * h.dy,
        ),
        (h.dx, h.dy),
        values,
    )
    .map_err(|e| Refusal::new(format!("variable `{name}` does not form a raster: {e}")))?
    .with_nodata(f64::NAN);
    Ok(match h.epsg {
        Some(c) => raster.with_epsg(c),
        None => raster,
    })
}

/// Names of the variables other variables list as auxiliary coordinates (`coordinates`).
fn auxiliary_names(file: &NcFile) -> Vec<String> {
    file.variables()
        .iter()
        .filter_map(|v| v.attr_text("coordinates"))
        .flat_map(|s| s.split_whitespace().map(str::to_string))
        .collect()
}

fn choose_variable<'a>(file: &'a NcFile, wanted: Option<&str>) -> Result<&'a Variable, Refusal> {
    let list = |vars: &[&Variable]| {
        vars.iter()
            .map(|v| format!("`{}`", v.name))
            .collect::<Vec<_>>()
            .join(", ")
    };
    if let Some(w) = wanted {
        return file.variable(w).ok_or_else(|| {
            let all: Vec<&Variable> = file.variables().iter().collect();
            Refusal::new(format!(
                "no variable `{w}`; the file has {}",
                if all.is_empty() {
                    "none".to_string()
                } else {
                    list(&all)
                }
            ))
        });
    }
    let aux = auxiliary_names(file);
    let candidates: Vec<&Variable> = file
        .variables()
        .iter()
        .filter(|v| v.dims.len() == 2 && v.nc_type.is_numeric() && !aux.contains(&v.name))
        .filter(|v| !matches!(v.attr_text("standard_name"), Some("latitude" | "longitude")))
        .collect();
    match candidates.as_slice() {
        [one] => return Ok(one),
        [] => {
            return Err(Refusal::new(
                "no 2-D numeric variable: a terrain model is a grid of heights over (y, x)",
            ));
        }
        _ => {}
    }
    let heights: Vec<&Variable> = candidates
        .iter()
        .copied()
        .filter(|v| {
            v.attr_text("standard_name")
                .is_some_and(|s| HEIGHT_STANDARD_NAMES.contains(&s))
        })
        .collect();
    match heights.as_slice() {
        [one] => Ok(one),
        _ => Err(Refusal::new(format!(
            "{} 2-D variables ({}) and {} with a height standard_name: cannot tell which holds \
             the terrain",
            candidates.len(),
            list(&candidates),
            if heights.is_empty() {
                "none".to_string()
            } else {
                format!("{} ({})", heights.len(), list(&heights))
            }
        ))
        .hint("name the variable in the recipe, or give it standard_name = \"surface_altitude\"")),
    }
}

/// Metre spellings accepted for heights and projected coordinates.
fn is_metres(u: &str) -> bool {
    matches!(u, "m" | "metre" | "metres" | "meter" | "meters")
}

fn check_height_units(var: &Variable) -> Result<(), Refusal> {
    let Some(u) = var.attr_text("units") else {
        return Ok(());
    };
    let first = u.split_whitespace().next().unwrap_or("");
    if first.is_empty() || is_metres(first) {
        Ok(())
    } else {
        Err(Refusal::new(format!(
            "variable `{}` has units {u:?}, expected heights in metres (\"m\")",
            var.name
        ))
        .hint("convert the heights to metres"))
    }
}

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Dir {
    X,
    Y,
    Unknown,
}

struct Axis {
    name: String,
    dir: Dir,
    geographic: bool,
    /// Centres in metres or degrees, in file order.
    values: Vec<f64>,
    /// Signed step between consecutive centres.
    step: f64,
}

/// The coordinate variable of dimension `k` of `var`, classified and checked for even spacing.
/// Coordinates without units take them from the frame when it is known (`frame`): metres in a
/// projected frame, degrees in a geographic one (GMT writes Cartesian grids without units).
fn axis(
    file: &NcFile,
    var: &Variable,
    k: usize,
    frame: Option<FrameKind>,
) -> Result<Axis, Refusal> {
    let dim = &file.dimensions()[var.dims[k]];
    let dname = dim.name.clone();
    let coord = file
        .variables()
        .iter()
        .find(|v| v.name == dname && v.dims.len() == 1 && v.dims[0] == var.dims[k]);
    let Some(coord) = coord else {
        return Err(Refusal::new(format!(
            "dimension `{dname}` of variable `{}` has no coordinate variable (a 1-D variable \
             `{dname}`), so the grid has no position",
            var.name
        ))
        .hint("add coordinate variables x and y (cell centres in metres) or lon and lat"));
    };
    if !coord.nc_type.is_numeric() {
        return Err(Refusal::new(format!(
            "coordinate variable `{dname}` holds {} values, expected numbers",
            coord.nc_type.name()
        )));
    }
    let units = coord.attr_text("units").unwrap_or("").trim().to_string();
    let std_name = coord.attr_text("standard_name").unwrap_or("");
    let axis_attr = coord.attr_text("axis").unwrap_or("");
    let lname = dname.to_ascii_lowercase();
    let east_units = [
        "degrees_east",
        "degree_east",
        "degrees_e",
        "degree_e",
        "degreese",
        "degreee",
    ];
    let north_units = [
        "degrees_north",
        "degree_north",
        "degrees_n",
        "degree_n",
        "degreesn",
        "degreen",
    ];
    let lunits = units.to_ascii_lowercase();
    let dir = if axis_attr.eq_ignore_ascii_case("X")
        || matches!(
            std_name,
            "projection_x_coordinate" | "longitude" | "grid_longitude"
        )
        || east_units.contains(&lunits.as_str())
    {
        Dir::X
    } else if axis_attr.eq_ignore_ascii_case("Y")
        || matches!(
            std_name,
            "projection_y_coordinate" | "latitude" | "grid_latitude"
        )
        || north_units.contains(&lunits.as_str())
    {
        Dir::Y
    } else if matches!(
        lname.as_str(),
        "x" | "lon" | "long" | "longitude" | "easting" | "eastings"
    ) {
        Dir::X
    } else if matches!(
        lname.as_str(),
        "y" | "lat" | "latitude" | "northing" | "northings"
    ) {
        Dir::Y
    } else {
        Dir::Unknown
    };
    let lonlat_named = matches!(std_name, "longitude" | "latitude")
        || matches!(
            lname.as_str(),
            "lon" | "long" | "longitude" | "lat" | "latitude"
        );
    let mut degrees = east_units.contains(&lunits.as_str())
        || north_units.contains(&lunits.as_str())
        || (matches!(lunits.as_str(), "degree" | "degrees") && lonlat_named);
    let factor = if degrees || is_metres(&lunits) {
        1.0
    } else if lunits == "km" {
        1000.0
    } else if units.is_empty() {
        match frame {
            Some(FrameKind::Projected) if !lonlat_named => 1.0,
            Some(FrameKind::Geographic) => {
                degrees = true;
                1.0
            }
            _ => {
                return Err(Refusal::new(format!(
                    "coordinate variable `{dname}` states no units and the grid no frame; \
                     expected metres (\"m\") or degrees (\"degrees_east\", \"degrees_north\")"
                ))
                .hint(
                    "give the coordinates units = \"m\" or add a grid mapping with its EPSG code",
                ));
            }
        }
    } else {
        return Err(Refusal::new(format!(
            "coordinate variable `{dname}` has units {units:?}; expected metres (\"m\") or \
             degrees (\"degrees_east\", \"degrees_north\")"
        )));
    };
    let raw = file.read_f64(&dname).map_err(|e| Refusal::new(e.message))?;
    let scale = coord
        .attr("scale_factor")
        .and_then(AttrValue::number)
        .unwrap_or(1.0);
    let offset = coord
        .attr("add_offset")
        .and_then(AttrValue::number)
        .unwrap_or(0.0);
    let values: Vec<f64> = raw.iter().map(|&v| (v * scale + offset) * factor).collect();
    if let Some(i) = values.iter().position(|v| !v.is_finite()) {
        return Err(Refusal::new(format!(
            "coordinate variable `{dname}`: value {i} is {}, expected a finite position",
            values[i]
        )));
    }
    let n = values.len();
    if n < 2 {
        return Err(Refusal::new(format!(
            "coordinate variable `{dname}` holds {n} value(s): at least 2 are needed to know the \
             cell size"
        )));
    }
    let step = (values[n - 1] - values[0]) / (n - 1) as f64;
    if step == 0.0 || !step.is_finite() {
        return Err(Refusal::new(format!(
            "coordinate variable `{dname}` does not advance: its first and last values are both {}",
            values[0]
        )));
    }
    // Tolerance: a millionth of a cell, plus the rounding of the stored type (a few units in the
    // last place of the largest coordinate; float32 coordinates hold about 7 digits).
    let eps = match coord.nc_type {
        NcType::Float => f64::from(f32::EPSILON),
        NcType::Double => f64::EPSILON,
        _ => 0.0,
    };
    let biggest = values.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
    let tol = 1e-6 * step.abs() + 4.0 * eps * biggest;
    let uneven = |d: f64| {
        values
            .iter()
            .enumerate()
            .map(|(i, &v)| (i, v, values[0] + i as f64 * d))
            .find(|(_, v, even)| (v - even).abs() > tol)
    };
    if uneven(step).is_some() {
        // Name the first value off the step between the first two, which is how a reader of
        // the message counts; fall back to the mean step.
        let first_step = values[1] - values[0];
        let (i, v, even, d) = match uneven(first_step) {
            Some((i, v, even)) => (i, v, even, first_step),
            None => {
                let (i, v, even) = uneven(step).unwrap_or((0, values[0], values[0]));
                (i, v, even, step)
            }
        };
        return Err(Refusal::new(format!(
            "coordinate variable `{dname}` is not evenly spaced: value {i} is {v}, where a step \
             of {d} from {} puts {even}; a raster needs a regular grid",
            values[0]
        ))
        .hint("resample the terrain model onto a regular grid first"));
    }
    Ok(Axis {
        name: dname,
        dir,
        geographic: degrees,
        values,
        step,
    })
}

/// Stored values to heights: fill, missing and out-of-range values become NaN, then
/// `scale_factor` and `add_offset` apply (CF packing: height = stored × scale + offset).
fn unpack(var: &Variable, raw: Vec<f64>) -> Vec<f64> {
    // Compare in the stored type: a fill attribute written as double for float data is rounded.
    let as_stored = |x: f64| {
        if var.nc_type == NcType::Float {
            f64::from(x as f32)
        } else {
            x
        }
    };
    let fill = match var.attr("_FillValue").and_then(AttrValue::number) {
        Some(f) => Some(as_stored(f)),
        None => var.nc_type.default_fill(),
    };
    let missing: Vec<f64> = var
        .attr("missing_value")
        .and_then(AttrValue::numbers)
        .unwrap_or_default()
        .into_iter()
        .map(as_stored)
        .collect();
    let (mut lo, mut hi) = (f64::NEG_INFINITY, f64::INFINITY);
    if let Some(r) = var.attr("valid_range").and_then(AttrValue::numbers)
        && r.len() == 2
    {
        (lo, hi) = (r[0], r[1]);
    }
    if let Some(v) = var.attr("valid_min").and_then(AttrValue::number) {
        lo = v;
    }
    if let Some(v) = var.attr("valid_max").and_then(AttrValue::number) {
        hi = v;
    }
    let scale = var
        .attr("scale_factor")
        .and_then(AttrValue::number)
        .unwrap_or(1.0);
    let offset = var
        .attr("add_offset")
        .and_then(AttrValue::number)
        .unwrap_or(0.0);
    raw.into_iter()
        .map(|v| {
            let gone = v.is_nan() || Some(v) == fill || missing.contains(&v) || v < lo || v > hi;
            if gone { f64::NAN } else { v * scale + offset }
        })
        .collect()
}

/// The EPSG code of the grid's frame from its grid mapping; `None` when the variable has no
/// grid mapping.
fn crs(file: &NcFile, var: &Variable) -> Result<Option<u32>, Refusal> {
    let Some(gm) = var.attr_text("grid_mapping") else {
        return Ok(None);
    };
    // CF 1.7 extended form "crs: x y"; the first grid mapping is the one used.
    let gm_name = gm.split(':').next().unwrap_or("").trim().to_string();
    let Some(g) = file.variable(&gm_name) else {
        return Err(Refusal::new(format!(
            "variable `{}` names the grid mapping `{gm_name}`, which is not a variable of the file",
            var.name
        )));
    };
    if let Some(v) = g.attr("epsg_code") {
        let code = match v {
            AttrValue::Text(t) => parse_epsg_text(t),
            other => other
                .number()
                .filter(|c| *c >= 1.0 && *c <= f64::from(u32::MAX) && c.fract() == 0.0)
                .map(|c| c as u32),
        };
        return code.map(Some).ok_or_else(|| {
            Refusal::new(format!(
                "grid mapping `{gm_name}`: epsg_code {v:?} is not an EPSG code (e.g. \"EPSG:32753\")"
            ))
        });
    }
    for key in ["crs_wkt", "spatial_ref"] {
        if let Some(code) = g.attr_text(key).and_then(wkt_epsg) {
            return Ok(Some(code));
        }
    }
    let name = g.attr_text("grid_mapping_name").unwrap_or("");
    let num = |k: &str| g.attr(k).and_then(AttrValue::number);
    let wgs84 = is_wgs84(g, num("semi_major_axis"), num("inverse_flattening"));
    match name {
        "transverse_mercator" => {
            let (Some(k0), Some(lon0), Some(lat0), Some(fe), Some(fn_)) = (
                num("scale_factor_at_central_meridian"),
                num("longitude_of_central_meridian"),
                num("latitude_of_projection_origin"),
                num("false_easting"),
                num("false_northing"),
            ) else {
                return Err(Refusal::new(format!(
                    "grid mapping `{gm_name}` (transverse_mercator) lacks one of \
                     scale_factor_at_central_meridian, longitude_of_central_meridian, \
                     latitude_of_projection_origin, false_easting, false_northing"
                )));
            };
            let zone = ((lon0 + 183.0) / 6.0).round();
            let utm = (k0 - 0.9996).abs() < 1e-9
                && lat0 == 0.0
                && (fe - 500_000.0).abs() < 1e-6
                && (fn_ == 0.0 || (fn_ - 10_000_000.0).abs() < 1e-6)
                && (1.0..=60.0).contains(&zone)
                && (lon0 - (6.0 * zone - 183.0)).abs() < 1e-9;
            if !utm {
                return Err(Refusal::new(format!(
                    "grid mapping `{gm_name}` is a transverse Mercator that is not a UTM zone \
                     (scale {k0}, central meridian {lon0}°, origin latitude {lat0}°, false \
                     easting {fe} m, false northing {fn_} m) and states no EPSG code"
                ))
                .hint("add crs_wkt with the EPSG authority, or epsg_code"));
            }
            if !wgs84 {
                return Err(Refusal::new(format!(
                    "grid mapping `{gm_name}` is UTM zone {zone} but not on the WGS 84 ellipsoid \
                     (semi_major_axis, inverse_flattening) and states no EPSG code, so the \
                     datum is unknown"
                ))
                .hint("add crs_wkt with the EPSG authority, or epsg_code"));
            }
            let base = if fn_ == 0.0 { 32600 } else { 32700 };
            Ok(Some(base + zone as u32))
        }
        "latitude_longitude" if wgs84 => Ok(Some(4326)),
        "" => Err(Refusal::new(format!(
            "grid mapping `{gm_name}` states no frame: no epsg_code, no crs_wkt or spatial_ref \
             with an EPSG authority, no grid_mapping_name"
        ))
        .hint("add crs_wkt with the EPSG authority, or epsg_code")),
        other => Err(Refusal::new(format!(
            "grid mapping `{gm_name}` ({other}) states no EPSG code, and only UTM and \
             latitude-longitude grids on WGS 84 are recognised from their parameters"
        ))
        .hint("add crs_wkt with the EPSG authority, or epsg_code")),
    }
}

/// Whether the grid mapping states the WGS 84 ellipsoid (a = 6 378 137 m, 1/f = 298.257223563;
/// EPSG registry values) by parameters or by name.
fn is_wgs84(g: &Variable, a: Option<f64>, inv_f: Option<f64>) -> bool {
    if let (Some(a), Some(f)) = (a, inv_f) {
        return (a - 6_378_137.0).abs() < 1e-6 && (f - 298.257_223_563).abs() < 1e-8;
    }
    ["reference_ellipsoid_name", "horizontal_datum_name"]
        .iter()
        .filter_map(|k| g.attr_text(k))
        .any(|n| {
            let n: String = n
                .chars()
                .filter(|c| c.is_ascii_alphanumeric())
                .collect::<String>()
                .to_ascii_uppercase();
            n == "WGS84" || n == "WGS1984" || n == "WORLDGEODETICSYSTEM1984"
        })
}

/// `"EPSG:32753"`, `"epsg:32753"` or `"32753"` to 32753.
fn parse_epsg_text(t: &str) -> Option<u32> {
    let t = t.trim();
    let digits = match t.split_once(':') {
        Some((auth, code)) if auth.trim().eq_ignore_ascii_case("EPSG") => code.trim(),
        Some(_) => return None,
        None => t,
    };
    digits.parse::<u32>().ok().filter(|&c| c > 0)
}

/// The EPSG code of a WKT string's top-level object: its `AUTHORITY["EPSG","nnnn"]` (WKT 1) or
/// `ID["EPSG",nnnn]` (WKT 2) directly inside the outermost brackets. Authorities of inner objects
/// (the datum, the base geographic frame) are not taken.
pub fn wkt_epsg(wkt: &str) -> Option<u32> {
    let bytes = wkt.as_bytes();
    let mut depth = 0usize;
    let mut in_quote = false;
    let mut word_start = 0usize;
    let mut found = None;
    for (i, &b) in bytes.iter().enumerate() {
        if in_quote {
            if b == b'"' {
                in_quote = false;
            }
            continue;
        }
        match b {
            b'"' => in_quote = true,
            b'[' | b'(' => {
                let word = wkt[word_start..i].trim();
                depth += 1;
                if depth == 2
                    && (word.eq_ignore_ascii_case("AUTHORITY") || word.eq_ignore_ascii_case("ID"))
                {
                    found = parse_authority(&wkt[i + 1..]).or(found);
                }
                word_start = i + 1;
            }
            b']' | b')' => {
                depth = depth.saturating_sub(1);
                word_start = i + 1;
            }
            b',' => word_start = i + 1,
            _ => {}
        }
    }
    found
}

/// `"EPSG","32753"]` or `"EPSG",32753]` (the text after the opening bracket) to 32753.
fn parse_authority(rest: &str) -> Option<u32> {
    let end = rest.find([']', ')'])?;
    let mut parts = rest[..end].split(',');
    let auth = parts.next()?.trim().trim_matches('"');
    let code = parts.next()?.trim().trim_matches('"');
    if !auth.eq_ignore_ascii_case("EPSG") {
        return None;
    }
    code.parse::<u32>().ok().filter(|&c| c > 0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wkt_top_level_authority_only() {
        // WKT 1 of WGS 84 / UTM 53S as GDAL writes it (from memory): inner authorities for the
        // ellipsoid (7030), datum (6326), base frame (4326), and the projected frame's last.
        let wkt = r#"PROJCS["WGS 84 / UTM zone 53S",GEOGCS["WGS 84",DATUM["WGS_1984",SPHEROID["WGS 84",6378137,298.257223563,AUTHORITY["EPSG","7030"]],AUTHORITY["EPSG","6326"]],AUTHORITY["EPSG","4326"]],PROJECTION["Transverse_Mercator"],UNIT["metre",1,AUTHORITY["EPSG","9001"]],AUTHORITY["EPSG","32753"]]"#;
        assert_eq!(wkt_epsg(wkt), Some(32753));
        // A custom frame: only inner authorities, so no code.
        let custom = r#"PROJCS["local",GEOGCS["WGS 84",AUTHORITY["EPSG","4326"]],PROJECTION["Transverse_Mercator"]]"#;
        assert_eq!(wkt_epsg(custom), None);
        // WKT 2 with parentheses and an unquoted code.
        assert_eq!(
            wkt_epsg(r#"GEOGCRS("WGS 84",DATUM("x"),ID("EPSG",4326))"#),
            Some(4326)
        );
        // A bracket inside a quoted name does not count.
        assert_eq!(
            wkt_epsg(r#"PROJCS["a [b] c",AUTHORITY["EPSG","32601"]]"#),
            Some(32601)
        );
    }

    #[test]
    fn epsg_text_spellings() {
        assert_eq!(parse_epsg_text("EPSG:32753"), Some(32753));
        assert_eq!(parse_epsg_text(" epsg : 4326 "), Some(4326));
        assert_eq!(parse_epsg_text("32631"), Some(32631));
        assert_eq!(parse_epsg_text("ESRI:102003"), None);
        assert_eq!(parse_epsg_text("0"), None);
    }
}
