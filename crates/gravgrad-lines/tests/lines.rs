//! gravgrad-lines against things it does not compute itself: scipy.signal (filter response,
//! forward–backward filtering, Welch spectrum; `tests/reference/lines/make_lines_reference.py`), the
//! analog Butterworth response, and synthetic surveys with known injected offsets, trends, noise
//! density, turbulence, clearance errors, gaps and spikes.
//!
//! The synthetic survey: 12 east–west survey lines 300 m apart, 4.8 km long, and 15 north–south tie
//! lines 300 m apart, flown at 60 m/s and sampled at 20 Hz over the Gzz of three point masses
//! 700–1000 m deep (peak ~30 E, so nothing near the 400 m cutoff). White noise of one-sided density ρ
//! (E/√Hz) has per-sample standard deviation σ = ρ·√(fs/2). Noise at a crossover: the difference of
//! two independent filtered samples, so its standard deviation is √2·σ_f, σ_f being the RMS of the
//! injected noise after the same along-track filter (measured on the noise series alone).

use approx::assert_abs_diff_eq;
use gravgrad_core::units::{from_eotvos, to_eotvos};
use gravgrad_lines::crossover::{Track, find_crossovers};
use gravgrad_lines::filter::{
    LowPass, along_track_distance, butterworth_sections, forward_backward, low_pass_along_track,
};
use gravgrad_lines::level::{LevelMode, LevelSettings, level};
use gravgrad_lines::qc::{Component, LineInputs, PlannedLine, QcSettings, assess_line};
use gravgrad_lines::spectrum::welch;
use serde_json::Value;

// ---------------------------------------------------------------- helpers

/// xorshift64* (Vigna 2016) with Box–Muller normals: a seeded generator written here.
struct Rng(u64);

impl Rng {
    fn next_u64(&mut self) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545_F491_4F6C_DD1D)
    }
    /// Uniform in (0, 1).
    fn uniform(&mut self) -> f64 {
        ((self.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    fn normal(&mut self) -> f64 {
        let (u, v) = (self.uniform(), self.uniform());
        (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
    }
}

const RATE_HZ: f64 = 20.0;
const SPEED: f64 = 60.0;

/// Gzz (E, z down) at (x, y) on the flight plane of point masses (x, y, depth below the plane, GM):
/// T_zz = GM·(3·dz² − r²)/r⁵.
fn field_e(x: f64, y: f64) -> f64 {
    const BODIES: [(f64, f64, f64, f64); 3] = [
        (1500.0, 1200.0, 800.0, 8.0),
        (3200.0, 2500.0, 1000.0, 12.0),
        (600.0, 2900.0, 700.0, -4.0),
    ];
    BODIES
        .iter()
        .map(|&(bx, by, d, gm)| {
            let (dx, dy) = (x - bx, y - by);
            let r2 = dx * dx + dy * dy + d * d;
            to_eotvos(gm * (3.0 * d * d - r2) / r2.powf(2.5))
        })
        .sum()
}

/// A straight line flown at constant speed, with white noise of density `rho` (E/√Hz).
struct Line {
    t: Vec<f64>,
    x: Vec<f64>,
    y: Vec<f64>,
    clean: Vec<f64>,
    noise: Vec<f64>,
}

impl Line {
    fn fly(start: [f64; 2], end: [f64; 2], t0: f64, rho: f64, rng: &mut Rng) -> Line {
        let len = (end[0] - start[0]).hypot(end[1] - start[1]);
        let n = (len / SPEED * RATE_HZ).floor() as usize + 1;
        let sigma = rho * (RATE_HZ / 2.0).sqrt();
        let mut l = Line {
            t: Vec::new(),
            x: Vec::new(),
            y: Vec::new(),
            clean: Vec::new(),
            noise: Vec::new(),
        };
        for i in 0..n {
            let f = i as f64 * SPEED / RATE_HZ / len;
            let (x, y) = (
                start[0] + f * (end[0] - start[0]),
                start[1] + f * (end[1] - start[1]),
            );
            l.t.push(t0 + i as f64 / RATE_HZ);
            l.x.push(x);
            l.y.push(y);
            l.clean.push(field_e(x, y));
            l.noise.push(sigma * rng.normal());
        }
        l
    }

    fn distance(&self) -> Vec<f64> {
        along_track_distance(&self.x, &self.y)
    }
}

fn reference() -> Value {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../../tests/reference/lines/lines_reference.json"
    );
    let text = std::fs::read_to_string(path).expect("reference file (run make_lines_reference.py)");
    serde_json::from_str(&text).expect("reference JSON")
}

fn floats(v: &Value) -> Vec<f64> {
    v.as_array()
        .expect("array")
        .iter()
        .map(|x| x.as_f64().expect("number"))
        .collect()
}

fn rms(v: &[f64]) -> f64 {
    (v.iter().map(|x| x * x).sum::<f64>() / v.len() as f64).sqrt()
}

/// Least-squares amplitude and phase of a sinusoid of wavenumber k (cycles/m) in (s, v).
fn fit_sinusoid(s: &[f64], v: &[f64], k: f64) -> (f64, f64) {
    let w = 2.0 * std::f64::consts::PI * k;
    let (mut scc, mut sss, mut scs, mut svc, mut svs) = (0.0, 0.0, 0.0, 0.0, 0.0);
    for (d, y) in s.iter().zip(v) {
        let (c, sn) = ((w * d).cos(), (w * d).sin());
        scc += c * c;
        sss += sn * sn;
        scs += c * sn;
        svc += y * c;
        svs += y * sn;
    }
    let det = scc * sss - scs * scs;
    let a = (svc * sss - svs * scs) / det; // cos coefficient
    let b = (svs * scc - svc * scs) / det; // sin coefficient
    (a.hypot(b), b.atan2(a))
}

// ---------------------------------------------------------------- filter

#[test]
fn filter_gain_matches_scipy() {
    // |H|² of scipy's butter/sosfreqz against LowPass::gain on a unit grid (λc = 2/Wn, λ = 2/f).
    let r = reference();
    let mut worst = 0.0f64;
    for case in r["gain"].as_array().unwrap() {
        let order = case["order"].as_u64().unwrap() as usize;
        let wn = case["wn"].as_f64().unwrap();
        let lp = LowPass {
            cutoff_wavelength_m: 2.0 / wn,
            order,
        };
        for (f, g) in floats(&case["f_nyquist"]).iter().zip(floats(&case["gain"])) {
            let ours = if *f == 0.0 {
                lp.gain(1.0, f64::INFINITY)
            } else {
                lp.gain(1.0, 2.0 / f)
            };
            worst = worst.max((ours - g).abs());
        }
    }
    assert!(
        worst < 1e-10,
        "largest gain difference from scipy {worst:e}"
    );
}

#[test]
fn forward_backward_matches_scipy_sosfiltfilt() {
    let r = reference();
    let x = floats(&r["filtfilt_input"]);
    let scale = x.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    for case in r["filtfilt"].as_array().unwrap() {
        let order = case["order"].as_u64().unwrap() as usize;
        let wn = case["wn"].as_f64().unwrap();
        let pad = case["padlen"].as_u64().unwrap() as usize;
        let want = floats(&case["y"]);
        let got = forward_backward(&butterworth_sections(order, wn).unwrap(), &x, pad);
        let worst = got
            .iter()
            .zip(&want)
            .fold(0.0f64, |m, (a, b)| m.max((a - b).abs()));
        assert!(
            worst < 1e-10 * scale,
            "N={order} Wn={wn} pad={pad}: largest difference {worst:e} (scale {scale})"
        );
    }
}

/// A line at varying speed (40–80 m/s, period 50 s), uniformly sampled in time.
fn varying_speed_track(n: usize) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let mut t = Vec::with_capacity(n);
    let mut x = Vec::with_capacity(n);
    let mut y = Vec::with_capacity(n);
    let mut s = 0.0;
    for i in 0..n {
        let ti = i as f64 / RATE_HZ;
        if i > 0 {
            let v = 60.0 + 20.0 * (2.0 * std::f64::consts::PI * ti / 50.0).sin();
            s += v / RATE_HZ;
        }
        t.push(ti);
        // A gently curving track: distance along it is not x.
        x.push(s * 0.8);
        y.push(s * 0.6 + 30.0 * (s / 2000.0).sin());
    }
    (t, x, y)
}

#[test]
fn sinusoid_gain_and_zero_phase_on_a_varying_speed_line() {
    // Analog Butterworth response of the forward–backward filter: G = 1/(1 + (λc/λ)^(2N)). The grid
    // spacing (~2 m) warps it by (π·Δs/λ)²-order terms, below 1e-3 at these wavelengths; linear
    // interpolation to and from the grid attenuates by a similar order. Tolerance 0.005 on the gain,
    // 0.002 rad on the phase, over the interior (more than 2λc from the ends).
    let (_, x, y) = varying_speed_track(6000);
    let s = along_track_distance(&x, &y);
    let lp = LowPass::default();
    for wavelength in [150.0, 300.0, 400.0, 500.0, 800.0, 2000.0] {
        let k = 1.0 / wavelength;
        let v: Vec<f64> = s
            .iter()
            .map(|d| (2.0 * std::f64::consts::PI * k * d + 0.3).sin())
            .collect();
        let out = low_pass_along_track(&s, &v, &lp).unwrap();
        let end = s[s.len() - 1];
        let keep: Vec<usize> = (0..s.len())
            .filter(|&i| {
                s[i] > 2.0 * lp.cutoff_wavelength_m && s[i] < end - 2.0 * lp.cutoff_wavelength_m
            })
            .collect();
        let si: Vec<f64> = keep.iter().map(|&i| s[i]).collect();
        let vi: Vec<f64> = keep.iter().map(|&i| v[i]).collect();
        let oi: Vec<f64> = keep.iter().map(|&i| out[i]).collect();
        let (a_in, p_in) = fit_sinusoid(&si, &vi, k);
        let (a_out, p_out) = fit_sinusoid(&si, &oi, k);
        let gain = a_out / a_in;
        let want = 1.0 / (1.0 + (lp.cutoff_wavelength_m / wavelength).powi(8));
        println!(
            "λ = {wavelength} m: gain {gain:.5}, analog {want:.5}, phase {:.2e} rad",
            p_out - p_in
        );
        assert!(
            (gain - want).abs() < 0.005,
            "λ={wavelength}: gain {gain} vs {want}"
        );
        if want > 0.01 {
            assert!(
                (p_out - p_in).abs() < 0.002,
                "λ={wavelength}: phase {}",
                p_out - p_in
            );
        }
    }
}

#[test]
fn a_symmetric_bump_stays_centred() {
    // Zero phase: a Gaussian bump (σ = 60 m, shorter than the cutoff, so it is visibly smoothed) at
    // distance s0 on a varying-speed line keeps its centroid at s0 and stays symmetric about it.
    let (_, x, y) = varying_speed_track(3000);
    let s = along_track_distance(&x, &y);
    let s0 = 4321.0;
    let v: Vec<f64> = s
        .iter()
        .map(|d| 10.0 * (-0.5 * ((d - s0) / 60.0).powi(2)).exp())
        .collect();
    let out = low_pass_along_track(&s, &v, &LowPass::default()).unwrap();
    let peak = out.iter().fold(0.0f64, |m, v| m.max(*v));
    assert!(peak < 9.0, "the bump must be smoothed, peak {peak}");
    // Centroid by the trapezoid rule over distance.
    let (mut m0, mut m1) = (0.0, 0.0);
    for i in 1..s.len() {
        let ds = s[i] - s[i - 1];
        m0 += 0.5 * ds * (out[i] + out[i - 1]);
        m1 += 0.5 * ds * (out[i] * s[i] + out[i - 1] * s[i - 1]);
    }
    let centroid = m1 / m0;
    println!("centroid {centroid:.4} m for s0 = {s0} m, peak {peak:.3}");
    assert_abs_diff_eq!(centroid, s0, epsilon = 0.05);
    // Symmetry: values at s0 ± d, by linear interpolation between samples.
    let at = |d: f64| {
        let j = s.partition_point(|v| *v <= d);
        let f = (d - s[j - 1]) / (s[j] - s[j - 1]);
        out[j - 1] + f * (out[j] - out[j - 1])
    };
    for d in [30.0, 100.0, 200.0, 400.0] {
        let (l, r) = (at(s0 - d), at(s0 + d));
        assert!((l - r).abs() < 1e-3 * peak, "±{d} m: {l} vs {r}");
    }
}

// ---------------------------------------------------------------- survey, crossovers, levelling

struct Survey {
    survey: Vec<Line>,
    ties: Vec<Line>,
    /// Survey line positions (y) and tie line positions (x), m.
    ys: Vec<f64>,
    xs: Vec<f64>,
}

const RHO: f64 = 1.0; // E/√Hz

fn survey(rng: &mut Rng) -> Survey {
    let ys: Vec<f64> = (0..12).map(|i| 300.0 * i as f64).collect();
    let xs: Vec<f64> = (0..15).map(|j| 50.0 + 300.0 * j as f64).collect();
    let survey: Vec<Line> = ys
        .iter()
        .enumerate()
        .map(|(i, &y)| {
            let (a, b) = ([-300.0, y], [4500.0, y]);
            let (a, b) = if i % 2 == 0 { (a, b) } else { (b, a) };
            Line::fly(a, b, 150.0 * i as f64, RHO, rng)
        })
        .collect();
    let ties: Vec<Line> = xs
        .iter()
        .enumerate()
        .map(|(j, &x)| {
            // Start off the 3 m sampling of the survey lines' y, so crossings fall inside segments.
            Line::fly(
                [x, -301.3],
                [x, 3600.0],
                2000.0 + 150.0 * j as f64,
                RHO,
                rng,
            )
        })
        .collect();
    Survey {
        survey,
        ties,
        ys,
        xs,
    }
}

/// Filtered values (E) of each line with a per-line correction c(t) = offset + trend·(t − t_mid).
fn filtered(lines: &[Line], offset: &[f64], trend: &[f64]) -> Vec<Vec<f64>> {
    lines
        .iter()
        .enumerate()
        .map(|(k, l)| {
            let tm = 0.5 * (l.t[0] + l.t[l.t.len() - 1]);
            let v: Vec<f64> = (0..l.t.len())
                .map(|i| l.clean[i] + l.noise[i] + offset[k] + trend[k] * (l.t[i] - tm))
                .collect();
            low_pass_along_track(&l.distance(), &v, &LowPass::default()).unwrap()
        })
        .collect()
}

/// σ_f: RMS of the injected noise after the along-track filter, over every line.
fn filtered_noise(s: &Survey) -> f64 {
    let mut all = Vec::new();
    for l in s.survey.iter().chain(&s.ties) {
        all.extend(low_pass_along_track(&l.distance(), &l.noise, &LowPass::default()).unwrap());
    }
    rms(&all)
}

fn tracks<'a>(lines: &'a [Line], values: &'a [Vec<f64>]) -> Vec<Track<'a>> {
    lines
        .iter()
        .zip(values)
        .map(|(l, v)| Track {
            time_s: &l.t,
            x_m: &l.x,
            y_m: &l.y,
            value: v,
        })
        .collect()
}

#[test]
fn crossovers_are_found_where_the_lines_cross() {
    let mut rng = Rng(0x9E37_79B9_7F4A_7C15);
    let s = survey(&mut rng);
    let zero_s = vec![0.0; s.survey.len()];
    let zero_t = vec![0.0; s.ties.len()];
    let sv = filtered(&s.survey, &zero_s, &zero_s);
    let tv = filtered(&s.ties, &zero_t, &zero_t);
    let c = find_crossovers(&tracks(&s.survey, &sv), &tracks(&s.ties, &tv)).unwrap();
    // Every survey line crosses every tie line exactly once, at (x_tie, y_survey).
    assert_eq!(c.len(), s.survey.len() * s.ties.len());
    let mut seen = vec![false; c.len()];
    for x in &c {
        assert_abs_diff_eq!(x.x_m, s.xs[x.tie], epsilon = 1e-6);
        assert_abs_diff_eq!(x.y_m, s.ys[x.survey], epsilon = 1e-6);
        let k = x.survey * s.ties.len() + x.tie;
        assert!(!seen[k], "pair counted twice");
        seen[k] = true;
        // Time at the crossing: the line's start time plus distance flown / speed.
        let l = &s.survey[x.survey];
        let flown = (x.x_m - l.x[0]).abs();
        assert_abs_diff_eq!(x.survey_time_s, l.t[0] + flown / SPEED, epsilon = 1e-9);
    }
}

#[test]
fn reference_levelling_recovers_survey_offsets() {
    let mut rng = Rng(0xD1B5_4A32_D192_ED03);
    let mut s = survey(&mut rng);
    // One more survey line far outside the tie lines: no crossings.
    s.survey.push(Line::fly(
        [-300.0, 9000.0],
        [4500.0, 9000.0],
        1800.0,
        RHO,
        &mut rng,
    ));
    let offsets: Vec<f64> = (0..s.survey.len())
        .map(|_| 16.0 * rng.uniform() - 8.0)
        .collect();
    let zero_s = vec![0.0; s.survey.len()];
    let zero_t = vec![0.0; s.ties.len()];
    let sv = filtered(&s.survey, &offsets, &zero_s);
    let tv = filtered(&s.ties, &zero_t, &zero_t);
    let c = find_crossovers(&tracks(&s.survey, &sv), &tracks(&s.ties, &tv)).unwrap();
    let r = level(&c, s.survey.len(), s.ties.len(), &LevelSettings::default()).unwrap();
    let sigma_f = filtered_noise(&s);
    let bound = 1.2 * 2f64.sqrt() * sigma_f;
    println!(
        "reference: σ_f {sigma_f:.3} E; crossovers {} → before RMS {:.3} E, after RMS {:.3} E (bound {bound:.3}), max {:.3} E",
        r.after.count, r.before.rms, r.after.rms, r.after.max_abs
    );
    let last = s.survey.len() - 1;
    assert_eq!(r.survey_without_crossings, vec![last]);
    assert_eq!(r.survey[last].offset, 0.0);
    assert!(!r.survey[last].solved);
    let mut worst = 0.0f64;
    for (k, c) in r.survey.iter().enumerate().take(last) {
        assert_eq!(c.crossings, s.ties.len());
        worst = worst.max((c.offset - offsets[k]).abs());
    }
    println!("reference: largest offset error {worst:.3} E");
    assert!(worst < 0.5, "largest offset error {worst} E");
    assert!(r.ties.iter().all(|t| t.offset == 0.0 && !t.solved));
    assert!(r.after.rms <= bound, "after RMS {} > {bound}", r.after.rms);
}

#[test]
fn zero_mean_levelling_recovers_offsets_up_to_their_mean() {
    let mut rng = Rng(0x1234_5678_9ABC_DEF1);
    let s = survey(&mut rng);
    let so: Vec<f64> = (0..s.survey.len())
        .map(|_| 16.0 * rng.uniform() - 8.0)
        .collect();
    let to: Vec<f64> = (0..s.ties.len())
        .map(|_| 16.0 * rng.uniform() - 8.0)
        .collect();
    let sv = filtered(&s.survey, &so, &vec![0.0; so.len()]);
    let tv = filtered(&s.ties, &to, &vec![0.0; to.len()]);
    let c = find_crossovers(&tracks(&s.survey, &sv), &tracks(&s.ties, &tv)).unwrap();
    let settings = LevelSettings {
        mode: LevelMode::ZeroMean,
        ..LevelSettings::default()
    };
    let r = level(&c, s.survey.len(), s.ties.len(), &settings).unwrap();
    // Crossovers see only differences: the offsets are recovered less their common mean.
    let mean = (so.iter().sum::<f64>() + to.iter().sum::<f64>()) / (so.len() + to.len()) as f64;
    let got_mean: f64 = r
        .survey
        .iter()
        .chain(&r.ties)
        .map(|c| c.offset)
        .sum::<f64>();
    // The offsets must sum to zero.
    assert_abs_diff_eq!(got_mean, 0.0, epsilon = 1e-9);
    let worst = r
        .survey
        .iter()
        .zip(&so)
        .chain(r.ties.iter().zip(&to))
        .fold(0.0f64, |m, (c, o)| m.max((c.offset - (o - mean)).abs()));
    let sigma_f = filtered_noise(&s);
    let bound = 1.2 * 2f64.sqrt() * sigma_f;
    println!(
        "zero-mean: largest offset error {worst:.3} E; before RMS {:.3} E, after RMS {:.3} E (bound {bound:.3}); {} CG iterations",
        r.before.rms, r.after.rms, r.iterations
    );
    assert!(worst < 0.5, "largest offset error {worst} E");
    assert!(r.after.rms <= bound, "after RMS {} > {bound}", r.after.rms);
}

#[test]
fn levelling_with_trends_recovers_drift() {
    // Survey lines drift linearly (up to ±0.06 E/s, i.e. ±2.4 E over a line) on top of their offsets;
    // ties are the reference. With 15 crossings spread over ~75 s and crossover noise √2·σ_f ≈ 0.5 E,
    // the trend's standard error is about 0.5/√(15·470 s²) ≈ 0.006 E/s: 0.02 E/s is 3 of them.
    let mut rng = Rng(0x0BAD_5EED_0BAD_5EED);
    let s = survey(&mut rng);
    let offsets: Vec<f64> = (0..s.survey.len())
        .map(|_| 16.0 * rng.uniform() - 8.0)
        .collect();
    let trends: Vec<f64> = (0..s.survey.len())
        .map(|_| 0.12 * rng.uniform() - 0.06)
        .collect();
    let sv = filtered(&s.survey, &offsets, &trends);
    let zero_t = vec![0.0; s.ties.len()];
    let tv = filtered(&s.ties, &zero_t, &zero_t);
    let c = find_crossovers(&tracks(&s.survey, &sv), &tracks(&s.ties, &tv)).unwrap();
    let settings = LevelSettings {
        trend: true,
        ..LevelSettings::default()
    };
    let r = level(&c, s.survey.len(), s.ties.len(), &settings).unwrap();
    let (mut worst_offset, mut worst_trend) = (0.0f64, 0.0f64);
    for (k, (l, corr)) in s.survey.iter().zip(&r.survey).enumerate() {
        assert!(corr.trend_fitted);
        // Injected correction at the line's middle time, against the estimated one there.
        let tm = 0.5 * (l.t[0] + l.t[l.t.len() - 1]);
        worst_offset = worst_offset.max((corr.at(tm) - offsets[k]).abs());
        worst_trend = worst_trend.max((corr.trend_per_s - trends[k]).abs());
    }
    let bound = 1.2 * 2f64.sqrt() * filtered_noise(&s);
    println!(
        "trend: largest offset error {worst_offset:.3} E, trend error {worst_trend:.4} E/s; after RMS {:.3} E (bound {bound:.3})",
        r.after.rms
    );
    assert!(worst_offset < 0.5);
    assert!(worst_trend < 0.02);
    assert!(r.after.rms <= bound);
}

// ---------------------------------------------------------------- noise

#[test]
fn welch_matches_scipy() {
    let r = reference();
    let w = &r["welch"];
    let x = floats(&w["x"]);
    let sp = welch(
        &[&x],
        w["fs"].as_f64().unwrap(),
        w["nperseg"].as_u64().unwrap() as usize,
    );
    let f = floats(&w["f"]);
    let p = floats(&w["psd"]);
    assert_eq!(sp.psd.len(), p.len());
    let top = p.iter().fold(0.0f64, |m, v| m.max(*v));
    for k in 0..p.len() {
        assert_abs_diff_eq!(sp.frequency_hz[k], f[k], epsilon = 1e-12);
        assert!(
            (sp.psd[k] - p[k]).abs() < 1e-10 * top,
            "bin {k}: {} vs {}",
            sp.psd[k],
            p[k]
        );
    }
}

fn gzz_inputs<'a>(l: &'a Line, values_s2: &'a [f64]) -> LineInputs<'a> {
    LineInputs {
        time_s: &l.t,
        x_m: &l.x,
        y_m: &l.y,
        components: vec![Component {
            name: "Gzz",
            values: values_s2,
        }],
        ..LineInputs::default()
    }
}

#[test]
fn noise_density_is_recovered_at_constant_and_varying_speed() {
    let settings = QcSettings::default();
    // Constant speed: a survey line of the synthetic survey (signal + noise of density 1 E/√Hz),
    // made longer (12 km, 200 s) so the Welch average has ~39 segments.
    let mut rng = Rng(0x5151_5151_2323_2323);
    let l = Line::fly([-300.0, 1200.0], [11700.0, 1200.0], 0.0, RHO, &mut rng);
    let v: Vec<f64> = (0..l.t.len())
        .map(|i| from_eotvos(l.clean[i] + l.noise[i]))
        .collect();
    let (m, verdict) = assess_line(&gzz_inputs(&l, &v), &settings).unwrap();
    let rho = m.components[0].noise_density_e_rt_hz.unwrap();
    println!("constant speed: density {rho:.3} E/√Hz (injected {RHO})");
    assert_abs_diff_eq!(rho / RHO, 1.0, epsilon = 0.2);
    assert!(verdict.pass, "{:?}", verdict.reasons);

    // Varying speed (40–80 m/s): the density is a property of time, the filter works in distance.
    let (t, x, y) = varying_speed_track(4000);
    let rho_in = 3.0;
    let sigma = rho_in * (RATE_HZ / 2.0).sqrt();
    let mut rng = Rng(0x7777_0000_1111_2222);
    let vals: Vec<f64> = (0..t.len())
        .map(|i| from_eotvos(field_e(x[i] * 0.3, y[i] * 0.3) + sigma * rng.normal()))
        .collect();
    let inp = LineInputs {
        time_s: &t,
        x_m: &x,
        y_m: &y,
        components: vec![Component {
            name: "Gzz",
            values: &vals,
        }],
        ..LineInputs::default()
    };
    let (m, _) = assess_line(&inp, &settings).unwrap();
    let rho = m.components[0].noise_density_e_rt_hz.unwrap();
    println!(
        "varying speed: density {rho:.3} E/√Hz (injected {rho_in}), median speed {:.1} m/s",
        m.median_speed_m_s
    );
    assert_abs_diff_eq!(rho / rho_in, 1.0, epsilon = 0.2);
}

#[test]
fn noise_after_filtering_follows_the_filter_bandwidth() {
    // White noise of density ρ through the forward–backward filter keeps ρ·√B with
    // B = fc·(1 − 1/m)·(π/m)/sin(π/m), m = 2N, fc = v/λc. Measured on the noise alone over all 27
    // lines of the survey (~60 km, ~150 cutoff wavelengths, so the RMS is known to a few per cent).
    let mut rng = Rng(0xABCD_EF01_2345_6789);
    let s = survey(&mut rng);
    let measured = filtered_noise(&s);
    let lp = LowPass::default();
    let predicted = RHO * lp.noise_bandwidth(SPEED / lp.cutoff_wavelength_m).sqrt();
    println!("noise after filter: measured {measured:.4} E, predicted {predicted:.4} E");
    assert_abs_diff_eq!(measured / predicted, 1.0, epsilon = 0.1);
}

// ---------------------------------------------------------------- QC verdicts

/// A 200 s east–west line with all QC series: clearance 80 m as planned (±3 m), turbulence as given.
struct QcLine {
    line: Line,
    gzz: Vec<f64>,
    vertical: Vec<f64>,
    clearance: Vec<f64>,
    planned: Vec<f64>,
}

fn qc_line(seed: u64, rho: f64, turbulence_amplitude: f64) -> QcLine {
    let mut rng = Rng(seed);
    let line = Line::fly([0.0, 1000.0], [12000.0, 1000.0], 0.0, rho, &mut rng);
    let n = line.t.len();
    let gzz = (0..n)
        .map(|i| from_eotvos(line.clean[i] + line.noise[i]))
        .collect();
    // Vertical acceleration: a 1 Hz sinusoid, RMS = amplitude/√2 over whole cycles.
    let vertical = line
        .t
        .iter()
        .map(|t| turbulence_amplitude * (2.0 * std::f64::consts::PI * t).sin())
        .collect();
    let planned = vec![80.0; n];
    let clearance = (0..n)
        .map(|_| 80.0 + 3.0 * (2.0 * rng.uniform() - 1.0))
        .collect();
    QcLine {
        line,
        gzz,
        vertical,
        clearance,
        planned,
    }
}

fn qc_inputs(q: &QcLine) -> LineInputs<'_> {
    LineInputs {
        time_s: &q.line.t,
        x_m: &q.line.x,
        y_m: &q.line.y,
        components: vec![Component {
            name: "Gzz",
            values: &q.gzz,
        }],
        vertical_acceleration_m_s2: Some(&q.vertical),
        clearance_m: Some(&q.clearance),
        planned_clearance_m: Some(&q.planned),
        plan: Some(PlannedLine {
            start_m: [0.0, 1000.0],
            end_m: [12000.0, 1000.0],
        }),
        ..LineInputs::default()
    }
}

#[test]
fn good_lines_pass_with_their_metrics() {
    let s = QcSettings::default();
    for seed in [11u64, 12, 13] {
        // Turbulence 0.4 m/s² RMS.
        let mut q = qc_line(seed, RHO, 0.4 * 2f64.sqrt());
        // Four spikes of 40 E: counted, not judged.
        for i in [700usize, 1500, 2300, 3100] {
            q.gzz[i] += from_eotvos(40.0);
        }
        let trace: Vec<f64> = {
            let mut rng = Rng(seed * 7 + 1);
            (0..q.gzz.len())
                .map(|_| from_eotvos(0.5 * rng.normal()))
                .collect()
        };
        let alpha_g: Vec<[f64; 3]> = (0..q.gzz.len())
            .map(|i| [1e-3 * (i as f64 * 0.1).sin(), 0.0, 2e-4])
            .collect();
        let alpha_p: Vec<[f64; 3]> = alpha_g
            .iter()
            .map(|a| [a[0] + 1e-4, a[1], f64::NAN])
            .collect();
        let mut inp = qc_inputs(&q);
        inp.trace = Some(&trace);
        inp.alpha_pairs = Some(&alpha_p);
        inp.alpha_gyro = Some(&alpha_g);
        let (m, v) = assess_line(&inp, &s).unwrap();
        println!("good line {seed}: {m:?}");
        assert!(v.pass, "{:?}", v.reasons);
        assert!(v.reasons.is_empty());
        let c = &m.components[0];
        assert_eq!(c.spikes, 4);
        // 4001 samples at 20 Hz: 200 whole cycles (Σsin² = 2000 at 20 samples a cycle) and a last
        // sample at sin(400π) = 0, so the RMS is 0.4·√(4000/4001).
        let want = 0.4 * (4000.0f64 / 4001.0).sqrt();
        assert_abs_diff_eq!(m.turbulence_m_s2.unwrap(), want, epsilon = 1e-9);
        assert!(m.clearance_departure_m.unwrap() <= 3.0);
        assert!(m.line_deviation_m.unwrap() < 1e-9);
        assert_abs_diff_eq!(m.longest_gap_s, 1.0 / RATE_HZ, epsilon = 1e-9);
        // Trace: white noise of 0.5 E, over ~4000 samples (standard error ~1.1%).
        assert_abs_diff_eq!(m.trace_rms_e.unwrap() / 0.5, 1.0, epsilon = 0.05);
        // α: x differs by 1e-4 rad/s², y agrees, z unobserved by the pairs.
        assert_abs_diff_eq!(
            m.alpha_difference_rms_rad_s2.unwrap(),
            1e-4,
            epsilon = 1e-12
        );
    }
}

#[test]
fn a_badly_flown_line_fails_for_the_right_reasons() {
    let s = QcSettings::default();
    // Turbulence 1.5 m/s² RMS.
    let mut q = qc_line(21, RHO, 1.5 * 2f64.sqrt());
    // Clearance 45 m above the plan between 60 s and 70 s (a smooth bump peaking at 45 m).
    for (i, t) in q.line.t.iter().enumerate() {
        if (60.0..=70.0).contains(t) {
            q.clearance[i] = 80.0 + 45.0 * (std::f64::consts::PI * (t - 60.0) / 10.0).sin();
        }
    }
    // A 3 s dropout: samples from 100.0 s up to (not including) 103.0 s are missing, so the interval
    // across it is 3.05 s; the removed samples are 3 whole cycles of the 1 Hz turbulence.
    let keep: Vec<usize> = (0..q.line.t.len())
        .filter(|&i| !(2000..2060).contains(&i))
        .collect();
    let pick = |v: &[f64]| keep.iter().map(|&i| v[i]).collect::<Vec<f64>>();
    let q = QcLine {
        line: Line {
            t: pick(&q.line.t),
            x: pick(&q.line.x),
            y: pick(&q.line.y),
            clean: pick(&q.line.clean),
            noise: pick(&q.line.noise),
        },
        gzz: pick(&q.gzz),
        vertical: pick(&q.vertical),
        clearance: pick(&q.clearance),
        planned: pick(&q.planned),
    };
    let (m, v) = assess_line(&qc_inputs(&q), &s).unwrap();
    println!("bad line: {:?}", v.reasons);
    assert!(!v.pass);
    assert_eq!(
        v.reasons,
        vec![
            "clearance departs 45.0 m from the drape plan, more than 30.0 m".to_string(),
            "turbulence 1.50 m/s² RMS exceeds 1.00".to_string(),
            "longest gap 3.05 s exceeds 2.00 s".to_string(),
        ]
    );
    assert_abs_diff_eq!(m.longest_gap_s, 3.05, epsilon = 1e-9);
    // The gap does not spoil the noise estimate: Welch segments do not straddle it.
    let rho = m.components[0].noise_density_e_rt_hz.unwrap();
    assert_abs_diff_eq!(rho / RHO, 1.0, epsilon = 0.2);
}

#[test]
fn a_noisy_line_off_its_plan_fails_for_noise_and_deviation() {
    let s = QcSettings::default();
    // Noise density 20 E/√Hz: after the 400 m filter at 60 m/s about 20·√0.135 ≈ 7.3 E RMS.
    let mut q = qc_line(31, 20.0, 0.3 * 2f64.sqrt());
    // Drift 70 m north of the plan between 2 and 4 km (a smooth bump).
    for i in 0..q.line.x.len() {
        let x = q.line.x[i];
        if (2000.0..=4000.0).contains(&x) {
            q.line.y[i] += 70.0 * (std::f64::consts::PI * (x - 2000.0) / 2000.0).sin();
        }
    }
    let (m, v) = assess_line(&qc_inputs(&q), &s).unwrap();
    println!("noisy line: {:?}", v.reasons);
    assert!(!v.pass);
    assert_eq!(v.reasons.len(), 2, "{:?}", v.reasons);
    assert!(v.reasons[0].starts_with("line deviation 70.0 m from the planned line exceeds 50.0 m"));
    assert!(
        v.reasons[1].starts_with("noise Gzz ")
            && v.reasons[1].ends_with(" E RMS after filtering exceeds 5.00 E")
    );
    let lp = LowPass::default();
    let expected = 20.0 * lp.noise_bandwidth(SPEED / lp.cutoff_wavelength_m).sqrt();
    let got = m.components[0].noise_after_filter_e.unwrap();
    println!("noise after filter {got:.2} E, from the injected density {expected:.2} E");
    assert_abs_diff_eq!(got / expected, 1.0, epsilon = 0.2);
}

// ---------------------------------------------------------------- bad input

#[test]
fn degenerate_input_gives_errors_not_panics() {
    fn inp<'a>(t: &'a [f64], x: &'a [f64], v: &'a [f64]) -> LineInputs<'a> {
        LineInputs {
            time_s: t,
            x_m: x,
            y_m: x,
            components: vec![Component {
                name: "Gzz",
                values: v,
            }],
            ..LineInputs::default()
        }
    }
    let s = QcSettings::default();
    let t = [0.0, 0.05, 0.05, 0.1];
    let x = [0.0, 3.0, 6.0, 9.0];
    let v = [1e-9; 4];
    // Time not increasing, too short, lengths differ.
    assert!(assess_line(&inp(&t, &x, &v), &s).is_err());
    assert!(assess_line(&inp(&[0.0], &[0.0], &[0.0]), &s).is_err());
    assert!(assess_line(&inp(&[0.0, 1.0, 2.0], &[0.0, 1.0, 2.0], &[0.0]), &s).is_err());
    // Every value missing: metrics come back, the noise cannot be judged, the verdict says so.
    let nan = [f64::NAN; 5];
    let (m, v) = assess_line(
        &inp(
            &[0.0, 0.05, 0.1, 0.15, 0.2],
            &[0.0, 3.0, 6.0, 9.0, 12.0],
            &nan,
        ),
        &s,
    )
    .unwrap();
    assert!(m.components[0].noise_density_e_rt_hz.is_none());
    assert!(!v.pass);
    // A Welch segment absurdly long for the sample rate is not attempted.
    let tiny: Vec<f64> = (0..50).map(|i| i as f64 * 1e-12).collect();
    let xs: Vec<f64> = (0..50).map(|i| i as f64).collect();
    let vals = vec![0.0; 50];
    let huge = LineInputs {
        time_s: &tiny,
        x_m: &xs,
        y_m: &xs,
        components: vec![Component {
            name: "Gzz",
            values: &vals,
        }],
        ..LineInputs::default()
    };
    assert!(assess_line(&huge, &s).is_ok());
    // Filter: an absurd cutoff is refused; a cutoff far longer than a short line gives the line's
    // straight fit (here the values are a straight line, so the values themselves).
    let mut lp = LowPass {
        cutoff_wavelength_m: 1e300,
        order: 4,
    };
    assert!(low_pass_along_track(&xs, &xs, &lp).is_err());
    lp.cutoff_wavelength_m = 1e5;
    let out = low_pass_along_track(&xs, &xs, &lp).unwrap();
    for (a, b) in out.iter().zip(&xs) {
        assert_abs_diff_eq!(*a, *b, epsilon = 1e-6);
    }
    // Crossovers: empty and NaN tracks find nothing.
    let e: [f64; 0] = [];
    let empty = Track {
        time_s: &e,
        x_m: &e,
        y_m: &e,
        value: &e,
    };
    let nan_track = Track {
        time_s: &nan,
        x_m: &nan,
        y_m: &nan,
        value: &nan,
    };
    assert!(
        find_crossovers(&[empty, nan_track], &[nan_track, empty])
            .unwrap()
            .is_empty()
    );
    // Levelling: nothing to level is fine; a crossover naming a missing line is refused.
    assert!(level(&[], 0, 0, &LevelSettings::default()).is_ok());
    let c = gravgrad_lines::Crossover {
        survey: 3,
        tie: 0,
        x_m: 0.0,
        y_m: 0.0,
        survey_position: 0.0,
        tie_position: 0.0,
        survey_time_s: 0.0,
        tie_time_s: 1.0,
        survey_value: 1.0,
        tie_value: 0.0,
    };
    assert!(level(&[c], 1, 1, &LevelSettings::default()).is_err());
}

/// A 20 s gap in a line at 10 Hz and 60 m/s: the values are 0 E before it and 10 E after. The
/// filter runs on each piece on its own (a gap splits the line), so both pieces come out exactly
/// constant up to the gap; bridging it would smear the step over about a cutoff wavelength.
#[test]
fn a_gap_splits_the_line_for_the_along_track_filter() {
    let mut t = Vec::new();
    let mut v = Vec::new();
    for i in 0..1200 {
        let s = i as f64 * 0.1 + if i >= 600 { 20.0 } else { 0.0 };
        t.push(1.4e9 + s);
        v.push(if i >= 600 { 10.0 } else { 0.0 });
    }
    let x: Vec<f64> = t.iter().map(|s| 60.0 * (s - 1.4e9)).collect();
    let y = vec![5.0e6; t.len()];
    let lp = LowPass::default();
    let (f, pieces) = gravgrad_lines::filter::low_pass_line(&t, &x, &y, &v, &lp).unwrap();
    assert_eq!(pieces, 2);
    for (i, (a, b)) in f.iter().zip(&v).enumerate() {
        assert!((a - b).abs() < 1e-9, "sample {i}: {a} against {b}");
    }
    // Without the gap in time (the same samples, evenly spaced), the step is smoothed.
    let even: Vec<f64> = (0..1200).map(|i| 1.4e9 + i as f64 * 0.1).collect();
    let xe: Vec<f64> = even.iter().map(|s| 60.0 * (s - 1.4e9)).collect();
    let (g, one) = gravgrad_lines::filter::low_pass_line(&even, &xe, &y, &v, &lp).unwrap();
    assert_eq!(one, 1);
    assert!((g[599] - 0.0).abs() > 1.0, "bridged: {}", g[599]);
}
