//! Point mass and homogeneous sphere, in any right-handed Cartesian frame (NED in gravgrad), SI units.
//! Analytic: V = GM/r, g = ∇V = −GM·r/r³, G_ij = GM(3 r_i r_j − r² δ_ij)/r⁵ with r = observation minus
//! source (e.g. Blakely 1995, "Potential Theory in Gravity and Magnetic Applications", ch. 3).

use gravgrad_core::SymTensor;
use gravgrad_core::tensor::point_mass_tensor;
use gravgrad_core::units::G;

/// The potential, gravity and gradient tensor at one point.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct Field {
    /// Potential V, m²/s² (positive).
    pub potential: f64,
    /// Gravity g = ∇V, m/s², in the frame of the coordinates.
    pub g: [f64; 3],
    /// Gradient tensor ∂²V/∂x_i∂x_j, s⁻².
    pub tensor: SymTensor,
}

/// Field of a point mass `mass_kg` at `source`, observed at `obs` (m, same frame).
pub fn point_mass(mass_kg: f64, source: [f64; 3], obs: [f64; 3]) -> Field {
    let r = [obs[0] - source[0], obs[1] - source[1], obs[2] - source[2]];
    point_mass_rel(G * mass_kg, r)
}

/// Field of a point with gravitational parameter `gm` (m³/s²) at offset `r` = observation − source.
pub fn point_mass_rel(gm: f64, r: [f64; 3]) -> Field {
    let r2 = r[0] * r[0] + r[1] * r[1] + r[2] * r[2];
    let rn = r2.sqrt();
    let k3 = gm / (r2 * rn);
    Field {
        potential: gm / rn,
        g: [-k3 * r[0], -k3 * r[1], -k3 * r[2]],
        tensor: point_mass_tensor(gm, r),
    }
}

/// Field of a homogeneous sphere (radius m, density contrast kg/m³), outside and inside.
/// Outside it is the point mass M = 4/3·πR³ρ; inside V = 2πGρ(R² − r²/3), g = −4/3·πGρ·r,
/// G_ij = −4/3·πGρ·δ_ij (trace −4πGρ, Poisson).
pub fn sphere(radius: f64, density: f64, center: [f64; 3], obs: [f64; 3]) -> Field {
    let r = [obs[0] - center[0], obs[1] - center[1], obs[2] - center[2]];
    let r2 = r[0] * r[0] + r[1] * r[1] + r[2] * r[2];
    if r2 >= radius * radius {
        let mass = 4.0 / 3.0 * std::f64::consts::PI * radius.powi(3) * density;
        return point_mass_rel(G * mass, r);
    }
    let k = 4.0 / 3.0 * std::f64::consts::PI * G * density;
    Field {
        potential: 2.0 * std::f64::consts::PI * G * density * (radius * radius - r2 / 3.0),
        g: [-k * r[0], -k * r[1], -k * r[2]],
        tensor: SymTensor {
            xx: -k,
            xy: 0.0,
            xz: 0.0,
            yy: -k,
            yz: 0.0,
            zz: -k,
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn sphere_is_continuous_at_its_surface_and_obeys_poisson_inside() {
        // Analytic: potential and gravity are continuous across the surface; trace = −4πGρ inside.
        let (r, rho) = (100.0, 500.0);
        let out = sphere(r, rho, [0.0; 3], [0.0, 0.0, -r * (1.0 + 1e-12)]);
        let inn = sphere(r, rho, [0.0; 3], [0.0, 0.0, -r * (1.0 - 1e-12)]);
        assert_abs_diff_eq!(out.potential, inn.potential, epsilon = 1e-9 * out.potential);
        assert_abs_diff_eq!(out.g[2], inn.g[2], epsilon = 1e-9 * out.g[2].abs());
        let t = inn.tensor.trace();
        assert_abs_diff_eq!(t, -4.0 * std::f64::consts::PI * G * rho, epsilon = 1e-20);
        assert_abs_diff_eq!(out.tensor.trace(), 0.0, epsilon = 1e-20);
    }

    #[test]
    fn gravity_points_to_the_mass_and_is_minus_the_gradient_of_potential() {
        // Source below (z down: larger z), observer above: g_z > 0, Gzz > 0 (docs/physics.md).
        let f = point_mass(1e12, [10.0, -5.0, 200.0], [0.0, 0.0, 0.0]);
        assert!(f.g[2] > 0.0 && f.tensor.zz > 0.0);
        // Central differences of V and g (step 1e-3 m; truncation error ~1e-9 relative).
        let h = 1e-3;
        for i in 0..3 {
            let mut a = [0.0; 3];
            let mut b = [0.0; 3];
            a[i] = h;
            b[i] = -h;
            let fa = point_mass(1e12, [10.0, -5.0, 200.0], a);
            let fb = point_mass(1e12, [10.0, -5.0, 200.0], b);
            let dv = (fa.potential - fb.potential) / (2.0 * h);
            assert!(
                (dv - f.g[i]).abs() < 1e-7 * f.g[2].abs(),
                "dV/dx{i} {dv} vs g {}",
                f.g[i]
            );
            let dgz = (fa.g[2] - fb.g[2]) / (2.0 * h);
            let want = [f.tensor.xz, f.tensor.yz, f.tensor.zz][i];
            assert_abs_diff_eq!(dgz, want, epsilon = 1e-6 * f.tensor.zz.abs());
        }
    }
}
