//! Default cell size and blanking distance from the survey's line spacing.
//!
//! Frame and units: positions in the projected map frame (easting x, northing y, metres); every
//! distance returned is in metres.
//!
//! Minimum curvature resolves nothing finer than the data between the lines: the usual practice is
//! a cell of a quarter to a fifth of the line spacing. A finer cell only adds nodes in the empty
//! space between lines, where the iteration converges slowest: on the synthetic five-hour log of
//! `xtask sample-log` (8 km lines 2.3 km apart over 260 km), 50 m cells make a lattice of about
//! 180 × 5200 nodes whose finest level did not converge in 2000 sweeps, and the run's grid stage
//! took 18 minutes; the quarter-spacing cell (500 m) gives 22 × 518 cells and 5 s
//! (`docs/performance.md`).
//!
//! - **Line spacing** ([`line_spacing`]): each line's chord (first to last point) gives its
//!   direction; the survey direction is the length-weighted mean of the chords' doubled angles
//!   (so that lines flown both ways agree). Lines within 20° of it are traverse lines (tie lines
//!   across them are left out); their centroids are projected on the perpendicular, sorted, and
//!   the spacing is the median of the gaps between neighbours, gaps under a metre (segments or
//!   reflights of one line) left out.
//! - **Cell** ([`default_cell`]): a quarter of the spacing, rounded down to 1, 2, 2.5 or 5 times a
//!   power of ten.
//! - **Blanking** ([`default_blanking`]): 0.6 × the spacing, and at least 250 m: every cell between
//!   two neighbouring lines is then kept (none is farther than half the spacing from a line), while
//!   the middle of a gap where a line is missing (1.2 spacings from its neighbours and more) is not.

/// Cell size used when the recipe sets none and the line spacing is unknown, m.
pub const FALLBACK_CELL_M: f64 = 50.0;
/// Smallest default blanking distance, m (the default before it followed the line spacing).
pub const MIN_BLANKING_M: f64 = 250.0;
/// Largest angle between a traverse line and the survey direction, degrees.
const TRAVERSE_DEG: f64 = 20.0;

/// The typical spacing of parallel survey lines, m: see the module documentation. `lines` holds
/// each line's positions (easting, northing), m, in flight order. `None` when fewer than two
/// traverse lines with distinct positions are found.
pub fn line_spacing(lines: &[Vec<(f64, f64)>]) -> Option<f64> {
    // Chord of each line: direction (doubled angle), length, centroid.
    let chords: Vec<(f64, f64, (f64, f64))> = lines
        .iter()
        .filter_map(|l| {
            let finite: Vec<(f64, f64)> = l
                .iter()
                .copied()
                .filter(|p| p.0.is_finite() && p.1.is_finite())
                .collect();
            let (&a, &b) = (finite.first()?, finite.last()?);
            let (dx, dy) = (b.0 - a.0, b.1 - a.1);
            let len = dx.hypot(dy);
            if len <= 0.0 {
                return None;
            }
            let n = finite.len() as f64;
            let cx = finite.iter().map(|p| p.0 - a.0).sum::<f64>() / n + a.0;
            let cy = finite.iter().map(|p| p.1 - a.1).sum::<f64>() / n + a.1;
            Some((dy.atan2(dx), len, (cx, cy)))
        })
        .collect();
    let (s, c) = chords.iter().fold((0.0, 0.0), |(s, c), &(th, len, _)| {
        (s + len * (2.0 * th).sin(), c + len * (2.0 * th).cos())
    });
    if s == 0.0 && c == 0.0 {
        return None;
    }
    let axis = 0.5 * s.atan2(c);
    // Unit normal to the survey direction.
    let (nx, ny) = (-axis.sin(), axis.cos());
    let tol = TRAVERSE_DEG.to_radians();
    let mut offsets: Vec<f64> = chords
        .iter()
        .filter(|&&(th, _, _)| {
            // Angle between the line and the axis, folded to 0..90°.
            let d = (th - axis).rem_euclid(std::f64::consts::PI);
            d.min(std::f64::consts::PI - d) <= tol
        })
        .map(|&(_, _, (cx, cy))| cx * nx + cy * ny)
        .collect();
    offsets.sort_by(f64::total_cmp);
    let mut gaps: Vec<f64> = offsets
        .windows(2)
        .map(|w| w[1] - w[0])
        .filter(|&g| g >= 1.0)
        .collect();
    gravgrad_core::stats::median(&mut gaps)
}

/// The default cell for a line spacing (m): a quarter of it, rounded down to 1, 2, 2.5 or 5 times
/// a power of ten, m. [`FALLBACK_CELL_M`] when the spacing is unknown or not a positive finite
/// distance.
pub fn default_cell(spacing: Option<f64>) -> f64 {
    let Some(s) = spacing.filter(|s| s.is_finite() && *s > 0.0) else {
        return FALLBACK_CELL_M;
    };
    let q = 0.25 * s;
    let decade = 10f64.powf(q.log10().floor());
    let mantissa = [5.0, 2.5, 2.0, 1.0]
        .into_iter()
        .find(|&m| m * decade <= q * (1.0 + 1e-12))
        .unwrap_or(1.0);
    mantissa * decade
}

/// The default blanking distance for a line spacing (m): 0.6 × the spacing, at least
/// [`MIN_BLANKING_M`], m; [`MIN_BLANKING_M`] when the spacing is unknown.
pub fn default_blanking(spacing: Option<f64>) -> f64 {
    spacing
        .filter(|s| s.is_finite() && *s > 0.0)
        .map_or(MIN_BLANKING_M, |s| (0.6 * s).max(MIN_BLANKING_M))
}
