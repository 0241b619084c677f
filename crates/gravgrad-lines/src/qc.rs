//! Per-line quality metrics and a pass/fail verdict against the recipe's `[qc]` tolerances.
//!
//! Inputs are plain per-sample slices of one line on one time base: time (s), projected position (m),
//! gradient components in s⁻² (as the rotation stage delivers them), and optional QC series. Metrics
//! are reported in the units their names end in; gradients in Eötvös (E = 1e-9 s⁻²).
//!
//! A sample is usable for a component when its time, position and that component are finite. The line
//! is cut into runs of usable samples wherever the interval exceeds 1.5 times the nominal interval
//! (the median positive interval), as the ingest stage marks gaps. Per component:
//!
//! - residual RMS (E): RMS of value − along-track low-pass of value (the product filter, [`LowPass`]),
//!   computed run by run: the high-passed residual, noise plus any signal shorter than the cutoff;
//! - noise density (E/√Hz): square root of the Welch PSD ([`crate::spectrum`]; periodic Hann window,
//!   segments of `welch_segment_s` overlapping by half, straight line removed per segment) averaged
//!   over `noise_band_hz`; segments never straddle a gap;
//! - noise after filtering (E RMS): density·√B, B the noise bandwidth of the forward–backward
//!   low-pass at the temporal cutoff fc = v/λc for the line's median ground speed v
//!   ([`LowPass::noise_bandwidth`]): the white-noise RMS the filtered product keeps. This is the value
//!   held against `max_noise_e`;
//! - motion correlation (when the motion series are given): the component regressed on the
//!   aircraft's motion in the band where it lives ([`crate::motion`]): RMS of the motion part (E),
//!   its F statistic and p-value, the regressor that explains most. Held against `max_motion_e` and
//!   `motion_significance`: the line fails when the fit is significant AND its motion part exceeds
//!   the level;
//! - spikes: runs of consecutive samples whose residual lies more than `spike_threshold` robust
//!   standard deviations from the median residual, the robust standard deviation being 1.4826 × the
//!   median absolute deviation (Hampel 1974, "The influence curve and its role in robust estimation",
//!   J. Amer. Statist. Assoc. 69:383–393). Reported, not judged (the recipe has no tolerance for it).
//!
//! Per line: trace RMS (E, about zero: the trace of the gradient tensor is zero); RMS of the
//! difference between the angular acceleration from the pairs and from the gyros (rad/s², over the
//! axes where both are finite); turbulence (RMS vertical acceleration about zero, m/s²); clearance
//! departure (largest |clearance − planned clearance|, m); line deviation (largest distance from the
//! straight planned line through its start and end points, m); longest gap (the longest interval
//! between consecutive samples usable for every component, s — a line without missing data reports
//! its sample interval). A metric whose inputs are not given is `None` and is not judged.

use crate::error::{LinesError, check_finite, check_len, check_positive};
use crate::filter::{LowPass, along_track_distance, low_pass_along_track};
use crate::motion::{self, Design, MotionFit, MotionSeries, MotionSettings};
use crate::spectrum::welch;
use gravgrad_core::mat3::Vec3;
use gravgrad_core::stats::median;
use gravgrad_core::units::to_eotvos;

/// The recipe's `[qc]` tolerances.
#[derive(Clone, Debug, PartialEq)]
pub struct Tolerances {
    /// Largest cross-track deviation from the planned line, m.
    pub max_line_deviation_m: f64,
    /// Largest departure of clearance from the drape plan, m.
    pub clearance_tolerance_m: f64,
    /// Largest RMS vertical acceleration, m/s².
    pub max_turbulence_m_s2: f64,
    /// Largest noise after filtering, E RMS.
    pub max_noise_e: f64,
    /// Longest gap inside a line, s.
    pub max_gap_s: f64,
    /// Largest RMS of a component's motion part (the part the motion regressors explain in the
    /// motion band), E.
    pub max_motion_e: f64,
    /// Level of the motion-correlation F test: the fit counts as significant when its p-value is
    /// below this.
    pub motion_significance: f64,
}

impl Default for Tolerances {
    /// `max_motion_e` 0.5 E: a tenth of the default `max_noise_e`, and at 5 E/√Hz and 0.1–1 Hz about
    /// a tenth of the band's noise RMS (4.7 E), so a calibration error this size is still small beside
    /// the noise the line carries; a 0.1 % test level keeps false alarms rare over a survey of
    /// hundreds of lines and six components.
    fn default() -> Self {
        Self {
            max_line_deviation_m: 50.0,
            clearance_tolerance_m: 30.0,
            max_turbulence_m_s2: 1.0,
            max_noise_e: 5.0,
            max_gap_s: 2.0,
            max_motion_e: 0.5,
            motion_significance: 1e-3,
        }
    }
}

/// How the metrics are computed, and the tolerances they are judged against.
#[derive(Clone, Debug, PartialEq)]
pub struct QcSettings {
    pub tolerances: Tolerances,
    /// The product's along-track low-pass (recipe `filter.cutoff_wavelength_m`).
    pub low_pass: LowPass,
    /// Band over which the noise density is averaged, Hz (clipped to the Nyquist frequency).
    pub noise_band_hz: [f64; 2],
    /// Welch segment length, s.
    pub welch_segment_s: f64,
    /// Spike threshold in robust standard deviations.
    pub spike_threshold: f64,
    /// Band and filter of the motion-correlation test.
    pub motion: MotionSettings,
}

impl Default for QcSettings {
    /// 1–4 Hz for the noise band: at survey speeds (50–80 m/s) these are wavelengths of 12–80 m,
    /// where the field at a clearance of 60 m or more has decayed by e^(−2π·60/80) ≈ 0.009 or more.
    fn default() -> Self {
        Self {
            tolerances: Tolerances::default(),
            low_pass: LowPass::default(),
            noise_band_hz: [1.0, 4.0],
            welch_segment_s: 10.0,
            spike_threshold: 6.0,
            motion: MotionSettings::default(),
        }
    }
}

/// A gradient component of the line, s⁻².
#[derive(Clone, Copy, Debug)]
pub struct Component<'a> {
    pub name: &'a str,
    pub values: &'a [f64],
}

/// The straight line the pilot was to fly, projected metres.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PlannedLine {
    pub start_m: [f64; 2],
    pub end_m: [f64; 2],
}

/// One line's series, all on the time base `time_s`. Optional series are judged only when given.
#[derive(Clone, Debug, Default)]
pub struct LineInputs<'a> {
    pub time_s: &'a [f64],
    pub x_m: &'a [f64],
    pub y_m: &'a [f64],
    /// Gradient components, s⁻².
    pub components: Vec<Component<'a>>,
    /// Trace of the unconstrained solve, s⁻².
    pub trace: Option<&'a [f64]>,
    /// Angular acceleration from the pairs and from the gyros, rad/s² (NaN where not observed).
    pub alpha_pairs: Option<&'a [Vec3]>,
    pub alpha_gyro: Option<&'a [Vec3]>,
    /// Vertical acceleration of the aircraft, m/s².
    pub vertical_acceleration_m_s2: Option<&'a [f64]>,
    /// Clearance flown and clearance of the drape plan at each sample, m.
    pub clearance_m: Option<&'a [f64]>,
    pub planned_clearance_m: Option<&'a [f64]>,
    pub plan: Option<PlannedLine>,
    /// The aircraft's motion (sensor axes), for the motion-correlation test.
    pub motion: Option<MotionSeries<'a>>,
}

/// Noise and spike metrics of one component.
#[derive(Clone, Debug, PartialEq)]
pub struct ComponentMetrics {
    pub name: String,
    /// RMS of the high-passed residual, E.
    pub residual_rms_e: Option<f64>,
    /// Welch amplitude spectral density averaged over the noise band, E/√Hz.
    pub noise_density_e_rt_hz: Option<f64>,
    /// White-noise RMS left after the along-track low-pass, E.
    pub noise_after_filter_e: Option<f64>,
    pub spikes: usize,
    /// The motion-correlation test; `None` without motion series or when the line is too short
    /// for it.
    pub motion: Option<MotionFit>,
}

/// Every metric of one line.
#[derive(Clone, Debug, PartialEq)]
pub struct LineMetrics {
    pub samples: usize,
    pub duration_s: f64,
    /// Median ground speed, m/s.
    pub median_speed_m_s: f64,
    pub components: Vec<ComponentMetrics>,
    pub trace_rms_e: Option<f64>,
    pub alpha_difference_rms_rad_s2: Option<f64>,
    pub turbulence_m_s2: Option<f64>,
    pub clearance_departure_m: Option<f64>,
    pub line_deviation_m: Option<f64>,
    pub longest_gap_s: f64,
}

/// Pass or fail, with one plain sentence per failed check.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Verdict {
    pub pass: bool,
    pub reasons: Vec<String>,
}

fn rms(v: impl Iterator<Item = f64>) -> Option<f64> {
    let (s, n) = v
        .filter(|x| x.is_finite())
        .fold((0.0, 0usize), |(s, n), x| (s + x * x, n + 1));
    (n > 0).then(|| (s / n as f64).sqrt())
}

/// Runs of consecutive usable samples, as index ranges, cut where the interval exceeds 1.5·`dt`.
pub(crate) fn runs(usable: &[bool], time_s: &[f64], dt: f64) -> Vec<std::ops::Range<usize>> {
    let mut out = Vec::new();
    let mut start: Option<usize> = None;
    for i in 0..usable.len() {
        if !usable[i] {
            if let Some(s) = start.take() {
                out.push(s..i);
            }
            continue;
        }
        match start {
            None => start = Some(i),
            Some(s) if time_s[i] - time_s[i - 1] > 1.5 * dt => {
                out.push(s..i);
                start = Some(i);
            }
            Some(_) => {}
        }
    }
    if let Some(s) = start {
        out.push(s..usable.len());
    }
    out
}

fn check_settings(s: &QcSettings) -> Result<(), LinesError> {
    let t = &s.tolerances;
    check_positive("qc.max_line_deviation_m", t.max_line_deviation_m)?;
    check_positive("qc.clearance_tolerance_m", t.clearance_tolerance_m)?;
    check_positive("qc.max_turbulence_m_s2", t.max_turbulence_m_s2)?;
    check_positive("qc.max_noise_e", t.max_noise_e)?;
    check_positive("qc.max_gap_s", t.max_gap_s)?;
    check_positive("qc.max_motion_e", t.max_motion_e)?;
    if !(t.motion_significance > 0.0 && t.motion_significance < 1.0) {
        return Err(LinesError::Setting {
            name: "motion_significance".into(),
            value: t.motion_significance,
            why: "must lie strictly between 0 and 1".into(),
        });
    }
    motion::check_settings(&s.motion)?;
    check_positive("welch_segment_s", s.welch_segment_s)?;
    check_positive("spike_threshold", s.spike_threshold)?;
    let [lo, hi] = s.noise_band_hz;
    if !(lo >= 0.0 && hi > lo && hi.is_finite()) {
        return Err(LinesError::Setting {
            name: "noise_band_hz".into(),
            value: hi,
            why: format!("the band [{lo}, {hi}] Hz must satisfy 0 ≤ low < high"),
        });
    }
    Ok(())
}

/// Computes every metric of one line.
///
/// Errors: series of different lengths, fewer than 3 samples, time not strictly increasing where it
/// is finite, or a setting out of range.
pub fn line_metrics(inp: &LineInputs<'_>, s: &QcSettings) -> Result<LineMetrics, LinesError> {
    check_settings(s)?;
    let n = inp.time_s.len();
    check_inputs(inp, n)?;
    let timing = LineTiming::of(inp)?;
    let mut pass = ComponentPass::new(inp, s, &timing);
    let components = inp
        .components
        .iter()
        .map(|c| pass.metrics(c))
        .collect::<Result<Vec<_>, _>>()?;
    Ok(LineMetrics {
        samples: n,
        duration_s: timing.duration,
        median_speed_m_s: timing.median_speed,
        components,
        trace_rms_e: inp.trace.and_then(|t| rms(t.iter().map(|v| to_eotvos(*v)))),
        alpha_difference_rms_rad_s2: alpha_difference_rms(inp.alpha_pairs, inp.alpha_gyro),
        turbulence_m_s2: inp
            .vertical_acceleration_m_s2
            .and_then(|a| rms(a.iter().copied())),
        clearance_departure_m: clearance_departure(inp.clearance_m, inp.planned_clearance_m),
        line_deviation_m: line_deviation(inp, &timing.located_idx),
        longest_gap_s: longest_gap(inp, &timing),
    })
}

/// Checks that every series of `inp` has `n` samples, that there are at least 3, and that the
/// plan's ends are finite.
fn check_inputs(inp: &LineInputs<'_>, n: usize) -> Result<(), LinesError> {
    check_len("x", inp.x_m, n)?;
    check_len("y", inp.y_m, n)?;
    for c in &inp.components {
        check_len(c.name, c.values, n)?;
    }
    for (name, v) in [
        ("trace", inp.trace),
        ("vertical acceleration", inp.vertical_acceleration_m_s2),
        ("clearance", inp.clearance_m),
        ("planned clearance", inp.planned_clearance_m),
    ] {
        if let Some(v) = v {
            check_len(name, v, n)?;
        }
    }
    for (name, v) in [
        ("alpha from pairs", inp.alpha_pairs),
        ("alpha from gyros", inp.alpha_gyro),
    ] {
        if let Some(v) = v
            && v.len() != n
        {
            return Err(LinesError::Length {
                name: name.into(),
                got: v.len(),
                want: n,
            });
        }
    }
    if let Some(m) = &inp.motion {
        motion::check_motion_lengths(m, n)?;
    }
    if n < 3 {
        return Err(LinesError::TooShort {
            what: "line QC".into(),
            got: n,
            need: 3,
        });
    }
    if let Some(p) = inp.plan {
        check_finite(
            "plan",
            &[p.start_m[0], p.start_m[1], p.end_m[0], p.end_m[1]],
        )?;
    }
    Ok(())
}

/// Where and when a line was flown: the samples with finite time and position (map frame, m), and
/// what their time base gives.
struct LineTiming {
    /// Per sample, whether time and position are finite.
    located: Vec<bool>,
    /// The located samples' indices.
    located_idx: Vec<usize>,
    /// Median sample interval, s.
    dt: f64,
    /// Median ground speed, m/s.
    median_speed: f64,
    /// From the first located sample to the last, s.
    duration: f64,
}

impl LineTiming {
    /// The timing of `inp`'s line. Errors: time not strictly increasing over the located samples,
    /// or fewer than two of them.
    fn of(inp: &LineInputs<'_>) -> Result<Self, LinesError> {
        let n = inp.time_s.len();
        let located: Vec<bool> = (0..n)
            .map(|i| inp.time_s[i].is_finite() && inp.x_m[i].is_finite() && inp.y_m[i].is_finite())
            .collect();
        let located_idx: Vec<usize> = (0..n).filter(|&i| located[i]).collect();
        if let Some(w) = located_idx
            .windows(2)
            .find(|w| inp.time_s[w[1]] <= inp.time_s[w[0]])
        {
            return Err(LinesError::Setting {
                name: "time".into(),
                value: inp.time_s[w[1]],
                why: format!("time does not increase at sample {}", w[1]),
            });
        }
        let mut intervals: Vec<f64> = located_idx
            .windows(2)
            .map(|w| inp.time_s[w[1]] - inp.time_s[w[0]])
            .collect();
        let mut speeds: Vec<f64> = located_idx
            .windows(2)
            .map(|w| {
                let d = (inp.x_m[w[1]] - inp.x_m[w[0]]).hypot(inp.y_m[w[1]] - inp.y_m[w[0]]);
                d / (inp.time_s[w[1]] - inp.time_s[w[0]])
            })
            .collect();
        let Some(dt) = median(&mut intervals) else {
            return Err(LinesError::TooShort {
                what: "line QC (samples with finite time and position)".into(),
                got: located_idx.len(),
                need: 3,
            });
        };
        let median_speed = median(&mut speeds).unwrap_or(0.0);
        let duration = match (located_idx.first(), located_idx.last()) {
            (Some(&a), Some(&b)) => inp.time_s[b] - inp.time_s[a],
            _ => 0.0,
        };
        Ok(Self {
            located,
            located_idx,
            dt,
            median_speed,
            duration,
        })
    }
}

/// The per-component metrics of a line, one component after another: the spectral settings at
/// the line's rate, the samples where the motion is known, and the motion test's design, formed
/// once per set of usable samples (components observed together share it).
struct ComponentPass<'a> {
    inp: &'a LineInputs<'a>,
    s: &'a QcSettings,
    timing: &'a LineTiming,
    /// Sample rate, Hz.
    rate: f64,
    /// Welch segment, samples.
    segment: usize,
    /// Noise band, Hz, its top at most the Nyquist frequency.
    band: [f64; 2],
    /// The low-pass's cutoff in time at the median speed, Hz.
    fc: f64,
    /// Per sample, whether the line is located there and every motion series is finite.
    moving: Option<Vec<bool>>,
    /// The motion design last built, with the usable samples it was built for.
    design: Option<(Vec<bool>, Option<Design>)>,
}

impl<'a> ComponentPass<'a> {
    /// The pass over `inp`'s components with settings `s`.
    fn new(inp: &'a LineInputs<'a>, s: &'a QcSettings, timing: &'a LineTiming) -> Self {
        let n = inp.time_s.len();
        let rate = 1.0 / timing.dt;
        let located = &timing.located;
        let moving: Option<Vec<bool>> = inp.motion.as_ref().map(|m| {
            let series = [
                m.specific_force_m_s2,
                m.angular_rate_rad_s,
                m.angular_acceleration_rad_s2,
            ];
            (0..n)
                .map(|i| located[i] && series.iter().flatten().all(|v| v[i].is_finite()))
                .collect()
        });
        Self {
            inp,
            s,
            timing,
            rate,
            segment: (s.welch_segment_s * rate).round() as usize,
            band: [s.noise_band_hz[0], s.noise_band_hz[1].min(rate / 2.0)],
            fc: timing.median_speed / s.low_pass.cutoff_wavelength_m,
            moving,
            design: None,
        }
    }

    /// Component `c`'s metrics: the RMS (E) of its residual from the along-track low-pass over each
    /// run of usable samples, its Welch noise density in the band (E/√Hz) and what the low-pass
    /// leaves of it (E), its spikes, and the motion-correlation test.
    fn metrics(&mut self, c: &Component<'_>) -> Result<ComponentMetrics, LinesError> {
        let (inp, s, band) = (self.inp, self.s, self.band);
        let n = inp.time_s.len();
        let usable: Vec<bool> = (0..n)
            .map(|i| self.timing.located[i] && c.values[i].is_finite())
            .collect();
        let pieces = runs(&usable, inp.time_s, self.timing.dt);
        let mut residual = Vec::new();
        let mut stretches: Vec<Vec<f64>> = Vec::new();
        for r in &pieces {
            let v: Vec<f64> = c.values[r.clone()].iter().map(|v| to_eotvos(*v)).collect();
            let dist = along_track_distance(&inp.x_m[r.clone()], &inp.y_m[r.clone()]);
            if let Ok(low) = low_pass_along_track(&dist, &v, &s.low_pass) {
                residual.extend(v.iter().zip(&low).map(|(a, b)| a - b));
            }
            stretches.push(v);
        }
        let views: Vec<&[f64]> = stretches.iter().map(Vec::as_slice).collect();
        let density = if band[1] > band[0] {
            welch(&views, self.rate, self.segment).band_density(band[0], band[1])
        } else {
            None
        };
        let spikes = count_spikes(&residual, s.spike_threshold);
        let motion = self.motion_fit(c, &usable)?;
        let fc = self.fc;
        Ok(ComponentMetrics {
            name: c.name.to_string(),
            residual_rms_e: rms(residual.iter().copied()),
            noise_density_e_rt_hz: density,
            noise_after_filter_e: density
                .filter(|_| fc > 0.0)
                .map(|rho| rho * s.low_pass.noise_bandwidth(fc).sqrt()),
            spikes,
            motion,
        })
    }

    /// The motion-correlation test of component `c` over the samples where it is `usable` and the
    /// motion is known; the design rebuilt only when those samples differ from the last
    /// component's. `None` without motion series or when the line is too short for it.
    fn motion_fit(
        &mut self,
        c: &Component<'_>,
        usable: &[bool],
    ) -> Result<Option<MotionFit>, LinesError> {
        let (Some(m), Some(moving)) = (&self.inp.motion, &self.moving) else {
            return Ok(None);
        };
        let n = self.inp.time_s.len();
        let use_: Vec<bool> = (0..n).map(|i| moving[i] && usable[i]).collect();
        if self.design.as_ref().is_none_or(|(u, _)| *u != use_) {
            let d = Design::build(self.inp.time_s, self.timing.dt, &use_, m, &self.s.motion)?;
            self.design = Some((use_, d));
        }
        match &self.design {
            Some((_, Some(d))) => d.fit(c.values),
            _ => Ok(None),
        }
    }
}

/// The longest gap, s, over the samples usable for every component, counting a stretch at either
/// end of the located samples that no usable sample reaches (the line's duration when none is
/// usable).
fn longest_gap(inp: &LineInputs<'_>, timing: &LineTiming) -> f64 {
    let n = inp.time_s.len();
    let (located, located_idx) = (&timing.located, &timing.located_idx);
    let all_usable: Vec<usize> = (0..n)
        .filter(|&i| located[i] && inp.components.iter().all(|c| c.values[i].is_finite()))
        .collect();
    let longest_gap_s = all_usable
        .windows(2)
        .map(|w| inp.time_s[w[1]] - inp.time_s[w[0]])
        .fold(0.0, f64::max);
    let edge_gap = match (all_usable.first(), all_usable.last()) {
        (Some(&a), Some(&b)) => (inp.time_s[a] - inp.time_s[located_idx[0]])
            .max(inp.time_s[located_idx[located_idx.len() - 1]] - inp.time_s[b]),
        _ => timing.duration,
    };
    longest_gap_s.max(edge_gap)
}

/// RMS over the samples of the difference between α from the pairs and from the gyros (sensor
/// axes, rad/s²), each sample's mean square over its finite axes; `None` without both or without
/// a finite difference.
fn alpha_difference_rms(pairs: Option<&[Vec3]>, gyro: Option<&[Vec3]>) -> Option<f64> {
    let (p, g) = pairs.zip(gyro)?;
    let (sum, count) = p.iter().zip(g).fold((0.0, 0usize), |(s, c), (a, b)| {
        let d: Vec<f64> = (0..3)
            .map(|k| a[k] - b[k])
            .filter(|d| d.is_finite())
            .collect();
        if d.is_empty() {
            (s, c)
        } else {
            (s + d.iter().map(|x| x * x).sum::<f64>(), c + 1)
        }
    });
    (count > 0).then(|| (sum / count as f64).sqrt())
}

/// The largest departure of the clearance flown from the planned one, m, over finite samples;
/// `None` without both.
fn clearance_departure(flown: Option<&[f64]>, planned: Option<&[f64]>) -> Option<f64> {
    let (c, p) = flown.zip(planned)?;
    c.iter()
        .zip(p)
        .map(|(a, b)| (a - b).abs())
        .filter(|d| d.is_finite())
        .reduce(f64::max)
}

/// The largest distance of a located sample from the planned line (map frame, m; from its start
/// when the plan has no length); `None` without a plan.
fn line_deviation(inp: &LineInputs<'_>, located_idx: &[usize]) -> Option<f64> {
    let p = inp.plan?;
    let (ax, ay) = (p.start_m[0], p.start_m[1]);
    let (ux, uy) = (p.end_m[0] - ax, p.end_m[1] - ay);
    let len = ux.hypot(uy);
    located_idx
        .iter()
        .map(|&i| {
            let (dx, dy) = (inp.x_m[i] - ax, inp.y_m[i] - ay);
            if len > 0.0 {
                (dx * uy - dy * ux).abs() / len
            } else {
                dx.hypot(dy)
            }
        })
        .reduce(f64::max)
}

/// Number of spikes in `residual`: runs of samples beyond `k` robust standard deviations.
fn count_spikes(residual: &[f64], k: f64) -> usize {
    let mut r = residual.to_vec();
    let Some(med) = median(&mut r) else {
        return 0;
    };
    let mut dev: Vec<f64> = residual.iter().map(|v| (v - med).abs()).collect();
    let mad = median(&mut dev).unwrap_or(0.0);
    let limit = k * 1.4826 * mad;
    let mut count = 0;
    let mut inside = false;
    for v in residual {
        let out = (v - med).abs() > limit && (v - med).abs() > 0.0;
        if out && !inside {
            count += 1;
        }
        inside = out;
    }
    count
}

/// Judges the metrics against the tolerances.
pub fn verdict(m: &LineMetrics, t: &Tolerances) -> Verdict {
    let mut reasons = Vec::new();
    if let Some(d) = m.line_deviation_m
        && d > t.max_line_deviation_m
    {
        reasons.push(format!(
            "line deviation {d:.1} m from the planned line exceeds {:.1} m",
            t.max_line_deviation_m
        ));
    }
    if let Some(d) = m.clearance_departure_m
        && d > t.clearance_tolerance_m
    {
        reasons.push(format!(
            "clearance departs {d:.1} m from the drape plan, more than {:.1} m",
            t.clearance_tolerance_m
        ));
    }
    if let Some(a) = m.turbulence_m_s2
        && a > t.max_turbulence_m_s2
    {
        reasons.push(format!(
            "turbulence {a:.2} m/s² RMS exceeds {:.2}",
            t.max_turbulence_m_s2
        ));
    }
    for c in &m.components {
        match c.noise_after_filter_e {
            Some(e) if e > t.max_noise_e => reasons.push(format!(
                "noise {} {e:.2} E RMS after filtering exceeds {:.2} E",
                c.name, t.max_noise_e
            )),
            Some(_) => {}
            None => reasons.push(format!(
                "noise {} could not be estimated (no Welch segment without a gap, or no ground speed)",
                c.name
            )),
        }
    }
    for c in &m.components {
        if let Some(f) = &c.motion
            && f.p_value < t.motion_significance
            && f.motion_rms_e > t.max_motion_e
        {
            reasons.push(motion_reason(&c.name, f, t));
        }
    }
    if m.longest_gap_s > t.max_gap_s {
        reasons.push(format!(
            "longest gap {:.2} s exceeds {:.2} s",
            m.longest_gap_s, t.max_gap_s
        ));
    }
    Verdict {
        pass: reasons.is_empty(),
        reasons,
    }
}

/// The reason a component fails the motion-correlation test, e.g. "motion correlation Gzz:
/// 3.21 ± 0.35 E RMS fitted to the aircraft's motion in 0.1–1 Hz exceeds 0.50 E (F = 41.2 on 15 and
/// 160.2 degrees of freedom, p = 2.1e-40 < 0.001); most from fz (|t| = 24.0)".
pub fn motion_reason(component: &str, f: &MotionFit, t: &Tolerances) -> String {
    let most = f
        .strongest()
        .map(|r| format!("; most from {} (|t| = {:.1})", r.name, r.t.abs()))
        .unwrap_or_default();
    format!(
        "motion correlation {component}: {:.2} ± {:.2} E RMS fitted to the aircraft's motion in {}–{} Hz exceeds {:.2} E (F = {:.1} on {:.0} and {:.1} degrees of freedom, p = {:.1e} < {}){most}",
        f.motion_rms_e,
        f.motion_rms_se_e,
        f.band_hz[0],
        f.band_hz[1],
        t.max_motion_e,
        f.f_statistic,
        f.dof[0],
        f.dof[1],
        f.p_value,
        t.motion_significance
    )
}

/// Metrics and verdict of one line.
pub fn assess_line(
    inp: &LineInputs<'_>,
    s: &QcSettings,
) -> Result<(LineMetrics, Verdict), LinesError> {
    let m = line_metrics(inp, s)?;
    let v = verdict(&m, &s.tolerances);
    Ok((m, v))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn spikes_are_counted_once_per_run() {
        // A unit sinusoid has median ≈ 0 and median absolute deviation sin(π/4) ≈ 0.707 (half the
        // phases have |sin| above it), so the limit is 6·1.4826·0.707 ≈ 6.3: the sinusoid stays
        // inside, 10 and −12 lie beyond, and the two adjacent −12 count once.
        let mut r: Vec<f64> = (0..400).map(|i| (0.37 * i as f64).sin()).collect();
        r[50] = 10.0;
        r[120] = -12.0;
        r[121] = -12.0;
        assert_eq!(count_spikes(&r, 6.0), 2);
        assert_eq!(count_spikes(&r[200..], 6.0), 0);
    }

    #[test]
    fn runs_split_at_gaps_and_unusable_samples() {
        let t = [0.0, 0.1, 0.2, 0.3, 1.0, 1.1, 1.2, 1.3];
        let ok = [true, true, false, true, true, true, true, true];
        assert_eq!(runs(&ok, &t, 0.1), vec![0..2, 3..4, 4..8]);
    }
}
