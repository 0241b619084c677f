//! Whether a DEM covers a set of points plus a margin.
//!
//! Frame: the raster's projected map frame, easting and northing in metres.

/// The answer of [`coverage`]: the DEM's extent, the extent the points need, and by how much the
/// DEM falls short on each side (0 where it reaches far enough).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Coverage {
    /// Whether the DEM reaches the points' extent plus the margin on every side.
    pub covered: bool,
    /// The DEM's outer edges: west, east, south, north (m).
    pub dem: [f64; 4],
    /// The points' extent widened by the margin: west, east, south, north (m); `None` without a
    /// finite point.
    pub needed: Option<[f64; 4]>,
    /// How far the DEM falls short of `needed` on the west, east, south and north sides (m, ≥ 0).
    pub shortfall: [f64; 4],
}

/// Checks that the grid of outer edges `dem` = [west, east, south, north] covers the points
/// (easting, northing, height; only the first two used, non-finite points skipped) widened by
/// `margin_m` on every side. No finite point: covered, nothing needed.
pub fn coverage(dem: [f64; 4], points: &[[f64; 3]], margin_m: f64) -> Coverage {
    let mut ext = [
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
    ];
    for p in points {
        if p[0].is_finite() && p[1].is_finite() {
            ext = [
                ext[0].min(p[0]),
                ext[1].max(p[0]),
                ext[2].min(p[1]),
                ext[3].max(p[1]),
            ];
        }
    }
    if ext[0] > ext[1] {
        return Coverage {
            covered: true,
            dem,
            needed: None,
            shortfall: [0.0; 4],
        };
    }
    let m = margin_m.max(0.0);
    let needed = [ext[0] - m, ext[1] + m, ext[2] - m, ext[3] + m];
    let shortfall = [
        (dem[0] - needed[0]).max(0.0),
        (needed[1] - dem[1]).max(0.0),
        (dem[2] - needed[2]).max(0.0),
        (needed[3] - dem[3]).max(0.0),
    ];
    Coverage {
        covered: shortfall.iter().all(|s| *s == 0.0),
        dem,
        needed: Some(needed),
        shortfall,
    }
}
