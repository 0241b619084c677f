//! Gauss–Legendre quadrature on [−1, 1]: nodes and weights by Newton iteration on the Legendre
//! polynomial (Golub & Welsch 1969 give the same nodes by eigenvalues; Abramowitz & Stegun 25.4.29).

/// Nodes and weights of the `n`-point rule on [−1, 1], nodes ascending.
pub fn nodes_weights(n: usize) -> (Vec<f64>, Vec<f64>) {
    let mut x = vec![0.0; n];
    let mut w = vec![0.0; n];
    for i in 0..n.div_ceil(2) {
        // Initial guess (Tricomi), then Newton on P_n.
        let mut z = (std::f64::consts::PI * (i as f64 + 0.75) / (n as f64 + 0.5)).cos();
        let mut dp = 1.0;
        for _ in 0..100 {
            let (p, d) = legendre(n, z);
            dp = d;
            let dz = p / d;
            z -= dz;
            if dz.abs() < 1e-16 {
                break;
            }
        }
        let (_, d) = legendre(n, z);
        if d != 0.0 {
            dp = d;
        }
        x[i] = -z;
        x[n - 1 - i] = z;
        let wi = 2.0 / ((1.0 - z * z) * dp * dp);
        w[i] = wi;
        w[n - 1 - i] = wi;
    }
    (x, w)
}

/// P_n(z) and its derivative by the three-term recurrence.
fn legendre(n: usize, z: f64) -> (f64, f64) {
    let (mut p0, mut p1) = (1.0, z);
    if n == 0 {
        return (1.0, 0.0);
    }
    for k in 2..=n {
        let p2 = ((2 * k - 1) as f64 * z * p1 - (k - 1) as f64 * p0) / k as f64;
        p0 = p1;
        p1 = p2;
    }
    let dp = n as f64 * (z * p1 - p0) / (z * z - 1.0);
    (p1, dp)
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn rules_integrate_polynomials_exactly() {
        // An n-point rule integrates degree 2n − 1 exactly: ∫ x^k dx over [−1, 1] = 2/(k+1), k even.
        for n in 1..=10 {
            let (x, w) = nodes_weights(n);
            assert_abs_diff_eq!(w.iter().sum::<f64>(), 2.0, epsilon = 1e-14);
            for k in (0..2 * n).step_by(2) {
                let s: f64 = x.iter().zip(&w).map(|(x, w)| w * x.powi(k as i32)).sum();
                assert!(
                    (s - 2.0 / (k as f64 + 1.0)).abs() < 1e-13,
                    "n={n} k={k} {s}"
                );
            }
        }
        // Published 3-point rule (Abramowitz & Stegun table 25.4): ±√(3/5), weights 5/9, 8/9.
        let (x, w) = nodes_weights(3);
        assert_abs_diff_eq!(x[2], 0.6f64.sqrt(), epsilon = 1e-15);
        assert_abs_diff_eq!(w[1], 8.0 / 9.0, epsilon = 1e-15);
    }
}
