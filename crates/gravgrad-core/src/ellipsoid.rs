//! Reference ellipsoids: the defining and derived constants the normal field and the projections
//! use. Values: GRS80 from Moritz 2000 (J. Geodesy 74:128–133); WGS84 from NIMA TR8350.2 (3rd ed.,
//! 2000), tables 3.1 and 3.3.

use serde::{Deserialize, Serialize};

/// Which reference ellipsoid a survey refers to.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, Default)]
pub enum EllipsoidName {
    #[default]
    #[serde(rename = "GRS80")]
    Grs80,
    #[serde(rename = "WGS84")]
    Wgs84,
}

/// An ellipsoid of revolution with its normal-gravity constants (SI units).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Ellipsoid {
    pub name: EllipsoidName,
    /// Semi-major axis a (m).
    pub a: f64,
    /// Flattening f.
    pub f: f64,
    /// Geocentric gravitational constant GM (m³/s²).
    pub gm: f64,
    /// Angular velocity ω (rad/s).
    pub omega: f64,
    /// Normal gravity at the equator γe (m/s²).
    pub gamma_e: f64,
    /// Normal gravity at the poles γp (m/s²).
    pub gamma_p: f64,
}

/// GRS80 (Moritz 2000): a, GM, J2 = 1.08263e-3 and ω define it; f, γe, γp are derived values.
pub const GRS80: Ellipsoid = Ellipsoid {
    name: EllipsoidName::Grs80,
    a: 6_378_137.0,
    f: 1.0 / 298.257_222_101,
    gm: 3.986_005e14,
    omega: 7.292_115e-5,
    gamma_e: 9.780_326_771_5,
    gamma_p: 9.832_186_368_5,
};

/// WGS84 (NIMA TR8350.2): a, 1/f = 298.257223563, GM = 3.986004418e14, ω define it.
pub const WGS84: Ellipsoid = Ellipsoid {
    name: EllipsoidName::Wgs84,
    a: 6_378_137.0,
    f: 1.0 / 298.257_223_563,
    gm: 3.986_004_418e14,
    omega: 7.292_115e-5,
    gamma_e: 9.780_325_335_9,
    gamma_p: 9.832_184_937_8,
};

impl EllipsoidName {
    /// The constants of this ellipsoid.
    pub fn params(self) -> &'static Ellipsoid {
        match self {
            EllipsoidName::Grs80 => &GRS80,
            EllipsoidName::Wgs84 => &WGS84,
        }
    }
}

impl Ellipsoid {
    /// Semi-minor axis b = a(1 − f) (m).
    pub fn b(&self) -> f64 {
        self.a * (1.0 - self.f)
    }

    /// First eccentricity squared e² = f(2 − f).
    pub fn e2(&self) -> f64 {
        self.f * (2.0 - self.f)
    }

    /// Normal gravity on the ellipsoid at geodetic latitude φ (rad), m/s², by Somigliana's closed
    /// formula γ = (a γe cos²φ + b γp sin²φ)/√(a² cos²φ + b² sin²φ)
    /// (Heiskanen & Moritz 1967, "Physical Geodesy", eq. 2-78).
    pub fn somigliana(&self, lat_rad: f64) -> f64 {
        let (s, c) = lat_rad.sin_cos();
        let b = self.b();
        (self.a * self.gamma_e * c * c + b * self.gamma_p * s * s)
            / (self.a * self.a * c * c + b * b * s * s).sqrt()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn somigliana_returns_the_defining_values_at_equator_and_pole() {
        // Moritz 2000: γe = 9.7803267715, γp = 9.8321863685 m/s² for GRS80.
        assert_abs_diff_eq!(GRS80.somigliana(0.0), 9.780_326_771_5, epsilon = 1e-12);
        assert_abs_diff_eq!(
            GRS80.somigliana(std::f64::consts::FRAC_PI_2),
            9.832_186_368_5,
            epsilon = 1e-12
        );
    }

    #[test]
    fn grs80_normal_gravity_at_45_degrees() {
        // Moritz 2000, GRS80 normal gravity at φ = 45°: 9.806199203 m/s² (from memory of the
        // published table of the closed formula; the series form agrees to 1e-9).
        let g45 = GRS80.somigliana(45f64.to_radians());
        assert_abs_diff_eq!(g45, 9.806_199_203, epsilon = 2e-9);
    }

    #[test]
    fn grs80_and_wgs84_flattening_agree_to_published_digits() {
        // Semi-minor axes: GRS80 b = 6356752.3141 m (Moritz 2000), WGS84 b = 6356752.3142 m (TR8350.2).
        assert_abs_diff_eq!(GRS80.b(), 6_356_752.314_1, epsilon = 1e-4);
        assert_abs_diff_eq!(WGS84.b(), 6_356_752.314_2, epsilon = 1e-4);
    }
}
