//! Cartesian multipole moments of a mass about a centre, to second order, and the gradient tensor
//! of the truncated expansion with its error bound.
//!
//! Frame: NED (x north, y east, z down), metres; masses kg; tensors s⁻².
//!
//! For a mass of density ρ(s) about a centre c (s = source − c), the moments are
//! M = ∫ρ, D_i = ∫ρ s_i, Q_ij = ∫ρ s_i s_j (raw, not trace-free). With R = observation − c and
//! φ = 1/|R|, the Taylor expansion of 1/|R − s| in s gives the tensor
//!
//! ```text
//! T_ab ≈ G [ M ∂_ab φ − D_i ∂_abi φ + ½ Q_ij ∂_abij φ ]
//! ```
//!
//! with the derivatives of 1/r written out (e.g. Blakely 1995, ch. 3, for the point mass):
//! ∂_ab φ = (3R_aR_b − r²δ_ab)/r⁵, −D_i∂_abi φ = [15R_aR_b(D·R) − 3r²(R_aD_b + R_bD_a + (D·R)δ_ab)]/r⁷,
//! ½Q_ij∂_abij φ = ½[105R_aR_b(RᵀQR) − 15r²(R_aR_b trQ + δ_ab RᵀQR + 2R_a(QR)_b + 2R_b(QR)_a)
//! + 3r⁴(δ_ab trQ + 2Q_ab)]/r⁹. Each term is trace-free, like the field in air.
//!
//! **Error bound.** If all the mass lies within a distance a of c and r = |R| > a, each component
//! of the error is at most
//!
//! ```text
//! |ΔT_ab| ≤ 20 G Σ|m| a³ / (r − a)⁶
//! ```
//!
//! Σ|m| the absolute mass (positive and negative parts both counted). Derivation: for one point
//! mass the error is the Lagrange remainder of the Taylor series along the segment from R to R − s,
//! (1/3!)·|s|³ times a fifth derivative of 1/r in the directions (ŝ, ŝ, ŝ, e_a, e_b) at a point at
//! least r − a away; the fifth directional derivative of 1/r is 5!·P₅(cos θ)/r⁶ in magnitude when all
//! directions are equal, |P₅| ≤ 1, and a symmetric multilinear form on a Euclidean space takes its
//! largest value on equal unit vectors (Banach 1938, Studia Math. 7:36–44), so the mixed derivative is
//! at most 5!/r⁶ too: 120/6 = 20.

use gravgrad_core::units::G;
use gravgrad_forward::prism::Prism;

/// The constant of the error bound: 5!/3! (see the module documentation).
pub const BOUND_FACTOR: f64 = 20.0;

/// Moments of a mass about some centre: M (kg), D (kg·m), Q in storage order xx xy xz yy yz zz
/// (kg·m²), and the absolute mass Σ|m| (kg) for the error bound.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Moments {
    pub m: f64,
    pub d: [f64; 3],
    pub q: [f64; 6],
    pub abs_m: f64,
}

impl Moments {
    /// The moments of a uniform prism about `centre` (NED, m). For a box the mixed moments
    /// factor: ∫ρ s_x s_y = M·s̄_x·s̄_y, and ∫ρ s_x² = M·(u₀² + u₀u₁ + u₁²)/3 over [u₀, u₁].
    pub fn of_prism(p: &Prism, centre: [f64; 3]) -> Self {
        let u = [
            [p.x[0] - centre[0], p.x[1] - centre[0]],
            [p.y[0] - centre[1], p.y[1] - centre[1]],
            [p.z[0] - centre[2], p.z[1] - centre[2]],
        ];
        let vol = (u[0][1] - u[0][0]) * (u[1][1] - u[1][0]) * (u[2][1] - u[2][0]);
        let m = p.density * vol;
        let mean = u.map(|[a, b]| 0.5 * (a + b));
        let sq = u.map(|[a, b]| (a * a + a * b + b * b) / 3.0);
        Self {
            m,
            d: mean.map(|s| m * s),
            q: [
                m * sq[0],
                m * mean[0] * mean[1],
                m * mean[0] * mean[2],
                m * sq[1],
                m * mean[1] * mean[2],
                m * sq[2],
            ],
            abs_m: m.abs(),
        }
    }

    /// The same mass's moments about a centre moved by `shift` (new centre = old centre + shift):
    /// D' = D − M·d, Q'_ij = Q_ij − d_i D_j − d_j D_i + M d_i d_j.
    pub fn shifted(&self, shift: [f64; 3]) -> Self {
        let (m, d, q) = (self.m, self.d, self.q);
        let s = shift;
        let qq = |i: usize, j: usize, k: usize| q[k] - s[i] * d[j] - s[j] * d[i] + m * s[i] * s[j];
        Self {
            m,
            d: [d[0] - m * s[0], d[1] - m * s[1], d[2] - m * s[2]],
            q: [
                qq(0, 0, 0),
                qq(0, 1, 1),
                qq(0, 2, 2),
                qq(1, 1, 3),
                qq(1, 2, 4),
                qq(2, 2, 5),
            ],
            abs_m: self.abs_m,
        }
    }

    /// Adds another mass's moments about the same centre.
    pub fn add(&mut self, o: &Moments) {
        self.m += o.m;
        self.abs_m += o.abs_m;
        for k in 0..3 {
            self.d[k] += o.d[k];
        }
        for k in 0..6 {
            self.q[k] += o.q[k];
        }
    }

    /// These moments multiplied by G (for evaluation: G·M in m³/s², and so on).
    pub fn times_g(&self) -> Self {
        Self {
            m: G * self.m,
            d: self.d.map(|v| G * v),
            q: self.q.map(|v| G * v),
            abs_m: G * self.abs_m,
        }
    }

    /// The tensor (s⁻², storage order xx xy xz yy yz zz) of the expansion to second order at
    /// `r` = observation point − centre (NED, m), for moments already multiplied by G
    /// ([`Moments::times_g`]).
    #[inline]
    pub fn tensor_g(&self, r: [f64; 3]) -> [f64; 6] {
        let (m, d, q) = (self.m, self.d, self.q);
        let r2 = r[0] * r[0] + r[1] * r[1] + r[2] * r[2];
        let inv = 1.0 / r2;
        let i5 = inv * inv * inv.sqrt();
        let i7 = i5 * inv;
        let i9 = i7 * inv;
        let dr = d[0] * r[0] + d[1] * r[1] + d[2] * r[2];
        let qr = [
            q[0] * r[0] + q[1] * r[1] + q[2] * r[2],
            q[1] * r[0] + q[3] * r[1] + q[4] * r[2],
            q[2] * r[0] + q[4] * r[1] + q[5] * r[2],
        ];
        let rqr = r[0] * qr[0] + r[1] * qr[1] + r[2] * qr[2];
        let tr = q[0] + q[3] + q[5];
        // Coefficients of R_aR_b, of δ_ab, and of the vector terms, gathered per power of r.
        let c_rr = 3.0 * m * i5 + 15.0 * dr * i7 + 0.5 * (105.0 * rqr - 15.0 * r2 * tr) * i9;
        let c_delta =
            -m * r2 * i5 - 3.0 * r2 * dr * i7 + 0.5 * (-15.0 * r2 * rqr + 3.0 * r2 * r2 * tr) * i9;
        // Vector terms: −3r²(R_aD_b + R_bD_a)/r⁷ − 15r²(R_a(QR)_b + R_b(QR)_a)/r⁹, i.e.
        // R_a w_b + R_b w_a with w = −3r²D/r⁷ − 15r²QR/r⁹.
        let w = [
            -3.0 * r2 * i7 * d[0] - 15.0 * r2 * i9 * qr[0],
            -3.0 * r2 * i7 * d[1] - 15.0 * r2 * i9 * qr[1],
            -3.0 * r2 * i7 * d[2] - 15.0 * r2 * i9 * qr[2],
        ];
        // Q term: 3r⁴·2Q_ab/2 = 3r⁴Q_ab/r⁹.
        let c_q = 3.0 * r2 * r2 * i9;
        let comp = |a: usize, b: usize, k: usize| {
            let delta = if a == b { c_delta } else { 0.0 };
            c_rr * r[a] * r[b] + delta + r[a] * w[b] + r[b] * w[a] + c_q * q[k]
        };
        [
            comp(0, 0, 0),
            comp(0, 1, 1),
            comp(0, 2, 2),
            comp(1, 1, 3),
            comp(1, 2, 4),
            comp(2, 2, 5),
        ]
    }
}
