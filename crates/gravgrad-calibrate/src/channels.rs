//! Optional regressor channels (sensor temperature, the aircraft's attitude relative to the
//! platform) screened before any fit: a channel that is constant over the lines carries no
//! information (a thermostatted sensor logging its set-point), and a channel with empty or
//! not-a-number cells would turn every coefficient, and so every tensor value, into NaN. Where the
//! limits allow, short runs of bad cells are bridged by linear interpolation between the good cells
//! either side; a channel with longer runs, or too many bad cells, is dropped with its reason, and
//! its term with it. The temperature is never bridged: its term is collinear with the drift's (both
//! slow), so whether it is kept decides how the two share the instrument's slow error, and a log
//! that lost cells is not trusted to decide that; the run is then the run without the column.
//!
//! Units are the channel's own (°C, rad); times in s.

use std::borrow::Cow;

/// What to do with a channel.
#[derive(Clone, Debug, PartialEq)]
pub enum Screened<'a> {
    /// Use the channel (bridged where it had short runs of bad cells); the note says what was
    /// bridged, if anything.
    Use(Cow<'a, [f64]>, Option<String>),
    /// Drop the channel and its term, for the reason given.
    Drop(String),
}

/// Limits of the screening.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ScreenLimits {
    /// Longest run of empty or NaN cells bridged, s.
    pub max_bridge_s: f64,
    /// Largest share of bad cells bridged (0–1).
    pub max_bad_fraction: f64,
    /// Standard deviation over the lines below which the channel counts as constant, in the
    /// channel's unit.
    pub min_std: f64,
}

impl ScreenLimits {
    /// For the sensor temperature, °C: no cell bridged (one empty or NaN cell drops the term);
    /// constant below 1 mK (a logged set-point, or a sensor that does not resolve the changes).
    pub const TEMPERATURE: Self = Self {
        max_bridge_s: 0.0,
        max_bad_fraction: 0.0,
        min_std: 1e-3,
    };
    /// For relative attitude, rad: runs up to 0.5 s bridged (attitude moves within seconds),
    /// constant below 1 µrad.
    pub const ATTITUDE: Self = Self {
        max_bridge_s: 0.5,
        max_bad_fraction: 0.01,
        min_std: 1e-6,
    };
}

/// Screens channel `name` (samples `x` at `rate_hz`) for use as a regressor over the `usable`
/// samples (all when `None`).
pub fn screen<'a>(
    name: &str,
    x: &'a [f64],
    usable: Option<&[bool]>,
    rate_hz: f64,
    limits: ScreenLimits,
) -> Screened<'a> {
    let n = x.len();
    let bad: Vec<usize> = (0..n).filter(|&i| !x[i].is_finite()).collect();
    let mut longest = 0usize;
    let mut run = 0usize;
    for v in x {
        if v.is_finite() {
            run = 0;
        } else {
            run += 1;
            longest = longest.max(run);
        }
    }
    let longest_s = longest as f64 / rate_hz;
    if bad.len() == n {
        return Screened::Drop(format!("`{name}` has no finite value: its term is dropped"));
    }
    if !bad.is_empty() && limits.max_bridge_s <= 0.0 {
        return Screened::Drop(format!(
            "`{name}` has {} empty or not-a-number cells (first at row {}, longest run {:.1} s): \
             its term is dropped and the flight is processed as without the column (fill the \
             cells to use it)",
            bad.len(),
            bad[0],
            longest_s
        ));
    }
    if !bad.is_empty()
        && (longest_s > limits.max_bridge_s
            || bad.len() as f64 > limits.max_bad_fraction * n as f64)
    {
        return Screened::Drop(format!(
            "`{name}` has {} empty or not-a-number cells (first at row {}, longest run {:.1} s; \
             at most {:.1} s and {:.0} % are bridged): its term is dropped",
            bad.len(),
            bad[0],
            longest_s,
            limits.max_bridge_s,
            100.0 * limits.max_bad_fraction
        ));
    }
    let series: Cow<'a, [f64]> = if bad.is_empty() {
        Cow::Borrowed(x)
    } else {
        Cow::Owned(bridge(x))
    };
    // Variability over the samples the fit uses.
    let (mut m, mut count) = (0.0, 0usize);
    for (i, v) in series.iter().enumerate() {
        if usable.is_none_or(|u| u[i]) {
            m += v;
            count += 1;
        }
    }
    if count < 2 {
        return Screened::Drop(format!(
            "`{name}` has fewer than two samples on the lines: its term is dropped"
        ));
    }
    m /= count as f64;
    let var = series
        .iter()
        .enumerate()
        .filter(|(i, _)| usable.is_none_or(|u| u[*i]))
        .map(|(_, v)| (v - m) * (v - m))
        .sum::<f64>()
        / count as f64;
    if var.sqrt() < limits.min_std {
        return Screened::Drop(format!(
            "`{name}` is constant over the lines (standard deviation {:.2e}, at least {:.0e} \
             needed): its term is dropped",
            var.sqrt(),
            limits.min_std
        ));
    }
    let note = (!bad.is_empty()).then(|| {
        format!(
            "`{name}`: {} empty or not-a-number cells bridged by linear interpolation (first at \
             row {}, longest run {:.2} s)",
            bad.len(),
            bad[0],
            longest_s
        )
    });
    Screened::Use(series, note)
}

/// `x` with every run of non-finite cells replaced by the straight line between the finite cells
/// either side (the nearest finite cell at either end). `x` must hold at least one finite cell.
fn bridge(x: &[f64]) -> Vec<f64> {
    let n = x.len();
    let mut out = x.to_vec();
    let mut i = 0;
    while i < n {
        if x[i].is_finite() {
            i += 1;
            continue;
        }
        let start = i;
        while i < n && !x[i].is_finite() {
            i += 1;
        }
        let before = start.checked_sub(1).map(|j| (j, x[j]));
        let after = (i < n).then(|| (i, x[i]));
        for (k, o) in out.iter_mut().enumerate().take(i).skip(start) {
            *o = match (before, after) {
                (Some((j0, v0)), Some((j1, v1))) => {
                    v0 + (v1 - v0) * (k - j0) as f64 / (j1 - j0) as f64
                }
                (Some((_, v)), None) | (None, Some((_, v))) => v,
                (None, None) => 0.0,
            };
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn a_constant_channel_is_dropped_with_its_reason() {
        let x = vec![31.0; 1000];
        match screen("temp", &x, None, 10.0, ScreenLimits::TEMPERATURE) {
            Screened::Drop(why) => assert!(why.contains("constant"), "{why}"),
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn short_holes_are_bridged_on_the_straight_line() {
        // A ramp 0.01 °C per sample with three holes; the bridged values are the ramp's own
        // (linear interpolation of a line is exact).
        let mut x: Vec<f64> = (0..500).map(|i| 20.0 + 0.01 * i as f64).collect();
        x[0] = f64::NAN;
        x[100] = f64::NAN;
        for v in &mut x[200..210] {
            *v = f64::NAN;
        }
        let limits = ScreenLimits {
            max_bridge_s: 5.0,
            max_bad_fraction: 0.05,
            min_std: 1e-3,
        };
        match screen("temp", &x, None, 10.0, limits) {
            Screened::Use(s, Some(note)) => {
                assert!(note.contains("12 empty"), "{note}");
                assert_abs_diff_eq!(s[100], 21.0, epsilon = 1e-12);
                assert_abs_diff_eq!(s[205], 22.05, epsilon = 1e-12);
                // The first cell takes its neighbour's value.
                assert_abs_diff_eq!(s[0], 20.01, epsilon = 1e-12);
            }
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn long_runs_of_holes_drop_the_channel() {
        let mut x: Vec<f64> = (0..2000).map(|i| (i as f64 * 0.01).sin()).collect();
        for v in &mut x[500..600] {
            *v = f64::NAN;
        }
        // 100 samples at 10 Hz: a 10 s run, above the 5 s limit.
        let limits = ScreenLimits {
            max_bridge_s: 5.0,
            max_bad_fraction: 0.05,
            min_std: 1e-3,
        };
        match screen("temp", &x, None, 10.0, limits) {
            Screened::Drop(why) => assert!(why.contains("10.0 s"), "{why}"),
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn constant_on_the_lines_but_varying_in_turns_is_dropped() {
        let x: Vec<f64> = (0..100)
            .map(|i| if i < 50 { 1.0 } else { i as f64 })
            .collect();
        let usable: Vec<bool> = (0..100).map(|i| i < 50).collect();
        assert!(matches!(
            screen("ac_roll", &x, Some(&usable), 10.0, ScreenLimits::ATTITUDE),
            Screened::Drop(_)
        ));
    }

    #[test]
    fn one_hole_in_the_temperature_drops_its_term() {
        let mut x: Vec<f64> = (0..500).map(|i| 20.0 + 0.01 * i as f64).collect();
        x[321] = f64::NAN;
        match screen("temp", &x, None, 10.0, ScreenLimits::TEMPERATURE) {
            Screened::Drop(why) => assert!(why.contains("row 321"), "{why}"),
            other => panic!("{other:?}"),
        }
    }
}
