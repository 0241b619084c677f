//! How a survey plan is split into flights: the survey lines in flying order into `plan.flights`
//! consecutive groups (the earlier flights take one more line when they do not divide evenly), the
//! tie lines flown at the end of the last flight, and the path cut in the middle of the transit
//! between the last line of one flight and the first of the next. Each flight is then its own log.

use crate::scenario::Plan;
use std::ops::Range;

/// Random streams reserved per flight: flight k draws stream `x + k × STREAMS_PER_FLIGHT` where a
/// single-flight survey draws stream `x` (every stream used is below it).
pub const STREAMS_PER_FLIGHT: u64 = 1000;

/// The line numbers of each flight, in flying order.
pub fn leg_groups(plan: &Plan) -> Vec<Vec<i64>> {
    let flights = plan.flights.clamp(1, plan.lines.max(1));
    let (base, extra) = (plan.lines / flights, plan.lines % flights);
    let mut groups = Vec::with_capacity(flights);
    let mut next = 0usize;
    for k in 0..flights {
        let size = base + usize::from(k < extra);
        groups.push(
            (next..next + size)
                .map(|j| plan.first_line + j as i64)
                .collect::<Vec<i64>>(),
        );
        next += size;
    }
    if let Some(last) = groups.last_mut() {
        last.extend((0..plan.ties).map(|j| plan.first_tie + j as i64));
    }
    groups
}

/// The sample range of each flight along the path whose line number per sample is `line`: cuts in
/// the middle of the transit between consecutive flights; the first flight starts at the first
/// sample, the last ends at the last.
pub fn ranges(line: &[i64], groups: &[Vec<i64>]) -> Vec<Range<usize>> {
    let n = line.len();
    let mut cuts = vec![0usize];
    for pair in groups.windows(2) {
        let last_of = pair[0].last().copied();
        let first_of = pair[1].first().copied();
        let end = last_of.and_then(|l| line.iter().rposition(|x| *x == l));
        let start = first_of.and_then(|l| line.iter().position(|x| *x == l));
        let cut = match (end, start) {
            (Some(e), Some(s)) if s > e => (e + 1 + s) / 2,
            _ => *cuts.last().unwrap_or(&0),
        };
        cuts.push(cut.max(*cuts.last().unwrap_or(&0)));
    }
    cuts.push(n);
    cuts.windows(2).map(|w| w[0]..w[1]).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lines_split_in_flying_order_with_the_ties_last() {
        let plan = Plan {
            lines: 5,
            ties: 2,
            flights: 2,
            ..Plan::default()
        };
        assert_eq!(
            leg_groups(&plan),
            vec![vec![101, 102, 103], vec![104, 105, 9001, 9002]]
        );
        let one = Plan::default();
        assert_eq!(leg_groups(&one), vec![vec![101, 102, 103, 104, 9001]]);
    }

    #[test]
    fn cuts_fall_in_the_middle_of_the_transit() {
        let line = [0, 101, 101, 0, 0, 0, 0, 102, 102, 0];
        let r = ranges(&line, &[vec![101], vec![102]]);
        assert_eq!(r, vec![0..5, 5..10]);
        assert_eq!(ranges(&line, &[vec![101, 102]]), vec![0..10]);
    }
}
