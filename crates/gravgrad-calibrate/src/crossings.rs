//! Drift and temperature of the tensor's calibration from crossings, not from time alone.
//!
//! Lines are flown one after another across a block, so a regional gradient across the lines looks,
//! in time, exactly like a drift: fitted against time, the drift takes the regional. Where a
//! survey line and a tie line of the same flight cross, both passes see the same field at the same
//! place; what differs between them is the instrument's state (time, temperature) and the
//! aircraft's heading. So the drift is fitted to the differences between the two passes, in NED,
//! where the field cancels exactly: for each crossing, with C₁, C₂ the attitude matrices (C_sn) of
//! the passes and D(t) the sensor-frame calibration error (bias + drift polynomial + temperature
//! term, one per tensor component),
//!
//! ```text
//! C₁·S₁·C₁ᵀ − C₂·S₂·C₂ᵀ = C₁·D(t₁)·C₁ᵀ − C₂·D(t₂)·C₂ᵀ + noise,
//! ```
//!
//! six equations per crossing, linear in D's coefficients. A sensor-frame bias does not cancel
//! where the headings differ (a bias in Gxx_s reads as Gyy in NED on a line flown at 90° to it), so
//! the biases are fitted alongside as nuisance terms where the crossings resolve them (the vertical
//! bias never is: it reads the same at any heading); the biases applied come from the line samples
//! afterwards. This is the levelling idea of Yarger, Robertson & Wentland 1978 (Geophysics
//! 43:1148–1156) with the drift model in the instrument's frame; the per-line offsets that remain
//! are levelling's.
//!
//! Units: the series in s⁻² (the solve's unknowns), time in s, temperature in °C.

use crate::estimate::{Coefficient, HeldTerm, Normal, regress_with};
use gravgrad_core::SymTensor;
use gravgrad_core::mat3::Mat3;

/// Names of the six sensor-frame tensor components, in the order of the solve's unknowns.
const COMPONENTS: [&str; 6] = ["Gxx", "Gxy", "Gxz", "Gyy", "Gyz", "Gzz"];

/// One crossing of a survey line and a tie line in a flight: the block of each pass and the
/// attitude matrix C_sn (sensor to NED) there.
#[derive(Clone, Debug)]
pub struct Crossing {
    pub blocks: (usize, usize),
    pub c_sn: (Mat3, Mat3),
}

/// What the crossings gave for one sensor-frame component.
#[derive(Clone, Debug, Default)]
pub struct ComponentDrift {
    /// Drift coefficients of (t − t_mid)^p, p = 1 … order, s⁻²/sᵖ (zero where held).
    pub drift: Vec<Coefficient>,
    /// Temperature coefficient, s⁻² per °C, when a temperature was given.
    pub temperature: Option<Coefficient>,
}

/// The drift (and temperature) fit from crossings.
pub struct CrossingFit {
    pub components: [ComponentDrift; 6],
    /// Terms held, with the component (`Gxx` …) they belong to.
    pub held: Vec<(String, HeldTerm)>,
}

/// One crossing's two passes: the six components at each, the crossing, and (t − t_mid, T − T̄) at
/// each.
type Pass<'a> = ([f64; 6], [f64; 6], &'a Crossing, [f64; 2], [f64; 2]);

/// The mean of `x` over blocks `b − w ..= b + w` that are usable, or `None`.
fn window_mean(x: &[f64], usable: Option<&[bool]>, b: usize, w: usize) -> Option<f64> {
    let lo = b.saturating_sub(w);
    let hi = (b + w + 1).min(x.len());
    let (mut s, mut n) = (0.0, 0usize);
    for i in lo..hi {
        if usable.is_none_or(|u| u[i]) && x[i].is_finite() {
            s += x[i];
            n += 1;
        }
    }
    (n > 0).then(|| s / n as f64)
}

/// Fits the drift polynomial (order `drift_order` ≥ 1) and, with `temperature` (block series and
/// its mean), a temperature coefficient of each of the six sensor-frame components to the NED
/// differences at `crossings`. `rest[c]`: the block series of component c with everything else of
/// the calibration (coupling, quadratic terms) taken off; `time`: block times; `half_window`:
/// blocks either side averaged at each pass. Returns `None` when there are too few crossings to
/// say anything (fewer than twice one more than the functions of time fitted per component).
#[allow(clippy::too_many_arguments)]
pub fn fit_drift(
    rest: &[&[f64]; 6],
    time: &[f64],
    t_mid: f64,
    temperature: Option<(&[f64], f64)>,
    usable: Option<&[bool]>,
    drift_order: usize,
    crossings: &[Crossing],
    half_window: usize,
    min_z: f64,
) -> Option<CrossingFit> {
    // Each crossing's two passes: window means of the six components and of the regressors.
    let mut obs: Vec<Pass<'_>> = Vec::new();
    for c in crossings {
        let (b1, b2) = c.blocks;
        let at = |b: usize| -> Option<([f64; 6], f64, f64)> {
            let v: Vec<f64> = rest
                .iter()
                .map(|x| window_mean(x, usable, b, half_window))
                .collect::<Option<Vec<f64>>>()?;
            let t = window_mean(time, usable, b, half_window)?;
            let temp = match temperature {
                Some((tc, mean)) => window_mean(tc, usable, b, half_window)? - mean,
                None => 0.0,
            };
            Some((std::array::from_fn(|k| v[k]), t - t_mid, temp))
        };
        if let (Some((v1, t1, k1)), Some((v2, t2, k2))) = (at(b1), at(b2)) {
            obs.push((v1, v2, c, [t1, k1], [t2, k2]));
        }
    }
    // Regressor functions of each pass: 1, t, …, t^order, (T − T̄).
    let n_fun = 1 + drift_order + usize::from(temperature.is_some());
    // Six equations per crossing for 6·n_fun unknowns: twice as many crossings as functions plus
    // one, so that the residual can say how well they are determined.
    if obs.len() < 2 * (n_fun + 1) {
        return None;
    }
    let fun = |tk: [f64; 2]| -> Vec<f64> {
        let mut f: Vec<f64> = (0..=drift_order).map(|p| tk[0].powi(p as i32)).collect();
        if temperature.is_some() {
            f.push(tk[1]);
        }
        f
    };
    let fun_name = |q: usize| -> String {
        match q {
            0 => "bias".into(),
            1 => "drift".into(),
            q if q <= drift_order => format!("drift t^{q}"),
            _ => "temperature".into(),
        }
    };
    // Columns: component c × function q; rows: crossing × NED component m.
    let k = 6 * n_fun;
    let rows = 6 * obs.len();
    let mut columns = vec![Vec::with_capacity(rows); k];
    let mut y = Vec::with_capacity(rows);
    for (v1, v2, c, tk1, tk2) in &obs {
        let (f1, f2) = (fun(*tk1), fun(*tk2));
        let d = SymTensor::from_array(*v1).rotated(&c.c_sn.0).to_array();
        let e = SymTensor::from_array(*v2).rotated(&c.c_sn.1).to_array();
        // The NED images of each unit sensor-frame component at either pass.
        let unit = |comp: usize, m: &Mat3| -> [f64; 6] {
            let mut u = [0.0; 6];
            u[comp] = 1.0;
            SymTensor::from_array(u).rotated(m).to_array()
        };
        let images: Vec<([f64; 6], [f64; 6])> = (0..6)
            .map(|comp| (unit(comp, &c.c_sn.0), unit(comp, &c.c_sn.1)))
            .collect();
        for m in 0..6 {
            y.push(d[m] - e[m]);
            for comp in 0..6 {
                for q in 0..n_fun {
                    columns[comp * n_fun + q]
                        .push(images[comp].0[m] * f1[q] - images[comp].1[m] * f2[q]);
                }
            }
        }
    }
    let names: Vec<String> = (0..k)
        .map(|i| format!("{} {}", COMPONENTS[i / n_fun], fun_name(i % n_fun)))
        .collect();
    // Biases are nuisance terms here: kept whenever resolved, never tested.
    let always: Vec<usize> = (0..6).map(|comp| comp * n_fun).collect();
    let fit = regress_with(
        &Normal::of(&columns),
        &columns,
        &y,
        &names,
        &always,
        min_z,
        None,
    );
    let components = std::array::from_fn(|comp| ComponentDrift {
        drift: (1..=drift_order)
            .map(|q| fit.coefs[comp * n_fun + q])
            .collect(),
        temperature: temperature.map(|_| fit.coefs[comp * n_fun + n_fun - 1]),
    });
    let held = fit
        .held
        .into_iter()
        .filter(|h| !h.term.ends_with(" bias"))
        .map(|h| {
            let (comp, term) = h.term.split_once(' ').unwrap_or(("", &h.term));
            (
                comp.to_string(),
                HeldTerm {
                    term: format!("{term} (crossings)"),
                    ..h.clone()
                },
            )
        })
        .collect();
    Some(CrossingFit { components, held })
}

#[cfg(test)]
mod tests {
    use super::*;
    use gravgrad_core::attitude::c_sn_degrees;

    /// A flight of blocks: lines at headings 90° and 270° (survey) and 0° (tie), a field that is a
    /// regional gradient across the lines plus a sensor-frame bias and drift. The crossings give the
    /// drift injected, not the regional (which a fit against time would take).
    #[test]
    fn crossings_give_the_drift_and_not_the_regional() {
        let n = 4000;
        let time: Vec<f64> = (0..n).map(|i| i as f64).collect();
        // Eight survey lines: blocks 0–399 (north 0), 400–799 (north 200 m), …; the tie from 3200 on,
        // flown north; heading per block.
        let heading = |i: usize| -> f64 {
            if i >= 3200 {
                0.0
            } else if (i / 400).is_multiple_of(2) {
                90.0
            } else {
                270.0
            }
        };
        let north = |i: usize| -> f64 {
            if i >= 3200 {
                (i - 3200) as f64 * 2.0
            } else {
                (i / 400) as f64 * 200.0
            }
        };
        let east = |i: usize| -> f64 {
            if i >= 3200 {
                500.0
            } else {
                let p = (i % 400) as f64 * 2.5;
                if (i / 400).is_multiple_of(2) {
                    p
                } else {
                    1000.0 - p
                }
            }
        };
        // Regional: Gzz rises 10 E per km northward, trace-free (Gxx takes the opposite), NED.
        let field = |i: usize| -> [f64; 6] {
            let g = 1e-8 * north(i) * 1e-3 + 2e-9 * (east(i) * 0.01).sin();
            [-g, 0.0, 0.0, 0.0, 0.0, g]
        };
        let t_mid = 0.5 * (time[0] + time[n - 1]);
        let bias = [3e-9, -1e-9, 2e-9, -2e-9, 1e-9, 4e-9];
        let drift = [1e-12, 0.0, -2e-12, 0.0, 3e-12, -1.5e-12];
        let c: Vec<Mat3> = (0..n).map(|i| c_sn_degrees(0.0, 0.0, heading(i))).collect();
        let series: Vec<[f64; 6]> = (0..n)
            .map(|i| {
                // Sensor frame: Cᵀ·G·C plus the instrument's error D(t).
                let s = SymTensor::from_array(field(i))
                    .congruence_transposed(&c[i])
                    .to_array();
                std::array::from_fn(|k| s[k] + bias[k] + drift[k] * (time[i] - t_mid))
            })
            .collect();
        let rest: Vec<Vec<f64>> = (0..6)
            .map(|k| series.iter().map(|v| v[k]).collect())
            .collect();
        // Crossings at east = 500 m: survey block with east 500, tie block with the same north.
        let crossings: Vec<Crossing> = (0..8)
            .map(|l| {
                let b1 = l * 400 + 200;
                let b2 = 3200 + (north(b1) / 2.0) as usize;
                Crossing {
                    blocks: (b1, b2),
                    c_sn: (c[b1], c[b2]),
                }
            })
            .collect();
        let r: [&[f64]; 6] = std::array::from_fn(|k| &rest[k][..]);
        let fit = fit_drift(&r, &time, t_mid, None, None, 1, &crossings, 0, 0.0).unwrap();
        for k in 0..6 {
            let got = fit.components[k].drift[0].value;
            assert!(
                (got - drift[k]).abs() < 1e-15,
                "{}: drift {got:e}, injected {:e}",
                COMPONENTS[k],
                drift[k]
            );
        }
    }
}
