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
//! products, axis-error terms) profiled out first (Frisch–Waugh–Lovell; Frisch & Waugh 1933, Lovell
//! 1963), each row weighted by its residual variance, with cluster-robust standard errors over
//! batches of time (Bester, Conley & Hansen 2011). A component below the significance threshold is
//! held at zero and named, as every other term.
//!
//! Units: β in rad/s, rates in rad/s, the tensor rows' targets in s⁻² (the unknowns' units).

use crate::estimate::{Coefficient, Design, HeldTerm};
use gravgrad_core::lstsq::PivotedCholesky;
use gravgrad_core::pairs::PairGeometry;
use rayon::prelude::*;

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
/// `design`'s time base and band-passed already ([`Design::band_pass`]). Row j carries −Σ_i mix[j][i]·δM_i: `mix` is the solve's P·A restricted to
/// the tensor (the identity when the pairs determine the whole tensor). Components whose estimate
/// lies within `min_z` standard errors of zero, or which the rows do not resolve, are held at zero.
pub(crate) fn estimate(
    design: &Design,
    targets: &[Vec<f64>],
    mix: &[[f64; 6]; 6],
    omega: [&[f64]; 3],
    min_z: f64,
) -> GyroBias {
    let series: Vec<&[f64]> = omega
        .iter()
        .copied()
        .chain(targets[..6].iter().map(|t| &t[..]))
        .collect();
    let mut profiled: Vec<Vec<f64>> = series
        .par_iter()
        .map(|x| design.project_out(x.to_vec()))
        .collect();
    let y: Vec<Vec<f64>> = profiled.split_off(3);
    let w = profiled;
    let l = row_maps(mix);
    let stats = BatchStats::of(&w, &y, design.batch_length());
    let mut active: Vec<usize> = vec![0, 1, 2];
    let mut held: Vec<HeldTerm> = Vec::new();
    // Rows weighted by 1/σ² of their residual: first of the target alone, then of the fit's.
    let mut weight: Vec<f64> = (0..6)
        .map(|j| stats.weight(j, &l[j], &active, &[]))
        .collect();
    loop {
        let fitted = stats.solve(&l, &weight, &active).and_then(|fit| {
            weight = (0..6)
                .map(|j| stats.weight(j, &l[j], &active, &fit.0))
                .collect();
            stats.solve(&l, &weight, &active)
        });
        let Some(fit) = fitted else {
            held.extend(active.iter().map(|&m| unresolved(m)));
            break;
        };
        let weakest = active
            .iter()
            .enumerate()
            .map(|(a, &m)| (a, m, (fit.0[a] / fit.1[a]).abs()))
            .filter(|t| t.2.is_nan() || t.2 < min_z)
            .min_by(|p, q| p.2.total_cmp(&q.2));
        let Some((a, m, z)) = weakest else {
            let mut beta = [HELD; 3];
            for (a, &m) in active.iter().enumerate() {
                beta[m] = Coefficient {
                    value: fit.0[a],
                    std_error: fit.1[a],
                };
            }
            return GyroBias { beta, held };
        };
        held.push(HeldTerm {
            term: NAMES[m].into(),
            estimate: Some(Coefficient {
                value: fit.0[a],
                std_error: fit.1[a],
            }),
            effect_rms: None,
            reason: format!("not significant (|estimate| {z:.1} standard errors, {min_z} needed)"),
        });
        active.remove(a);
        if active.is_empty() {
            break;
        }
    }
    GyroBias {
        beta: [HELD; 3],
        held,
    }
}

/// Fits β to a flight ([`estimate`]) and takes its trace off the unknowns' targets, whole-band
/// (`targets`, beside the block means of the rates `rates`, rad/s) and band-passed
/// (`band_targets`); `pa` is the solve's P·A (rows × unknowns). Row j carries
/// −Σ_r pa[j][r]·δM_r, linear in ω, so its three coefficients are formed once per row, and
/// band-passing being linear the same coefficients serve the band-passed rates.
pub(crate) fn take_off(
    design: &Design,
    pa: &[Vec<f64>],
    rates: [&[f64]; 3],
    (targets, band_targets): (&mut [Vec<f64>], &mut [Vec<f64>]),
    min_z: f64,
) -> GyroBias {
    let mix: [[f64; 6]; 6] = std::array::from_fn(|j| std::array::from_fn(|i| pa[j][i]));
    let band_rates: Vec<Vec<f64>> = rates.par_iter().map(|w| design.band_pass(w)).collect();
    let band_refs = [&band_rates[0][..], &band_rates[1][..], &band_rates[2][..]];
    let gb = estimate(design, band_targets, &mix, band_refs, min_z);
    let beta = gb.beta.map(|c| c.value);
    if beta.iter().all(|b| *b == 0.0) {
        return gb;
    }
    let unit = |c: usize| std::array::from_fn::<f64, 3, _>(|m| f64::from(m == c));
    let coefficients: Vec<[f64; 3]> = pa
        .iter()
        .map(|row| {
            std::array::from_fn(|c| (0..6).map(|r| row[r] * trace_at(r, beta, unit(c))).sum())
        })
        .collect();
    let add = |w: &[f64; 3], t: &mut Vec<f64>, rate: [&[f64]; 3]| {
        for (i, tv) in t.iter_mut().enumerate() {
            *tv += w[0] * rate[0][i] + w[1] * rate[1][i] + w[2] * rate[2][i];
        }
    };
    targets
        .par_iter_mut()
        .zip(&coefficients)
        .for_each(|(t, w)| add(w, t, rates));
    band_targets
        .par_iter_mut()
        .zip(&coefficients)
        .for_each(|(t, w)| add(w, t, band_refs));
    gb
}

/// The log's line for a flight's applied gyro bias, `None` when every component is held.
pub(crate) fn note(gb: &GyroBias) -> Option<String> {
    let shown: Vec<String> = gb
        .beta
        .iter()
        .zip(NAMES)
        .filter(|(c, _)| c.value != 0.0)
        .map(|(c, name)| format!("{name} {:.2e} ± {:.1e} rad/s", c.value, c.std_error))
        .collect();
    (!shown.is_empty()).then(|| {
        format!(
            "the gyros' bias, from what it leaves in the centrifugal correction: {}; its trace is \
             taken off",
            shown.join(", ")
        )
    })
}

/// Per tensor row j, the map L_j with row j's regressor for β_m equal to Σ_c L_j[m][c]·ω⊥_c:
/// L_j[m][c] = −Σ_i mix[j][i]·k_i(m, c) (the target carries −δM).
fn row_maps(mix: &[[f64; 6]; 6]) -> Vec<[[f64; 3]; 3]> {
    mix.iter()
        .map(|row| {
            std::array::from_fn(|m| {
                std::array::from_fn(|c| {
                    -ROWS
                        .iter()
                        .zip(row)
                        .map(|((a, b), mx)| mx * k(*a, *b, m, c))
                        .sum::<f64>()
                })
            })
        })
        .collect()
}

/// A component held at zero: no value, no standard error of its own.
const HELD: Coefficient = Coefficient {
    value: 0.0,
    std_error: f64::INFINITY,
};

/// One batch's sums: Σ ω⊥_c ω⊥_d, per row Σ ω⊥_c y_j, per row Σ y_j².
type BatchSums = ([[f64; 3]; 3], [[f64; 3]; 6], [f64; 6]);

/// Sums over consecutive batches of samples of what the weighted least squares and its
/// cluster-robust errors need, so that every refit is a few 3 × 3 products per batch instead of a
/// pass over the samples.
struct BatchStats {
    n: usize,
    batches: Vec<BatchSums>,
}

impl BatchStats {
    fn of(w: &[Vec<f64>], y: &[Vec<f64>], batch: usize) -> Self {
        let n = y.first().map_or(0, Vec::len);
        let batch = batch.max(1);
        let batches = (0..n.div_ceil(batch))
            .into_par_iter()
            .map(|q| {
                let span = q * batch..((q + 1) * batch).min(n);
                let dot = |a: &[f64], b: &[f64]| -> f64 {
                    gravgrad_core::stats::dot(&a[span.clone()], &b[span.clone()])
                };
                let ww = std::array::from_fn(|c| std::array::from_fn(|d| dot(&w[c], &w[d])));
                let wy = std::array::from_fn(|j| std::array::from_fn(|c| dot(&w[c], &y[j])));
                let yy = std::array::from_fn(|j| dot(&y[j], &y[j]));
                (ww, wy, yy)
            })
            .collect();
        Self { n, batches }
    }

    /// Row j's XᵀX (active × active, row-major) and Xᵀy (active) over one batch's sums, with
    /// X = ω⊥·Lᵀ.
    fn row_batch(
        sums: &BatchSums,
        j: usize,
        l: &[[f64; 3]; 3],
        act: &[usize],
    ) -> (Vec<f64>, Vec<f64>) {
        let q = act.len();
        let ww = &sums.0;
        let mut xx = vec![0.0; q * q];
        for (a, &ma) in act.iter().enumerate() {
            for (c, &mc) in act.iter().enumerate() {
                let mut v = 0.0;
                for (e, le) in l[ma].iter().enumerate() {
                    for (f, lf) in l[mc].iter().enumerate() {
                        v += le * ww[e][f] * lf;
                    }
                }
                xx[a * q + c] = v;
            }
        }
        let xy = act
            .iter()
            .map(|&m| (0..3).map(|c| l[m][c] * sums.1[j][c]).sum())
            .collect();
        (xx, xy)
    }

    /// 1/σ² of row j's residual at `beta` (over `act`; empty: the target alone); 0 for a row
    /// without variance or with too few samples.
    fn weight(&self, j: usize, l: &[[f64; 3]; 3], act: &[usize], beta: &[f64]) -> f64 {
        if self.n < 4 {
            return 0.0;
        }
        let q = act.len();
        let mut rss: f64 = self.batches.iter().map(|b| b.2[j]).sum();
        if !beta.is_empty() {
            for sums in &self.batches {
                let (xx, xy) = Self::row_batch(sums, j, l, act);
                for a in 0..q {
                    rss -= 2.0 * beta[a] * xy[a];
                    for c in 0..q {
                        rss += beta[a] * xx[a * q + c] * beta[c];
                    }
                }
            }
        }
        let var = rss / self.n as f64;
        if var.is_finite() && var > 0.0 {
            1.0 / var
        } else {
            0.0
        }
    }

    /// Weighted least squares of the rows on the `act` components of β: estimates and standard
    /// errors in the order of `act`; `None` when the normal matrix does not resolve them all. The
    /// errors are cluster-robust, each batch of all six rows together a cluster (Bester, Conley &
    /// Hansen 2011): the rows' residuals are correlated in time and with each other (they share
    /// the pairs' noise), and larger where the rates are.
    fn solve(
        &self,
        l: &[[[f64; 3]; 3]],
        weight: &[f64],
        act: &[usize],
    ) -> Option<(Vec<f64>, Vec<f64>)> {
        let q = act.len();
        // Per batch and row, XᵀX and Xᵀy; the normal equations their weighted sums.
        let per_batch: Vec<Vec<(Vec<f64>, Vec<f64>)>> = self
            .batches
            .iter()
            .map(|sums| {
                (0..6)
                    .map(|j| Self::row_batch(sums, j, &l[j], act))
                    .collect()
            })
            .collect();
        let mut nm = vec![0.0; q * q];
        let mut rhs = vec![0.0; q];
        for rows in &per_batch {
            for (j, (xx, xy)) in rows.iter().enumerate() {
                let wj = weight[j];
                nm.iter_mut().zip(xx).for_each(|(s, v)| *s += wj * v);
                rhs.iter_mut().zip(xy).for_each(|(s, v)| *s += wj * v);
            }
        }
        // Scaled to a unit diagonal for the rank test.
        let scale: Vec<f64> = (0..q).map(|a| nm[a * q + a].sqrt()).collect();
        if scale.iter().any(|s| !(s.is_finite() && *s > 0.0)) {
            return None;
        }
        let scaled: Vec<Vec<f64>> = (0..q)
            .map(|a| {
                (0..q)
                    .map(|b| nm[a * q + b] / (scale[a] * scale[b]))
                    .collect()
            })
            .collect();
        let f = PivotedCholesky::of(&scaled, 1e-10);
        if f.kept_sorted().len() < q {
            return None;
        }
        let inv = |a: usize, b: usize| f.inverse_entry(a, b) / (scale[a] * scale[b]);
        let beta: Vec<f64> = (0..q)
            .map(|a| (0..q).map(|b| inv(a, b) * rhs[b]).sum::<f64>())
            .collect();
        // g_B = Σ_j w_j (Xᵀy − XᵀX·β) over the batch; Var(β) = N⁻¹ (Σ_B g_B g_Bᵀ) N⁻¹.
        let mut meat = vec![0.0; q * q];
        for rows in &per_batch {
            let mut g = vec![0.0; q];
            for (j, (xx, xy)) in rows.iter().enumerate() {
                let wj = weight[j];
                for a in 0..q {
                    g[a] += wj * (xy[a] - (0..q).map(|c| xx[a * q + c] * beta[c]).sum::<f64>());
                }
            }
            for a in 0..q {
                for c in 0..q {
                    meat[a * q + c] += g[a] * g[c];
                }
            }
        }
        let se: Vec<f64> = (0..q)
            .map(|a| {
                let mut v = 0.0;
                for b in 0..q {
                    for c in 0..q {
                        v += inv(a, b) * meat[b * q + c] * inv(c, a);
                    }
                }
                v.sqrt()
            })
            .collect();
        Some((beta, se))
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
    use approx::assert_abs_diff_eq;

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
            assert_abs_diff_eq!(cw, -ndb, epsilon = 1e-15);
        }
    }
}
