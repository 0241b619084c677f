//! The DEM as the engines see it: cell geometry in NED and each cell's prisms.
//!
//! Frame: the raster's projected map frame turned to NED — x = northing (grid north), y = easting
//! (grid east), z = −height above the ellipsoid — metres. Cell (col, row) is centred at
//! easting x_min + (col + ½)·dx, northing y_max − (row + ½)·dy, as in `gravgrad_core::raster`.

use super::mass::{MassModel, Pieces};

/// A north-up grid of elevations (m above the ellipsoid; NaN for a missing cell) and its mass model.
#[derive(Clone, Debug)]
pub struct Grid {
    pub nx: usize,
    pub ny: usize,
    pub x_min: f64,
    pub y_max: f64,
    pub dx: f64,
    pub dy: f64,
    pub elevation: Vec<f64>,
    pub mass: MassModel,
}

impl Grid {
    /// The prisms of cell (`col` eastwards, `row` southwards); none outside the grid.
    #[inline]
    pub fn pieces(&self, col: usize, row: usize) -> Pieces {
        if col >= self.nx || row >= self.ny {
            return Pieces::default();
        }
        let e = self.elevation[row * self.nx + col];
        // The same arithmetic as `Raster::cell_centre`, so that prisms match the simulator's.
        let east = self.x_min + (col as f64 + 0.5) * self.dx;
        let north = self.y_max - (row as f64 + 0.5) * self.dy;
        self.mass
            .pieces(e, north, east, 0.5 * self.dy, 0.5 * self.dx)
    }

    /// Extent of the grid: (west, east, south, north) edges, m.
    pub fn extent(&self) -> [f64; 4] {
        [
            self.x_min,
            self.x_min + self.nx as f64 * self.dx,
            self.y_max - self.ny as f64 * self.dy,
            self.y_max,
        ]
    }
}
