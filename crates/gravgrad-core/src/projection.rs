//! Transverse Mercator and UTM: geodetic latitude/longitude ↔ grid easting/northing, with the
//! meridian convergence and point scale, by Krüger's series to sixth order in n (Karney 2011,
//! "Transverse Mercator with an accuracy of a few nanometers", J. Geodesy 85:475–485, eqs. 7–11, 35,
//! 36). Accurate to well under a millimetre within the UTM zone and far beyond it.
//!
//! Angles in radians, distances in metres. Grid north differs from true north by the meridian
//! convergence γ: a direction's grid azimuth = its true azimuth − γ (`docs/physics.md`, map frame m).

use crate::ellipsoid::Ellipsoid;

/// A transverse Mercator projection on an ellipsoid.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TransverseMercator {
    /// Central meridian, rad.
    pub lon0: f64,
    /// Scale on the central meridian.
    pub k0: f64,
    pub false_easting: f64,
    pub false_northing: f64,
    a: f64,
    e: f64,
    /// Rectifying radius A (Karney 2011, eq. 14).
    big_a: f64,
    alpha: [f64; 6],
    beta: [f64; 6],
}

/// Latitudes the UTM system is defined for, degrees: 80°S to 84°N (the polar caps beyond use the
/// polar stereographic UPS; NGA, "The Universal Grids and the Transverse Mercator and Polar
/// Stereographic Map Projections", NGA.SIG.0012, 2014, from memory). gravgrad offers no polar
/// projection: a survey reaching past these latitudes is refused.
pub const UTM_LATITUDES_DEG: [f64; 2] = [-80.0, 84.0];

/// Whether UTM is defined at latitude `lat_deg` (degrees; see [`UTM_LATITUDES_DEG`]).
pub fn utm_defined_at(lat_deg: f64) -> bool {
    (UTM_LATITUDES_DEG[0]..=UTM_LATITUDES_DEG[1]).contains(&lat_deg)
}

/// A UTM zone was asked for that does not exist.
#[derive(Debug, thiserror::Error, PartialEq)]
#[error("UTM zone {0}: expected 1 to 60")]
pub struct BadZone(pub u32);

impl TransverseMercator {
    /// A transverse Mercator projection with the given central meridian (rad), scale and false origin.
    pub fn new(
        ell: &Ellipsoid,
        lon0: f64,
        k0: f64,
        false_easting: f64,
        false_northing: f64,
    ) -> Self {
        let f = ell.f;
        let n = f / (2.0 - f);
        let (n2, n3, n4, n5, n6) = (n * n, n.powi(3), n.powi(4), n.powi(5), n.powi(6));
        let big_a = ell.a / (1.0 + n) * (1.0 + n2 / 4.0 + n4 / 64.0 + n6 / 256.0);
        let alpha = [
            n / 2.0 - 2.0 * n2 / 3.0 + 5.0 * n3 / 16.0 + 41.0 * n4 / 180.0 - 127.0 * n5 / 288.0
                + 7891.0 * n6 / 37800.0,
            13.0 * n2 / 48.0 - 3.0 * n3 / 5.0 + 557.0 * n4 / 1440.0 + 281.0 * n5 / 630.0
                - 1983433.0 * n6 / 1935360.0,
            61.0 * n3 / 240.0 - 103.0 * n4 / 140.0
                + 15061.0 * n5 / 26880.0
                + 167603.0 * n6 / 181440.0,
            49561.0 * n4 / 161280.0 - 179.0 * n5 / 168.0 + 6601661.0 * n6 / 7257600.0,
            34729.0 * n5 / 80640.0 - 3418889.0 * n6 / 1995840.0,
            212378941.0 * n6 / 319334400.0,
        ];
        let beta = [
            n / 2.0 - 2.0 * n2 / 3.0 + 37.0 * n3 / 96.0 - n4 / 360.0 - 81.0 * n5 / 512.0
                + 96199.0 * n6 / 604800.0,
            n2 / 48.0 + n3 / 15.0 - 437.0 * n4 / 1440.0 + 46.0 * n5 / 105.0
                - 1118711.0 * n6 / 3870720.0,
            17.0 * n3 / 480.0 - 37.0 * n4 / 840.0 - 209.0 * n5 / 4480.0 + 5569.0 * n6 / 90720.0,
            4397.0 * n4 / 161280.0 - 11.0 * n5 / 504.0 - 830251.0 * n6 / 7257600.0,
            4583.0 * n5 / 161280.0 - 108847.0 * n6 / 3991680.0,
            20648693.0 * n6 / 638668800.0,
        ];
        Self {
            lon0,
            k0,
            false_easting,
            false_northing,
            a: ell.a,
            e: ell.e2().sqrt(),
            big_a,
            alpha,
            beta,
        }
    }

    /// UTM zone `zone` (1–60), northern or southern hemisphere.
    pub fn utm(ell: &Ellipsoid, zone: u32, south: bool) -> Result<Self, BadZone> {
        if !(1..=60).contains(&zone) {
            return Err(BadZone(zone));
        }
        let lon0 = (zone as f64 * 6.0 - 183.0).to_radians();
        Ok(Self::new(
            ell,
            lon0,
            0.9996,
            500_000.0,
            if south { 10_000_000.0 } else { 0.0 },
        ))
    }

    /// The UTM zone of a longitude (degrees), without the Norway and Svalbard exceptions.
    pub fn utm_zone_of(lon_deg: f64) -> u32 {
        ((((lon_deg + 180.0) / 6.0).floor() as i64).rem_euclid(60) + 1) as u32
    }

    /// (easting, northing) in metres, meridian convergence γ (rad) and point scale k at (φ, λ) in rad.
    pub fn forward(&self, lat: f64, lon: f64) -> (f64, f64, f64, f64) {
        let e = self.e;
        let dl = lon - self.lon0;
        let s = lat.sin();
        let t = (s.atanh() - e * (e * s).atanh()).sinh();
        let (sl, cl) = dl.sin_cos();
        let xi1 = t.atan2(cl);
        let eta1 = (sl / (1.0 + t * t).sqrt()).atanh();
        let (mut xi, mut eta) = (xi1, eta1);
        let (mut sigma, mut tau) = (1.0, 0.0);
        for (j, a) in self.alpha.iter().enumerate() {
            let k = 2.0 * (j as f64 + 1.0);
            let (s2, c2) = (k * xi1).sin_cos();
            let (sh, ch) = ((k * eta1).sinh(), (k * eta1).cosh());
            xi += a * s2 * ch;
            eta += a * c2 * sh;
            sigma += k * a * c2 * ch;
            tau += k * a * s2 * sh;
        }
        let easting = self.false_easting + self.k0 * self.big_a * eta;
        let northing = self.false_northing + self.k0 * self.big_a * xi;
        let gamma = (t / (1.0 + t * t).sqrt() * dl.tan()).atan() + tau.atan2(sigma);
        // Karney 2011, eq. 25: k = k0·(A/a)·√(1 − e² sin²φ)·√(1 + tan²φ)/√(t² + cos²λ)·√(σ² + τ²).
        let tan_lat = lat.tan();
        let k = self.k0 * self.big_a / self.a
            * (1.0 - e * e * s * s).sqrt()
            * (1.0 + tan_lat * tan_lat).sqrt()
            / (t * t + cl * cl).sqrt()
            * (sigma * sigma + tau * tau).sqrt();
        (easting, northing, gamma, k)
    }

    /// (φ, λ) in rad at (easting, northing) in metres.
    pub fn inverse(&self, easting: f64, northing: f64) -> (f64, f64) {
        let e = self.e;
        let xi = (northing - self.false_northing) / (self.k0 * self.big_a);
        let eta = (easting - self.false_easting) / (self.k0 * self.big_a);
        let (mut xi1, mut eta1) = (xi, eta);
        for (j, b) in self.beta.iter().enumerate() {
            let k = 2.0 * (j as f64 + 1.0);
            xi1 -= b * (k * xi).sin() * (k * eta).cosh();
            eta1 -= b * (k * xi).cos() * (k * eta).sinh();
        }
        let (se, cx, sx) = (eta1.sinh(), xi1.cos(), xi1.sin());
        let tau1 = sx / (se * se + cx * cx).sqrt();
        // Newton for τ = tan φ (Karney 2011, eqs. 19–21).
        let mut ti = tau1;
        for _ in 0..10 {
            let si = (e * (e * ti / (1.0 + ti * ti).sqrt()).atanh()).sinh();
            let ti1 = ti * (1.0 + si * si).sqrt() - si * (1.0 + ti * ti).sqrt();
            let d = (tau1 - ti1) / (1.0 + ti1 * ti1).sqrt() * (1.0 + (1.0 - e * e) * ti * ti)
                / ((1.0 - e * e) * (1.0 + ti * ti).sqrt());
            ti += d;
            if d.abs() < 1e-14 {
                break;
            }
        }
        (ti.atan(), self.lon0 + se.atan2(cx))
    }
}
