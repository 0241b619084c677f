//! The symmetric gravity-gradient tensor G_ij = ∂g_i/∂x_j = ∂²V/∂x_i∂x_j (V = GM/r > 0, g = ∇V).
//!
//! Six stored components in the order Gxx Gxy Gxz Gyy Gyz Gzz. The frame is whatever the caller
//! says it is (sensor s, navigation NED n, or map m; see `docs/physics.md`); units are s⁻² inside
//! the code. With z down, Gzz > 0 above a mass excess, and the trace is −4πGρ (zero in air).

use crate::mat3::{self, Mat3};
use serde::{Deserialize, Serialize};

/// Component names in storage order.
pub const COMPONENTS: [&str; 6] = ["xx", "xy", "xz", "yy", "yz", "zz"];

/// A symmetric 3×3 tensor stored as its six independent components (s⁻² for gradients).
#[derive(Clone, Copy, Debug, PartialEq, Default, Serialize, Deserialize)]
pub struct SymTensor {
    pub xx: f64,
    pub xy: f64,
    pub xz: f64,
    pub yy: f64,
    pub yz: f64,
    pub zz: f64,
}

impl SymTensor {
    /// From the six components in storage order (xx, xy, xz, yy, yz, zz).
    pub fn from_array(c: [f64; 6]) -> Self {
        Self {
            xx: c[0],
            xy: c[1],
            xz: c[2],
            yy: c[3],
            yz: c[4],
            zz: c[5],
        }
    }

    /// The six components in storage order.
    pub fn to_array(&self) -> [f64; 6] {
        [self.xx, self.xy, self.xz, self.yy, self.yz, self.zz]
    }

    /// The symmetric part ½(m + mᵀ) of a full matrix.
    pub fn sym_of(m: &Mat3) -> Self {
        Self {
            xx: m[0][0],
            xy: 0.5 * (m[0][1] + m[1][0]),
            xz: 0.5 * (m[0][2] + m[2][0]),
            yy: m[1][1],
            yz: 0.5 * (m[1][2] + m[2][1]),
            zz: m[2][2],
        }
    }

    /// The full symmetric matrix.
    pub fn to_matrix(&self) -> Mat3 {
        [
            [self.xx, self.xy, self.xz],
            [self.xy, self.yy, self.yz],
            [self.xz, self.yz, self.zz],
        ]
    }

    /// Trace Gxx + Gyy + Gzz (−4πGρ; zero outside masses).
    pub fn trace(&self) -> f64 {
        self.xx + self.yy + self.zz
    }

    /// First rotational invariant I1 = GxxGyy + GyyGzz + GxxGzz − Gxy² − Gyz² − Gxz²
    /// (Pedersen & Rasmussen 1990, Geophysics 55:1558–1566).
    pub fn invariant_i1(&self) -> f64 {
        self.xx * self.yy + self.yy * self.zz + self.xx * self.zz
            - self.xy * self.xy
            - self.yz * self.yz
            - self.xz * self.xz
    }

    /// Second rotational invariant I2 = det G (Pedersen & Rasmussen 1990).
    pub fn invariant_i2(&self) -> f64 {
        mat3::det(&self.to_matrix())
    }

    /// Rotates the tensor from frame a to frame b: T_b = C·T_a·Cᵀ, where C maps frame-a vectors
    /// into frame b (v_b = C·v_a). With C = C_sn this takes a sensor-frame tensor to NED.
    pub fn rotated(&self, c: &Mat3) -> Self {
        let t = self.to_matrix();
        let ct = mat3::mul(c, &t);
        Self::sym_of(&mat3::mul(&ct, &mat3::transpose(c)))
    }

    /// [`Self::rotated`] with the symmetry used: P = C·T_a, then the six distinct entries of P·Cᵀ
    /// (45 products where the general product takes 54), for per-sample rotations on hot paths. The
    /// same matrix to within rounding; units those of the tensor.
    #[inline]
    pub fn congruence(&self, c: &Mat3) -> Self {
        let g = self.to_matrix();
        let p: Mat3 = std::array::from_fn(|r| {
            std::array::from_fn(|j| c[r][0] * g[0][j] + c[r][1] * g[1][j] + c[r][2] * g[2][j])
        });
        let e = |i: usize, j: usize| p[i][0] * c[j][0] + p[i][1] * c[j][1] + p[i][2] * c[j][2];
        Self::from_array([e(0, 0), e(0, 1), e(0, 2), e(1, 1), e(1, 2), e(2, 2)])
    }

    /// The inverse rotation, T_a = Cᵀ·T_b·C (with C = C_sn: NED to the sensor frame), formed as
    /// P = T_b·C, then the six distinct entries of Cᵀ·P (45 products); units those of the tensor.
    #[inline]
    pub fn congruence_transposed(&self, c: &Mat3) -> Self {
        let g = self.to_matrix();
        let p: Mat3 = std::array::from_fn(|r| {
            std::array::from_fn(|j| g[r][0] * c[0][j] + g[r][1] * c[1][j] + g[r][2] * c[2][j])
        });
        let e = |i: usize, j: usize| c[0][i] * p[0][j] + c[1][i] * p[1][j] + c[2][i] * p[2][j];
        Self::from_array([e(0, 0), e(0, 1), e(0, 2), e(1, 1), e(1, 2), e(2, 2)])
    }

    /// Component-wise scaling (for unit conversion at the edges).
    pub fn scaled(&self, k: f64) -> Self {
        Self::from_array(self.to_array().map(|v| v * k))
    }
}

impl std::ops::Add for SymTensor {
    type Output = SymTensor;
    fn add(self, o: SymTensor) -> SymTensor {
        let (a, b) = (self.to_array(), o.to_array());
        SymTensor::from_array(std::array::from_fn(|i| a[i] + b[i]))
    }
}

impl std::ops::Sub for SymTensor {
    type Output = SymTensor;
    fn sub(self, o: SymTensor) -> SymTensor {
        let (a, b) = (self.to_array(), o.to_array());
        SymTensor::from_array(std::array::from_fn(|i| a[i] - b[i]))
    }
}

/// Gradient tensor of a point mass, s⁻², at `r` = observation point minus source position (m),
/// any right-handed Cartesian frame: G_ij = GM(3 r_i r_j − r² δ_ij)/r⁵.
/// (Analytic; e.g. Blakely 1995, "Potential Theory in Gravity and Magnetic Applications", ch. 3.)
pub fn point_mass_tensor(gm: f64, r: [f64; 3]) -> SymTensor {
    let r2 = r[0] * r[0] + r[1] * r[1] + r[2] * r[2];
    let r5 = r2 * r2 * r2.sqrt();
    let k = gm / r5;
    SymTensor {
        xx: k * (3.0 * r[0] * r[0] - r2),
        xy: k * 3.0 * r[0] * r[1],
        xz: k * 3.0 * r[0] * r[2],
        yy: k * (3.0 * r[1] * r[1] - r2),
        yz: k * 3.0 * r[1] * r[2],
        zz: k * (3.0 * r[2] * r[2] - r2),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::attitude::Attitude;
    use crate::mat3::mul_vec;
    use approx::{assert_abs_diff_eq, assert_relative_eq};

    #[test]
    fn congruences_equal_the_general_rotation() {
        let g = SymTensor::from_array([1200.0, -35.0, 410.0, -900.0, 77.0, -300.0]);
        let c = Attitude::from_degrees(4.0, -9.5, 213.0).c_sn();
        let close = |a: SymTensor, b: SymTensor| {
            assert_abs_diff_eq!(a.to_array()[..], b.to_array()[..], epsilon = 1e-12);
        };
        close(g.congruence(&c), g.rotated(&c));
        close(g.congruence_transposed(&c), g.rotated(&mat3::transpose(&c)));
        close(g.congruence(&c).congruence_transposed(&c), g);
    }

    /// Relative to the larger magnitude plus an absolute floor: the sum, where approx's
    /// `relative_eq` takes the larger of the two, so the floored checks keep this helper.
    fn rel_close(a: f64, b: f64, rel: f64, abs: f64) -> bool {
        (a - b).abs() <= rel * a.abs().max(b.abs()) + abs
    }

    #[test]
    fn point_mass_tensor_is_trace_free_and_radial() {
        // Analytic: outside the mass the potential is harmonic, so trace = 0 (Laplace);
        // directly below a mass (z down, source above means r_z < 0) Gzz = 2GM/r³.
        let gm = 1.0e9 * crate::units::G;
        let t = point_mass_tensor(gm, [0.0, 0.0, -100.0]);
        assert_abs_diff_eq!(t.trace(), 0.0, epsilon = 1e-25);
        assert_relative_eq!(t.zz, 2.0 * gm / 1.0e6, epsilon = 0.0, max_relative = 1e-14);
        assert_relative_eq!(t.xx, -gm / 1.0e6, epsilon = 0.0, max_relative = 1e-14);
    }

    #[test]
    fn rotating_the_tensor_equals_rotating_the_geometry() {
        // Independent fact: the point-mass tensor of the rotated position vector must equal
        // the rotated point-mass tensor (the formula is frame-covariant).
        let gm = 3.0e12 * crate::units::G;
        let r_s = [120.0, -45.0, 80.0];
        let att = Attitude::from_degrees(7.0, -4.0, 131.0);
        let c = att.c_sn();
        let by_rotation = point_mass_tensor(gm, r_s).rotated(&c);
        let by_geometry = point_mass_tensor(gm, mul_vec(&c, &r_s));
        for (a, b) in by_rotation.to_array().iter().zip(by_geometry.to_array()) {
            assert!(rel_close(*a, b, 1e-12, 1e-22), "{a} vs {b}");
        }
    }

    #[test]
    fn rotation_keeps_trace_and_invariants() {
        // Pedersen & Rasmussen 1990: trace, I1 and I2 are rotation invariants.
        let t = SymTensor::from_array([-1543.0, 12.0, -35.5, -1520.0, 8.25, 3110.0]).scaled(1e-9);
        for (r, p, h) in [(0.0, 0.0, 90.0), (12.0, -7.0, 200.0), (-30.0, 45.0, -170.0)] {
            let u = t.rotated(&Attitude::from_degrees(r, p, h).c_sn());
            assert!(rel_close(u.trace(), t.trace(), 1e-12, 1e-21));
            assert!(rel_close(u.invariant_i1(), t.invariant_i1(), 1e-12, 1e-30));
            assert!(rel_close(u.invariant_i2(), t.invariant_i2(), 1e-12, 1e-39));
        }
    }

    #[test]
    fn heading_90_swaps_north_and_east_components() {
        // With ψ = 90° the sensor x axis points east, so sensor Gxx becomes NED Gyy.
        let t = SymTensor::from_array([5.0, 0.0, 0.0, -2.0, 0.0, -3.0]);
        let u = t.rotated(&Attitude::from_degrees(0.0, 0.0, 90.0).c_sn());
        assert_abs_diff_eq!(u.yy, 5.0, epsilon = 1e-12);
        assert_abs_diff_eq!(u.xx, -2.0, epsilon = 1e-12);
        assert_abs_diff_eq!(u.zz, -3.0, epsilon = 1e-12);
    }
}
