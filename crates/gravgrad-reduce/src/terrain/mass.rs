//! The terrain mass model: which prisms a DEM cell stands for.
//!
//! Frame: a cell's prisms are in NED (x grid north, y grid east, z down = −height above the
//! ellipsoid), metres; densities kg/m³.
//!
//! The model is the mass of the ground (and of the sea, when a water density is given) minus that of
//! a reference half-space of rock ending at the reference level h_ref. At height h in the column of
//! a cell whose surface is at elevation e, the true density is
//!
//! ```text
//! ρ      for h < e                      (rock)
//! ρ_w    for e ≤ h < 0, only if e < 0   (sea water, when a water density is given)
//! 0      otherwise                      (air)
//! ```
//!
//! and the reference's is ρ below h_ref and 0 above. The cell carries their difference: without
//! water, a prism from h_ref to e of density +ρ (e > h_ref) or −ρ (e < h_ref) — the model the
//! simulator uses; with water and e < 0, up to two prisms split at sea level (for example ρ_w − ρ
//! between e and 0 and −ρ between 0 and h_ref when e < 0 < h_ref, or +ρ_w between h_ref and 0 when
//! h_ref < e < 0 … the general rule is the difference above on each interval). Cells below sea level
//! are then ocean floor under water, not dry land below sea level. A missing cell (the raster's
//! no-data value, or a non-finite value) carries no mass.

use gravgrad_forward::prism::Prism;

/// The densities and reference level of the mass model (see the module documentation).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct MassModel {
    /// Rock density ρ, kg/m³.
    pub density: f64,
    /// Sea-water density ρ_w, kg/m³, for cells below 0 m; `None` leaves no water.
    pub water_density: Option<f64>,
    /// Reference level h_ref, m above the ellipsoid.
    pub reference_m: f64,
}

/// The pieces of one cell's column: up to two prisms (two only with water below sea level).
#[derive(Clone, Copy, Debug, Default)]
pub struct Pieces {
    prisms: [Option<Prism>; 2],
}

impl Pieces {
    /// The prisms, lowest first.
    pub fn iter(&self) -> impl Iterator<Item = &Prism> {
        self.prisms.iter().flatten()
    }
}

impl MassModel {
    /// Density difference (true minus reference) at height `h` in a column of surface elevation `e`.
    fn contrast(&self, e: f64, h: f64) -> f64 {
        let truth = if h < e {
            self.density
        } else {
            match self.water_density {
                Some(w) if h < 0.0 => w,
                _ => 0.0,
            }
        };
        let reference = if h < self.reference_m {
            self.density
        } else {
            0.0
        };
        truth - reference
    }

    /// The prisms of a cell whose surface is at `elevation` (m), centred at (`north`, `east`) with
    /// half sizes `half_north` and `half_east` (m). A non-finite elevation gives no prism.
    pub fn pieces(
        &self,
        elevation: f64,
        north: f64,
        east: f64,
        half_north: f64,
        half_east: f64,
    ) -> Pieces {
        let mut out = Pieces::default();
        if !elevation.is_finite() {
            return out;
        }
        // Levels where the density difference can change: the surface, the reference and, under
        // water, sea level; between consecutive levels it is constant.
        let with_sea = self.water_density.is_some() && elevation < 0.0;
        let mut levels = [elevation, self.reference_m, 0.0];
        let n = if with_sea { 3 } else { 2 };
        levels[..n].sort_by(f64::total_cmp);
        let mut k = 0;
        for w in levels[..n].windows(2) {
            let (bottom, top) = (w[0], w[1]);
            if top <= bottom {
                continue;
            }
            let rho = self.contrast(elevation, 0.5 * (bottom + top));
            if rho == 0.0 {
                continue;
            }
            out.prisms[k] = Some(Prism::new(
                [north - half_north, north + half_north],
                [east - half_east, east + half_east],
                [-top, -bottom],
                rho,
            ));
            k += 1;
        }
        out
    }
}
