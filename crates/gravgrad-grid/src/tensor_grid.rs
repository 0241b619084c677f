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
//! - **Padding**: as `gravgrad_forward::spectral`, each grid is mirrored to twice its size in both
//!   directions, so that the periodic extension is continuous; a component odd in a direction
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
use rayon::prelude::*;
use rustfft::FftPlanner;
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
    let base = check_inputs(measured, opts)?;
    let (nx, ny) = (base.nx, base.ny);
    let (pc, pr) = (2 * nx, 2 * ny);
    if pc
        .checked_mul(pr)
        .and_then(|n| n.checked_mul(16 * 8))
        .is_none()
    {
        return Err(TensorError::TooLarge { nx, ny });
    }
    let mut fft = Fft2::new(pr, pc);
    // Spectra of the measured components, mirror-padded with their parity.
    let spectra: Vec<Option<Vec<Complex64>>> = (0..6)
        .map(|c| {
            measured[c].map(|r| {
                let mut buf = pad(r, ODD[c]);
                fft.run(&mut buf, false);
                buf
            })
        })
        .collect();
    let waves = Wavenumbers::of(base, pr, pc);
    let phi = potential_spectrum(&spectra, &opts.noise_e, &waves, opts.upward_m);
    let derivation = Derivation {
        spectra: &spectra,
        phi: &phi,
        waves: &waves,
        nx,
        ny,
    };
    let raster = |values: Vec<f64>| Raster {
        values,
        nodata: None,
        ..base.clone()
    };
    let mut comps: Vec<Raster> = Vec::with_capacity(6);
    for c in 0..6 {
        comps.push(raster(derivation.derive(&mut fft, Some(c))));
    }
    let mut gz = derivation.derive(&mut fft, None);
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

/// Checks the measured components and the options: at least one component; each at least 2 × 2
/// cells, valid, of the first one's geometry, every cell finite, with a finite positive noise (E);
/// a finite, non-negative upward continuation (m). Returns the first measured raster.
fn check_inputs<'r>(
    measured: &[Option<&'r Raster>; 6],
    opts: &TensorOptions,
) -> Result<&'r Raster, TensorError> {
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
    Ok(base)
}

/// The wavenumbers of the padded grid of `pr` rows and `pc` columns, rad/m: rows run southwards,
/// so north kx = −k_row; columns run eastwards.
struct Wavenumbers {
    pr: usize,
    pc: usize,
    /// Wavenumber step along rows and along columns, rad/m.
    dk_row: f64,
    dk_col: f64,
}

impl Wavenumbers {
    /// The wavenumbers of the padded grid of `base`'s cells (dx, dy in m).
    fn of(base: &Raster, pr: usize, pc: usize) -> Self {
        Self {
            pr,
            pc,
            dk_row: 2.0 * std::f64::consts::PI / (pr as f64 * base.dy),
            dk_col: 2.0 * std::f64::consts::PI / (pc as f64 * base.dx),
        }
    }

    /// kx (north, rad/m) of row `p`, and whether it is the Nyquist row.
    fn north(&self, p: usize) -> (f64, bool) {
        (-signed(p, self.pr) * self.dk_row, p == self.pr / 2)
    }

    /// ky (east, rad/m) of column `q`, and whether it is the Nyquist column.
    fn east(&self, q: usize) -> (f64, bool) {
        (signed(q, self.pc) * self.dk_col, q == self.pc / 2)
    }
}

/// Index `i` of an FFT of length `n` as a signed frequency index.
fn signed(i: usize, n: usize) -> f64 {
    if i <= n / 2 {
        i as f64
    } else {
        i as f64 - n as f64
    }
}

/// The potential's spectrum, row-major over (row, column) of the padded grid: at each wavenumber
/// the least-squares combination of the measured `spectra`, each weighted by 1/σ² (σ in `noise_e`,
/// E), continued upwards by `dh` m; components odd along an axis are left out at its Nyquist
/// wavenumber. Zero where nothing is left.
fn potential_spectrum(
    spectra: &[Option<Vec<Complex64>>],
    noise_e: &[f64; 6],
    waves: &Wavenumbers,
    dh: f64,
) -> Vec<Complex64> {
    let weights: Vec<f64> = (0..6).map(|c| 1.0 / (noise_e[c].powi(2))).collect();
    let (pr, pc) = (waves.pr, waves.pc);
    let mut phi = vec![Complex64::new(0.0, 0.0); pr * pc];
    phi.par_chunks_mut(pc).enumerate().for_each(|(p, row)| {
        let (kx, nyq_x) = waves.north(p);
        for (q, out) in row.iter_mut().enumerate() {
            let (ky, nyq_y) = waves.east(q);
            let (mut num, mut den) = (Complex64::new(0.0, 0.0), 0.0);
            for c in 0..6 {
                let Some(f) = &spectra[c] else { continue };
                if (nyq_x && ODD[c].0) || (nyq_y && ODD[c].1) {
                    continue;
                }
                let m = multiplier(c, kx, ky);
                num += m.conj() * f[p * pc + q] * weights[c];
                den += m.norm_sqr() * weights[c];
            }
            *out = if den > 0.0 {
                num / den * (-(kx * kx + ky * ky).sqrt() * dh).exp()
            } else {
                Complex64::new(0.0, 0.0)
            };
        }
    });
    phi
}

/// What a derived grid is formed from: the measured spectra, the potential's spectrum, the
/// wavenumbers and the size of the unpadded grid (`nx` columns, `ny` rows).
struct Derivation<'a> {
    spectra: &'a [Option<Vec<Complex64>>],
    phi: &'a [Complex64],
    waves: &'a Wavenumbers,
    nx: usize,
    ny: usize,
}

impl Derivation<'_> {
    /// Component `c` (E, order of [`NAMES`]), or with `None` the vertical derivative's integral
    /// |k|·φ (E·m, before gz's reference), on the unpadded grid, row-major.
    fn derive(&self, fft: &mut Fft2, c: Option<usize>) -> Vec<f64> {
        let (pr, pc, phi) = (self.waves.pr, self.waves.pc, self.phi);
        let mut buf = vec![Complex64::new(0.0, 0.0); pr * pc];
        buf.par_chunks_mut(pc).enumerate().for_each(|(p, row)| {
            let (kx, nyq_x) = self.waves.north(p);
            for (q, out) in row.iter_mut().enumerate() {
                let (ky, nyq_y) = self.waves.east(q);
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
            && let Some(f) = &self.spectra[c]
            && ODD[c] == (false, false)
        {
            buf[0] = f[0];
        }
        fft.run(&mut buf, true);
        let norm = 1.0 / (pr * pc) as f64;
        let mut out = Vec::with_capacity(self.nx * self.ny);
        for r in 0..self.ny {
            out.extend(buf[r * pc..r * pc + self.nx].iter().map(|z| z.re * norm));
        }
        out
    }
}

/// The raster mirrored to twice its size in both directions (rows i and 2n−1−i hold the same
/// data), with the sign reversed in the mirrored halves along the directions where `odd`
/// (x = north = rows, y = east = columns).
fn pad(r: &Raster, odd: (bool, bool)) -> Vec<Complex64> {
    let (nx, ny) = (r.nx, r.ny);
    let (pc, pr) = (2 * nx, 2 * ny);
    let mut buf = vec![Complex64::new(0.0, 0.0); pr * pc];
    buf.par_chunks_mut(pc).enumerate().for_each(|(p, row)| {
        let (sr, flip_r) = if p < ny {
            (p, false)
        } else {
            (pr - 1 - p, odd.0)
        };
        let src = &r.values[sr * nx..(sr + 1) * nx];
        for (q, z) in row.iter_mut().enumerate() {
            let (sc, flip_c) = if q < nx {
                (q, false)
            } else {
                (pc - 1 - q, odd.1)
            };
            let v = src[sc];
            *z = Complex64::new(if flip_r ^ flip_c { -v } else { v }, 0.0);
        }
    });
    buf
}

/// Two-dimensional FFT of a row-major `rows × cols` array, rows in parallel.
struct Fft2 {
    rows: usize,
    cols: usize,
    planner: FftPlanner<f64>,
}

impl Fft2 {
    fn new(rows: usize, cols: usize) -> Self {
        Self {
            rows,
            cols,
            planner: FftPlanner::new(),
        }
    }

    /// In place; unnormalised in both directions.
    fn run(&mut self, buf: &mut [Complex64], inverse: bool) {
        let (r, c) = (self.rows, self.cols);
        let (along_row, along_col) = if inverse {
            (
                self.planner.plan_fft_inverse(c),
                self.planner.plan_fft_inverse(r),
            )
        } else {
            (
                self.planner.plan_fft_forward(c),
                self.planner.plan_fft_forward(r),
            )
        };
        buf.par_chunks_mut(c).for_each(|row| along_row.process(row));
        let mut t = transpose(buf, r, c);
        t.par_chunks_mut(r).for_each(|col| along_col.process(col));
        let back = transpose(&t, c, r);
        buf.copy_from_slice(&back);
    }
}

/// Transposes an r × c row-major array.
fn transpose(a: &[Complex64], r: usize, c: usize) -> Vec<Complex64> {
    let mut out = vec![Complex64::new(0.0, 0.0); r * c];
    out.par_chunks_mut(r).enumerate().for_each(|(j, row)| {
        for (i, v) in row.iter_mut().enumerate() {
            *v = a[i * c + j];
        }
    });
    out
}
