//! Conjugate gradients with a diagonal (Jacobi) preconditioner for a symmetric positive-definite
//! system given only through its product with a vector (Hestenes & Stiefel 1952, "Methods of
//! conjugate gradients for solving linear systems", J. Res. Natl. Bur. Stand. 49:409–436).

/// Solves A·x = b for symmetric positive-definite A given as `apply(v, out)` (out = A·v) and its
/// diagonal. Stops when ‖r‖ ≤ `tol`·‖b‖ or after `max_iter` iterations; returns x and the iterations
/// used. Zero diagonal entries are treated as 1 in the preconditioner.
pub(crate) fn conjugate_gradient(
    apply: impl Fn(&[f64], &mut [f64]),
    diagonal: &[f64],
    b: &[f64],
    tol: f64,
    max_iter: usize,
) -> (Vec<f64>, usize) {
    let n = b.len();
    let dot = |a: &[f64], c: &[f64]| a.iter().zip(c).map(|(x, y)| x * y).sum::<f64>();
    let inv: Vec<f64> = diagonal
        .iter()
        .map(|d| if *d > 0.0 { 1.0 / d } else { 1.0 })
        .collect();
    let mut x = vec![0.0; n];
    let mut r = b.to_vec();
    let bnorm = dot(b, b).sqrt();
    if bnorm == 0.0 {
        return (x, 0);
    }
    let mut z: Vec<f64> = r.iter().zip(&inv).map(|(a, m)| a * m).collect();
    let mut p = z.clone();
    let mut rz = dot(&r, &z);
    let mut ap = vec![0.0; n];
    for it in 0..max_iter {
        if dot(&r, &r).sqrt() <= tol * bnorm {
            return (x, it);
        }
        apply(&p, &mut ap);
        let pap = dot(&p, &ap);
        if pap.is_nan() || pap <= 0.0 {
            return (x, it);
        }
        let alpha = rz / pap;
        for k in 0..n {
            x[k] += alpha * p[k];
            r[k] -= alpha * ap[k];
        }
        for k in 0..n {
            z[k] = r[k] * inv[k];
        }
        let rz_new = dot(&r, &z);
        let beta = rz_new / rz;
        rz = rz_new;
        for k in 0..n {
            p[k] = z[k] + beta * p[k];
        }
    }
    (x, max_iter)
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn solves_a_small_system_with_a_known_answer() {
        // A = [[4,1,0],[1,3,1],[0,1,2]] (diagonally dominant, so SPD), x = [1,−2,3] → b = A·x.
        let a = [[4.0, 1.0, 0.0], [1.0, 3.0, 1.0], [0.0, 1.0, 2.0]];
        let want = [1.0, -2.0, 3.0];
        let b: Vec<f64> = a
            .iter()
            .map(|row| row.iter().zip(&want).map(|(p, q)| p * q).sum())
            .collect();
        let apply = |v: &[f64], out: &mut [f64]| {
            for (o, row) in out.iter_mut().zip(&a) {
                *o = row.iter().zip(v).map(|(p, q)| p * q).sum();
            }
        };
        let (x, it) = conjugate_gradient(apply, &[4.0, 3.0, 2.0], &b, 1e-14, 50);
        assert!(
            it <= 4,
            "exact in at most n steps up to rounding, took {it}"
        );
        for (g, w) in x.iter().zip(&want) {
            assert_abs_diff_eq!(*g, *w, epsilon = 1e-12);
        }
    }
}
