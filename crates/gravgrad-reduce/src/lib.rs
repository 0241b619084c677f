//! Reductions of gravity-gradient data.
//!
//! - [`terrain`]: the gradient of the terrain's mass from a DEM — every cell a vertical prism —
//!   by a fast engine (exact prisms near each point, aggregated blocks farther away, with a stated
//!   error bound and an accuracy target in Eötvös) and by the all-exact prism sum.
//!
//! Frame: points in a projected map frame (easting, northing in metres; height above the
//! ellipsoid in metres); tensors in the map frame's NED (x grid north, y grid east, z down), s⁻².

pub mod terrain;
