//! Wavenumber-domain operators on north-up rasters (Blakely 1995, "Potential Theory in Gravity and
//! Magnetic Applications", ch. 12; Mickus & Hinojosa 2001, J. Applied Geophysics 46:159–174), and the
//! one two-dimensional FFT of the workspace ([`fft2`], [`ifft2`]).
//!
//! Grids: a [`Raster`] in a projected map frame (cell sizes in metres), cell-centre registered,
//! row 0 the northernmost, on a horizontal plane above the sources. Frame of the operators: the map
//! frame m of `docs/physics.md` — x grid north, y grid east, z down. A raster's columns run along y,
//! its rows *against* x: for the padded array of `2·ny` rows and `2·nx` columns, the wavenumbers of
//! row `p` and column `q` are kx = −k(p)·2π/(2·ny·dy) and ky = k(q)·2π/(2·nx·dx) (rad/m), k(i) the
//! signed index (i for i ≤ n/2, i − n above).
//!
//! Signs: with the forward transform F(k) = Σ f(x)·e^(−i k·x) (the convention of `rustfft`),
//! ∂/∂x ↔ i·kx, ∂/∂y ↔ i·ky, and ∂/∂z ↔ |k| (fields grow towards the sources). Hence, from Gzz:
//! Gxx = −kx²/|k|²·Gzz, Gxy = −kx·ky/|k|²·Gzz, Gxz = i·kx/|k|·Gzz (likewise y), gz = Gzz/|k| with its
//! mean undefined (tied to a reference by the caller), and upward continuation by Δh multiplies by
//! e^(−|k|·Δh). Tests prove the signs against analytic prism fields.
//!
//! Padding ([`mirror_pad`]): each grid is mirrored (even reflection) to twice its size in both
//! directions before the transform, so the periodic extension is continuous and nothing wraps from
//! one edge onto the other; the result is cropped back. Odd operators are set to zero at the Nyquist
//! wavenumber, where their phase is undefined for real data.

use gravgrad_core::Raster;
use gravgrad_core::raster::{FrameKind, RasterError, frame_kind_of_epsg};
use ndarray::{Array2, ArrayView1, ArrayView2, ArrayViewMut2, Axis, Slice, Zip};
use rayon::prelude::*;
use rustfft::num_complex::Complex64;
use rustfft::{Fft, FftDirection, FftPlanner};

/// A grid operation that cannot be done.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum GridError {
    #[error("malformed grid: {0}")]
    Raster(#[from] RasterError),
    #[error("grid of {nx} × {ny} cells: need at least 2 × 2")]
    TooSmall { nx: usize, ny: usize },
    #[error(
        "grid cell (column {col}, row {row}) holds a missing or non-finite value: fill or blank-fill it before transforming"
    )]
    NotFinite { col: usize, row: usize },
    #[error(
        "grid in the geographic frame EPSG:{0} (cells in degrees): wavenumber operators need a projected frame in metres"
    )]
    Geographic(u32),
}

/// Tensor components (and gz) derivable from Gzz, in the map frame (x grid north, y grid east,
/// z down).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Component {
    Gxx,
    Gxy,
    Gxz,
    Gyy,
    Gyz,
    Gzz,
    /// Vertical gravity, m/s² from s⁻²·m; its mean is set to zero.
    Gz,
}

/// A direction of differentiation in the map frame.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Direction {
    /// x, grid north (against the raster's rows).
    North,
    /// y, grid east (along the raster's columns).
    East,
    /// z, down (towards the sources).
    Down,
}

/// Two-dimensional discrete Fourier transform of `a` in place, unnormalised, with the sign
/// convention of `rustfft` (F(k) = Σ f·e^(−i k·x)): every row (along axis 1) is transformed, then
/// every column (along axis 0). Rows and columns run in parallel; each is transformed alone, so the
/// result does not depend on the number of threads. The inverse is [`ifft2`].
pub fn fft2(a: &mut Array2<Complex64>) {
    transform2(a, FftDirection::Forward);
}

/// Inverse of [`fft2`] in place, normalised by 1/(rows·columns) so that `ifft2(fft2(a)) = a`: rows
/// transformed, then columns, then every value multiplied by the normalisation.
pub fn ifft2(a: &mut Array2<Complex64>) {
    transform2(a, FftDirection::Inverse);
    let norm = 1.0 / a.len() as f64;
    a.par_mapv_inplace(|z| z * norm);
}

/// Rows along axis 1, then columns along axis 0 (on a transposed copy, so that each column is
/// contiguous).
fn transform2(a: &mut Array2<Complex64>, direction: FftDirection) {
    let (rows, cols) = a.dim();
    if rows == 0 || cols == 0 {
        return;
    }
    let mut planner = FftPlanner::<f64>::new();
    let along_row = planner.plan_fft(cols, direction);
    let along_col = planner.plan_fft(rows, direction);
    each_row(a.view_mut(), &*along_row);
    let mut t = Array2::zeros((cols, rows));
    Zip::from(&mut t)
        .and(a.t())
        .par_for_each(|out, &z| *out = z);
    each_row(t.view_mut(), &*along_col);
    Zip::from(a).and(t.t()).par_for_each(|out, &z| *out = z);
}

/// Transforms every row of `a` (along axis 1) by `fft`, in parallel.
fn each_row(mut a: ArrayViewMut2<Complex64>, fft: &dyn Fft<f64>) {
    a.axis_iter_mut(Axis(0))
        .into_par_iter()
        .for_each(|mut row| match row.as_slice_mut() {
            Some(values) => fft.process(values),
            // A row that is not contiguous in memory is transformed in a copy.
            None => {
                let mut values = row.to_vec();
                fft.process(&mut values);
                row.assign(&ArrayView1::from(&values[..]));
            }
        });
}

/// `values` (shape (rows, columns)) mirrored to twice its size in both directions — rows `i` and
/// `2·rows − 1 − i` hold the same data, likewise columns — as complex numbers. With `odd_rows`
/// (`odd_cols`) the mirrored half along the rows (columns) has its sign reversed: the mirror of a
/// field odd in that direction, such as the derivative of a mirrored potential.
pub fn mirror_pad(
    values: ArrayView2<'_, f64>,
    odd_rows: bool,
    odd_cols: bool,
) -> Array2<Complex64> {
    let (rows, cols) = values.dim();
    let (pr, pc) = (2 * rows, 2 * cols);
    let mut buf = Array2::zeros((pr, pc));
    Zip::indexed(&mut buf).par_for_each(|(p, q), z| {
        let (sr, flip_r) = if p < rows {
            (p, false)
        } else {
            (pr - 1 - p, odd_rows)
        };
        let (sc, flip_c) = if q < cols {
            (q, false)
        } else {
            (pc - 1 - q, odd_cols)
        };
        let v = values[[sr, sc]];
        *z = Complex64::new(if flip_r ^ flip_c { -v } else { v }, 0.0);
    });
    buf
}

/// The signed index of frequency bin `i` of `n`: `i` up to `n/2`, `i − n` above.
pub fn signed_bin(i: usize, n: usize) -> f64 {
    if i <= n / 2 {
        i as f64
    } else {
        i as f64 - n as f64
    }
}

/// The grid's values after checking that it can be transformed: well formed, at least 2 × 2 cells,
/// every cell present and finite, not in a geographic frame.
fn checked(grid: &Raster) -> Result<ArrayView2<'_, f64>, GridError> {
    grid.check()?;
    if grid.nx < 2 || grid.ny < 2 {
        return Err(GridError::TooSmall {
            nx: grid.nx,
            ny: grid.ny,
        });
    }
    if let Some(code) = grid.epsg
        && frame_kind_of_epsg(code) == FrameKind::Geographic
    {
        return Err(GridError::Geographic(code));
    }
    if let Some(k) = grid
        .values
        .iter()
        .position(|&v| !v.is_finite() || grid.is_missing(v))
    {
        return Err(GridError::NotFinite {
            col: k % grid.nx,
            row: k / grid.nx,
        });
    }
    Ok(grid.view()?)
}

/// Applies a wavenumber-domain filter H(kx north, ky east) (rad/m, module documentation) to a grid,
/// with mirror padding. `odd` marks filters that are odd in k, zeroed at Nyquist. The result is on
/// the grid's cells (same geometry and EPSG code), with no nodata value.
pub fn apply_filter(
    grid: &Raster,
    filter: impl Fn(f64, f64) -> Complex64 + Sync,
    odd: bool,
) -> Result<Raster, GridError> {
    let values = checked(grid)?;
    let (ny, nx) = values.dim();
    let mut buf = mirror_pad(values, false, false);
    let (pr, pc) = buf.dim();
    fft2(&mut buf);
    // Rows run southwards, so north kx = −k_row; columns run eastwards.
    let dk_row = 2.0 * std::f64::consts::PI / (pr as f64 * grid.dy);
    let dk_col = 2.0 * std::f64::consts::PI / (pc as f64 * grid.dx);
    Zip::indexed(&mut buf).par_for_each(|(p, q), z| {
        let kx = -signed_bin(p, pr) * dk_row;
        let ky = signed_bin(q, pc) * dk_col;
        let nyquist = p == pr / 2 || q == pc / 2;
        *z = if odd && nyquist {
            Complex64::new(0.0, 0.0)
        } else {
            *z * filter(kx, ky)
        };
    });
    ifft2(&mut buf);
    // (`ndarray::s!` expands to code that allows `unsafe`, which this workspace forbids.)
    let out = buf
        .slice_axis(Axis(0), Slice::from(..ny))
        .slice_axis(Axis(1), Slice::from(..nx))
        .mapv(|z| z.re);
    Ok(grid.with_array2(out)?)
}

/// Derives a component in the map frame from a Gzz grid (s⁻²), on the same cells.
/// `Component::Gz` gives m/s² with zero mean.
pub fn from_gzz(gzz: &Raster, want: Component) -> Result<Raster, GridError> {
    let i = Complex64::new(0.0, 1.0);
    let zero = Complex64::new(0.0, 0.0);
    let real = |v: f64| Complex64::new(v, 0.0);
    match want {
        Component::Gzz => apply_filter(gzz, |_, _| real(1.0), false),
        Component::Gxx => apply_filter(
            gzz,
            |kx, ky| nonzero(kx, ky, |k2| real(-kx * kx / k2)),
            false,
        ),
        Component::Gyy => apply_filter(
            gzz,
            |kx, ky| nonzero(kx, ky, |k2| real(-ky * ky / k2)),
            false,
        ),
        Component::Gxy => apply_filter(
            gzz,
            |kx, ky| nonzero(kx, ky, |k2| real(-kx * ky / k2)),
            false,
        ),
        Component::Gxz => apply_filter(
            gzz,
            |kx, ky| nonzero(kx, ky, |k2| i * (kx / k2.sqrt())),
            true,
        ),
        Component::Gyz => apply_filter(
            gzz,
            |kx, ky| nonzero(kx, ky, |k2| i * (ky / k2.sqrt())),
            true,
        ),
        Component::Gz => apply_filter(
            gzz,
            |kx, ky| {
                if kx == 0.0 && ky == 0.0 {
                    zero
                } else {
                    real(1.0 / (kx * kx + ky * ky).sqrt())
                }
            },
            false,
        ),
    }
}

/// Evaluates `f(|k|²)` away from k = 0, where every operator from Gzz is taken as 0 (the mean of the
/// derived horizontal components is undefined by Gzz alone; 0 is the value for fields that decay).
fn nonzero(kx: f64, ky: f64, f: impl Fn(f64) -> Complex64) -> Complex64 {
    let k2 = kx * kx + ky * ky;
    if k2 == 0.0 {
        Complex64::new(0.0, 0.0)
    } else {
        f(k2)
    }
}

/// Upward continuation of a grid by `dh` metres (dh > 0 moves the plane up, away from the sources),
/// on the same cells and in the grid's unit.
pub fn upward_continue(grid: &Raster, dh: f64) -> Result<Raster, GridError> {
    apply_filter(
        grid,
        |kx, ky| Complex64::new((-(kx * kx + ky * ky).sqrt() * dh).exp(), 0.0),
        false,
    )
}

/// First derivative of a potential-field grid along a map-frame direction: x grid north, y grid
/// east or z down; on the same cells, in the grid's unit per metre.
pub fn derivative(grid: &Raster, direction: Direction) -> Result<Raster, GridError> {
    let i = Complex64::new(0.0, 1.0);
    match direction {
        Direction::North => apply_filter(grid, |kx, _| i * kx, true),
        Direction::East => apply_filter(grid, |_, ky| i * ky, true),
        Direction::Down => apply_filter(
            grid,
            |kx, ky| Complex64::new((kx * kx + ky * ky).sqrt(), 0.0),
            false,
        ),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The discrete Fourier transform by its definition, F(k, l) = Σ f(m, n)·e^(−2πi(km/R + ln/C)).
    fn dft2(a: &Array2<Complex64>) -> Array2<Complex64> {
        let (r, c) = a.dim();
        Array2::from_shape_fn((r, c), |(k, l)| {
            let mut sum = Complex64::new(0.0, 0.0);
            for ((m, n), &v) in a.indexed_iter() {
                let phase = -2.0
                    * std::f64::consts::PI
                    * ((k * m) as f64 / r as f64 + (l * n) as f64 / c as f64);
                sum += v * Complex64::from_polar(1.0, phase);
            }
            sum
        })
    }

    fn sample(r: usize, c: usize) -> Array2<Complex64> {
        Array2::from_shape_fn((r, c), |(i, j)| {
            Complex64::new(
                (0.7 * i as f64 + 0.3 * j as f64).sin(),
                (i * j) as f64 * 0.1,
            )
        })
    }

    #[test]
    fn fft2_is_the_discrete_fourier_transform_and_ifft2_undoes_it() {
        // A non-square, odd-by-even shape, so that rows and columns cannot be mixed up.
        let a = sample(5, 6);
        let mut f = a.clone();
        fft2(&mut f);
        let want = dft2(&a);
        for (got, want) in f.iter().zip(&want) {
            assert!((got - want).norm() < 1e-12, "{got} vs {want}");
        }
        ifft2(&mut f);
        for (got, want) in f.iter().zip(&a) {
            assert!((got - want).norm() < 1e-14, "{got} vs {want}");
        }
    }

    #[test]
    fn fft2_does_not_depend_on_memory_order() {
        // The same logical values in column-major memory (rows not contiguous, transformed in a
        // copy) give the same transform, bit for bit, as in row-major memory.
        let a = sample(4, 6);
        let mut row_major = a.t().as_standard_layout().into_owned();
        assert!(row_major.is_standard_layout());
        fft2(&mut row_major);
        let mut col_major = a.reversed_axes();
        assert!(!col_major.is_standard_layout());
        fft2(&mut col_major);
        assert_eq!(col_major, row_major);
        ifft2(&mut col_major);
        ifft2(&mut row_major);
        assert_eq!(col_major, row_major);
    }

    #[test]
    fn mirror_pad_reflects_and_flips_odd_halves() {
        let v = ndarray::array![[1.0, 2.0], [3.0, 4.0]];
        let re = |a: Array2<Complex64>| a.mapv(|z| z.re);
        assert_eq!(
            re(mirror_pad(v.view(), false, false)),
            ndarray::array![
                [1.0, 2.0, 2.0, 1.0],
                [3.0, 4.0, 4.0, 3.0],
                [3.0, 4.0, 4.0, 3.0],
                [1.0, 2.0, 2.0, 1.0]
            ]
        );
        assert_eq!(
            re(mirror_pad(v.view(), true, false)),
            ndarray::array![
                [1.0, 2.0, 2.0, 1.0],
                [3.0, 4.0, 4.0, 3.0],
                [-3.0, -4.0, -4.0, -3.0],
                [-1.0, -2.0, -2.0, -1.0]
            ]
        );
        assert_eq!(
            re(mirror_pad(v.view(), true, true)),
            ndarray::array![
                [1.0, 2.0, -2.0, -1.0],
                [3.0, 4.0, -4.0, -3.0],
                [-3.0, -4.0, 4.0, 3.0],
                [-1.0, -2.0, 2.0, 1.0]
            ]
        );
    }

    #[test]
    fn rasters_that_cannot_be_transformed_are_refused() {
        let ok = Raster::new(2, 2, (0.0, 100.0), (50.0, 50.0), vec![1.0; 4]).unwrap();
        let small = Raster::new(1, 2, (0.0, 100.0), (50.0, 50.0), vec![1.0; 2]).unwrap();
        assert_eq!(
            upward_continue(&small, 10.0),
            Err(GridError::TooSmall { nx: 1, ny: 2 })
        );
        let mut hole = ok.clone().with_nodata(-9999.0);
        hole.values[3] = -9999.0;
        assert_eq!(
            upward_continue(&hole, 10.0),
            Err(GridError::NotFinite { col: 1, row: 1 })
        );
        let mut nan = ok.clone();
        nan.values[1] = f64::NAN;
        assert_eq!(
            upward_continue(&nan, 10.0),
            Err(GridError::NotFinite { col: 1, row: 0 })
        );
        assert_eq!(
            upward_continue(&ok.clone().with_epsg(4326), 10.0),
            Err(GridError::Geographic(4326))
        );
        let broken = Raster {
            values: vec![1.0; 3],
            ..ok.clone()
        };
        assert!(matches!(
            upward_continue(&broken, 10.0),
            Err(GridError::Raster(RasterError::Shape { .. }))
        ));
        // A constant field continues to itself.
        let same = upward_continue(&ok.with_epsg(32753), 10.0).unwrap();
        for v in &same.values {
            assert!((v - 1.0).abs() < 1e-15, "{v}");
        }
        assert_eq!(same.epsg, Some(32753));
    }
}
