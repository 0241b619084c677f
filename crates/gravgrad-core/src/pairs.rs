//! Geometry of accelerometer pairs and what a set of pairs can observe.
//!
//! A calibrated pair k with common sensing axis n (unit) and baseline b (from accelerometer b to
//! accelerometer a, metres), both in the sensor frame s, observes
//!
//! ```text
//! y_k = n_kᵀ·S·b_k − α·(b_k × n_k)
//! ```
//!
//! with S the symmetric part of the measured tensor (G − ΩΩ, s⁻²) and α = ω̇ the angular
//! acceleration (rad/s²); see `docs/physics.md` (Jekeli 2001; Rummel et al. 2011). In-line pairs
//! (b ∥ n) do not see α; cross pairs do. [`observability`] tells which tensor components and
//! angular-acceleration components a pair set determines, and names the combinations it cannot.

use crate::mat3::{Vec3, cross, norm};
use serde::Serialize;

/// Names of the nine unknowns of the pair equations, in design-matrix column order.
pub const UNKNOWNS: [&str; 9] = ["Gxx", "Gxy", "Gxz", "Gyy", "Gyz", "Gzz", "αx", "αy", "αz"];

/// One pair's geometry in the sensor frame (metres; axis dimensionless and unit length).
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct PairGeometry {
    pub id: String,
    /// Pair centre c_k (m), sensor frame.
    pub center: Vec3,
    /// Baseline b_k from accelerometer b to accelerometer a (m), sensor frame.
    pub baseline: Vec3,
    /// Common nominal sensing axis n_k (unit vector), sensor frame.
    pub axis: Vec3,
}

impl PairGeometry {
    /// The pair's row of the design matrix: y = row · [Sxx Sxy Sxz Syy Syz Szz αx αy αz]
    /// (S in s⁻², α in rad/s², y in m/s²).
    pub fn design_row(&self) -> [f64; 9] {
        let n = self.axis;
        let b = self.baseline;
        let bxn = cross(&b, &n);
        [
            n[0] * b[0],
            n[0] * b[1] + n[1] * b[0],
            n[0] * b[2] + n[2] * b[0],
            n[1] * b[1],
            n[1] * b[2] + n[2] * b[1],
            n[2] * b[2],
            -bxn[0],
            -bxn[1],
            -bxn[2],
        ]
    }

    /// True when the pair is a cross pair, i.e. it senses angular acceleration (|b × n| > 0).
    pub fn sees_angular_acceleration(&self) -> bool {
        norm(&cross(&self.baseline, &self.axis)) > 1e-9 * norm(&self.baseline)
    }
}

/// Where the solve takes the angular acceleration α from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub enum AlphaSource {
    /// Solved together with the tensor from the pairs (needs cross pairs that see it).
    Pairs,
    /// Known from the filtered derivative of the gyro rates; the pairs solve only the tensor.
    Gyros,
}

/// What a pair set determines.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Observability {
    /// Rank of the design matrix (with the trace constraint row when used).
    pub rank: usize,
    /// Number of unknowns solved (9 with α from pairs, 6 with α from gyros).
    pub unknowns: usize,
    /// Per unknown of [`UNKNOWNS`] (first six are the tensor), whether the set determines it.
    pub observed: Vec<(String, bool)>,
    /// Basis of the combinations the pair set cannot see, as readable sums (e.g. `Gxx + Gyy`).
    pub blind_combinations: Vec<String>,
}

impl Observability {
    /// The tensor components (`Gxx` …) that the set cannot determine.
    pub fn missing_components(&self) -> Vec<&str> {
        self.observed
            .iter()
            .filter(|(n, ok)| !ok && n.starts_with('G'))
            .map(|(n, _)| n.as_str())
            .collect()
    }

    /// The unknowns (tensor components or α components) the set cannot determine.
    pub fn missing(&self) -> Vec<&str> {
        self.observed
            .iter()
            .filter(|(_, ok)| !ok)
            .map(|(n, _)| n.as_str())
            .collect()
    }

    /// Whether `component` (`Gxx`, `Gzz`, `αx`, …) is determined.
    pub fn sees(&self, component: &str) -> bool {
        self.observed.iter().any(|(n, ok)| *ok && n == component)
    }
}

/// Which unknowns a pair set determines: the null space of the design matrix (plus the trace
/// constraint row Gxx + Gyy + Gzz = 0 when `trace_constraint`), computed from the eigenvectors of
/// AᵀA. A combination is blind when it lies in the null space; a single unknown is observed when
/// its unit vector has no component in it.
pub fn observability(
    pairs: &[PairGeometry],
    alpha: AlphaSource,
    trace_constraint: bool,
) -> Observability {
    let n = match alpha {
        AlphaSource::Pairs => 9,
        AlphaSource::Gyros => 6,
    };
    let mut rows: Vec<Vec<f64>> = pairs
        .iter()
        .map(|p| {
            let r = p.design_row();
            // Scale each row to unit length: only directions matter for observability.
            let s = r[..n].iter().map(|v| v * v).sum::<f64>().sqrt();
            r[..n]
                .iter()
                .map(|v| if s > 0.0 { v / s } else { 0.0 })
                .collect()
        })
        .collect();
    if trace_constraint {
        let mut t = vec![0.0; n];
        let k = 1.0 / 3f64.sqrt();
        t[0] = k;
        t[3] = k;
        t[5] = k;
        rows.push(t);
    }
    // Singular vectors of the rows themselves (not of AᵀA, whose condition number is squared).
    let d = crate::lstsq::svd(&rows, n);
    let smax = d.sigma.iter().cloned().fold(0.0_f64, f64::max);
    let null: Vec<Vec<f64>> = (0..n)
        .filter(|&k| d.sigma[k] <= crate::lstsq::RANK_TOLERANCE * smax.max(1e-300))
        .map(|k| (0..n).map(|i| d.v[i][k]).collect())
        .collect();
    let observed = (0..n)
        .map(|i| {
            let leak: f64 = null.iter().map(|v| v[i] * v[i]).sum();
            (UNKNOWNS[i].to_string(), leak < 1e-12)
        })
        .collect();
    let blind_combinations = null.iter().map(|v| describe_combination(v)).collect();
    Observability {
        rank: n - null.len(),
        unknowns: n,
        observed,
        blind_combinations,
    }
}

/// Formats a null-space vector as a readable sum, largest coefficient scaled to 1.
fn describe_combination(v: &[f64]) -> String {
    let big = v
        .iter()
        .cloned()
        .fold(0.0_f64, |m, x| if x.abs() > m.abs() { x } else { m });
    let mut out = String::new();
    for (i, c) in v.iter().enumerate() {
        let c = c / big;
        if c.abs() < 1e-6 {
            continue;
        }
        let sign = if c < 0.0 { "−" } else { "+" };
        let mag = c.abs();
        let term = if (mag - 1.0).abs() < 1e-6 {
            UNKNOWNS[i].to_string()
        } else {
            format!("{mag:.3}·{}", UNKNOWNS[i])
        };
        if out.is_empty() {
            out = if c < 0.0 { format!("−{term}") } else { term };
        } else {
            out.push_str(&format!(" {sign} {term}"));
        }
    }
    out
}

/// A least-squares operator: unknowns = P·y, with the unknowns it determines.
pub struct Operator {
    /// k × rows: unknowns = P·y.
    pub p: Vec<Vec<f64>>,
    /// Per unknown, whether the rows determine it.
    pub observed: Vec<bool>,
}

/// The pseudo-inverse of A (rows × k) from A's singular value decomposition
/// ([`crate::lstsq::svd`], on A itself, so the condition number is not squared): minimum-norm in
/// the blind directions (singular values below [`crate::lstsq::RANK_TOLERANCE`] of the largest),
/// which are reported as unobserved.
pub fn pseudo_inverse(rows: &[Vec<f64>], k: usize) -> Operator {
    let d = crate::lstsq::svd(rows, k);
    let smax = d.sigma.iter().cloned().fold(0.0f64, f64::max);
    let keep: Vec<usize> = (0..k)
        .filter(|&e| d.sigma[e] > crate::lstsq::RANK_TOLERANCE * smax.max(1e-300))
        .collect();
    // P = V·Σ⁺·Uᵀ over the kept singular triplets.
    let p = (0..k)
        .map(|i| {
            (0..rows.len())
                .map(|r| {
                    keep.iter()
                        .map(|&e| d.v[i][e] * d.u[r][e] / d.sigma[e])
                        .sum()
                })
                .collect()
        })
        .collect();
    let observed = (0..k)
        .map(|i| {
            let leak: f64 = (0..k)
                .filter(|e| !keep.contains(e))
                .map(|e| d.v[i][e] * d.v[i][e])
                .sum();
            leak < 1e-12
        })
        .collect();
    Operator { p, observed }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mat3::{self, Mat3};
    use approx::assert_abs_diff_eq;

    fn pair(id: &str, b: Vec3, n: Vec3) -> PairGeometry {
        PairGeometry {
            id: id.into(),
            center: [0.0; 3],
            baseline: b,
            axis: n,
        }
    }

    /// The classic full-tensor layout: three in-line pairs and three pairs of cross pairs.
    fn full_set() -> Vec<PairGeometry> {
        let (x, y, z) = ([1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]);
        let s = |v: Vec3| [0.2 * v[0], 0.2 * v[1], 0.2 * v[2]];
        vec![
            pair("xx", s(x), x),
            pair("yy", s(y), y),
            pair("zz", s(z), z),
            pair("xy", s(y), x),
            pair("yx", s(x), y),
            pair("xz", s(z), x),
            pair("zx", s(x), z),
            pair("yz", s(z), y),
            pair("zy", s(y), z),
        ]
    }

    #[test]
    fn design_row_reproduces_the_instrument_equation() {
        // Independent evaluation of −nᵀ(Ω̇ + ΩΩ − G)b with the full matrices (docs/physics.md),
        // with ΩΩ left out (it is part of S = G − ΩΩ).
        let g: Mat3 = [
            [-1.5e-6, 2e-8, 3e-8],
            [2e-8, -1.4e-6, -5e-8],
            [3e-8, -5e-8, 2.9e-6],
        ];
        let alpha = [0.01, -0.02, 0.005];
        let omega_dot: Mat3 = [
            [0.0, -alpha[2], alpha[1]],
            [alpha[2], 0.0, -alpha[0]],
            [-alpha[1], alpha[0], 0.0],
        ];
        let n = {
            let v = [0.3, -0.5, 0.81];
            let k = mat3::norm(&v);
            [v[0] / k, v[1] / k, v[2] / k]
        };
        let b = [0.11, 0.07, -0.15];
        let mut m = [[0.0; 3]; 3];
        for i in 0..3 {
            for j in 0..3 {
                m[i][j] = g[i][j] - omega_dot[i][j];
            }
        }
        let want = mat3::dot(&n, &mat3::mul_vec(&m, &b));
        let row = PairGeometry {
            id: "p".into(),
            center: [0.0; 3],
            baseline: b,
            axis: n,
        }
        .design_row();
        let u = [
            g[0][0], g[0][1], g[0][2], g[1][1], g[1][2], g[2][2], alpha[0], alpha[1], alpha[2],
        ];
        let got: f64 = row.iter().zip(u).map(|(r, x)| r * x).sum();
        assert_abs_diff_eq!(got, want, epsilon = 1e-15 * want.abs().max(1e-9));
    }

    #[test]
    fn nine_pairs_see_everything() {
        let o = observability(&full_set(), AlphaSource::Pairs, false);
        assert_eq!(o.rank, 9);
        assert!(o.missing().is_empty());
    }

    #[test]
    fn cross_pairs_alone_cannot_see_the_diagonal() {
        // Only the six cross pairs: nᵀSb picks off-diagonal terms only, so Gxx, Gyy, Gzz are blind.
        let set: Vec<_> = full_set().into_iter().skip(3).collect();
        let o = observability(&set, AlphaSource::Pairs, false);
        assert_eq!(o.missing_components(), vec!["Gxx", "Gyy", "Gzz"]);
        assert!(o.sees("Gxy") && o.sees("αz"));
        // With the trace constraint the diagonal is still underdetermined (one equation, three unknowns).
        let o = observability(&set, AlphaSource::Pairs, true);
        assert!(!o.sees("Gzz"));
    }

    #[test]
    fn partial_instrument_needs_gyros_and_the_trace_for_gzz() {
        // In-line x, in-line y, cross xy, cross yx: the xy pair sees Gxy − αz·(…) and the yx pair
        // Gxy + αz·(…), so α_z and Gxy separate; Gzz only through the trace constraint.
        let set: Vec<_> = full_set()
            .into_iter()
            .filter(|p| ["xx", "yy", "xy", "yx"].contains(&p.id.as_str()))
            .collect();
        let o = observability(&set, AlphaSource::Pairs, false);
        assert!(o.sees("Gxx") && o.sees("Gyy") && o.sees("Gxy") && o.sees("αz"));
        assert!(!o.sees("Gzz") && !o.sees("Gxz") && !o.sees("αx"));
        let o = observability(&set, AlphaSource::Gyros, true);
        assert!(o.sees("Gzz"));
        assert_eq!(o.missing_components(), vec!["Gxz", "Gyz"]);
    }

    #[test]
    fn a_blind_combination_is_named() {
        // Two in-line pairs along x: Gxx seen, everything else blind; the blind basis has 5 vectors.
        let x = [1.0, 0.0, 0.0];
        let set = vec![pair("a", [0.2, 0.0, 0.0], x), pair("b", [0.3, 0.0, 0.0], x)];
        let o = observability(&set, AlphaSource::Gyros, false);
        assert_eq!(o.rank, 1);
        assert_eq!(o.blind_combinations.len(), 5);
        assert!(o.sees("Gxx"));
    }
}
