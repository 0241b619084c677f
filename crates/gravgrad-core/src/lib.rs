//! The shared vocabulary of gravgrad.
//!
//! Units and physical constants, the symmetric gravity-gradient tensor and its invariants, attitude
//! rotations between the sensor frame and local north-east-down, the geometry of accelerometer pairs
//! with the observability of a pair set, the in-memory flight table, the single-band north-up
//! raster ([`raster`]), and the error locations every crate uses to say where an input went wrong.
//!
//! This crate does no I/O and knows nothing of file layouts: it is plain data and plain maths,
//! usable from any program. Conventions follow `docs/physics.md`: inside the code gradients are in
//! s⁻², gravity in m/s², angles in radians; conversion to Eötvös, mGal and degrees happens only at
//! the edges, through [`units`].

pub mod attitude;
pub mod ellipsoid;
pub mod error;
pub mod limits;
pub mod lstsq;
pub mod mat3;
pub mod pairs;
pub mod projection;
pub mod raster;
pub mod stats;
pub mod table;
pub mod tensor;
pub mod units;

pub use attitude::Attitude;
pub use error::{Location, Problem, Severity};
pub use mat3::{Mat3, Vec3};
pub use raster::Raster;
pub use tensor::SymTensor;
