//! The DEM as the engines see it: the elevation raster, its mass model, and each cell's prisms.
//!
//! Frame: the raster's projected map frame turned to NED — x = northing (grid north), y = easting
//! (grid east), z = −height above the ellipsoid — metres. The raster is the workspace's one grid
//! type, [`Raster`]: north-up, cell-centre registered, cell (col, row) centred at easting
//! x_min + (col + ½)·dx, northing y_max − (row + ½)·dy ([`Raster::cell_centre`]).

use super::mass::{MassModel, Pieces};
use gravgrad_core::Raster;

/// A DEM — a north-up raster of elevations, m above the ellipsoid, NaN (its nodata value) for a
/// missing cell — and its mass model. Not a second grid type: the geometry is the raster's.
#[derive(Clone, Debug)]
pub struct DemMass {
    pub elevation: Raster,
    pub mass: MassModel,
}

impl DemMass {
    /// The prisms of cell (`col` eastwards, `row` southwards); none outside the grid.
    #[inline]
    pub fn pieces(&self, col: usize, row: usize) -> Pieces {
        let Some(e) = self.elevation.get(col, row) else {
            return Pieces::default();
        };
        // `Raster::cell_centre`, the simulator's arithmetic, so that prisms match the simulator's.
        let (east, north) = self.elevation.cell_centre(col, row);
        self.mass.pieces(
            e,
            north,
            east,
            0.5 * self.elevation.dy,
            0.5 * self.elevation.dx,
        )
    }

    /// Number of columns (eastwards) and rows (southwards) of the DEM.
    #[inline]
    pub fn size(&self) -> (usize, usize) {
        (self.elevation.nx, self.elevation.ny)
    }

    /// Extent of the grid: (west, east, south, north) edges, m.
    pub fn extent(&self) -> [f64; 4] {
        let r = &self.elevation;
        [
            r.x_min,
            r.x_min + r.nx as f64 * r.dx,
            r.y_max - r.ny as f64 * r.dy,
            r.y_max,
        ]
    }
}
