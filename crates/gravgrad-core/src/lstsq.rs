//! Small dense least squares that say what they could not determine: a singular value
//! decomposition by one-sided Jacobi rotations for the pairs' design matrix, and a Cholesky
//! factorisation with diagonal pivoting that reports the rank of a set of regressors.
//!
//! Both work on the matrix as given (no normal equations for the SVD, so the condition number is
//! not squared); both are meant for a handful of columns (at most a few dozen).

/// The thin singular value decomposition A = U·Σ·Vᵀ of an m × k matrix (m ≥ 1, k ≥ 1).
pub struct Svd {
    /// m × k, orthonormal columns where σ > 0 (zero columns where σ = 0).
    pub u: Vec<Vec<f64>>,
    /// k singular values, not sorted.
    pub sigma: Vec<f64>,
    /// k × k orthogonal; column j is the right singular vector of `sigma[j]`.
    pub v: Vec<Vec<f64>>,
}

/// The SVD of `a` (rows of length `k`) by one-sided Jacobi rotations (Hestenes 1958, J. SIAM
/// 6:51–90; Demmel & Veselić 1992, SIAM J. Matrix Anal. Appl. 13:1204–1245): columns are rotated
/// pairwise until orthogonal, so the singular values come from the matrix itself and keep their
/// relative accuracy.
pub fn svd(a: &[Vec<f64>], k: usize) -> Svd {
    let m = a.len();
    // Work on columns.
    let mut cols: Vec<Vec<f64>> = (0..k)
        .map(|j| a.iter().map(|r| r.get(j).copied().unwrap_or(0.0)).collect())
        .collect();
    let mut v: Vec<Vec<f64>> = (0..k)
        .map(|i| (0..k).map(|j| if i == j { 1.0 } else { 0.0 }).collect())
        .collect();
    let dot = |x: &[f64], y: &[f64]| x.iter().zip(y).map(|(p, q)| p * q).sum::<f64>();
    for _sweep in 0..60 {
        let mut rotated = false;
        for p in 0..k {
            for q in p + 1..k {
                let alpha = dot(&cols[p], &cols[p]);
                let beta = dot(&cols[q], &cols[q]);
                let gamma = dot(&cols[p], &cols[q]);
                if gamma.abs() <= 1e-15 * (alpha * beta).sqrt() || gamma == 0.0 {
                    continue;
                }
                rotated = true;
                let zeta = (beta - alpha) / (2.0 * gamma);
                let t = zeta.signum() / (zeta.abs() + (1.0 + zeta * zeta).sqrt());
                let t = if zeta == 0.0 { 1.0 } else { t };
                let c = 1.0 / (1.0 + t * t).sqrt();
                let s = c * t;
                let (left, right) = cols.split_at_mut(q);
                for (xp, xq) in left[p].iter_mut().zip(right[0].iter_mut()) {
                    let (a, b) = (*xp, *xq);
                    *xp = c * a - s * b;
                    *xq = s * a + c * b;
                }
                for row in v.iter_mut() {
                    let (vp, vq) = (row[p], row[q]);
                    row[p] = c * vp - s * vq;
                    row[q] = s * vp + c * vq;
                }
            }
        }
        if !rotated {
            break;
        }
    }
    let sigma: Vec<f64> = cols.iter().map(|c| dot(c, c).sqrt()).collect();
    let u: Vec<Vec<f64>> = (0..m)
        .map(|i| {
            (0..k)
                .map(|j| {
                    if sigma[j] > 0.0 {
                        cols[j][i] / sigma[j]
                    } else {
                        0.0
                    }
                })
                .collect()
        })
        .collect();
    Svd { u, sigma, v }
}

/// Singular values below this fraction of the largest count as zero.
pub const RANK_TOLERANCE: f64 = 1e-9;

/// The factorisation of a symmetric positive semi-definite matrix N (k × k) as Πᵀ·N·Π = L·Lᵀ, with
/// the largest remaining diagonal taken as pivot at each step (Higham 2002, "Accuracy and Stability
/// of Numerical Algorithms", §10.3). Columns whose remaining diagonal falls below `tol` times their
/// own diagonal are linearly dependent on the pivots taken before them: the factorisation stops there
/// and reports them, instead of dividing by a vanishing pivot.
pub struct PivotedCholesky {
    /// Columns of N kept, in pivot order.
    pub kept: Vec<usize>,
    /// Columns of N found dependent on the kept ones (or with a zero diagonal).
    pub dependent: Vec<usize>,
    /// Inverse of N restricted to the kept columns, in the original order of `kept` sorted: entry
    /// (a, b) for kept columns `kept_sorted[a]`, `kept_sorted[b]`.
    inverse: Vec<Vec<f64>>,
    kept_sorted: Vec<usize>,
    /// Ratio of the largest to the smallest pivot, squared root taken: an estimate of the condition
    /// number of the (scaled) regressor matrix X, where N = XᵀX.
    pub condition: f64,
}

impl PivotedCholesky {
    /// Factors `n` (k × k, symmetric). `tol`: the fraction of a column's own diagonal its
    /// remaining diagonal must keep to count as independent (1e-10 means: the column's part not
    /// explained by the pivots before it has at least 1e-5 of its RMS).
    pub fn of(n: &[Vec<f64>], tol: f64) -> Self {
        let k = n.len();
        let mut a: Vec<Vec<f64>> = n.to_vec();
        let diag0: Vec<f64> = (0..k).map(|i| n[i][i]).collect();
        let mut perm: Vec<usize> = (0..k).collect();
        let mut rank = 0;
        let mut pivots = Vec::new();
        for j in 0..k {
            // Choose the pivot with the largest remaining diagonal relative to its own diagonal.
            let (best, rel) = (j..k)
                .map(|i| {
                    let d0 = diag0[perm[i]];
                    (i, if d0 > 0.0 { a[i][i] / d0 } else { 0.0 })
                })
                .fold(
                    (j, f64::NEG_INFINITY),
                    |acc, x| if x.1 > acc.1 { x } else { acc },
                );
            if rel.is_nan() || rel <= tol {
                break;
            }
            // Symmetric swap of rows and columns j and best.
            a.swap(j, best);
            for row in a.iter_mut() {
                row.swap(j, best);
            }
            perm.swap(j, best);
            let d = a[j][j].sqrt();
            pivots.push(d / diag0[perm[j]].sqrt());
            a[j][j] = d;
            for row in a.iter_mut().skip(j + 1) {
                row[j] /= d;
            }
            for i in j + 1..k {
                for c in j + 1..=i {
                    let v = a[i][j] * a[c][j];
                    a[i][c] -= v;
                    a[c][i] = a[i][c];
                }
            }
            rank += 1;
        }
        let kept: Vec<usize> = perm[..rank].to_vec();
        let dependent: Vec<usize> = perm[rank..].to_vec();
        // Inverse of the kept block from L (rank × rank, lower): N_kk⁻¹ = L⁻ᵀ·L⁻¹.
        let mut linv = vec![vec![0.0; rank]; rank];
        for i in 0..rank {
            linv[i][i] = 1.0 / a[i][i];
            for r in i + 1..rank {
                let s: f64 = (i..r).map(|c| a[r][c] * linv[c][i]).sum();
                linv[r][i] = -s / a[r][r];
            }
        }
        let inv_perm: Vec<Vec<f64>> = (0..rank)
            .map(|p| {
                (0..rank)
                    .map(|q| (p.max(q)..rank).map(|r| linv[r][p] * linv[r][q]).sum())
                    .collect()
            })
            .collect();
        let mut kept_sorted = kept.clone();
        kept_sorted.sort_unstable();
        let pos = |c: usize| kept.iter().position(|&x| x == c).unwrap_or(0);
        let inverse = kept_sorted
            .iter()
            .map(|&p| {
                kept_sorted
                    .iter()
                    .map(|&q| inv_perm[pos(p)][pos(q)])
                    .collect()
            })
            .collect();
        let (pmax, pmin) = pivots.iter().fold((0.0f64, f64::INFINITY), |(mx, mn), &p| {
            (mx.max(p), mn.min(p))
        });
        Self {
            kept,
            dependent,
            inverse,
            kept_sorted,
            condition: if pivots.is_empty() {
                f64::INFINITY
            } else {
                pmax / pmin
            },
        }
    }

    /// The kept columns in ascending order (the order of [`Self::inverse_entry`]'s indices).
    pub fn kept_sorted(&self) -> &[usize] {
        &self.kept_sorted
    }

    /// Entry (a, b) of the inverse of N restricted to the kept columns, a and b indices into
    /// [`Self::kept_sorted`].
    pub fn inverse_entry(&self, a: usize, b: usize) -> f64 {
        self.inverse[a][b]
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    fn matmul_t(a: &[Vec<f64>]) -> Vec<Vec<f64>> {
        let k = a[0].len();
        (0..k)
            .map(|i| {
                (0..k)
                    .map(|j| a.iter().map(|r| r[i] * r[j]).sum())
                    .collect()
            })
            .collect()
    }

    #[test]
    fn svd_reconstructs_a_known_matrix_and_finds_its_null_direction() {
        // Columns: c0, c1, c0 + 2·c1 (rank 2 by construction).
        let a: Vec<Vec<f64>> = (0..7)
            .map(|i| {
                let (x, y) = ((i as f64).sin(), (i as f64 * 0.7).cos());
                vec![x, y, x + 2.0 * y]
            })
            .collect();
        let s = svd(&a, 3);
        for (i, row) in a.iter().enumerate() {
            for (j, want) in row.iter().enumerate() {
                let r: f64 = (0..3).map(|q| s.u[i][q] * s.sigma[q] * s.v[j][q]).sum();
                assert_abs_diff_eq!(r, *want, epsilon = 1e-12);
            }
        }
        let smax = s.sigma.iter().cloned().fold(0.0, f64::max);
        let zero: Vec<usize> = (0..3).filter(|&j| s.sigma[j] < 1e-12 * smax).collect();
        assert_eq!(zero.len(), 1);
        // The null direction is (1, 2, −1)/√6 up to sign (by construction).
        let v: Vec<f64> = (0..3).map(|r| s.v[r][zero[0]]).collect();
        let want = [1.0, 2.0, -1.0].map(|x: f64| x / 6f64.sqrt());
        let sign = v[0].signum();
        for r in 0..3 {
            assert_abs_diff_eq!(v[r] * sign, want[r], epsilon = 1e-12);
        }
    }

    #[test]
    fn svd_keeps_small_singular_values_accurate() {
        // diag(1, 1e-9) rotated: its singular values are exactly 1 and 1e-9; normal equations would
        // see 1e-18 next to 1, at the edge of double precision.
        let (c, s) = (0.6, 0.8);
        let a = vec![vec![c, -s * 1e-9], vec![s, c * 1e-9]];
        let d = svd(&a, 2);
        let mut sv = d.sigma.clone();
        sv.sort_by(f64::total_cmp);
        assert_abs_diff_eq!(sv[0], 1e-9, epsilon = 1e-22);
        assert_abs_diff_eq!(sv[1], 1.0, epsilon = 1e-15);
    }

    #[test]
    fn pivoted_cholesky_reports_a_dependent_column_and_inverts_the_rest() {
        let x: Vec<Vec<f64>> = (0..50)
            .map(|i| {
                let t = i as f64 / 10.0;
                vec![t.sin(), 1.0, 3.0 * t.sin() - 0.5, t * t]
            })
            .collect();
        let n = matmul_t(&x);
        let f = PivotedCholesky::of(&n, 1e-10);
        assert_eq!(f.kept.len(), 3);
        assert_eq!(f.dependent.len(), 1);
        // The inverse of the kept block times the kept block is the identity.
        let ks = f.kept_sorted().to_vec();
        for a in 0..3 {
            for b in 0..3 {
                let v: f64 = (0..3)
                    .map(|c| f.inverse_entry(a, c) * n[ks[c]][ks[b]])
                    .sum();
                assert!(
                    (v - if a == b { 1.0 } else { 0.0 }).abs() < 1e-9,
                    "{a} {b} {v}"
                );
            }
        }
    }

    #[test]
    fn pivoted_cholesky_of_a_zero_column_drops_it() {
        let n = vec![vec![4.0, 0.0], vec![0.0, 0.0]];
        let f = PivotedCholesky::of(&n, 1e-10);
        assert_eq!(f.kept, vec![0]);
        assert_eq!(f.dependent, vec![1]);
        assert_abs_diff_eq!(f.inverse_entry(0, 0), 0.25, epsilon = 1e-15);
    }
}
