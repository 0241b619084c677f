//! A single-band, north-up raster: terrain models read from files and gridded products.
//!
//! Frame: a map frame given by an EPSG code, either projected (eastings and northings in metres)
//! or geographic (longitude and latitude in degrees). Cells are areas: `x_min` and `y_max` are the
//! outer west and north edges of the grid, not cell centres. Rows run from north to south, columns
//! from west to east, so the centre of cell (column `c`, row `r`) is at
//! `x = x_min + (c + 0.5)·dx`, `y = y_max − (r + 0.5)·dy`. Values carry the unit of whatever the
//! raster holds (m for heights, s⁻² for gradients inside the code); the raster does not record it.

use thiserror::Error;

/// A single-band north-up raster (see the module documentation for the frame).
#[derive(Clone, Debug, PartialEq)]
pub struct Raster {
    /// Number of columns, counted eastwards.
    pub nx: usize,
    /// Number of rows, counted southwards from the northernmost row.
    pub ny: usize,
    /// West edge of the grid: easting in m (projected) or longitude in degrees (geographic).
    pub x_min: f64,
    /// North edge of the grid: northing in m (projected) or latitude in degrees (geographic).
    pub y_max: f64,
    /// Cell width, positive, east-west: m (projected) or degrees (geographic).
    pub dx: f64,
    /// Cell height, positive, north-south: m (projected) or degrees (geographic).
    pub dy: f64,
    /// EPSG code of the map frame, when known.
    pub epsg: Option<u32>,
    /// The value that marks a missing cell (NaN allowed: then NaN cells are missing).
    pub nodata: Option<f64>,
    /// `nx·ny` values, row-major; row 0 is the northernmost row, column 0 the westernmost.
    pub values: Vec<f64>,
}

/// Why a raster's shape or geometry was refused.
#[derive(Clone, Debug, PartialEq, Error)]
pub enum RasterError {
    #[error("a raster needs at least one column and one row, got {nx} × {ny}")]
    Empty { nx: usize, ny: usize },
    #[error("{nx} × {ny} cells need {expected} values, got {got}")]
    Shape {
        nx: usize,
        ny: usize,
        expected: usize,
        got: usize,
    },
    #[error("{nx} × {ny} cells overflow the address space")]
    TooLarge { nx: usize, ny: usize },
    #[error("cell sizes must be finite and positive, got dx = {dx}, dy = {dy}")]
    CellSize { dx: f64, dy: f64 },
    #[error("grid corner must be finite, got x_min = {x_min}, y_max = {y_max}")]
    Corner { x_min: f64, y_max: f64 },
}

impl Raster {
    /// A raster of `nx` columns and `ny` rows with its north-west corner at `corner` =
    /// (`x_min`, `y_max`) and cells of `cell` = (`dx`, `dy`), both in the frame's units (m or
    /// degrees); `values` row-major from the northernmost row. No EPSG code and no nodata value:
    /// set them with [`Raster::with_epsg`] and [`Raster::with_nodata`].
    pub fn new(
        nx: usize,
        ny: usize,
        corner: (f64, f64),
        cell: (f64, f64),
        values: Vec<f64>,
    ) -> Result<Self, RasterError> {
        let r = Self {
            nx,
            ny,
            x_min: corner.0,
            y_max: corner.1,
            dx: cell.0,
            dy: cell.1,
            epsg: None,
            nodata: None,
            values,
        };
        r.check()?;
        Ok(r)
    }

    /// The same raster in the map frame EPSG:`code`.
    pub fn with_epsg(mut self, code: u32) -> Self {
        self.epsg = Some(code);
        self
    }

    /// The same raster with `value` marking missing cells.
    pub fn with_nodata(mut self, value: f64) -> Self {
        self.nodata = Some(value);
        self
    }

    /// Checks the invariants [`Raster::new`] establishes; the fields are public, so writers call
    /// this again before using them.
    pub fn check(&self) -> Result<(), RasterError> {
        let (nx, ny) = (self.nx, self.ny);
        if nx == 0 || ny == 0 {
            return Err(RasterError::Empty { nx, ny });
        }
        let expected = nx.checked_mul(ny).ok_or(RasterError::TooLarge { nx, ny })?;
        if self.values.len() != expected {
            return Err(RasterError::Shape {
                nx,
                ny,
                expected,
                got: self.values.len(),
            });
        }
        let size_ok = |d: f64| d.is_finite() && d > 0.0;
        if !size_ok(self.dx) || !size_ok(self.dy) {
            return Err(RasterError::CellSize {
                dx: self.dx,
                dy: self.dy,
            });
        }
        if !self.x_min.is_finite() || !self.y_max.is_finite() {
            return Err(RasterError::Corner {
                x_min: self.x_min,
                y_max: self.y_max,
            });
        }
        Ok(())
    }

    /// The value of cell (`col` eastwards, `row` southwards), or `None` outside the grid.
    /// A missing cell returns its nodata value; use [`Raster::is_missing`] to tell.
    pub fn get(&self, col: usize, row: usize) -> Option<f64> {
        if col >= self.nx || row >= self.ny {
            return None;
        }
        self.values.get(row * self.nx + col).copied()
    }

    /// Whether `value` marks a missing cell under this raster's nodata value.
    pub fn is_missing(&self, value: f64) -> bool {
        match self.nodata {
            Some(nd) if nd.is_nan() => value.is_nan(),
            Some(nd) => value == nd,
            None => false,
        }
    }

    /// Centre of cell (`col`, `row`) in the frame's units: (easting m, northing m) or
    /// (longitude deg, latitude deg).
    pub fn cell_centre(&self, col: usize, row: usize) -> (f64, f64) {
        (
            self.x_min + (col as f64 + 0.5) * self.dx,
            self.y_max - (row as f64 + 0.5) * self.dy,
        )
    }
}

/// Whether an EPSG code names a projected or a geographic frame.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum FrameKind {
    /// Eastings and northings in metres.
    Projected,
    /// Longitude and latitude in degrees.
    Geographic,
}

/// Geographic 2D frames outside the block 4001–4799: NAD83(2011), JGD2011, GDA2020.
const GEOGRAPHIC_OUTSIDE_BLOCK: [u32; 3] = [6318, 6668, 7844];
/// Codes inside 4001–4799 that are not geographic 2D (geocentric or 3D, deprecated).
const NOT_GEOGRAPHIC_IN_BLOCK: [u32; 2] = [4328, 4329];

/// A guess at the kind of frame an EPSG code names, without a CRS database: the EPSG block
/// 4001–4799 and a short list of later codes (6318, 6668, 7844) are geographic 2D frames (in
/// degrees); every other code is taken as projected (in metres). Source: the EPSG registry's code
/// ranges, from memory. Callers that know better pass the kind explicitly.
pub fn frame_kind_of_epsg(code: u32) -> FrameKind {
    let in_block = (4001..=4799).contains(&code) && !NOT_GEOGRAPHIC_IN_BLOCK.contains(&code);
    if in_block || GEOGRAPHIC_OUTSIDE_BLOCK.contains(&code) {
        FrameKind::Geographic
    } else {
        FrameKind::Projected
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shape_is_checked() {
        assert!(Raster::new(2, 3, (0.0, 0.0), (1.0, 1.0), vec![0.0; 6]).is_ok());
        assert_eq!(
            Raster::new(2, 3, (0.0, 0.0), (1.0, 1.0), vec![0.0; 5]),
            Err(RasterError::Shape {
                nx: 2,
                ny: 3,
                expected: 6,
                got: 5
            })
        );
        assert!(matches!(
            Raster::new(0, 3, (0.0, 0.0), (1.0, 1.0), vec![]),
            Err(RasterError::Empty { .. })
        ));
        assert!(matches!(
            Raster::new(1, 1, (0.0, 0.0), (-1.0, 1.0), vec![0.0]),
            Err(RasterError::CellSize { .. })
        ));
        assert!(matches!(
            Raster::new(usize::MAX, 2, (0.0, 0.0), (1.0, 1.0), vec![]),
            Err(RasterError::TooLarge { .. })
        ));
    }

    #[test]
    fn cell_centres_are_north_up() {
        // A 2 × 2 grid of 10 m cells with its north-west corner at (500 000, 7 000 000):
        // the first cell's centre is 5 m east and 5 m south of the corner (cells are areas).
        let r = Raster::new(2, 2, (500_000.0, 7_000_000.0), (10.0, 10.0), vec![0.0; 4]).unwrap();
        assert_eq!(r.cell_centre(0, 0), (500_005.0, 6_999_995.0));
        assert_eq!(r.cell_centre(1, 1), (500_015.0, 6_999_985.0));
    }

    #[test]
    fn frame_kinds_of_common_codes() {
        // WGS 84, ETRS89, GDA94, GRS 1980 (unknown datum), GDA2020: geographic (EPSG registry).
        for code in [4326, 4258, 4283, 4019, 7844] {
            assert_eq!(frame_kind_of_epsg(code), FrameKind::Geographic, "{code}");
        }
        // WGS 84 / UTM 53S, GDA94 / MGA 53, ETRS89 / UTM 32N: projected.
        for code in [32753, 28353, 25832] {
            assert_eq!(frame_kind_of_epsg(code), FrameKind::Projected, "{code}");
        }
    }

    #[test]
    fn nan_nodata_marks_nan_cells() {
        let r = Raster::new(1, 1, (0.0, 0.0), (1.0, 1.0), vec![f64::NAN])
            .unwrap()
            .with_nodata(f64::NAN);
        assert!(r.is_missing(r.values[0]));
        assert!(!r.is_missing(0.0));
    }
}

/// GeoKey ids and values of the GeoTIFF standard (OGC GeoTIFF 1.1), shared by the writer and the
/// reader.
pub mod geokey {
    pub const GT_MODEL_TYPE: u16 = 1024;
    pub const GT_RASTER_TYPE: u16 = 1025;
    pub const GEOGRAPHIC_TYPE: u16 = 2048;
    pub const GEOG_ANGULAR_UNITS: u16 = 2054;
    pub const PROJECTED_CS_TYPE: u16 = 3072;
    pub const PROJ_LINEAR_UNITS: u16 = 3076;
    pub const MODEL_PROJECTED: u16 = 1;
    pub const MODEL_GEOGRAPHIC: u16 = 2;
    pub const RASTER_PIXEL_IS_AREA: u16 = 1;
    pub const RASTER_PIXEL_IS_POINT: u16 = 2;
    pub const USER_DEFINED: u16 = 32767;
    /// EPSG unit codes: metre, degree, and the degree codes a reader accepts (degree; "degree
    /// (supplier to define representation)").
    pub const UNIT_METRE: u16 = 9001;
    pub const UNIT_DEGREE: u16 = 9102;
    pub const UNIT_DEGREES_ACCEPTED: [u16; 2] = [9102, 9122];
}
