//! Small statistics on plain samples (no units of their own: they keep the samples').

/// The median of `v` (reordered in place by selection, O(n), NaN last by IEEE total order); the
/// mean of the two middle values for an even count; `None` when empty.
pub fn median(v: &mut [f64]) -> Option<f64> {
    if v.is_empty() {
        return None;
    }
    let n = v.len();
    let (left, mid, _) = v.select_nth_unstable_by(n / 2, f64::total_cmp);
    let upper = *mid;
    Some(if n % 2 == 1 {
        upper
    } else {
        // The largest of the lower half is the other middle value.
        let lower = left.iter().copied().max_by(f64::total_cmp).unwrap_or(upper);
        0.5 * (lower + upper)
    })
}

/// Number of interleaved partial sums in [`dot`].
const DOT_LANES: usize = 8;

/// Σ aᵢ·bᵢ over the common length of `a` and `b`, in a fixed order whatever the thread count: eight
/// interleaved partial sums (element i goes to sum i mod 8 of the whole blocks of eight), added
/// pairwise, then the remainder in order. One running sum makes every addition wait for the one
/// before it; eight independent ones let the core overlap them and the compiler vectorise them, and
/// the pairwise finish rounds no worse than one long sum.
pub fn dot(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len().min(b.len());
    let (a, b) = (&a[..n], &b[..n]);
    let (ca, cb) = (a.chunks_exact(DOT_LANES), b.chunks_exact(DOT_LANES));
    let (ra, rb) = (ca.remainder(), cb.remainder());
    let mut acc = [0.0f64; DOT_LANES];
    for (x, y) in ca.zip(cb) {
        for i in 0..DOT_LANES {
            acc[i] += x[i] * y[i];
        }
    }
    let mut s = ((acc[0] + acc[1]) + (acc[2] + acc[3])) + ((acc[4] + acc[5]) + (acc[6] + acc[7]));
    for (x, y) in ra.iter().zip(rb) {
        s += x * y;
    }
    s
}

/// Σ aᵢ², as [`dot`] of `a` with itself.
pub fn sum_of_squares(a: &[f64]) -> f64 {
    dot(a, a)
}

#[cfg(test)]
mod tests {
    use super::{dot, median};

    #[test]
    fn dot_equals_the_sum_of_products_at_every_remainder() {
        // Integers times powers of two: every partial sum is exact, so any order gives the
        // same value, which the definition gives too.
        for n in 0..40usize {
            let a: Vec<f64> = (0..n).map(|i| (i as f64 - 7.0) * 0.25).collect();
            let b: Vec<f64> = (0..n).map(|i| ((i * 5) % 11) as f64 * 0.5).collect();
            let want: f64 = a.iter().zip(&b).map(|(x, y)| x * y).sum();
            assert_eq!(dot(&a, &b), want, "n = {n}");
        }
        // Unequal lengths: the common part only.
        assert_eq!(dot(&[1.0, 2.0, 3.0], &[4.0, 5.0]), 14.0);
    }

    #[test]
    fn median_of_odd_and_even_counts() {
        // By definition: the middle value, or the mean of the two middle values.
        assert_eq!(median(&mut [3.0, 1.0, 2.0]), Some(2.0));
        assert_eq!(median(&mut [4.0, 1.0, 3.0, 2.0]), Some(2.5));
        assert_eq!(median(&mut []), None);
        // Against sorting: the same value for many orders and lengths (a fixed LCG's numbers).
        let mut state: u64 = 7;
        for n in 1..200 {
            let v: Vec<f64> = (0..n)
                .map(|_| {
                    state = state
                        .wrapping_mul(6_364_136_223_846_793_005)
                        .wrapping_add(1);
                    (state >> 11) as f64 / (1u64 << 53) as f64
                })
                .collect();
            let mut sorted = v.clone();
            sorted.sort_by(f64::total_cmp);
            let want = if n % 2 == 1 {
                sorted[n / 2]
            } else {
                0.5 * (sorted[n / 2 - 1] + sorted[n / 2])
            };
            assert_eq!(median(&mut v.clone()), Some(want));
        }
    }
}
