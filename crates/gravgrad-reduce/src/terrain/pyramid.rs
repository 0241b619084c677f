//! The pyramid of blocks: level L ≥ 1 groups the DEM's cells in blocks of 2^L × 2^L (clipped at
//! the grid's east and south edges), each block stored as its multipole moments about the centre of
//! its bounding box, with the radius of the sphere about that centre that holds all its mass.
//!
//! Frame: NED (x grid north, y grid east, z down), metres; moments multiplied by G (SI).
//!
//! Moments of level 1 are summed from the cells' prisms, those of level L + 1 from their four
//! children moved to the parent's centre ([`Moments::shifted`]), both in a fixed order, so the
//! pyramid is the same whatever the thread count.

use super::dem::DemMass;
use super::multipole::{BOUND_FACTOR, Moments};
use rayon::prelude::*;

/// One block: moments about `centre` (times G), the radius `a` about the centre that holds all its
/// mass, and `beta` = 20·G·Σ|m|·a³, so that the expansion's error bound at distance r is
/// β/(r − a)⁶ (s⁻²). An empty block (no mass) has `beta` = 0 and `a` = 0.
#[derive(Clone, Copy, Debug, Default)]
pub struct Block {
    pub centre: [f64; 3],
    pub moments: Moments,
    pub a: f64,
    pub beta: f64,
    /// Vertical extent of the block's prisms, [top, bottom] in z (down), m.
    pub z: [f64; 2],
}

/// One level of the pyramid: `nx` × `ny` blocks of `1 << level` cells a side, row-major from the
/// north-west.
#[derive(Clone, Debug)]
pub struct Level {
    pub level: u32,
    pub nx: usize,
    pub ny: usize,
    pub blocks: Vec<Block>,
}

impl Level {
    /// The block (`i` eastwards, `j` southwards).
    #[inline]
    pub fn block(&self, i: usize, j: usize) -> &Block {
        &self.blocks[j * self.nx + i]
    }
}

/// All levels from 1 (2 × 2 cells) up to the first with a single block.
#[derive(Clone, Debug)]
pub struct Pyramid {
    pub levels: Vec<Level>,
}

/// Box of a block: cell ranges [col0, col1) × [row0, row1) → NED extents x (north) and y (east).
fn footprint(grid: &DemMass, level: u32, i: usize, j: usize) -> ([f64; 2], [f64; 2]) {
    let side = 1usize << level;
    let r = &grid.elevation;
    let (c0, c1) = (i * side, ((i + 1) * side).min(r.nx));
    let (r0, r1) = (j * side, ((j + 1) * side).min(r.ny));
    (
        [r.y_max - r1 as f64 * r.dy, r.y_max - r0 as f64 * r.dy],
        [r.x_min + c0 as f64 * r.dx, r.x_min + c1 as f64 * r.dx],
    )
}

/// The block of box `x` × `y` × `z` with moments `g` (already times G) about the box centre.
fn finish(x: [f64; 2], y: [f64; 2], z: [f64; 2], centre: [f64; 3], g: Moments) -> Block {
    if g.abs_m == 0.0 {
        return Block::default();
    }
    let hx = 0.5 * (x[1] - x[0]);
    let hy = 0.5 * (y[1] - y[0]);
    let hz = 0.5 * (z[1] - z[0]);
    let a = (hx * hx + hy * hy + hz * hz).sqrt();
    Block {
        centre,
        moments: g,
        a,
        beta: BOUND_FACTOR * g.abs_m * a * a * a,
        z,
    }
}

impl Pyramid {
    /// Builds the pyramid over `grid` (cells and their prisms from [`DemMass::pieces`]).
    pub fn build(grid: &DemMass) -> Self {
        let mut levels: Vec<Level> = Vec::new();
        let mut level = 1u32;
        let (cols, rows) = grid.size();
        loop {
            let side = 1usize << level;
            let nx = cols.div_ceil(side);
            let ny = rows.div_ceil(side);
            let blocks: Vec<Block> = (0..nx * ny)
                .into_par_iter()
                .map(|k| {
                    let (i, j) = (k % nx, k / nx);
                    let (x, y) = footprint(grid, level, i, j);
                    match levels.last() {
                        None => Self::from_cells(grid, i, j, x, y),
                        Some(child) => Self::from_children(child, i, j, x, y),
                    }
                })
                .collect();
            levels.push(Level {
                level,
                nx,
                ny,
                blocks,
            });
            if nx == 1 && ny == 1 {
                break;
            }
            level += 1;
        }
        Self { levels }
    }

    /// A level-1 block from its (up to) 2 × 2 cells.
    fn from_cells(grid: &DemMass, i: usize, j: usize, x: [f64; 2], y: [f64; 2]) -> Block {
        let (nx, ny) = grid.size();
        let cells = || {
            (2 * j..(2 * j + 2).min(ny))
                .flat_map(move |row| (2 * i..(2 * i + 2).min(nx)).map(move |col| (col, row)))
        };
        let mut z = [f64::INFINITY, f64::NEG_INFINITY];
        for (col, row) in cells() {
            for p in grid.pieces(col, row).iter() {
                z = [z[0].min(p.z[0]), z[1].max(p.z[1])];
            }
        }
        if z[0] > z[1] {
            return Block::default();
        }
        let centre = [
            0.5 * (x[0] + x[1]),
            0.5 * (y[0] + y[1]),
            0.5 * (z[0] + z[1]),
        ];
        let mut m = Moments::default();
        for (col, row) in cells() {
            for p in grid.pieces(col, row).iter() {
                m.add(&Moments::of_prism(p, centre));
            }
        }
        finish(x, y, z, centre, m.times_g())
    }

    /// A block of level L + 1 from its (up to) four children of level L.
    fn from_children(child: &Level, i: usize, j: usize, x: [f64; 2], y: [f64; 2]) -> Block {
        let kids = || {
            (2 * j..(2 * j + 2).min(child.ny))
                .flat_map(move |cj| (2 * i..(2 * i + 2).min(child.nx)).map(move |ci| (ci, cj)))
                .map(|(ci, cj)| child.block(ci, cj))
                .filter(|b| b.moments.abs_m > 0.0)
        };
        let mut z = [f64::INFINITY, f64::NEG_INFINITY];
        for b in kids() {
            z = [z[0].min(b.z[0]), z[1].max(b.z[1])];
        }
        if z[0] > z[1] {
            return Block::default();
        }
        let centre = [
            0.5 * (x[0] + x[1]),
            0.5 * (y[0] + y[1]),
            0.5 * (z[0] + z[1]),
        ];
        // Children's moments are stored times G; shifting is linear in them, so it commutes.
        let mut m = Moments::default();
        for b in kids() {
            let shift = [
                centre[0] - b.centre[0],
                centre[1] - b.centre[1],
                centre[2] - b.centre[2],
            ];
            m.add(&b.moments.shifted(shift));
        }
        finish(x, y, z, centre, m)
    }
}
