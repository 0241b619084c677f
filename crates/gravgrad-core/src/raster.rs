//! A single-band, north-up raster: the one grid type of the workspace — terrain models read from
//! files, gridded products, and the grids of the wavenumber-domain operators.
//!
//! Frame: a map frame given by an EPSG code, either projected (eastings and northings in metres)
//! or geographic (longitude and latitude in degrees). Registration: cell-centre (pixel-is-area).
//! Cells are areas: `x_min` and `y_max` are the outer west and north edges of the grid, not cell
//! centres. Rows run from north to south, columns from west to east, so the centre of cell
//! (column `c`, row `r`) is at `x = x_min + (c + 0.5)·dx`, `y = y_max − (r + 0.5)·dy`
//! ([`Raster::cell_centre`]); a value stands for its cell's centre. In the map frame m of the
//! physics notes (x grid north, y grid east, z down), a raster's row index therefore counts
//! *against* m's x and its column index *along* m's y. Values carry the unit of whatever the raster
//! holds (m for heights, s⁻² for gradients inside the code); the raster does not record it.
//!
//! Arrays: [`Raster::view`] (no copy) and [`Raster::to_array2`] give the values as a 2-D array of
//! shape (`ny`, `nx`) indexed `[[row, col]]`, row 0 the northernmost; [`Raster::from_array2`] and
//! [`Raster::with_array2`] take one back.

use ndarray::{Array2, ArrayView2};
use thiserror::Error;

/// A single-band north-up raster, cell-centre registered (see the module documentation for the
/// frame, the registration and the array conversions).
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
        self.check_shape()?;
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

    /// Checks that `values` holds `nx·ny` values and that there is at least one cell.
    fn check_shape(&self) -> Result<(), RasterError> {
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
        Ok(())
    }

    /// A raster whose values are the 2-D array `values` of shape (`ny`, `nx`), indexed
    /// `[[row, col]]` with row 0 the northernmost and column 0 the westernmost, with its north-west
    /// corner at `corner` = (`x_min`, `y_max`) and cells of `cell` = (`dx`, `dy`), both in the
    /// frame's units (m or degrees). Cell-centre registration, as [`Raster::new`]; no EPSG code and
    /// no nodata value. The array's memory order does not matter (a transposed or sliced array is
    /// copied into row-major order).
    ///
    /// ```
    /// use gravgrad_core::Raster;
    /// use ndarray::array;
    ///
    /// // Two rows of three 10 m cells; the north-west corner at (500 000 E, 7 000 000 N).
    /// let heights = array![[1.0, 2.0, 3.0], [4.0, 5.0, 6.0]];
    /// let r = Raster::from_array2(heights, (500_000.0, 7_000_000.0), (10.0, 10.0)).unwrap();
    /// assert_eq!((r.nx, r.ny), (3, 2));
    /// // Row 0 is the northern row: cell (column 2, row 0) is the north-east cell.
    /// assert_eq!(r.get(2, 0), Some(3.0));
    /// assert_eq!(r.cell_centre(2, 0), (500_025.0, 6_999_995.0));
    /// ```
    pub fn from_array2(
        values: Array2<f64>,
        corner: (f64, f64),
        cell: (f64, f64),
    ) -> Result<Self, RasterError> {
        let (ny, nx) = values.dim();
        Self::new(nx, ny, corner, cell, row_major(values))
    }

    /// A raster on the same cells as this one (size, corner, cell size and EPSG code kept; no nodata
    /// value) holding `values`, of shape (`ny`, `nx`) with row 0 the northernmost; an error if
    /// the shape differs from this raster's.
    ///
    /// ```
    /// use gravgrad_core::Raster;
    ///
    /// let gzz = Raster::new(2, 2, (0.0, 100.0), (50.0, 50.0), vec![1.0, 2.0, 3.0, 4.0])
    ///     .unwrap()
    ///     .with_epsg(32753);
    /// let doubled = gzz.with_array2(gzz.view().unwrap().mapv(|v| 2.0 * v)).unwrap();
    /// assert_eq!(doubled.values, [2.0, 4.0, 6.0, 8.0]);
    /// assert_eq!((doubled.x_min, doubled.y_max, doubled.epsg), (0.0, 100.0, Some(32753)));
    /// ```
    pub fn with_array2(&self, values: Array2<f64>) -> Result<Self, RasterError> {
        let (ny, nx) = values.dim();
        if (nx, ny) != (self.nx, self.ny) {
            return Err(RasterError::Shape {
                nx: self.nx,
                ny: self.ny,
                expected: self.nx.saturating_mul(self.ny),
                got: values.len(),
            });
        }
        let r = Self {
            nx: self.nx,
            ny: self.ny,
            x_min: self.x_min,
            y_max: self.y_max,
            dx: self.dx,
            dy: self.dy,
            epsg: self.epsg,
            nodata: None,
            values: row_major(values),
        };
        r.check()?;
        Ok(r)
    }

    /// The values as a 2-D array view of shape (`ny`, `nx`), indexed `[[row, col]]` with row 0 the
    /// northernmost and column 0 the westernmost; no copy. An error if `values` does not hold
    /// `nx·ny` values (the fields are public).
    ///
    /// ```
    /// use gravgrad_core::Raster;
    ///
    /// // Three columns, two rows; values row-major from the north-west cell.
    /// let r = Raster::new(3, 2, (0.0, 20.0), (10.0, 10.0), vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.0])
    ///     .unwrap();
    /// let v = r.view().unwrap();
    /// assert_eq!(v.dim(), (2, 3));
    /// assert_eq!(v[[1, 0]], 4.0); // the south-west cell
    /// assert_eq!(v.as_ptr(), r.values.as_ptr()); // the raster's own memory
    /// ```
    pub fn view(&self) -> Result<ArrayView2<'_, f64>, RasterError> {
        self.check_shape()?;
        ArrayView2::from_shape((self.ny, self.nx), &self.values).map_err(|_| RasterError::Shape {
            nx: self.nx,
            ny: self.ny,
            expected: self.nx.saturating_mul(self.ny),
            got: self.values.len(),
        })
    }

    /// The values copied into a 2-D array of shape (`ny`, `nx`), indexed `[[row, col]]` with row 0
    /// the northernmost; see [`Raster::view`] for the errors.
    ///
    /// ```
    /// use gravgrad_core::Raster;
    ///
    /// let r = Raster::new(2, 2, (0.0, 20.0), (10.0, 10.0), vec![1.0, 2.0, 3.0, 4.0]).unwrap();
    /// let a = r.to_array2().unwrap();
    /// assert_eq!(a.row(0).to_vec(), [1.0, 2.0]); // the northern row, west to east
    /// // A round trip keeps values and geometry.
    /// let back = Raster::from_array2(a, (r.x_min, r.y_max), (r.dx, r.dy)).unwrap();
    /// assert_eq!(back, r);
    /// ```
    pub fn to_array2(&self) -> Result<Array2<f64>, RasterError> {
        self.view().map(|v| v.to_owned())
    }

    /// The value of cell (`col` eastwards, `row` southwards), or `None` outside the grid.
    /// A missing cell returns its nodata value; use [`Raster::is_missing`] to tell.
    #[inline]
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
    #[inline]
    pub fn cell_centre(&self, col: usize, row: usize) -> (f64, f64) {
        (
            self.x_min + (col as f64 + 0.5) * self.dx,
            self.y_max - (row as f64 + 0.5) * self.dy,
        )
    }
}

/// The values of `a` in row-major order, without a copy when `a` is already laid out so.
fn row_major(a: Array2<f64>) -> Vec<f64> {
    if !a.is_standard_layout() {
        return a.iter().copied().collect();
    }
    let n = a.len();
    let (mut v, offset) = a.into_raw_vec_and_offset();
    // A standard-layout array is one contiguous block of `n` values starting at `offset`.
    v.drain(..offset.unwrap_or(0).min(v.len()));
    v.truncate(n);
    v
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
    fn arrays_are_indexed_row_then_column_from_the_north_west() {
        // 3 columns × 2 rows: the array has shape (rows, columns) and [[row, col]] is the value
        // `get(col, row)` returns, row 0 northernmost.
        let r = Raster::new(
            3,
            2,
            (0.0, 20.0),
            (10.0, 10.0),
            (0..6).map(f64::from).collect(),
        )
        .unwrap();
        let v = r.view().unwrap();
        assert_eq!(v.dim(), (2, 3));
        for row in 0..2 {
            for col in 0..3 {
                assert_eq!(Some(v[[row, col]]), r.get(col, row));
            }
        }
        assert_eq!(r.to_array2().unwrap(), v);
    }

    #[test]
    fn arrays_in_any_memory_order_come_back_row_major() {
        // A transposed array (column-major memory) and a sliced one (an offset into a larger
        // buffer) both give the values in row-major order of their logical index.
        let a = ndarray::array![[1.0, 2.0], [3.0, 4.0], [5.0, 6.0]];
        let t = a.reversed_axes(); // logically [[1, 3, 5], [2, 4, 6]]
        assert!(!t.is_standard_layout());
        let r = Raster::from_array2(t, (0.0, 0.0), (1.0, 1.0)).unwrap();
        assert_eq!((r.nx, r.ny), (3, 2));
        assert_eq!(r.values, [1.0, 3.0, 5.0, 2.0, 4.0, 6.0]);
        let mut b = ndarray::Array2::from_shape_fn((4, 2), |(i, j)| (10 * i + j) as f64);
        b.slice_axis_inplace(ndarray::Axis(0), ndarray::Slice::from(1..3));
        assert!(b.is_standard_layout());
        let r = Raster::from_array2(b, (0.0, 0.0), (1.0, 1.0)).unwrap();
        assert_eq!(r.values, [10.0, 11.0, 20.0, 21.0]);
    }

    #[test]
    fn array_shapes_and_geometry_are_checked() {
        let r = Raster::new(2, 2, (0.0, 0.0), (1.0, 1.0), vec![0.0; 4]).unwrap();
        assert!(matches!(
            r.with_array2(ndarray::Array2::zeros((2, 3))),
            Err(RasterError::Shape { .. })
        ));
        let broken = Raster {
            values: vec![0.0; 3],
            ..r.clone()
        };
        assert!(matches!(
            broken.view(),
            Err(RasterError::Shape { got: 3, .. })
        ));
        assert!(matches!(
            Raster::from_array2(ndarray::Array2::zeros((0, 2)), (0.0, 0.0), (1.0, 1.0)),
            Err(RasterError::Empty { .. })
        ));
        assert!(matches!(
            Raster::from_array2(ndarray::Array2::zeros((1, 1)), (0.0, 0.0), (0.0, 1.0)),
            Err(RasterError::CellSize { .. })
        ));
        // with_array2 keeps the frame and drops the nodata value.
        let tagged = r.clone().with_epsg(32753).with_nodata(-9999.0);
        let out = tagged.with_array2(ndarray::Array2::ones((2, 2))).unwrap();
        assert_eq!((out.epsg, out.nodata), (Some(32753), None));
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
