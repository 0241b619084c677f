//! `grids.nc`: gridded products as one CF-1.8 NetCDF file (`docs/formats.md`, section
//! "grids.nc"), written in the 64-bit offset format by [`crate::NcWriter`].
//!
//! Layout: dimensions `y` and `x`; coordinate variables `x` and `y` (float64, cell centres:
//! eastings and northings in metres with standard names `projection_x_coordinate` /
//! `projection_y_coordinate`, or longitude and latitude in degrees); one float32 variable over
//! (`y`, `x`) per product with `long_name`, `units`, `_FillValue`, `actual_range` (smallest and
//! largest value present, omitted when every cell is missing) and `grid_mapping = "crs"`; a
//! scalar `crs` variable carrying the CF grid-mapping attributes, the frame as WKT (`crs_wkt`,
//! and the same text in `spatial_ref`, which GDAL reads) and `epsg_code`; global attributes
//! `Conventions = "CF-1.8"`, `title`, `source` and `gravgrad_layout = "grids/1"`.
//!
//! Row order: y ascends, so the file's first row is the southernmost — the order GMT writes and
//! expects, which GDAL reads as a bottom-up grid and flips, and which xarray takes as given. The
//! rasters handed in are north-up; their rows are reversed on the way out.
//!
//! Frames: WGS 84 / UTM (EPSG 32601–32660, 32701–32760), ETRS89 / UTM (25828–25838), NAD83 / UTM
//! (26901–26923), GDA94 / MGA (28348–28358), GDA2020 / MGA (7846–7859), all transverse Mercator
//! with UTM parameters, and WGS 84 longitude/latitude (4326). Any other code is refused: a file
//! whose frame readers cannot see would be worse than none. No time stamps and no history: the
//! same grids give the same bytes.

use crate::model::AttrValue;
use crate::write::{NcWriter, VarData, WriteError};
use gravgrad_core::Raster;
use gravgrad_core::raster::RasterError;
use std::path::{Path, PathBuf};
use thiserror::Error;

/// The layout string written in the global attribute `gravgrad_layout`.
pub const GRIDS_LAYOUT: &str = "grids/1";

/// One product on the grid: a north-up raster (values in `units`; missing cells NaN or the
/// raster's nodata value) and its names.
#[derive(Clone, Copy, Debug)]
pub struct GridVariable<'a> {
    /// Variable name in the file, e.g. `gzz`.
    pub name: &'a str,
    /// Human-readable description, e.g. `vertical gravity gradient, terrain corrected`.
    pub long_name: &'a str,
    /// UDUNITS-style unit of the values as held, e.g. `E` (Eötvös, 10⁻⁹ s⁻²) or `mGal`.
    pub units: &'a str,
    pub raster: &'a Raster,
}

/// The contents of a grid file. All rasters share one geometry and frame.
#[derive(Clone, Debug)]
pub struct GridFile<'a> {
    /// Global `title`.
    pub title: &'a str,
    /// Global `source`: what produced the grids (e.g. `gravgrad 0.1.0, recipe survey.toml`).
    pub source: &'a str,
    /// The value that marks missing cells in every variable (`_FillValue`); NaN by default.
    pub fill_value: f32,
    pub variables: Vec<GridVariable<'a>>,
}

impl<'a> GridFile<'a> {
    /// A grid file with no variable yet and NaN as its fill value.
    pub fn new(title: &'a str, source: &'a str) -> Self {
        Self {
            title,
            source,
            fill_value: f32::NAN,
            variables: Vec::new(),
        }
    }

    /// The same file with one more product.
    pub fn with_variable(
        mut self,
        name: &'a str,
        long_name: &'a str,
        units: &'a str,
        raster: &'a Raster,
    ) -> Self {
        self.variables.push(GridVariable {
            name,
            long_name,
            units,
            raster,
        });
        self
    }
}

/// Why grids could not be laid out as a NetCDF file.
#[derive(Debug, Error)]
pub enum GridProblem {
    #[error("no grid to write")]
    Empty,
    #[error("grid `{name}` is not a valid raster: {source}")]
    Raster { name: String, source: RasterError },
    #[error(
        "grid `{name}` differs from `{first}` in size, corner, cell size or frame; one file holds \
         grids of one geometry"
    )]
    Geometry { name: String, first: String },
    #[error("the grids state no frame (EPSG code); grids.nc needs one for its grid mapping")]
    NoFrame,
    #[error(
        "EPSG:{epsg} is not a frame grids.nc describes (WGS 84, ETRS89, NAD83 / UTM; GDA94, \
         GDA2020 / MGA; WGS 84 longitude/latitude)"
    )]
    Frame { epsg: u32 },
    #[error(
        "grid `{name}`, cell (column {col}, row {row}) holds {value}, which is not a finite \
         float32"
    )]
    OutOfFloat32 {
        name: String,
        col: usize,
        row: usize,
        value: f64,
    },
    #[error(
        "grid `{name}`, cell (column {col}, row {row}) holds the fill value {value}, which would \
         read as missing"
    )]
    HoldsFill {
        name: String,
        col: usize,
        row: usize,
        value: f64,
    },
    #[error(transparent)]
    Build(#[from] WriteError),
}

/// Why `grids.nc` could not be written; every variant names the destination.
#[derive(Debug, Error)]
pub enum GridError {
    #[error("{}: {problem}", .path.display())]
    Content { path: PathBuf, problem: GridProblem },
    #[error(transparent)]
    Write(WriteError),
}

/// A geodetic datum of the supported frames, with its EPSG codes (EPSG registry, from memory;
/// checked against pyproj by `tests/reference/netcdf/check_written.py`).
struct Datum {
    /// Geographic frame name, e.g. `WGS 84`.
    geog_name: &'static str,
    /// WKT datum name.
    datum_name: &'static str,
    datum_code: u32,
    geog_code: u32,
    ellipsoid_name: &'static str,
    ellipsoid_code: u32,
    /// Semi-major axis, m.
    a: f64,
    /// Inverse flattening.
    inv_f: f64,
}

const WGS84: Datum = Datum {
    geog_name: "WGS 84",
    datum_name: "WGS_1984",
    datum_code: 6326,
    geog_code: 4326,
    ellipsoid_name: "WGS 84",
    ellipsoid_code: 7030,
    a: 6_378_137.0,
    inv_f: 298.257_223_563,
};
const fn grs80(
    geog_name: &'static str,
    datum_name: &'static str,
    datum_code: u32,
    geog_code: u32,
) -> Datum {
    Datum {
        geog_name,
        datum_name,
        datum_code,
        geog_code,
        ellipsoid_name: "GRS 1980",
        ellipsoid_code: 7019,
        a: 6_378_137.0,
        inv_f: 298.257_222_101,
    }
}
const ETRS89: Datum = grs80(
    "ETRS89",
    "European_Terrestrial_Reference_System_1989",
    6258,
    4258,
);
const NAD83: Datum = grs80("NAD83", "North_American_Datum_1983", 6269, 4269);
const GDA94: Datum = grs80("GDA94", "Geocentric_Datum_of_Australia_1994", 6283, 4283);
const GDA2020: Datum = grs80("GDA2020", "Geocentric_Datum_of_Australia_2020", 1168, 7844);

/// A frame grids.nc can describe.
enum Frame {
    /// Transverse Mercator with UTM parameters: zone 1–60, south (false northing 10 000 km).
    Utm {
        epsg: u32,
        name: String,
        zone: u32,
        south: bool,
        datum: &'static Datum,
    },
    /// WGS 84 longitude/latitude in degrees.
    LonLat,
}

fn frame_of(epsg: u32) -> Option<Frame> {
    let utm = |zone: u32, south: bool, datum: &'static Datum, name: String| Frame::Utm {
        epsg,
        name,
        zone,
        south,
        datum,
    };
    Some(match epsg {
        4326 => Frame::LonLat,
        32601..=32660 => utm(
            epsg - 32600,
            false,
            &WGS84,
            format!("WGS 84 / UTM zone {}N", epsg - 32600),
        ),
        32701..=32760 => utm(
            epsg - 32700,
            true,
            &WGS84,
            format!("WGS 84 / UTM zone {}S", epsg - 32700),
        ),
        25828..=25838 => utm(
            epsg - 25800,
            false,
            &ETRS89,
            format!("ETRS89 / UTM zone {}N", epsg - 25800),
        ),
        26901..=26923 => utm(
            epsg - 26900,
            false,
            &NAD83,
            format!("NAD83 / UTM zone {}N", epsg - 26900),
        ),
        28348..=28358 => utm(
            epsg - 28300,
            true,
            &GDA94,
            format!("GDA94 / MGA zone {}", epsg - 28300),
        ),
        7846..=7859 => utm(
            epsg - 7800,
            true,
            &GDA2020,
            format!("GDA2020 / MGA zone {}", epsg - 7800),
        ),
        _ => return None,
    })
}

/// The OGC WKT 1 text of a geographic frame (axis order latitude, longitude as EPSG defines it).
fn geogcs_wkt(d: &Datum) -> String {
    format!(
        "GEOGCS[\"{}\",DATUM[\"{}\",SPHEROID[\"{}\",{},{},AUTHORITY[\"EPSG\",\"{}\"]],\
         AUTHORITY[\"EPSG\",\"{}\"]],PRIMEM[\"Greenwich\",0,AUTHORITY[\"EPSG\",\"8901\"]],\
         UNIT[\"degree\",0.0174532925199433,AUTHORITY[\"EPSG\",\"9122\"]]",
        d.geog_name, d.datum_name, d.ellipsoid_name, d.a, d.inv_f, d.ellipsoid_code, d.datum_code
    )
}

/// The OGC WKT 1 text of EPSG:`epsg` when grids.nc supports it (see the module documentation).
pub fn frame_wkt(epsg: u32) -> Option<String> {
    Some(match frame_of(epsg)? {
        Frame::LonLat => format!(
            "{},AXIS[\"Latitude\",NORTH],AXIS[\"Longitude\",EAST],AUTHORITY[\"EPSG\",\"4326\"]]",
            geogcs_wkt(&WGS84)
        ),
        Frame::Utm {
            epsg,
            name,
            zone,
            south,
            datum,
        } => format!(
            "PROJCS[\"{name}\",{},AUTHORITY[\"EPSG\",\"{}\"]],\
             PROJECTION[\"Transverse_Mercator\"],PARAMETER[\"latitude_of_origin\",0],\
             PARAMETER[\"central_meridian\",{}],PARAMETER[\"scale_factor\",0.9996],\
             PARAMETER[\"false_easting\",500000],PARAMETER[\"false_northing\",{}],\
             UNIT[\"metre\",1,AUTHORITY[\"EPSG\",\"9001\"]],AXIS[\"Easting\",EAST],\
             AXIS[\"Northing\",NORTH],AUTHORITY[\"EPSG\",\"{epsg}\"]]",
            geogcs_wkt(datum),
            datum.geog_code,
            central_meridian(zone),
            if south { 10_000_000 } else { 0 },
        ),
    })
}

/// Central meridian of UTM zone `zone`, degrees east: −183° + 6° × zone.
fn central_meridian(zone: u32) -> i64 {
    6 * i64::from(zone) - 183
}

/// Lays the grids out as a NetCDF file in memory (layout in the module documentation); the
/// caller may add attributes before writing it.
pub fn build_grids(grid: &GridFile<'_>) -> Result<NcWriter, GridProblem> {
    let Some(first) = grid.variables.first() else {
        return Err(GridProblem::Empty);
    };
    let r0 = first.raster;
    for v in &grid.variables {
        v.raster.check().map_err(|source| GridProblem::Raster {
            name: v.name.to_string(),
            source,
        })?;
        let r = v.raster;
        let same = (r.nx, r.ny, r.epsg) == (r0.nx, r0.ny, r0.epsg)
            && [r.x_min, r.y_max, r.dx, r.dy] == [r0.x_min, r0.y_max, r0.dx, r0.dy];
        if !same {
            return Err(GridProblem::Geometry {
                name: v.name.to_string(),
                first: first.name.to_string(),
            });
        }
    }
    let epsg = r0.epsg.ok_or(GridProblem::NoFrame)?;
    let frame = frame_of(epsg).ok_or(GridProblem::Frame { epsg })?;
    let wkt = frame_wkt(epsg).ok_or(GridProblem::Frame { epsg })?;
    let (nx, ny) = (r0.nx, r0.ny);

    let mut w = NcWriter::new();
    w.add_global("Conventions", "CF-1.8")?;
    w.add_global("title", grid.title)?;
    w.add_global("source", grid.source)?;
    w.add_global("gravgrad_layout", GRIDS_LAYOUT)?;
    let dy_id = w.add_dimension("y", ny)?;
    let dx_id = w.add_dimension("x", nx)?;

    // Cell centres as the raster defines them; y from south to north.
    let xs: Vec<f64> = (0..nx).map(|c| r0.cell_centre(c, 0).0).collect();
    let ys: Vec<f64> = (0..ny).rev().map(|r| r0.cell_centre(0, r).1).collect();
    let x = w.add_variable("x", &[dx_id], VarData::F64(xs))?;
    let y = w.add_variable("y", &[dy_id], VarData::F64(ys))?;
    let geographic = matches!(frame, Frame::LonLat);
    if geographic {
        w.add_attribute(x, "standard_name", "longitude")?;
        w.add_attribute(x, "long_name", "longitude of the cell centre")?;
        w.add_attribute(x, "units", "degrees_east")?;
        w.add_attribute(y, "standard_name", "latitude")?;
        w.add_attribute(y, "long_name", "latitude of the cell centre")?;
        w.add_attribute(y, "units", "degrees_north")?;
    } else {
        w.add_attribute(x, "standard_name", "projection_x_coordinate")?;
        w.add_attribute(x, "long_name", "easting of the cell centre")?;
        w.add_attribute(x, "units", "m")?;
        w.add_attribute(y, "standard_name", "projection_y_coordinate")?;
        w.add_attribute(y, "long_name", "northing of the cell centre")?;
        w.add_attribute(y, "units", "m")?;
    }
    w.add_attribute(x, "axis", "X")?;
    w.add_attribute(y, "axis", "Y")?;

    let crs = w.add_variable("crs", &[], VarData::I32(vec![0]))?;
    match &frame {
        Frame::LonLat => {
            w.add_attribute(crs, "grid_mapping_name", "latitude_longitude")?;
            w.add_attribute(crs, "longitude_of_prime_meridian", 0.0)?;
            w.add_attribute(crs, "semi_major_axis", WGS84.a)?;
            w.add_attribute(crs, "inverse_flattening", WGS84.inv_f)?;
            w.add_attribute(crs, "geographic_crs_name", WGS84.geog_name)?;
        }
        Frame::Utm {
            name,
            zone,
            south,
            datum,
            ..
        } => {
            w.add_attribute(crs, "grid_mapping_name", "transverse_mercator")?;
            w.add_attribute(crs, "scale_factor_at_central_meridian", 0.9996)?;
            w.add_attribute(
                crs,
                "longitude_of_central_meridian",
                central_meridian(*zone) as f64,
            )?;
            w.add_attribute(crs, "latitude_of_projection_origin", 0.0)?;
            w.add_attribute(crs, "false_easting", 500_000.0)?;
            w.add_attribute(
                crs,
                "false_northing",
                if *south { 10_000_000.0 } else { 0.0 },
            )?;
            w.add_attribute(crs, "longitude_of_prime_meridian", 0.0)?;
            w.add_attribute(crs, "semi_major_axis", datum.a)?;
            w.add_attribute(crs, "inverse_flattening", datum.inv_f)?;
            w.add_attribute(crs, "reference_ellipsoid_name", datum.ellipsoid_name)?;
            w.add_attribute(crs, "geographic_crs_name", datum.geog_name)?;
            w.add_attribute(crs, "projected_crs_name", name.as_str())?;
        }
    }
    w.add_attribute(crs, "crs_wkt", wkt.as_str())?;
    w.add_attribute(crs, "spatial_ref", wkt.as_str())?;
    w.add_attribute(crs, "epsg_code", format!("EPSG:{epsg}"))?;

    let fill = grid.fill_value;
    for v in &grid.variables {
        let r = v.raster;
        let mut out = Vec::with_capacity(nx * ny);
        for row in (0..ny).rev() {
            for col in 0..nx {
                let value = r.values[row * nx + col];
                if value.is_nan() || r.is_missing(value) {
                    out.push(fill);
                    continue;
                }
                let f = value as f32;
                if !f.is_finite() {
                    return Err(GridProblem::OutOfFloat32 {
                        name: v.name.to_string(),
                        col,
                        row,
                        value,
                    });
                }
                if f == fill {
                    return Err(GridProblem::HoldsFill {
                        name: v.name.to_string(),
                        col,
                        row,
                        value,
                    });
                }
                out.push(f);
            }
        }
        // CF actual_range: smallest and largest value present (GMT shows it as the z range).
        let present = out.iter().copied().filter(|x| !x.is_nan() && *x != fill);
        let range = present.fold(None, |acc: Option<(f32, f32)>, x| match acc {
            None => Some((x, x)),
            Some((lo, hi)) => Some((lo.min(x), hi.max(x))),
        });
        let id = w.add_variable(v.name, &[dy_id, dx_id], VarData::F32(out))?;
        w.add_attribute(id, "long_name", v.long_name)?;
        w.add_attribute(id, "units", v.units)?;
        w.add_attribute(id, "_FillValue", AttrValue::Float(vec![fill]))?;
        if let Some((lo, hi)) = range {
            w.add_attribute(id, "actual_range", AttrValue::Float(vec![lo, hi]))?;
        }
        w.add_attribute(id, "grid_mapping", "crs")?;
    }
    Ok(w)
}

/// Writes the grids to `path` as a CF-1.8 NetCDF file in the 64-bit offset format (layout in the
/// module documentation), through a temporary file in the same folder renamed when complete.
pub fn write_grids(path: &Path, grid: &GridFile<'_>) -> Result<(), GridError> {
    let w = build_grids(grid).map_err(|problem| GridError::Content {
        path: path.to_path_buf(),
        problem,
    })?;
    w.write(path).map_err(GridError::Write)
}
