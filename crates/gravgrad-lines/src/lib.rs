//! Line processing of a gravity-gradient survey: what happens to each flight line between the
//! per-sample tensor and the grid.
//!
//! - [`filter`]: zero-phase along-track low-pass by cutoff wavelength (forward–backward Butterworth
//!   on a uniform grid in along-track distance, so lines flown at varying speed are filtered by
//!   wavelength, not by time).
//! - [`spectrum`]: Welch's averaged-periodogram power spectral density (Welch 1967).
//! - [`crossover`]: intersections of survey lines with tie lines and the difference survey − tie.
//! - [`mod@level`]: least-squares levelling from the crossovers (per-line offset, optional linear trend in
//!   time; tie lines held fixed or every line solved with a zero-mean constraint).
//! - [`motion`]: the motion-correlation test — each component regressed, in the band where the
//!   aircraft's motion lives, on specific force, its products, angular rate and acceleration.
//! - [`qc`]: per-line metrics (noise, trace, angular acceleration, turbulence, clearance, line
//!   deviation, gaps, spikes, motion correlation) and a pass/fail verdict against the recipe's `[qc]`
//!   tolerances.
//!
//! Frames and units: positions are projected grid metres (x east, y north of the survey's projection;
//! only distances and intersections are used, so any right-handed planar frame works), time in
//! seconds, gradients in s⁻² as everywhere inside gravgrad (`docs/physics.md`) unless a name ends in
//! `_e` (Eötvös, 1 E = 1e-9 s⁻²). Filters, crossovers and levelling are linear and keep the unit of
//! the values they are given. This crate does no I/O and prints nothing.

pub mod crossover;
pub mod error;
pub mod filter;
pub mod level;
pub mod motion;
pub mod qc;
mod solve;
mod special;
pub mod spectrum;

pub use crossover::{Crossover, Track, find_crossovers};
pub use error::LinesError;
pub use filter::{LowPass, low_pass_along_track};
pub use level::{LevelMode, LevelSettings, Levelling, LineCorrection, level};
pub use motion::{MotionFit, MotionSeries, MotionSettings, motion_correlation};
pub use qc::{LineInputs, LineMetrics, QcSettings, Tolerances, Verdict, assess_line};
