//! Attitude of the sensor frame s (x forward, y right, z down) in local north-east-down n.
//!
//! Heading ψ, pitch θ, roll φ, rotation order z-y-x: C_sn = Rz(ψ)·Ry(θ)·Rx(φ) maps sensor-frame
//! vectors into NED, v_n = C_sn·v_s (`docs/physics.md`; e.g. Jekeli 2001, "Inertial Navigation
//! Systems with Geodetic Applications", §1.2).

use crate::mat3::Mat3;

/// Roll, pitch and heading in radians.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct Attitude {
    pub roll: f64,
    pub pitch: f64,
    pub heading: f64,
}

impl Attitude {
    /// From angles in degrees (the unit of files and screens).
    pub fn from_degrees(roll_deg: f64, pitch_deg: f64, heading_deg: f64) -> Self {
        Self {
            roll: roll_deg.to_radians(),
            pitch: pitch_deg.to_radians(),
            heading: heading_deg.to_radians(),
        }
    }

    /// C_sn = Rz(ψ)·Ry(θ)·Rx(φ), mapping sensor-frame vectors into NED.
    pub fn c_sn(&self) -> Mat3 {
        let (sf, cf) = self.roll.sin_cos();
        let (st, ct) = self.pitch.sin_cos();
        let (sp, cp) = self.heading.sin_cos();
        [
            [cp * ct, cp * st * sf - sp * cf, cp * st * cf + sp * sf],
            [sp * ct, sp * st * sf + cp * cf, sp * st * cf - cp * sf],
            [-st, ct * sf, ct * cf],
        ]
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mat3::{self, mul, mul_vec};

    fn rz(a: f64) -> Mat3 {
        [
            [a.cos(), -a.sin(), 0.0],
            [a.sin(), a.cos(), 0.0],
            [0.0, 0.0, 1.0],
        ]
    }
    fn ry(a: f64) -> Mat3 {
        [
            [a.cos(), 0.0, a.sin()],
            [0.0, 1.0, 0.0],
            [-a.sin(), 0.0, a.cos()],
        ]
    }
    fn rx(a: f64) -> Mat3 {
        [
            [1.0, 0.0, 0.0],
            [0.0, a.cos(), -a.sin()],
            [0.0, a.sin(), a.cos()],
        ]
    }

    #[test]
    fn heading_90_sends_sensor_x_to_east() {
        // docs/physics.md check: ψ = 90° sends sensor x to east (NED y).
        let v = mul_vec(
            &Attitude::from_degrees(0.0, 0.0, 90.0).c_sn(),
            &[1.0, 0.0, 0.0],
        );
        assert!(v[0].abs() < 1e-15 && (v[1] - 1.0).abs() < 1e-15 && v[2].abs() < 1e-15);
    }

    #[test]
    fn positive_pitch_raises_the_nose_and_positive_roll_drops_the_right_wing() {
        // Aerospace convention: nose up means sensor x gains an upward (−down) component;
        // right wing down means sensor y gains a downward component.
        let x = mul_vec(
            &Attitude::from_degrees(0.0, 10.0, 0.0).c_sn(),
            &[1.0, 0.0, 0.0],
        );
        assert!(x[2] < 0.0);
        let y = mul_vec(
            &Attitude::from_degrees(10.0, 0.0, 0.0).c_sn(),
            &[0.0, 1.0, 0.0],
        );
        assert!(y[2] > 0.0);
    }

    #[test]
    fn closed_form_equals_the_product_of_elementary_rotations() {
        let (r, p, h) = (0.3, -0.2, 2.5);
        let c = Attitude {
            roll: r,
            pitch: p,
            heading: h,
        }
        .c_sn();
        let want = mul(&mul(&rz(h), &ry(p)), &rx(r));
        for i in 0..3 {
            for j in 0..3 {
                assert!((c[i][j] - want[i][j]).abs() < 1e-15);
            }
        }
        // Orthonormal with determinant +1.
        assert!((mat3::det(&c) - 1.0).abs() < 1e-14);
    }
}
