//! The two evaluators: the all-exact prism sum and the fast engine that walks the pyramid.
//!
//! Frame: observation points in NED (x grid north, y grid east, z down), metres; tensors s⁻² in
//! storage order xx xy xz yy yz zz.
//!
//! **Fast engine.** Starting from the pyramid's top, a block is taken as its second-order
//! multipole expansion when the observation point is farther than [`MIN_RATIO`] times the block's
//! radius a from its centre and the expansion's error bound β/(r − a)⁶ (see `multipole`) is at most
//! the per-block budget τ; otherwise its four children are visited, and the cells of a level-1
//! block that fails are summed as exact prisms (`Prism::tensor`, the same kernel as the all-exact
//! sum). The sum over the blocks taken of their bounds is a rigorous bound on the engine's error at
//! that point (apart from the prism kernel's own ~1e-11 relative error); the walk is sequential per
//! point, in a fixed order, so results do not depend on the thread count.

use super::dem::DemMass;
use super::pyramid::Pyramid;

/// The smallest distance-to-radius ratio at which a block may be taken as its expansion.
pub const MIN_RATIO: f64 = 2.0;

/// The all-exact sum at `obs`: every cell's prisms, rows from the north, columns from the west,
/// each by `Prism::tensor` (closed form near, Gauss–Legendre point masses beyond ten sizes).
pub fn exact_at(grid: &DemMass, obs: [f64; 3]) -> [f64; 6] {
    let mut acc = [0.0; 6];
    let (nx, ny) = grid.size();
    for row in 0..ny {
        for col in 0..nx {
            for p in grid.pieces(col, row).iter() {
                for (a, v) in acc.iter_mut().zip(p.tensor(obs).to_array()) {
                    *a += v;
                }
            }
        }
    }
    acc
}

/// The fast engine at `obs` with per-block budget `tau` (s⁻²): the tensor and the sum of the
/// bounds of the blocks taken as expansions (s⁻²).
pub fn fast_at(grid: &DemMass, pyramid: &Pyramid, tau: f64, obs: [f64; 3]) -> ([f64; 6], f64) {
    let mut acc = [0.0; 6];
    let mut bound = 0.0;
    let Some(top) = pyramid.levels.last() else {
        return (exact_at(grid, obs), 0.0);
    };
    let top_index = pyramid.levels.len() - 1;
    // (level index, i, j); pushed in reverse so that blocks are visited north-west first.
    let mut stack: Vec<(usize, usize, usize)> = Vec::with_capacity(64);
    for j in (0..top.ny).rev() {
        for i in (0..top.nx).rev() {
            stack.push((top_index, i, j));
        }
    }
    while let Some((li, i, j)) = stack.pop() {
        let level = &pyramid.levels[li];
        let b = level.block(i, j);
        if b.moments.abs_m == 0.0 {
            continue;
        }
        let r = [
            obs[0] - b.centre[0],
            obs[1] - b.centre[1],
            obs[2] - b.centre[2],
        ];
        let dist = (r[0] * r[0] + r[1] * r[1] + r[2] * r[2]).sqrt();
        if dist > MIN_RATIO * b.a {
            let gap = dist - b.a;
            let g3 = gap * gap * gap;
            let e = b.beta / (g3 * g3);
            if e <= tau {
                for (a, v) in acc.iter_mut().zip(b.moments.tensor_g(r)) {
                    *a += v;
                }
                bound += e;
                continue;
            }
        }
        if li == 0 {
            let (nx, ny) = grid.size();
            for row in 2 * j..(2 * j + 2).min(ny) {
                for col in 2 * i..(2 * i + 2).min(nx) {
                    for p in grid.pieces(col, row).iter() {
                        for (a, v) in acc.iter_mut().zip(p.tensor(obs).to_array()) {
                            *a += v;
                        }
                    }
                }
            }
        } else {
            let child = &pyramid.levels[li - 1];
            for cj in (2 * j..(2 * j + 2).min(child.ny)).rev() {
                for ci in (2 * i..(2 * i + 2).min(child.nx)).rev() {
                    stack.push((li - 1, ci, cj));
                }
            }
        }
    }
    (acc, bound)
}
