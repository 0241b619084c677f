//! The normal field of the reference ellipsoid (GRS80 or WGS84): normal gravity and the full normal
//! gravitational and gravity tensors in local NED at geodetic latitude and ellipsoidal height.
//!
//! The normal gravity potential in ellipsoidal coordinates (u, β) is (Heiskanen & Moritz 1967,
//! "Physical Geodesy", eq. 2-126)
//!
//! ```text
//! U = GM/E·atan(E/u) + ½ω²a²·(q/q₀)·(sin²β − 1/3) + ½ω²(u² + E²)·cos²β,
//! q = ½[(1 + 3u²/E²)·atan(E/u) − 3u/E],   q₀ = q(u = b),   E = √(a² − b²),
//! ```
//!
//! whose last term is the centrifugal potential ½ω²(X² + Y²); the gravitational potential is U minus
//! that term. Written in Earth-fixed Cartesian X, Y, Z (u from r² and Z, sin β = Z/u), both are
//! differentiated twice exactly with hyper-dual numbers (Fike & Alonso 2011) and rotated into NED.
//! q is evaluated by its series in E/u (derived from that of atan) where the closed form cancels.
//!
//! Units: SI in and out (rad, m, m/s², s⁻²). Frame of results: NED at the point (x north, y east,
//! z down); g_z > 0, and the vertical gradient of gravity is about +3086 E at the surface.

use crate::hyperdual::HyperDual;
use gravgrad_core::SymTensor;
use gravgrad_core::ellipsoid::Ellipsoid;
use gravgrad_core::mat3::{self, Mat3};

/// The normal field of one ellipsoid, with its constants prepared.
#[derive(Clone, Copy, Debug)]
pub struct NormalField {
    ell: Ellipsoid,
    /// Linear eccentricity E (m).
    e_lin: f64,
    q0: f64,
}

impl NormalField {
    pub fn new(ell: &Ellipsoid) -> Self {
        let b = ell.b();
        let e_lin = (ell.a * ell.a - b * b).sqrt();
        let q0 = q_of(HyperDual::cst(e_lin / b)).re;
        Self {
            ell: *ell,
            e_lin,
            q0,
        }
    }

    /// Earth-fixed Cartesian coordinates (m) of geodetic latitude φ (rad), longitude 0, height h (m).
    fn ecef(&self, lat: f64, h: f64) -> [f64; 3] {
        let (s, c) = lat.sin_cos();
        let e2 = self.ell.e2();
        let n = self.ell.a / (1.0 - e2 * s * s).sqrt();
        [(n + h) * c, 0.0, (n * (1.0 - e2) + h) * s]
    }

    /// Gravitational potential (m²/s²) at Earth-fixed X, Y, Z, as a hyper-dual number.
    fn potential(&self, x: HyperDual, y: HyperDual, z: HyperDual) -> HyperDual {
        let e = self.e_lin;
        let r2 = x * x + y * y + z * z;
        let d = r2 - e * e;
        let root = (HyperDual::cst(1.0) + (z * z * (4.0 * e * e)) / (d * d)).sqrt();
        let u2 = d * (root + 1.0) * 0.5;
        let u = u2.sqrt();
        let sin2b = (z * z) / u2;
        let t = HyperDual::cst(e) / u;
        let central = t.atan() * (self.ell.gm / e);
        let q = q_of(t);
        let flattening_term = q
            * (0.5 * self.ell.omega * self.ell.omega * self.ell.a * self.ell.a / self.q0)
            * (sin2b - 1.0 / 3.0);
        central + flattening_term
    }

    /// Hessian (s⁻²) and gradient (m/s²) of the gravitational potential in Earth-fixed axes.
    fn hessian_ecef(&self, p: [f64; 3]) -> (Mat3, [f64; 3]) {
        let mut h = [[0.0; 3]; 3];
        let mut g = [0.0; 3];
        for i in 0..3 {
            for j in i..3 {
                let mut v = [
                    HyperDual::cst(p[0]),
                    HyperDual::cst(p[1]),
                    HyperDual::cst(p[2]),
                ];
                v[i].e1 = 1.0;
                v[j].e2 = 1.0;
                let f = self.potential(v[0], v[1], v[2]);
                h[i][j] = f.e12;
                h[j][i] = f.e12;
                if i == j {
                    g[i] = f.e1;
                }
            }
        }
        (h, g)
    }

    /// Rotation from Earth-fixed axes to NED at latitude φ, longitude 0 (rows: north, east, down).
    fn ecef_to_ned(lat: f64) -> Mat3 {
        let (s, c) = lat.sin_cos();
        [[-s, 0.0, c], [0.0, 1.0, 0.0], [-c, 0.0, -s]]
    }

    /// Normal gravitational tensor (no centrifugal part), NED, s⁻²: what a gradiometer senses of the
    /// normal field (`docs/physics.md`). Trace 0.
    pub fn gravitational_tensor_ned(&self, lat: f64, h: f64) -> SymTensor {
        let (hm, _) = self.hessian_ecef(self.ecef(lat, h));
        let r = Self::ecef_to_ned(lat);
        SymTensor::sym_of(&mat3::mul(&mat3::mul(&r, &hm), &mat3::transpose(&r)))
    }

    /// Normal gravity tensor (gravitational plus centrifugal), NED, s⁻². Trace 2ω².
    pub fn gravity_tensor_ned(&self, lat: f64, h: f64) -> SymTensor {
        let w2 = self.ell.omega * self.ell.omega;
        let (hm, _) = self.hessian_ecef(self.ecef(lat, h));
        let hc = [
            [hm[0][0] + w2, hm[0][1], hm[0][2]],
            [hm[1][0], hm[1][1] + w2, hm[1][2]],
            [hm[2][0], hm[2][1], hm[2][2]],
        ];
        let r = Self::ecef_to_ned(lat);
        SymTensor::sym_of(&mat3::mul(&mat3::mul(&r, &hc), &mat3::transpose(&r)))
    }

    /// Normal gravity vector (gravitational plus centrifugal), NED, m/s²: (north, 0, down).
    pub fn gravity_ned(&self, lat: f64, h: f64) -> [f64; 3] {
        let p = self.ecef(lat, h);
        let (_, g) = self.hessian_ecef(p);
        let w2 = self.ell.omega * self.ell.omega;
        let gc = [g[0] + w2 * p[0], g[1] + w2 * p[1], g[2]];
        mat3::mul_vec(&Self::ecef_to_ned(lat), &gc)
    }

    /// Magnitude of normal gravity, m/s², at latitude φ (rad) and ellipsoidal height h (m).
    pub fn gravity(&self, lat: f64, h: f64) -> f64 {
        let g = self.gravity_ned(lat, h);
        (g[0] * g[0] + g[1] * g[1] + g[2] * g[2]).sqrt()
    }
}

/// q(x) = ½[(1 + 3/x²)·atan(x) − 3/x] with x = E/u. For x < 0.5 the series
/// q = ½ Σ_{k≥1} (−1)^(k+1)·4k/((2k+1)(2k+3))·x^(2k+1), which follows from atan's series term by term
/// and avoids the closed form's cancellation (it loses about six digits at the Earth's x ≈ 0.08).
fn q_of(x: HyperDual) -> HyperDual {
    if x.re < 0.5 {
        let x2 = x * x;
        let mut power = x * x2; // x³
        let mut sum = HyperDual::cst(0.0);
        for k in 1..=60u32 {
            let kf = k as f64;
            let c = 4.0 * kf / ((2.0 * kf + 1.0) * (2.0 * kf + 3.0));
            let term = power * if k % 2 == 1 { c } else { -c };
            sum = sum + term;
            if (term.re / sum.re).abs() < 1e-18 && k > 3 {
                break;
            }
            power = power * x2;
        }
        sum * 0.5
    } else {
        let inv = x.recip();
        ((inv * inv * 3.0 + 1.0) * x.atan() - inv * 3.0) * 0.5
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;
    use gravgrad_core::ellipsoid::{GRS80, WGS84};
    use gravgrad_core::units::{EOTVOS, G};

    #[test]
    fn q_series_matches_the_closed_form_where_both_are_accurate() {
        // At x = 0.45 the closed form has lost only ~2 digits; both must agree to 1e-12 relative.
        let x = HyperDual::cst(0.45);
        let series = q_of(x).re;
        let closed = 0.5 * ((1.0 + 3.0 / 0.2025) * 0.45f64.atan() - 3.0 / 0.45);
        assert_abs_diff_eq!(series, closed, epsilon = 1e-12 * closed.abs());
    }

    #[test]
    fn gravity_on_the_ellipsoid_equals_somigliana() {
        // Somigliana's formula is the exact normal gravity on the ellipsoid (Heiskanen & Moritz 1967,
        // 2-78); an independent formula from the potential's gradient here.
        for ell in [&GRS80, &WGS84] {
            let nf = NormalField::new(ell);
            for lat_deg in [-90.0, -61.0, -30.0, 0.0, 12.5, 45.0, 77.0, 90.0] {
                let lat = f64::to_radians(lat_deg);
                let got = nf.gravity(lat, 0.0);
                let want = ell.somigliana(lat);
                assert!((got - want).abs() < 1e-9, "{lat_deg}: {got} vs {want}");
            }
        }
    }

    #[test]
    fn traces_are_zero_and_two_omega_squared() {
        // Laplace: the gravitational tensor is trace-free outside masses; the centrifugal part adds
        // 2ω² = 10.635 E (docs/physics.md).
        let nf = NormalField::new(&GRS80);
        for (lat, h) in [(0.0, 0.0), (0.6, 350.0), (-1.2, 3000.0), (1.5, 100.0)] {
            let t = nf.gravitational_tensor_ned(lat, h);
            assert_abs_diff_eq!(t.trace(), 0.0, epsilon = 1e-6 * EOTVOS);
            let tg = nf.gravity_tensor_ned(lat, h);
            let two_w2 = 2.0 * GRS80.omega * GRS80.omega;
            assert_abs_diff_eq!(tg.trace(), two_w2, epsilon = 1e-6 * EOTVOS);
            assert_abs_diff_eq!(two_w2 / EOTVOS, 10.635, epsilon = 0.001);
        }
    }

    #[test]
    fn free_air_gradient_at_45_degrees() {
        // Common textbook value: 0.3086 mGal/m = 3086 E, ± 2 E (docs/physics.md).
        let nf = NormalField::new(&GRS80);
        let gzz = nf.gravity_tensor_ned(45f64.to_radians(), 0.0).zz / EOTVOS;
        assert_abs_diff_eq!(gzz, 3086.0, epsilon = 2.0);
        // And it is the vertical derivative of the gravity magnitude: (γ(h) − γ(h+1 m))·… by a
        // central difference over ±1 m (truncation ~1e-9 E).
        let lat = 45f64.to_radians();
        let dg = (nf.gravity(lat, -1.0) - nf.gravity(lat, 1.0)) / 2.0 / EOTVOS;
        assert_abs_diff_eq!(dg, gzz, epsilon = 0.01);
    }

    #[test]
    fn spherical_limit() {
        // With flattening → 0 and ω = 0 the field is a point mass: Gzz = 2GM/r³, Gxx = Gyy = −GM/r³.
        let sphere = Ellipsoid {
            f: 1e-12,
            omega: 0.0,
            ..GRS80
        };
        let nf = NormalField::new(&sphere);
        let r = GRS80.a + 1000.0;
        let t = nf.gravitational_tensor_ned(0.7, 1000.0);
        let k = GRS80.gm / r.powi(3);
        assert_abs_diff_eq!(t.zz, 2.0 * k, epsilon = 1e-6 * k);
        assert_abs_diff_eq!(t.xx, -k, epsilon = 1e-6 * k);
        assert_abs_diff_eq!(t.yy, -k, epsilon = 1e-6 * k);
        assert_abs_diff_eq!(t.xz, 0.0, epsilon = 1e-6 * k);
        let _ = G;
    }

    #[test]
    fn tidal_convergence_of_two_falling_bodies() {
        // Common textbook illustration, no source: two bodies 25 m apart horizontally, released 250 m
        // up, land about 1 mm closer: ½·|Gxx|·25 m·t², t = √(2h/g).
        let nf = NormalField::new(&GRS80);
        let lat = 45f64.to_radians();
        let gxx = nf.gravitational_tensor_ned(lat, 125.0).xx;
        let t2 = 2.0 * 250.0 / nf.gravity(lat, 125.0);
        let closer = 0.5 * gxx.abs() * 25.0 * t2;
        assert_abs_diff_eq!(closer, 1e-3, epsilon = 0.1e-3);
    }
}
