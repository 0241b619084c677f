//! The library half of the `gravgrad` command: the per-flight pipeline, so that developer tools
//! (`xtask bench-reduce`) time the very code `gravgrad run` runs. The command itself is `main.rs`.

pub mod pipeline;
