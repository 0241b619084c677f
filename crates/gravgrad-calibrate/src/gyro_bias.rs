//! The gyros' bias, estimated from what it leaves in the tensor.
//!
//! The solve removes the centrifugal term ΩΩ = ωωᵀ − |ω|²I formed from the gyros' rate. A gyro
//! bias β (sensor axes, rad/s) makes the measured rate ω + β, so every tensor unknown carries
//! δM = ωβᵀ + βωᵀ − 2(ω·β)I, to first order in β: linear in the rate, with three coefficients
//! shared by the whole instrument. In a manoeuvre the rates reach 0.1 rad/s, and on a 0.2 m baseline
//! a bias of 1e-7 rad/s is then 4e-9 m/s² (20 E); in a coordinated turn the yaw rate follows the
//! lateral force (ωz ≈ fy/V), so left in the data the term biases the coupling κy of every pair
//! that sees ωz by about −2|b|βz/V, beyond its standard error on a calibration flight.
//!
//! β is fitted jointly over the six tensor rows, each row's own band regressors (force, quadratic
//! products) profiled out first (Frisch–Waugh–Lovell; Frisch & Waugh 1933, Lovell 1963), each row
//! weighted by its residual variance inflated for autocorrelation (Bretherton et al. 1999). A
//! component below the significance threshold is held at zero and named, as every other term.
//!
//! Units: β in rad/s, rates in rad/s, the tensor rows' targets in s⁻² (the unknowns' units).

use crate::estimate::{Coefficient, Design, HeldTerm, effective_size};
use gravgrad_core::lstsq::PivotedCholesky;
use gravgrad_core::pairs::PairGeometry;

/// Coefficient of β_m·ω_c in component (a, b) of δM = ωβᵀ + βωᵀ − 2(ω·β)I.
fn k(a: usize, b: usize, m: usize, c: usize) -> f64 {
    let d = |i: usize, j: usize| if i == j { 1.0 } else { 0.0 };
    d(a, c) * d(b, m) + d(a, m) * d(b, c) - 2.0 * d(a, b) * d(m, c)
}

/// The tensor unknowns' components (a, b), in the solve's order xx xy xz yy yz zz.
const ROWS: [(usize, usize); 6] = [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)];

/// δM's component `row` (solve order) at one sample: Σ_m β_m Σ_c k·ω_c, s⁻².
pub fn trace_at(row: usize, beta: [f64; 3], omega: [f64; 3]) -> f64 {
    let (a, b) = ROWS[row];
    (0..3)
        .map(|m| beta[m] * (0..3).map(|c| k(a, b, m, c) * omega[c]).sum::<f64>())
        .sum()
}

/// The estimate of β, and the components held at zero with why.
#[derive(Clone, Debug, PartialEq)]
pub struct GyroBias {
    /// β, sensor axes, rad/s; a held component is zero with an infinite standard error.
    pub beta: [Coefficient; 3],
    pub held: Vec<HeldTerm>,
}

/// Names of β's components in held terms and notes.
pub const NAMES: [&str; 3] = ["gyro bias x", "gyro bias y", "gyro bias z"];

/// β from the six tensor rows' targets `targets[..6]` (s⁻²) and the rates `omega` (rad/s), both on
/// `design`'s time base. Row j carries −Σ_i mix[j][i]·δM_i: `mix` is the solve's P·A restricted to
/// the tensor (the identity when the pairs determine the whole tensor). Components whose estimate
/// lies within `min_z` standard errors of zero, or which the rows do not resolve, are held at zero.
pub(crate) fn estimate(
    design: &Design,
    targets: &[Vec<f64>],
    mix: &[[f64; 6]; 6],
    omega: [&[f64]; 3],
    min_z: f64,
) -> GyroBias {
    let w: Vec<Vec<f64>> = omega.iter().map(|o| design.band_residual(o)).collect();
    let y: Vec<Vec<f64>> = targets[..6]
        .iter()
        .map(|t| design.band_residual(t))
        .collect();
    let n = y.first().map_or(0, Vec::len);
    // Row j's regressor for β_m: −Σ_i mix[j][i] Σ_c k_i·ω⊥_c (the target carries −δM).
    let regressor = |j: usize, m: usize| -> Vec<f64> {
        let mut v = vec![0.0; n];
        for (c, wc) in w.iter().enumerate() {
            let kk: f64 = ROWS
                .iter()
                .zip(&mix[j])
                .map(|((a, b), mx)| mx * k(*a, *b, m, c))
                .sum();
            if kk != 0.0 {
                for (x, o) in v.iter_mut().zip(wc) {
                    *x -= kk * o;
                }
            }
        }
        v
    };
    let x: Vec<[Vec<f64>; 3]> = (0..6)
        .map(|j| std::array::from_fn(|m| regressor(j, m)))
        .collect();
    let mut active: Vec<usize> = vec![0, 1, 2];
    let mut held: Vec<HeldTerm> = Vec::new();
    // Each row's weight 1/(σ² · n/n_eff) from its residual; first from the target alone, then
    // from the residual of the fit, until the held set settles.
    let mut weight: Vec<f64> = y.iter().map(|r| row_weight(r)).collect();
    loop {
        let Some(fit) = solve(&x, &y, &weight, &active) else {
            for &m in &active {
                held.push(unresolved(m));
            }
            active.clear();
            break;
        };
        weight = (0..6)
            .map(|j| {
                let r: Vec<f64> = (0..n)
                    .map(|i| {
                        y[j][i]
                            - active
                                .iter()
                                .zip(&fit.0)
                                .map(|(&m, b)| b * x[j][m][i])
                                .sum::<f64>()
                    })
                    .collect();
                row_weight(&r)
            })
            .collect();
        let Some(fit) = solve(&x, &y, &weight, &active) else {
            for &m in &active {
                held.push(unresolved(m));
            }
            active.clear();
            break;
        };
        let weakest = active
            .iter()
            .enumerate()
            .map(|(a, &m)| (a, m, (fit.0[a] / fit.1[a]).abs()))
            .filter(|t| t.2.is_nan() || t.2 < min_z)
            .min_by(|p, q| p.2.total_cmp(&q.2));
        match weakest {
            Some((a, m, z)) => {
                held.push(HeldTerm {
                    term: NAMES[m].into(),
                    estimate: Some(Coefficient {
                        value: fit.0[a],
                        std_error: fit.1[a],
                    }),
                    effect_rms: None,
                    reason: format!(
                        "not significant (|estimate| {z:.1} standard errors, {min_z} needed)"
                    ),
                });
                active.remove(a);
                if active.is_empty() {
                    break;
                }
            }
            None => {
                let mut beta = [Coefficient {
                    value: 0.0,
                    std_error: f64::INFINITY,
                }; 3];
                for (a, &m) in active.iter().enumerate() {
                    beta[m] = Coefficient {
                        value: fit.0[a],
                        std_error: fit.1[a],
                    };
                }
                return GyroBias { beta, held };
            }
        }
    }
    GyroBias {
        beta: [Coefficient {
            value: 0.0,
            std_error: f64::INFINITY,
        }; 3],
        held,
    }
}

fn unresolved(m: usize) -> HeldTerm {
    HeldTerm {
        term: NAMES[m].into(),
        estimate: None,
        effect_rms: None,
        reason: "the rates do not resolve it from the force terms".into(),
    }
}

/// 1 / (σ² · n/n_eff) of a residual series; 0 for an empty or zero one (the row is left out).
fn row_weight(r: &[f64]) -> f64 {
    let n = r.len();
    if n < 4 {
        return 0.0;
    }
    let var = r.iter().map(|v| v * v).sum::<f64>() / n as f64;
    if var.is_finite() && var > 0.0 {
        effective_size(r) / (n as f64 * var)
    } else {
        0.0
    }
}

/// Weighted least squares of the rows on the `active` β components: estimates and standard
/// errors, in the order of `active`; `None` when the normal matrix does not resolve them all.
fn solve(
    x: &[[Vec<f64>; 3]],
    y: &[Vec<f64>],
    weight: &[f64],
    active: &[usize],
) -> Option<(Vec<f64>, Vec<f64>)> {
    let q = active.len();
    let mut nm = vec![vec![0.0; q]; q];
    let mut rhs = vec![0.0; q];
    for (j, wj) in weight.iter().enumerate() {
        if *wj == 0.0 {
            continue;
        }
        for (a, &ma) in active.iter().enumerate() {
            rhs[a] += wj * x[j][ma].iter().zip(&y[j]).map(|(p, v)| p * v).sum::<f64>();
            for (b, &mb) in active.iter().enumerate() {
                nm[a][b] += wj
                    * x[j][ma]
                        .iter()
                        .zip(&x[j][mb])
                        .map(|(p, v)| p * v)
                        .sum::<f64>();
            }
        }
    }
    // Scaled to a unit diagonal for the rank test.
    let scale: Vec<f64> = (0..q).map(|a| nm[a][a].sqrt()).collect();
    if scale.iter().any(|s| !(s.is_finite() && *s > 0.0)) {
        return None;
    }
    let scaled: Vec<Vec<f64>> = (0..q)
        .map(|a| (0..q).map(|b| nm[a][b] / (scale[a] * scale[b])).collect())
        .collect();
    let f = PivotedCholesky::of(&scaled, 1e-10);
    if f.kept_sorted().len() < q {
        return None;
    }
    let beta: Vec<f64> = (0..q)
        .map(|a| {
            (0..q)
                .map(|b| f.inverse_entry(a, b) * rhs[b] / scale[b])
                .sum::<f64>()
                / scale[a]
        })
        .collect();
    let se: Vec<f64> = (0..q)
        .map(|a| f.inverse_entry(a, a).sqrt() / scale[a])
        .collect();
    Some((beta, se))
}

/// A pair's correction for β: the coefficients c (m/s² per rad/s) with c·ω = −nᵀ·δM·b, so that
/// subtracting c·ω from the pair's difference undoes what the biased rates do to the solve's
/// centrifugal term; c = −[(β·b) n + (n·β) b − 2(n·b) β]. Standard errors from β's, its components
/// taken as independent. `None` when every component of β is held.
pub fn pair_correction(g: &PairGeometry, beta: &[Coefficient; 3]) -> Option<[Coefficient; 3]> {
    if beta.iter().all(|b| b.value == 0.0) {
        return None;
    }
    let (n, b) = (g.axis, g.baseline);
    let dot = |u: [f64; 3], v: [f64; 3]| u[0] * v[0] + u[1] * v[1] + u[2] * v[2];
    let nb = dot(n, b);
    // ∂c_i/∂β_m = −(b_m n_i + n_m b_i − 2(n·b) δ_im).
    let jac = |i: usize, m: usize| -> f64 {
        -(b[m] * n[i] + n[m] * b[i] - if i == m { 2.0 * nb } else { 0.0 })
    };
    Some(std::array::from_fn(|i| {
        let value = (0..3).map(|m| jac(i, m) * beta[m].value).sum();
        let std_error = (0..3)
            .filter(|&m| beta[m].value != 0.0)
            .map(|m| (jac(i, m) * beta[m].std_error).powi(2))
            .sum::<f64>()
            .sqrt();
        Coefficient { value, std_error }
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// δM from the definition, ω'ω'ᵀ − |ω'|²I − (ωωᵀ − |ω|²I) with ω' = ω + β, agrees with the
    /// linear trace to second order in β.
    #[test]
    fn the_trace_is_the_centrifugal_change_to_first_order() {
        let omega = [0.07, -0.12, 0.05];
        let beta = [2e-6, -3e-6, 1e-6];
        let m = |w: [f64; 3], a: usize, b: usize| {
            w[a] * w[b]
                - if a == b {
                    w.iter().map(|x| x * x).sum()
                } else {
                    0.0
                }
        };
        let shifted: [f64; 3] = std::array::from_fn(|i| omega[i] + beta[i]);
        for (row, (a, b)) in ROWS.iter().enumerate() {
            let exact = m(shifted, *a, *b) - m(omega, *a, *b);
            let linear = trace_at(row, beta, omega);
            assert!((exact - linear).abs() < 2e-11, "{row}: {exact} vs {linear}");
        }
    }

    /// c·ω = −nᵀ·δM·b for an in-line and a cross pair.
    #[test]
    fn a_pairs_correction_is_minus_its_share_of_the_trace() {
        let beta = [
            Coefficient {
                value: 1e-6,
                std_error: 1e-7,
            },
            Coefficient {
                value: -2e-6,
                std_error: 1e-7,
            },
            Coefficient {
                value: 3e-6,
                std_error: 1e-7,
            },
        ];
        let omega = [0.03, -0.08, 0.11];
        let bv = beta.map(|c| c.value);
        let delta: Vec<Vec<f64>> = (0..3)
            .map(|a| {
                (0..3)
                    .map(|b| {
                        let row = ROWS
                            .iter()
                            .position(|r| *r == (a.min(b), a.max(b)))
                            .unwrap();
                        trace_at(row, bv, omega)
                    })
                    .collect()
            })
            .collect();
        for (axis, baseline) in [
            ([1.0, 0.0, 0.0], [0.2, 0.0, 0.0]),
            ([0.0, 1.0, 0.0], [0.0, 0.0, 0.2]),
        ] {
            let g = PairGeometry {
                id: "p".into(),
                center: [0.0; 3],
                axis,
                baseline,
            };
            let c = pair_correction(&g, &beta).unwrap();
            let cw: f64 = (0..3).map(|i| c[i].value * omega[i]).sum();
            let ndb: f64 = (0..3)
                .map(|a| {
                    (0..3)
                        .map(|b| axis[a] * delta[a][b] * baseline[b])
                        .sum::<f64>()
                })
                .sum();
            assert!((cw + ndb).abs() < 1e-15, "{cw} vs {ndb}");
        }
    }
}
