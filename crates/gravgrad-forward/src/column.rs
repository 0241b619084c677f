//! A vertical column of square cross-section seen from afar: the finite vertical line mass, and the
//! same line corrected for the square's spread.
//!
//! Frame: NED (x north, y east, z down), metres; density kg/m³; tensors in s⁻². Sign convention of
//! `docs/physics.md`: Gzz > 0 above a mass excess.
//!
//! **Line.** A vertical segment of mass λ per metre at horizontal offset (x, y) = source − observer,
//! its ends at w₁ < w₂ (w = source depth − observer depth), has the tensor of the point-mass kernel
//! K_ij = (3 r_i r_j − r² δ_ij)/r⁵ (Blakely 1995, *Potential Theory in Gravity and Magnetic
//! Applications*, ch. 3) integrated along it. With s² = x² + y² and R = √(s² + w²) the integrals are
//! elementary (derived here):
//!
//! ```text
//! T_zz = Gλ [−w/R³],   T_xz = Gλ x [−1/R³],   T_yz = Gλ y [−1/R³]      (each [·] from w₁ to w₂)
//! F    = ∫ 3/R⁵ dw = [w(2w² + 3s²)/(s⁴R³)]
//! T_xy = Gλ xy F,   T_xx = −T_zz/2 + Gλ (x² − y²) F/2,   T_yy = −T_zz/2 − Gλ (x² − y²) F/2
//! ```
//!
//! F is computed without the cancellation of its 1/s⁴ (an observer nearly above the line): for w ≠ 0
//! of sign σ, w(2w² + 3s²)/R³ = σ(2 − s⁴·H(w)) with H(w) = (3w² + 4s²)/(R³(2R³ + |w|(2w² + 3s²))),
//! so that for two ends on one side F = −σ(H(w₂) − H(w₁)), and for ends on both sides (the observer
//! level with the segment, never above it) F = 4/s⁴ − H(w₁) − H(w₂).
//!
//! **Square column.** A column of side a and density ρ is the line with λ = ρa² averaged over the
//! square. Taylor expansion over the square's offsets (ξ, η) gives the line, no first- or third-order
//! terms (symmetry), and the second-order term (a²/24)(∂_xx + ∂_yy)T = −(a²/24)∂_zz T by Laplace's
//! equation off the line. Along a vertical segment ∂_zz of the integral is the difference of the
//! kernel's derivative at its ends:
//!
//! ```text
//! T_column ≈ T_line − (a²/24)·Gλ·[∂_w K_ij]_{w₁}^{w₂}
//! ∂_w K_xx = 3w/R⁵ − 15x²w/R⁷,  ∂_w K_xy = −15xyw/R⁷,  ∂_w K_xz = 3x/R⁵ − 15xw²/R⁷
//! ∂_w K_zz = 9w/R⁵ − 15w³/R⁷    (yy, yz likewise)
//! ```
//!
//! **Error.** What is left is the fourth-order remainder. Along the offset (ξ, η) it is at most
//! |ξ|⁴/4! times a fourth horizontal derivative of T, a sixth derivative of 1/r, at most 6!/r⁷ in any
//! directions (the n-th derivative of 1/r along a unit vector is n!·P_n(cos θ)/r^(n+1), |P_n| ≤ 1,
//! and a symmetric multilinear form on a Hilbert space is no larger in any directions than along
//! one: Banach 1938, Studia Math. 7:36–44). With ⟨|ξ|⁴⟩ = 7a⁴/180 over the square, every component's error is at most
//!
//! ```text
//! |ΔT_ij| ≤ (7/6)·G·|ρ|·a⁶ · ∫ dw / d(w)⁷  ≤  (7/6)·G·|ρ|·a⁶·h / d⁷
//! ```
//!
//! d(w) the distance from the observer to the column's cross-section at depth w, d the distance to
//! the column, h its height: relative to the column's own tensor (about 2Gρa²h/d³) about
//! (7/12)(a/d)⁴. Tested against the prism of Nagy et al. on random columns.
//!
//! **Point form.** Farther still the column (side a, height h, mass M = ρa²h, centre offset
//! r = source − observer) is one point with its second moments: the same expansion over the whole
//! box, ⟨ξ²⟩ = ⟨η²⟩ = a²/12 and ⟨ζ²⟩ = h²/12, gives (a²/24)(∂_xx + ∂_yy)K + (h²/24)∂_zz K =
//! ((h² − a²)/24)·∂_zz K by Laplace's equation, so
//!
//! ```text
//! T ≈ GM·[ K_ij + ((h² − a²)/24)·∂_zz K_ij ]
//! ∂_zz K_xy = xy(105z²/r⁹ − 15/r⁷),  ∂_zz K_xz = x(105z³/r⁹ − 45z/r⁷),
//! ∂_zz K_zz = 105z⁴/r⁹ − 90z²/r⁷ + 9/r⁵   (the fourth derivatives of 1/r)
//! ```
//!
//! one square root and one division per column. Its remainder is bounded as the line's, with
//! ⟨|ξ|⁴⟩ = 7a⁴/180 + a²h²/36 + h⁴/80 over the box and d the distance to the box:
//!
//! ```text
//! |ΔT_ij| ≤ G·|ρ|·a²h·(7a⁴/6 + 5a²h²/6 + 3h⁴/8) / d⁷
//! ```

use gravgrad_core::SymTensor;
use gravgrad_core::units::G;

/// Constant of the error bound: |ΔT_ij| ≤ `FAR_ERROR_CONSTANT`·G·|ρ|·a⁶·∫dw/d(w)⁷ (module docs).
pub const FAR_ERROR_CONSTANT: f64 = 7.0 / 6.0;

/// The point form's error bound over G·|ρ|·a²h/d⁷ for a column of side `a` and height `h` (m):
/// 7a⁴/6 + 5a²h²/6 + 3h⁴/8, m⁴ (module docs).
pub fn point_error_factor(a: f64, h: f64) -> f64 {
    let (a2, h2) = (a * a, h * h);
    7.0 / 6.0 * a2 * a2 + 5.0 / 6.0 * a2 * h2 + 0.375 * h2 * h2
}

/// A vertical column of square cross-section in NED: centre `north`, `east` (m), side `side` (m),
/// `z = [top, bottom]` (m, down positive, top ≤ bottom), density contrast `density` (kg/m³).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Column {
    pub north: f64,
    pub east: f64,
    pub side: f64,
    pub z: [f64; 2],
    pub density: f64,
}

impl Column {
    /// The tensor (s⁻²) at `obs` (NED, m) of the column's mass as a vertical line through its axis.
    /// Undefined on the axis itself (an observer level with the segment at s = 0).
    pub fn tensor_line(&self, obs: [f64; 3]) -> SymTensor {
        let (x, y) = (self.north - obs[0], self.east - obs[1]);
        let ends = [self.z[0] - obs[2], self.z[1] - obs[2]];
        let gl = G * self.density * self.side * self.side;
        line_terms(gl, x, y, ends, 0.0)
    }

    /// The tensor (s⁻²) at `obs` (NED, m) of the column as its line plus the square's second-order
    /// term: the far form, within the bound of the module docs. Use only away from the column.
    pub fn tensor_far(&self, obs: [f64; 3]) -> SymTensor {
        let (x, y) = (self.north - obs[0], self.east - obs[1]);
        let ends = [self.z[0] - obs[2], self.z[1] - obs[2]];
        let gl = G * self.density * self.side * self.side;
        line_terms(gl, x, y, ends, self.side * self.side / 24.0)
    }

    /// The tensor (s⁻²) at `obs` (NED, m) of the column as one point with its second moments: the
    /// point form, within the bound of the module docs. Use only far from the column.
    pub fn tensor_point(&self, obs: [f64; 3]) -> SymTensor {
        let (x, y) = (self.north - obs[0], self.east - obs[1]);
        let h = self.z[1] - self.z[0];
        let z = 0.5 * (self.z[0] + self.z[1]) - obs[2];
        let [dz, dx, dq] = point_terms(x, y, z, h, self.side);
        let d = 0.5 * (x * x - y * y) * dq;
        let gl = G * self.density * self.side * self.side;
        SymTensor::from_array(
            [-0.5 * dz + d, x * y * dq, x * dx, -0.5 * dz - d, y * dx, dz].map(|v| gl * v),
        )
    }
}

/// The line's tensor for Gλ = `gl` at horizontal offset (x, y) (source − observer, m) with its ends
/// at depths `w` relative to the observer (m, `w[0] ≤ w[1]`), minus `spread`·∂_zz of it (`spread` =
/// a²/24 for a square of side a, 0 for the bare line).
#[inline]
pub fn line_terms(gl: f64, x: f64, y: f64, w: [f64; 2], spread: f64) -> SymTensor {
    let [dz, dx, dq] = far_terms(x, y, w, spread);
    let d = 0.5 * (x * x - y * y) * dq;
    SymTensor::from_array(
        [-0.5 * dz + d, x * y * dq, x * dx, -0.5 * dz - d, y * dx, dz].map(|v| gl * v),
    )
}

/// The three numbers that make a line's tensor (with `spread` as in [`line_terms`]), per unit Gλ:
/// [dz, dx, dq] with T_zz = dz, T_xz = x·dx, T_yz = y·dx, T_xy = x·y·dq,
/// T_xx − T_yy = (x² − y²)·dq and T_xx + T_yy = −dz (trace free). Summing them over many columns
/// (weighted by density, and by x, y as the components need) costs fewer operations than six
/// components each.
#[inline]
pub fn far_terms(x: f64, y: f64, w: [f64; 2], spread: f64) -> [f64; 3] {
    let s2 = x * x + y * y;
    let e1 = end_terms(s2, w[0], spread);
    let e2 = end_terms(s2, w[1], spread);
    let mut dq = e2[2] - e1[2];
    if w[0] < 0.0 && w[1] > 0.0 {
        // The observer level with the segment: F = 4/s⁴ − H(w₁) − H(w₂) (module docs).
        dq += 4.0 / (s2 * s2);
    }
    [e2[0] - e1[0], e2[1] - e1[1], dq]
}

/// The point form's three numbers as [`far_terms`] gives them (per unit Gρa², so that they carry
/// the height `h`): a column of side `a` (m) whose centre is at horizontal offset (x, y) and depth
/// z relative to the observer (source − observer, m).
#[inline]
pub fn point_terms(x: f64, y: f64, z: f64, h: f64, a: f64) -> [f64; 3] {
    let s2 = x * x + y * y;
    let z2 = z * z;
    let r2 = s2 + z2;
    let i2 = 1.0 / r2;
    let i5 = i2 * i2 * i2.sqrt();
    let (i7, c2) = (i5 * i2, (h * h - a * a) / 24.0);
    let i9 = 105.0 * i7 * i2;
    [
        h * ((3.0 * z2 - r2) * i5 + c2 * (z2 * (z2 * i9 - 90.0 * i7) + 9.0 * i5)),
        h * z * (3.0 * i5 + c2 * (z2 * i9 - 45.0 * i7)),
        h * (3.0 * i5 + c2 * (z2 * i9 - 15.0 * i7)),
    ]
}

/// One end's share of [`far_terms`] at depth w: [Z, X, Q] with, per unit Gλ,
/// Z = −w/R³ − spread·∂_w K_zz, X = −1/R³ − spread·∂_w K_xz/x and Q = −σ·H(w) + spread·15w/R⁷
/// (σ the sign of w, H of the module docs; the 2σ/s⁴ of each end is left out, as it cancels unless
/// the ends are on both sides).
#[inline(always)]
fn end_terms(s2: f64, w: f64, spread: f64) -> [f64; 3] {
    let r2 = s2 + w * w;
    let r = r2.sqrt();
    let r3 = r2 * r;
    // One division: q = 1/(R²·D) gives 1/R² = q·D and 1/D = q·R².
    let den = 2.0 * r3 + w.abs() * (2.0 * w * w + 3.0 * s2);
    let q = 1.0 / (r2 * den);
    let i2 = q * den;
    let i3 = i2 * i2 * r;
    let h = (3.0 * w * w + 4.0 * s2) * i3 * (q * r2);
    let i5 = i3 * i2;
    // 15w/R⁷: ∂_w K_xy = −xy·p, ∂_w K_zz = 9w/R⁵ − w²·p, ∂_w K_xz = x(3/R⁵ − w·p).
    let p = 15.0 * w * i5 * i2;
    let sigma = if w >= 0.0 { 1.0 } else { -1.0 };
    [
        -w * i3 - spread * (9.0 * w * i5 - w * w * p),
        -i3 - spread * (3.0 * i5 - w * p),
        -sigma * h + spread * p,
    ]
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::prism::Prism;
    use approx::assert_abs_diff_eq;

    fn col() -> Column {
        Column {
            north: 120.0,
            east: -340.0,
            side: 50.0,
            z: [-180.0, -95.0],
            density: 2670.0,
        }
    }

    #[test]
    fn line_is_the_limit_of_point_masses_along_it_and_trace_free() {
        // Independent: 4000 point masses of Gλ·dw at the midpoints of the segment's pieces.
        let c = col();
        let obs = [-900.0, 400.0, -250.0];
        let t = c.tensor_line(obs).to_array();
        let n = 4000;
        let dz = (c.z[1] - c.z[0]) / n as f64;
        let gl = G * c.density * c.side * c.side;
        let mut want = [0.0; 6];
        for k in 0..n {
            let z = c.z[0] + (k as f64 + 0.5) * dz;
            let p = gravgrad_core::tensor::point_mass_tensor(
                gl * dz,
                [obs[0] - c.north, obs[1] - c.east, obs[2] - z],
            );
            for (w, v) in want.iter_mut().zip(p.to_array()) {
                *w += v;
            }
        }
        let scale = want.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        // Midpoint rule: relative error (dz/d)²/24 ≈ 1e-12 here.
        assert_abs_diff_eq!(t[..], want[..], epsilon = 1e-9 * scale);
        assert_abs_diff_eq!(t[0] + t[3] + t[5], 0.0, epsilon = 1e-12 * scale);
    }

    #[test]
    fn point_form_is_within_its_bound_of_the_prism_and_trace_free() {
        // Columns short and tall against their side, at 8 to 60 sizes (the larger of side and
        // height) in four directions; the bound uses the distance to the box.
        for (h, top) in [(5.0, -105.0), (85.0, -180.0), (300.0, -400.0)] {
            let c = Column {
                z: [top, top + h],
                ..col()
            };
            let p = Prism::new(
                [c.north - 25.0, c.north + 25.0],
                [c.east - 25.0, c.east + 25.0],
                c.z,
                c.density,
            );
            let size = c.side.max(h);
            for dir in [
                [1.0f64, 0.0, -0.3],
                [0.6, 0.8, -0.5],
                [0.0, 1.0, 0.0],
                [0.3, 0.2, -1.0],
            ] {
                for dist in [8.0, 15.0, 30.0, 60.0] {
                    let nrm = (dir[0] * dir[0] + dir[1] * dir[1] + dir[2] * dir[2]).sqrt();
                    let centre = [c.north, c.east, 0.5 * (c.z[0] + c.z[1])];
                    let obs: [f64; 3] =
                        std::array::from_fn(|i| centre[i] + dir[i] / nrm * dist * size);
                    let exact = p.tensor_closed(obs).to_array();
                    let t = c.tensor_point(obs).to_array();
                    let gap = |v: f64, lo: f64, hi: f64| (lo - v).max(v - hi).max(0.0);
                    let d = (gap(obs[0], p.x[0], p.x[1]).powi(2)
                        + gap(obs[1], p.y[0], p.y[1]).powi(2)
                        + gap(obs[2], p.z[0], p.z[1]).powi(2))
                    .sqrt();
                    let bound = G * c.density * c.side * c.side * h * point_error_factor(c.side, h)
                        / d.powi(7);
                    // The closed form's own rounding far out: about 1e-15·(D/size)³ of the tensor.
                    let scale = exact.iter().fold(0.0f64, |m, v| m.max(v.abs()));
                    let slack = 1e-15 * dist.powi(3) * scale;
                    let err = (0..6).fold(0.0f64, |m, i| m.max((t[i] - exact[i]).abs()));
                    assert!(err <= bound + slack, "h {h} at {dist}: {err:e} > {bound:e}");
                    assert_abs_diff_eq!(t[0] + t[3] + t[5], 0.0, epsilon = 1e-12 * scale);
                }
            }
        }
    }

    #[test]
    fn far_form_is_within_its_bound_of_the_prism_and_the_line_is_not() {
        // Against the closed-form prism: the far form within (7/6)·Gρa⁶h/d⁷ at 6 to 40 sides.
        let c = col();
        let p = Prism::new(
            [c.north - 25.0, c.north + 25.0],
            [c.east - 25.0, c.east + 25.0],
            c.z,
            c.density,
        );
        for (k, dir) in [
            [1.0f64, 0.0, -0.3],
            [0.6, 0.8, -0.5],
            [0.0, 1.0, 0.0],
            [0.3, 0.2, -1.0],
        ]
        .iter()
        .enumerate()
        {
            for dist in [6.0, 10.0, 20.0, 40.0] {
                let nrm = (dir[0] * dir[0] + dir[1] * dir[1] + dir[2] * dir[2]).sqrt();
                let centre = [c.north, c.east, 0.5 * (c.z[0] + c.z[1])];
                let obs: [f64; 3] =
                    std::array::from_fn(|i| centre[i] + dir[i] / nrm * dist * c.side);
                let exact = p.tensor_closed(obs).to_array();
                let far = c.tensor_far(obs).to_array();
                let line = c.tensor_line(obs).to_array();
                // Distance from the observer to the column (a box).
                let gap = |v: f64, lo: f64, hi: f64| (lo - v).max(v - hi).max(0.0);
                let d = (gap(obs[0], p.x[0], p.x[1]).powi(2)
                    + gap(obs[1], p.y[0], p.y[1]).powi(2)
                    + gap(obs[2], p.z[0], p.z[1]).powi(2))
                .sqrt();
                let h = c.z[1] - c.z[0];
                let bound = FAR_ERROR_CONSTANT * G * c.density * c.side.powi(6) * h / d.powi(7);
                let err = (0..6).fold(0.0f64, |m, i| m.max((far[i] - exact[i]).abs()));
                let err_line = (0..6).fold(0.0f64, |m, i| m.max((line[i] - exact[i]).abs()));
                assert!(err <= bound, "dir {k} at {dist}: {err:e} > {bound:e}");
                assert!(
                    err < err_line,
                    "dir {k} at {dist}: {err:e} vs line {err_line:e}"
                );
            }
        }
    }
}
