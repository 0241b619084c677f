//! Synthetic surveys whose answer is known: geology, terrain, survey plan, flight dynamics and
//! instrument errors, turned into raw flight logs by the instrument equation of `docs/physics.md`.
//! This crate returns data; the binary writes the files. Work in progress (issue 4): the scenario,
//! path, terrain, truth and instrument model are here; file output and scoring follow.

pub mod calflight;
pub mod flights;
pub mod noise;
pub mod path;
pub mod scenario;
pub mod score;
pub mod simulate;
pub mod terrain;
pub mod terrain_truth;
