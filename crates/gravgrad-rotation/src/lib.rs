//! Removing the platform-rotation term and solving the gradient tensor from accelerometer pairs.
//!
//! Each calibrated pair k observes y_k = −(a_k − b_k) = n_kᵀ·S·b_k − α·(b_k × n_k) with S = sym(G − ΩΩ)
//! and α = ω̇ (`docs/physics.md`; Jekeli 2001; Rummel et al. 2011). Per sample: least squares for S
//! and, where the pairs see it, α; else α from the low-passed derivative of the gyro rates
//! ([`gyro`]); optionally the trace constraint Gxx + Gyy + Gzz = 0. Then G_s = S + ΩΩ and
//! G_n = C_sn·G_s·C_snᵀ. The design depends only on the instrument, so its pseudo-inverse is formed
//! once and each sample costs a small matrix–vector product.
//!
//! Frames and units: pair outputs m/s² (sensor frame), rates rad/s (sensor axes), attitude in degrees
//! as logged, tensors s⁻² (sensor frame s, then NED n). This crate does no I/O.

mod first_touch;
pub mod gyro;
pub mod solve;

pub use solve::{Solution, SolveSettings, solve};
