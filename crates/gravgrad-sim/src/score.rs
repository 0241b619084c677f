//! Scoring a run against the truth of the survey it processed: RMS error per tensor component along
//! the lines, raw and after the same along-track low-pass, beside the white-noise floor the
//! scenario implies after that filter.
//!
//! Units: Eötvös throughout (the files' unit). Frame: NED with true north, as in `lines.parquet`
//! and the truth tables.

use crate::scenario::Scenario;
use crate::simulate::standard_pair;
use gravgrad_core::pairs::{AlphaSource, PairGeometry, observability, pseudo_inverse};
use gravgrad_lines::filter::{LowPass, along_track_distance, low_pass_along_track};
use serde::Serialize;

/// The line samples of a run and of its truth, row for row (same samples in the same order).
pub struct Series<'a> {
    pub time: &'a [f64],
    pub line: &'a [i64],
    pub easting: &'a [f64],
    pub northing: &'a [f64],
    /// Per component (gxx … gzz), the run's values, E.
    pub run: [&'a [f64]; 6],
    /// Per component, the truth, E.
    pub truth: [&'a [f64]; 6],
}

/// One component's score.
#[derive(Clone, Debug, Serialize)]
pub struct ComponentScore {
    pub component: String,
    /// Mean error over the line samples, E (the level a gradiometer cannot know: its bias fit
    /// absorbs the survey-mean geology; levelling sets it).
    pub mean_error_e: f64,
    /// RMS error about that mean, E.
    pub rms_error_e: f64,
    /// RMS error about the mean after the along-track low-pass, E.
    pub filtered_rms_error_e: f64,
    /// The same with each line's own mean error taken out first, E: what is left for levelling
    /// (a constant per line) does not count.
    pub filtered_line_rms_error_e: f64,
    /// White-noise floor of this component after the same low-pass, E.
    pub filtered_noise_floor_e: f64,
}

/// The score of one stage.
#[derive(Clone, Debug, Serialize)]
pub struct StageScore {
    pub stage: String,
    pub against: String,
    pub cutoff_wavelength_m: f64,
    pub median_speed_m_s: f64,
    pub samples: usize,
    pub components: Vec<ComponentScore>,
}

/// Noise density of each component (E/√Hz) for white pair noise of `pair_density` (E/√Hz on
/// (a − b)/|b|): component j gets pair_density·√Σ_k (P_jk·|b_k|)², P the solve's pseudo-inverse.
pub fn component_densities(pairs: &[PairGeometry], pair_density: f64) -> [f64; 6] {
    let obs = observability(pairs, AlphaSource::Pairs, false);
    let k = if ["αx", "αy", "αz"].iter().all(|a| obs.sees(a)) {
        9
    } else {
        6
    };
    let rows: Vec<Vec<f64>> = pairs.iter().map(|p| p.design_row()[..k].to_vec()).collect();
    let op = pseudo_inverse(&rows, k);
    std::array::from_fn(|j| {
        let s: f64 = pairs
            .iter()
            .enumerate()
            .map(|(q, p)| {
                let b = gravgrad_core::mat3::norm(&p.baseline);
                (op.p[j][q] * b).powi(2)
            })
            .sum();
        pair_density * s.sqrt()
    })
}

/// The scenario's pairs.
pub fn scenario_pairs(s: &Scenario) -> Vec<PairGeometry> {
    s.instrument
        .pairs
        .iter()
        .filter_map(|id| standard_pair(id, s.instrument.baseline_m))
        .collect()
}

/// Runs of equal positive line number, as index ranges.
fn line_runs(line: &[i64]) -> Vec<std::ops::Range<usize>> {
    let mut out = Vec::new();
    let mut i = 0;
    while i < line.len() {
        let l = line[i];
        let start = i;
        while i < line.len() && line[i] == l {
            i += 1;
        }
        if l > 0 && i - start >= 3 {
            out.push(start..i);
        }
    }
    out
}

/// Scores one stage. `densities` from [`component_densities`]; `cutoff_m` the low-pass's cutoff
/// wavelength. Errors from the filter (a line too short for it) skip that line.
pub fn score_stage(
    stage: &str,
    against: &str,
    s: &Series<'_>,
    densities: [f64; 6],
    cutoff_m: f64,
) -> StageScore {
    const NAMES: [&str; 6] = ["gxx", "gxy", "gxz", "gyy", "gyz", "gzz"];
    let runs = line_runs(s.line);
    let lp = LowPass {
        cutoff_wavelength_m: cutoff_m,
        order: 4,
    };
    let mut speeds = Vec::new();
    let mut dists = Vec::new();
    for r in &runs {
        let d = along_track_distance(&s.easting[r.clone()], &s.northing[r.clone()]);
        let dt = s.time[r.end - 1] - s.time[r.start];
        if dt > 0.0 {
            speeds.push(d[d.len() - 1] / dt);
        }
        dists.push(d);
    }
    speeds.sort_by(f64::total_cmp);
    let speed = speeds.get(speeds.len() / 2).copied().unwrap_or(f64::NAN);
    let bandwidth = lp.noise_bandwidth(speed / cutoff_m);
    let samples: usize = runs.iter().map(|r| r.len()).sum();
    let components = (0..6)
        .map(|c| {
            let err: Vec<f64> = runs
                .iter()
                .flat_map(|r| r.clone().map(|i| s.run[c][i] - s.truth[c][i]))
                .collect();
            let finite: Vec<f64> = err.iter().copied().filter(|v| v.is_finite()).collect();
            let nf = finite.len().max(1) as f64;
            let mean = finite.iter().sum::<f64>() / nf;
            let rms = (finite.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / nf).sqrt();
            let mut filtered = Vec::new();
            let mut per_line = Vec::new();
            for (r, d) in runs.iter().zip(&dists) {
                let e: Vec<f64> = r
                    .clone()
                    .map(|i| s.run[c][i] - s.truth[c][i] - mean)
                    .collect();
                if let Ok(f) = low_pass_along_track(d, &e, &lp) {
                    let fin: Vec<f64> = f.iter().copied().filter(|v| v.is_finite()).collect();
                    let m = fin.iter().sum::<f64>() / fin.len().max(1) as f64;
                    per_line.extend(fin.iter().map(|v| v - m));
                    filtered.extend(f);
                }
            }
            let lrms =
                (per_line.iter().map(|v| v * v).sum::<f64>() / per_line.len().max(1) as f64).sqrt();
            let nfl = filtered.len().max(1) as f64;
            let fmean = filtered.iter().sum::<f64>() / nfl;
            let frms = (filtered.iter().map(|v| (v - fmean).powi(2)).sum::<f64>() / nfl).sqrt();
            ComponentScore {
                component: NAMES[c].to_string(),
                mean_error_e: if finite.is_empty() { f64::NAN } else { mean },
                rms_error_e: if finite.is_empty() { f64::NAN } else { rms },
                filtered_rms_error_e: if filtered.is_empty() { f64::NAN } else { frms },
                filtered_line_rms_error_e: if per_line.is_empty() { f64::NAN } else { lrms },
                filtered_noise_floor_e: densities[c] * bandwidth.sqrt(),
            }
        })
        .collect();
    StageScore {
        stage: stage.to_string(),
        against: against.to_string(),
        cutoff_wavelength_m: cutoff_m,
        median_speed_m_s: speed,
        samples,
        components,
    }
}
