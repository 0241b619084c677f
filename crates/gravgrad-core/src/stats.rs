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

#[cfg(test)]
mod tests {
    use super::median;

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
