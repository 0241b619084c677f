//! Per-pair calibration from the survey data itself (`docs/physics.md`): to first order a pair's
//! difference d = a − b picks up κ·f(O) (scale and misalignment mismatch, κ of order 1e-5, which must
//! be known to about 1e-10), plus bias, drift and a temperature term. κ is estimated by least squares
//! of d against the specific force in a band where aircraft motion dominates and geology is weak
//! (0.05–1 Hz by default, common practice), with the gyro-derived angular acceleration as extra
//! regressors so that cross pairs' rotation signal does not leak into κ; bias, drift and temperature
//! are then fitted to what remains over the whole band. Every coefficient comes with a standard error
//! that accounts for the residuals' autocorrelation (effective sample size, Bretherton et al. 1999,
//! J. Climate 12:1990–2009).
//!
//! Units: m/s² for pair outputs and f, rad/s² for α, seconds, °C. No I/O. Self-gradient: when the aircraft's attitude is logged, its
//! roll and pitch relative to the platform join bias, drift and temperature as regressors (the
//! aircraft's own mass moves relative to the sensor as it banks and pitches). A calibration file
//! ([`mod@file`]) carries the coefficients to later flights.

pub mod apply;
pub mod bandpass;
pub mod channels;
pub mod crossings;
pub mod estimate;
pub mod file;
pub mod gyro_bias;
pub mod joint;
pub mod stability;
