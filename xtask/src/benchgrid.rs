//! The Rust side of bench/grid.py: grid a CSV of scattered points (easting m, northing m, value;
//! no header) by minimum curvature and write the grid as raw little-endian float64, north-up,
//! row-major (the order `gmt grd2xyz -ZTLd` writes). Prints the gridding report as JSON. On
//! request also writes the block means on the grid's cells as CSV, each number in the shortest
//! form that reads back to the same float64 (so gridding them again gives the same means).

use gravgrad_grid::{GridSpec, block_means, grid_points};
use std::io::Write;
use std::path::Path;
use std::time::Instant;

pub struct Options<'a> {
    pub points: &'a Path,
    pub spec: GridSpec,
    pub threads: usize,
    pub block_means_out: Option<&'a Path>,
    pub out: &'a Path,
}

pub fn run(o: &Options) -> Result<(), Box<dyn std::error::Error>> {
    let t0 = Instant::now();
    let text = std::fs::read_to_string(o.points)?;
    let mut pts = Vec::new();
    for (n, line) in text.lines().enumerate() {
        let line = line.trim();
        if line.is_empty() || line.starts_with('#') {
            continue;
        }
        let f: Vec<f64> = line
            .split([',', ' ', '\t'])
            .filter(|s| !s.is_empty())
            .map(|s| s.parse::<f64>())
            .collect::<Result<_, _>>()
            .map_err(|e| format!("{} line {}: {e}", o.points.display(), n + 1))?;
        if f.len() < 3 {
            return Err(format!("{} line {}: need x, y, value", o.points.display(), n + 1).into());
        }
        pts.push((f[0], f[1], f[2]));
    }
    let t_read = t0.elapsed().as_secs_f64();
    if let Some(path) = o.block_means_out {
        let mut text = String::new();
        for (x, y, v) in block_means(&pts, &o.spec)? {
            text.push_str(&format!("{x},{y},{v}\n"));
        }
        std::fs::write(path, text)?;
    }
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(o.threads)
        .build()?;
    let t1 = Instant::now();
    let g = pool.install(|| grid_points(&pts, &o.spec))?;
    let t_grid = t1.elapsed().as_secs_f64();
    let mut bytes = Vec::with_capacity(g.surface.values.len() * 8);
    for v in g.blanked().values {
        bytes.extend_from_slice(&v.to_le_bytes());
    }
    std::fs::File::create(o.out)?.write_all(&bytes)?;
    let levels: Vec<String> = g
        .report
        .levels
        .iter()
        .map(|l| {
            format!(
                "{{\"stride\": {}, \"nodes\": [{}, {}], \"constrained\": {}, \"sweeps\": {}, \"last_change\": {:e}}}",
                l.stride, l.nodes.0, l.nodes.1, l.constrained, l.sweeps, l.last_change
            )
        })
        .collect();
    println!(
        "{{\"points\": {}, \"inside\": {}, \"gridded\": {}, \"read_s\": {t_read:.4}, \"grid_s\": {t_grid:.4}, \"convergence\": {:e}, \"converged\": {}, \"levels\": [{}]}}",
        pts.len(),
        g.report.data_inside,
        g.report.data_gridded,
        g.report.convergence,
        g.report.converged,
        levels.join(", ")
    );
    Ok(())
}
