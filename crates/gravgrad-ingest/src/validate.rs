//! Validation of a flight's values and time base (`docs/formats.md`, layout 1 rules), with the
//! sample-rate estimate and gap detection.

use crate::layout::{self, Quantity};
use crate::read::Flight;
use crate::sink::Sink;
use gravgrad_core::{Location, Problem};
use rayon::prelude::*;
use serde::Serialize;

/// Settings of the time-base checks.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TimeRules {
    /// Nominal sample rate (Hz) from the instrument file; `None`: estimate it from the log.
    pub sample_rate_hz: Option<f64>,
    /// Allowed deviation of one sample interval from the nominal, relative (default 1%); never
    /// tighter than 1e-6 s, the resolution of float64 GPS seconds near 1.4e9.
    pub jitter_tolerance: f64,
    /// An interval longer than this many nominal intervals is a gap, not jitter (default 1.5).
    pub gap_factor: f64,
}

impl Default for TimeRules {
    fn default() -> Self {
        Self {
            sample_rate_hz: None,
            jitter_tolerance: 0.01,
            gap_factor: 1.5,
        }
    }
}

/// The smallest interval tolerance, s: float64 GPS seconds near 1.4e9 resolve about 2.4e-7 s.
pub const MIN_JITTER_TOLERANCE_S: f64 = 1e-6;

/// Missing samples between two rows.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Gap {
    /// Table index of the first row after the gap.
    pub index: usize,
    /// Row number of that row in the file.
    pub row: u64,
    /// GPS time of the last sample before the gap, s.
    pub start_s: f64,
    /// Length of the gap (time between the two samples around it), s.
    pub length_s: f64,
    /// Number of samples missing at the nominal rate.
    pub missing_samples: u64,
}

/// The time base of a flight.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct TimeBase {
    /// The sample rate the checks used, Hz (instrument file, else the estimate).
    pub rate_hz: f64,
    /// The rate estimated from the median sample interval, Hz.
    pub estimated_rate_hz: f64,
    pub start_s: f64,
    pub end_s: f64,
    pub gaps: Vec<Gap>,
}

impl TimeBase {
    pub fn duration_s(&self) -> f64 {
        self.end_s - self.start_s
    }
}

/// The plausibility class of a flight column, by name.
pub fn quantity_of(name: &str, pairs: &[String]) -> Option<Quantity> {
    if let Some(d) = layout::column_def(name) {
        return Some(d.quantity);
    }
    let id = name
        .strip_suffix("_a")
        .or_else(|| name.strip_suffix("_b"))?;
    pairs
        .iter()
        .any(|p| p == id)
        .then_some(Quantity::Acceleration)
}

/// Checks every value of every column: missing values in required columns, infinities, values
/// outside the plausible range of their quantity.
pub fn check_values(flight: &Flight) -> Vec<Problem> {
    let table = &flight.table;
    let sinks: Vec<Sink> = flight
        .plan
        .slots
        .par_iter()
        .filter(|s| !s.is_line())
        .filter_map(|slot| {
            let values = table.get(&slot.name)?;
            let q = quantity_of(&slot.name, &flight.plan.pairs)?;
            let (lo, hi) = q.range();
            let mut sink = Sink::new();
            let name = slot.name.as_str();
            // Fast path: a branch-free pass per block (vectorises); look closer only where a
            // block holds a value out of range (NaN fails both comparisons).
            let in_range = |c: &[f64]| c.iter().fold(true, |ok, &v| ok & (v >= lo) & (v <= hi));
            if values.chunks(4096).all(in_range) {
                return Some(sink);
            }
            for (i, &v) in values.iter().enumerate() {
                if v >= lo && v <= hi {
                    continue;
                }
                if v.is_nan() {
                    if slot.required {
                        sink.add("nan", name, i as u64, || {
                            Problem::error(
                                Location::default().with_column(name),
                                "missing value (empty, null or NaN) in a required column",
                            )
                        });
                    }
                } else if v.is_infinite() {
                    sink.add("inf", name, i as u64, || {
                        Problem::error(Location::default().with_column(name), "infinite value")
                    });
                } else {
                    sink.add("range", name, i as u64, || {
                        Problem::error(
                            Location::default().with_column(name),
                            format!(
                                "value {} is outside the plausible range {lo} to {hi} {}",
                                show(v),
                                q.unit()
                            ),
                        )
                        .with_hint(range_hint(q))
                    });
                }
            }
            Some(sink)
        })
        .collect();
    let mut all = Sink::new();
    for s in sinks {
        all.merge_shifted(s, 0);
    }
    all.into_problems(&flight.source, flight.first_row)
}

/// A value as the user would write it: plain for ordinary magnitudes, exponent form otherwise.
fn show(v: f64) -> String {
    if v != 0.0 && !(1e-4..1e7).contains(&v.abs()) {
        format!("{v:e}")
    } else {
        format!("{v}")
    }
}

fn range_hint(q: Quantity) -> &'static str {
    match q {
        Quantity::Latitude | Quantity::Longitude => {
            "positions are geodetic degrees; check the column order or the map in [input.columns]"
        }
        Quantity::Angle => {
            "attitude angles are degrees; map a scale in [input.columns] if the logger writes radians"
        }
        Quantity::Rate => {
            "angular rates are rad/s; map a scale in [input.columns] if the logger writes deg/s"
        }
        Quantity::Acceleration => {
            "accelerations are m/s²; map a scale in [input.columns] if the logger writes g or mGal"
        }
        _ => "check the logger's units and the map in [input.columns]",
    }
}

/// Checks the time column (strictly increasing, regular within tolerance), estimates the sample
/// rate, and finds gaps. Returns `None` for the time base when time is unusable.
pub fn check_time(flight: &Flight, rules: &TimeRules) -> (Option<TimeBase>, Vec<Problem>) {
    let Some(t) = flight.table.get("time") else {
        return (None, vec![]);
    };
    let mut sink = Sink::new();
    let n = t.len();
    if n < 2 || t.iter().any(|v| !v.is_finite()) {
        return (None, vec![]); // reported by check_values (or a single row: nothing to check)
    }
    let mut dts: Vec<f64> = t
        .windows(2)
        .map(|w| w[1] - w[0])
        .filter(|d| *d > 0.0)
        .collect();
    // Median interval first (robust to gaps and glitches), then the mean of the intervals near it:
    // over contiguous samples the rounding of float64 GPS seconds (≈2.4e-7 s near 1.4e9) cancels in
    // the sum, so the estimate is good to about 2.4e-7 s over the whole span rather than per sample.
    let estimated = if dts.is_empty() {
        f64::NAN
    } else {
        let mid = dts.len() / 2;
        let (_, m, _) = dts.select_nth_unstable_by(mid, f64::total_cmp);
        let median = *m;
        let (sum, count) = t
            .windows(2)
            .map(|w| w[1] - w[0])
            .filter(|d| *d > 0.5 * median && *d < 1.5 * median)
            .fold((0.0, 0usize), |(s, c), d| (s + d, c + 1));
        if count > 0 {
            count as f64 / sum
        } else {
            1.0 / median
        }
    };
    let mut problems = Vec::new();
    let rate = match rules.sample_rate_hz {
        Some(r) => {
            if estimated.is_finite() && ((estimated - r) / r).abs() > 0.01 {
                problems.push(
                    Problem::error(
                        flight.source.clone().with_column("time"),
                        format!(
                            "the log runs at {estimated:.4} Hz but the instrument file says {r} Hz"
                        ),
                    )
                    .with_hint(
                        "correct `sample_rate_hz` in the instrument file, or check the logger",
                    ),
                );
            }
            r
        }
        None => estimated,
    };
    if !rate.is_finite() || rate <= 0.0 {
        sink.add("repeat", "time", 1, || {
            Problem::error(
                Location::default().with_column("time"),
                "time never increases",
            )
        });
        return (None, sink.into_problems(&flight.source, flight.first_row));
    }
    let nominal = 1.0 / rate;
    let tol = (rules.jitter_tolerance * nominal).max(MIN_JITTER_TOLERANCE_S);
    let mut gaps = Vec::new();
    for i in 1..n {
        let dt = t[i] - t[i - 1];
        if dt < 0.0 {
            sink.add("backwards", "time", i as u64, || {
                Problem::error(
                    Location::default().with_column("time"),
                    format!(
                        "time goes backwards by {:.6} s (from {} to {})",
                        -dt,
                        t[i - 1],
                        t[i]
                    ),
                )
                .with_hint("rows must be in time order; sort the log or remove the overlap")
            });
        } else if dt == 0.0 {
            sink.add("repeat", "time", i as u64, || {
                Problem::error(
                    Location::default().with_column("time"),
                    format!("time {} repeats the previous row's", t[i]),
                )
                .with_hint("remove the duplicated sample")
            });
        } else if dt > rules.gap_factor * nominal {
            let missing = ((dt / nominal).round() as u64).saturating_sub(1).max(1);
            gaps.push(Gap {
                index: i,
                row: i as u64 + flight.first_row,
                start_s: t[i - 1],
                length_s: dt,
                missing_samples: missing,
            });
        } else if (dt - nominal).abs() > tol {
            sink.add("jitter", "time", i as u64, || {
                Problem::error(
                    Location::default().with_column("time"),
                    format!("sample interval {dt:.6} s differs from the nominal {nominal:.6} s by more than {tol:.2e} s"),
                )
                .with_hint("the log must be sampled regularly; the tolerance is `input.jitter_tolerance` (relative)")
            });
        }
    }
    problems.extend(sink.into_problems(&flight.source, flight.first_row));
    let tb = TimeBase {
        rate_hz: rate,
        estimated_rate_hz: estimated,
        start_s: t[0],
        end_s: t[n - 1],
        gaps,
    };
    (Some(tb), problems)
}
