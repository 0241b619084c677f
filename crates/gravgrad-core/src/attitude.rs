//! Attitude of the sensor frame s (x forward, y right, z down) in local north-east-down n.
//!
//! Heading ψ, pitch θ, roll φ, rotation order z-y-x: C_sn = Rz(ψ)·Ry(θ)·Rx(φ) maps sensor-frame
//! vectors into NED, v_n = C_sn·v_s (`docs/physics.md`; e.g. Jekeli 2001, "Inertial Navigation
//! Systems with Geodetic Applications", §1.2).

use crate::mat3::Mat3;

/// Roll, pitch and heading in radians.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct Attitude {
    pub roll: f64,
    pub pitch: f64,
    pub heading: f64,
}

impl Attitude {
    /// From angles in degrees (the unit of files and screens).
    pub fn from_degrees(roll_deg: f64, pitch_deg: f64, heading_deg: f64) -> Self {
        Self {
            roll: roll_deg.to_radians(),
            pitch: pitch_deg.to_radians(),
            heading: heading_deg.to_radians(),
        }
    }

    /// C_sn = Rz(ψ)·Ry(θ)·Rx(φ), mapping sensor-frame vectors into NED.
    pub fn c_sn(&self) -> Mat3 {
        let (sf, cf) = self.roll.sin_cos();
        let (st, ct) = self.pitch.sin_cos();
        let (sp, cp) = self.heading.sin_cos();
        [
            [cp * ct, cp * st * sf - sp * cf, cp * st * cf + sp * sf],
            [sp * ct, sp * st * sf + cp * cf, sp * st * cf - cp * sf],
            [-st, ct * sf, ct * cf],
        ]
    }
}

/// C_sn from roll, pitch and heading in degrees, the same matrix as
/// `Attitude::from_degrees(roll, pitch, heading).c_sn()` to within a unit in the last place, with
/// [`sin_cos_deg`] in place of the library's sine and cosine: per-sample work that the solve and the
/// calibration repeat a million times a flight, where keeping the matrices instead would cost more.
#[inline]
pub fn c_sn_degrees(roll_deg: f64, pitch_deg: f64, heading_deg: f64) -> Mat3 {
    let (sf, cf) = sin_cos_deg(roll_deg);
    let (st, ct) = sin_cos_deg(pitch_deg);
    let (sp, cp) = sin_cos_deg(heading_deg);
    c_sn_of([sf, cf, st, ct, sp, cp])
}

/// C_sn from the sines and cosines [sin φ, cos φ, sin θ, cos θ, sin ψ, cos ψ].
#[inline]
fn c_sn_of([sf, cf, st, ct, sp, cp]: [f64; 6]) -> Mat3 {
    [
        [cp * ct, cp * st * sf - sp * cf, cp * st * cf + sp * sf],
        [sp * ct, sp * st * sf + cp * cf, sp * st * cf - cp * sf],
        [-st, ct * sf, ct * cf],
    ]
}

/// [`c_sn_degrees`] of a span of samples, into `out` (as long as the angles): the sines and cosines
/// of each stretch of samples first, branch-free so that the compiler vectorises them.
pub fn c_sn_degrees_span(
    roll_deg: &[f64],
    pitch_deg: &[f64],
    heading_deg: &[f64],
    out: &mut [Mat3],
) {
    const CHUNK: usize = 64;
    let (mut sines, mut cosines) = ([[0.0; CHUNK]; 3], [[0.0; CHUNK]; 3]);
    for (q, o) in out.chunks_mut(CHUNK).enumerate() {
        let r = q * CHUNK..q * CHUNK + o.len();
        let angles = [&roll_deg[r.clone()], &pitch_deg[r.clone()], &heading_deg[r]];
        for ((x, s), c) in angles.iter().zip(&mut sines).zip(&mut cosines) {
            sin_cos_deg_slice(x, &mut s[..o.len()], &mut c[..o.len()]);
        }
        for (k, m) in o.iter_mut().enumerate() {
            *m = c_sn_of(std::array::from_fn(|v| {
                if v % 2 == 0 {
                    sines[v / 2][k]
                } else {
                    cosines[v / 2][k]
                }
            }));
        }
    }
}

/// [`sin_cos_deg`] of every angle of `x` into `s` and `c` (as long as `x`).
pub fn sin_cos_deg_slice(x: &[f64], s: &mut [f64], c: &mut [f64]) {
    if x.iter().all(|v| v.abs() < LIMIT) {
        for ((v, so), co) in x.iter().zip(s.iter_mut()).zip(c.iter_mut()) {
            (*so, *co) = sin_cos_deg_in_range(*v);
        }
    } else {
        for ((v, so), co) in x.iter().zip(s.iter_mut()).zip(c.iter_mut()) {
            (*so, *co) = sin_cos_deg(*v);
        }
    }
}

/// Angles (degrees) at and beyond which [`sin_cos_deg`] goes to the library functions.
const LIMIT: f64 = (1u64 << 50) as f64;

/// Sine and cosine of an angle in degrees. The angle is reduced by whole quarter turns in degrees,
/// which is exact in floating point (|x| < 2⁵⁰), to r in [−45°, 45°] (ties to either side); sin
/// and cos of r·π/180 come from their Taylor series to the r¹⁵ and r¹⁶ terms (truncation below
/// 5·10⁻¹⁷ for |r| ≤ π/4), evaluated by Horner's rule; the quadrant swaps and signs them. Exact at
/// multiples of 90°. Angles beyond ±2⁵⁰ degrees, or not finite, go to the library functions.
#[inline]
pub fn sin_cos_deg(x: f64) -> (f64, f64) {
    if x.abs() < LIMIT {
        sin_cos_deg_in_range(x)
    } else {
        x.to_radians().sin_cos()
    }
}

/// [`sin_cos_deg`] for |x| < 2⁵⁰, without a branch: the quadrant's swap and signs are applied to the
/// bits.
#[inline]
fn sin_cos_deg_in_range(x: f64) -> (f64, f64) {
    // Nearest whole number of quarter turns by the add-and-subtract rounding of 1.5·2⁵² (exact
    // for |x/90| < 2⁵¹; no call to the library's round, which plain x86-64 code makes). The sum's
    // low mantissa bits are that number's two's complement, so its last two bits are the quadrant.
    const ROUND: f64 = 6_755_399_441_055_744.0;
    let shifted = x / 90.0 + ROUND;
    let quadrant = shifted.to_bits() & 3;
    let q = shifted - ROUND;
    let r = (x - 90.0 * q).to_radians();
    let r2 = r * r;
    // 1/k! for the odd (sine) and even (cosine) terms.
    const S: [f64; 7] = [
        -1.0 / 6.0,
        1.0 / 120.0,
        -1.0 / 5040.0,
        1.0 / 362_880.0,
        -1.0 / 39_916_800.0,
        1.0 / 6_227_020_800.0,
        -1.0 / 1_307_674_368_000.0,
    ];
    const C: [f64; 8] = [
        -1.0 / 2.0,
        1.0 / 24.0,
        -1.0 / 720.0,
        1.0 / 40_320.0,
        -1.0 / 3_628_800.0,
        1.0 / 479_001_600.0,
        -1.0 / 87_178_291_200.0,
        1.0 / 20_922_789_888_000.0,
    ];
    let ps = S.iter().rev().fold(0.0, |acc, c| acc * r2 + c);
    let pc = C.iter().rev().fold(0.0, |acc, c| acc * r2 + c);
    let (s, c) = ((r + r * r2 * ps).to_bits(), (1.0 + r2 * pc).to_bits());
    // Quadrant 0: (s, c); 1: (c, −s); 2: (−s, −c); 3: (−c, s).
    let swap = (quadrant & 1).wrapping_neg();
    let (sin, cos) = ((s & !swap) | (c & swap), (c & !swap) | (s & swap));
    let sign_sin = (quadrant & 2) << 62;
    let sign_cos = ((quadrant + 1) & 2) << 62;
    (
        f64::from_bits(sin ^ sign_sin),
        f64::from_bits(cos ^ sign_cos),
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mat3::{self, mul, mul_vec};
    use approx::assert_abs_diff_eq;

    #[test]
    fn sine_and_cosine_in_degrees_match_the_library() {
        let mut worst = 0.0f64;
        for i in -200_000..=200_000 {
            let x = i as f64 * 0.003_7 + 1e-3 * (i as f64).sin();
            let (s, c) = sin_cos_deg(x);
            // The library on the angle reduced by whole turns (exact in degrees), so that its own
            // rounding of x·π/180 stays below 2.3e-16 rad.
            let (ls, lc) = (x - 360.0 * (x / 360.0).round()).to_radians().sin_cos();
            worst = worst.max((s - ls).abs()).max((c - lc).abs());
        }
        assert!(worst < 4.5e-16, "{worst}");
        for (x, want) in [
            (0.0, (0.0, 1.0)),
            (90.0, (1.0, 0.0)),
            (180.0, (0.0, -1.0)),
            (-90.0, (-1.0, 0.0)),
            (270.0, (-1.0, 0.0)),
            (360.0, (0.0, 1.0)),
        ] {
            let (s, c) = sin_cos_deg(x);
            assert_eq!((s + 0.0, c + 0.0), want, "{x}");
        }
        let angles: Vec<f64> = (-500..500).map(|i| i as f64 * 0.73).collect();
        let (mut s, mut c) = (vec![0.0; 1000], vec![0.0; 1000]);
        sin_cos_deg_slice(&angles, &mut s, &mut c);
        assert!(
            angles
                .iter()
                .zip(s.iter().zip(&c))
                .all(|(x, (s, c))| (*s, *c) == sin_cos_deg(*x))
        );
        let mut mats = vec![[[0.0; 3]; 3]; 1000];
        c_sn_degrees_span(
            &angles,
            &angles[..].iter().rev().copied().collect::<Vec<_>>(),
            &angles,
            &mut mats,
        );
        assert_eq!(mats[17], c_sn_degrees(angles[17], angles[982], angles[17]));
        assert!(sin_cos_deg(f64::INFINITY).0.is_nan());
        let (s, c) = sin_cos_deg(30.0);
        assert_abs_diff_eq!(s, 0.5, epsilon = 1.2e-16);
        assert_abs_diff_eq!(c, 0.75f64.sqrt(), epsilon = 1.2e-16);
        let m = c_sn_degrees(3.0, -7.5, 231.0);
        let l = Attitude::from_degrees(3.0, -7.5, 231.0).c_sn();
        assert_abs_diff_eq!(m.as_flattened(), l.as_flattened(), epsilon = 1e-15);
    }

    fn rz(a: f64) -> Mat3 {
        [
            [a.cos(), -a.sin(), 0.0],
            [a.sin(), a.cos(), 0.0],
            [0.0, 0.0, 1.0],
        ]
    }
    fn ry(a: f64) -> Mat3 {
        [
            [a.cos(), 0.0, a.sin()],
            [0.0, 1.0, 0.0],
            [-a.sin(), 0.0, a.cos()],
        ]
    }
    fn rx(a: f64) -> Mat3 {
        [
            [1.0, 0.0, 0.0],
            [0.0, a.cos(), -a.sin()],
            [0.0, a.sin(), a.cos()],
        ]
    }

    #[test]
    fn heading_90_sends_sensor_x_to_east() {
        // docs/physics.md check: ψ = 90° sends sensor x to east (NED y).
        let v = mul_vec(
            &Attitude::from_degrees(0.0, 0.0, 90.0).c_sn(),
            &[1.0, 0.0, 0.0],
        );
        assert_abs_diff_eq!(v[..], [0.0, 1.0, 0.0][..], epsilon = 1e-15);
    }

    #[test]
    fn positive_pitch_raises_the_nose_and_positive_roll_drops_the_right_wing() {
        // Aerospace convention: nose up means sensor x gains an upward (−down) component;
        // right wing down means sensor y gains a downward component.
        let x = mul_vec(
            &Attitude::from_degrees(0.0, 10.0, 0.0).c_sn(),
            &[1.0, 0.0, 0.0],
        );
        assert!(x[2] < 0.0);
        let y = mul_vec(
            &Attitude::from_degrees(10.0, 0.0, 0.0).c_sn(),
            &[0.0, 1.0, 0.0],
        );
        assert!(y[2] > 0.0);
    }

    #[test]
    fn closed_form_equals_the_product_of_elementary_rotations() {
        let (r, p, h) = (0.3, -0.2, 2.5);
        let c = Attitude {
            roll: r,
            pitch: p,
            heading: h,
        }
        .c_sn();
        let want = mul(&mul(&rz(h), &ry(p)), &rx(r));
        assert_abs_diff_eq!(c.as_flattened(), want.as_flattened(), epsilon = 1e-15);
        // Orthonormal with determinant +1.
        assert_abs_diff_eq!(mat3::det(&c), 1.0, epsilon = 1e-14);
    }
}
