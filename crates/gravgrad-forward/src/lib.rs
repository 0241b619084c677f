//! Potential-field kernels: the physics every later stage and the simulator rely on.
//!
//! - [`point`]: point mass and homogeneous sphere — potential, gravity, gradient tensor.
//! - [`prism`]: right rectangular prism (Nagy, Papp & Benedek 2000, J. Geodesy 74:552–560, with the
//!   2002 erratum), in coordinates relative to the observation point, switching to Gauss–Legendre
//!   point masses far away where the closed form loses digits.
//! - [`mod@column`]: a vertical column of square cross-section seen from afar — the finite vertical line
//!   mass and its correction for the square's spread, with a stated error bound.
//! - [`normal`]: the normal field of GRS80 or WGS84 from the closed-form potential in ellipsoidal
//!   coordinates (Heiskanen & Moritz 1967, eq. 2-126), with exact second derivatives by hyper-dual
//!   numbers (Fike & Alonso 2011).
//! - [`spectral`]: wavenumber-domain operators on regular grids (derivatives, Gzz → the other
//!   components and gz, upward continuation), with mirror padding that does not wrap.
//!
//! Frame: unless a function says otherwise, local Cartesian north-east-down (x north, y east, z down),
//! metres; densities kg/m³; results in SI (m²/s², m/s², s⁻²). Sign convention of `docs/physics.md`:
//! V = GM/r > 0, g = ∇V, so g_z > 0 and Gzz > 0 above a mass excess. This crate knows nothing of
//! surveys, files or units of display.

pub mod column;
pub mod gauss;
pub mod hyperdual;
pub mod normal;
pub mod point;
pub mod prism;
pub mod spectral;
