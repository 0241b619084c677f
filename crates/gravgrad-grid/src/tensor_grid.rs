//! The Laplace-consistent full tensor on a grid from whichever components were measured.
//!
//! Frame and units: the map frame m of `docs/physics.md` — x grid north, y grid east, z down —
//! on a horizontal plane above the sources. Inputs are north-up rasters of the gradient
//! components in Eötvös (horizontal components already rotated to grid north); outputs are the six
//! components in E and vertical gravity gz in mGal, on the same cells.
//!
//! Method. Every component is a known wavenumber multiplier times the spectrum Φ(k) of the
//! potential (Blakely 1995, "Potential Theory in Gravity and Magnetic Applications", ch. 12; the
//! signs of `gravgrad_forward::spectral`: ∂/∂x ↔ i·kx, ∂/∂y ↔ i·ky, ∂/∂z ↔ |k| with z down):
//!
//! | component | multiplier |
//! |---|---|
//! | Gxx | −kx² |
//! | Gxy | −kx·ky |
//! | Gxz | i·kx·\|k\| |
//! | Gyy | −ky² |
//! | Gyz | i·ky·\|k\| |
//! | Gzz | \|k\|² |
//! | gz | \|k\| |
//!
//! At each wavenumber the spectrum of the potential is the weighted least-squares estimate from
//! all measured components, Φ = Σ w_c·conj(m_c)·F_c / Σ w_c·|m_c|², with w_c = 1/σ_c² from the
//! stated noise of each component; every component and gz are then m_c·Φ, optionally continued
//! upward by e^(−|k|·Δh). A wavenumber that no measured component sees (k = 0; kx = 0 for Gxx
//! alone) gets Φ = 0.
//!
//! - **Padding and transform**: those of `gravgrad_forward::spectral` (`mirror_pad`, `fft2`,
//!   `ifft2`): each grid is mirrored to twice its size in both directions, so that the periodic
//!   extension is continuous; a component odd in a direction
//!   (Gxy and Gxz in x, Gxy and Gyz in y) is mirrored with its sign reversed in that direction —
//!   the even mirror of the potential makes its derivatives odd there — so that all components
//!   describe one mirrored potential. At the Nyquist wavenumber of an axis, components odd along
//!   that axis carry no phase; they are left out of the estimate there and returned as zero.
//! - **Means** (k = 0): a measured Gxx, Gyy or Gzz keeps its own grid mean (levelling sets it;
//!   no operator can); the other components have no mean of their own in the mirrored domain and
//!   an unmeasured one gets mean zero. gz has no mean from gradients: it is tied to
//!   [`GzReference`] — by default mean zero over the grid, or a stated mean in mGal.
//! - **Accuracy**: the field beyond the grid is unknown to any operator; the error falls as
//!   (body / window)² (`docs/methods/forward.md`), so grids should extend well beyond the targets.

use gravgrad_core::Raster;
use gravgrad_forward::spectral::{fft2, ifft2, mirror_pad, signed_bin};
use ndarray::{Array2, Axis, Slice};
use rayon::prelude::*;
use rustfft::num_complex::Complex64;
use thiserror::Error;

/// Component names in the order of the arrays of this module.
pub const NAMES: [&str; 6] = ["gxx", "gxy", "gxz", "gyy", "gyz", "gzz"];

/// 1 E·m (E from gradients times metres) in mGal: 1e-9 m/s² = 1e-4 mGal.
const E_METRE_TO_MGAL: f64 = 1e-4;

/// How gz, which gradients know only up to a constant, is tied down.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub enum GzReference {
    /// Mean zero over the grid.
    #[default]
    MeanZero,
    /// The given mean over the grid, mGal.
    Mean(f64),
}

/// Choices for [`full_tensor`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TensorOptions {
    /// Noise standard deviation of each measured component, E, in the order of [`NAMES`]; the
    /// weights are 1/σ². Only the ratios matter.
    pub noise_e: [f64; 6],
    /// Upward continuation, m (0: the grids' own plane; positive: up, away from the sources).
    pub upward_m: f64,
    pub gz_reference: GzReference,
}

impl Default for TensorOptions {
    fn default() -> Self {
        Self {
            noise_e: [1.0; 6],
            upward_m: 0.0,
            gz_reference: GzReference::MeanZero,
        }
    }
}

/// The derived grids: the six components (E) in the order of [`NAMES`] and gz (mGal).
#[derive(Clone, Debug, PartialEq)]
pub struct TensorGrids {
    pub components: [Raster; 6],
    pub gz: Raster,
}

/// Why the tensor could not be derived.
#[derive(Debug, Error, PartialEq)]
pub enum TensorError {
    #[error("no measured component was given")]
    NothingMeasured,
    #[error("{name}: the grid needs at least 2 × 2 cells")]
    TooSmall { name: &'static str },
    #[error("{name}: the grid differs from {first}'s in size, corner or cell size")]
    Geometry {
        name: &'static str,
        first: &'static str,
    },
    #[error(
        "{name}: cell (column {col}, row {row}) is missing or not finite; grid without blanking first"
    )]
    NotFinite {
        name: &'static str,
        col: usize,
        row: usize,
    },
    #[error("{name}: noise {noise} E; expected a finite positive value")]
    Noise { name: &'static str, noise: f64 },
    #[error("upward continuation {upward} m: expected a finite value ≥ 0")]
    Upward { upward: f64 },
    #[error("{nx} × {ny} cells are too many to transform")]
    TooLarge { nx: usize, ny: usize },
}

/// Whether a component is odd along x (north) and along y (east).
const ODD: [(bool, bool); 6] = [
    (false, false), // xx
    (true, true),   // xy
    (true, false),  // xz
    (false, false), // yy
    (false, true),  // yz
    (false, false), // zz
];

/// The multiplier of component `c` (order of [`NAMES`]) at (kx north, ky east), rad/m.
fn multiplier(c: usize, kx: f64, ky: f64) -> Complex64 {
    let k = (kx * kx + ky * ky).sqrt();
    match c {
        0 => Complex64::new(-kx * kx, 0.0),
        1 => Complex64::new(-kx * ky, 0.0),
        2 => Complex64::new(0.0, kx * k),
        3 => Complex64::new(-ky * ky, 0.0),
        4 => Complex64::new(0.0, ky * k),
        _ => Complex64::new(k * k, 0.0),
    }
}

/// Derives the full tensor and gz from the measured components (order of [`NAMES`], E, north-up
/// rasters of one geometry, every cell finite), as described in the module documentation.
pub fn full_tensor(
    measured: &[Option<&Raster>; 6],
    opts: &TensorOptions,
) -> Result<TensorGrids, TensorError> {
    let first = (0..6)
        .find(|&c| measured[c].is_some())
        .ok_or(TensorError::NothingMeasured)?;
    let base = measured[first].ok_or(TensorError::NothingMeasured)?;
    for c in 0..6 {
        let Some(r) = measured[c] else { continue };
        let name = NAMES[c];
        if r.check().is_err() || r.nx < 2 || r.ny < 2 {
            return Err(TensorError::TooSmall { name });
        }
        if (r.nx, r.ny, r.x_min, r.y_max, r.dx, r.dy)
            != (base.nx, base.ny, base.x_min, base.y_max, base.dx, base.dy)
        {
            return Err(TensorError::Geometry {
                name,
                first: NAMES[first],
            });
        }
        if let Some(k) = r.values.iter().position(|v| !v.is_finite()) {
            return Err(TensorError::NotFinite {
                name,
                col: k % r.nx,
                row: k / r.nx,
            });
        }
        let s = opts.noise_e[c];
        if !(s.is_finite() && s > 0.0) {
            return Err(TensorError::Noise { name, noise: s });
        }
    }
    if !(opts.upward_m.is_finite() && opts.upward_m >= 0.0) {
        return Err(TensorError::Upward {
            upward: opts.upward_m,
        });
    }
    let (nx, ny) = (base.nx, base.ny);
    let (pc, pr) = (2 * nx, 2 * ny);
    if pc
        .checked_mul(pr)
        .and_then(|n| n.checked_mul(16 * 8))
        .is_none()
    {
        return Err(TensorError::TooLarge { nx, ny });
    }
    // Spectra of the measured components, mirror-padded with their parity (x = north = rows,
    // y = east = columns).
    let mut spectra: Vec<Option<Array2<Complex64>>> = Vec::with_capacity(6);
    for c in 0..6 {
        spectra.push(match measured[c] {
            Some(r) => {
                let mut buf = mirror_pad(
                    r.view()
                        .map_err(|_| TensorError::TooSmall { name: NAMES[c] })?,
                    ODD[c].0,
                    ODD[c].1,
                );
                fft2(&mut buf);
                Some(buf)
            }
            None => None,
        });
    }
    let weights: Vec<f64> = (0..6).map(|c| 1.0 / (opts.noise_e[c].powi(2))).collect();

    // Wavenumbers: rows run southwards, so north kx = −k_row; columns run eastwards.
    let dk_row = 2.0 * std::f64::consts::PI / (pr as f64 * base.dy);
    let dk_col = 2.0 * std::f64::consts::PI / (pc as f64 * base.dx);
    let signed = signed_bin;
    let dh = opts.upward_m;
    // Potential spectrum, row-major over (row, column) of the padded grid.
    let mut phi = vec![Complex64::new(0.0, 0.0); pr * pc];
    phi.par_chunks_mut(pc).enumerate().for_each(|(p, row)| {
        let kx = -signed(p, pr) * dk_row;
        let nyq_x = p == pr / 2;
        for (q, out) in row.iter_mut().enumerate() {
            let ky = signed(q, pc) * dk_col;
            let nyq_y = q == pc / 2;
            let (mut num, mut den) = (Complex64::new(0.0, 0.0), 0.0);
            for c in 0..6 {
                let Some(f) = &spectra[c] else { continue };
                if (nyq_x && ODD[c].0) || (nyq_y && ODD[c].1) {
                    continue;
                }
                let m = multiplier(c, kx, ky);
                num += m.conj() * f[[p, q]] * weights[c];
                den += m.norm_sqr() * weights[c];
            }
            *out = if den > 0.0 {
                num / den * (-(kx * kx + ky * ky).sqrt() * dh).exp()
            } else {
                Complex64::new(0.0, 0.0)
            };
        }
    });

    let derive = |c: Option<usize>| -> Vec<f64> {
        let mut buf = Array2::<Complex64>::zeros((pr, pc));
        buf.axis_iter_mut(Axis(0))
            .into_par_iter()
            .enumerate()
            .for_each(|(p, mut row)| {
                let kx = -signed(p, pr) * dk_row;
                let nyq_x = p == pr / 2;
                for (q, out) in row.iter_mut().enumerate() {
                    let ky = signed(q, pc) * dk_col;
                    let nyq_y = q == pc / 2;
                    let v = phi[p * pc + q];
                    *out = match c {
                        Some(c) if (nyq_x && ODD[c].0) || (nyq_y && ODD[c].1) => {
                            Complex64::new(0.0, 0.0)
                        }
                        Some(c) => multiplier(c, kx, ky) * v,
                        None => v * (kx * kx + ky * ky).sqrt(),
                    };
                }
            });
        // k = 0: a measured even component keeps its own mean.
        if let Some(c) = c
            && let Some(f) = &spectra[c]
            && ODD[c] == (false, false)
        {
            buf[[0, 0]] = f[[0, 0]];
        }
        // Normalised by 1/(pr·pc), so the real parts are those of the unnormalised transform times
        // that factor.
        ifft2(&mut buf);
        buf.slice_axis(Axis(0), Slice::from(..ny))
            .slice_axis(Axis(1), Slice::from(..nx))
            .iter()
            .map(|z| z.re)
            .collect()
    };
    let raster = |values: Vec<f64>| Raster {
        values,
        nodata: None,
        ..base.clone()
    };
    let mut comps: Vec<Raster> = Vec::with_capacity(6);
    for c in 0..6 {
        comps.push(raster(derive(Some(c))));
    }
    let mut gz = derive(None);
    let mean = gz.iter().sum::<f64>() / gz.len() as f64;
    let target = match opts.gz_reference {
        GzReference::MeanZero => 0.0,
        GzReference::Mean(v) => v,
    };
    for v in &mut gz {
        *v = (*v - mean) * E_METRE_TO_MGAL + target;
    }
    let components: [Raster; 6] = match comps.try_into() {
        Ok(a) => a,
        Err(_) => return Err(TensorError::NothingMeasured),
    };
    Ok(TensorGrids {
        components,
        gz: raster(gz),
    })
}
