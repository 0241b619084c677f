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
//! replaced by Gauss–Legendre point masses, n³ of them with n falling with distance ([`far_order`]),
//! whose error falls as (s/2D)^(2n); `docs/methods/forward.md` gives the measured error against
//! distance for every form.

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
/// Points per axis of the Gauss–Legendre rule just beyond [`FAR_RATIO`].
pub const FAR_ORDER: usize = 4;

/// The rule used at a distance-to-size ratio: `None` for the closed form, else points per axis.
/// Tiers keep the worst relative error over prism shapes and directions at or below the closed
/// form's own at the switch, 2.3e-11 (measured by `cargo run -p xtask -- prism-accuracy`): 4³ points
/// from 10 sizes, 3³ from 30, 2³ from 300.
pub fn far_order(ratio: f64) -> Option<usize> {
    if ratio < FAR_RATIO {
        None
    } else if ratio < 30.0 {
        Some(FAR_ORDER)
    } else if ratio < 300.0 {
        Some(3)
    } else {
        Some(2)
    }
}

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

    /// The Gauss–Legendre order to use at `obs`, or `None` for the closed form ([`far_order`]).
    pub fn rule_at(&self, obs: [f64; 3]) -> Option<usize> {
        let c = self.center();
        let d =
            ((obs[0] - c[0]).powi(2) + (obs[1] - c[1]).powi(2) + (obs[2] - c[2]).powi(2)).sqrt();
        far_order(d / self.size())
    }

    /// Potential, gravity and tensor at `obs` (NED, m): closed form near, Gauss–Legendre far.
    pub fn field(&self, obs: [f64; 3]) -> Field {
        match self.rule_at(obs) {
            Some(n) => self.field_gauss(obs, n),
            None => self.field_closed(obs),
        }
    }

    /// Gradient tensor only (s⁻²): the fast path for terrain and gridding.
    pub fn tensor(&self, obs: [f64; 3]) -> SymTensor {
        match self.rule_at(obs) {
            Some(n) => self.tensor_gauss(obs, n),
            None => self.tensor_closed(obs),
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

    /// The closed-form tensor alone. Corners are taken in pairs that differ in one coordinate, so
    /// that each pair's two logarithms become one, ln(L₂/L₁), and its two arctangents one,
    /// atan(A) − atan(B) = atan2(A − B, 1 + AB) (exact: both angles lie in (−π/2, π/2), so the sine
    /// and cosine of their difference have the signs of A − B and 1 + AB); 12 logarithms and 12
    /// arctangents instead of 24 each. Pairs whose denominator coordinate is 0 fall back to the
    /// corner-by-corner form.
    pub fn tensor_closed(&self, obs: [f64; 3]) -> SymTensor {
        let xs = [self.x[0] - obs[0], self.x[1] - obs[0]];
        let ys = [self.y[0] - obs[1], self.y[1] - obs[1]];
        let zs = [self.z[0] - obs[2], self.z[1] - obs[2]];
        let mut r = [[[0.0f64; 2]; 2]; 2];
        for (i, x) in xs.iter().enumerate() {
            for (j, y) in ys.iter().enumerate() {
                for (l, z) in zs.iter().enumerate() {
                    r[i][j][l] = (x * x + y * y + z * z).sqrt();
                }
            }
        }
        let mut t = [0.0; 6];
        for a in 0..2 {
            for b in 0..2 {
                // Gxy: pairs along z at (x_a, y_b); Gxx: the same pairs.
                let (x, y) = (xs[a], ys[b]);
                let (r1, r2) = (r[a][b][0], r[a][b][1]);
                let s = corner_sign(a, b, 1);
                t[1] += s * (ln_arg(zs[1], x, y, r2) / ln_arg(zs[0], x, y, r1)).ln();
                t[0] -= s * atan_pair(y, x, zs[0], zs[1], r1, r2);
                // Gxz: pairs along y at (x_a, z_b); Gzz: the same pairs.
                let (x, z) = (xs[a], zs[b]);
                let (r1, r2) = (r[a][0][b], r[a][1][b]);
                let s = corner_sign(a, 1, b);
                t[2] += s * (ln_arg(ys[1], z, x, r2) / ln_arg(ys[0], z, x, r1)).ln();
                t[5] -= s * atan_pair(x, z, ys[0], ys[1], r1, r2);
                // Gyz: pairs along x at (y_a, z_b); Gyy: the same pairs.
                let (y, z) = (ys[a], zs[b]);
                let (r1, r2) = (r[0][a][b], r[1][a][b]);
                let s = corner_sign(1, a, b);
                t[4] += s * (ln_arg(xs[1], y, z, r2) / ln_arg(xs[0], y, z, r1)).ln();
                t[3] -= s * atan_pair(z, y, xs[0], xs[1], r1, r2);
            }
        }
        let k = G * self.density;
        SymTensor::from_array(t.map(|c| k * c))
    }

    /// The tensor of `n`³ Gauss–Legendre point masses (no potential or gravity): the far form.
    pub fn tensor_gauss(&self, obs: [f64; 3], n: usize) -> SymTensor {
        match n {
            2 => self.tensor_gauss_n::<2>(obs),
            3 => self.tensor_gauss_n::<3>(obs),
            4 => self.tensor_gauss_n::<4>(obs),
            _ => self.field_gauss(obs, n).tensor,
        }
    }

    /// [`Self::tensor_gauss`] with the order known at compile time, so that the node loops unroll.
    fn tensor_gauss_n<const N: usize>(&self, obs: [f64; 3]) -> SymTensor {
        let (nodes, weights) = rule(N);
        let half = [
            0.5 * (self.x[1] - self.x[0]),
            0.5 * (self.y[1] - self.y[0]),
            0.5 * (self.z[1] - self.z[0]),
        ];
        let c = self.center();
        let gm = G * self.density * half[0] * half[1] * half[2];
        let rx: [f64; N] = std::array::from_fn(|k| obs[0] - c[0] - half[0] * nodes[k]);
        let ry: [f64; N] = std::array::from_fn(|k| obs[1] - c[1] - half[1] * nodes[k]);
        let rz: [f64; N] = std::array::from_fn(|k| obs[2] - c[2] - half[2] * nodes[k]);
        let w: [f64; N] = std::array::from_fn(|k| weights[k]);
        let mut t = [0.0; 6];
        for u in 0..N {
            for v in 0..N {
                let wuv = gm * w[u] * w[v];
                let (x, y) = (rx[u], ry[v]);
                let mut acc = [0.0; 6];
                for q in 0..N {
                    let z = rz[q];
                    let r2 = x * x + y * y + z * z;
                    let inv = 1.0 / r2;
                    let k = w[q] * inv * inv * inv.sqrt();
                    let k3 = 3.0 * k;
                    acc[0] += k3 * x * x - k * r2;
                    acc[1] += k3 * x * y;
                    acc[2] += k3 * x * z;
                    acc[3] += k3 * y * y - k * r2;
                    acc[4] += k3 * y * z;
                    acc[5] += k3 * z * z - k * r2;
                }
                for (ti, ai) in t.iter_mut().zip(acc) {
                    *ti += wuv * ai;
                }
            }
        }
        SymTensor::from_array(t)
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

/// The argument L of ln(a + r) as [`safe_ln`] takes it (ln L = safe_ln), always positive: a + r for
/// a ≥ 0; (b² + c²)/(r − a) for a < 0; 1/(r − a) on an edge line; 1 at a corner.
#[inline]
fn ln_arg(a: f64, b: f64, c: f64, r: f64) -> f64 {
    if a >= 0.0 {
        let s = a + r;
        if s > 0.0 { s } else { 1.0 }
    } else {
        let num = b * b + c * c;
        if num > 0.0 {
            num / (r - a)
        } else {
            1.0 / (r - a)
        }
    }
}

/// atan(p·q₂/(d·r₂)) − atan(p·q₁/(d·r₁)) for one pair of corners differing in q (p and d shared, d the
/// denominator coordinate), as one atan2; corner by corner when d = 0.
#[inline]
fn atan_pair(p: f64, d: f64, q1: f64, q2: f64, r1: f64, r2: f64) -> f64 {
    if d == 0.0 {
        return safe_atan(p * q2, d * r2) - safe_atan(p * q1, d * r1);
    }
    (d * p * (q2 * r1 - q1 * r2)).atan2(d * d * r1 * r2 + p * p * q1 * q2)
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
