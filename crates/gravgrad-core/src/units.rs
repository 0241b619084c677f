//! Units and physical constants, and the one place where internal SI values meet the units of
//! files and screens (Eötvös, mGal, degrees).

/// One Eötvös in s⁻² (definition: 1 E = 1e-9 s⁻² = 0.1 mGal/km).
pub const EOTVOS: f64 = 1e-9;
/// One milligal in m/s² (definition: 1 mGal = 1e-5 m/s²).
pub const MGAL: f64 = 1e-5;
/// Newtonian constant of gravitation in m³ kg⁻¹ s⁻² (CODATA 2018).
pub const G: f64 = 6.674_30e-11;
/// Earth's rotation rate in rad/s (GRS80, Moritz 2000).
pub const EARTH_RATE: f64 = 7.292_115e-5;

/// Gradient in s⁻² → Eötvös.
#[inline]
pub fn to_eotvos(s2: f64) -> f64 {
    s2 / EOTVOS
}

/// Gradient in Eötvös → s⁻².
#[inline]
pub fn from_eotvos(e: f64) -> f64 {
    e * EOTVOS
}

/// Acceleration in m/s² → mGal.
#[inline]
pub fn to_mgal(ms2: f64) -> f64 {
    ms2 / MGAL
}

/// Acceleration in mGal → m/s².
#[inline]
pub fn from_mgal(mgal: f64) -> f64 {
    mgal * MGAL
}

/// Wraps an angle in degrees into [-180, 180).
#[inline]
pub fn wrap_deg_180(deg: f64) -> f64 {
    let w = (deg + 180.0).rem_euclid(360.0) - 180.0;
    // rem_euclid can round up to exactly 360 for tiny negative inputs.
    if w >= 180.0 { w - 360.0 } else { w }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn eotvos_is_a_tenth_of_a_milligal_per_kilometre() {
        // Definition: 1 E = 0.1 mGal/km.
        let one_e = from_eotvos(1.0);
        let mgal_per_km = to_mgal(one_e * 1000.0);
        assert_abs_diff_eq!(mgal_per_km, 0.1, epsilon = 1e-15);
    }

    #[test]
    fn wrapping_keeps_the_direction() {
        assert_eq!(wrap_deg_180(190.0), -170.0);
        assert_eq!(wrap_deg_180(-190.0), 170.0);
        assert_eq!(wrap_deg_180(180.0), -180.0);
        assert_eq!(wrap_deg_180(359.5), -0.5);
        let w = wrap_deg_180(-1e-20);
        assert!((-180.0..180.0).contains(&w));
        assert_abs_diff_eq!(w, 0.0, epsilon = 1e-12);
    }
}
