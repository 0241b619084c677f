//! Hyper-dual numbers a + b·ε₁ + c·ε₂ + d·ε₁ε₂ (ε₁² = ε₂² = 0, ε₁ε₂ ≠ 0): evaluating a function at
//! x + ε₁·e_i + ε₂·e_j gives ∂f/∂x_i, ∂f/∂x_j and ∂²f/∂x_i∂x_j exactly, with no step size and no
//! truncation error (Fike & Alonso 2011, "The development of hyper-dual numbers for exact
//! second-derivative calculations", AIAA 2011-886).

use std::ops::{Add, Div, Mul, Neg, Sub};

/// A hyper-dual number: value, two first-derivative parts and the mixed second-derivative part.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct HyperDual {
    pub re: f64,
    pub e1: f64,
    pub e2: f64,
    pub e12: f64,
}

impl HyperDual {
    /// A constant.
    pub fn cst(v: f64) -> Self {
        Self {
            re: v,
            ..Self::default()
        }
    }

    /// Applies f with f(re), f'(re), f''(re) given.
    #[inline]
    fn chain(self, f: f64, df: f64, d2f: f64) -> Self {
        Self {
            re: f,
            e1: df * self.e1,
            e2: df * self.e2,
            e12: df * self.e12 + d2f * self.e1 * self.e2,
        }
    }

    pub fn sqrt(self) -> Self {
        let s = self.re.sqrt();
        self.chain(s, 0.5 / s, -0.25 / (s * self.re))
    }

    pub fn atan(self) -> Self {
        let q = 1.0 / (1.0 + self.re * self.re);
        self.chain(self.re.atan(), q, -2.0 * self.re * q * q)
    }

    pub fn recip(self) -> Self {
        let r = 1.0 / self.re;
        self.chain(r, -r * r, 2.0 * r * r * r)
    }

    pub fn scale(self, k: f64) -> Self {
        Self {
            re: k * self.re,
            e1: k * self.e1,
            e2: k * self.e2,
            e12: k * self.e12,
        }
    }
}

impl Add for HyperDual {
    type Output = Self;
    fn add(self, o: Self) -> Self {
        Self {
            re: self.re + o.re,
            e1: self.e1 + o.e1,
            e2: self.e2 + o.e2,
            e12: self.e12 + o.e12,
        }
    }
}

impl Sub for HyperDual {
    type Output = Self;
    fn sub(self, o: Self) -> Self {
        Self {
            re: self.re - o.re,
            e1: self.e1 - o.e1,
            e2: self.e2 - o.e2,
            e12: self.e12 - o.e12,
        }
    }
}

impl Neg for HyperDual {
    type Output = Self;
    fn neg(self) -> Self {
        self.scale(-1.0)
    }
}

impl Mul for HyperDual {
    type Output = Self;
    fn mul(self, o: Self) -> Self {
        Self {
            re: self.re * o.re,
            e1: self.re * o.e1 + self.e1 * o.re,
            e2: self.re * o.e2 + self.e2 * o.re,
            e12: self.re * o.e12 + self.e1 * o.e2 + self.e2 * o.e1 + self.e12 * o.re,
        }
    }
}

impl Div for HyperDual {
    type Output = Self;
    fn div(self, o: Self) -> Self {
        // Quotient rule through the reciprocal's chain rule: exact for first and second parts.
        Mul::mul(self, o.recip())
    }
}

impl Add<f64> for HyperDual {
    type Output = Self;
    fn add(self, o: f64) -> Self {
        Self {
            re: self.re + o,
            ..self
        }
    }
}

impl Sub<f64> for HyperDual {
    type Output = Self;
    fn sub(self, o: f64) -> Self {
        Self {
            re: self.re - o,
            ..self
        }
    }
}

impl Mul<f64> for HyperDual {
    type Output = Self;
    fn mul(self, o: f64) -> Self {
        self.scale(o)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn second_derivatives_are_exact() {
        // f(x, y) = atan(x·y)/√(x² + y²): ∂²f/∂x∂y checked against the analytic derivative taken by hand.
        let (x0, y0) = (0.7, -1.3);
        let x = HyperDual {
            re: x0,
            e1: 1.0,
            ..Default::default()
        };
        let y = HyperDual {
            re: y0,
            e2: 1.0,
            ..Default::default()
        };
        let f = (x * y).atan() / (x * x + y * y).sqrt();
        // Analytic: f = A/R with A = atan(xy), R = √(x²+y²).
        let a = (x0 * y0).atan();
        let r = (x0 * x0 + y0 * y0).sqrt();
        let ax = y0 / (1.0 + (x0 * y0).powi(2));
        let ay = x0 / (1.0 + (x0 * y0).powi(2));
        let axy = (1.0 - (x0 * y0).powi(2)) / (1.0 + (x0 * y0).powi(2)).powi(2);
        let (rx, ry, rxy) = (x0 / r, y0 / r, -x0 * y0 / r.powi(3));
        let fx = ax / r - a * rx / (r * r);
        let fxy = axy / r - ax * ry / (r * r) - ay * rx / (r * r) - a * rxy / (r * r)
            + 2.0 * a * rx * ry / r.powi(3);
        assert_abs_diff_eq!(f.e1, fx, epsilon = 1e-15);
        assert_abs_diff_eq!(f.e12, fxy, epsilon = 1e-14);
    }
}
