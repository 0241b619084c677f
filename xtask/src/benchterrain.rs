//! The terrain-engine benchmark, the Rust side of bench/terrain.py: an invented rough DEM and
//! points draped over it, generated deterministically; the fast engine timed on every point and the
//! all-exact sum on a subset.
//!
//! Frame: a projected map frame in metres (easting, northing, height above the ellipsoid); the DEM
//! north-up with its north-west corner at (500 000, 7 000 000); tensors in the map frame's NED, s⁻².

use gravgrad_core::SymTensor;
use gravgrad_core::raster::Raster;
use gravgrad_reduce::terrain::{TerrainModel, TerrainSettings};
use gravgrad_sim::noise::Rng;
use rayon::prelude::*;
use std::io::Write;
use std::path::Path;
use std::time::Instant;

/// North-west corner of the benchmark DEM (easting, northing), m.
const CORNER: (f64, f64) = (500_000.0, 7_000_000.0);

/// An invented rough DEM of `size` × `size` cells of `cell` m: a 400 m plain with one Gaussian hill
/// (50–300 m high, 150–700 m wide) per 2 km² and 64 plane waves of rough ground (8 m RMS,
/// wavelengths 80–600 m). Row-major from the north-west corner.
pub fn dem(size: usize, cell: f64, seed: u64) -> Raster {
    let span = size as f64 * cell;
    let mut rng = Rng::new(seed, 0x7E44);
    let hills: Vec<[f64; 4]> = (0..((span * span / 2.0e6).ceil() as usize).max(1))
        .map(|_| {
            [
                span * rng.uniform(),
                span * rng.uniform(),
                50.0 + 250.0 * rng.uniform(),
                150.0 + 550.0 * rng.uniform(),
            ]
        })
        .collect();
    let amp = 8.0 * (2.0f64 / 64.0).sqrt();
    let waves: Vec<[f64; 3]> = (0..64)
        .map(|_| {
            let k = 2.0 * std::f64::consts::PI / (80.0 + 520.0 * rng.uniform());
            let az = 2.0 * std::f64::consts::PI * rng.uniform();
            [
                k * az.cos(),
                k * az.sin(),
                2.0 * std::f64::consts::PI * rng.uniform(),
            ]
        })
        .collect();
    let values: Vec<f64> = (0..size * size)
        .into_par_iter()
        .map(|k| {
            let (row, col) = (k / size, k % size);
            let x = (col as f64 + 0.5) * cell; // east of the west edge
            let y = span - (row as f64 + 0.5) * cell; // north of the south edge
            let mut h = 400.0;
            for [hx, hy, hh, w] in &hills {
                let d2 = (x - hx).powi(2) + (y - hy).powi(2);
                if d2 < 25.0 * w * w {
                    h += hh * (-d2 / (w * w)).exp();
                }
            }
            for [kx, ky, ph] in &waves {
                h += amp * (kx * x + ky * y + ph).cos();
            }
            h
        })
        .collect();
    Raster {
        nx: size,
        ny: size,
        x_min: CORNER.0,
        y_max: CORNER.1,
        dx: cell,
        dy: cell,
        epsg: Some(32753),
        nodata: None,
        values,
    }
}

/// `n` points (easting, northing, height) uniformly over the DEM less `inset` m on every side, each
/// 80–120 m above the cell it lies over.
pub fn points(dem: &Raster, n: usize, inset: f64, seed: u64) -> Vec<[f64; 3]> {
    let mut rng = Rng::new(seed, 0x9011);
    let (w, h) = (dem.nx as f64 * dem.dx, dem.ny as f64 * dem.dy);
    (0..n)
        .map(|_| {
            let e = dem.x_min + inset + (w - 2.0 * inset) * rng.uniform();
            let nn = dem.y_max - inset - (h - 2.0 * inset) * rng.uniform();
            let col = (((e - dem.x_min) / dem.dx) as usize).min(dem.nx - 1);
            let row = (((dem.y_max - nn) / dem.dy) as usize).min(dem.ny - 1);
            let ground = dem.values[row * dem.nx + col];
            [e, nn, ground + 80.0 + 40.0 * rng.uniform()]
        })
        .collect()
}

/// `k` distinct indices below `n`, in increasing order.
pub fn subset(n: usize, k: usize, seed: u64) -> Vec<usize> {
    let mut rng = Rng::new(seed, 0x5B5E);
    let mut out: Vec<usize> = Vec::new();
    while out.len() < k.min(n) {
        let i = ((rng.uniform() * n as f64) as usize).min(n - 1);
        if !out.contains(&i) {
            out.push(i);
        }
    }
    out.sort_unstable();
    out
}

/// Writes a little-endian f64 array of `shape` as a NumPy .npy file (format version 1.0).
fn write_npy(path: &Path, shape: &[usize], data: &[f64]) -> std::io::Result<()> {
    let dims: Vec<String> = shape.iter().map(|d| d.to_string()).collect();
    let shape_txt = if shape.len() == 1 {
        format!("({},)", dims[0])
    } else {
        format!("({})", dims.join(", "))
    };
    let mut header = format!("{{'descr': '<f8', 'fortran_order': False, 'shape': {shape_txt}, }}");
    let total = 10 + header.len() + 1;
    header.push_str(&" ".repeat((64 - total % 64) % 64));
    header.push('\n');
    let mut f = std::io::BufWriter::new(std::fs::File::create(path)?);
    f.write_all(b"\x93NUMPY\x01\x00")?;
    f.write_all(&(header.len() as u16).to_le_bytes())?;
    f.write_all(header.as_bytes())?;
    for v in data {
        f.write_all(&v.to_le_bytes())?;
    }
    f.flush()
}

fn flat(ts: &[SymTensor]) -> Vec<f64> {
    ts.iter().flat_map(|t| t.to_array()).collect()
}

/// Options of one benchmark run.
pub struct Options<'a> {
    pub mode: &'a str,
    pub size: usize,
    pub cell: f64,
    pub points: usize,
    pub subset: usize,
    pub accuracy_e: f64,
    pub threads: usize,
    pub seed: u64,
    pub out: &'a Path,
}

/// Runs one mode and prints one JSON object: `generate` writes the DEM, points and subset as .npy;
/// `fast` times the fast engine on every point and writes its subset results; `exact` times the
/// all-exact sum on the subset and writes it.
pub fn run(o: &Options<'_>) -> Result<(), Box<dyn std::error::Error>> {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(o.threads)
        .build()?;
    std::fs::create_dir_all(o.out)?;
    let t0 = Instant::now();
    let dem = pool.install(|| dem(o.size, o.cell, o.seed));
    let pts = points(&dem, o.points, 0.1 * o.size as f64 * o.cell, o.seed);
    let idx = subset(pts.len(), o.subset, o.seed);
    let sub: Vec<[f64; 3]> = idx.iter().map(|&i| pts[i]).collect();
    let generate_s = t0.elapsed().as_secs_f64();
    let settings = TerrainSettings {
        accuracy_e: o.accuracy_e,
        ..TerrainSettings::default()
    };
    match o.mode {
        "generate" => {
            write_npy(&o.out.join("dem.npy"), &[dem.ny, dem.nx], &dem.values)?;
            let p: Vec<f64> = pts.iter().flatten().copied().collect();
            write_npy(&o.out.join("points.npy"), &[pts.len(), 3], &p)?;
            let s: Vec<f64> = idx.iter().map(|&i| i as f64).collect();
            write_npy(&o.out.join("subset.npy"), &[s.len()], &s)?;
            println!(
                "{{\"mode\": \"generate\", \"x_min\": {}, \"y_max\": {}, \"cell\": {}, \"nx\": {}, \"ny\": {}, \"density\": {}, \"generate_s\": {generate_s}}}",
                dem.x_min, dem.y_max, dem.dx, dem.nx, dem.ny, settings.density_kg_m3
            );
        }
        "fast" => {
            let t = Instant::now();
            let model = pool.install(|| TerrainModel::new(&dem, &settings))?;
            let build_s = t.elapsed().as_secs_f64();
            let t = Instant::now();
            let all = pool.install(|| model.tensor_with_bound(&pts));
            let fast_s = t.elapsed().as_secs_f64();
            let sub_fast: Vec<SymTensor> = idx.iter().map(|&i| all[i].0).collect();
            write_npy(
                &o.out.join("fast_subset.npy"),
                &[idx.len(), 6],
                &flat(&sub_fast),
            )?;
            let max_bound = all.iter().map(|r| r.1).fold(0.0, f64::max);
            println!(
                "{{\"mode\": \"fast\", \"threads\": {}, \"points\": {}, \"reference_m\": {}, \"build_s\": {build_s}, \"fast_s\": {fast_s}, \"max_bound_e\": {}, \"accuracy_e\": {}}}",
                o.threads,
                pts.len(),
                model.reference_m(),
                max_bound / 1e-9,
                o.accuracy_e
            );
        }
        "exact" => {
            let model = pool.install(|| TerrainModel::new(&dem, &settings))?;
            let t = Instant::now();
            let ex = pool.install(|| model.tensor_exact(&sub));
            let exact_s = t.elapsed().as_secs_f64();
            write_npy(&o.out.join("exact_subset.npy"), &[idx.len(), 6], &flat(&ex))?;
            println!(
                "{{\"mode\": \"exact\", \"threads\": {}, \"points\": {}, \"reference_m\": {}, \"exact_s\": {exact_s}}}",
                o.threads,
                sub.len(),
                model.reference_m()
            );
        }
        other => return Err(format!("unknown mode `{other}`: generate, fast or exact").into()),
    }
    Ok(())
}
