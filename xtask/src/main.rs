//! Developer tasks: `cargo run -p xtask -- <task>`.
//!
//! - `sample-log`: write a sample raw flight log of any size (tests, benchmarks).
//! - `prism-accuracy`: the prism kernels' error against distance.
//! - `bench-prisms`: timing of the prism tensor (driven by bench/prisms.py).
//! - `bench-terrain`: the terrain engine's benchmark data and timings (driven by bench/terrain.py).
//! - `bench-grid`: minimum-curvature gridding of a CSV of points (driven by bench/grid.py).
//! - `bench-reduce`: calibration, solve and rotation of a recipe's flights, timed in process.
//! - `mutate`: the readers' long mutation test (docs/reliability.md).

mod accuracy;
mod benchgrid;
mod benchprisms;
mod benchreduce;
mod benchterrain;
mod mutate;
mod synthlog;
mod writers;

use clap::{Parser, Subcommand};
use gravgrad_ingest::mutate::BinaryFormat;
use std::path::{Path, PathBuf};
use synthlog::{LogSpec, generate, pair_geometry, pair_ids};

#[derive(Parser)]
struct Cli {
    #[command(subcommand)]
    task: Task,
}

#[derive(Subcommand)]
enum Task {
    /// Write a sample raw flight log (format from the extension: .csv, .parquet, .h5).
    SampleLog {
        #[arg(long)]
        out: PathBuf,
        #[arg(long, default_value_t = 100_000)]
        rows: usize,
        /// Number of accelerometer pairs (9 = full tensor; more repeat the layout).
        #[arg(long, default_value_t = 9)]
        pairs: usize,
        #[arg(long, default_value_t = 50.0)]
        rate: f64,
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// Leave out the `line` column.
        #[arg(long)]
        no_line: bool,
        /// Leave out `temp` and `clearance`.
        #[arg(long)]
        no_extras: bool,
        /// Also write the matching instrument file here.
        #[arg(long)]
        instrument: Option<PathBuf>,
    },
    /// Print the prism kernels' error against distance (docs/methods/forward.md).
    PrismAccuracy,
    /// Time the prism tensor on the benchmark geometry of bench/prisms.py (JSON on stdout).
    BenchPrisms {
        /// Prisms per side of the terrain block.
        #[arg(long, default_value_t = 60)]
        side: usize,
        /// Observation points per side of the lattice.
        #[arg(long, default_value_t = 20)]
        points: usize,
        #[arg(long, default_value_t = 1)]
        threads: usize,
        #[arg(long, default_value_t = 5)]
        repeat: usize,
    },
    /// Terrain-engine benchmark: `generate` the DEM and points (.npy in --out), time the `fast`
    /// engine on every point, or the `exact` sum on the subset (JSON on stdout).
    BenchTerrain {
        #[arg(long)]
        mode: String,
        /// Cells per side of the DEM.
        #[arg(long, default_value_t = 1000)]
        size: usize,
        /// Cell size, m.
        #[arg(long, default_value_t = 25.0)]
        cell: f64,
        #[arg(long, default_value_t = 100_000)]
        points: usize,
        /// Points of the subset timed with the all-exact sum.
        #[arg(long, default_value_t = 30)]
        subset: usize,
        /// Accuracy target of the fast engine, E.
        #[arg(long, default_value_t = 0.1)]
        accuracy: f64,
        #[arg(long, default_value_t = 2)]
        threads: usize,
        #[arg(long, default_value_t = 1)]
        seed: u64,
        #[arg(long, default_value = "bench-out/terrain")]
        out: PathBuf,
    },
    /// Time calibration, solve and rotation of every flight of a recipe (median of `repeat` runs of
    /// the pipeline `gravgrad run` uses; the log is read once).
    BenchReduce {
        #[arg(long)]
        recipe: PathBuf,
        #[arg(long, default_value_t = 2)]
        threads: usize,
        #[arg(long, default_value_t = 5)]
        repeat: usize,
    },
    /// Grid a CSV of points (easting, northing, value) by minimum curvature; raw float64 out.
    BenchGrid {
        #[arg(long)]
        points: PathBuf,
        /// West edge of the grid, m.
        #[arg(long)]
        west: f64,
        /// North edge of the grid, m.
        #[arg(long)]
        north: f64,
        #[arg(long)]
        nx: usize,
        #[arg(long)]
        ny: usize,
        /// Cell size, m.
        #[arg(long)]
        cell: f64,
        #[arg(long, default_value_t = 0.0)]
        tension: f64,
        /// Convergence limit in the data's unit (default: 1e-4 of the data's RMS about a plane).
        #[arg(long)]
        convergence: Option<f64>,
        /// Blanking distance, m.
        #[arg(long)]
        blanking: Option<f64>,
        #[arg(long, default_value_t = 2000)]
        max_sweeps: usize,
        #[arg(long, default_value_t = 2)]
        threads: usize,
        /// Grid every datum as it is instead of one block mean per cell.
        #[arg(long)]
        no_block_mean: bool,
        /// Also write the block means (easting, northing, value; CSV) to this file.
        #[arg(long)]
        block_means_out: Option<PathBuf>,
        #[arg(long)]
        out: PathBuf,
    },
    /// The readers' long mutation test: mutated copies of valid Parquet, HDF5, GeoTIFF and NetCDF
    /// files, each read in a child process under an address-space limit; prints counts, the worst
    /// peak resident size and the worst time per format (docs/reliability.md).
    Mutate {
        /// parquet, hdf5, geotiff, netcdf or all.
        #[arg(long, default_value = "all")]
        format: String,
        /// Cases per format.
        #[arg(long, default_value_t = 10_000)]
        cases: usize,
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// Resident memory allowed over twice the file's size, MiB.
        #[arg(long, default_value_t = 64)]
        allowance_mb: u64,
        /// Address-space limit of the reading process, MiB.
        #[arg(long, default_value_t = 1024)]
        address_space_mb: u64,
        /// Time limit per case, s.
        #[arg(long, default_value_t = 5.0)]
        timeout: f64,
        /// Cases per child process.
        #[arg(long, default_value_t = 500)]
        batch: usize,
        /// Folder that receives the files of failing cases.
        #[arg(long, default_value = "mutate-failures")]
        keep: PathBuf,
        /// Also keep the files of cases slower than this, ms.
        #[arg(long, default_value_t = 1000)]
        keep_slower_ms: u64,
    },
    /// One batch of `mutate`, run in the child process (not for direct use).
    #[command(hide = true)]
    MutateChild {
        #[arg(long)]
        format: String,
        files: Vec<PathBuf>,
    },
}

/// The allocator of the `gravgrad` command, so that timings of its pipeline match.
#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    match Cli::parse().task {
        Task::SampleLog {
            out,
            rows,
            pairs,
            rate,
            seed,
            no_line,
            no_extras,
            instrument,
        } => {
            let ids = pair_ids(pairs);
            let spec = LogSpec {
                rows,
                rate_hz: rate,
                seed,
                pairs: ids.clone(),
                with_line_column: !no_line,
                with_extras: !no_extras,
                line_length_m: 6000.0,
            };
            let log = generate(&spec);
            write_log(&log, &out)?;
            if let Some(p) = instrument {
                std::fs::write(p, instrument_toml("sample triad", rate, &ids))?;
            }
        }
        Task::Mutate {
            format,
            cases,
            seed,
            allowance_mb,
            address_space_mb,
            timeout,
            batch,
            keep,
            keep_slower_ms,
        } => {
            let formats = if format == "all" {
                BinaryFormat::ALL.to_vec()
            } else {
                vec![parse_format(&format)?]
            };
            mutate::run(&mutate::Options {
                formats,
                cases,
                seed,
                allowance_mb,
                address_space_mb,
                timeout_s: timeout,
                batch: batch.max(1),
                keep,
                keep_slower_ms,
            })?
        }
        Task::MutateChild { format, files } => mutate::child(parse_format(&format)?, &files)?,
        Task::PrismAccuracy => accuracy::run(),
        Task::BenchReduce {
            recipe,
            threads,
            repeat,
        } => benchreduce::run(&recipe, threads, repeat)?,
        Task::BenchPrisms {
            side,
            points,
            threads,
            repeat,
        } => benchprisms::run(side, points, threads, repeat)?,
        Task::BenchTerrain {
            mode,
            size,
            cell,
            points,
            subset,
            accuracy,
            threads,
            seed,
            out,
        } => benchterrain::run(&benchterrain::Options {
            mode: &mode,
            size,
            cell,
            points,
            subset,
            accuracy_e: accuracy,
            threads,
            seed,
            out: &out,
        })?,
        Task::BenchGrid {
            points,
            west,
            north,
            nx,
            ny,
            cell,
            tension,
            convergence,
            blanking,
            max_sweeps,
            threads,
            no_block_mean,
            block_means_out,
            out,
        } => benchgrid::run(&benchgrid::Options {
            points: &points,
            spec: gravgrad_grid::GridSpec {
                x_min: west,
                y_max: north,
                nx,
                ny,
                cell,
                tension,
                blanking,
                convergence,
                max_sweeps,
                epsg: None,
                block_mean: !no_block_mean,
            },
            threads,
            block_means_out: block_means_out.as_deref(),
            out: &out,
        })?,
    }
    Ok(())
}

fn parse_format(name: &str) -> Result<BinaryFormat, String> {
    BinaryFormat::from_name(name)
        .ok_or_else(|| format!("--format {name}: expected parquet, hdf5, geotiff, netcdf or all"))
}

fn write_log(log: &synthlog::SampleLog, out: &Path) -> Result<(), Box<dyn std::error::Error>> {
    match out.extension().and_then(|e| e.to_str()) {
        Some("csv") => writers::write_csv(log, out),
        Some("parquet") => writers::write_parquet(log, out),
        Some("h5") => writers::write_hdf5(log, out, "flight"),
        _ => Err(format!("{}: extension must be .csv, .parquet or .h5", out.display()).into()),
    }
}

/// The instrument file for a pair set of the standard layout.
pub fn instrument_toml(name: &str, rate: f64, ids: &[String]) -> String {
    let mut s =
        format!("layout = \"instrument/1\"\nname = \"{name}\"\nsample_rate_hz = {rate:?}\n");
    for id in ids {
        if let Some((c, b, a)) = pair_geometry(id) {
            s.push_str(&format!(
                "\n[[pair]]\nid = \"{id}\"\ncenter_m = [{:?}, {:?}, {:?}]\nbaseline_m = [{:?}, {:?}, {:?}]\naxis = [{:?}, {:?}, {:?}]\n",
                c[0], c[1], c[2], b[0], b[1], b[2], a[0], a[1], a[2]
            ));
        }
    }
    s
}
