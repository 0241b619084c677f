//! The right rectangular prism: potential, gravity and the full gradient tensor.
//!
//! Closed form of Nagy, Papp & Benedek (2000), "The gravitational potential and its derivatives for
//! the prism", J. Geodesy 74:552–560, with the corrections of the 2002 erratum (J. Geodesy 76:475):
//! with (x, y, z) a corner minus the observation point and r its distance,
//!
//! ```text
//! V   = Gρ ΣΣΣ ± [ xy·ln(z+r) + yz·ln(x+r) + zx·ln(y+r) − x²/2·atan(yz/xr) − y²/2·atan(zx/yr) − z²/2·atan(xy/zr) ]
//! g_x = −Gρ ΣΣΣ ± [ y·ln(z+r) + z·ln(y+r) − x·atan(yz/xr) ]                     (and cyclically)
//! Gxx = −Gρ ΣΣΣ ± atan(yz/xr),  Gxy = Gρ ΣΣΣ ± ln(z+r),  Gxz = Gρ ΣΣΣ ± ln(y+r),  … cyclically
//! ```
//!
//! the sign ± = (−1)^(i+j+k) over the corners i, j, k ∈ {1, 2}. Frame: NED (x north, y east, z down),
//! metres; results in m²/s², m/s², s⁻². Computing with coordinates relative to the observation point
//! keeps the large absolute coordinates of a survey out of the cancellation.
//!
//! **Edges, faces and corners.** The kernel is finite everywhere. Terms `c·ln(0)` with c = 0 are taken
//! as their limit 0; a bare `ln(0)` (the observation point on the line of an edge) is dropped: outside
//! the edge it cancels against the other corner of that edge, and on the edge itself, where the
//! off-diagonal components diverge logarithmically, the value returned is that of the edge's finite
//! part. `atan(a/0)` is ±π/2 by the sign of a, 0 when a = 0, which is the limit from the positive side:
//! on a face, where the normal diagonal component jumps by 4πGρ, the value is the one-sided limit from
//! the face's outward side for faces at the prism's larger coordinate and from inside for the others.
//! Tests pin continuity off the prism and the jump across a face.
//!
//! **Far away** the corner sum cancels: its terms are O(1) while the result is O((s/D)³) for a prism of
//! size s at distance D, so about eps·(D/s)³ of relative error. Beyond [`FAR_RATIO`] the prism is
//! replaced by Gauss–Legendre point masses ([`FAR_ORDER`]³ of them), whose error falls as (s/D)^(2n);
//! `docs/methods/forward.md` gives the measured error against distance for both.

use crate::gauss;
use crate::point::{Field, point_mass_rel};
use gravgrad_core::SymTensor;
use gravgrad_core::units::G;
use std::sync::OnceLock;

/// A right rectangular prism in NED: `x = [north min, north max]`, `y = [east min, east max]`,
/// `z = [top, bottom]` (down positive, so top < bottom), metres; density contrast kg/m³.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Prism {
    pub x: [f64; 2],
    pub y: [f64; 2],
    pub z: [f64; 2],
    pub density: f64,
}

/// Distance-to-size ratio (distance from the centre over the longest side) beyond which the
/// Gauss–Legendre form is used.
pub const FAR_RATIO: f64 = 10.0;
/// Points per axis of the far-field Gauss–Legendre rule.
pub const FAR_ORDER: usize = 4;

impl Prism {
    pub fn new(x: [f64; 2], y: [f64; 2], z: [f64; 2], density: f64) -> Self {
        Self { x, y, z, density }
    }

    fn center(&self) -> [f64; 3] {
        [
            0.5 * (self.x[0] + self.x[1]),
            0.5 * (self.y[0] + self.y[1]),
            0.5 * (self.z[0] + self.z[1]),
        ]
    }

    fn size(&self) -> f64 {
        (self.x[1] - self.x[0])
            .abs()
            .max((self.y[1] - self.y[0]).abs())
            .max((self.z[1] - self.z[0]).abs())
    }

    /// Whether `obs` is far enough for the Gauss–Legendre form.
    pub fn is_far(&self, obs: [f64; 3]) -> bool {
        let c = self.center();
        let d2 = (obs[0] - c[0]).powi(2) + (obs[1] - c[1]).powi(2) + (obs[2] - c[2]).powi(2);
        d2 > (FAR_RATIO * self.size()).powi(2)
    }

    /// Potential, gravity and tensor at `obs` (NED, m): closed form near, Gauss–Legendre far.
    pub fn field(&self, obs: [f64; 3]) -> Field {
        if self.is_far(obs) {
            self.field_gauss(obs, FAR_ORDER)
        } else {
            self.field_closed(obs)
        }
    }

    /// Gradient tensor only (s⁻²): the fast path for terrain and gridding.
    pub fn tensor(&self, obs: [f64; 3]) -> SymTensor {
        if self.is_far(obs) {
            self.field_gauss(obs, FAR_ORDER).tensor
        } else {
            self.tensor_closed(obs)
        }
    }

    /// The closed form of Nagy et al. at any distance (for tests and error studies).
    pub fn field_closed(&self, obs: [f64; 3]) -> Field {
        let k = G * self.density;
        let mut v = 0.0;
        let mut g = [0.0; 3];
        let mut t = [0.0; 6];
        for (i, xc) in self.x.iter().enumerate() {
            let x = xc - obs[0];
            for (j, yc) in self.y.iter().enumerate() {
                let y = yc - obs[1];
                for (l, zc) in self.z.iter().enumerate() {
                    let z = zc - obs[2];
                    let s = corner_sign(i, j, l);
                    let r = (x * x + y * y + z * z).sqrt();
                    let (lx, ly, lz) = (
                        safe_ln(x, y, z, r),
                        safe_ln(y, z, x, r),
                        safe_ln(z, x, y, r),
                    );
                    let (ax, ay, az) = (
                        safe_atan(y * z, x * r),
                        safe_atan(z * x, y * r),
                        safe_atan(x * y, z * r),
                    );
                    v += s
                        * (x * y * lz + y * z * lx + z * x * ly
                            - 0.5 * (x * x * ax + y * y * ay + z * z * az));
                    g[0] += s * (y * lz + z * ly - x * ax);
                    g[1] += s * (z * lx + x * lz - y * ay);
                    g[2] += s * (x * ly + y * lx - z * az);
                    t[0] -= s * ax;
                    t[1] += s * lz;
                    t[2] += s * ly;
                    t[3] -= s * ay;
                    t[4] += s * lx;
                    t[5] -= s * az;
                }
            }
        }
        Field {
            potential: k * v,
            g: [-k * g[0], -k * g[1], -k * g[2]],
            tensor: SymTensor::from_array(t.map(|c| k * c)),
        }
    }

    /// The closed-form tensor alone (3 logarithms and 3 arctangents per corner).
    pub fn tensor_closed(&self, obs: [f64; 3]) -> SymTensor {
        let mut t = [0.0; 6];
        for (i, xc) in self.x.iter().enumerate() {
            let x = xc - obs[0];
            for (j, yc) in self.y.iter().enumerate() {
                let y = yc - obs[1];
                for (l, zc) in self.z.iter().enumerate() {
                    let z = zc - obs[2];
                    let s = corner_sign(i, j, l);
                    let r = (x * x + y * y + z * z).sqrt();
                    t[0] -= s * safe_atan(y * z, x * r);
                    t[1] += s * safe_ln(z, x, y, r);
                    t[2] += s * safe_ln(y, z, x, r);
                    t[3] -= s * safe_atan(z * x, y * r);
                    t[4] += s * safe_ln(x, y, z, r);
                    t[5] -= s * safe_atan(x * y, z * r);
                }
            }
        }
        let k = G * self.density;
        SymTensor::from_array(t.map(|c| k * c))
    }

    /// The prism as `n`³ Gauss–Legendre point masses.
    pub fn field_gauss(&self, obs: [f64; 3], n: usize) -> Field {
        let (nodes, weights) = rule(n);
        let half = [
            0.5 * (self.x[1] - self.x[0]),
            0.5 * (self.y[1] - self.y[0]),
            0.5 * (self.z[1] - self.z[0]),
        ];
        let c = self.center();
        let gm_total = G * self.density * half[0] * half[1] * half[2];
        let mut f = Field::default();
        let mut t = [0.0; 6];
        for (a, wa) in nodes.iter().zip(weights) {
            for (b, wb) in nodes.iter().zip(weights) {
                for (d, wd) in nodes.iter().zip(weights) {
                    let src = [c[0] + half[0] * a, c[1] + half[1] * b, c[2] + half[2] * d];
                    let p = point_mass_rel(
                        gm_total * wa * wb * wd,
                        [obs[0] - src[0], obs[1] - src[1], obs[2] - src[2]],
                    );
                    f.potential += p.potential;
                    for k in 0..3 {
                        f.g[k] += p.g[k];
                    }
                    for (tk, pk) in t.iter_mut().zip(p.tensor.to_array()) {
                        *tk += pk;
                    }
                }
            }
        }
        f.tensor = SymTensor::from_array(t);
        f
    }
}

/// (−1)^(i+j+k) in the 1-based corner numbering of Nagy et al.: + at (x₂, y₂, z₂). Indices here are
/// 0-based, so the sign is + when their sum is odd.
#[inline]
fn corner_sign(i: usize, j: usize, l: usize) -> f64 {
    if (i + j + l) % 2 == 1 { 1.0 } else { -1.0 }
}

/// Cached Gauss–Legendre rules.
fn rule(n: usize) -> (&'static [f64], &'static [f64]) {
    static RULES: OnceLock<Vec<(Vec<f64>, Vec<f64>)>> = OnceLock::new();
    let rules = RULES.get_or_init(|| (0..=12).map(gauss::nodes_weights).collect());
    let (x, w) = &rules[n.min(12)];
    (x, w)
}

/// ln(a + r) for the corner (a, b, c), r = |(a, b, c)|, computed without cancellation for a < 0 as
/// ln((b² + c²)/(r − a)); at a corner (r = 0) 0, the limit of the terms it enters multiplied by zero.
#[inline]
fn safe_ln(a: f64, b: f64, c: f64, r: f64) -> f64 {
    if a >= 0.0 {
        let s = a + r;
        if s > 0.0 { s.ln() } else { 0.0 }
    } else {
        let num = b * b + c * c;
        // On the line of an edge (b = c = 0) keep the finite part −ln(r − a): the ln(b² + c²) part is
        // shared by the edge's two corners with opposite signs and cancels.
        if num > 0.0 {
            (num / (r - a)).ln()
        } else {
            -(r - a).ln()
        }
    }
}

/// atan(num/den) in (−π/2, π/2), with den = 0 taken as the limit from den > 0.
#[inline]
fn safe_atan(num: f64, den: f64) -> f64 {
    if den != 0.0 {
        (num / den).atan()
    } else if num > 0.0 {
        std::f64::consts::FRAC_PI_2
    } else if num < 0.0 {
        -std::f64::consts::FRAC_PI_2
    } else {
        0.0
    }
}
